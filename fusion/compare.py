"""Measured comparison of fusion schemes: one case, many seeds, a grid of settings.

A *setting* is a back end, a combination rule (evidential only), a discount factor
for the sensors and a fault rate.  Every setting runs on every seed; for one seed,
all settings that share a fault rate see **identical** readings (the simulator's
draws depend on the seed and the sensor only, never on the model's reliability or
the rule).  Each run yields one row of figures (``FIGURES``) plus its per-tick error
and calibration series, and is written to its own file as soon as it finishes, so an
interrupted sweep loses nothing and the same command resumes it.

Intervals over seeds are Student-t intervals of the mean (scipy.stats.t); the
verdict on each figure compares the two best settings seed by seed (paired, since
they saw the same readings) with the Wilcoxon signed-rank test (scipy.stats.wilcoxon).
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import os
import signal
import time
import warnings
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np

from fusion import __version__
from fusion.backends import BACKENDS, backend_kind
from fusion.errors import FusionError
from fusion.io.bounded import read_text
from fusion.io.case import Case, SweepSpec, load_case
from fusion.monitor import CARRY_ON

__all__ = [
    "Setting",
    "Figure",
    "FIGURES",
    "settings_of",
    "check_sweep",
    "variant",
    "run_one",
    "run_sweep",
    "SweepInterrupted",
    "summarise",
    "verdicts",
    "bayes_dempster_identity",
    "calibration",
    "ENGINES",
]

ENGINES = ("local", "dask")
RECOVERY_TICKS = 10
RECOVERY_M, RECOVERY_DEG = 0.5, 15.0
ALERT_GRACE_S = 2.0
"""An alert up to this long after a fault ends still counts as caused by it (common practice, no source)."""
CARRY_WINDOW_TICKS = RECOVERY_TICKS
"""Ticks after a carry during which an alert counts as a detection of it."""
P_FLOOR = 1e-12
"""Probability floor of the true cell in the negative log-likelihood (a cell with p = 0 would give ∞)."""


@dataclass(frozen=True)
class Figure:
    label: str
    better: str  # "low" or "high"
    unit: str
    explain: str


FIGURES: dict[str, Figure] = {
    "median_error_m": Figure("median error", "low", "m", "median distance of the estimate from the truth"),
    "p95_error_m": Figure("p95 error", "low", "m", "95th percentile of the distance from the truth"),
    "median_heading_error_deg": Figure("median heading error", "low", "°", "median heading error"),
    "p95_heading_error_deg": Figure("p95 heading error", "low", "°", "95th percentile of the heading error"),
    "in_region": Figure(
        "true cell in region", "high", "", "share of ticks with the true cell among the most probable cells holding 95%"
    ),
    "nll": Figure("NLL", "low", "nats", "mean −log p(true cell) (p floored at 1e-12)"),
    "brier": Figure("Brier", "low", "", "mean Brier score Σ(p − 1[true])² over cells"),
    "recovery_s": Figure("recovery", "low", "s", "seconds after a carry until within 0.5 m and 15° again"),
    "recovered": Figure("recovered in 10 ticks", "high", "", "share of carries recovered within 10 ticks"),
    "alert_precision": Figure("alert precision", "high", "", "share of alert episodes that start during a fault"),
    "alert_recall": Figure("alert recall", "high", "", "share of injected faults met by an alert"),
    "false_alerts": Figure("false alerts", "low", "", "alert episodes starting outside every fault"),
    "ms_per_step": Figure("cost", "low", "ms/step", "mean wall time of one localizer step"),
}


@dataclass(frozen=True, order=True)
class Setting:
    backend: str
    rule: str | None = None  # evidential only
    reliability: float | None = None  # None: each sensor's own, as in the case
    fault_rate: float | None = None  # None: each fault's own, as in the case
    calibrated: bool = False  # sensor parameters from the sweep's calibration file

    @property
    def key(self) -> str:
        """File-name-safe identifier, stable across runs (used to resume)."""
        parts = [self.backend] + ([self.rule] if self.rule else [])
        if self.reliability is not None:
            parts.append(f"r{self.reliability:g}")
        if self.fault_rate is not None:
            parts.append(f"f{self.fault_rate:g}")
        if self.calibrated:
            parts.append("cal")
        return "-".join(parts)

    @property
    def label(self) -> str:
        out = backend_kind(self.backend).label(self.rule)
        if self.reliability is not None:
            out += f" r={self.reliability:g}"
        if self.fault_rate is not None:
            out += f" faults={self.fault_rate:g}"
        if self.calibrated:
            out += " calibrated"
        return out

    def as_dict(self) -> dict:
        return dataclasses.asdict(self)


def check_sweep(spec: SweepSpec, where: str = "the sweep") -> None:
    """Refuse a sweep naming an unknown back end or rule, or a value out of range, listing the valid choices."""
    from fusion.backends.evidential import FILTER_RULES

    if not isinstance(spec.seeds, int) or spec.seeds < 1:
        raise FusionError(f"{where}: seeds must be a whole number ≥ 1, got {spec.seeds!r}")
    for b in spec.backends:
        if b not in BACKENDS:
            raise FusionError(f"{where}: unknown back end {b!r}; choose among: {', '.join(BACKENDS)}")
    for rule in spec.rules:
        if rule not in FILTER_RULES:
            raise FusionError(f"{where}: unknown combination rule {rule!r}; choose among: {', '.join(FILTER_RULES)}")
    for name, values in (("discount factor", spec.reliabilities), ("fault rate", spec.fault_rates)):
        for v in values:
            if not (isinstance(v, (int, float)) and math.isfinite(v) and 0 <= v <= 1):
                raise FusionError(f"{where}: {name} {v!r} is outside its range [0, 1]")
    if not spec.backends:
        raise FusionError(f"{where}: no back end to run; choose among: {', '.join(BACKENDS)}")
    for b in spec.backends:
        if BACKENDS[b].takes_rule and not spec.rules:
            raise FusionError(f"{where}: the {b} back end needs at least one rule: {', '.join(FILTER_RULES)}")


def settings_of(spec: SweepSpec, calibrated: bool = False) -> list[Setting]:
    """Every setting of the sweep; with ``calibrated``, each also with the calibrated sensor parameters."""
    check_sweep(spec)
    reliabilities = spec.reliabilities or (None,)
    fault_rates = spec.fault_rates or (None,)
    out = []
    for f in fault_rates:
        for r in reliabilities:
            for b in (b for b in BACKENDS if b in spec.backends):  # in the table's order, as tools list them
                if BACKENDS[b].takes_rule:
                    out.extend(Setting(b, rule, r, f) for rule in spec.rules)
                else:
                    out.append(Setting(b, None, r, f))
    if calibrated:
        out += [dataclasses.replace(s, calibrated=True) for s in out]
    return out


def variant(case: Case, reliability: float | None, fault_rate: float | None) -> Case:
    """The case with every non-odometry sensor's reliability and every rate-bearing fault's rate replaced."""
    sensors = []
    for s in case.sensors:
        params = s.params
        if reliability is not None and s.kind != "odometry":
            params = dataclasses.replace(params, reliability=float(reliability))
        faults = s.faults
        if fault_rate is not None:
            faults = tuple(
                dataclasses.replace(f, options={**f.options, "rate": float(fault_rate)}) if "rate" in f.options else f
                for f in faults
            )
        sensors.append(dataclasses.replace(s, params=params, faults=faults))
    return dataclasses.replace(case, sensors=tuple(sensors))


# ----------------------------------------------------------------------------- one run
@lru_cache(maxsize=8)
def _prepared(case_path: str, reliability: float | None, calibration_file: str | None):
    """Case and sensor set per process: building the sensor models dominates a short run."""
    from fusion.io.case import apply_calibration
    from fusion.localizer import SensorSet

    case = load_case(case_path)
    if calibration_file is not None:
        case = apply_calibration(case, calibration_file)
    case = variant(case, reliability, None)
    return case, SensorSet(case.site, case.site.grid(case.headings), case.sensors)


def run_one(case_path: str, setting: Setting, seed: int, calibration_file: str | None = None) -> dict:
    """Run one setting on one seed; returns its figures and per-tick series (plain data, picklable)."""
    from fusion.runner import run_case

    if setting.calibrated and calibration_file is None:
        raise FusionError(f"setting {setting.label} needs a calibration file")
    started = time.perf_counter()
    base, sensors = _prepared(str(case_path), setting.reliability, calibration_file if setting.calibrated else None)
    case = variant(base, None, setting.fault_rate)
    grid = sensors.grid
    calib = []  # per tick: (p_true, level of the true cell, brier)

    def record(tick, decisions, localizers):
        tr = tick.truth
        p = localizers[setting.backend].filter.distribution()
        calib.append(calibration(p, grid.cell_of(tr.x_m, tr.y_m, math.radians(tr.heading_deg))))

    result = run_case(
        case,
        backends=[setting.backend],
        rule=setting.rule or case.run.rule,
        on_tick=record,
        seed=seed,
        sensors=sensors,
    )
    rows = [r.values for r in result.rows]
    figures = _figures(case, rows, calib)
    # Wall time of the whole run (simulation, both filters' work, figures): what the sweep schedules by.
    wall_s = time.perf_counter() - started
    return {"setting": setting.as_dict(), "key": setting.key, "seed": seed, "wall_s": wall_s, **figures}


def calibration(p: np.ndarray, true_cell: int) -> tuple[float, float, float]:
    """(p of the true cell, probability of the cells ranked above it, Brier score) of one distribution.

    The second is the smallest nominal probability of a most-probable region that contains
    the true cell: a calibrated filter has it uniform on [0, 1] over many ticks.
    """
    p_true = float(p[true_cell])
    return p_true, float(p[p > p_true].sum()), float(p @ p) - 2.0 * p_true + 1.0


def _figures(case: Case, rows: list[dict], calib: list[tuple]) -> dict:
    t = np.array([r["t"] for r in rows])
    err = np.array([r["error_m"] for r in rows])
    herr = np.array([r["heading_error_deg"] for r in rows])
    p_true, level, brier = (np.array(c) for c in zip(*calib)) if calib else (np.zeros(0),) * 3
    acting = np.array([r["action"] != CARRY_ON for r in rows])
    windows = _fault_windows(case)
    starts = np.flatnonzero(acting & ~np.concatenate([[False], acting[:-1]]))  # first tick of each alert episode
    inside = [any(a <= t[i] <= b for a, b in windows) for i in starts]
    met = [bool(np.any(acting & (t >= a) & (t <= b))) for a, b in windows]
    out = {
        "ticks": len(rows),
        "median_error_m": float(np.median(err)),
        "p95_error_m": float(np.percentile(err, 95)),
        "median_heading_error_deg": float(np.median(herr)),
        "p95_heading_error_deg": float(np.percentile(herr, 95)),
        "in_region": float(np.mean(level < 0.95)),
        "nll": float(np.mean(-np.log(np.maximum(p_true, P_FLOOR)))),
        "brier": float(np.mean(brier)),
        "alert_precision": float(np.mean(inside)) if len(starts) else math.nan,
        "alert_recall": float(np.mean(met)) if windows else math.nan,
        "false_alerts": int(len(starts) - sum(inside)),
        "ms_per_step": float(np.mean([r["seconds"] for r in rows]) * 1e3),
        "recovery_s": math.nan,
        "recovered": math.nan,
    }
    carries = [i for i, r in enumerate(rows) if r["carried"]]
    if carries:
        back = [i for i in range(carries[0], len(rows)) if err[i] <= RECOVERY_M and herr[i] <= RECOVERY_DEG]
        out["recovery_s"] = float(t[back[0]] - t[carries[0]]) if back else math.nan
        out["recovered"] = float(bool(back) and back[0] - carries[0] <= RECOVERY_TICKS)
    out["series"] = {
        "t": [round(float(v), 4) for v in t],
        "error_m": [round(float(v), 4) for v in err],
        "level": [round(float(v), 6) for v in level],
    }
    return out


def _fault_windows(case: Case) -> list[tuple[float, float]]:
    """Intervals (s) during which an alert is justified: every effective fault, every carry."""
    out = []
    for s in case.sensors:
        for f in s.faults:
            if "rate" in f.options and float(f.options["rate"]) <= 0:
                continue  # a fault that never fires is no fault
            end = f.start_s + case.run.tick_s if f.kind == "slip" else f.end_s
            out.append((f.start_s, end + ALERT_GRACE_S))
    for c in case.require_route().carries:
        out.append((c.at_s, c.at_s + CARRY_WINDOW_TICKS * case.run.tick_s + ALERT_GRACE_S))
    return out


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


def _load_done(folder: Path, wanted: set[tuple[str, int]]) -> dict[tuple[str, int], dict]:
    done = {}
    for f in sorted((folder / "runs").glob("*.json")):
        try:
            rec = json.loads(read_text(f, MAX_RUN_FILE_BYTES, "run file", regular=True))
            key = (rec["key"], int(rec["seed"]))
        except (FusionError, ValueError, KeyError, TypeError, RecursionError):
            continue  # not a run file of ours (files are renamed into place whole, so never half a run)
        if key in wanted and _complete(rec):
            done[key] = rec  # a run file lacking a figure (an older tool, a hand edit) is run again
    return done


MAX_RUN_FILE_BYTES = 1024**2


def _complete(rec: dict) -> bool:
    """A run record with every figure a number (or null where the figure does not apply) and its setting."""
    return isinstance(rec.get("setting"), dict) and all(
        name in rec and (rec[name] is None or (isinstance(rec[name], (int, float)) and not isinstance(rec[name], bool)))
        for name in FIGURES
    )


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
    on_done: Callable[[dict], None] | None = None,
    calibration=None,
) -> list[dict]:
    """Run every setting on every seed; returns one record per run (finished earlier or now).

    Runs already in ``out_dir/runs`` for the same case file are reused, so an interrupted
    sweep resumes where it stopped.  ``on_start(total, already_done)`` and ``on_done(record)``
    drive a progress display.
    """
    if engine not in ENGINES:
        raise FusionError(f"unknown engine {engine!r}; choose among: {', '.join(ENGINES)}")
    case_path = str(case_path)
    seeds = list(seeds)
    folder = Path(out_dir)
    calibration = None if calibration is None else str(calibration)
    digest = sweep_digest(case_path, calibration)
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
    _atomic_json(
        manifest,
        {
            "case": case_path,
            "case_sha256": digest,
            "tool": f"fusion {__version__}",
            "seeds": seeds,
            "settings": [s.key for s in settings],
        },
    )
    wanted = [(s, seed) for seed in seeds for s in settings]
    done = _load_done(folder, {(s.key, seed) for s, seed in wanted})
    todo = [(s, seed) for s, seed in wanted if (s.key, seed) not in done]
    if on_start:
        on_start(len(wanted), len(done))

    def finished(rec: dict) -> None:
        _atomic_json(folder / "runs" / f"{rec['key']}-seed{rec['seed']}.json", rec)
        done[(rec["key"], rec["seed"])] = rec
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
            f"interrupted: {len(done)} of {len(wanted)} runs are saved in {folder / 'runs'}; "
            "run the same command again to resume"
        ) from None
    if failures:
        raise FusionError(
            f"{len(failures)} of {len(todo)} runs failed (the {len(done)} finished runs are saved in "
            f"{folder / 'runs'}); first: {failures[0]}"
        )
    return [done[(s.key, seed)] for s, seed in wanted if (s.key, seed) in done]


def longest_measured_first(records) -> Callable[[list], list]:
    """The order in which to start the remaining jobs: settings not yet measured first (one run
    of each tells what it costs), then by the mean wall time of the setting's finished runs, longest
    first (Graham 1969, "Bounds on multiprocessing timing anomalies": longest processing time first
    keeps the idle tail at the end short).  ``records`` is a live view: runs that land update it."""

    def cost(job) -> float:
        times = [r["wall_s"] for r in records if r["key"] == job[1].key and "wall_s" in r]
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
        import time

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
        cluster = LocalCluster(
            n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=None, env=_ONE_THREAD
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


# ----------------------------------------------------------------------------- figures over seeds
def summarise(records: list[dict], settings: list[Setting], level: float = 0.95):
    """One row per setting and figure: runs, mean and its Student-t interval over seeds (pandas DataFrame)."""
    import pandas as pd
    from scipy import stats

    rows = []
    for s in settings:
        mine = [r for r in records if r["key"] == s.key]
        for name in FIGURES:
            values = np.array([r[name] for r in mine], dtype=float)
            values = values[np.isfinite(values)]
            n = len(values)
            mean = float(values.mean()) if n else math.nan
            lo = hi = math.nan
            if n >= 2:
                sem = float(stats.sem(values))
                lo, hi = (mean, mean) if sem == 0 else (float(v) for v in stats.t.interval(level, n - 1, mean, sem))
            rows.append(
                {"setting": s.label, "key": s.key, "figure": name, "runs": n, "mean": mean, "low": lo, "high": hi}
            )
    return pd.DataFrame(rows, columns=["setting", "key", "figure", "runs", "mean", "low", "high"])


def verdicts(records: list[dict], settings: list[Setting], figures: Iterable[str] = FIGURES) -> list[dict]:
    """Per figure: the best setting, the runner-up, and how sure that order is (paired over seeds)."""
    from scipy import stats

    by_key = {s.key: s for s in settings}
    out = []
    for name in figures:
        fig = FIGURES[name]
        sign = 1.0 if fig.better == "low" else -1.0
        per = {}
        for s in settings:
            vals = {r["seed"]: float(r[name]) for r in records if r["key"] == s.key and math.isfinite(float(r[name]))}
            if vals:
                per[s.key] = vals
        if len(per) < 2:
            continue
        ranked = sorted(per, key=lambda k: sign * float(np.mean(list(per[k].values()))))
        best, second = ranked[0], ranked[1]
        common = sorted(set(per[best]) & set(per[second]))
        diff = np.array([sign * (per[second][k] - per[best][k]) for k in common])  # > 0: best is better
        # Rounding is no difference: exact Dempster-Shafer with probabilistic motion places the robot as
        # Bayes does, and their figures then differ by 1e-16, which a rank test would call "clear".
        scale = np.array([max(1.0, abs(per[second][k]), abs(per[best][k])) for k in common])
        diff[np.abs(diff) <= ROUNDING * scale] = 0.0
        wins, losses = int((diff > 0).sum()), int((diff < 0).sum())
        mb = float(np.mean(list(per[best].values())))
        ms = float(np.mean(list(per[second].values())))
        p = math.nan
        if len(common) >= 6 and np.any(diff != 0):
            with warnings.catch_warnings():  # scipy notes when ties force its normal approximation
                warnings.simplefilter("ignore")
                p = float(stats.wilcoxon(diff, alternative="two-sided").pvalue)
        if all(_same(float(np.mean(list(v.values()))), mb) for k, v in per.items() if k != best):
            out.append(_tie(name, fig, mb, len(per)))
            continue
        if len(common) < 6:
            sure = "too few paired seeds to tell"
        elif not np.any(diff != 0):
            sure = "a tie on every seed (to rounding)"
        elif p < 0.01:
            sure = "clear"
        elif p < 0.05:
            sure = "likely"
        else:
            sure = "not distinguishable"
        out.append(
            {
                "figure": name,
                "best": by_key[best].label,
                "runner_up": by_key[second].label,
                "best_mean": mb,
                "runner_up_mean": ms,
                "paired_seeds": len(common),
                "wins": wins,
                "losses": losses,
                "p_value": p,
                "sureness": sure,
                "sentence": (
                    f"{fig.label}: {by_key[best].label} is best ({_fmt(mb, fig)}) ahead of {by_key[second].label} "
                    f"({_fmt(ms, fig)}); better on {wins} of {len(common)} paired seeds, worse on {losses}"
                    + (f", Wilcoxon p = {p:.2g}" if math.isfinite(p) else "")
                    + f": {sure}."
                ),
            }
        )
    return out


ROUNDING = 1e-9
"""Relative difference below which two settings' figures count as equal (rounding, our choice)."""


