import math

import numpy as np
from support import assert_close

from fusion.belief import rules
from fusion.belief.mass import MassFunction
from fusion.conflict import EvidenceAverages, jousselme_distance, pignistic_disagreement, weight_of_conflict
from fusion.monitor import Monitor, Policy


def test_zadeh_weight_of_conflict():
    # Zadeh (1984) example: K = 0.9999; Shafer (1976) weight of conflict −log(1 − K) = log(10⁴) ≈ 9.21.
    m1 = MassFunction.from_focal(3, {(0,): 0.99, (2,): 0.01})
    m2 = MassFunction.from_focal(3, {(1,): 0.99, (2,): 0.01})
    k = rules.conjunctive(m1, m2).conflict
    assert_close(weight_of_conflict(k), math.log(1e4), tol=1e-9)
    assert abs(weight_of_conflict(k) - 9.21) < 0.005
    assert weight_of_conflict(1.0) == math.inf


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
    monitor = Monitor("evidential", Policy(conflict_k=0.7, disagreement=0.3))
    assert not monitor.disagrees(k, difbetp)
    assert monitor.disagrees(0.9, 0.5)


def test_evidence_ratio_rises_when_readings_stop_matching():
    avg = EvidenceAverages(slow=0.05, fast=0.5)
    for _ in range(50):
        avg.add(math.log(0.5))
    assert abs(avg.ratio - 1.0) < 1e-9
    for _ in range(5):
        avg.add(math.log(0.01))
    assert avg.ratio > 5.0
