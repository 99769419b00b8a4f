import math

import numpy as np
import pytest
from support import assert_close

from fusion import compiled
from fusion.backends.bayes import HistogramFilter
from fusion.backends.contour import ContourFilter
from fusion.backends.evidential import MassFilter
from fusion.belief.mass import MassFunction
from fusion.errors import FrameMismatchError, RuleError
from fusion.grid import PoseGrid
from fusion.sensors.base import Evidence
from fusion.sensors.odometry import OdometryParams, OdometryReading, OdometrySensor
from fusion.sensors.ranging import RangeScan, RangeSensor
from fusion.site import SiteMap


@pytest.fixture(scope="module")
def bay():
    return SiteMap.empty(10.0, 6.0, 0.25, name="test bay").with_box(3.0, 2.0, 4.0, 4.0)


FILTERS = {
    "bayes": lambda grid, free: HistogramFilter(grid, free),
    "evidential": lambda grid, free: ContourFilter(grid, free),
    "evidential-bounded": lambda grid, free: ContourFilter(grid, free, motion="bounded"),
    "evidential-conjunctive": lambda grid, free: ContourFilter(grid, free, rule="conjunctive", motion="bounded"),
    "focal-sets-murphy": lambda grid, free: MassFilter(grid, free, rule="murphy"),
}


@pytest.fixture(params=list(FILTERS))
def backend(request, bay):
    return FILTERS[request.param](bay.grid(12), bay.free)


def test_both_back_ends_localize_from_range_scans_and_odometry(backend, bay):
    grid = backend.grid
    ranger = RangeSensor("lidar", bay, grid)
    odo = OdometrySensor("wheels", grid)
    x, y, th = 6.125, 1.125, 0.0
    for _ in range(6):
        scan = RangeScan(tuple(bay.ray_range(x, y, th + math.radians(b), 8.0) for b in ranger.params.bearings_deg))
        report = backend.update(ranger.encode(scan))
        assert report.backend == backend.name and report.seconds >= 0 and report.region_cells > 0
        backend.predict(odo.motion(OdometryReading(0.25, 0.0, 30.0)))
        x, y, th = x + 0.25 * math.cos(th), y + 0.25 * math.sin(th), th + math.radians(30)
    est = backend.pose_estimate()
    assert math.hypot(est.best_pose[0] - x, est.best_pose[1] - y) < 0.75
    p = backend.distribution()
    assert_close(p.sum(), 1.0)
    assert (p >= 0).all() and (p[~grid.broadcast(bay.free)] == 0).all()


def test_bayes_back_end_matches_the_kalman_filter_in_one_dimension():
    # Kalman (1960): for a Gaussian prior N(μ0, σ0²), motion u with noise σu and a measurement z with
    # noise σz, the posterior is Gaussian with closed-form mean and variance. On a 1-D corridor
    # discretised at 2 cm the histogram filter must agree to grid error.
    res = 0.02
    grid = PoseGrid(20.0, res, res, 1)
    xs = grid.x_centres()
    mu0, s0, u, su, z, sz = 6.0, 0.5, 2.0, 0.3, 8.4, 0.4
    filt = HistogramFilter(grid)
    filt.reset(np.exp(-0.5 * ((xs - mu0) / s0) ** 2))
    odo = OdometrySensor("wheels", grid, OdometryParams(sigma_per_m=su / math.sqrt(u)))
    filt.predict(odo.motion(OdometryReading(u)))
    filt.update(Evidence("ranger", np.exp(-0.5 * ((xs - z) / sz) ** 2)))
    p = filt.distribution()
    mean, var = float(p @ xs), float(p @ (xs - p @ xs) ** 2)
    prior_var = s0**2 + su**2
    gain = prior_var / (prior_var + sz**2)
    assert abs(mean - (mu0 + u + gain * (z - mu0 - u))) < res / 10
    assert abs(var - (1 - gain) * prior_var) < res**2


def test_reliable_bayesian_mass_functions_give_the_bayes_posterior(bay):
    # Shafer (1976), ch. 3: Dempster's rule on Bayesian mass functions is Bayes' rule, so with fully
    # reliable sensors whose mass functions are Bayesian both back ends hold the same distribution.
    grid = PoseGrid(2.0, 1.5, 0.25, 4)
    rng = np.random.default_rng(8)
    bayes, mass = HistogramFilter(grid), MassFilter(grid, rule="dempster", max_focal=grid.n_cells)
    for _ in range(4):
        ev = Evidence("s", rng.random(grid.n_cells), reliability=1.0, form="bayesian")
        bayes.update(ev)
        mass.update(ev)
        assert_close(mass.distribution(), bayes.distribution(), tol=1e-12)


