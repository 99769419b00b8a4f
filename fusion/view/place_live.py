"""The live terminal view of a run on a place graph: the graph drawn in characters, each back end's belief on it.

The graph is drawn where its layout puts it (``PlaceGraph.layout``), north up, a character about twice as tall as
wide: passages as faint dots, places as ○, the belief summed over the cells that fall on each character in shades,
the truth ◆ and the estimate ✚ (the same glyphs as the metric view, ``fusion.view.live``).  Below each map: the
conflict figure over time, the most probable place and its probability, the error along the graph, the action.
"""

from __future__ import annotations

import math

import numpy as np
from rich.console import Group
from rich.panel import Panel
from rich.text import Text

from fusion.view.live import _BORDER, _FIGURE, _SHADES, BACKEND_TITLES, RunView, sparkline

__all__ = ["GraphRunView", "graph_map"]

GRAPH_LEGEND = (
    "◆ truth ✚ estimate ○ place · passage ░▒▓█ belief (summed where cells share a character)  "
    "border: [blue]carry on[/] [yellow]alert[/] [red]re-localize/quarantine[/]  ▁▃█ conflict over time"
)


class _Raster:
    """Character positions of a frame's cells, places and passages at a width in characters."""

    def __init__(self, frame, width: int, rows_allowed: int):
        xy = frame.graph.layout()
        lo, hi = xy.min(axis=0), xy.max(axis=0)
        span = np.maximum(hi - lo, 1e-9)
        scale = (
            min((width - 1) / span[0], 2 * (rows_allowed - 1) / span[1]) if span[1] > 1e-9 else (width - 1) / span[0]
        )
        self.cols = max(1, int(math.floor(span[0] * scale)) + 1)
        self.rows = max(1, int(math.floor(span[1] * scale / 2)) + 1)

        def at(points):
            c = np.clip(np.rint((points[:, 0] - lo[0]) * scale), 0, self.cols - 1).astype(int)
            r = np.clip(np.rint((points[:, 1] - lo[1]) * scale / 2), 0, self.rows - 1).astype(int)
            return r, c

        self.cell_rc = at(frame.positions())
        self.place_rc = at(xy)
        lines = []
        for p in frame.graph.passages:
            a, b = xy[frame.graph.cell_of(p.a)], xy[frame.graph.cell_of(p.b)]
            k = max(2, int(np.linalg.norm((b - a) * scale)) * 2)
            lines.append(a + np.linspace(0, 1, k)[:, None] * (b - a))
        self.passage_rc = at(np.concatenate(lines)) if lines else (np.zeros(0, int), np.zeros(0, int))


def graph_map(raster: _Raster, p: np.ndarray, truth_cell: int | None, estimate_cell: int | None) -> Text:
    """The belief ``p`` over the frame's cells on the characters of ``raster``."""
    rows, cols = raster.rows, raster.cols
    mass = np.zeros((rows, cols))
    np.add.at(mass, raster.cell_rc, p)
    top = float(mass.max())
    level = np.ceil(mass / top * (len(_SHADES) - 1)).astype(int) if top > 0 else np.zeros((rows, cols), int)
    passage = np.zeros((rows, cols), bool)
    passage[raster.passage_rc] = True
    place = np.zeros((rows, cols), bool)
    place[raster.place_rc] = True
    marks = {}
    for cell, glyph in ((estimate_cell, ("✚", "bold magenta")), (truth_cell, ("◆", "bold yellow"))):
        if cell is not None:
            marks[(int(raster.cell_rc[0][cell]), int(raster.cell_rc[1][cell]))] = glyph
    text = Text()
    for r in range(rows - 1, -1, -1):
        for c in range(cols):
            if (r, c) in marks:
                text.append(*marks[(r, c)])
            elif level[r, c] > 1:
                text.append(_SHADES[level[r, c]], style="cyan")
            elif place[r, c]:
                text.append("○", style="white")
            elif passage[r, c] or level[r, c]:
                text.append("·", style="cyan" if level[r, c] else "grey42")
            else:
                text.append(" ")
        if r:
            text.append("\n")
    return text


class GraphRunView(RunView):
    """``RunView`` with the graph's map in each panel; fed by ``fusion.place_cases.run.run_places``'s ``on_tick``."""

    legend = GRAPH_LEGEND

    def __init__(self, case, backends, total_ticks: int):
        super().__init__(case, backends, total_ticks)
        self._rasters: dict[tuple[int, int], _Raster] = {}
        self._map_rows = 12  # lines a map may take, set by each rendering (``_map_width``)

    def on_tick(self, tick, decisions, localizers) -> None:
        self.truth = tick.truth
        frame = self.case.frame
        self.truth_cell = tick.truth.cell(frame)
        for name, d in decisions.items():
            key = _FIGURE[name][0]
            self.history[name].append(d.figures.value(key))
            p = localizers[name].filter.distribution()
            error = frame.travel_m(d.place.cell, self.truth_cell) if d.place is not None else float("nan")
            self.latest[name] = (d, p.copy(), error)
            if d.action != "carry on":
                self._event(tick, name, d)
        self.progress.advance(self.task)

    def _panel(self, name: str, map_width: int) -> Panel:
        if name not in self.latest:
            return Panel("waiting for the first tick…", title=BACKEND_TITLES[name])
        d, p, error = self.latest[name]
        raster = self._raster(map_width)
        key = _FIGURE[name][0]
        where = d.place
        lines = [
            f"{where.place} holds {where.share:.0%}; error along the graph {error:.1f} m" if where else "",
            f"{key.replace('_', ' ')} {d.figures.value(key):.3f}  {d.action}",
        ]
        if d.quarantined:
            lines.append(f"quarantined: {', '.join(d.quarantined)}")
        body = Group(
            graph_map(raster, p, self.truth_cell, where.cell if where else None),
            Text(sparkline(self.history[name], map_width), style="green", no_wrap=True, overflow="crop"),
            Text("\n".join(lines), no_wrap=True, overflow="ellipsis"),
        )
        return Panel(body, title=BACKEND_TITLES[name], border_style=_BORDER.get(d.action, "blue"))

    def _map_width(self, panel_width: int, height: int, panel_rows: int = 1) -> int:
        self._map_rows = self._rows_allowed(height, panel_rows)
        return max(8, panel_width - 4)

    def _raster(self, width: int) -> _Raster:
        key = (width, self._map_rows)
        if key not in self._rasters:
            self._rasters[key] = _Raster(self.case.frame, *key)
        return self._rasters[key]
