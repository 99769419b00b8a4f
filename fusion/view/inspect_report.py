"""The single-file HTML incident report of a replay: conflict over time, episode timeline, blame, maps.

Plots (PNG, embedded and also written beside the report):
- ``conflict.png``: each back end's conflict per tick, episodes shaded, monitor actions marked;
- ``blame.png``: each sensor's share of the blame over all episodes, per back end;
- ``maps_episode<N>.png``: every back end's beliefs before, at the peak of and at the end of the
  most severe episodes (true pose and estimate marked when known);
- ``error.png``: the true position error per back end (only with a truth file).
"""

from __future__ import annotations

import html
from pathlib import Path

import numpy as np

from fusion.backends import BACKENDS
from fusion.io.outdir import atomic_write
from fusion.monitor import ALERT, QUARANTINE, RELOCALIZE
from fusion.monitor.episodes import QUIET_TICKS
from fusion.view.html_page import figures_html, page, png_of, pyplot
from fusion.view.inspect_summary import EPISODE_ROWS
from fusion.view.live import BACKEND_TITLES
from fusion.view.site_preview import draw_site_on, site_figsize
from fusion.words import plural

__all__ = ["write_report", "MAP_EPISODES"]

MAP_EPISODES = 3
"""Episodes whose belief maps are drawn in the report (the most severe)."""

_ACTION_MARKS = {
    ALERT: ("^", "#d98c00", "alert"),
    RELOCALIZE: ("X", "#b00020", "re-localize"),
    QUARANTINE: ("s", "#5a3fa0", "quarantine"),
}
_BACKEND_COLOURS = dict(zip(BACKENDS, ("#1f6f8b", "#b5523b", "#4f7a28", "#7a4f9a")))  # in the table's order


def write_report(found, case, out_dir) -> str:
    """Write report.html (and its PNGs) into ``out_dir``; returns the report's file name."""
    images = _plots(found, case)
    for name, data in images.items():
        atomic_write(Path(out_dir) / name, data)
    atomic_write(Path(out_dir) / "report.html", _html(found, images))
    found.files += list(images)
    return "report.html"


def _plots(found, case) -> dict[str, bytes]:
    """Every picture of the report by file name: conflict over time, blame, belief maps, true error."""
    out: dict[str, bytes] = {}
    o = found.time_origin
    t = np.asarray(found.series.get("t", np.zeros(0))) - o
    axis = "time in the log (s)" if not o else f"time from the log's first tick at {o:.2f} (s)"
    if len(t):
        out["conflict.png"] = _conflict_plot(found, t, o, axis)
    if found.ranking():
        out["blame.png"] = _blame_plot(found)
    worst = sorted(found.episodes, key=lambda e: -e.severity)
    for e in [e for e in worst if e.number in found.maps][:MAP_EPISODES]:
        out[f"maps_episode{e.number}.png"] = _maps(found, case, e)
    if found.truth and len(t):
        out["error.png"] = _error_plot(found, t, o, axis)
    return out


def _shade_episodes(ax, found, o: float) -> None:
    for e in found.episodes:
        ax.axvspan(e.start_t - o, max(e.end_t, e.start_t + 1e-3) - o, color="#f2c14e", alpha=0.3, lw=0)


def _conflict_plot(found, t, o: float, axis: str) -> bytes:
    plt = pyplot()
    s = found.series
    fig, axes = plt.subplots(
        len(found.backends), 1, figsize=(10, 2.4 * len(found.backends) + 0.6), dpi=110, sharex=True
    )
    axes = np.atleast_1d(axes)
    for ax, b in zip(axes, found.backends):
        ax.plot(t, s[f"conflict:{b}"], lw=0.9, color=_BACKEND_COLOURS.get(b, "0.2"))
        _shade_episodes(ax, found, o)
        for action, (marker, colour, label) in _ACTION_MARKS.items():
            when = [a[0] - o for a in found.actions if a[1] == b and a[2] == action]
            if when:
                ax.scatter(when, [1.04] * len(when), marker=marker, color=colour, s=28, label=label, clip_on=False)
        ax.set_ylim(0, 1.08)
        ax.set_ylabel("conflict K")
        ax.set_title(BACKEND_TITLES.get(b, b), fontsize=10, loc="left")
        ax.grid(alpha=0.3)
        if any(a[1] == b for a in found.actions):
            ax.legend(fontsize=7, loc="upper right", ncol=3)
    axes[-1].set_xlabel(f"{axis}; shaded: conflict episodes")
    data = png_of(fig)
    plt.close(fig)
    return data