def test_total_conflict_and_zero_evidence_leave_the_belief_and_say_so(backend):
    n = backend.grid.n_cells
    only_first = np.zeros(n)
    only_first[np.flatnonzero(backend.distribution())[0]] = 1.0
    backend.update(Evidence("a", only_first))
    before = backend.distribution().copy()
    elsewhere = np.zeros(n)
    elsewhere[np.flatnonzero(backend.distribution() == 0)[0]] = 1.0
    report = backend.update(Evidence("b", elsewhere))
    assert report.rejected
    if backend.name == "evidential":
        assert_close(report.conflict, 1.0)
    else:
        assert report.log_evidence == -math.inf
    assert_close(backend.distribution(), before)


def test_focal_sets_stay_bounded(bay):
    grid = bay.grid(12)
    filt = MassFilter(grid, bay.free, max_focal=8)
    rng = np.random.default_rng(3)
    for _ in range(10):
        report = filt.update(Evidence("s", rng.random(grid.n_cells), reliability=0.9, levels=4))
        assert report.focal_sets <= 8 + 1
        assert_close(filt.belief.masses.sum(), 1.0)


def test_a_fully_reliable_reading_is_conditioned_on_the_belief_without_rounding_over_one():
    """A reading of reliability 1 whose contour peaks at m < 1 over the cells the belief allows (U).  Conditioning
    on U (Dempster's rule with the categorical mass function on U; Shafer 1976, ch. 3) leaves a reading with
    contour c / m, undiscounted, and removes conflict 1 − m; here c / m = 1 on U, so the belief is unchanged.  The
    conditioned reliability r·m / (r·m + 1 − r) once rounded a hair over 1 and the update raised."""
    grid = PoseGrid(2.0, 1.0, 0.5, 2)  # 16 cells
    inside = np.arange(grid.n_cells) < 8
    peak = 0.8756292572035381  # a value at which (m + 1) − 1 ≠ m in floating point
    assert (peak + 1.0) - 1.0 != peak
    cells = np.flatnonzero(inside)
    belief = MassFunction.from_focal(grid.n_cells, {tuple(cells[:3]): 0.25, tuple(cells[2:]): 0.75})
    filt = MassFilter(grid, rule="dempster", report_region=False)
    filt.reset(belief)
    report = filt.update(Evidence("exact", np.where(inside, peak, 1.0), reliability=1.0))
    # The reference: Dempster's rule's conflict by its definition, K = Σ_{B∩C=∅} m1(B) m2(C), on the reading's
    # exact consonant mass function (its two focal sets: the cells outside U, mass 1 − m; every cell, mass m).
    assert_close(report.conflict, 1.0 - peak)
    assert_close(filt.belief.bel(cells[:3]), 0.25)
    assert_close(filt.belief.pignistic(), belief.pignistic())


def test_mismatched_evidence_and_unknown_rules_are_refused(backend):
    with pytest.raises(FrameMismatchError, match="covers 3 cells"):
        backend.update(Evidence("tiny", np.ones(3)))
    with pytest.raises(RuleError, match="choose one of: dempster"):
        MassFilter(backend.grid, rule="average-ish")


