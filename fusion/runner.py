"""Run a case: simulate it, drive one ``Localizer`` per back end on identical readings, record every tick.

Results go to an output folder: ``observations.jsonl`` (the log, one reading a line),
``truth.jsonl``, ``steps.csv`` (one row per tick and back end), ``summary.json`` (the same for the
same case and seed, byte for byte) and ``timing.json`` (wall times, which vary from run to run).
Each file is written to a temporary name and renamed into place, so a reader never
sees half a file, and the folder is created only once the case has been validated.
"""

from __future__ import annotations

import csv
import io
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from fusion import SAFETY_NOTICE, __version__
from fusion.case_model import Case
from fusion.io.csv_cells import number_cell
from fusion.io.outdir import atomic_write
from fusion.localizer import Decision, Localizer
from fusion.monitor import ALERT, CARRY_ON, QUARANTINE, RELOCALIZE, Policy
from fusion.sensors.sensor_set import SensorSet
from fusion.simulate import Tick, simulate
from fusion.step_row import FIGURE_COLUMNS, decision_cells, pose_errors

__all__ = ["StepRow", "RunEvent", "RunResult", "run_case", "write_results", "log_text", "RESULT_FILES", "STEP_COLUMNS"]

STEP_COLUMNS = (
    "t",
    "backend",
    "true_x_m",
    "true_y_m",
    "true_heading_deg",
    "x_m",
    "y_m",
    "heading_deg",
    "error_m",
    "heading_error_deg",
    *FIGURE_COLUMNS,
    "blame",
    "quarantined",
    "faults",
    "carried",
    "seconds",
)


TIMING_KEYS = ("first_step_ms", "mean_step_ms", "p95_step_ms")
"""Summary figures that are wall times: written to timing.json, not summary.json.  The first tick is timed apart:
it carries the one-time start-up of the process (the compiled loops load on first use, about 0.5 s), which would
lift the mean above the 95th percentile of the ticks that follow."""


@dataclass(frozen=True)
class StepRow:
    """One tick of one back end in a simulated run: the truth, the decision, and how far apart they are."""

    t: float
    backend: str
    true_x_m: float
    true_y_m: float
    true_heading_deg: float
    error_m: float
    heading_error_deg: float
    decision: Decision
    faults: tuple[str, ...]
    carried: bool

    @property
    def action(self) -> str:
        return self.decision.action

    @property
    def seconds(self) -> float:
        return self.decision.seconds

    @classmethod
    def of(cls, tick: Tick, d: Decision) -> StepRow:
        tr = tick.truth
        err, herr = pose_errors(d, tr.x_m, tr.y_m, tr.heading_deg)
        return cls(
            tr.t, d.backend, tr.x_m, tr.y_m, tr.heading_deg % 360, err, herr, d, tuple(tr.faults), bool(tr.carried)
        )

    def cells(self) -> dict:
        """The row of ``steps.csv`` (``STEP_COLUMNS``)."""
        return {
            "t": self.t,
            "backend": self.backend,
            "true_x_m": self.true_x_m,
            "true_y_m": self.true_y_m,
            "true_heading_deg": self.true_heading_deg,
            "error_m": self.error_m,
            "heading_error_deg": self.heading_error_deg,
            **decision_cells(self.decision),
            "faults": ";".join(self.faults),
            "carried": self.carried,
            "seconds": self.seconds,
        }


@dataclass(frozen=True)
class RunEvent:
    """A tick on which a back end's monitor acted or gave reasons."""

    t: float
    backend: str
    action: str
    reasons: tuple[str, ...]

    def to_json(self) -> dict:
        return {"t": self.t, "backend": self.backend, "action": self.action, "reasons": list(self.reasons)}


