"""Conflict figures: how much a reading disagrees with the belief, on every back end.

Evidential side
- K = m(∅) of the unnormalised conjunctive combination (Dempster's conflict);
- weight of conflict −log(1 − K) (Shafer 1976, ch. 3), infinite on total conflict;
- Jousselme distance between two mass functions (Jousselme, Grenier & Bossé 2001);
- pignistic disagreement max_A |BetP1(A) − BetP2(A)| = ½ Σ_x |BetP1(x) − BetP2(x)|
  (Liu 2006, "Analyzing the degree of conflict among belief functions": K alone
  can be large for agreeing sources; conflict needs both K and this to be large);
- pairwise conflict: K between each two sensors' readings of one tick, with no belief involved
  (do the sensors themselves point to different places?).

Bayesian side
- predictive surprise −log p(z | past) = −log Σ_x p(x) L(x) for the reading's
  likelihood scaled to a maximum of 1 (0 = the reading is as expected as it can be);
- the plausibility of a fit: a scan of m beams scores its best supported cell c < 1 of the best
  cell anywhere, but m Gaussian beam errors make even the true pose fall short of a perfect fit by
  −2 log c ~ χ²_m; so a reading's conflict counts ``fit_plausibility(c, m)`` = P(χ²_m ≥ −2 log c),
  the chance that a correct pose fits as badly (the χ² test of normalised residuals used to
  validate measurements in tracking: Bar-Shalom, Li & Kirubarajan 2001, §5.4, from memory);
- a slow and a fast running average of the evidence p(z | past), as in augmented
  Monte Carlo localization (Thrun, Burgard & Fox 2005, §8.3.5); their ratio
  slow / fast rises when the readings stop matching the belief (the robot is lost).
"""

from __future__ import annotations

import functools
import math

import numpy as np

from fusion import compiled
from fusion.belief import bitset, rules
from fusion.belief.mass import FocalAccumulator, MassFunction, check_same_frame

__all__ = [
    "fit_plausibility",
    "weight_of_conflict",
    "jousselme_distance",
    "pignistic_disagreement",
    "pairwise_conflict",
    "support_conflict",
    "support_joint_conflict",
    "support_cells",
    "conflict_on",
    "joint_conflict_on",
    "fit_plausibility_contour",
    "EvidenceAverages",
]


def weight_of_conflict(k: float) -> float:
    """−log(1 − K) in nats; ``inf`` for total conflict."""
    return math.inf if k >= 1.0 else -math.log1p(-k)


def fit_plausibility(c: float, dof: int) -> float:
    """P(χ²_dof ≥ −2 log c): how often a correct pose fits a reading of ``dof`` independent Gaussian
    errors no better than relative likelihood ``c`` (scale 1 = the best cell anywhere).

    The best cell fits at most perfectly, so this over-states, never under-states, the plausibility
    of a correct pose (a conservative test).  For dof ≤ 2 it is c itself (χ²₂ survival is e^{−x/2}),
    so one range-and-bearing sighting or a contour of another kind (dof 0) is scored as given."""
    if dof <= 2 or c >= 1.0:
        return float(c)
    if c <= 0.0:
        return 0.0
    from scipy.special import gammaincc  # scipy on first use: importing it costs 0.15 s at start-up

    return float(gammaincc(dof / 2.0, -math.log(c)))  # χ² survival: Q(k/2, x/2) with x = −2 log c


def fit_plausibility_contour(contour: np.ndarray, dof: int) -> np.ndarray:
    """``fit_plausibility`` of every cell: P(χ²_dof ≥ −2 log c(x)).  This is the possibility distribution a
    Gaussian reading of ``dof`` independent errors induces by the probability–possibility transformation
    (Dubois, Foulloy, Mauris & Prade 2004, "Probability-possibility transformations, triangular fuzzy sets
    and probabilistic inequalities"): the plausibility that x is the true pose is the chance that the true
    pose fits no better.  For dof ≤ 2 it is c itself.  Read from a table of 4,096 points in −log c
    (linear interpolation; the function is smooth and monotone), since the special function itself costs
    ~100 ns per cell."""
    c = np.asarray(contour, dtype=np.float64)
    if dof <= 2:
        return c
    xs, ps = _survival_table(int(dof))
    with np.errstate(divide="ignore"):
        x = -np.log(c)
    return np.interp(x, xs, ps, right=0.0)


@functools.lru_cache(maxsize=32)
def _survival_table(dof: int) -> tuple[np.ndarray, np.ndarray]:
    from scipy.special import gammaincc

    k = dof / 2.0
    top = k + 40.0 * math.sqrt(k) + 40.0  # Q(k, x) < 1e-16 beyond (Chernoff bound on the gamma tail)
    xs = np.linspace(0.0, top, 4096)
    return xs, gammaincc(k, xs)


def support_cells(p: np.ndarray, share: float, top: float | None = None) -> np.ndarray:
    """The cells a probability per cell still allows: p ≥ ``share`` · max p (every cell when p is all zero);
    ``top``: max p, when the caller has it already."""
    top = float(p.max()) if top is None else top
    return np.flatnonzero(p >= share * top) if top > 0 else np.arange(len(p))


