"""One run of one setting on one seed: the case varied by the setting, the per-tick rows and the run's figures."""

from __future__ import annotations

import math
import time
from functools import lru_cache
from typing import TYPE_CHECKING

import numpy as np

from fusion.case_model import Case
from fusion.compare.records import RunFigures, RunRecord, RunSeries
from fusion.compare.settings import (
    ALERT_GRACE_S,
    CARRY_WINDOW_TICKS,
    P_FLOOR,
    RECOVERY_DEG,
    RECOVERY_M,
    RECOVERY_TICKS,
    Setting,
    variant,
)
from fusion.errors import FusionError
from fusion.io.case import load_case
from fusion.monitor import CARRY_ON

if TYPE_CHECKING:
    from fusion.runner import StepRow


# ----------------------------------------------------------------------------- one run
@lru_cache(maxsize=8)
def _prepared(case_path: str, reliability: float | None, calibration_file: str | None):
    """Case and sensor set per process: building the sensor models dominates a short run."""
    from fusion.io.case import apply_calibration
    from fusion.sensors.sensor_set import SensorSet

    case = load_case(case_path)
    if calibration_file is not None:
        case = apply_calibration(case, calibration_file)
    case = variant(case, reliability, None)
    return case, SensorSet(case.site, case.site.grid(case.headings), case.sensors)


def run_one(case_path: str, setting: Setting, seed: int, calibration_file: str | None = None) -> RunRecord:
    """Run one setting on one seed; returns its figures and per-tick series (picklable)."""
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
    figures, series = _figures(case, result.rows, calib)
    # Wall time of the whole run (simulation, both filters' work, figures): what the sweep schedules by.
    wall_s = time.perf_counter() - started
    return RunRecord(setting.key, seed, setting.as_dict(), figures, series, wall_s)


def calibration(p: np.ndarray, true_cell: int) -> tuple[float, float, float]:
    """(p of the true cell, probability of the cells ranked above it, Brier score) of one distribution.

    The second is the smallest nominal probability of a most-probable region that contains
    the true cell: a calibrated filter has it uniform on [0, 1] over many ticks.
    """
    p_true = float(p[true_cell])
    return p_true, float(p[p > p_true].sum()), float(p @ p) - 2.0 * p_true + 1.0


def _figures(case: Case, rows: list[StepRow], calib: list[tuple]) -> tuple[RunFigures, RunSeries]:
    t = np.array([r.t for r in rows])
    err = np.array([r.error_m for r in rows])
    herr = np.array([r.heading_error_deg for r in rows])
    p_true, level, brier = (np.array(c) for c in zip(*calib)) if calib else (np.zeros(0),) * 3
    acting = np.array([r.action != CARRY_ON for r in rows])
    windows = _fault_windows(case)
    starts = np.flatnonzero(acting & ~np.concatenate([[False], acting[:-1]]))  # first tick of each alert episode
    inside = [any(a <= t[i] <= b for a, b in windows) for i in starts]
    met = [bool(np.any(acting & (t >= a) & (t <= b))) for a, b in windows]
    recovery_s = recovered = math.nan
    carries = [i for i, r in enumerate(rows) if r.carried]
    if carries:
        back = [i for i in range(carries[0], len(rows)) if err[i] <= RECOVERY_M and herr[i] <= RECOVERY_DEG]
        recovery_s = float(t[back[0]] - t[carries[0]]) if back else math.nan
        recovered = float(bool(back) and back[0] - carries[0] <= RECOVERY_TICKS)
    figures = RunFigures(
        ticks=len(rows),
        median_error_m=float(np.median(err)),
        p95_error_m=float(np.percentile(err, 95)),
        median_heading_error_deg=float(np.median(herr)),
        p95_heading_error_deg=float(np.percentile(herr, 95)),
        in_region=float(np.mean(level < 0.95)),
        nll=float(np.mean(-np.log(np.maximum(p_true, P_FLOOR)))),
        brier=float(np.mean(brier)),
        alert_precision=float(np.mean(inside)) if len(starts) else math.nan,
        alert_recall=float(np.mean(met)) if windows else math.nan,
        false_alerts=int(len(starts) - sum(inside)),
        ms_per_step=float(np.mean([r.seconds for r in rows]) * 1e3),
        recovery_s=recovery_s,
        recovered=recovered,
    )
    series = RunSeries(
        tuple(round(float(v), 4) for v in t),
        tuple(round(float(v), 4) for v in err),
        tuple(round(float(v), 6) for v in level),
    )
    return figures, series


def fault_spans(case: Case) -> list[tuple[float, float, str]]:
    """(start s, end s, what) of every effective fault and every carry (a carry's span: the ticks it counts as
    just carried); plots shade them."""
    out = []
    for s in case.sensors:
        for f in s.faults:
            if "rate" in f.options and float(f.options["rate"]) <= 0:
                continue  # a fault that never fires is no fault
            end = f.start_s + case.run.tick_s if f.kind == "slip" else f.end_s
            out.append((f.start_s, end, f"{s.name}: {f.kind}"))
    for c in case.require_route().carries:
        out.append((c.at_s, c.at_s + CARRY_WINDOW_TICKS * case.run.tick_s, "carried"))
    return out


def _fault_windows(case: Case) -> list[tuple[float, float]]:
    """Intervals (s) during which an alert is justified: every effective fault, every carry, with the grace."""
    return [(a, b + ALERT_GRACE_S) for a, b, _ in fault_spans(case)]
