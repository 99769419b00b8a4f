"""The single-file HTML report of ``fusion run`` and ``fusion demo``: the summary per back end, the site with
the true path and each back end's estimates, the position error and the conflict over time with the injected
faults and carries shaded, and the monitor's actions with their reasons."""

from __future__ import annotations

import html

import numpy as np

from fusion.backends import BACKENDS
from fusion.view.html_page import figures_html, line_style, page, png_of, pyplot, shade_spans
from fusion.view.site_preview import draw_site_on, legend_if_any, site_figsize
from fusion.words import plural

__all__ = ["run_report"]


def run_report(result) -> str:
    """The report of a ``fusion.runner.RunResult`` as one HTML document (figures embedded)."""
    from fusion.compare.runs import fault_spans

    spans = fault_spans(result.case) if result.case.route is not None else []
    images = {"path.png": _path_map(result), "over_time.png": _over_time(result, spans)}
    e = html.escape
    summary = result.summary()
    head = "".join(f"<th>{e(BACKENDS[b].title)}</th>" for b in summary["backends"])
    rows = "".join(
        f"<tr><td>{e(label)}</td>"
        + "".join(f"<td>{e(summary_cell(fmt, v[key]))}</td>" for v in summary["backends"].values())
        for label, key, fmt in SUMMARY_ROWS
    )
    events = "".join(
        f"<li>{ev.t:.2f} s, {e(ev.backend)}: <b>{e(ev.action)}</b>"
        + (f" ({e('; '.join(ev.reasons))})" if ev.reasons else "")
        + "</li>"
        for ev in result.events
    )
    faults = "".join(f"<li>{a:.1f}–{b:.1f} s: {e(what)}</li>" for a, b, what in spans) or "<li>none</li>"
    body = f"""<p>{e(result.case.name)}, seed {summary["seed"]}: {plural(summary["ticks"], "tick")}
({summary["duration_s"]:.1f} s simulated). Every back end saw the same readings.</p>
<table><tr><th>figure</th>{head}</tr>{rows}</table>
<p>{e(SUMMARY_NOTE)}</p>
<h2>Injected faults and carries</h2><ul>{faults}</ul>
<h2>Plots</h2>{figures_html(images)}
<h2>Monitor actions ({len(result.events)})</h2><ul>{events or "<li>none: every tick was 'carry on'</li>"}</ul>"""
    return page(f"Fusion run: {result.case.name}", body)


SUMMARY_ROWS = (
    ("median position error", "median_error_m", "{:.2f} m"),
    ("95th percentile position error", "p95_error_m", "{:.2f} m"),
    ("95th percentile, nothing injected", "p95_error_quiet_m", "{:.2f} m"),
    ("median heading error", "median_heading_error_deg", "{:.1f}°"),
    ("ticks within 0.5 m and 15°", "within_0_5_m_and_15_deg", "{:.0%}"),
    ("operator alerts", "alerts", "{}"),
    ("re-localizations", "relocalizations", "{}"),
    ("sensor quarantines", "quarantines", "{}"),
    ("first tick (start-up)", "first_step_ms", "{:.1f} ms"),
    ("mean time, later ticks", "mean_step_ms", "{:.1f} ms"),
    ("95th percentile, later ticks", "p95_step_ms", "{:.1f} ms"),
)
"""The rows of a run's summary, as the terminal and the report show them: (label, key of the summary, format)."""

ERROR_NOTE = (
    "Errors are of the estimate (local mean around the best cell) against the simulated truth; times are wall-clock "
    "time per tick, in one process on the machine that ran it."
)
QUIET_NOTE = (
    "The 95th percentile of the position error counts every tick, those while a fault was injected or the robot was "
    "carried too; the row after it leaves those ticks out (the recovery after them stays in; '—': no such tick)."
)


def summary_cell(fmt: str, value) -> str:
    """A figure of the summary as its row formats it; '—' for a figure with no value (None)."""
    return "—" if value is None else fmt.format(value)


STARTUP_NOTE = (
    "The first tick includes the process's one-time start-up (the compiled loops load, or are compiled on a fresh "
    "install), so it is shown apart from the ticks after it."
)
SUMMARY_NOTE = f"{ERROR_NOTE} {QUIET_NOTE} {STARTUP_NOTE}"
"""What the run summary's figures are, said once for the terminal and the report."""


def _path_map(result) -> bytes:
    plt = pyplot()
    fig, ax = plt.subplots(figsize=site_figsize(result.case), dpi=100)
    draw_site_on(ax, result.case, walls_alpha=0.8)
    truth = np.array([(t.truth.x_m, t.truth.y_m) for t in result.ticks])
    if len(truth):
        ax.plot(truth[:, 0], truth[:, 1], "-", color="black", lw=1.5, label="true path")
        ax.plot(truth[0, 0], truth[0, 1], "o", color="black", ms=6)
    for i, backend in enumerate(result.backends):
        rows = result.rows_of(backend)
        xs, ys = [r.decision.x_m for r in rows], [r.decision.y_m for r in rows]
        title = BACKENDS[backend].title
        ax.plot(xs, ys, ms=2.5, lw=0.8, alpha=0.8, label=f"{title} estimate", **line_style(i))
        acted = [r for r in rows if r.action != "carry on"]
        ax.plot([r.decision.x_m for r in acted], [r.decision.y_m for r in acted], "x", ms=7, color=f"C{i}")
    if any(r.action != "carry on" for r in result.rows):
        ax.plot([], [], "x", color="0.3", label="estimate when the monitor acted")
    ax.set_title("True path and estimates (metres)")
    legend_if_any(ax, loc="upper right", fontsize=7, framealpha=0.8)
    data = png_of(fig)
    plt.close(fig)
    return data


def _over_time(result, spans) -> bytes:
    plt = pyplot()
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(10, 6), dpi=100, sharex=True)
    shade_spans(top, spans)
    shade_spans(bottom, spans, name_them=False)
    for i, backend in enumerate(result.backends):
        rows = result.rows_of(backend)
        style = {"markevery": 0.05, "ms": 4, **line_style(i)}
        t = [r.t for r in rows]
        title = BACKENDS[backend].title
        top.plot(t, [r.error_m for r in rows], lw=1.2, label=title, **style)
        key, label = BACKENDS[backend].figure
        bottom.plot(t, [r.decision.figures.value(key) for r in rows], lw=1.0, label=f"{title}: {label}", **style)
    top.set_ylim(bottom=0)
    top.set_ylabel("position error (m)")
    top.set_title("Error and conflict over time (shaded: injected faults and carries)")
    bottom.set_ylim(bottom=0)
    bottom.set_ylabel("conflict figure")
    bottom.set_xlabel("time (s)")
    for ax in (top, bottom):
        ax.grid(alpha=0.3)
        legend_if_any(ax, fontsize=7, loc="upper left")
    data = png_of(fig)
    plt.close(fig)
    return data
