"""Parallel speed-up of ``fusion compare`` beside the machine's own ceiling (a row of ``fusion bench``)."""

from __future__ import annotations

import time

from fusion.bench import BenchRow

__all__ = ["bench_sweep"]


def bench_sweep(case_path, seeds: int = 2, workers: int = 2) -> list[BenchRow]:
    """Parallel speed-up of ``fusion compare``: the case's default sweep on ``seeds`` seeds with one worker,
    then with ``workers`` (fresh folders), as a ratio measured in this run; how busy the workers were; and
    the machine's own ceiling for this work (``_copies_at_once``: copies of the longest run that slow each
    other down bound the speed-up any scheduler can reach here)."""
    import os
    import tempfile

    from fusion.compare import run_sweep, settings_of
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
    busy = sum(r.wall_s for r in records[workers]) / (workers * seconds[workers])
    slower = sum(r.wall_s for r in records[workers]) / sum(r.wall_s for r in records[1])
    cost = {s.key: sum(r.wall_s for r in records[1] if r.key == s.key) for s in settings}
    longest = max(settings, key=lambda s: cost[s.key])  # as measured by the one-worker sweep
    copies = _copies_at_once((str(case_path), longest, seed_list[0], None), workers)
    return _rows(case.name, settings, seed_list, workers, seconds, busy, slower, longest, copies)


def _copies_at_once(job, workers: int) -> dict[int, float]:
    """Seconds for one run alone and for ``workers`` copies of it at once, in as many processes."""
    from fusion.compare import run_in_processes

    copies, failures = {}, []
    for n in (1, workers):
        start = time.perf_counter()
        run_in_processes([job] * n, n, None, lambda rec: None, lambda j, err: failures.append(err))
        copies[n] = time.perf_counter() - start
    if failures:
        raise failures[0]
    return copies


def _rows(name, settings, seed_list, workers, seconds, busy, slower, longest, copies) -> list[BenchRow]:
    """The sweep's rows: speed-up, the workers' busy share, and the machine's ceiling."""
    runs = len(settings) * len(seed_list)
    speed_up = seconds[1] / seconds[workers]
    ceiling = workers * copies[1] / copies[workers]
    return [
        BenchRow(
            f"{name}: {len(settings)} settings × {len(seed_list)} seeds",
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
            f"{name}: {len(settings)} settings × {len(seed_list)} seeds",
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
            f"{name}: {longest.label}, seed {seed_list[0]}",
            longest.backend,
            f"{workers} copies at once",
            copies[workers] * 1e3,
            copies[1] * 1e3,
            ceiling,
            None,
            f"ceiling: {workers} × one copy alone ('floor' column) over {workers} copies at once",
        ),
    ]