def _blame_plot(found) -> bytes:
    plt = pyplot()
    names = [n for n, _ in found.ranking()]
    fig, ax = plt.subplots(figsize=(7, 0.5 * len(names) + 1.4), dpi=110)
    height = 0.8 / max(len(found.backends), 1)
    for i, b in enumerate(found.backends):
        per = found.blame[b]
        total = sum(max(v, 0.0) for v in per.values()) or 1.0
        ax.barh(
            np.arange(len(names)) + i * height,
            [max(per.get(n, 0.0), 0.0) / total for n in names],
            height=height,
            color=_BACKEND_COLOURS.get(b, "0.4"),
            label=b,
        )
    ax.set_yticks(np.arange(len(names)) + height * (len(found.backends) - 1) / 2, names)
    ax.invert_yaxis()
    ax.set_xlabel("share of the leave-one-out blame over all episodes")
    ax.legend(fontsize=8)
    ax.grid(alpha=0.3, axis="x")
    data = png_of(fig)
    plt.close(fig)
    return data


def _error_plot(found, t, o: float, axis: str) -> bytes:
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(10, 3), dpi=110)
    for b in found.backends:
        ls = "-" if b == found.backends[0] else "--"
        ax.plot(t, found.series[f"error:{b}"], lw=0.9, ls=ls, color=_BACKEND_COLOURS.get(b, "0.2"), label=b)
    _shade_episodes(ax, found, o)
    ax.set_ylim(bottom=0)
    ax.set_xlabel(f"{axis}; shaded: conflict episodes")
    ax.set_ylabel("true position error (m)")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8)
    data = png_of(fig)
    plt.close(fig)
    return data


def _maps(found, case, e) -> bytes:
    """Each back end's belief before, at the peak of and at the end of episode ``e`` on the site (walls, doors,
    markers, metres), with the true position (when known) and each back end's estimate; a one-tick episode,
    whose peak is its end, gets one panel for both."""
    plt = pyplot()
    o = found.time_origin
    maps = found.maps[e.number]
    moments = [("before", f"before ({maps['before'].t - o:.2f} s)")]
    if maps["peak"].t == maps["end"].t:
        moments.append(("peak", f"peak = end ({e.peak_t - o:.2f} s)"))
    else:
        moments += [("peak", f"peak ({e.peak_t - o:.2f} s)"), ("end", f"end ({e.end_t - o:.2f} s)")]
    width, height = site_figsize(case, 3.8 * len(moments))
    fig, axes = plt.subplots(
        len(found.backends),
        len(moments),
        figsize=(width, height * len(found.backends) / len(moments) + 1.0),
        dpi=100,
        squeeze=False,
    )
    for r, b in enumerate(found.backends):
        for c, (key, label) in enumerate(moments):
            ax, moment = axes[r, c], maps[key]
            plane = moment.planes[b]
            ax.imshow(
                np.sqrt(plane / max(plane.max(), 1e-300)),
                origin="lower",
                extent=case.site.extent,
                cmap="Blues",
                vmin=0,
                vmax=1,
            )
            draw_site_on(ax, case, labels=False, walls_alpha=0.5)
            if moment.truth is not None:
                ax.plot(*moment.truth, "o", mfc="none", mec="black", ms=9, mew=1.6, label="true position")
            ax.plot(*moment.estimates[b], "+", color="#b00020", ms=10, mew=2, label="estimate")
            ax.set_title(f"{BACKEND_TITLES.get(b, b)}: {label}", fontsize=8)
            ax.tick_params(labelsize=7)
            ax.xaxis.label.set_size(7)
            ax.yaxis.label.set_size(7)
    handles, labels = axes[0, 0].get_legend_handles_labels()
    if handles:
        fig.legend(handles, labels, loc="lower center", ncol=len(handles), fontsize=7, frameon=False)
    fig.suptitle(
        f"Episode {e.number}: belief (√ of the probability of each place, all headings; dark: likely) on the site; "
        "grey: walls and racks",
        fontsize=9,
    )
    # Room in inches, not in shares of the figure: the title and the legend keep their size however many back
    # ends (rows) the figure holds.
    tall = fig.get_figheight()
    data = png_of(fig, rect=(0, 0.45 / tall, 1, 1 - 0.4 / tall))
    plt.close(fig)
    return data


