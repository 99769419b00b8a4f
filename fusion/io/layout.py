"""Log layouts: how a robot's own recording maps onto the sensors of a case (our TOML format).

A robot writes what it writes: one table per topic, times in nanoseconds, bearings in radians,
odometry as velocities.  A layout says, per sensor of the case, where its readings are and in
which units, so the recording is replayed as it is, with no conversion step:

    [layout]
    time_unit = "s"                    # s, ms, us or ns (default s)

    [[feeds]]                          # one per sensor
    sensor = "camera"                  # a sensor of the case
    file = "sightings.csv"             # a table beside the layout; or topic = "/markers" in an MCAP file
    format = "csv"                     # csv, tsv or spaces (default: by the file's suffix)
    header = true                      # the first row names the columns (then columns may be named)
    comment = "#"                      # rows starting with this are skipped
    angle_unit = "deg"                 # deg or rad (default deg)
    not_markers = ["5", "14"]          # ids in the marker column that are no markers of the site
    length_unit = "m"                  # m, cm or mm (default m)
    [feeds.columns]                    # which column holds what: a name (with a header) or a number from 1
    t = "stamp"
    marker = "id"
    range = "dist"
    bearing = "angle"

    [truth]                            # optional: true poses, for scoring (a table only)
    file = "groundtruth.csv"
    [truth.columns]
    t = 1; x = 2; y = 3; heading = 4

The fields each kind of sensor needs (``SensorKind.fields``, ``fusion.sensors.kinds``): markers ``marker``,
``range``, ``bearing``;
door ``active``; ranging ``ranges`` (one column holding all beams separated by ``;``, or the
number of the first of one column per beam, read to the end of the row); odometry one of three
forms (``odometry = "steps" | "poses" | "velocities"``, see ``fusion.io.odometry_forms``).

In an MCAP recording a feed names a ``topic`` and the message fields instead of columns
(``fusion.io.mcap_feed``).  Paths are relative to the layout file and must stay inside its folder.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from fusion.errors import InputFileError
from fusion.io.bounded import read_text
from fusion.io.toml_reader import TomlReader, load_toml
from fusion.sensors.kinds import sensor_kind

__all__ = [
    "Layout",
    "Feed",
    "TruthFeed",
    "load_layout",
    "TIME_UNITS",
    "ANGLE_UNITS",
    "LENGTH_UNITS",
    "ODOMETRY_FORMS",
]

MAX_LAYOUT_BYTES = 256 * 1024
MAX_FEEDS = 64
TIME_UNITS = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "ns": 1e-9}
ANGLE_UNITS = ("deg", "rad")
LENGTH_UNITS = {"m": 1.0, "cm": 0.01, "mm": 0.001}
ODOMETRY_FORMS = {
    "steps": ("forward", "turn"),  # the motion since the previous record (left optional)
    "poses": ("x", "y", "heading"),  # the pose the odometry integrated; moves are their differences
    "velocities": ("forward", "turn"),  # speeds (per second), each held until the next record (left optional)
}
MOTION_OPTIONAL = ("left",)
"""Values a motion feed may leave out (sideways motion is zero then)."""
FORMATS = {"csv": ",", "tsv": "\t", "spaces": None}


@dataclass(frozen=True)
class Feed:
    """Where the readings of one sensor of the case are."""

    sensor: str
    kind: str
    columns: dict  # field -> column name or 1-based number (tables) or message field path (MCAP)
    file: Path | None = None  # a table
    topic: str | None = None  # an MCAP topic
    format: str = "csv"
    header: bool = False
    comment: str = "#"
    time_unit: float = 1.0  # seconds per unit
    angle_unit: str = "deg"
    length_unit: float = 1.0  # metres per unit
    odometry: str = "steps"
    not_markers: frozenset = frozenset()  # marker column values that are no marker of the site (other robots)
    stamp: str = "log"  # MCAP: "log" (the time the recorder wrote it) or "header" (the message's header stamp)
    line: int | None = None  # of the [[feeds]] table in the layout file, for messages
    where: str = ""  # "layout.toml, line 12" for messages
    layout_path: str = ""
    bearings: tuple[float, ...] = ()  # a ranging sensor's beam bearings in the case (degrees)


@dataclass(frozen=True)
class TruthFeed:
    file: Path
    columns: dict
    format: str = "csv"
    header: bool = False
    comment: str = "#"
    time_unit: float = 1.0
    angle_unit: str = "deg"
    length_unit: float = 1.0


@dataclass(frozen=True)
class Layout:
    path: str
    feeds: tuple[Feed, ...]
    truth: TruthFeed | None = None
    extra: dict = field(default_factory=dict)

    @property
    def needs_recording(self) -> bool:
        """Whether a feed reads the recording given beside the layout (a topic, or a table with no file)."""
        return any(f.file is None for f in self.feeds)


def load_layout(path, case) -> Layout:
    """Read and check a layout against ``case``'s sensors; ``InputFileError`` with file, line and field."""
    path = Path(path)
    text = read_text(path, MAX_LAYOUT_BYTES, "log layout")
    data = load_toml(text, path)
    r = TomlReader(str(path), text)
    r.only(data, (), {"layout", "feeds", "truth"})
    head = r.table(data, (), "layout", required=False)
    r.only(head, ("layout",), {"time_unit", "name"})
    time_unit = TIME_UNITS[r.text(head, ("layout",), "time_unit", "s", choices=tuple(TIME_UNITS))]
    folder = path.resolve().parent
    tables = r.tables(data, (), "feeds")
    if not tables:
        r.fail((), "no [[feeds]] are given; a layout needs one per sensor it replays")
    if len(tables) > MAX_FEEDS:
        r.fail(("feeds",), f"{len(tables)} feeds are given; the limit is {MAX_FEEDS}")
    feeds = tuple(_feed(r, d, ("feeds", i), case, path, folder, time_unit) for i, d in enumerate(tables))
    truth = _truth(r, r.table(data, (), "truth", required=False), folder, time_unit)
    return Layout(str(path), feeds, truth)


