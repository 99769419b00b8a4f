"""Does the monitor do its job?  Measured on the shipped fault cases over many seeds.

For each back end and seed:
- ``carried.toml`` / ``carried_blind.toml``: the estimate is back within 0.5 m and 15° of the
  truth within 10 ticks after the robot is put down (the blind put-down shows where the sensors,
  not the policy, bound the recovery);
- ``stuck_door.toml`` / ``ghost.toml``: the faulty sensor is named in an alert or quarantine
  and is quarantined during the fault, and no re-localization happens during the fault;
- ``calm.toml``: no action other than "carry on" in the whole run.

``measure_attribution``: the incident replay (``fusion inspect``) of each seed's log ranks the
injected faulty sensor first by its share of the blame over all conflict episodes.
"""

from __future__ import annotations

import dataclasses
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

from fusion.compare import RECOVERY_DEG, RECOVERY_M, RECOVERY_TICKS  # one definition of recovery
from fusion.io.case import load_case
from fusion.monitor import CARRY_ON, QUARANTINE, RELOCALIZE
from fusion.runner import run_case

__all__ = ["TargetRow", "measure_targets", "measure_attribution", "FAULT_CASES", "ATTRIBUTION_CASES"]

FAULT_CASES = {
    "carried": None,
    "carried_blind": None,
    "stuck_door": "chiller contact",
    "ghost": "rack camera",
    "calm": None,
}
ATTRIBUTION_CASES = {"stuck_door": "chiller contact", "ghost": "rack camera", "people": "bumper ranger"}


@dataclass(frozen=True)
class TargetRow:
    case: str
    backend: str
    seed: int
    success: bool
    detail: str


def _judge(name: str, result, backend: str) -> tuple[bool, str]:
    rows = result.rows_of(backend)
    events = result.events_of(backend)
    if name == "calm":
        acted = Counter(e.action for e in events if e.action != CARRY_ON)
        said = ", ".join(f"{action} ×{n}" for action, n in sorted(acted.items()))
        return not acted, f"{sum(acted.values())} actions" + (f" ({said})" if said else "")
    if name.startswith("carried"):
        start = next(i for i, r in enumerate(rows) if r.carried)
        window = rows[start : start + RECOVERY_TICKS + 1]
        ok = [r for r in window if r.error_m <= RECOVERY_M and r.heading_error_deg <= RECOVERY_DEG]
        relocs = sum(r.action == RELOCALIZE for r in window)
        return bool(ok), (
            f"back within bounds {ok[0].t - rows[start].t:.2f} s after the carry"
            if ok
            else f"not within bounds in {RECOVERY_TICKS} ticks"
        ) + f"; {relocs} re-localizations"
    sensor = FAULT_CASES[name]
    spec = result.case.sensor(sensor)
    fault = next(f for f in spec.faults)
    during = [e for e in events if fault.start_s <= e.t <= min(fault.end_s, rows[-1].t) + 2.0]
    named = any(sensor in reason for e in during for reason in e.reasons)
    quarantined = any(e.action == QUARANTINE and sensor in " ".join(e.reasons) for e in during)
    relocs = sum(e.action == RELOCALIZE for e in during)
    ok = named and quarantined and relocs == 0
    return ok, f"named={named} quarantined={quarantined} re-localizations={relocs}"


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
        base = load_case(Path(cases_dir) / f"{name}.toml")
        for seed in seeds:
            case = _seeded(base, seed)
            chosen = list(backends or case.run.backends)
            result = run_case(case, backends=chosen)
            rows = [TargetRow(name, b, seed, *_judge(name, result, b)) for b in chosen]
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
                name, "both", seed, ok, f"ranked first: {first} ({share:.0%}); {len(found.episodes)} episodes"
            )
            out.append(row)
            if progress:
                progress(name, seed, [row])
    return out