@pytest.mark.parametrize("concentration", [1e-3, 0.05, 1.0, 50.0])
def test_region_size_is_the_highest_density_region_by_its_definition(concentration):
    # The smallest set of cells holding 95% of the mass is the most probable cells taken in order
    # until their sum reaches 95% (Hyndman 1996, Computing and graphing highest density regions):
    # counted here by a full sort, against the bracketing search the back ends use.
    from fusion.backends.region import _GATHER, region_size

    rng = np.random.default_rng(int(concentration * 1000))
    for n in (10, 3 * _GATHER, 200_000):
        p = rng.dirichlet(np.full(n, concentration))
        p[rng.random(n) < 0.1] = 0.0
        p[: n // 50] = p[0]  # ties
        desc = np.sort(p[p > 0])[::-1]
        expected = int(np.searchsorted(np.cumsum(desc), 0.95 * desc.sum() * (1 - 1e-12)) + 1)
        assert region_size(p, 0.95) == min(expected, desc.size)


def test_region_size_of_uniform_beliefs_is_the_definition():
    # A uniform belief (a start anywhere, a re-seed) over all cells or a part of them: one bin of equal values,
    # counted without a sort; the count is the definition's (Hyndman 1996), by a full sort and cumulative sum.
    from fusion.backends.region import region_size

    rng = np.random.default_rng(8)
    for n in (50, 20_000, 300_000):
        for p in (np.ones(n), (rng.random(n) < 0.6) * 0.25, np.where(rng.random(n) < 0.5, 1.0, 1e-9)):
            desc = np.sort(p[p > 0])[::-1]
            expected = int(np.searchsorted(np.cumsum(desc), 0.95 * p.sum() * (1 - 1e-12)) + 1)
            assert region_size(p, 0.95) == min(expected, desc.size)


def test_region_size_of_degenerate_beliefs_neither_raises_nor_hangs():
    # Hostile inputs: empty, all zero, NaN, infinite, a total too small for the fixed-point unit (subnormal values),
    # a negative cell, float32.  Where the count is defined it is the definition's (Hyndman 1996, full sort).
    from fusion.backends.region import region_size

    rng = np.random.default_rng(3)
    tiny = np.where(rng.random(20_000) < 0.5, 0.0, 1e-320)
    with np.errstate(all="ignore"):
        assert region_size(np.zeros(0)) == 0 and region_size(np.zeros(50)) == 0
        assert region_size(np.array([np.nan, 1.0])) == 0  # not a belief: nothing to count
        assert region_size(np.array([np.inf, 1.0, 2.0])) == 1
        assert region_size(np.full(10_000, 1e308)) == 9_500
    desc = np.sort(tiny[tiny > 0])[::-1]
    assert region_size(tiny) == int(np.searchsorted(np.cumsum(desc), 0.95 * desc.sum() * (1 - 1e-12)) + 1)
    negative = rng.random(30_000)
    negative[7] = -0.5
    assert 0 <= region_size(negative) <= negative.size
    single = rng.random(30_000).astype(np.float32)
    desc = np.sort(single.astype(np.float64))[::-1]
    assert region_size(single) == int(np.searchsorted(np.cumsum(desc), 0.95 * desc.sum() * (1 - 1e-12)) + 1)


def test_the_region_sample_sorts_by_bit_pattern_as_numpy_sorts_values():
    # Non-negative float64 values order as their bit patterns read as integers do (IEEE 754-2008, §3.4: the
    # encoding is sign, biased exponent, significand); -0.0 is the one non-negative value whose pattern is negative.
    from fusion.backends.region import _sorted

    rng = np.random.default_rng(12)
    for values in (
        rng.random(4096),
        np.array([0.5, -0.0, 0.0, 5e-324, 1e-310, np.inf, 2.0**-1022]),
        np.exp(rng.normal(0.0, 200.0, 3000)),
        rng.random(9000)[::7],  # a strided sample, as the count takes it
        rng.random(100) - 0.5,  # negatives: numpy's float sort instead
        np.array([]),
        np.full(50, 0.25),  # every byte the same in every key: no pass moves anything
    ):
        np.testing.assert_array_equal(_sorted(values), np.sort(values))
        # The compiled radix sort (without numba: the same numpy sort), -0.0 and negatives sent to numpy's sorts
        np.testing.assert_array_equal(_sorted(values, compiled.kernels()), np.sort(values))


def test_region_search_counts_as_the_full_sort_does_whatever_its_sample_shows():
    # The bracketing search against the highest-density region by its definition, a full sort (Hyndman 1996), on
    # spread, tied, wide-ranging and equal values, and on beliefs its evenly spaced sample cannot see: every sampled
    # cell empty, the mass in a run of near-equal values between them, or between sampled cells too small to weigh
    # in fixed point (no first bracket can be placed).  The counts decide, not the sample, so
    # these take the bit-pattern splitting and equal-value steps; ``calls`` checks that they end.
    from fusion.backends import region

    rng = np.random.default_rng(8)
    hidden = rng.random(60_000)
    hidden[:: 60_000 // region._SAMPLE] = 0.0
    close = np.full(60_000, 1e-9)
    close[1::2] = 1.0 + rng.integers(0, 50, 30_000) * 2.0**-50  # distinct values a few bits apart
    close[:: 60_000 // region._SAMPLE] = 0.0
    unseen = 1e-25 * (1.0 + rng.random(200_000))  # sampled cells too small to weigh: no first bracket to place
    between = np.setdiff1d(np.arange(200_000), np.arange(0, 200_000, region._stride(200_000)))[:5_000]
    unseen[between] = rng.random(5_000)
    calls = []
    counts = region._Bracket._counts
    try:
        region._Bracket._counts = lambda self, trials: calls.append(trials) or counts(self, trials)
        for values in (
            rng.random(50_000),
            np.repeat(rng.random(40), 500),
            np.exp(rng.normal(0.0, 6.0, 30_000)),
            np.full(10_000, 0.25),
            np.full(100_000, 0.25),
            hidden,
            close,
            unseen,
        ):
            calls.clear()
            desc = np.sort(values[values > 0])[::-1]
            expected = int(min(np.searchsorted(np.cumsum(desc), 0.95 * desc.sum() * (1 - 1e-12)) + 1, desc.size))
            assert region.region_size(values, 0.95) == expected
            assert len(calls) <= 70  # at worst about two passes per halving of the bit patterns' span
    finally:
        region._Bracket._counts = counts
