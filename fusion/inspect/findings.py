"""What a replay found (``Inspection``), the per-tick table's columns and the replay's thresholds."""

from __future__ import annotations

from collections import Counter, defaultdict
from dataclasses import dataclass, field

from fusion import SAFETY_NOTICE, __version__
from fusion.monitor.episodes import Episode, blame_shares
from fusion.step_row import FIGURE_COLUMNS

MISMATCH_SHARE = 0.2
"""A log whose unknown sensors, or whose sightings of markers not on the map, reach this share is
reported as probably recorded on another site (our choice; a few stray ids are noise, a fifth is not)."""
SET_ASIDE_WARN = 0.05
EPOCH_LIKE_S = 1e6
"""A log whose clock starts past this many seconds (11.6 days) is stamped from an epoch; the views
then count from its first tick (our choice)."""
"""A replay that sets aside this share of the log's lines or more says so as a warning (our choice)."""
FRAME_WIDTH = 44
"""Character columns of the stored belief maps (what the scrubber draws)."""
KEEP_MAPS = 12
"""Full-resolution maps (before, peak, end) are kept for this many of the most severe episodes."""
PAIR_TICKS = 16
"""Ticks per episode on which the pairwise conflict between sensors is computed (it costs a pass per pair)."""

STEP_COLUMNS = (
    "tick",
    "t",
    "line",
    "backend",
    "readings",
    "x_m",
    "y_m",
    "heading_deg",
    *FIGURE_COLUMNS,
    "reason",
    "blame",
    "quarantined",
    "episode",
    "true_x_m",
    "true_y_m",
    "error_m",
    "heading_error_deg",
)


@dataclass(frozen=True)
class Moment:
    """One tick's beliefs as the incident report draws them: per back end the probability of each place (all
    headings summed) and the estimate, and the true position when a truth file was given."""

    t: float
    planes: dict  # back end -> (ny, nx) float32
    estimates: dict  # back end -> (x_m, y_m)
    truth: tuple[float, float] | None = None


@dataclass
class Inspection:
    """What a replay found (drawn by ``fusion.view.inspect_summary`` and ``inspect_report``)."""

    log: str
    site: str
    backends: tuple[str, ...]
    lines: int = 0
    records: int = 0  # observations that parsed
    used: int = 0  # readings every back end absorbed
    ticks: int = 0
    first_t: float | None = None  # the log's clock at its first tick and its last
    last_t: float = 0.0
    duration_s: float = 0.0  # the log's time covered (a clock restart adds nothing for its jump)
    set_aside: int = 0
    reasons: Counter = field(default_factory=Counter)
    first_set_aside: list = field(default_factory=list)  # first rows set aside, for the summary
    episodes: list[Episode] = field(default_factory=list)
    blame: dict = field(default_factory=lambda: defaultdict(lambda: defaultdict(float)))  # over all episodes
    actions: list = field(default_factory=list)  # (t, back end, action, reason) of every non-"carry on" tick
    warnings: list[str] = field(default_factory=list)
    truth: bool = False
    errors: dict = field(default_factory=dict)  # back end -> (median, p95) true error, m
    heading_errors: dict = field(default_factory=dict)  # back end -> median true heading error, degrees
    found_after: dict = field(default_factory=dict)  # back end -> s until the estimate held (fusion.scoring)
    interrupted: bool = False
    seconds: float = 0.0
    files: list[str] = field(default_factory=list)
    start: str = ""
    series: dict = field(default_factory=dict)  # per-tick arrays for the plots (t, conflict per back end, …)
    maps: dict = field(default_factory=dict)  # episode number -> {"before"|"peak"|"end": Moment}

    @property
    def time_origin(self) -> float:
        """What the views subtract from the log's times: its first time when the log is stamped by a clock
        counting from an epoch (past ``EPOCH_LIKE_S``), so that 1248446289.23 reads 23.19 s; else 0, and
        the views show the log's own times, as steps.csv holds them."""
        return self.first_t if self.first_t is not None and abs(self.first_t) >= EPOCH_LIKE_S else 0.0

    def ranking(self) -> list[tuple[str, float]]:
        """Sensors by their share of the blame over all episodes, averaged over the back ends."""
        return blame_shares(self.blame)

    def summary(self) -> dict:
        return {
            "tool": f"fusion {__version__}",
            "notice": SAFETY_NOTICE,
            "log": self.log,
            "site": self.site,
            "backends": list(self.backends),
            "start": self.start,
            "lines": self.lines,
            "records": self.records,
            "readings_used": self.used,
            "ticks": self.ticks,
            "first_t": self.first_t,
            "duration_s": round(self.duration_s, 6),
            "set_aside": self.set_aside,
            "set_aside_reasons": dict(self.reasons.most_common()),
            "episodes": len(self.episodes),
            "blame_share": [[s, round(v, 4)] for s, v in self.ranking()],
            "actions": {
                b: dict(Counter(a for _, bb, a, _ in self.actions if bb == b).most_common()) for b in self.backends
            },
            "true_error_m": {b: {"median": round(m, 4), "p95": round(p, 4)} for b, (m, p) in self.errors.items()}
            or None,
            "heading_error_deg": {b: {"median": round(v, 3)} for b, v in self.heading_errors.items()} or None,
            "found_after_s": {b: (None if v is None else round(v, 3)) for b, v in self.found_after.items()} or None,
            "warnings": self.warnings,
            "interrupted": self.interrupted,
        }
