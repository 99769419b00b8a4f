import math

import numpy as np
from scipy import stats
from support import assert_close

from fusion.backends.base import SecondOpinion
from fusion.belief import rules
from fusion.belief.mass import MassFunction
from fusion.conflict import (
    EvidenceAverages,
    fit_plausibility,
    jousselme_distance,
    pairwise_conflict,
    pignistic_disagreement,
    weight_of_conflict,
)
from fusion.monitor import Monitor, Policy


def test_zadeh_weight_of_conflict():
    # Zadeh (1984) example: K = 0.9999; Shafer (1976) weight of conflict −log(1 − K) = log(10⁴) ≈ 9.21.
    m1 = MassFunction.from_focal(3, {(0,): 0.99, (2,): 0.01})
    m2 = MassFunction.from_focal(3, {(1,): 0.99, (2,): 0.01})
    k = rules.conjunctive(m1, m2).conflict
    assert_close(weight_of_conflict(k), math.log(1e4), tol=1e-9)
    assert abs(weight_of_conflict(k) - 9.21) < 0.005
    assert weight_of_conflict(1.0) == math.inf


def test_pairwise_conflict_of_zadehs_two_experts_and_of_sources_that_agree():
    # Zadeh (1984): the two experts' diagnoses conflict with K = 0.9999, whichever comes first; a source
    # conflicts with nobody it agrees with (a vacuous third source: K = 0, Shafer 1976).
    from types import SimpleNamespace

    first = SimpleNamespace(masses=MassFunction.from_focal(3, {(0,): 0.99, (2,): 0.01}))
    second = SimpleNamespace(masses=MassFunction.from_focal(3, {(1,): 0.99, (2,): 0.01}))
    vacuous = SimpleNamespace(masses=MassFunction.from_focal(3, {(0, 1, 2): 1.0}))
    pairs = pairwise_conflict([("second", second), ("first", first), ("vague", vacuous), ("first", vacuous)])
    assert [(a, b) for a, b, _ in pairs] == [("first", "second"), ("first", "vague"), ("second", "vague")]
    assert_close(pairs[0][2], 0.9999, tol=1e-12)  # a sensor's first reading counts: "first" is not vacuous
    assert pairs[1][2] == pairs[2][2] == 0.0


def test_fit_plausibility_is_the_chi_square_survival_of_the_relative_likelihood():
    # χ² test of normalised residuals (Bar-Shalom, Li & Kirubarajan 2001, §5.4; from memory), checked
    # against scipy's χ² distribution.
    for dof in (3, 5, 8):
        for c in (0.9, 0.16, 0.063, 1e-3, 1e-9):
            assert_close(fit_plausibility(c, dof), stats.chi2.sf(-2 * math.log(c), dof), tol=1e-12)
    # χ²₂ survival is e^{−x/2}: with two Gaussian errors the relative likelihood is its own plausibility.
    for c in (0.5, 0.01):
        assert_close(stats.chi2.sf(-2 * math.log(c), 2), c, tol=1e-12)
        assert fit_plausibility(c, 2) == c and fit_plausibility(c, 0) == c
    assert fit_plausibility(1.0, 5) == 1.0 and fit_plausibility(0.0, 5) == 0.0
    # Five beams each one σ off (−2 log c = 5) is the median-ish fit of a correct pose, not a conflict.
    assert fit_plausibility(math.exp(-2.5), 5) > 0.4


def test_a_five_beam_scan_fitting_as_a_correct_pose_would_is_no_conflict():
    from fusion.backends.bayes import SUPPORT_SHARE
    from fusion.conflict import support_conflict
    from fusion.sensors.base import Evidence

    p = np.array([0.7, 0.3, 0.0, 0.0])
    contour = np.array([0.06, 0.02, 1.0, 0.5])  # the best cell elsewhere; the belief's cells fit 16× worse
    plain = Evidence("ranger", contour, reliability=0.95)
    scan = Evidence("ranger", contour, reliability=0.95, dof=5)
    assert_close(support_conflict(p, plain, SUPPORT_SHARE), 0.95 * (1 - 0.06))  # 0.89: over a 0.8 threshold
    k = support_conflict(p, scan, SUPPORT_SHARE)
    assert_close(k, 0.95 * (1 - stats.chi2.sf(-2 * math.log(0.06), 5)))
    assert k < 0.8


