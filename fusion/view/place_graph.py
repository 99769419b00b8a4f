"""Pictures and tables of place-graph cases: the graph as ``fusion check`` draws it, and a run's result.

Places are drawn where the case puts them (``at``), or by classical scaling of travel distances when it
gives no coordinates; passages are lines as wide as their known width (thin and dashed when unknown).
A run's picture has one panel per back end: each place's probability as the size and colour of its disc
(every cell counted for the nearer end of its passage), the truth and the estimate at the run's end.
"""

from __future__ import annotations

import io

import numpy as np
from rich.table import Table

from fusion import __version__
from fusion.place_cases.case import PlaceCase, route_length_m
from fusion.text import literal
from fusion.view.html_page import pyplot
from fusion.view.site_preview import PREVIEW_MARK

__all__ = ["draw_graph", "draw_run", "place_run_table", "describe_graph", "graph_targets_table", "graph_compare_table"]
MAX_LABELS = 80
"""Places labelled by name on a picture (more would hide the graph; our choice)."""
_FEATURE_STYLE = {"door": ("s", "tab:brown"), "junction": ("D", "tab:blue"), "dead end": ("X", "tab:gray")}


def _draw_on(ax, case: PlaceCase, label: bool = True) -> None:
    graph = case.graph
    xy = graph.layout()
    for p in graph.passages:
        a, b = xy[graph.cell_of(p.a)], xy[graph.cell_of(p.b)]
        width = 1.0 if p.width_m is None else 1.0 + 1.5 * p.width_m
        ax.plot([a[0], b[0]], [a[1], b[1]], "-" if p.width_m else "--", color="0.75", linewidth=width, zorder=1)
        if label and len(graph.passages) <= MAX_LABELS:
            ax.annotate(f"{p.length_m:g} m", (a + b) / 2, fontsize=6, color="0.4", ha="center", va="center")
    drawn = set()
    for i, features in enumerate(graph.features):
        for f in features or ("",):
            marker, colour = _FEATURE_STYLE.get(f, ("o", "tab:purple") if f else ("o", "0.3"))
            name = (f or "place") if (f or "place") not in drawn else None
            drawn.add(f or "place")
            ax.plot(*xy[i], marker, color=colour, markersize=5, zorder=3, label=name, alpha=0.8)
        if graph.markers[i] is not None:
            ax.annotate(
                f"[{graph.markers[i]}]", xy[i], xytext=(4, -9), textcoords="offset points", fontsize=6, color="tab:red"
            )
        if label and graph.n_cells <= MAX_LABELS:
            ax.annotate(graph.places[i], xy[i], xytext=(4, 4), textcoords="offset points", fontsize=7)
    ax.set_aspect("equal", adjustable="datalim")
    ax.set_xlabel("x (m)")
    ax.set_ylabel("y (m)")


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", metadata={"Software": f"{PREVIEW_MARK} ({__version__})"})
    return buf.getvalue()


def draw_graph(case: PlaceCase) -> bytes:
    """The graph of ``case`` with its route, as PNG bytes."""
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(9, 6), dpi=100)
    _draw_on(ax, case)
    graph, xy = case.graph, case.graph.layout()
    route = np.array([xy[graph.cell_of(p)] for p in case.route.path])
    ax.plot(route[:, 0], route[:, 1], "-", color="tab:green", linewidth=1.0, alpha=0.6, label="route", zorder=2)
    for c in case.route.carries:
        ax.plot(*xy[graph.cell_of(c.to)], "*", color="tab:orange", markersize=11, label="carried to", zorder=4)
    ax.set_title(
        f"{case.name[:60]}: {graph.n_cells} places, {len(graph.passages)} passages, {case.frame.n_cells} cells"
    )
    handles, labels = ax.get_legend_handles_labels()
    if handles:
        ax.legend(handles, labels, loc="best", fontsize=7, framealpha=0.8)
    fig.tight_layout()
    data = _png(fig)
    plt.close(fig)
    return data


