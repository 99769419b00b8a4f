"""Evidence: one reading as a likelihood over cells and as a mass function, from one set of parameters.

A sensor model computes the *contour* of a reading: c(x) = p(z | x) / max_x p(z | x),
the plausibility of each cell from the reading alone (Shafer 1976, ch. 11).  The
sensor's reliability r (probability that the reading comes from a working sensor)
then enters the histogram and the mass back ends in the same way (the particle filter weighs by the
likelihood; the Gaussian filter scales a discounted reading's information, ``fusion.backends.gaussian``):

- mass side: the consonant mass function of the contour, discounted at rate 1 − r;
- Bayesian side: the likelihood r · c(x) + (1 − r), a mixture with an outlier that
  is equally likely everywhere — which is exactly the contour of the discounted
  mass function, so both sides hold the same assumptions about the sensor.

The mass side quantises the contour into ``levels`` nested focal sets, rounding up
(no cell loses plausibility), at geometric levels 1, 1/2, 1/4, … by default.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import Protocol, runtime_checkable

import numpy as np

from fusion import compiled
from fusion.belief import rules
from fusion.belief.mass import MassFunction
from fusion.errors import ObservationError

__all__ = ["Evidence", "SensorModel", "contour_from_log"]

MASS_FORMS = ("consonant", "bayesian")


@dataclass(frozen=True, eq=False)
class Evidence:
    """One reading's evidence over the cells of a frame; both forms are built on first use."""

    sensor: str
    contour: np.ndarray
    reliability: float = 1.0
    levels: int = 6
    form: str = "consonant"
    spacing: str = "geometric"
    # Independent Gaussian errors behind the contour (beams of a scan); 0 when the contour is not of that
    # kind.  Lets the conflict figure ask how often a correct pose fits as badly (``fusion.conflict.fit_plausibility``).
    dof: int = 0
    # The reading as a measurement h(pose) + noise the Gaussian filter linearises
    # (``fusion.belief.gaussian.Linearisable``); None where the model gives none (the filter then moment-matches).
    point: object = None

    def __post_init__(self):
        if self.form not in MASS_FORMS:
            raise ObservationError(f"evidence form must be one of {', '.join(MASS_FORMS)}, got {self.form!r}")

    @property
    def n(self) -> int:
        return len(self.contour)

    @cached_property
    def ruled_out(self) -> float:
        """The share of cells the reading rules out (contour < ½): how much it says about where the robot is
        (``fusion.monitor.recovery.informative``); counted once, as the monitor asks for it every tick."""
        loops = compiled.kernels()
        c = self.contour
        below = (
            loops.count_below(c, 0.5) if loops is not None and compiled.plain_vector(c) else np.count_nonzero(c < 0.5)
        )
        return below / max(self.n, 1)

    @cached_property
    def likelihood(self) -> np.ndarray:
        """r · c + (1 − r): the Bayesian likelihood, up to a constant factor."""
        r, c = self.reliability, self.contour
        if r == 1.0:
            return c
        loops = compiled.kernels()
        if loops is not None and compiled.plain_vector(c):
            out = np.empty_like(c)
            loops.discounted(c, float(r), out)  # one pass, numpy's arithmetic
        else:
            out = np.multiply(c, r)  # r·c, then + (1 − r) in place: one array, no temporary
            out += 1.0 - r
        out.flags.writeable = False  # shared by every back end the reading goes to: never changed in place
        return out

    @cached_property
    def plausibility(self) -> np.ndarray:
        """r · pl + (1 − r) with pl the plausibility that each cell is the true pose: the contour itself, or
        for a reading of ``dof`` > 2 independent Gaussian errors the chance that the true pose fits no better
        (``fusion.conflict.fit_plausibility_contour``).  Conflict figures score readings with it; updates use
        ``likelihood``."""
        return self.plausibility_of(self.contour)

    def plausibility_of(self, contour: np.ndarray) -> np.ndarray:
        """``plausibility`` for some of the reading's contour values (the cells a conflict figure visits)."""
        from fusion.conflict import fit_plausibility_contour

        pl = fit_plausibility_contour(contour, self.dof)
        r = self.reliability
        return pl if r == 1.0 else r * pl + (1.0 - r)

    @cached_property
    def masses(self) -> MassFunction:
        if self.form == "bayesian":
            lik = self.likelihood
            total = lik.sum()
            if total <= 0:  # an impossible reading: all mass on the empty set
                return MassFunction.from_contour(np.zeros(self.n))
            return MassFunction.bayesian(lik / total)
        return rules.discount(
            MassFunction.from_contour(self.contour, levels=self.levels, spacing=self.spacing), self.reliability
        )


@runtime_checkable
class SensorModel(Protocol):
    """What every sensor model offers: a name, ``encode(reading) -> Evidence``, and ``odd_rate``: the
    share of a working sensor's readings that its own error model says contradict the true pose
    (false detections, misread identities, false alarms, misses); the monitor does not quarantine a
    sensor for disagreeing about as often as that (``fusion.monitor``); ``explain(reading, x, y,
    heading_deg)`` says in words what the reading measured against what the map gives at that pose
    (the reading at fault in an alert)."""

    name: str
    odd_rate: float

    def encode(self, reading) -> Evidence: ...

    def explain(self, reading, x: float, y: float, heading_deg: float) -> str: ...


def contour_from_log(log_likelihood: np.ndarray) -> np.ndarray:
    """exp(ll − max ll), with an impossible reading (all −inf) giving an all-zero contour."""
    top = np.max(log_likelihood)
    if not np.isfinite(top):
        return np.zeros(log_likelihood.size)
    out = np.subtract(log_likelihood, top)
    return np.exp(out, out=out).reshape(-1)  # in place: one array made, not two
