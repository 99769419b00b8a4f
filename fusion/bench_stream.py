"""The stream-rate rows of ``fusion bench``: lines per CPU second through ``fusion stream``'s loop on the demo case,
per back end, with a share of the lines corrupted as a robot's link would corrupt them (``fusion.soak.soak_stream``).
Every line is answered with a decision, so the rate is what a robot streaming at that rate can sustain on one core."""

from __future__ import annotations

import time

from fusion.allocator import keep_freed_memory
from fusion.backends import BACKENDS
from fusion.bench import BenchRow

__all__ = ["bench_stream", "STREAM_TARGET", "STREAM_LINES"]

STREAM_TARGET = 200.0
"""Lines per second each back end should sustain on one core (our target)."""
STREAM_LINES = 3000
CORRUPT_SHARE = 0.1


def bench_stream(case_path, lines: int = STREAM_LINES, seed: int = 1) -> list[BenchRow]:
    """One row per back end: lines per CPU second over ``lines`` lines, after a short warm-up run that pays the
    one-time costs (imports, the site's distance field, loading the compiled loops)."""
    from fusion.io.case import load_case
    from fusion.soak import soak_stream

    case = load_case(case_path)
    kept = keep_freed_memory()  # as every command of the tool runs (the command line has made it already)
    memory = "freed arrays kept (fusion.allocator)" if kept else "freed arrays handed back (no glibc)"
    rows = []
    for backend in BACKENDS:
        soak_stream(case, backend, 50, CORRUPT_SHARE, seed)
        start = time.process_time()
        report, _ = soak_stream(case, backend, lines, CORRUPT_SHARE, seed)
        seconds = time.process_time() - start
        rate = report.steps / seconds
        verdict = "met" if rate >= STREAM_TARGET else "NOT met"
        rows.append(
            BenchRow(
                f"{case.name} stream",
                backend,
                "stream line",
                seconds / max(report.steps, 1) * 1e3,
                0.0,
                float("nan"),
                None,
                f"{rate:.0f} lines per CPU second over {report.steps:,} lines, {CORRUPT_SHARE:.0%} corrupted, "
                f"{memory}; target ≥ {STREAM_TARGET:.0f}: {verdict}",
            )
        )
    return rows
