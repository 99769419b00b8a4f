"""The embedding API: a ``Localizer`` that a robot's control loop calls once per tick.

    loc = Localizer.from_case(load_case("cases/depot.toml"), backend="evidential")
    decision = loc.step(odometry, observations)
    if decision.action == "re-localize": ...

Odometry records are composed (exact pose composition) and applied to the belief in one prediction
just before the next readings are absorbed, or once the composed path reaches ``FLUSH_M`` or its
turning ``FLUSH_DEG``; between predictions the reported pose is the estimate carried along by the
odometry composed since.  So the belief sees the same motion however finely the odometry is logged
(no grid rounding per record), and a tick is: the odometry since the last one, then its readings.

One ``step`` predicts with the odometry, absorbs the readings, computes the conflict
figures, asks the ``Monitor`` for an action and carries it out (re-localizing or
quarantining a sensor); it returns a ``Decision`` with the pose estimate, its
uncertainty, the figures, the action and the reasons.  A reading that cannot be
used (unknown sensor, bad payload, out of time order) is rejected with its reason
and leaves the state unchanged.

Decision support and monitoring only: not a certified safety function.
"""

from __future__ import annotations

import dataclasses
import math
import time
from dataclasses import dataclass, field

import numpy as np

from fusion.backends import BACKENDS, build
from fusion.backends.base import PoseEstimate, free_cells
from fusion.conflict import EvidenceAverages, pairwise_conflict, weight_of_conflict
from fusion.decision import Decision
from fusion.errors import FusionError, ObservationError
from fusion.figures import TickFigures
from fusion.io.observations import Observation
from fusion.monitor import ALERT, CARRY_ON, QUARANTINE, RELOCALIZE, Monitor, Policy
from fusion.monitor.at_fault import ReadingAtFault, TickReading, reading_at_fault
from fusion.monitor.policy import INFORMATIVE
from fusion.monitor.recovery import Recovery, informative
from fusion.sensors.kinds import kinds
from fusion.sensors.odometry import OdometryReading, Travel, check_odometry_step, moved_pose
from fusion.sensors.sensor_set import SensorSet

__all__ = ["Decision", "Localizer", "FLUSH_M", "FLUSH_DEG"]

FLUSH_M = 2.0
FLUSH_DEG = 90.0
"""Composed odometry is applied to the belief at the latest after this path or turning, even with no
reading to absorb (our choice: the belief map then lags the robot by at most a couple of metres)."""


@dataclass
class _Tick:
    """What one tick's readings did to the belief (``Localizer._update``)."""

    figures: TickFigures
    conflicting: bool = False
    clear: bool = True
    vouched: bool = False  # some clear reading ruled out at least INFORMATIVE of the site
    applied: list = field(default_factory=list)  # (sensor, evidence as absorbed: a quarantined one discounted)
    undiscounted: list = field(default_factory=list)  # (sensor, evidence as the sensor gave it)
    met: list = field(default_factory=list)  # TickReading per reading, when the readings were given
    refused: list = field(default_factory=list)  # (sensor, why) of readings the back end could not use at all
    notes: list = field(default_factory=list)  # what the back end said of its state during the tick


