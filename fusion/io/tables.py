"""Reading a table a robot wrote (CSV, TSV or columns separated by spaces) through a log layout's columns.

Each row becomes one observation of the feed's sensor (``fusion.io.layout``), in the tool's units
(seconds, metres, degrees).  A row that cannot be read (a cell that is no number, too few cells,
a time out of order) is set aside with its file, line and reason, and reading goes on, as for
our own logs (``fusion.io.logs``).  Odometry rows go through ``fusion.io.odometry_forms``.
"""

from __future__ import annotations

import csv
import math
from collections.abc import Iterator
from pathlib import Path

from fusion.errors import InputFileError, ObservationError
from fusion.io.layout import FORMATS, Feed, TruthFeed
from fusion.io.logs import NOTHING_USABLE_LINES, SetAside, TruthPose, text_lines
from fusion.io.observations import Observation
from fusion.io.odometry_forms import OdometryForm
from fusion.sensors.kinds import sensor_kind

__all__ = ["table_rows", "feed_observations", "truth_poses"]


def table_rows(path: Path, fmt: str, header: bool, comment: str, aside) -> Iterator[tuple[int, list[str], dict]]:
    """``(line, cells, names)`` of every data row: ``names`` maps a header's column names to positions."""
    names: dict[str, int] = {}
    waiting_header = header
    delimiter = FORMATS[fmt]
    seen = 0
    for number, text, problem in text_lines(path):
        if text is None:
            aside(SetAside(number, problem, "", path.name))
            continue
        stripped = text.strip()
        if not stripped or (comment and stripped.startswith(comment)):
            continue
        if delimiter is None:
            cells = stripped.split()
        else:
            try:
                cells = next(csv.reader([text.rstrip("\r\n")], delimiter=delimiter, strict=True))
            except csv.Error as err:
                aside(SetAside(number, f"not a {fmt} row: {err}", stripped[:80], path.name))
                continue
        cells = [c.strip() for c in cells]
        if waiting_header:
            names = {name: i for i, name in enumerate(cells) if name}
            waiting_header = False
            continue
        seen += 1
        yield number, cells, names
    if header and waiting_header:
        raise InputFileError(path, None, None, "the table has no header row, but its layout says header = true")


class _Columns:
    """Cells of a row by the layout's field names (a column name with a header, or a number from 1)."""

    def __init__(self, path: Path, columns: dict, names: dict, where: str):
        self.index: dict[str, int] = {}
        for field, column in columns.items():
            if isinstance(column, str):
                if column not in names:
                    known = ", ".join(names) or "none"
                    raise InputFileError(
                        path,
                        None,
                        None,
                        f"the layout ({where}) names column {column!r} for '{field}', but the "
                        f"header has no such column (columns: {known})",
                    )
                self.index[field] = names[column]
            else:
                self.index[field] = column - 1

    def cell(self, cells: list[str], field: str) -> str:
        i = self.index[field]
        if i >= len(cells):
            raise ObservationError(f"the row has {len(cells)} cells; '{field}' is in column {i + 1}")
        return cells[i]

    def number(self, cells: list[str], field: str) -> float:
        text = self.cell(cells, field)
        try:
            value = float(text)
        except ValueError:
            raise ObservationError(
                f"'{field}' (column {self.index[field] + 1}) must be a number, got {text!r}"
            ) from None
        if not math.isfinite(value):
            raise ObservationError(f"'{field}' (column {self.index[field] + 1}) must be finite, got {text!r}")
        return value


def feed_observations(feed: Feed, path: Path, aside) -> Iterator[tuple[int, Observation]]:
    """``(line, observation)`` of every usable row of a table feed, in file order (the time-order rule is
    the caller's)."""
    columns = None
    odometry = OdometryForm(feed.odometry) if sensor_kind(feed.kind).motion else None
    usable = False
    for number, cells, names in table_rows(path, feed.format, feed.header, feed.comment, aside):
        if columns is None:
            columns = _Columns(path, feed.columns, names, feed.where)
        try:
            obs = _observation(feed, columns, cells, odometry)
        except ObservationError as err:
            aside(SetAside(number, str(err), " ".join(cells)[:80], path.name))
            if not usable and number >= NOTHING_USABLE_LINES:
                raise InputFileError(
                    path, number, None, f"none of the first {number:,} rows is usable ({err})"
                ) from None
            continue
        usable = True
        if obs is not None:
            yield number, obs


def _observation(feed: Feed, c: _Columns, cells: list[str], odometry: OdometryForm | None) -> Observation | None:
    t = c.number(cells, "t") * feed.time_unit
    if t < 0:
        raise ObservationError(f"the time must be ≥ 0, got {t:g} s")
    metres = feed.length_unit
    if odometry is None:  # a reading: its kind reads its own values (fusion.sensors.kinds)
        kind = sensor_kind(feed.kind)

        def value(name: str):
            if name in kind.several and not isinstance(feed.columns[name], str):
                return cells[c.index[name] :]  # one column per value, to the end of the row
            return c.cell(cells, name)

        return Observation(t, feed.sensor, feed.kind, kind.from_fields(value, feed))
    a, b, turn = _odometry_values(feed, c, cells)
    if feed.angle_unit == "deg":
        turn = math.radians(turn)
    reading = odometry.record(t, a * metres, b * metres, turn)
    return None if reading is None else Observation(t, feed.sensor, feed.kind, reading)


def _odometry_values(feed: Feed, c: _Columns, cells: list[str]) -> tuple[float, float, float]:
    if feed.odometry == "poses":
        return c.number(cells, "x"), c.number(cells, "y"), c.number(cells, "heading")
    left = c.number(cells, "left") if "left" in feed.columns else 0.0
    return c.number(cells, "forward"), left, c.number(cells, "turn")


def truth_poses(truth: TruthFeed, aside) -> Iterator[tuple[int, TruthPose]]:
    """``(line, pose)`` of a truth table, in the tool's units (seconds, metres, degrees)."""
    columns = None
    for number, cells, names in table_rows(truth.file, truth.format, truth.header, truth.comment, aside):
        if columns is None:
            columns = _Columns(truth.file, truth.columns, names, "[truth]")
        try:
            t = columns.number(cells, "t") * truth.time_unit
            x, y = columns.number(cells, "x") * truth.length_unit, columns.number(cells, "y") * truth.length_unit
            heading = columns.number(cells, "heading")
        except ObservationError as err:
            aside(SetAside(number, str(err), " ".join(cells)[:80], truth.file.name))
            continue
        heading = heading if truth.angle_unit == "deg" else math.degrees(heading)
        yield number, TruthPose(t, x, y, heading)