@dataclass
class RunResult:
    case: Case
    ticks: list[Tick]
    rows: list[StepRow] = field(default_factory=list)
    events: list[RunEvent] = field(default_factory=list)  # monitor actions other than "carry on", and reasons
    backends: tuple[str, ...] = ()
    rule: str = ""

    def rows_of(self, backend: str) -> list[StepRow]:
        return [r for r in self.rows if r.backend == backend]

    def events_of(self, backend: str) -> list[RunEvent]:
        return [e for e in self.events if e.backend == backend]

    def summary(self) -> dict:
        out = {
            "case": self.case.name,
            "seed": self.case.run.seed,
            "ticks": len(self.ticks),
            "duration_s": self.ticks[-1].truth.t if self.ticks else 0.0,
            "tool": f"fusion {__version__}",
            "notice": SAFETY_NOTICE,
            "settings": {
                "backends": list(self.backends or self.case.run.backends),
                "rule": self.rule or self.case.run.rule,
                "motion": self.case.run.motion,
                "max_focal": self.case.run.max_focal,
                "case_file": self.case.path,
            },
            "backends": {},
        }
        for backend in self.backends or self.case.run.backends:
            mine = self.rows_of(backend)
            if not mine:
                continue
            err = np.array([r.error_m for r in mine])
            herr = np.array([r.heading_error_deg for r in mine])
            secs = np.array([r.seconds for r in mine])
            steady = secs[1:] if secs.size > 1 else secs  # the ticks after the first (see TIMING_KEYS)
            actions = [r.action for r in mine]
            quiet = err[[not (r.faults or r.carried) for r in mine]]  # ticks with nothing being injected
            out["backends"][backend] = {
                "median_error_m": float(np.median(err)),
                "p95_error_m": float(np.percentile(err, 95)),
                "p95_error_quiet_m": float(np.percentile(quiet, 95)) if quiet.size else None,
                "median_heading_error_deg": float(np.median(herr)),
                "within_0_5_m_and_15_deg": float(np.mean((err <= 0.5) & (herr <= 15.0))),
                "alerts": actions.count(ALERT),
                "relocalizations": actions.count(RELOCALIZE),
                "quarantines": actions.count(QUARANTINE),
                "first_step_ms": float(secs[0] * 1e3),
                "mean_step_ms": float(steady.mean() * 1e3),
                "p95_step_ms": float(np.percentile(steady, 95) * 1e3),
            }
        return out


def run_case(
    case: Case, backends=None, rule: str | None = None, on_tick=None, seed: int | None = None, sensors=None
) -> RunResult:
    """Simulate ``case`` and run the back ends side by side; ``on_tick(tick, decisions, localizers)`` is called
    after each tick.  ``sensors``: a ``SensorSet`` of this case to reuse (building one costs a few seconds)."""
    backends = tuple(backends or case.run.backends)
    if sensors is None:
        sensors = SensorSet(case.site, case.site.grid(case.headings), case.sensors)
    policy = Policy(**case.run.policy)
    localizers = {
        b: Localizer(
            b,
            sensors,
            policy,
            rule=rule or case.run.rule,
            max_focal=case.run.max_focal,
            motion=case.run.motion,
            seed=case.run.seed if seed is None else seed,
            settings=case.run.settings_of(b),
        )
        for b in backends
    }
    ticks = simulate(case, seed=seed)
    result = RunResult(case, ticks, backends=backends, rule=rule or case.run.rule)
    if ticks and case.require_route().start_known:
        first = ticks[0].truth
        for loc in localizers.values():
            loc.start_at(first.x_m, first.y_m, first.heading_deg, covariance=case.run.start_covariance)
    for tick in ticks:
        odometry = next((o for o in tick.observations if o.moves), None)
        readings = [o for o in tick.observations if not o.moves]
        decisions = {}
        for name, loc in localizers.items():
            d = loc.step(odometry, readings)
            decisions[name] = d
            result.rows.append(StepRow.of(tick, d))
            if d.action != CARRY_ON or d.reasons:
                result.events.append(RunEvent(tick.truth.t, name, d.action, tuple(d.reasons)))
        if on_tick is not None:
            on_tick(tick, decisions, localizers)
    return result


def log_text(ticks: list[Tick]) -> tuple[str, str]:
    """The observation log and the truth file of simulated ticks, as JSON lines."""
    log = "".join(json.dumps(o.to_record()) + "\n" for t in ticks for o in t.observations)
    truth = "".join(json.dumps(t.truth.to_record()) + "\n" for t in ticks)
    return log, truth


RESULT_FILES = ("observations.jsonl", "truth.jsonl", "steps.csv", "summary.json", "timing.json")


def write_results(result: RunResult, out_dir) -> Path:
    """Write the log, truth, per-tick table and summary (``RESULT_FILES``) into ``out_dir`` (created if needed)."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    log, truth = log_text(result.ticks)
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=STEP_COLUMNS)
    writer.writeheader()
    for r in result.rows:
        writer.writerow({k: (number_cell(k, v) if isinstance(v, float) else v) for k, v in r.cells().items()})
    summary = result.summary()
    summary["events"] = [e.to_json() for e in result.events]
    # Wall times go to their own file, so that summary.json is byte-identical for the same case and seed.
    timing = {
        "tool": summary["tool"],
        "backends": {b: {k: fig.pop(k) for k in TIMING_KEYS} for b, fig in summary["backends"].items()},
    }
    atomic_write(out / "observations.jsonl", log)
    atomic_write(out / "truth.jsonl", truth)
    atomic_write(out / "steps.csv", buf.getvalue())
    atomic_write(out / "summary.json", json.dumps(summary, indent=2, allow_nan=False, default=_finite) + "\n")
    atomic_write(out / "timing.json", json.dumps(timing, indent=2) + "\n")
    return out


def _finite(value):
    return None
