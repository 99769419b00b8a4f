"""Long-run checks: drive the localizer, or the stream, for many steps and verify invariants at every one.

``soak_steps`` feeds a case's simulated readings (run after run, seed after seed, the clock carried on)
to one back end, one observation per ``Localizer.step`` call as ``fusion stream`` makes them, and at
every step checks that the belief is a distribution (masses or probabilities non-negative, summing to
one within ``SUM_TOLERANCE``; a contour peaks at one), that a focal-set belief keeps at most ``max_focal`` sets, and
that the decision holds no NaN.  ``soak_stream`` pushes generated lines, a share of them corrupted in
the ways logs break, through ``fusion.stream.stream`` without holding them, and samples the process'
memory.  Both report what they saw; neither stops at the first violation.
"""

from __future__ import annotations

import dataclasses
import json
import os
import time
from collections import Counter
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field

import numpy as np

from fusion.case_model import Case
from fusion.localizer import Localizer
from fusion.simulate import simulate

__all__ = [
    "SoakReport",
    "soak_steps",
    "soak_stream",
    "soak_backends",
    "resident_mb",
    "SUM_TOLERANCE",
    "CORRUPTIONS",
    "MEMORY_EVERY",
]

SUM_TOLERANCE = 1e-9
MEMORY_EVERY = 1000  # steps (or lines) between two memory samples


def resident_mb() -> float:
    """The process' resident memory now, in MiB (Linux ``/proc``; elsewhere the peak so far)."""
    try:
        with open("/proc/self/statm") as fh:
            pages = int(fh.read().split()[1])
        return pages * os.sysconf("SC_PAGE_SIZE") / 2**20
    except (OSError, ValueError, IndexError, AttributeError):
        import resource
        import sys

        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
        return peak / 2**20 if sys.platform == "darwin" else peak / 1024


@dataclass
class SoakReport:
    what: str
    backend: str
    steps: int = 0
    seconds: float = 0.0
    worst_sum_error: float = 0.0
    lowest_value: float = 0.0
    most_focal_sets: int = 0
    focal_bound: int = 0
    nan_decisions: int = 0
    violations: int = 0
    first_violation: str = ""
    actions: Counter = field(default_factory=Counter)
    rejected: int = 0
    memory_mb: list[tuple[int, float]] = field(default_factory=list)  # (step, MiB)
    interrupted: bool = False

    @property
    def ok(self) -> bool:
        return self.violations == 0

    def to_record(self) -> dict:
        rec = dataclasses.asdict(self)
        rec["actions"] = dict(self.actions)
        rec["memory_mb"] = [[s, round(m, 1)] for s, m in self.memory_mb]
        rec["ok"] = self.ok
        return rec

    def _violation(self, step: int, what: str) -> None:
        self.violations += 1
        if not self.first_violation:
            self.first_violation = f"step {step}: {what}"


def _observations(case: Case, seed: int) -> Iterator:
    """``(tick, observation)`` of the case, run after run with seeds seed, seed+1, ..., on one continuing clock."""
    offset, run = 0.0, 0
    while True:
        ticks = simulate(case, seed + run)
        for tick in ticks:
            for obs in tick.observations:
                yield tick, dataclasses.replace(obs, t=obs.t + offset)
        offset += (len(ticks) + 1) * case.run.tick_s
        run += 1


