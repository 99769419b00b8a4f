"""Incident investigation on a place graph: replay a recorded log on both back ends and say when, where and why
the evidence conflicted.

The log is streamed and formed into ticks as on a metric site (``fusion.io.recording``, ``fusion.io.ticks``); a
record the graph cannot use (an unknown sensor, a metric reading, a bad payload) is set aside with its line and
reason.  Both back ends absorb identical readings and explain every busy tick (leave-one-out blame); conflict
episodes are found on the larger of their conflict figures (``fusion.monitor.episodes``).  With a truth file (as
``fusion run`` writes on a graph: time, from, to, along_m) each tick is scored by the distance along the graph.

Written to the output folder: ``steps.csv`` (a row per tick and back end), ``episodes.json``, ``set_aside.jsonl``,
``summary.json`` and ``beliefs.png`` (each back end's belief at the peak of the worst episode, or at the end).

Decision support and monitoring only: not a certified safety function.
"""

from __future__ import annotations

import csv
import io
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from fusion import SAFETY_NOTICE, __version__
from fusion.errors import FusionError
from fusion.io.logs import ReadPosition, SetAside, require_readable, text_lines
from fusion.io.outdir import atomic_write
from fusion.monitor.episodes import Episode, EpisodeFinder
from fusion.monitor.policy import CARRY_ON
from fusion.place_cases.case import PlaceCase

__all__ = ["GraphInspection", "inspect_graph", "read_truth"]

STEP_COLUMNS = ("t", "line", "backend", "place", "share", "where", "conflict", "action", "error_m", "episode")


@dataclass
class GraphInspection:
    log: str
    case: str
    backends: tuple[str, ...]
    ticks: int = 0
    lines: int = 0
    used: int = 0
    set_aside: list[SetAside] = field(default_factory=list)
    episodes: list[Episode] = field(default_factory=list)
    actions: list = field(default_factory=list)  # (t, back end, action, reasons)
    errors: dict = field(default_factory=dict)  # back end -> errors along the graph, when a truth file was given
    files: list[str] = field(default_factory=list)

    def median_error(self, backend: str) -> float | None:
        values = self.errors.get(backend)
        return float(np.median(values)) if values else None


def read_truth(path, case: PlaceCase, set_aside: list[SetAside]) -> tuple[np.ndarray, np.ndarray]:
    """(times, cells) of every usable line of a graph truth file, in time order; the others set aside with their
    reason."""
    frame, out = case.frame, []
    for number, text, problem in text_lines(path):
        if text is not None and not text.strip():
            continue
        try:
            if problem:
                raise FusionError(problem)
            rec = json.loads(text)
            if not isinstance(rec, dict):
                raise FusionError("a truth record must be a JSON object")
            t, along = float(rec["t"]), float(rec["along_m"])
            if not (np.isfinite(t) and np.isfinite(along) and along >= 0):
                raise FusionError("t and along_m must be finite, along_m ≥ 0")
            edge = frame.edge_between(str(rec["from"]), str(rec["to"]))
            out.append((t, frame.cell_on(edge, along)))
        except (FusionError, ValueError, KeyError, TypeError) as err:
            why = f"missing field {err}" if isinstance(err, KeyError) else str(err)
            set_aside.append(SetAside(number, f"truth: {why}", (text or "")[:80]))
    out.sort()
    return np.array([t for t, _ in out], dtype=np.float64), np.array([c for _, c in out], dtype=np.int64)


def inspect_graph(case: PlaceCase, log_path, out_dir, *, truth_path=None, start: str | None = None, backends=None):
    """Replay ``log_path`` on the graph of ``case`` with each back end; write the findings into ``out_dir``."""
    from fusion.io import recording
    from fusion.io.ticks import form_ticks
    from fusion.place_cases.run import place_localizer

    require_readable(log_path, "log")
    backends = tuple(backends or case.run.backends)
    sensors = case.sensor_set()
    locs = {b: place_localizer(case, b, sensors, explain=True) for b in backends}
    if start:
        for loc in locs.values():
            loc.start_with(case.frame.start_prior(start))
    found = GraphInspection(str(log_path), case.name, backends)
    truth = read_truth(truth_path, case, found.set_aside) if truth_path else None
    if truth is not None:
        found.errors = {b: [] for b in backends}
    replay = _GraphReplay(case, locs, found, truth)
    position = ReadPosition()
    records = recording.observations(Path(log_path), None, found.set_aside.append, position)
    odometry = sensors.odometry.name if sensors.odometry else None
    for group in form_ticks(records, lambda obs: obs.moves and obs.sensor == odometry, case.run.tick_s):
        replay.tick(group)
    found.lines = position.lines
    replay.finish(Path(out_dir))
    return found


