"""The live terminal view of a run: every back end side by side, drawn with rich.

Each back end gets a panel with its belief map (the probability of each place,
summed over headings, drawn with shade blocks), the true pose (◆) and the
estimate (✚) marked, its conflict figure over the last ticks as a sparkline, and
its current figures.  Below: the monitor's actions as an event list and a progress
bar.  Colours and glyphs are our own choice.
"""

from __future__ import annotations

import math

import numpy as np
from rich.console import Group
from rich.padding import Padding
from rich.panel import Panel
from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn
from rich.table import Table
from rich.text import Text

from fusion.backends import BACKENDS
from fusion.belief.coarse import coarse_plane
from fusion.step_row import pose_errors
from fusion.text import literal, plain

__all__ = [
    "RunView",
    "actions_timeline",
    "belief_map",
    "draw_plane",
    "sparkline",
    "summary_table",
    "BACKEND_TITLES",
]

_SHADES = " ·░▒▓█"
_SPARKS = "▁▂▃▄▅▆▇█"
BACKEND_TITLES = {name: kind.title for name, kind in BACKENDS.items()}
_FIGURE = {name: kind.figure for name, kind in BACKENDS.items()}


def draw_plane(
    intensity: np.ndarray,
    wall: np.ndarray,
    step: int,
    truth_xy,
    estimate_xy,
    resolution_m: float,
    origin_m=(0.0, 0.0),
    marks=None,
) -> Text:
    """Block characters of a coarse plane (``coarse_plane``); north is up; ◆ truth, ✚ estimate, ∘ ``marks``
    ((k, 2) points in metres: a back end's particles or ellipse, ``Backend.overlay``)."""
    rows, cols = intensity.shape
    level = np.ceil(intensity.astype(np.float64) / 255 * (len(_SHADES) - 1)).astype(int)

    def cell_of(xy):
        if xy is None:
            return None
        x, y = xy[0] - origin_m[0], xy[1] - origin_m[1]
        return (min(rows - 1, int(y / resolution_m / (2 * step))), min(cols - 1, int(x / resolution_m / step)))

    t_cell, e_cell = cell_of(truth_xy), cell_of(estimate_xy)
    marked = np.zeros((rows, cols), bool)
    if marks is not None and len(marks):
        r = np.floor((marks[:, 1] - origin_m[1]) / resolution_m / (2 * step)).astype(np.int64)
        c = np.floor((marks[:, 0] - origin_m[0]) / resolution_m / step).astype(np.int64)
        inside = (r >= 0) & (r < rows) & (c >= 0) & (c < cols)
        marked[r[inside], c[inside]] = True
    text = Text()
    for r in range(rows - 1, -1, -1):
        for c in range(cols):
            if (r, c) == t_cell:
                text.append("◆", style="bold yellow")
            elif (r, c) == e_cell:
                text.append("✚", style="bold magenta")
            elif marked[r, c] and not wall[r, c]:
                text.append("∘", style="bold white")
            elif wall[r, c]:
                text.append("▪", style="grey35")
            else:
                text.append(_SHADES[level[r, c]], style="cyan" if level[r, c] else "")
        if r:
            text.append("\n")
    return text


def belief_map(
    probability: np.ndarray,
    occupied: np.ndarray,
    truth_xy,
    estimate_xy,
    resolution_m: float,
    width: int = 44,
    origin_m=(0.0, 0.0),
    marks=None,
) -> Text:
    """Block-character map of a (ny, nx) probability plane; north is up; ``marks`` as for ``draw_plane``."""
    intensity, wall, step = coarse_plane(probability, occupied, width)
    return draw_plane(intensity, wall, step, truth_xy, estimate_xy, resolution_m, origin_m, marks)


def sparkline(values, width: int = 44, top: float | None = None) -> str:
    values = [v for v in values if v is not None and math.isfinite(v)][-width:]
    if not values:
        return ""
    top = max(values) if top is None else top
    top = top if top > 0 else 1.0
    return "".join(_SPARKS[min(len(_SPARKS) - 1, int(max(v, 0.0) / top * (len(_SPARKS) - 1)))] for v in values)