_FEED_KEYS = {
    "sensor",
    "file",
    "topic",
    "format",
    "header",
    "comment",
    "time_unit",
    "angle_unit",
    "length_unit",
    "odometry",
    "stamp",
    "columns",
    "fields",
    "not_markers",
}


def _feed(r: TomlReader, d: dict, w: tuple, case, path: Path, folder: Path, time_unit: float) -> Feed:
    """One ``[[feeds]]`` table: where a sensor's readings are, and in which units."""
    r.only(d, w, _FEED_KEYS)
    kinds = {s.name: s.kind for s in case.sensors}
    sensor = r.text(d, w, "sensor", choices=tuple(kinds))
    kind = kinds[sensor]
    if "file" in d and "topic" in d:
        r.fail(w, "give either 'file' (a table) or 'topic' (in an MCAP recording), not both")
    topic = r.text(d, w, "topic") if "topic" in d else None
    file = _inside(r, d, w, folder) if "file" in d else None
    default_form = "steps" if topic is None else "poses"  # an odometry message carries the integrated pose
    odometry = (
        r.text(d, w, "odometry", default_form, choices=tuple(ODOMETRY_FORMS)) if sensor_kind(kind).motion else "steps"
    )
    columns = _columns(r, d, w, sensor, kind, topic, odometry)
    fmt = _format(r, d, w, file)
    not_markers = d.get("not_markers", [])
    if not isinstance(not_markers, list) or not all(isinstance(v, (str, int)) for v in not_markers):
        r.fail((*w, "not_markers"), "must be an array of ids (text or whole numbers) that are no markers")
    if not_markers and kind != "markers":
        r.fail((*w, "not_markers"), "applies to marker sensors only")
    header = r.flag(d, w, "header", False)
    if topic is None and not header and any(isinstance(v, str) for v in columns.values()):
        r.fail((*w, "header"), "columns are named, so the table needs a header row: set header = true")
    line = r.lines.get(w)
    return Feed(
        sensor,
        kind,
        dict(columns),
        file,
        topic,
        fmt,
        header,
        r.text(d, w, "comment", "#"),
        TIME_UNITS[r.text(d, w, "time_unit", _unit_name(time_unit), choices=tuple(TIME_UNITS))],
        r.text(d, w, "angle_unit", "deg", choices=ANGLE_UNITS),
        LENGTH_UNITS[r.text(d, w, "length_unit", "m", choices=tuple(LENGTH_UNITS))],
        odometry,
        frozenset(str(v) for v in not_markers),
        r.text(d, w, "stamp", "log", choices=("log", "header")),
        line,
        f"{path}, line {line}" if line else str(path),
        str(path),
        tuple(getattr(case.sensor(sensor).params, "bearings_deg", ())),
    )