def support_conflict(p: np.ndarray, evidence, share: float, top: float | None = None) -> float:
    """r·(1 − pl) of a reading's best fit among the cells with p ≥ ``share`` · max p: Dempster's K between
    the discounted consonant reading and the categorical mass function on those cells, pl scored by
    ``fit_plausibility`` (for a scan of m beams, how often a correct pose fits as badly).  ``top``: max p, where
    the caller knows it (a contour's is 1)."""
    top = float(p.max()) if top is None else top
    if top <= 0:
        return 1.0
    loops = compiled.kernels()
    c = evidence.contour
    if loops is not None and compiled.plain_vector(p) and compiled.plain_vector(c) and c.shape == p.shape:
        hi = loops.support_best(p, share * top, c)  # the support's best value, no list of its cells written
        if hi >= 0:
            return _fit_conflict(compiled.float_of_bits(hi), evidence)
    return conflict_on(support_cells(p, share, top), evidence)


def conflict_on(cells: np.ndarray, evidence) -> float:
    """``support_conflict`` on a given support (cell indices)."""
    return _fit_conflict(float(evidence.contour[cells].max()), evidence)


def _fit_conflict(best: float, evidence) -> float:
    """r·(1 − pl) of the reading's best value on a support, pl scored by ``fit_plausibility``."""
    return evidence.reliability * (1.0 - fit_plausibility(best, evidence.dof))


def support_joint_conflict(p: np.ndarray, readings, share: float) -> float:
    """The support conflict of a tick's (sensor, Evidence) readings at once: 1 − the best their joint likelihood
    (each r·c + 1 − r, at most 1) does on the cells with p ≥ ``share`` · max p.  1 − p(z | past) would blame
    the sharpest sensor for being informative."""
    return joint_conflict_on(support_cells(p, share), readings)


def joint_conflict_on(cells: np.ndarray, readings) -> float:
    """``support_joint_conflict`` on a given support (cell indices)."""
    if not readings:
        return 0.0
    lik = np.ones(len(cells))
    for _, e in readings:
        lik = lik * e.likelihood[cells]
    return 1.0 - min(float(lik.max()), 1.0)


def jousselme_distance(m1: MassFunction, m2: MassFunction) -> float:
    """d(m1, m2) = sqrt(½ (m1 − m2)ᵀ D (m1 − m2)) with D(A, B) = |A ∩ B| / |A ∪ B| (and D(∅, ∅) = 1)."""
    check_same_frame(m1, m2)
    acc = FocalAccumulator(m1.n)
    acc.add(m1.sets, m1.masses)
    acc.add(m2.sets, -m2.masses)
    diff = acc.residual()
    keep = np.abs(diff) > 0
    if not keep.any():
        return 0.0
    sets = acc.rows_of(np.flatnonzero(keep))
    diff = diff[keep]
    card = bitset.cardinality(sets).astype(np.float64)
    inter = bitset.intersection_counts(sets, sets).astype(np.float64)
    union = card[:, None] + card[None, :] - inter
    jaccard = np.ones_like(union)  # D(∅, ∅) = 1
    np.divide(inter, union, out=jaccard, where=union > 0)
    return math.sqrt(max(0.0, 0.5 * float(diff @ jaccard @ diff)))


def pignistic_disagreement(p1: np.ndarray, p2: np.ndarray) -> float:
    """max over sets A of |P1(A) − P2(A)| for two probability vectors: half their L1 distance."""
    return float(0.5 * np.abs(np.asarray(p1) - np.asarray(p2)).sum())


def pairwise_conflict(readings) -> list[tuple[str, str, float]]:
    """Dempster's K between each two sensors' mass functions, ``readings`` being (sensor, Evidence)
    pairs (a sensor's first reading counts), largest first."""
    first: dict[str, object] = {}
    for sensor, evidence in readings:
        first.setdefault(sensor, evidence)
    names = sorted(first)
    pairs = [
        (a, b, rules.conflict_mass(first[a].masses, first[b].masses))
        for i, a in enumerate(names)
        for b in names[i + 1 :]
    ]
    return sorted(pairs, key=lambda pair: -pair[2])


class EvidenceAverages:
    """Slow and fast exponential averages of p(z | past); ``ratio`` = slow / fast (≥ 1 when readings got worse)."""

    def __init__(self, slow: float = 0.02, fast: float = 0.3):
        # Rates are common practice for augmented MCL (0 < slow ≪ fast), not from a source.
        self.alpha_slow, self.alpha_fast = slow, fast
        self.slow = self.fast = None

    def add(self, log_evidence: float) -> float:
        """Absorb one update's log p(z | past); returns the new ratio."""
        e = math.exp(max(log_evidence, -700.0))
        if self.slow is None:
            self.slow = self.fast = e
        else:
            self.slow += self.alpha_slow * (e - self.slow)
            self.fast += self.alpha_fast * (e - self.fast)
        return self.ratio

    @property
    def ratio(self) -> float:
        if self.slow is None or self.fast is None or self.fast <= 0:
            return 1.0 if self.slow is None else math.inf
        return self.slow / self.fast

    def reset(self) -> None:
        self.slow = self.fast = None