def draw_run(case: PlaceCase, beliefs: dict, truth_cell: int | None, t: float) -> bytes:
    """One panel per back end (``beliefs``: name -> probability per cell) at time ``t``, the truth at ``truth_cell``
    (None: not known)."""
    plt = pyplot()
    frame, graph = case.frame, case.graph
    xy = graph.layout()
    fig, axes = plt.subplots(1, len(beliefs), figsize=(6.5 * len(beliefs), 5.5), dpi=100, squeeze=False)
    cells_xy = frame.positions()
    for ax, (name, p) in zip(axes[0], beliefs.items()):
        _draw_on(ax, case, label=False)
        per_place = frame.place_belief(p)
        ax.scatter(
            xy[:, 0],
            xy[:, 1],
            s=20 + 600 * per_place,
            c=per_place,
            cmap="viridis",
            vmin=0,
            vmax=1,
            zorder=5,
            alpha=0.85,
            edgecolors="k",
            linewidths=0.3,
        )
        best = int(np.argmax(p))
        if truth_cell is not None:
            ax.plot(
                *cells_xy[truth_cell], "o", mfc="none", mec="tab:red", markersize=14, mew=2, zorder=6, label="truth"
            )
        ax.plot(*cells_xy[best], "+", color="k", markersize=14, mew=2, zorder=7, label="estimate")
        top = int(np.argmax(per_place))
        ax.set_title(f"{name}: {graph.places[top]} holds {per_place[top]:.0%} (t = {t:.1f} s)", fontsize=9)
        ax.legend(loc="best", fontsize=7, framealpha=0.8)
    fig.tight_layout()
    data = _png(fig)
    plt.close(fig)
    return data


def place_run_table(result) -> Table:
    """A run on a graph: per back end, how often it was at the right place, and when it found itself."""
    s = result.summary()
    table = Table(title=f"{literal(s['case'])} — seed {s['seed']}, {s['ticks']} ticks")
    table.add_column("figure")
    for b in s["backends"]:
        table.add_column(b, justify="right")
    rows = s["backends"].values()
    table.add_row("median error along the graph", *[f"{v['median_error_m']:.1f} m" for v in rows])
    table.add_row("ticks at the right place", *[f"{v['right_share']:.0%}" for v in rows])
    for i, ep in enumerate(result.episodes(result.backends[0])):
        what = "from the start" if i == 0 else f"after the carry at {ep.start_s:.0f} s"
        cells = []
        for b in s["backends"]:
            e = result.episodes(b)[i]
            cells.append(
                f"{e.localized_s:.0f} s, {e.places_needed} places" if e.localized_s is not None else "not found"
            )
        table.add_row(f"found itself {what}", *cells)
    for key in ("alerts", "relocalizations", "quarantines"):
        table.add_row(key, *[str(v[key]) for v in rows])
    table.caption = (
        "Right place: the most probable cell within 2 passage steps of the truth along the graph. 'Found itself': the "
        "estimate was right from then on for 15 s (or to the end or the next carry); places: distinctive places "
        "reached until then, the start included."
    )
    return table


def describe_graph(case: PlaceCase, path) -> str:
    """What ``fusion check`` says of a place-graph case: the graph, its frame, the sensors, the route, warnings."""
    graph, frame = case.graph, case.frame
    total = sum(p.length_m for p in graph.passages)
    pieces = _pieces(graph)
    lines = [
        f"{path}: {case.name}",
        f"  place graph: {graph.n_cells} places, {len(graph.passages)} passages, {total:g} m of passages"
        + (f", in {pieces} pieces" if pieces > 1 else ""),
        f"  frame: {frame.n_cells} cells ({case.resolution_m:g} m steps, both directions); turn tolerance "
        f"{case.turn_tolerance_deg:g}°"
        + ("" if all(a is not None for a in graph.at) else "; no coordinates: no bearings"),
        "  features: "
        + (
            ", ".join(f"{f} ({sum(f in fs for fs in graph.features)})" for f in sorted(graph.feature_names())) or "none"
        ),
        f"  markers: {sum(m is not None for m in graph.markers)}",
        "  sensors: " + ", ".join(f"{s.name} ({s.kind}, {s.rate_hz:g} Hz)" for s in case.sensors),
        f"  route: {len(case.route.path)} places, {route_length_m(case):g} m, start "
        + ("known" if case.route.start_known else "unknown (global localization)")
        + (
            f", {len(case.route.carries)} carr{'y' if len(case.route.carries) == 1 else 'ies'}"
            if case.route.carries
            else ""
        ),
        f"  run: back ends {', '.join(case.run.backends)}; rule {case.run.rule}; seed {case.run.seed}",
    ]
    lines += [f"  warning: {w}" for w in case.warnings]
    return "\n".join(lines)