def test_jousselme_distance_published_values():
    # Jousselme, Grenier & Bossé (2001), "A new distance between two bodies of evidence".
    a = MassFunction.categorical(2, [0])
    b = MassFunction.categorical(2, [1])
    vac = MassFunction.vacuous(2)
    assert_close(jousselme_distance(a, a), 0.0)
    assert_close(jousselme_distance(a, b), 1.0)
    assert_close(jousselme_distance(a, vac), math.sqrt(0.5))


def test_liu_two_dimensional_conflict():
    # Liu (2006), "Analyzing the degree of conflict among belief functions": two identical uniform
    # Bayesian mass functions on five elements have m(∅) = 0.8 but no pignistic disagreement, so the
    # monitor must not call them conflicting.
    m = MassFunction.bayesian(np.full(5, 0.2))
    k = rules.conjunctive(m, m).conflict
    assert_close(k, 0.8)
    difbetp = pignistic_disagreement(m.pignistic(), m.pignistic())
    assert_close(difbetp, 0.0)
    monitor = Monitor(Policy(conflict_k=0.7, disagreement=0.3))
    assert not monitor.disagrees(k, SecondOpinion(disagreement=difbetp))
    assert monitor.disagrees(0.9, SecondOpinion(disagreement=0.5))


def test_evidence_ratio_rises_when_readings_stop_matching():
    avg = EvidenceAverages(slow=0.05, fast=0.5)
    for _ in range(50):
        avg.add(math.log(0.5))
    assert abs(avg.ratio - 1.0) < 1e-9
    for _ in range(5):
        avg.add(math.log(0.01))
    assert avg.ratio > 5.0


def test_support_conflict_is_dempsters_k_with_the_categorical_core():
    # For a consonant mass function, pl(A) = max over A of its contour, and its conflict with the
    # categorical mass function on A is 1 − pl(A) (Shafer 1976, ch. 10); discounting at rate 1 − r
    # scales it by r.  Contour values on the quantisation levels 1, 1/2, 1/4, ... keep it exact.
    import numpy as np

    from fusion.backends.contour import CORE_SHARE
    from fusion.belief import rules
    from fusion.belief.mass import MassFunction
    from fusion.conflict import support_conflict
    from fusion.sensors.base import Evidence

    rng = np.random.default_rng(5)
    for _ in range(20):
        contour = 0.5 ** rng.integers(0, 6, size=40).astype(float)
        contour[rng.integers(40)] = 1.0
        ev = Evidence("camera", contour, reliability=float(rng.uniform(0.5, 1.0)), levels=6)
        p = rng.dirichlet(np.full(40, 0.3))
        core = np.flatnonzero(p >= CORE_SHARE * p.max())
        expected = rules.conflict_mass(MassFunction.categorical(40, core), ev.masses)
        assert abs(support_conflict(p, ev, CORE_SHARE) - expected) < 1e-12


def test_evidential_reading_disagrees_with_the_core_even_below_the_k_threshold():
    from fusion.monitor import Monitor, Policy

    m = Monitor(Policy(conflict_k=0.8, disagreement=0.3))
    assert m.disagrees(0.63, SecondOpinion(core=0.9))  # the belief was swayed toward an earlier ghost sighting
    assert not m.disagrees(0.63, SecondOpinion(core=0.44))
    assert not m.disagrees(0.9, SecondOpinion(disagreement=0.0))  # Liu (2006): large K, no pignistic disagreement
    assert m.disagrees(0.9, SecondOpinion(disagreement=0.5))