class Localizer:
    def __init__(
        self,
        backend: str,
        sensors: SensorSet,
        policy: Policy | None = None,
        *,
        rule: str = "dempster",
        max_focal: int = 32,
        motion: str = "probabilistic",
        full_figures: bool = False,
        explain: bool = False,
        seed: int = 0,
        settings=None,
    ):
        """``full_figures``: compute the distance between beliefs on every tick, not only on conflicting ones.
        ``explain``: compute the leave-one-out blame on every tick whose conflict reaches the clear level
        (what an investigation needs), not only on the ticks the monitor counts as conflicting.  ``seed``: of a
        back end that draws samples (the particle filter), so that a run is reproducible.  ``settings``: the back end's
        settings (``fusion.backends.BackendKind.settings_type``; None: its defaults)."""
        if backend not in BACKENDS:  # the same refusal as build's, as an ObservationError
            raise ObservationError(f"unknown back end {backend!r}; choose one of: {', '.join(BACKENDS)}")
        policy = Policy() if policy is None else policy
        self.sensors, self.policy, self.full_figures, self.explain = sensors, policy, full_figures, explain
        grid, free = sensors.grid, sensors.free
        # The best region is computed once per tick by the pose estimate, not after every update.
        try:
            self.filter = build(
                backend, grid, free, rule=rule, motion=motion, max_focal=max_focal, seed=seed, settings=settings
            )
        except FusionError as err:
            raise ObservationError(str(err)) from None
        self.backend = backend
        self.monitor = Monitor(policy, sensors.odd_rates())
        self.averages = EvidenceAverages()
        self.last_t = -math.inf
        self._odometry_t: float | None = None  # time of the last accepted odometry record
        self._pending: Travel | None = None  # odometry composed since the last prediction
        self._free_prior = free_cells(grid, free).astype(np.float64)
        self.recovery = Recovery(policy, self.monitor, self._free_prior)
        self.last_estimate: PoseEstimate | None = None  # the last decision's, of the belief that step left

    @classmethod
    def from_case(cls, case, backend: str, **options) -> Localizer:
        from fusion.monitor import Policy as _Policy

        grid = case.site.grid(case.headings)
        policy = _Policy(**case.run.policy)
        options.setdefault("rule", case.run.rule)
        options.setdefault("max_focal", case.run.max_focal)
        options.setdefault("motion", case.run.motion)
        options.setdefault("seed", case.run.seed)
        options.setdefault("settings", case.run.settings_of(backend))
        return cls(backend, SensorSet(case.site, grid, case.sensors), policy, **options)

    def start_at(
        self,
        x_m: float,
        y_m: float,
        heading_deg: float,
        radius_m: float = 0.5,
        heading_tol_deg: float = 15.0,
        covariance=None,
    ) -> str | None:
        """Start from a known pose: every free cell within ``radius_m`` and ``heading_tol_deg`` is equally possible;
        or, given a 3 × 3 ``covariance`` in (m, m, rad), that Gaussian around the pose on the free cells.  Returns
        what the back end says of the start, if anything (``Backend.reset``)."""
        from fusion.start_prior import known_start_prior

        prior = known_start_prior(
            self.sensors.grid, self._free_prior > 0, x_m, y_m, heading_deg, radius_m, heading_tol_deg, covariance
        )
        self._pending = None
        return self.filter.reset(prior)

    def start_with(self, prior: np.ndarray) -> str | None:
        """Start from a given prior (a probability, or 0/1 mask, per cell; off free space counts 0), e.g. the truth's cell
        on a place graph.  Returns what the back end says of the start."""
        prior = np.asarray(prior, dtype=np.float64).reshape(-1)
        n = self._free_prior.size
        if prior.shape != (n,) or not np.isfinite(prior).all() or (prior < 0).any():
            raise ObservationError(f"a start needs one finite weight ≥ 0 per cell ({n} cells), got {prior.size} values")
        prior = prior * self._free_prior
        if not (prior > 0).any():
            raise ObservationError("the start's weights are 0 on every free cell")
        self._pending = None
        return self.filter.reset(prior)

    def start_anywhere(self) -> str | None:
        """Start from ignorance over free space (global localization); returns what the back end says of it."""
        self._pending = None
        return self.filter.reset(self._free_prior)

    def restart_clock(self) -> None:
        """The log's clock restarted (``fusion.io.timeline``): later records may be earlier than those before.
        The belief is kept; odometry not yet applied is dropped, as motion across a restart is unknown."""
        self.last_t = -math.inf
        self._odometry_t = None
        self._pending = None

    # ----------------------------------------------------------------- the loop
    def step(self, odometry, observations=()) -> Decision:
        """One tick: ``odometry`` (an odometry ``Observation`` or ``OdometryReading``, or None) and readings."""
        start = time.perf_counter()
        rejected: list[tuple[str, str]] = []
        t = self.last_t if self.last_t > -math.inf else 0.0
        travel = None
        if odometry is not None:
            try:
                reading = odometry.reading if isinstance(odometry, Observation) else odometry
                when = t
                if isinstance(odometry, Observation):
                    self.sensors.check(odometry)
                    when = self._check_time(odometry.t)
                    check_odometry_step(self._odometry_t, odometry.t, odometry.sensor)
                if not isinstance(reading, OdometryReading):
                    raise ObservationError("the odometry argument must be an odometry reading")
                self.sensors.odometry.check(reading)  # refuses a record the grid cannot apply
                travel = (self._pending or Travel()).then(reading)
                t = when  # only an accepted record moves the clock
                if isinstance(odometry, Observation):
                    self._odometry_t = odometry.t
            except FusionError as err:
                rejected.append((getattr(odometry, "sensor", "odometry"), str(err)))
        encoded, given = [], []
        for obs in observations:
            try:
                if not isinstance(obs, Observation):
                    raise ObservationError(f"expected an Observation, got {type(obs).__name__}")
                moving = kinds().get(obs.kind)
                if moving is not None and moving.motion:
                    raise ObservationError("odometry goes in the first argument of step(), not among the readings")
                when = self._check_time(obs.t)
                encoded.append((obs.sensor, self.sensors.encode(obs)))
                given.append(obs.reading)
                t = max(t, when)
            except FusionError as err:
                rejected.append((getattr(obs, "sensor", "?"), str(err)))
        if rejected and travel is None and not encoded:
            return self._unchanged(t, rejected, start)
        self.last_t = max(self.last_t, t)
        if travel is not None:
            self._pending = travel
        motion = None
        pending = self._pending
        if pending is not None and (encoded or pending.path_m >= FLUSH_M or pending.turned_deg >= FLUSH_DEG):
            motion = self.sensors.odometry.motion(pending.reading, pending)
            self._pending = None
        return self._absorb(t, motion, encoded, rejected, start, given)

    def _check_time(self, t: float) -> float:
        if not math.isfinite(t):
            raise ObservationError(f"time {t!r} is not a finite number of seconds")
        if t < self.last_t - 1e-9:
            raise ObservationError(f"out of time order: t = {t:g} s comes after t = {self.last_t:g} s")
        return t

    def _absorb(self, t, motion, encoded, rejected, start, given=()) -> Decision:
        """Predict, update with each reading, report the figures, ask the monitor, act.  ``given``: the readings of
        ``encoded`` as the sensors gave them, in the same order (named in the reasons of an action)."""
        f = self.filter
        if motion is not None:
            f.predict(motion)
        before = self._snapshot()
        tick = self._update(f, encoded, given)
        figures = tick.figures
        figures.weight_of_conflict = weight_of_conflict(figures.conflict)
        busy = figures.conflict >= self.policy.clear_fraction * self.policy.conflict_k
        if encoded and (self.full_figures or busy):
            # The distance costs a pairwise count over focal sets; on calm ticks it is skipped unless
            # full figures were asked for (the belief barely moved, and nothing acts on it).
            distance = f.distance(before, f.snapshot())
            if distance is not None:
                figures.jousselme = distance
        # Blame weighs each reading as the sensor gave it: a quarantined sensor that still disagrees stays to blame.
        recovery = self.recovery
        blame = recovery.blame(f, before, tick.undiscounted) if tick.conflicting or (self.explain and busy) else []
        recovery.remember(f, before, motion, tick.applied, tick.undiscounted)
        wanted = tick.conflicting and self.monitor.would_act()
        persistent, against = recovery.dissenters(f) if wanted else (None, set())
        moved = None
        if len(against) >= 2:
            trial = recovery.moved_elsewhere(f, against)
            if trial is not None:
                self.filter, moved = trial
                self.averages.reset()
        calm = tick.clear and tick.vouched and not tick.conflicting
        verdict = self.monitor.judge(tick.conflicting, calm, blame, moved, persistent is None or bool(persistent))
        if calm:
            recovery.clear()
        fault, pairs = self._act(verdict, before, tick, blame, moved)
        verdict.reasons.extend(tick.notes)
        rejected = rejected + tick.refused
        return self._decision(
            t, verdict.action, verdict.reasons, figures, blame, verdict.quarantined, rejected, start, pairs, fault
        )

    def _update(self, f, encoded, given) -> _Tick:
        """Absorb the tick's readings one by one (a quarantined sensor's discounted), scoring each as the sensor
        gave it: the tick's figures, whether it conflicts or is clear, and the readings as applied and as given."""
        tick = _Tick(self._calm_figures())
        p = self.policy
        clear_level = p.clear_fraction * p.conflict_k
        for sensor, evidence in encoded:
            original = evidence
            quarantined = self.monitor.is_quarantined(sensor)
            if quarantined:
                evidence = dataclasses.replace(evidence, reliability=evidence.reliability * p.quarantine_reliability)
            prior = f.snapshot()
            report = f.update(evidence)
            tick.applied.append((sensor, evidence))
            tick.undiscounted.append((sensor, original))
            # The reading as the sensor gave it decides; ``k`` is what the belief absorbed (the
            # discounted reading of a quarantined sensor, where the back end scores it on update).
            if report.conflict is not None and evidence is original:
                figure = report.conflict
            else:
                figure = f.reading_conflict(prior, original)
            k = figure if report.conflict is None else report.conflict
            opinion = f.second_opinion(prior, original, figure, p.conflict_k, clear_level)
            clear = figure < clear_level
            disagree = self.monitor.disagrees(figure, opinion)
            tick.figures.conflict = max(tick.figures.conflict, k)
            tick.figures.disagreement = max(tick.figures.disagreement, opinion.disagreement or 0.0)
            if report.effective_share is not None:
                tick.figures.effective_share = min(tick.figures.effective_share or 1.0, report.effective_share)
            if report.refused:
                tick.refused.append((sensor, f"the {self.backend} back end could not use it: {report.refused}"))
            if report.note:
                tick.notes.append(report.note)
            if report.nis is not None and report.gate:
                share = report.nis / report.gate
                tick.figures.nis_share = max(tick.figures.nis_share or 0.0, share)
                if share > 1.0 and not quarantined:  # gated out: the reading disagrees with the prediction
                    disagree, clear = True, False
            if report.log_evidence is not None:  # the slow/fast evidence averages (augmented MCL)
                ratio = self.averages.add(report.log_evidence)
                tick.figures.surprise = max(tick.figures.surprise, -report.log_evidence)
                tick.figures.evidence_ratio = ratio
                if not quarantined and ratio > p.lost_ratio:
                    disagree, clear = True, False
            said = informative(original)
            self.monitor.record_reading(sensor, disagree, said)
            tick.vouched |= clear and said >= INFORMATIVE
            if len(given) == len(encoded):
                tick.met.append(TickReading(sensor, given[len(tick.met)], figure))
            if not self.monitor.is_quarantined(sensor):
                tick.conflicting |= disagree
                tick.clear &= clear
        return tick

    def _act(self, verdict, before, tick: _Tick, blame, moved):
        """Carry out the verdict: name the reading at fault, re-seed on a re-localization (a move found elsewhere has
        re-seeded already), and at an alert or quarantine the pairwise conflict of the tick's readings."""
        fault = None
        if verdict.action in (ALERT, QUARANTINE, RELOCALIZE) and not moved:
            fault = self._at_fault(before, tick.met, verdict, blame)
            if fault is not None:
                verdict.reasons.append(fault.sentence())
        if verdict.action == RELOCALIZE and not moved:
            self.averages.reset()
            note = self.recovery.reseed(self.filter)
            if note:
                tick.notes.append(note)
        pairs = pairwise_conflict(tick.undiscounted) if verdict.action in (ALERT, QUARANTINE) else []
        if pairs and pairs[0][2] > 0:
            a, b, k = pairs[0]
            verdict.reasons.append(f"of this tick's readings, {a} and {b} conflict most with each other (K {k:.2f})")
        return fault, pairs

    def _at_fault(self, before, met, verdict, blame) -> ReadingAtFault | None:
        """The reading at fault of an acting tick (``fusion.monitor.at_fault``), against the estimate before it."""
        if not met:
            return None
        suspects = [s for s in verdict.newly] if verdict.action == QUARANTINE else []
        suspects += [s for s, v in blame if v > 0]
        ref = self.filter.fork()
        ref.restore(before)
        est = ref.pose_estimate()
        pose = (est.x_m, est.y_m, math.degrees(est.heading_rad) % 360)
        return reading_at_fault(met, suspects, self.sensors.explain, pose)

    def _decision(
        self, t, action, reasons, figures, blame, quarantined, rejected, start, pairs=(), fault=None
    ) -> Decision:
        est = self.last_estimate = self.filter.pose_estimate()
        x, y, heading = est.x_m, est.y_m, est.heading_rad
        fix = getattr(self.sensors.grid, "fix", None)  # a frame of places says where in words
        if self._pending is not None:  # carried along by the odometry not yet applied to the belief
            x, y, heading = moved_pose(x, y, heading, self._pending.reading)
        return Decision(
            t,
            self.backend,
            x,
            y,
            math.degrees(heading) % 360,
            est.spread_m,
            est.region_cells,
            action,
            reasons,
            figures,
            blame,
            quarantined,
            rejected,
            time.perf_counter() - start,
            list(pairs),
            fault,
            None if fix is None else fix(self.filter.distribution()),
        )

    def _unchanged(self, t, rejected, start) -> Decision:
        """The decision for a tick whose every input was rejected: the belief, the clock and the
        monitor stay as they were (a rejected observation must not count as a calm tick either)."""
        figures = self._calm_figures()
        reasons = ["every input of this tick was rejected; nothing was applied"]
        return self._decision(t, CARRY_ON, reasons, figures, [], self.monitor.quarantined_sensors(), rejected, start)

    # ----------------------------------------------------------------- helpers
    def _calm_figures(self) -> TickFigures:
        return TickFigures(evidence_ratio=self.averages.ratio)

    def _snapshot(self):
        return self.filter.snapshot()