def _columns(r: TomlReader, d: dict, w: tuple, sensor: str, kind: str, topic, odometry: str) -> dict:
    """The feed's columns (a table) or message fields (an MCAP topic): each a name or a number from 1."""
    key = "fields" if topic is not None else "columns"
    if topic is not None and "columns" in d:
        r.fail((*w, "columns"), "an MCAP feed names message 'fields', not table 'columns'")
    columns = r.table(d, w, key, required=topic is None and kind not in ("ranging",))
    needed = ODOMETRY_FORMS[odometry] if sensor_kind(kind).motion else sensor_kind(kind).fields
    r.only(columns, (*w, key), {*needed, *(MOTION_OPTIONAL if sensor_kind(kind).motion else ()), "t"})
    if topic is None:
        for name in ("t", *needed):
            if name not in columns:
                r.fail((*w, key), f"the {kind} sensor {sensor!r} needs a column for '{name}'")
    for name, value in columns.items():
        ok = isinstance(value, str) and value.strip() or isinstance(value, int) and not isinstance(value, bool)
        if not ok or (isinstance(value, int) and not 1 <= value <= 100_000):
            r.fail((*w, key, name), f"must be a column name or a column number from 1, got {value!r}")
    return columns


def _truth(r: TomlReader, d: dict, folder: Path, time_unit: float) -> TruthFeed | None:
    if not d:
        return None
    w = ("truth",)
    r.only(d, w, {"file", "format", "header", "comment", "time_unit", "angle_unit", "length_unit", "columns"})
    file = _inside(r, d, w, folder)
    columns = r.table(d, w, "columns")
    r.only(columns, (*w, "columns"), {"t", "x", "y", "heading"})
    for name in ("t", "x", "y", "heading"):
        if name not in columns:
            r.fail((*w, "columns"), f"true poses need a column for '{name}'")
    header = r.flag(d, w, "header", False)
    if not header and any(isinstance(v, str) for v in columns.values()):
        r.fail((*w, "header"), "columns are named, so the table needs a header row: set header = true")
    return TruthFeed(
        file,
        dict(columns),
        _format(r, d, w, file),
        header,
        r.text(d, w, "comment", "#"),
        TIME_UNITS[r.text(d, w, "time_unit", _unit_name(time_unit), choices=tuple(TIME_UNITS))],
        r.text(d, w, "angle_unit", "deg", choices=ANGLE_UNITS),
        LENGTH_UNITS[r.text(d, w, "length_unit", "m", choices=tuple(LENGTH_UNITS))],
    )


def _unit_name(seconds: float) -> str:
    return next(k for k, v in TIME_UNITS.items() if v == seconds)


def _format(r: TomlReader, d: dict, w: tuple, file: Path | None) -> str:
    suffix = file.suffix.lower() if file is not None else ""
    default = "csv" if suffix == ".csv" else "tsv" if suffix == ".tsv" else "spaces" if file is not None else "csv"
    return r.text(d, w, "format", default, choices=tuple(FORMATS))


def _inside(r: TomlReader, d: dict, w: tuple, folder: Path) -> Path:
    text = r.text(d, w, "file")
    given = Path(text)
    if given.is_absolute():
        r.fail((*w, "file"), f"must be a path relative to the layout file's folder, got the absolute path {text!r}")
    path = (folder / given).resolve()
    if not path.is_relative_to(folder):
        r.fail((*w, "file"), f"{text!r} leads outside the layout's folder ({folder}); keep the tables beside it")
    if not path.is_file():
        r.fail((*w, "file"), f"{text!r} is not a file in {folder}" if not path.exists() else f"{text!r} is not a file")
    return path


def refuse(feed: Feed, problem: str) -> InputFileError:
    """An error about ``feed`` that names the layout file and the feed's line."""
    return InputFileError(feed.layout_path, feed.line, f"feeds (sensor {feed.sensor!r})", problem)
