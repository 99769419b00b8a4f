"""Parallel speed-up of ``fusion compare`` beside the machine's own ceiling (a row of ``fusion bench``)."""

from __future__ import annotations

import time

from fusion.bench import BenchRow

__all__ = ["bench_sweep"]


def bench_sweep(case_path, seeds: int = 2, workers: int = 2) -> list[BenchRow]:
    """Parallel speed-up of ``fusion compare``: the case's default sweep on ``seeds`` seeds with one
    worker, then with ``workers``, into fresh folders (nothing resumed).  The ratio is one-worker time
    over parallel time, both measured in this run.

    Then how busy the workers were: the runs' own wall times over workers × elapsed, and how much
    longer the same runs took side by side than with one worker.

    Beside it, the machine's own ceiling for this work: one run of the sweep's longest setting alone,
    then ``workers`` copies of it at once in as many processes (no scheduling, no imbalance, nothing
    shared).  Copies that slow each other down (memory bandwidth, shared cache, turbo clocks) bound
    the speed-up any scheduler can reach here."""
    import os
    import tempfile

    from fusion.compare import run_in_processes, run_sweep, settings_of
    from fusion.io.case import load_case

    case = load_case(case_path)
    settings = settings_of(case.sweep)
    seed_list = list(range(case.run.seed, case.run.seed + seeds))
    seconds, records = {}, {}
    with tempfile.TemporaryDirectory() as tmp:
        for n in (1, workers):
            start = time.perf_counter()
            records[n] = run_sweep(case_path, settings, seed_list, os.path.join(tmp, f"w{n}"), workers=n)
            seconds[n] = time.perf_counter() - start
    # Where a shortfall goes: workers idle (busy share below 1: start-up, the tail of uneven runs)
    # or runs slower side by side (the same runs took longer than with one worker).
    busy = sum(r["wall_s"] for r in records[workers]) / (workers * seconds[workers])
    slower = sum(r["wall_s"] for r in records[workers]) / sum(r["wall_s"] for r in records[1])
    cost = {s.key: sum(r["wall_s"] for r in records[1] if r["key"] == s.key) for s in settings}
    longest = max(settings, key=lambda s: cost[s.key])  # as measured by the one-worker sweep
    job = (str(case_path), longest, seed_list[0], None)
    copies, failures = {}, []
    for n in (1, workers):
        start = time.perf_counter()
        run_in_processes([job] * n, n, None, lambda rec: None, lambda j, err: failures.append(err))
        copies[n] = time.perf_counter() - start
    if failures:
        raise failures[0]
    runs = len(settings) * len(seed_list)
    speed_up = seconds[1] / seconds[workers]
    ceiling = workers * copies[1] / copies[workers]
    return [
        BenchRow(
            f"{case.name}: {len(settings)} settings × {len(seed_list)} seeds",
            "both",
            f"compare sweep, {workers} workers",
            seconds[workers] * 1e3,
            seconds[1] * 1e3,
            speed_up,
            None,
            f"speed-up over one worker ({runs} runs; 'floor' column: one worker's ms); "
            f"{speed_up / ceiling:.0%} of this machine's ceiling below",
        ),
        BenchRow(
            f"{case.name}: {len(settings)} settings × {len(seed_list)} seeds",
            "both",
            f"workers busy, {workers} workers",
            busy * workers * seconds[workers] * 1e3,
            workers * seconds[workers] * 1e3,
            busy,
            None,
            f"share of the {workers} workers' time spent in runs ('best': summed run time; 'floor': "
            f"{workers} × elapsed); the runs took {slower:.2f}× their one-worker time side by side",
        ),
        BenchRow(
            f"{case.name}: {longest.label}, seed {seed_list[0]}",
            longest.backend,
            f"{workers} copies at once",
            copies[workers] * 1e3,
            copies[1] * 1e3,
            ceiling,
            None,
            f"ceiling: {workers} × one copy alone ('floor' column) over {workers} copies at once",
        ),
    ]