def _same(a: float, b: float) -> bool:
    return abs(a - b) <= ROUNDING * max(1.0, abs(a), abs(b))


def _tie(name: str, fig: Figure, value: float, settings: int) -> dict:
    return {
        "figure": name,
        "best": None,
        "runner_up": None,
        "best_mean": value,
        "runner_up_mean": value,
        "paired_seeds": 0,
        "wins": 0,
        "losses": 0,
        "p_value": math.nan,
        "sureness": "a tie",
        "sentence": f"{fig.label}: all {settings} settings tie at {_fmt(value, fig)}.",
    }


def _fmt(v: float, fig: Figure) -> str:
    if fig.unit in ("", "nats"):
        return f"{v:.3g}" + (f" {fig.unit}" if fig.unit else "")
    return f"{v:.3g} {fig.unit}"


# ----------------------------------------------------------------------------- sanity row
def bayes_dempster_identity(case: Case, seed: int | None = None, cells: int = 512, readings: int = 12) -> dict:
    """Bayes' rule and Dempster's rule on Bayesian mass functions from fully reliable sensors must agree.

    Shafer (1976), A Mathematical Theory of Evidence: Dempster's rule restricted to Bayesian
    mass functions is Bayes' rule with a uniform prior.  Checked on the case's own readings
    (the first ``readings`` of the run, reliability forced to 1) over the ``cells`` free cells
    nearest the start pose, so the general set-based rule stays cheap.
    """
    from fusion.belief.mass import MassFunction
    from fusion.belief.posterior import Posterior
    from fusion.belief.rules import dempster
    from fusion.localizer import SensorSet
    from fusion.simulate import simulate

    reliable = variant(case, 1.0, None)
    grid = reliable.site.grid(reliable.headings)
    sensors = SensorSet(reliable.site, grid, reliable.sensors)
    ticks = simulate(reliable, seed=seed)
    x0, y0 = ticks[0].truth.x_m, ticks[0].truth.y_m
    xs, ys, _ = grid.poses_of(np.arange(grid.n_cells))
    free = grid.broadcast(reliable.site.free).astype(bool)
    d2 = np.where(free, (xs - x0) ** 2 + (ys - y0) ** 2, np.inf)
    window = np.sort(np.argsort(d2, kind="stable")[: min(cells, int(free.sum()))])
    post = Posterior.uniform(len(window))
    mass = MassFunction.bayesian(np.full(len(window), 1.0 / len(window)))
    used = 0
    for tick in ticks:
        for obs in tick.observations:
            if obs.kind == "odometry" or used >= readings:
                continue
            lik = sensors.encode(obs).likelihood[window]
            if float(lik @ post.probabilities) <= 0:
                continue  # this reading rules the whole window out: both rules refuse it alike
            post.update(lik)
            mass = dempster(mass, MassFunction.bayesian(lik / lik.sum()))
            used += 1
        if used >= readings:
            break
    gap = float(np.max(np.abs(mass.pignistic() - post.probabilities))) if used else math.nan
    return {"readings": used, "cells": int(len(window)), "max_abs_difference": gap, "holds": bool(gap < 1e-9)}
