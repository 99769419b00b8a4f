"""Running a sweep: resumable run files, worker processes or a Dask cluster, interruption without loss."""

from __future__ import annotations

import hashlib
import json
import math
import os
import signal
import time
from collections.abc import Callable, Iterable
from pathlib import Path

import numpy as np

from fusion import __version__
from fusion.backends import BACKENDS
from fusion.compare.records import RunRecord
from fusion.compare.runs import run_one
from fusion.compare.settings import ENGINES, Setting
from fusion.errors import FusionError
from fusion.io.bounded import read_text
from fusion.words import plural


# ----------------------------------------------------------------------------- the sweep
class SweepInterrupted(FusionError):
    """The sweep was stopped (Ctrl-C); every finished run is on disk and the same command resumes."""


def _case_digest(path: str) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def _atomic_json(path: Path, data) -> None:
    from fusion.io.outdir import atomic_write

    atomic_write(path, json.dumps(data, allow_nan=True) + "\n")


def sweep_digest(case_path, calibration=None) -> str:
    """What a sweep's results depend on: the case file's bytes, and the calibration file's if one is given."""
    digest = _case_digest(str(case_path))
    if calibration is not None:
        digest = hashlib.sha256((digest + _case_digest(str(calibration))).encode()).hexdigest()
    return digest


def _load_done(folder: Path, wanted: set[tuple[str, int]]) -> dict[tuple[str, int], RunRecord]:
    done = {}
    for f in sorted((folder / "runs").glob("*.json")):
        try:
            rec = RunRecord.from_json(json.loads(read_text(f, MAX_RUN_FILE_BYTES, "run file", regular=True)))
        except (FusionError, ValueError, RecursionError):
            continue  # not a run file of ours (files are renamed into place whole, so never half a run)
        # A run file lacking a figure (an older tool, a hand edit) is None here, and is run again.
        if rec is not None and (rec.key, rec.seed) in wanted:
            done[(rec.key, rec.seed)] = rec
    return done


MAX_RUN_FILE_BYTES = 1024**2


def run_sweep(
    case_path,
    settings: list[Setting],
    seeds: Iterable[int],
    out_dir,
    *,
    workers: int | None = None,
    engine: str = "local",
    address: str | None = None,
    on_start: Callable[[int, int], None] | None = None,
    on_plan: Callable[[list], None] | None = None,
    on_done: Callable[[RunRecord], None] | None = None,
    calibration=None,
) -> list[RunRecord]:
    """Run every setting on every seed; returns one record per run (finished earlier or now).  Runs already in
    ``out_dir/runs`` for the same case file are reused, so an interrupted sweep resumes where it stopped.
    ``on_plan(todo)`` (the (setting, seed) pairs still to run), ``on_start(total, already_done)`` and
    ``on_done(record)`` drive a progress display."""
    if engine not in ENGINES:
        raise FusionError(f"unknown engine {engine!r}; choose among: {', '.join(ENGINES)}")
    case_path = str(case_path)
    seeds = list(seeds)
    folder = Path(out_dir)
    calibration = None if calibration is None else str(calibration)
    _claim_manifest(folder, case_path, sweep_digest(case_path, calibration), seeds, settings)
    wanted = [(s, seed) for seed in seeds for s in settings]
    done = _load_done(folder, {(s.key, seed) for s, seed in wanted})
    todo = [(s, seed) for s, seed in wanted if (s.key, seed) not in done]
    if on_plan:
        on_plan(todo)
    if on_start:
        on_start(len(wanted), len(done))

    def finished(rec: RunRecord) -> None:
        _atomic_json(folder / "runs" / f"{rec.key}-seed{rec.seed}.json", rec.to_json())
        done[(rec.key, rec.seed)] = rec
        if on_done:
            on_done(rec)

    failures: list[str] = []

    def failed(job, err: BaseException) -> None:
        failures.append(f"{job[1].label}, seed {job[2]}: {type(err).__name__}: {err}")

    workers = max(1, min(workers or os.cpu_count() or 1, len(todo) or 1))  # never more processes than runs
    try:
        if todo:
            jobs = [(case_path, s, seed, calibration) for s, seed in todo]
            order = longest_measured_first(done.values())
            (_run_dask if engine == "dask" else run_in_processes)(jobs, workers, address, finished, failed, order)
    except KeyboardInterrupt:
        raise SweepInterrupted(
            f"interrupted: {len(done)} of {plural(len(wanted), 'run')} saved in {folder / 'runs'}; "
            "run the same command again to resume"
        ) from None
    _refuse_failures(failures, len(todo), len(done), folder)
    return [done[(s.key, seed)] for s, seed in wanted if (s.key, seed) in done]


def _refuse_failures(failures: list[str], tried: int, saved: int, folder: Path) -> None:
    """Raise, naming the first failure, when any run of a sweep failed; the finished runs are already saved."""
    if failures:
        raise FusionError(
            f"{len(failures)} of {plural(tried, 'run')} failed (the {plural(saved, 'finished run')} saved in "
            f"{folder / 'runs'}); first: {failures[0]}"
        )


def _claim_manifest(folder: Path, case_path: str, digest: str, seeds: list[int], settings: list[Setting]) -> None:
    """Write ``sweep.json`` (the case's digest, seeds, settings), refusing a folder that holds another case's runs."""
    manifest = folder / "sweep.json"
    if manifest.exists():
        try:
            old = json.loads(read_text(manifest, MAX_RUN_FILE_BYTES, "sweep record", regular=True))
        except (FusionError, ValueError, RecursionError):
            old = {}
        if not isinstance(old, dict) or old.get("case_sha256") != digest:
            raise FusionError(
                f"{folder} holds results of a different case file (or the case changed since); "
                "pass --out to write elsewhere, or --replace to delete them and start again"
            )
    (folder / "runs").mkdir(parents=True, exist_ok=True)
    record = {
        "case": case_path,
        "case_sha256": digest,
        "tool": f"fusion {__version__}",
        "seeds": seeds,
        "settings": [s.key for s in settings],
    }
    _atomic_json(manifest, record)


