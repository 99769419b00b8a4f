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
from pathlib import Path

import numpy as np

from fusion.compare import FIGURES, RunRecord, Setting
from fusion.compare.conclusion import Comparison
from fusion.compare.verdicts import INTERVAL
from fusion.io.outdir import atomic_write
from fusion.view.compare_tables import TABLE_FIGURES, cell, ranked
from fusion.view.html_page import figures_html, line_style, page, png_of, pyplot, shade_spans
from fusion.words import plural

__all__ = ["write_report", "runs_frame"]

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


# ----------------------------------------------------------------------------- plots
def _plots(found: Comparison, order: list[Setting]) -> dict[str, bytes]:
    plt = pyplot()
    records = found.records
    shown = order[:PLOTTED_SETTINGS]
    out = {}
    fig, ax = plt.subplots(figsize=(9, 4.5), dpi=110)
    shade_spans(ax, found.fault_spans)
    for i, s in enumerate(shown):
        runs = [r.series for r in records if r.key == s.key]
        if not runs:
            continue
        n = min(len(r.t) for r in runs)
        err = np.array([r.error_m[:n] for r in runs])
        t = np.array(runs[0].t[:n])
        (line,) = ax.plot(t, np.median(err, axis=0), label=s.label, lw=1.3, ms=4, markevery=0.1, **line_style(i))
        if len(runs) > 1:
            lo, hi = np.percentile(err, [25, 75], axis=0)
            ax.fill_between(t, lo, hi, color=line.get_color(), alpha=0.12, lw=0)
    ax.set_ylim(bottom=0)
    ax.set_xlabel("time (s)")
    ax.set_ylabel("position error (m)")
    ax.set_title("Position error over time: median over seeds, band 25–75%; shaded: injected faults and carries")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8, loc="upper left")
    out["error_over_time.png"] = png_of(fig)
    plt.close(fig)

    fig, ax = plt.subplots(figsize=(5.5, 5.5), dpi=110)
    alphas = np.linspace(0, 1, 101)
    for i, s in enumerate(shown):
        levels = np.concatenate([r.series.level for r in records if r.key == s.key] or [np.zeros(0)])
        if levels.size:
            ax.plot(
                alphas,
                [(levels < a).mean() for a in alphas],
                label=s.label,
                lw=1.3,
                ms=4,
                markevery=0.1,
                **line_style(i),
            )
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
def write_report(folder, found: Comparison) -> list[str]:
    """Write every file of the sweep's report; returns their names.  Parquet only when pyarrow is present."""
    folder = Path(folder)
    written = []
    frame = runs_frame(found.records)
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
    atomic_write(folder / "settings.csv", found.summary.to_csv(index=False))
    written.append("settings.csv")
    order = ranked(found.summary, found.settings, found.rank_by)
    images = _plots(found, order)
    for name, data in images.items():
        atomic_write(folder / name, data)
        written.append(name)
    page = _html(found, order, images)
    atomic_write(folder / "report.html", page)
    written.append("report.html")
    return written


def _html(found: Comparison, order, images) -> str:
    records, summary, rank_by = found.records, found.summary, found.rank_by
    e = html.escape
    seeds = sorted({r.seed for r in records})
    head = "".join(
        f"<th>{e(FIGURES[n].label)}{' (' + e(FIGURES[n].unit) + ')' if FIGURES[n].unit else ''}</th>"
        for n in TABLE_FIGURES
    )
    body = "".join(
        f"<tr><td>{i}</td><td>{e(s.label)}</td>"
        + "".join(f"<td>{e(cell(summary, s.key, n))}</td>" for n in TABLE_FIGURES)
        + "</tr>"
        for i, s in enumerate(order, 1)
    )
    words = "".join(f"<li>{e(v.sentence)}</li>" for v in found.verdicts)
    legend = "".join(f"<li><b>{e(f.label)}</b>: {e(f.explain)}</li>" for f in FIGURES.values())
    body_html = f"""<p>{plural(len(records), "run")}: {plural(len(order), "setting")} × {plural(len(seeds), "seed")}. Ranked by <b>{e(rank_by)}</b>.
Each figure is the mean over seeds, with its {e(INTERVAL)} in brackets.</p>
<table><tr><th>#</th><th>setting</th>{head}</tr>{body}</table>
<h2>Recommendation</h2><p><b>{e(found.recommendation.text)}</b></p>
<h2>Verdicts</h2><ul>{words}</ul>
<p>Sanity check (Shafer 1976, Dempster's rule on Bayesian mass functions is Bayes' rule):
{e(found.identity.words())}</p>
<h2>Plots</h2>{figures_html(images)}
<h2>Figures</h2><ul>{legend}</ul>"""
    return page(f"Fusion comparison: {found.case_name}", body_html)