class RunView:
    """Holds what the live view shows and renders it; the runner feeds it one tick at a time."""

    legend = None  # the line of glyphs under the header (``LEGEND`` when None)

    def __init__(self, case, backends, total_ticks: int):
        self.case, self.backends = case, tuple(backends)
        self.history = {b: [] for b in self.backends}
        self.events: list[str] = []
        self.latest: dict = {}
        self.truth = None
        self.progress = Progress(
            TextColumn("simulated run"),
            BarColumn(),
            TextColumn("{task.completed}/{task.total} ticks"),
            TimeRemainingColumn(),
        )
        self.task = self.progress.add_task("run", total=total_ticks)

    def on_tick(self, tick, decisions, localizers) -> None:
        self.truth = tick.truth
        for name, d in decisions.items():
            key = _FIGURE[name][0]
            self.history[name].append(d.figures.value(key))
            f = localizers[name].filter
            plane = f.distribution().reshape(localizers[name].sensors.grid.shape).sum(axis=0)
            self.latest[name] = (d, plane, f.overlay())
            if d.action != "carry on":
                self._event(tick, name, d)
        self.progress.advance(self.task)

    def _event(self, tick, name: str, d) -> None:
        """A monitor action, one line: time, back end, action, its first reason."""
        self.events.append(
            f"[bold]{tick.truth.t:6.2f} s[/] {name}: [bold]{d.action}[/] — "
            + literal(d.reasons[0] if d.reasons else "")
        )

    def _panel(self, name: str, map_width: int) -> Panel:
        if name not in self.latest:
            return Panel("waiting for the first tick…", title=BACKEND_TITLES[name])
        d, plane, overlay = self.latest[name]
        tr = self.truth
        site = self.case.site
        err, herr = pose_errors(d, tr.x_m, tr.y_m, tr.heading_deg)
        key = _FIGURE[name][0]
        lines = [
            f"error {err:.2f} m {herr:.0f}°  spread {d.spread_m:.2f} m",
            f"{key.replace('_', ' ')} {d.figures.value(key):.3f}  {d.action}",
        ]
        if d.quarantined:
            lines.append(f"quarantined: {plain(', '.join(d.quarantined))}")
        figures = Text("\n".join(lines), no_wrap=True, overflow="ellipsis")
        body = Group(
            belief_map(
                plane,
                site.occupied,
                (tr.x_m, tr.y_m),
                (d.x_m, d.y_m),
                site.resolution_m,
                width=map_width,
                origin_m=site.origin_m,
                marks=None if overlay is None else overlay.points,
            ),
            Text(sparkline(self.history[name], map_width), style="green", no_wrap=True, overflow="crop"),
            figures,
        )
        return Panel(body, title=BACKEND_TITLES[name], border_style=_BORDER.get(d.action, "blue"))

    def _map_width(self, panel_width: int, height: int, panel_rows: int = 1) -> int:
        """The widest map that fits the panel and leaves the rest of the screen its lines (``PANEL_LINES``,
        ``OTHER_LINES``) with ``panel_rows`` rows of panels: a character is about twice as tall as wide, so a
        narrower map is also shorter."""
        ny, nx = self.case.site.occupied.shape
        rows_allowed = self._rows_allowed(height, panel_rows)
        width = max(8, panel_width - 4)
        while width > 8:
            step = math.ceil(nx / width)
            if math.ceil(ny / (2 * step)) <= rows_allowed:
                break
            width -= 1
        return width

    @staticmethod
    def _rows_allowed(height: int, panel_rows: int) -> int:
        """Lines a panel's map may take with ``panel_rows`` rows of panels on a screen of ``height`` lines."""
        return max(4, (height - OTHER_LINES) // panel_rows - PANEL_LINES)

    def __rich_console__(self, console, options):
        width, height = options.max_width, options.height or console.size.height
        n = max(1, len(self.backends))
        # Side by side while each panel keeps MIN_PANEL_WIDTH columns; otherwise two to a row.
        across = n if n <= 2 or width // n >= MIN_PANEL_WIDTH else 2
        panel_rows = math.ceil(n / across)
        map_width = self._map_width(width // across, height, panel_rows)
        maps = Table.grid(expand=True, padding=(0, 0))
        for _ in range(across):
            maps.add_column(ratio=1)
        panels = [self._panel(b, map_width) for b in self.backends]
        for i in range(0, n, across):
            row = panels[i : i + across]
            maps.add_row(*row, *[""] * (across - len(row)))
        t = self.truth.t if self.truth else 0.0
        faults = ", ".join(self.truth.faults) if self.truth and self.truth.faults else "none"
        head = Text.from_markup(
            f"[bold]{literal(self.case.name)}[/]   t = {t:6.2f} s   injected now: {literal(faults)}"
        )
        legend = Text.from_markup(self.legend or LEGEND, style="dim")
        used = sum(_lines(console, part, width) for part in (head, legend, maps)) + 1  # and the progress bar
        room = max(1, height - used - 2)  # the events panel's own border takes two
        lines = [Text.from_markup(e, overflow="ellipsis") for e in self.events[-room:]]
        for line in lines:
            line.no_wrap = True
        events = Panel(
            Group(*lines) if lines else "no action yet: every tick so far is 'carry on'",
            title=f"monitor actions ({len(self.events)}; the latest, one line each; all in summary.json)",
            border_style="magenta",
        )
        yield Group(head, legend, maps, self.progress, events)  # the command prints the safety notice once


MIN_PANEL_WIDTH = 40
"""Narrowest back-end panel placed side by side with the others (our choice: a map of ~36 characters)."""
PANEL_LINES = 6
"""Lines of a back end's panel besides its map: two borders, the sparkline, two lines of figures, a quarantine."""
OTHER_LINES = 7
"""Lines of the screen besides the panels: header, legend (two lines at 80 columns), progress bar, and the
actions panel at its smallest (one event between its borders)."""
_BORDER = {"carry on": "blue", "alert operator": "yellow", "re-localize": "red", "quarantine sensor": "red"}
LEGEND = (
    "◆ truth ✚ estimate ·░▒▓█ belief in the place (· faint, blank none) ∘ particles or 95% ellipse ▪ wall or rack  "
    "border: [blue]carry on[/] [yellow]alert[/] [red]re-localize/quarantine[/]  ▁▃█ conflict over time"
)


def _lines(console, renderable, width: int) -> int:
    return len(console.render_lines(renderable, console.options.update(width=width), pad=False))


def summary_table(summary: dict) -> Table:
    table = Table(
        title=f"{literal(summary['case'])} — seed {summary['seed']}, {summary['ticks']} ticks "
        f"({summary['duration_s']:.1f} s simulated)"
    )
    table.add_column("figure")
    for b in summary["backends"]:
        table.add_column(BACKEND_TITLES.get(b, b), justify="right")
    from fusion.view.run_report import SUMMARY_NOTE, SUMMARY_ROWS, summary_cell

    for label, key, fmt in SUMMARY_ROWS:
        table.add_row(label, *[summary_cell(fmt, v[key]) for v in summary["backends"].values()])
    table.caption = SUMMARY_NOTE
    return table


def actions_timeline(result, limit: int = 20) -> Panel:
    """The run's monitor events (every action but "carry on", and a "carry on" that gives a reason, such as a
    lifted quarantine), each with what the simulator was injecting at the
    time, so a reader can tell a caught fault from a false alarm, and its first reason; the first
    ``limit``, the rest counted.  An action up to ``CARRY_WINDOW_TICKS`` after a carry (the window in
    which ``fusion compare`` counts an alert as detecting it) is shown as coming just after it."""
    from fusion.compare import CARRY_WINDOW_TICKS

    truths = [tick.truth for tick in result.ticks]
    index = {truth.t: i for i, truth in enumerate(truths)}
    carried = [i for i, truth in enumerate(truths) if truth.carried]
    lines = []
    for event in result.events[:limit]:
        i = index.get(event.t)
        injected = list(truths[i].faults) if i is not None else []
        last = max((c for c in carried if i is not None and c <= i), default=None)
        if last is not None and i - last <= CARRY_WINDOW_TICKS:
            injected.append(f"carried {truths[i].t - truths[last].t:.2f} s ago")
        head = Text.from_markup(f"[bold]{event.t:6.2f} s[/] {event.backend:<10} [bold]{event.action:<17}[/]")
        head.append(f" injected: {plain(', '.join(injected)) or 'nothing'}", style="cyan" if injected else "yellow")
        lines.append(head)
        if event.reasons:
            lines.append(Padding(Text(plain(event.reasons[0]), style="dim"), (0, 0, 0, 9)))
    left = len(result.events) - limit
    footer = (f"{left} more; " if left > 0 else "") + (
        "every action's reasons are in summary.json. \"injected: nothing\" means a false alarm or a sensor's "
        "own odd reading, by the simulator's record."
    )
    lines.append(Text(footer, style="dim italic"))
    return Panel(Group(*lines), title=f"monitor actions ({len(result.events)})", border_style="magenta")