class _GraphReplay:
    def __init__(self, case: PlaceCase, locs: dict, found: GraphInspection, truth):
        p = next(iter(locs.values())).policy
        self.case, self.locs, self.found, self.truth = case, locs, found, truth
        self.finder = EpisodeFinder(p.conflict_k, p.clear_fraction * p.conflict_k)
        self.rows = io.StringIO()
        self.writer = csv.writer(self.rows)
        self.writer.writerow(STEP_COLUMNS)
        self.peak = (-1.0, None)  # (severity, (t, beliefs, true cell)) at the worst episode's peak so far
        self.last = None  # (t, true cell) of the last tick: its beliefs are the filters' own at the end

    def _truth_at(self, t: float) -> int | None:
        """The true cell of the last truth record at or before ``t`` (the first one before them all)."""
        if self.truth is None or not self.truth[0].size:
            return None
        times, cells = self.truth
        return int(cells[max(int(np.searchsorted(times, t, side="right")) - 1, 0)])

    def tick(self, group) -> None:
        found, first = self.found, min(line for line, _ in group)
        odometry = next((obs for _, obs in group if obs.moves), None)
        readings = [obs for _, obs in group if not obs.moves]
        t = max(obs.t for _, obs in group)
        decisions = {}
        for b, loc in self.locs.items():
            d = loc.step(odometry, readings)
            decisions[b] = d
        for sensor, why in next(iter(decisions.values())).rejected:
            found.set_aside.append(SetAside(first, f"{sensor}: {why}", ""))
        found.used += len(readings)
        episode, closed = self.finder.add(found.ticks, t, first, {b: d.figures.conflict for b, d in decisions.items()})
        if closed is not None:
            found.episodes.append(closed)
        true_cell = self._truth_at(t)
        for b, d in decisions.items():
            error = "" if true_cell is None else self.case.frame.travel_m(d.place.cell, true_cell)
            if true_cell is not None:
                found.errors[b].append(error)
            if episode is not None:
                for sensor, v in d.blame:
                    episode.blame[b][sensor] += v
            if d.action != CARRY_ON:
                act = (t, b, d.action, " | ".join(d.reasons))
                found.actions.append(act)
                if episode is not None:
                    episode.actions.append(act)
            self.writer.writerow(
                [
                    t,
                    first,
                    b,
                    d.place.place,
                    f"{d.place.share:.4f}",
                    d.place.where,
                    f"{d.figures.conflict:.4f}",
                    d.action,
                    "" if error == "" else f"{error:.2f}",
                    "" if episode is None else episode.number,
                ]
            )
        if episode is not None and episode.severity > self.peak[0] and episode.peak_tick == found.ticks:
            self.peak = (episode.severity, (t, self._beliefs(), true_cell))
        self.last = (t, true_cell)
        found.ticks += 1

    def _beliefs(self) -> dict:
        """Each back end's probability per cell now (copies: the filters go on)."""
        return {b: loc.filter.distribution().copy() for b, loc in self.locs.items()}

    def finish(self, out: Path) -> None:
        from fusion.view.place_graph import draw_run

        closed = self.finder.finish()
        if closed is not None:
            self.found.episodes.append(closed)
        f = self.found
        atomic_write(out / "steps.csv", self.rows.getvalue())
        atomic_write(out / "episodes.json", json.dumps([e.to_record() for e in f.episodes], indent=1) + "\n")
        aside = "".join(json.dumps({"line": s.where, "reason": s.reason, "text": s.text}) + "\n" for s in f.set_aside)
        atomic_write(out / "set_aside.jsonl", aside)
        summary = {
            "log": f.log,
            "case": f.case,
            "tool": f"fusion {__version__}",
            "notice": SAFETY_NOTICE,
            "ticks": f.ticks,
            "lines": f.lines,
            "readings_used": f.used,
            "set_aside": len(f.set_aside),
            "episodes": len(f.episodes),
            "actions": len(f.actions),
            "median_error_m": {b: f.median_error(b) for b in f.backends} if f.errors else None,
        }
        atomic_write(out / "summary.json", json.dumps(summary, indent=2) + "\n")
        f.files = ["steps.csv", "episodes.json", "set_aside.jsonl", "summary.json"]
        moment = self.peak[1] or (None if self.last is None else (self.last[0], self._beliefs(), self.last[1]))
        if moment is not None:
            t, beliefs, true_cell = moment
            atomic_write(out / "beliefs.png", draw_run(self.case, beliefs, true_cell, t))
            f.files.append("beliefs.png")
