"""The contour belief and the evidential back end built on it, checked against published identities and
against exact focal-set computation on small frames."""

import math

import numpy as np
import pytest
from support import assert_close

from fusion.backends.bayes import HistogramFilter
from fusion.backends.contour import ContourFilter
from fusion.belief import rules
from fusion.belief.contour import ContourBelief
from fusion.belief.mass import MassFunction
from fusion.grid import PoseGrid
from fusion.sensors.base import Evidence
from fusion.sensors.odometry import OdometryParams, OdometryReading, OdometrySensor


def _random_mass(rng, n, k):
    focal = {}
    for _ in range(k):
        cells = tuple(sorted(set(rng.integers(0, n, size=int(rng.integers(1, n + 1))).tolist())))
        focal[cells] = focal.get(cells, 0.0) + float(rng.random())
    total = sum(focal.values())
    return MassFunction.from_focal(n, {c: v / total for c, v in focal.items()})


def test_dempster_multiplies_contours():
    # Shafer (1976), ch. 3: commonalities multiply under Dempster's rule; the commonality of a single
    # cell is its plausibility, so pl_{m1⊕m2} = pl1 · pl2 / (1 − K), for any two mass functions.
    rng = np.random.default_rng(3)
    for _ in range(30):
        m1, m2 = _random_mass(rng, 7, 5), _random_mass(rng, 7, 5)
        k = rules.conflict_mass(m1, m2)
        if k > 1 - 1e-9:
            continue
        joint = rules.dempster(m1, m2)
        assert_close(joint.contour(), m1.contour() * m2.contour() / (1 - k), tol=1e-12)


def test_consonant_conflict_and_pignistic_match_the_focal_set_computation():
    # For consonant mass functions (Shafer 1976, ch. 10) the contour determines everything: K against a
    # consonant reading and the pignistic transform (Smets & Kennes 1994) computed from the nested sets.
    # Contours on a few exact levels; the level bins may err by 0.1% of a level (LEVEL_RATIO).
    rng = np.random.default_rng(11)
    for _ in range(25):
        n = 60
        belief = 0.5 ** rng.integers(0, 8, size=n).astype(float)
        belief[rng.integers(n)] = 1.0
        reading = 0.5 ** rng.integers(0, 8, size=n).astype(float)
        reading[rng.integers(n)] = 1.0
        exact_b, exact_r = MassFunction.from_contour(belief), MassFunction.from_contour(reading)
        cb = ContourBelief(belief)
        assert abs(cb.conflict_with(reading) - rules.conflict_mass(exact_b, exact_r)) < 2e-3
        assert np.abs(cb.pignistic() - exact_b.pignistic()).max() < 2e-3
        p = rng.dirichlet(np.ones(n))
        assert abs(cb.conflict_with(p, bayesian=True) - rules.conflict_mass(exact_b, MassFunction.bayesian(p))) < 2e-3
        region = rng.random(n) < 0.3
        assert_close(cb.pl(region), exact_b.pl(np.flatnonzero(region)), tol=1e-12)
        assert_close(cb.bel(region), exact_b.bel(np.flatnonzero(region)), tol=1e-12)


def test_consonant_distance_is_the_jousselme_distance_of_the_level_sets():
    # Jousselme, Grenier & Bossé (2001): d = sqrt(½ (m1 − m2)ᵀ D (m1 − m2)), D the Jaccard index of the
    # focal sets; the closed form for nested sets must give the general pairwise computation's value.
    from fusion.belief.contour import consonant_distance
    from fusion.conflict import jousselme_distance

    rng = np.random.default_rng(9)
    for i in range(12):
        a = ContourBelief(rng.random(200) ** 3)
        b = ContourBelief(rng.random(200) ** 2 * (rng.random(200) > 0.3), empty=0.3 * (i % 2))
        assert_close(
            consonant_distance(a, b), jousselme_distance(a.as_mass_function(), b.as_mass_function()), tol=1e-12
        )
    assert consonant_distance(a, a) == 0.0


def _small_site_pair(motion_seed: int, form: str, reliability: float):
    grid = PoseGrid(3.0, 2.0, 0.25, 8)
    rng = np.random.default_rng(motion_seed)
    bayes, contour = HistogramFilter(grid), ContourFilter(grid, motion="probabilistic")
    odo = OdometrySensor("wheels", grid, OdometryParams(sigma_per_m=0.1, turn_sigma_per_m_deg=5.0))
    diff = 0.0
    for _ in range(50):
        motion = odo.motion(OdometryReading(float(rng.uniform(0, 0.3)), 0.0, float(rng.uniform(-30, 30))))
        bayes.predict(motion)
        contour.predict(motion)
        ev = Evidence("s", rng.random(grid.n_cells) ** 3, reliability=reliability, form=form)
        bayes.update(ev)
        contour.update(ev)
        diff = max(diff, float(np.abs(contour.distribution() - bayes.distribution()).max()))
    return diff


