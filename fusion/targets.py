"""Does the monitor do its job?  Measured on the shipped fault cases over many seeds.

For each back end and seed, by what the case holds (``target_of``; any case file may be measured):
- a route that carries the robot (``carried.toml`` / ``carried_blind.toml``): the estimate is back
  within 0.5 m and 15° of the truth within 10 ticks after the robot is put down (the blind put-down
  shows where the sensors, not the policy, bound the recovery);
- faults on a sensor other than the odometry (``stuck_door.toml`` / ``ghost.toml``): the faulty
  sensor is named in an alert or quarantine and is quarantined during the fault, and no
  re-localization happens during the fault;
- nothing injected (``calm.toml``): no action other than "carry on" in the whole run.

``measure_attribution``: the incident replay (``fusion inspect``) of each seed's log ranks the
injected faulty sensor first by its share of the blame over all conflict episodes.
"""

from __future__ import annotations

import dataclasses
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

from fusion.compare import RECOVERY_DEG, RECOVERY_M, RECOVERY_TICKS  # one definition of recovery
from fusion.errors import FusionError
from fusion.io.case import load_case
from fusion.monitor import CARRY_ON, QUARANTINE, RELOCALIZE
from fusion.runner import run_case
from fusion.words import plural

__all__ = ["TargetRow", "target_of", "measure_targets", "measure_attribution", "FAULT_CASES", "ATTRIBUTION_CASES"]

FAULT_CASES = ("carried", "carried_blind", "stuck_door", "ghost", "calm")
"""The shipped cases measured by default; any case file may be measured (``target_of``)."""
ATTRIBUTION_CASES = {"stuck_door": "chiller contact", "ghost": "rack camera", "people": "bumper ranger"}


@dataclass(frozen=True)
class TargetRow:
    case: str
    backend: str
    seed: int
    success: bool
    detail: str


def target_of(case) -> tuple[str, str | None]:
    """Which target a case is judged by, from what it holds: ("recovery", None) when its route carries the
    robot; ("fault", sensor) when a sensor other than the motion one has faults (the first such sensor);
    ("calm", None) when nothing is injected.  A case whose only faults are odometry faults has no target
    here (``fusion compare`` measures those)."""
    from fusion.sensors.kinds import sensor_kind

    if case.route is not None and case.route.carries:
        return "recovery", None
    faulted = [s.name for s in case.sensors if s.faults and not sensor_kind(s.kind).motion]
    if faulted:
        return "fault", faulted[0]
    if any(s.faults for s in case.sensors):
        raise FusionError(
            f"{case.path}: its only faults are on the odometry; targets judge carries, faults of other sensors, "
            "or healthy runs (fusion compare measures the rest)"
        )
    return "calm", None


def _judge(case, result, backend: str) -> tuple[bool, str]:
    rows = result.rows_of(backend)
    events = result.events_of(backend)
    target, sensor = target_of(case)
    if target == "calm":
        acted = Counter(e.action for e in events if e.action != CARRY_ON)
        said = ", ".join(f"{action} ×{n}" for action, n in sorted(acted.items()))
        return not acted, plural(sum(acted.values()), "action") + (f" ({said})" if said else "")
    if target == "recovery":
        start = next(i for i, r in enumerate(rows) if r.carried)
        window = rows[start : start + RECOVERY_TICKS + 1]
        ok = [r for r in window if r.error_m <= RECOVERY_M and r.heading_error_deg <= RECOVERY_DEG]
        relocs = sum(r.action == RELOCALIZE for r in window)
        return bool(ok), (
            f"back within bounds {ok[0].t - rows[start].t:.2f} s after the carry"
            if ok
            else f"not within bounds in {RECOVERY_TICKS} ticks"
        ) + f"; {plural(relocs, 're-localization')}"
    fault = next(f for f in case.sensor(sensor).faults)
    during = [e for e in events if fault.start_s <= e.t <= min(fault.end_s, rows[-1].t) + 2.0]
    named = any(sensor in reason for e in during for reason in e.reasons)
    quarantined = any(e.action == QUARANTINE and sensor in " ".join(e.reasons) for e in during)
    relocs = sum(e.action == RELOCALIZE for e in during)
    ok = named and quarantined and relocs == 0
    said = [
        f"{sensor} {'named' if named else 'not named'} in an action",
        "quarantined" if quarantined else "not quarantined",
        plural(relocs, "re-localization"),
    ]
    return ok, ", ".join(said) + " during the fault"


def _case_path(cases_dir, name: str) -> Path:
    """A case named by a shipped name (in ``cases_dir``) or given as a file."""
    shipped = Path(cases_dir) / f"{name}.toml"
    return shipped if "/" not in name and shipped.exists() else Path(name)


def _seeded(case, seed: int):
    """The case with its run's seed replaced."""
    return dataclasses.replace(case, run=dataclasses.replace(case.run, seed=seed))


def measure_targets(
    cases_dir, seeds, cases=tuple(FAULT_CASES), progress=None, out=None, backends=None
) -> list[TargetRow]:
    """Verdicts per case, seed and back end (``backends``: default the case's).  ``out``: a list the
    verdicts are appended to as each run ends (the caller keeps them if the sweep is interrupted);
    ``progress(case, seed, rows)`` after each."""
    out = [] if out is None else out
    for name in cases:
        base = load_case(_case_path(cases_dir, name))
        target_of(base)  # refuses a case with no target before any run
        label = Path(name).stem
        for seed in seeds:
            case = _seeded(base, seed)
            chosen = list(backends or case.run.backends)
            result = run_case(case, backends=chosen)
            rows = [TargetRow(label, b, seed, *_judge(case, result, b)) for b in chosen]
            out.extend(rows)
            if progress:
                progress(name, seed, rows)
    return out


def measure_attribution(cases_dir, seeds, cases=tuple(ATTRIBUTION_CASES), progress=None, out=None) -> list[TargetRow]:
    """Simulate each case and seed, replay its log with ``inspect_log`` and check who is ranked first
    (``out`` and ``progress`` as for ``measure_targets``)."""
    import tempfile

    from fusion.inspect import inspect_log
    from fusion.io.outdir import atomic_write
    from fusion.runner import log_text
    from fusion.simulate import simulate

    out = [] if out is None else out
    for name in cases:
        base = load_case(Path(cases_dir) / f"{name}.toml")
        for seed in seeds:
            case = _seeded(base, seed)
            with tempfile.TemporaryDirectory(prefix="fusion-attribution-") as tmp:
                log, truth = log_text(simulate(case))
                atomic_write(Path(tmp) / "log.jsonl", log)
                atomic_write(Path(tmp) / "truth.jsonl", truth)
                found = inspect_log(
                    case,
                    Path(tmp) / "log.jsonl",
                    Path(tmp) / "out",
                    truth_path=Path(tmp) / "truth.jsonl",
                    frames=False,
                    report=False,
                )
            ranking = found.ranking()
            first = ranking[0][0] if ranking else "nobody"
            share = ranking[0][1] if ranking else 0.0
            ok = first == ATTRIBUTION_CASES[name]
            row = TargetRow(
                name, "both", seed, ok, f"ranked first: {first} ({share:.0%}); {plural(len(found.episodes), 'episode')}"
            )
            out.append(row)
            if progress:
                progress(name, seed, [row])
    return out