def _html(found, images: dict[str, bytes]) -> str:
    e = html.escape
    o = found.time_origin
    warn = "".join(f'<p class="warning">{e(w)}</p>' for w in found.warnings)
    aside = ", ".join(f"{n:,} {e(kind)}" for kind, n in found.reasons.most_common()) or "none"
    errors = "".join(
        f"<li>{e(b)}: median {m:.2f} m, 95th percentile {p:.2f} m</li>" for b, (m, p) in found.errors.items()
    )
    rows = []
    eps = sorted(found.episodes, key=lambda ep: -ep.severity)
    for ep in sorted(eps, key=lambda ep: ep.start_t):
        shares = ", ".join(f"{e(s)} {v:.0%}" for s, v in ep.shares()[:3]) or "—"
        pairs = ", ".join(f"{e(a)}↔{e(b)} {k:.2f}" for a, b, k in ep.pairwise()[:2]) or "—"
        acts = "<br>".join(
            f"{e(b)}: "
            + ", ".join(
                f"{e(a.split()[0])} {ep.acted(b, a) - o:.2f} s"
                for a in (ALERT, RELOCALIZE, QUARANTINE)
                if ep.acted(b, a) is not None
            )
            or f"{e(b)}: none"
            for b in found.backends
        )
        peaks = "".join(f"<td>{ep.peak.get(b, 0.0):.3f}</td>" for b in found.backends)
        rows.append(
            f"<tr><td>{ep.number}</td><td>{ep.start_t - o:.2f}</td><td>{ep.peak_t - o:.2f}</td><td>{ep.end_t - o:.2f}</td>"
            f"<td>{ep.start_line}</td><td>{ep.ticks}</td>{peaks}<td>{shares}</td><td>{pairs}</td><td>{acts}</td></tr>"
        )
    peak_head = "".join(f"<th>peak K {e(b)}</th>" for b in found.backends)
    ranking = "".join(
        f"<tr><td>{i}</td><td>{e(s)}</td><td>{v:.0%}</td></tr>" for i, (s, v) in enumerate(found.ranking(), 1)
    )
    listed = "".join(
        f"<tr><td>{e(f'{r.file}:{r.line}' if r.file else str(r.line))}</td><td>{e(r.reason)}</td><td><code>{e(r.text)}</code></td></tr>"
        for r in found.first_set_aside
    )
    more = (
        f"<p>First {len(found.first_set_aside)} of {found.set_aside:,} shown; all are in set_aside.jsonl.</p>"
        if found.set_aside > len(found.first_set_aside)
        else ""
    )
    body = f"""{warn}
<p>Log <code>{e(found.log)}</code> on site <b>{e(found.site)}</b>: {plural(found.lines, "line")}, {plural(found.records, "observation")},
{plural(found.ticks, "tick")} ({found.duration_s:.1f} s of log); {plural(found.used, "reading")} absorbed by every back end.
Start: {e(found.start)}. Rows set aside: {found.set_aside:,} ({aside}).{" <b>Interrupted</b>: the report covers the ticks read." if found.interrupted else ""}</p>
{"<h2>True error</h2><ul>" + errors + "</ul>" if errors else ""}
<h2>Conflict episodes ({len(found.episodes)})</h2>
<p>An episode opens when a back end's conflict K reaches the policy's threshold and closes after
{QUIET_TICKS} calm ticks. Blame: how much leaving a sensor's reading out lowers the tick's conflict, summed over the
episode, as a share per back end, averaged. Pairwise: mean conflict K between two sensors' readings.
The terminal shows the {EPISODE_ROWS} most severe.{f" Times count from the log's first tick, at {o:.3f} s on its clock." if o else ""}</p>
<table><tr><th>#</th><th>start (s)</th><th>peak (s)</th><th>end (s)</th><th>log line</th><th>ticks</th>{peak_head}
<th>most to blame</th><th>pairwise conflict</th><th>first action (s)</th></tr>{"".join(rows)}</table>
<h2>Sensors ranked by blame over all episodes</h2>
<table><tr><th>rank</th><th>sensor</th><th>share</th></tr>{ranking}</table>
<h2>Plots</h2>{figures_html(images)}
<h2>Rows set aside</h2>
<table><tr><th>line</th><th>reason</th><th>start of the row</th></tr>{listed}</table>{more}"""
    return page(f"Incident replay: {Path(found.log).name} on {found.site}", body)