def longest_measured_first(records) -> Callable[[list], list]:
    """The order in which to start the remaining jobs: settings not yet measured first (one run
    of each tells what it costs), then by the mean wall time of the setting's finished runs, longest
    first (Graham 1969, "Bounds on multiprocessing timing anomalies": longest processing time first
    keeps the idle tail at the end short).  ``records`` is a live view: runs that land update it."""

    def cost(job) -> float:
        times = [r.wall_s for r in records if r.key == job[1].key and math.isfinite(r.wall_s)]
        # Unmeasured first; among them the back ends with a rule (the evidential one costs several Bayes runs).
        return math.inf if not times else float(np.mean(times))

    def order(jobs: list) -> list:
        return sorted(jobs, key=lambda job: (-cost(job), not BACKENDS[job[1].backend].takes_rule))

    return order


def _quiet_worker(parent: int | None = None) -> None:
    # Ctrl-C is for the parent, which stops the sweep cleanly; workers just end with it.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if parent is not None:
        _end_with_parent(parent)


PARENT_POLL_S = 1.0
"""How often a worker checks that the sweep that started it is still there."""


def _end_with_parent(parent: int) -> None:
    """End this worker when its parent ends, even by ``kill -9`` (which runs no clean-up in the parent):
    the kernel's parent-death signal where Linux offers it, and a watch on the parent's id everywhere."""
    import threading

    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, signal.SIGKILL, 0, 0, 0)  # PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass  # not Linux: the watch below does it

    def watch() -> None:

        while True:
            if os.getppid() != parent:
                os._exit(1)
            time.sleep(PARENT_POLL_S)

    if os.getppid() != parent:
        os._exit(1)
    threading.Thread(target=watch, name="parent-watch", daemon=True).start()


_ONE_THREAD = {v: "1" for v in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")}


def run_in_processes(jobs, workers, address, finished, failed, order=None, target=None) -> None:
    """Run ``run_one(*job)`` for every job on ``workers`` fresh local processes, reporting each result
    to ``finished`` (or its exception to ``failed``) as soon as it is ready.  ``order(remaining)``, if
    given, is asked for the next job each time a worker comes free (so it can use the runs that landed).
    ``target``: a module-level function to call instead of ``run_one``."""
    target = run_one if target is None else target
    import multiprocessing as mp
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait

    # Fresh processes with single-threaded BLAS: one run per core, none fighting over cores (two
    # two-threaded workers on two cores ran ~15× slower here).
    saved = {k: os.environ.get(k) for k in _ONE_THREAD}
    os.environ.update(_ONE_THREAD)
    pool = ProcessPoolExecutor(
        workers, mp_context=mp.get_context("spawn"), initializer=_quiet_worker, initargs=(os.getpid(),)
    )
    try:
        waiting = list(jobs)
        pending = {}

        def submit_next() -> None:
            while waiting:
                if order is not None:
                    waiting[:] = order(waiting)
                job = waiting.pop(0)
                try:
                    pending[pool.submit(target, *job)] = job
                    return
                except RuntimeError as err:  # a broken pool (a worker died): every run left fails, none hangs
                    failed(job, err)

        # One job per worker in flight, so each next job is chosen knowing what has landed.  The pool
        # starts its processes on the first submits, so the variables stay set until then.
        for _ in range(workers):
            submit_next()
        _restore(saved)
        while pending:
            ready, _ = wait(pending, return_when=FIRST_COMPLETED)
            for f in ready:
                job = pending.pop(f)
                try:
                    rec = f.result()
                except Exception as err:  # one bad run must not lose the others
                    failed(job, err)
                else:
                    finished(rec)
                submit_next()
    except BaseException:
        # Stopped (Ctrl-C) or failed: end the workers now rather than wait for their runs to finish.
        for proc in list(getattr(pool, "_processes", {}).values()):
            proc.terminate()
        raise
    finally:
        _restore(saved)
        pool.shutdown(wait=True, cancel_futures=True)


def _restore(saved: dict) -> None:
    for k, v in saved.items():
        if v is None:
            os.environ.pop(k, None)
        else:
            os.environ[k] = v


def _run_dask(jobs, workers, address, finished, failed, order=None) -> None:
    try:
        from distributed import Client, LocalCluster, as_completed
    except ImportError:
        raise FusionError("the dask engine needs the optional extra: pip install 'fusion-localize[dask]'") from None
    cluster = None
    if address:
        client = Client(address)
    else:
        # The scheduler starts its HTTP server even with no dashboard, on 8787 unless told otherwise, and a second
        # sweep on the same machine then warned (or failed, where warnings are errors): any free port (":0"), and
        # still no dashboard (a given address would otherwise switch it on).
        cluster = LocalCluster(
            n_workers=workers,
            threads_per_worker=1,
            processes=True,
            dashboard_address=":0",
            scheduler_kwargs={"dashboard": False},
            env=_ONE_THREAD,
        )
        client = Client(cluster)
    try:
        # The cluster schedules by itself; the order only says which runs to hand it first.
        jobs = order(list(jobs)) if order is not None else jobs
        futures = {client.submit(run_one, *job, pure=False): job for job in jobs}
        for f in as_completed(list(futures)):
            try:
                rec = f.result()
            except Exception as err:  # one bad run must not lose the others
                failed(futures[f], err)
            else:
                finished(rec)
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
