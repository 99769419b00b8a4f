"""The particle back end against outside results: the histogram posterior it approximates (with an error falling
like 1/√N), the KLD bound against the exact χ² quantile, the odometry model's moments, and the textbook's
recovery rule."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from fusion.backends.base import Backend
from fusion.backends.particles import ParticleFilter, ParticleSettings, kld_bound
from fusion.grid import PoseGrid
from fusion.sensors.base import Evidence
from fusion.sensors.odometry import OdometryParams, OdometryReading, OdometrySensor

GRID = PoseGrid(5.0, 3.0, 0.5, 4)  # 10 × 6 cells × 4 headings = 240 cells


def _bump(x0: float, y0: float, sigma: float = 0.8) -> np.ndarray:
    xs, ys, _ = GRID.poses_of(np.arange(GRID.n_cells))
    return np.exp(-0.5 * ((xs - x0) ** 2 + (ys - y0) ** 2) / sigma**2)


def _fixed(n: int, seed: int) -> ParticleFilter:
    return ParticleFilter(GRID, None, settings=ParticleSettings(min_particles=n, max_particles=n), seed=seed)


def test_it_is_a_back_end():
    assert isinstance(_fixed(100, 0), Backend)


def test_the_particle_posterior_converges_to_the_histogram_posterior_like_one_over_root_n():
    # Bayes' rule on the grid is the exact answer (Thrun, Burgard & Fox 2005, §4.1: the histogram filter);
    # importance sampling from the prior converges to it with a Monte Carlo error ∝ 1/√N (Robert & Casella 2004,
    # Monte Carlo Statistical Methods, §3.2).  Mean total-variation distance over 8 seeds per N; the fitted
    # slope of log TV against log N must lie near −1/2 (tolerance ours).
    readings = [Evidence("a", _bump(1.2, 2.1), 0.9), Evidence("b", _bump(1.6, 1.8, 1.2), 0.8)]
    exact = np.ones(GRID.n_cells)
    for e in readings:
        exact = exact * e.likelihood
    exact /= exact.sum()
    sizes = [500, 2000, 8000, 32000]
    tv = []
    for n in sizes:
        runs = []
        for seed in range(8):
            pf = _fixed(n, seed)
            for e in readings:
                pf.update(e)
            runs.append(0.5 * float(np.abs(pf.distribution() - exact).sum()))
        tv.append(float(np.mean(runs)))
    assert all(a > b for a, b in zip(tv, tv[1:])), tv
    slope = np.polyfit(np.log(sizes), np.log(tv), 1)[0]
    assert -0.65 < slope < -0.35, (slope, tv)


def test_the_kld_bound_is_fox_s_chi_square_quantile():
    # Fox (2003): n = χ²_{k−1, 1−δ} / (2ε); the closed form uses the Wilson–Hilferty approximation of the
    # quantile, within 1% of the exact one (scipy.stats.chi2) from 10 bins on (tolerance ours).
    for k in (10, 50, 200, 1000):
        exact = stats.chi2.ppf(0.99, k - 1) / (2 * 0.05)
        assert float(kld_bound(k, 0.05, stats.norm.ppf(0.99))) == pytest.approx(exact, rel=0.01)


def test_a_concentrated_belief_keeps_fewer_particles_than_a_spread_one():
    pf = ParticleFilter(GRID, None, settings=ParticleSettings(min_particles=50, max_particles=5000), seed=3)
    sharp = Evidence("a", _bump(2.0, 1.5, 0.3), 1.0)
    pf.update(sharp)
    pf.update(sharp)
    assert pf.count < 5000 / 2


def test_prediction_moves_particles_by_the_odometry_model():
    # The sample mean and variance of the moved particles match the model's: the displacement turned by the
    # heading, and a Gaussian spread of σ = sigma_per_m·√d per axis (closed form; 4σ/√n tolerance).
    grid = PoseGrid(40.0, 40.0, 0.5, 36)
    odo = OdometrySensor("wheels", grid, OdometryParams(sigma_per_m=0.1, reliability=1.0))
    pf = ParticleFilter(grid, None, settings=ParticleSettings(min_particles=20000, max_particles=20000), seed=1)
    start = np.zeros(grid.n_cells)
    start[grid.cell_of(10.0, 10.0, 0.0)] = 1.0
    pf.reset(start)
    before = pf.state.poses.copy()
    pf.predict(odo.motion(OdometryReading(4.0, 0.0, 0.0)))
    moved = pf.state.poses - before
    heading = before[:, 2]
    expected_dx = 4.0 * np.cos(heading)
    sigma = 0.1 * math.sqrt(4.0)
    residual = moved[:, 0] - expected_dx
    n = len(residual)
    assert abs(residual.mean()) < 4 * sigma / math.sqrt(n)
    assert residual.std() == pytest.approx(sigma, rel=0.05)


def test_random_particles_are_injected_after_a_carry_and_not_while_the_readings_agree():
    # Augmented MCL (Thrun, Burgard & Fox 2005, table 8.3): the chance of a random particle is
    # max(0, 1 − w_fast / w_slow); readings that keep agreeing keep it at 0; readings from elsewhere drop the
    # short-term average below the long-term one and random particles appear.  Rates 0.01 and 0.3 (α_slow ≪
    # α_fast as the book asks) let the long-term average settle in a few hundred readings.
    rates = ParticleSettings(min_particles=2000, max_particles=2000, slow_rate=0.01, fast_rate=0.3)
    pf = ParticleFilter(GRID, None, settings=rates, seed=5)
    here = Evidence("a", _bump(1.0, 1.0, 0.5), 1.0)
    injected = []
    for _ in range(400):
        pf.update(here)
        pf._resample()
        injected.append(pf.injected)
    assert sum(injected[200:]) == 0
    there = Evidence("a", _bump(4.0, 2.5, 0.5), 1.0)
    after = []
    for _ in range(3):
        pf.update(there)
        pf._resample()
        after.append(pf.injected)
    assert max(after) > 0


def test_the_same_seed_gives_the_same_particles():
    e = Evidence("a", _bump(1.2, 2.1), 0.9)
    a, b = _fixed(1000, 9), _fixed(1000, 9)
    a.update(e)
    b.update(e)
    np.testing.assert_array_equal(a.state.poses, b.state.poses)


def test_the_decision_reports_the_effective_sample_share():
    # Kong, Liu & Wong (1994) / Liu (2001), Monte Carlo Strategies in Scientific Computing, §2.5: the effective
    # sample size 1/Σw² of normalised weights; all weights equal give N (share 1).  A sighting that only part of
    # the particles fit drops the share below 1; the decision's figures carry the share the filter holds.
    from fusion.io.case import load_case
    from fusion.io.observations import Observation
    from fusion.localizer import Localizer
    from fusion.sensors.markers import MarkerSighting
    from tests.test_case import TINY

    loc = Localizer.from_case(load_case(TINY), "particles")
    loc.start_anywhere()
    first = loc.sensors.site.markers[0]
    # After a reset to ignorance the first reading draws the particles from its posterior: equal weights.
    d = loc.step(None, [Observation(0.0, "camera", "markers", MarkerSighting(first.marker_id, 1.0, 0.0))])
    assert d.figures.effective_share == 1.0
    d = loc.step(None, [Observation(0.5, "camera", "markers", MarkerSighting(first.marker_id, 1.4, 0.0))])
    share = d.figures.effective_share
    assert share is not None and 0.0 < share < 0.9
    if share >= 0.5:  # not resampled: the filter still holds the weights the share was measured on
        assert loc.filter.effective_share() == pytest.approx(share)
    assert "effective_share" in d.to_record()["figures"]
    w = np.full(10, 0.1)
    assert float(1.0 / (w @ w)) == pytest.approx(10.0)


def test_conflict_is_scored_on_the_cells_the_particles_occupy_as_on_their_histogram():
    # A reading's support conflict (K = r·(1 − pl) of its best fit on the cells with weight ≥ 10⁻³ of the heaviest,
    # Dempster's rule against the categorical mass function on that support) is found from the occupied cells
    # alone; it must equal the definition on the whole histogram, alone and for a tick's readings at once.
    from fusion.backends.bayes import SUPPORT_SHARE
    from fusion.conflict import support_conflict, support_joint_conflict

    filt = _fixed(500, 3)
    filt.update(Evidence("a", _bump(1.2, 2.1), 0.9))
    snapshot = filt.snapshot()
    histogram = filt._histogram(snapshot)
    readings = [Evidence("b", _bump(4.0, 0.5, 0.5), 0.8, dof=5), Evidence("c", _bump(1.0, 2.0), 0.7)]
    for e in readings:
        assert filt.reading_conflict(snapshot, e) == support_conflict(histogram, e, SUPPORT_SHARE)
    pairs = [(e.sensor, e) for e in readings]
    assert filt.joint_conflict(snapshot, pairs) == support_joint_conflict(histogram, pairs, SUPPORT_SHARE)
    assert 0 < filt.reading_conflict(snapshot, readings[0]) < 1  # a reading off the belief's cells, not all of it
