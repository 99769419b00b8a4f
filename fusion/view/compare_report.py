"""What a comparison sweep shows: a ranked terminal table, tables on disk, plots and one HTML page.

Files written into the sweep's folder (each written whole, then renamed into place):
``runs.csv`` (one row per run: setting, seed, figures; ``runs.parquet`` too when
pyarrow is installed), ``settings.csv`` (mean and 95% interval per setting and
figure), ``error_over_time.png``, ``calibration.png`` and ``report.html`` (the
table, the verdicts and the plots in one self-contained file).
"""

from __future__ import annotations

import html
import io
import math
from pathlib import Path

import numpy as np

from fusion.compare import FIGURES, RunRecord, Setting
from fusion.io.outdir import atomic_write
from fusion.view.html_page import figures_html, page, png_of, pyplot
from fusion.words import plural

__all__ = ["TABLE_FIGURES", "ranked", "table", "tables", "write_report", "runs_frame"]

TABLE_FIGURES = (
    "median_error_m",
    "p95_error_m",
    "median_heading_error_deg",
    "in_region",
    "nll",
    "brier",
    "recovery_s",
    "recovered",
    "alert_precision",
    "alert_recall",
    "false_alerts",
    "ms_per_step",
)
PLOTTED_SETTINGS = 8
"""At most this many settings (the best ranked) share one plot, so the lines stay readable."""


def runs_frame(records: list[RunRecord]):
    import pandas as pd

    rows = []
    for r in records:
        row = {**r.setting, "key": r.key, "seed": r.seed, "ticks": r.figures.ticks}
        row.update({name: r.value(name) for name in FIGURES})
        row["wall_s"] = r.wall_s  # NaN for runs saved before wall times were kept
        rows.append(row)
    return pd.DataFrame(rows)


def ranked(summary, settings: list[Setting], rank_by: str) -> list[Setting]:
    """Settings from best to worst on ``rank_by`` (settings without a value last)."""
    fig = FIGURES[rank_by]
    means = summary[summary.figure == rank_by].set_index("key")["mean"]

    def score(s: Setting):
        v = float(means.get(s.key, math.nan))
        return (not math.isfinite(v), v if fig.better == "low" else -v)

    return sorted(settings, key=score)


def _cell(summary, key: str, name: str) -> str:
    row = summary[(summary.key == key) & (summary.figure == name)]
    if row.empty or not math.isfinite(float(row["mean"].iloc[0])):
        return "–"
    mean, lo, hi = (float(row[c].iloc[0]) for c in ("mean", "low", "high"))
    digits = 2 if name not in ("ms_per_step", "false_alerts", "recovery_s") else 1
    text = f"{mean:.{digits}f}"
    if math.isfinite(lo):
        text += f" ±{(hi - lo) / 2:.{digits}f}"
    return text


TABLE_GROUPS = {
    "accuracy and calibration": TABLE_FIGURES[:6],
    "recovery, alerts and cost": TABLE_FIGURES[6:],
}


def table(summary, settings: list[Setting], rank_by: str, title: str, figures=TABLE_FIGURES):
    from rich.table import Table

    t = Table(title=title, caption=f"mean over seeds ±half-width of its 95% t-interval; ranked by {rank_by}")
    t.add_column("#", justify="right")
    t.add_column("setting", overflow="fold")
    for name in figures:
        f = FIGURES[name]
        arrow = "↓" if f.better == "low" else "↑"
        style = "bold" if name == rank_by else None
        t.add_column(
            f"{f.label}{' (' + f.unit + ')' if f.unit else ''} {arrow}", justify="right", style=style, overflow="fold"
        )
    for i, s in enumerate(ranked(summary, settings, rank_by), 1):
        t.add_row(str(i), s.label, *(_cell(summary, s.key, n) for n in figures))
    return t


def tables(summary, settings: list[Setting], rank_by: str, title: str) -> list:
    """The comparison as two narrower tables (one terminal width each), same ranking."""
    return [table(summary, settings, rank_by, f"{title}: {group}", figs) for group, figs in TABLE_GROUPS.items()]