def soak_steps(
    case: Case,
    backend: str,
    steps: int,
    seed: int | None = None,
    progress: Callable[[int], None] | None = None,
) -> SoakReport:
    """``steps`` localizer steps on ``backend`` with the invariants checked at each (see the module)."""
    seed = case.run.seed if seed is None else seed
    loc = Localizer.from_case(case, backend)
    report = SoakReport("steps", backend, focal_bound=max(loc.filter.health().bound - 1, 0))
    report.memory_mb.append((0, resident_mb()))
    began = time.perf_counter()
    try:
        for n, (tick, obs) in enumerate(_observations(case, seed), 1):
            if n > steps:
                break
            if n == 1 and case.require_route().start_known:  # from the dock, as a run of the case starts
                loc.start_at(
                    tick.truth.x_m, tick.truth.y_m, tick.truth.heading_deg, covariance=case.run.start_covariance
                )
            decision = loc.step(obs, []) if obs.moves else loc.step(None, [obs])
            report.steps = n
            report.actions[decision.action] += 1
            report.rejected += bool(decision.rejected)
            _check_belief(loc, report, n)
            try:
                json.dumps(decision.to_record(), allow_nan=False)
            except ValueError:
                report.nan_decisions += 1
                report._violation(n, "the decision holds NaN or an infinity")
            if n % MEMORY_EVERY == 0:
                report.memory_mb.append((n, resident_mb()))
                if progress:
                    progress(n)
    except KeyboardInterrupt:
        report.interrupted = True
    report.memory_mb.append((report.steps, resident_mb()))
    report.seconds = time.perf_counter() - began
    return report


def _check_belief(loc: Localizer, report: SoakReport, step: int) -> None:
    health = loc.filter.health()
    total, low = health.total, health.lowest
    report.worst_sum_error = max(report.worst_sum_error, abs(total - 1.0))
    report.lowest_value = min(report.lowest_value, low)
    if not np.isfinite(total) or abs(total - 1.0) > SUM_TOLERANCE:
        report._violation(step, f"the belief's {health.what} totals {total!r}")
    if low < 0:
        report._violation(step, f"a {health.what} of {low!r}")
    if health.bound:
        report.most_focal_sets = max(report.most_focal_sets, health.parts)
        if health.parts > health.bound:  # the bound counts the empty set, kept by the unnormalised rules
            report._violation(step, f"{health.parts} focal sets, more than the bound of {health.bound - 1}")


# ----------------------------------------------------------------------------- the stream
CORRUPTIONS = (
    "not JSON",
    "cut short",
    "field not a number",
    "NaN literal",
    "unknown sensor",
    "time backwards",
    "nested too deeply",
    "integer too long",
    "not UTF-8",
    "over-long",
    "field missing",
    "wrong kind",
)


def _corrupt(line: bytes, rng: np.random.Generator, last_t: float) -> tuple[bytes, str]:
    kind = CORRUPTIONS[int(rng.integers(len(CORRUPTIONS)))]
    rec = json.loads(line)
    if kind == "not JSON":
        return bytes(rng.integers(32, 127, int(rng.integers(1, 80)), dtype=np.uint8)), kind
    if kind == "cut short":
        return line[: int(rng.integers(1, len(line)))], kind
    if kind == "field not a number":
        rec["t"] = "soon"
    elif kind == "NaN literal":
        return line.replace(b'"t": ', b'"t": NaN, "was": ', 1), kind
    elif kind == "unknown sensor":
        rec["sensor"] = "sensor-" + str(int(rng.integers(1000)))
    elif kind == "time backwards":
        rec["t"] = max(0.0, last_t - 5.0)
    elif kind == "nested too deeply":
        return b"[" * 20000 + b"]" * 20000, kind
    elif kind == "integer too long":
        return b'{"t": ' + b"7" * 5000 + b"}", kind
    elif kind == "not UTF-8":
        return line[:5] + b"\xff\xfe" + line[5:], kind
    elif kind == "over-long":
        return b'{"t": 0, "pad": "' + b"x" * 70_000 + b'"}', kind
    elif kind == "field missing":
        rec.pop("kind")
    else:
        rec["kind"] = "lidar"
    return json.dumps(rec).encode(), kind


