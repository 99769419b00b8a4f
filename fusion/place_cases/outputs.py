"""The files of a run on a place graph: the observation log and truth (JSON lines), one row per tick and back end
(``steps.csv``), the summary (``summary.json``) and the picture of the beliefs at the end (``beliefs.png``)."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

from fusion import SAFETY_NOTICE, __version__
from fusion.io.outdir import atomic_write
from fusion.place_cases.run import PlaceRunResult

__all__ = ["write_place_results", "PLACE_FILES"]

PLACE_FILES = ("observations.jsonl", "truth.jsonl", "steps.csv", "summary.json", "beliefs.png")
STEP_COLUMNS = (
    "t",
    "backend",
    "truth",
    "estimate",
    "place",
    "share",
    "error_m",
    "right",
    "action",
    "conflict",
    "carried",
)


def write_place_results(result: PlaceRunResult, out_dir) -> Path:
    from fusion.view.place_graph import draw_run

    out = Path(out_dir)
    frame = result.case.frame
    atomic_write(
        out / "observations.jsonl",
        "".join(json.dumps(o.to_record()) + "\n" for t in result.ticks for o in t.observations),
    )
    atomic_write(
        out / "truth.jsonl", "".join(json.dumps(t.truth.to_record(result.case.graph)) + "\n" for t in result.ticks)
    )
    buf = io.StringIO()
    writer = csv.writer(buf)
    writer.writerow(STEP_COLUMNS)
    for r in result.rows:
        writer.writerow(
            [
                r.t,
                r.backend,
                frame.describe(r.true_cell),
                frame.describe(r.estimate_cell),
                r.place,
                f"{r.share:.4f}",
                f"{r.error_m:.2f}",
                r.right,
                r.action,
                f"{r.conflict:.4f}",
                r.carried,
            ]
        )
    atomic_write(out / "steps.csv", buf.getvalue())
    summary = {
        **result.summary(),
        "tool": f"fusion {__version__}",
        "notice": SAFETY_NOTICE,
        "case_file": result.case.path,
    }
    atomic_write(out / "summary.json", json.dumps(summary, indent=2) + "\n")
    if result.ticks:
        last = result.ticks[-1].truth
        atomic_write(out / "beliefs.png", draw_run(result.case, result.final, last.cell(frame), last.t))
    return out


def write_comparison(found, out_dir) -> list[str]:
    """``runs.csv`` (one row per setting and seed: its figures) and ``summary.json`` (means, intervals, verdicts) of
    a comparison on a graph; returns the file names."""
    from fusion.place_cases.compare import GRAPH_FIGURES

    out = Path(out_dir)
    buf = io.StringIO()
    writer = csv.writer(buf)
    writer.writerow(["key", "seed", "backend", "rule", *GRAPH_FIGURES])
    for r in found.records:
        writer.writerow(
            [r.key, r.seed, r.setting["backend"], r.setting["rule"] or "", *(r.figures[n] for n in GRAPH_FIGURES)]
        )
    atomic_write(out / "runs.csv", buf.getvalue())
    summary = {
        "case": found.case,
        "tool": f"fusion {__version__}",
        "notice": SAFETY_NOTICE,
        "seeds": list(found.seeds),
        "figures": found.summary.replace({float("nan"): None}).to_dict(orient="records"),
        "verdicts": [v.sentence for v in found.verdicts],
    }
    atomic_write(out / "summary.json", json.dumps(summary, indent=2, allow_nan=False) + "\n")
    return ["runs.csv", "summary.json"]