def test_plausibility_transform_equals_the_bayes_posterior_over_50_cycles():
    # Shafer (1976), ch. 3 and 11; Cobb & Shenoy (2006), "On the plausibility transformation method for
    # translating belief function models to probability models": Dempster's rule acts on contours as
    # Bayes' rule on likelihoods, so with probabilistic motion the plausibility transform of the filtered
    # belief is the Bayes posterior.  Reliable Bayesian evidence, then discounted consonant evidence.
    assert _small_site_pair(1, "bayesian", 1.0) < 1e-9
    assert _small_site_pair(2, "consonant", 0.8) < 1e-9


@pytest.mark.parametrize("motion", ["probabilistic", "bounded"])
def test_standing_still_leaves_the_belief_as_it_was(motion):
    # Odometry errors grow with distance and turn, never per record: 200 zero-motion records change nothing.
    grid = PoseGrid(4.0, 3.0, 0.25, 12)
    odo = OdometrySensor("wheels", grid)
    rng = np.random.default_rng(4)
    filt = ContourFilter(grid, motion=motion)
    filt.update(Evidence("s", rng.random(grid.n_cells), reliability=0.9))
    bayes = HistogramFilter(grid)
    bayes.update(Evidence("s", rng.random(grid.n_cells), reliability=0.9))
    before, before_b = filt.distribution().copy(), bayes.distribution().copy()
    for _ in range(200):
        filt.predict(odo.motion(OdometryReading(0.0)))
        bayes.predict(odo.motion(OdometryReading(0.0)))
    assert_close(filt.distribution(), before, tol=1e-12)
    assert_close(bayes.distribution(), before_b, tol=1e-12)


def test_bounded_motion_grows_with_distance_not_with_records():
    # Set-valued motion: bounds of successive stretches add, so 2 m driven as 1, 4 or 40 records gives
    # the same reachable set, up to the one cell that rounding to the grid may add or take.
    grid = PoseGrid(8.0, 2.0, 0.25, 4)
    odo = OdometrySensor("wheels", grid, OdometryParams(sigma_per_m=0.1, bound_sigmas=3.0))
    widths = []
    for records in (1, 4, 40):
        filt = ContourFilter(grid, motion="bounded")
        start = np.zeros(grid.n_cells)
        start[grid.cell_of(1.125, 1.125, 0.0)] = 1.0
        filt.reset(start)
        for _ in range(records):
            filt.predict(odo.motion(OdometryReading(2.0 / records)))
        plane = filt.belief.contour.reshape(grid.shape)[0]
        cols = np.flatnonzero(plane.max(axis=0) > 0)
        widths.append((cols.min(), cols.max()))
    # 2 m ± 3·0.1·2 = 0.6 m: from 2.525 m to 3.725 m past the start cell's centre, in 0.25 m cells.
    for lo, hi in widths:
        assert abs(lo - widths[0][0]) <= 1 and abs(hi - widths[0][1]) <= 1
        assert abs((hi - lo + 1) * 0.25 - (2 * 0.6 + 0.25)) <= 0.5


def test_conjunctive_rule_keeps_the_conflict_on_the_empty_set():
    grid = PoseGrid(2.0, 1.0, 0.25, 1)
    filt = ContourFilter(grid, rule="conjunctive")
    first, second = np.zeros(grid.n_cells), np.zeros(grid.n_cells)
    first[:4], second[4:] = 1.0, 1.0  # disjoint: K = r = 0.5
    filt.update(Evidence("a", first))
    report = filt.update(Evidence("b", second, reliability=0.5))
    assert abs(report.conflict - 0.5) < 1e-3 and math.isclose(filt.belief.empty, report.conflict)
    assert_close(filt.distribution().sum(), 1.0)


def test_joint_conflict_runs_that_share_a_beginning_give_what_fresh_runs_give():
    # Blame asks one snapshot for the tick's readings and for each sensor's left out; the filter reuses the beliefs
    # along runs that share a beginning.  Each answer must equal 1 − Π(1 − K_i) of a fresh filter that never saw the
    # other runs (the chain rule of conflict: K of successive Dempster combinations), bit for bit, in any order,
    # with a reading that conflicts totally among them.
    from fusion.backends.contour import ContourFilter
    from fusion.grid import PoseGrid
    from fusion.sensors.base import Evidence

    grid = PoseGrid(4.0, 3.0, 0.5, 4)
    rng = np.random.default_rng(21)
    start = ContourFilter(grid)
    start.update(Evidence("s", rng.random(grid.n_cells), 0.9))
    snapshot = start.belief
    readings = [(f"r{i}", Evidence(f"r{i}", rng.random(grid.n_cells) ** 3, 0.8)) for i in range(4)]
    clash = ("x", Evidence("x", np.where(snapshot.contour > 0, 0.0, 1.0), 1.0))  # nothing where the belief is
    runs = [readings, readings[1:], readings[:2] + readings[3:], readings[:3], readings[:1], readings[:2] + [clash],
            readings[:2] + [clash] + readings[2:], readings[:2], []]  # fmt: skip
    reused = ContourFilter(grid)
    for order in (runs, runs[::-1]):
        for run in order:
            fresh = ContourFilter(grid)
            assert reused.joint_conflict(snapshot, run) == fresh.joint_conflict(snapshot, run)
    assert reused.joint_conflict(snapshot, readings[:2] + [clash]) == 1.0
    assert reused.joint_conflict(snapshot, []) == 0.0