# ----------------------------------------------------------------------------- plots
def _plots(records, order: list[Setting]) -> dict[str, bytes]:
    plt = pyplot()
    shown = order[:PLOTTED_SETTINGS]
    out = {}
    fig, ax = plt.subplots(figsize=(9, 4.5), dpi=110)
    for s in shown:
        runs = [r.series for r in records if r.key == s.key]
        if not runs:
            continue
        n = min(len(r.t) for r in runs)
        err = np.array([r.error_m[:n] for r in runs])
        t = np.array(runs[0].t[:n])
        (line,) = ax.plot(t, np.median(err, axis=0), label=s.label, lw=1.3)
        if len(runs) > 1:
            lo, hi = np.percentile(err, [25, 75], axis=0)
            ax.fill_between(t, lo, hi, color=line.get_color(), alpha=0.15, lw=0)
    ax.set_yscale("symlog", linthresh=0.5)
    ax.set_xlabel("time (s)")
    ax.set_ylabel("position error (m)")
    ax.set_title("Position error over time: median over seeds, band 25–75%")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8, loc="upper left")
    out["error_over_time.png"] = png_of(fig)
    plt.close(fig)

    fig, ax = plt.subplots(figsize=(5.5, 5.5), dpi=110)
    alphas = np.linspace(0, 1, 101)
    for s in shown:
        levels = np.concatenate([r.series.level for r in records if r.key == s.key] or [np.zeros(0)])
        if levels.size:
            ax.plot(alphas, [(levels < a).mean() for a in alphas], label=s.label, lw=1.3)
    ax.plot([0, 1], [0, 1], color="0.5", ls="--", lw=1, label="calibrated")
    ax.set_xlabel("nominal probability of the region")
    ax.set_ylabel("share of ticks with the true cell inside")
    ax.set_title("Calibration of the most-probable regions")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8, loc="lower right")
    out["calibration.png"] = png_of(fig)
    plt.close(fig)
    return out


# ----------------------------------------------------------------------------- files
def write_report(folder, records, settings, summary, verdict_list, identity, rank_by: str, case_name: str) -> list[str]:
    """Write every file of the sweep's report; returns their names.  Parquet only when pyarrow is present."""
    folder = Path(folder)
    written = []
    frame = runs_frame(records)
    atomic_write(folder / "runs.csv", frame.to_csv(index=False))
    written.append("runs.csv")
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        pass
    else:
        buf = io.BytesIO()
        frame.to_parquet(buf, index=False)
        atomic_write(folder / "runs.parquet", buf.getvalue())
        written.append("runs.parquet")
    atomic_write(folder / "settings.csv", summary.to_csv(index=False))
    written.append("settings.csv")
    order = ranked(summary, settings, rank_by)
    images = _plots(records, order)
    for name, data in images.items():
        atomic_write(folder / name, data)
        written.append(name)
    page = _html(records, order, summary, verdict_list, identity, rank_by, case_name, images)
    atomic_write(folder / "report.html", page)
    written.append("report.html")
    return written


def _html(records, order, summary, verdict_list, identity, rank_by, case_name, images) -> str:
    e = html.escape
    seeds = sorted({r.seed for r in records})
    head = "".join(
        f"<th>{e(FIGURES[n].label)}{' (' + e(FIGURES[n].unit) + ')' if FIGURES[n].unit else ''}</th>"
        for n in TABLE_FIGURES
    )
    body = "".join(
        f"<tr><td>{i}</td><td>{e(s.label)}</td>"
        + "".join(f"<td>{e(_cell(summary, s.key, n))}</td>" for n in TABLE_FIGURES)
        + "</tr>"
        for i, s in enumerate(order, 1)
    )
    words = "".join(f"<li>{e(v.sentence)}</li>" for v in verdict_list)
    legend = "".join(f"<li><b>{e(f.label)}</b>: {e(f.explain)}</li>" for f in FIGURES.values())
    body_html = f"""<p>{plural(len(records), "run")}: {plural(len(order), "setting")} × {plural(len(seeds), "seed")}. Ranked by <b>{e(rank_by)}</b>.
Each figure is the mean over seeds ± the half-width of its 95% Student-t interval.</p>
<table><tr><th>#</th><th>setting</th>{head}</tr>{body}</table>
<h2>Verdicts</h2><ul>{words}</ul>
<p>Sanity check (Shafer 1976, Dempster's rule on Bayesian mass functions is Bayes' rule):
{e(identity.words())}</p>
<h2>Plots</h2>{figures_html(images)}
<h2>Figures</h2><ul>{legend}</ul>"""
    return page(f"Fusion comparison: {case_name}", body_html)