class _GeneratedLines:
    """A read-only binary stream of generated lines (nothing is held but the current line)."""

    def __init__(self, case: Case, seed: int, lines: int, corrupt_share: float, tally: Counter, on_line=None):
        self._source, self._on_line, self.made = _observations(case, seed), on_line, 0
        self._rng = np.random.default_rng([seed, 9])
        self._left, self._share, self._tally = lines, corrupt_share, tally
        self._pending = b""
        self._last_t = 0.0

    def readline(self, limit: int = -1) -> bytes:
        if not self._pending:
            if self._left <= 0:
                return b""
            self._left -= 1
            self.made += 1
            if self._on_line:
                self._on_line(self.made)
            _, obs = next(self._source)
            line = json.dumps(obs.to_record()).encode()
            if self._rng.random() < self._share:
                line, kind = _corrupt(line, self._rng, self._last_t)
                self._tally[kind] += 1
            else:
                self._last_t = obs.t
            self._pending = line + b"\n"
        cut = len(self._pending) if limit is None or limit < 0 else limit
        out, self._pending = self._pending[:cut], self._pending[cut:]
        return out


class _CountingSink:
    """Standard output and error for a soak: counts the lines, keeps none."""

    def __init__(self):
        self.lines = 0

    def write(self, text: str) -> int:
        self.lines += text.count("\n")
        return len(text)

    def flush(self) -> None:
        pass


def soak_stream(
    case: Case,
    backend: str,
    lines: int,
    corrupt_share: float = 0.1,
    seed: int | None = None,
    progress: Callable[[int], None] | None = None,
) -> tuple[SoakReport, Counter]:
    """Push ``lines`` generated lines (``corrupt_share`` of them corrupted) through the stream."""
    from fusion.stream import stream

    seed = case.run.seed if seed is None else seed
    loc = Localizer.from_case(case, backend)
    tally: Counter = Counter()
    report = SoakReport("stream", backend)

    def sample(made: int) -> None:
        if made % MEMORY_EVERY == 0:
            report.memory_mb.append((made, resident_mb()))
            if progress:
                progress(made)

    source = _GeneratedLines(case, seed, lines, corrupt_share, tally, sample)
    out, err = _CountingSink(), _CountingSink()
    report.memory_mb.append((0, resident_mb()))
    began = time.perf_counter()
    try:
        written, rejected = stream(loc, source, out, err)
    except KeyboardInterrupt:
        report.interrupted = True
        written, rejected = out.lines - err.lines, err.lines
    report.steps = source.made
    _check_belief(loc, report, report.steps)  # the belief the stream leaves behind is a distribution too
    report.rejected = rejected
    report.actions["decisions"] = written
    if written + rejected != out.lines:
        report._violation(report.steps, f"{out.lines} output lines for {written + rejected} answers")
    report.memory_mb.append((report.steps, resident_mb()))
    report.seconds = time.perf_counter() - began
    return report, tally


def soak_backends(
    case, backends, *, steps: int, lines: int | None, corrupt: float, seed, out_dir, progress_for, on_written=None
):
    """Soak each back end in turn (``soak_stream`` when ``lines``, else ``soak_steps``), writing ``soak.json`` into
    ``out_dir`` after each one, so an interrupted soak keeps what it finished.  ``progress_for(backend, total)``
    is a context manager giving a ``tick(n)`` callback; ``on_written()`` is called after each write.  Returns the
    reports, stopping after an interrupted one."""
    import json
    from pathlib import Path

    from fusion.io.outdir import atomic_write

    records, corruptions = [], {}
    for backend in backends:
        with progress_for(backend, lines or steps) as tick:
            if lines:
                report, tally = soak_stream(case, backend, lines, corrupt, seed, tick)
                corruptions[backend] = dict(tally)
            else:
                report = soak_steps(case, backend, steps, seed, tick)
            tick(report.steps)
        records.append(report)
        record = {"case": case.path, "runs": [r.to_record() for r in records], "corruptions": corruptions}
        atomic_write(Path(out_dir) / "soak.json", json.dumps(record, indent=1))
        if on_written is not None:
            on_written()
        if report.interrupted:
            break
    return records