def _pieces(graph) -> int:
    d = graph.distances()
    seen, count = np.zeros(graph.n_cells, bool), 0
    for i in range(graph.n_cells):
        if not seen[i]:
            seen |= np.isfinite(d[i])
            count += 1
    return count


def graph_targets_table(name: str, rows) -> Table:
    """``fusion targets`` on a place graph: per back end, runs that found themselves from an unknown start (target
    95%) and carries found again within ``CARRY_PLACES`` distinctive places (target 90%)."""
    from fusion.place_cases.targets import CARRY_PLACES

    table = Table(title=f"{literal(name)}: finding itself on the graph")
    for column in ("back end", "found from the start", "median places", "carries found again", "median places"):
        table.add_column(column, justify="right" if column != "back end" else "left")
    for r in rows:
        start_share = r.found / r.seeds if r.seeds else 0.0
        carry_share = r.carried_found / r.carries if r.carries else None
        start_ok = "met" if start_share >= 0.95 else "not met"
        carry = (
            "no carry"
            if carry_share is None
            else f"{r.carried_found}/{r.carries} within {CARRY_PLACES} ({carry_share:.0%}, "
            + ("met)" if carry_share >= 0.9 else "not met)")
        )
        med = GraphTargetMedian(r)
        table.add_row(r.backend, f"{r.found}/{r.seeds} ({start_share:.0%}, {start_ok})", med.start, carry, med.carry)
    table.caption = (
        "Each seed starts the route at another of its places (fusion/place_cases/targets.py). Targets: found from an unknown "
        f"start in 95% of seeds; found again within {CARRY_PLACES} distinctive places of a carry in 90%."
    )
    return table


class GraphTargetMedian:
    """The medians of a ``GraphTarget`` in words."""

    def __init__(self, row):
        self.start = "—" if not row.places else f"{row.median(row.places):g}"
        self.carry = "—" if not row.carried_places else f"{row.median(row.carried_places):g}"


def graph_compare_table(found) -> Table:
    """``fusion compare`` on a graph: per figure and setting, the mean over seeds and its 95% interval."""
    from fusion.place_cases.compare import GRAPH_FIGURES

    table = Table(
        title=f"{literal(found.case)}: {len(found.settings)} settings × {len(found.seeds)} seeds on the graph"
    )
    table.add_column("figure")
    for s in found.settings:
        table.add_column(s.label, justify="right")
    summary = found.summary
    for name, fig in GRAPH_FIGURES.items():
        cells = []
        for s in found.settings:
            row = summary[(summary["key"] == s.key) & (summary["figure"] == name)].iloc[0]
            cells.append("—" if row["runs"] == 0 else f"{row['mean']:.3g} [{row['low']:.3g}–{row['high']:.3g}]")
        better = "↑" if fig.better == "high" else "↓"
        table.add_row(f"{fig.label}{' (' + fig.unit + ')' if fig.unit else ''} {better}", *cells)
    table.caption = (
        "Mean over seeds [95% bootstrap interval]; ↑ higher is better, ↓ lower. Each seed starts the route at another "
        "of its places, with identical readings for every setting."
    )
    return table
