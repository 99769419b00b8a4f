"""The Gaussian back end (extended Kalman filter) against outside references.

- Kalman (1960), "A new approach to linear filtering and prediction problems": on a one-dimensional linear
  case the filter is the scalar Kalman filter in closed form.
- filterpy (Labbe, the registry's general-purpose Kalman filtering library), used only as a test reference:
  the EKF's predict and update on marker sightings agree with its ``KalmanFilter`` and
  ``ExtendedKalmanFilter`` given Jacobians taken here by finite differences.
- Bar-Shalom, Li & Kirubarajan (2001), *Estimation with Applications to Tracking and Navigation*, §5.4: under
  a correct model the normalised innovation squared is χ²_m distributed (mean m, 1% beyond the 99% gate).
- Bell & Cathey (1993), "The iterated Kalman filter update as a Gauss–Newton method": the iterated update
  of a linear measurement is the plain update (one Gauss–Newton step is exact).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from filterpy.kalman import ExtendedKalmanFilter, KalmanFilter
from scipy.stats import chi2

from fusion.backends import build
from fusion.backends.gaussian import GaussianFilter
from fusion.belief.gaussian import (
    Linearised,
    NotLinearisable,
    PoseGaussian,
    check_covariance,
    iterated_update,
    kalman_update,
    predicted,
    wrap,
)
from fusion.errors import ObservationError
from fusion.grid import PoseGrid
from fusion.sensors.base import Evidence
from fusion.sensors.linearised import MarkerPoint, ScanPoint, SignedField
from fusion.sensors.markers import MarkerParams
from fusion.sensors.ranging import RangeParams
from fusion.site import SiteMap


def _gaussian(x, y, h, sx=0.3, sy=0.3, sh=0.1) -> PoseGaussian:
    return PoseGaussian(np.array([x, y, h]), np.diag([sx**2, sy**2, sh**2]))


def test_one_dimensional_case_is_the_scalar_kalman_filter_in_closed_form():
    """Heading 0, moves forward only, position read directly: x⁻ = x + f, P⁻ = P + q, K = P⁻/(P⁻ + r),
    x⁺ = x⁻ + K (z − x⁻), P⁺ = (1 − K) P⁻ (Kalman 1960), for 30 steps of random moves and readings."""
    rng = np.random.default_rng(3)
    belief = PoseGaussian(np.array([1.0, 0.0, 0.0]), np.diag([0.5, 0.2, 1e-4]))
    x, p = 1.0, 0.5
    q, r = 0.04, 0.09
    for _ in range(30):
        f = float(rng.uniform(0.1, 1.0))
        z = x + f + float(rng.normal(0, 0.3))
        belief = predicted(belief, f, 0.0, 0.0, q, 0.0)
        x, p = x + f, p + q
        lin = Linearised(np.array([z - belief.x]), np.array([[1.0, 0.0, 0.0]]), np.array([[r]]))
        belief = kalman_update(belief, lin).belief
        k = p / (p + r)
        x, p = x + k * (z - x), (1 - k) * p
        assert belief.x == pytest.approx(x, abs=1e-12)
        assert belief.cov[0, 0] == pytest.approx(p, abs=1e-12)


def test_linear_steps_agree_with_filterpy_kalman_filter():
    """Predict and update of a linear case agree with filterpy's KalmanFilter (same F, Q, H, R)."""
    belief = PoseGaussian(np.array([2.0, 3.0, 0.0]), np.array([[0.3, 0.05, 0.0], [0.05, 0.2, 0.0], [0.0, 0.0, 0.01]]))
    kf = KalmanFilter(dim_x=3, dim_z=2)
    kf.x = belief.mean.reshape(3, 1).copy()
    kf.P = belief.cov.copy()
    # At heading 0 a forward move f makes y depend on the heading by f (the motion's Jacobian); the mean is at
    # heading 0, so F x + u is the move itself.
    kf.F = np.array([[1.0, 0.0, 0.0], [0.0, 1.0, 0.7], [0.0, 0.0, 1.0]])
    kf.B = np.eye(3)
    kf.Q = np.diag([0.02, 0.02, 0.001])
    kf.H = np.array([[1.0, 0.0, 0.0], [0.0, 1.0, 0.0]])
    kf.R = np.array([[0.1, 0.02], [0.02, 0.15]])
    ours = predicted(belief, 0.7, 0.0, 0.0, 0.02, 0.001)
    kf.predict(u=np.array([[0.7], [0.0], [0.0]]))
    np.testing.assert_allclose(ours.mean, kf.x.ravel(), atol=1e-12)
    np.testing.assert_allclose(ours.cov, kf.P, atol=1e-12)
    z = np.array([2.9, 2.8])
    lin = Linearised(z - ours.mean[:2], kf.H, kf.R)
    out = kalman_update(ours, lin)
    kf.update(z.reshape(2, 1))
    np.testing.assert_allclose(out.belief.mean[:2], kf.x.ravel()[:2], atol=1e-12)
    assert abs(wrap(out.belief.mean[2] - kf.x[2, 0])) < 1e-12  # ours keeps the heading in [0, 2π)
    np.testing.assert_allclose(out.belief.cov, kf.P, atol=1e-12)


def _range_bearing(pose, marker):
    dx, dy = marker[0] - pose[0], marker[1] - pose[1]
    return np.array([math.hypot(dx, dy), math.atan2(dy, dx) - pose[2]])


def _numeric_jacobian(fn, x, eps=1e-6, angle_rows=()):
    out = []
    for i in range(len(x)):
        d = np.zeros(len(x))
        d[i] = eps
        diff = fn(x + d) - fn(x - d)
        for row in angle_rows:
            diff[row] = wrap(diff[row])
        out.append(diff / (2 * eps))
    return np.array(out).T


def _moved(pose, forward, left, turn):
    c, s = math.cos(pose[2]), math.sin(pose[2])
    return np.array([pose[0] + c * forward - s * left, pose[1] + s * forward + c * left, pose[2] + turn])


def test_marker_steps_agree_with_filterpy_extended_kalman_filter():
    """Ten moves and sightings of two markers: our EKF against filterpy's ExtendedKalmanFilter, its Jacobians
    taken here by central differences of the motion and range-bearing functions, bearings wrapped."""
    rng = np.random.default_rng(11)
    params = MarkerParams(sigma_range_m=0.1, sigma_bearing_deg=2.0)
    markers = [(6.0, 2.0), (1.0, 7.0)]
    ours = PoseGaussian(np.array([2.0, 2.5, 0.4]), np.diag([0.2, 0.3, 0.05]))
    ekf = ExtendedKalmanFilter(dim_x=3, dim_z=2)
    ekf.x = ours.mean.reshape(3, 1).copy()
    ekf.P = ours.cov.copy()
    for step in range(10):
        f, left, turn = float(rng.uniform(0.2, 0.6)), float(rng.uniform(-0.1, 0.1)), float(rng.uniform(-0.3, 0.3))
        q_xy, q_h = 0.01, 0.002
        ours = predicted(ours, f, left, turn, q_xy, q_h)
        x0 = ekf.x.ravel().copy()
        ekf.F = _numeric_jacobian(lambda p, f=f, left=left, turn=turn: _moved(p, f, left, turn), x0)
        ekf.Q = np.diag([q_xy, q_xy, q_h])
        ekf.predict_x = lambda u, x0=x0, f=f, left=left, turn=turn: setattr(
            ekf, "x", _moved(x0, f, left, turn).reshape(3, 1)
        )
        ekf.predict()
        marker = markers[step % 2]
        z = _range_bearing(ours.mean, marker) + rng.normal(0, [0.1, math.radians(2.0)])
        point = MarkerPoint("m", marker, z[0], z[1], params)
        ours = kalman_update(ours, point.linearise(ours.mean)).belief

        def hx(x, marker=marker):
            return _range_bearing(x.ravel(), marker).reshape(2, 1)

        def jac(x, marker=marker):
            return _numeric_jacobian(lambda p: _range_bearing(p, marker), x.ravel(), angle_rows=(1,))

        def residual(a, b):
            d = (a - b).ravel()
            d[1] = wrap(d[1])
            return d.reshape(2, 1)

        ekf.update(z.reshape(2, 1), jac, hx, R=point.noise, residual=residual)
        got = ours.mean.copy()
        want = ekf.x.ravel().copy()
        assert abs(wrap(got[2] - want[2])) < 1e-6
        np.testing.assert_allclose(got[:2], want[:2], atol=1e-6)
        np.testing.assert_allclose(ours.cov, ekf.P, atol=1e-6)


def test_nis_is_chi_square_under_a_correct_model():
    """Poses drawn from the prediction, sightings drawn from the model: NIS has mean ≈ 2 (χ²₂) and about 1%
    lies beyond the 99% gate (Bar-Shalom, Li & Kirubarajan 2001, §5.4)."""
    rng = np.random.default_rng(5)
    params = MarkerParams(sigma_range_m=0.1, sigma_bearing_deg=3.0)
    prior = PoseGaussian(np.array([3.0, 3.0, 1.0]), np.diag([0.01, 0.01, 0.0004]))
    marker = (7.0, 5.0)
    chol = np.linalg.cholesky(prior.cov)
    values = []
    for _ in range(4000):
        truth = prior.mean + chol @ rng.normal(size=3)
        z = _range_bearing(truth, marker) + rng.normal(0, [0.1, math.radians(3.0)])
        point = MarkerPoint("m", marker, z[0], wrap(z[1]), params)
        values.append(kalman_update(prior, point.linearise(prior.mean)).nis)
    values = np.array(values)
    assert values.mean() == pytest.approx(2.0, rel=0.06)
    beyond = float(np.mean(values > chi2.ppf(0.99, 2)))
    assert 0.005 <= beyond <= 0.016


def test_iterated_update_of_a_linear_measurement_is_the_plain_update():
    """Gauss–Newton converges in one step on a linear measurement (Bell & Cathey 1993)."""

    class Linear:
        rows_independent, iterate, reliability = False, True, 1.0

        def linearise(self, pose, rows=None):
            h = np.array([[1.0, 0.5, 0.0], [0.0, 1.0, 0.2]])
            z = np.array([2.2, 3.1])
            return Linearised(z - h @ pose, h, np.diag([0.05, 0.08]))

    prior = _gaussian(2.0, 3.0, 0.3)
    plain = kalman_update(prior, Linear().linearise(prior.mean))
    iterated = iterated_update(prior, Linear(), None, iterations=5)
    np.testing.assert_allclose(iterated.belief.mean, plain.belief.mean, atol=1e-12)
    np.testing.assert_allclose(iterated.belief.cov, plain.belief.cov, atol=1e-12)


def test_jacobians_of_the_models_match_central_differences():
    """Marker range-bearing and scan-beam Jacobians against central differences of their own h."""
    params = MarkerParams()
    pose = np.array([3.0, 4.0, 0.7])
    point = MarkerPoint("m", (8.0, 6.0), 5.0, 0.2, params)
    lin = point.linearise(pose)
    numeric = _numeric_jacobian(lambda p: -point.linearise(p).innovation, pose, angle_rows=(1,))
    np.testing.assert_allclose(lin.jacobian, numeric, atol=1e-6)
    site = SiteMap.empty(10.0, 8.0, 0.25).with_box(6.0, 2.0, 7.0, 6.0)
    field = SignedField(site, 40)
    scan = ScanPoint(field, np.array([2.3, 3.1, 1.7]), np.radians([0.0, 90.0, 200.0]), RangeParams())
    pose = np.array([3.13, 3.37, 0.05])
    lin = scan.linearise(pose)
    numeric = _numeric_jacobian(lambda p: -scan.linearise(p).innovation, pose, eps=1e-7)
    np.testing.assert_allclose(lin.jacobian, numeric, atol=1e-4)


def test_a_sighting_at_range_zero_is_refused_with_its_reason():
    grid = PoseGrid(10.0, 8.0, 0.5, 12)
    f = GaussianFilter(grid)
    assert f.reset(_blob(grid, 3.0, 3.0)) is None and f.gaussian is not None
    point = MarkerPoint("m7", (3.0, 3.0), 0.0, 0.0, MarkerParams())
    report = f.update(Evidence("camera", np.ones(grid.n_cells), 0.9, point=point))
    assert report.rejected and "marker m7" in report.refused and "range" in report.refused
    with pytest.raises(NotLinearisable):
        point.linearise(np.array([1.0, 1.0, 0.0]))


def _blob(grid, x, y, radius=0.6):
    """A known start, as ``Localizer.start_at`` gives one: a disc of positions, headings near 0."""
    xs, ys, hs = grid.poses_of(np.arange(grid.n_cells))
    return ((((xs - x) ** 2 + (ys - y) ** 2) <= radius**2) & (np.abs(wrap(hs)) <= 0.3)).astype(float)


def test_a_sighting_far_from_the_prediction_is_gated_out_and_the_belief_kept():
    grid = PoseGrid(10.0, 8.0, 0.25, 12)
    f = GaussianFilter(grid)
    f.reset(_blob(grid, 3.0, 3.0))
    before = f.gaussian
    # Marker at (8, 3) seen at 1 m straight ahead: the robot would be at (7, 3), 4 m from the belief.
    point = MarkerPoint("m", (8.0, 3.0), 1.0, 0.0, MarkerParams())
    report = f.update(Evidence("camera", np.ones(grid.n_cells), 0.9, point=point))
    assert report.rejected and report.nis > report.gate == pytest.approx(chi2.ppf(0.99, 2))
    assert f.gaussian is before


def test_ignorance_is_followed_on_the_histogram_until_one_mode_stands_out():
    grid = PoseGrid(10.0, 8.0, 0.25, 12)
    f = GaussianFilter(grid)
    note = f.reset(np.ones(grid.n_cells))
    assert f.gaussian is None and "no single Gaussian" in note and "95%" in note
    # A sharp reading around (4, 5, 1 rad): one mode holds nearly all the probability; the filter collapses to it.
    xs, ys, hs = grid.poses_of(np.arange(grid.n_cells))
    contour = np.exp(-0.5 * ((xs - 4.0) ** 2 + (ys - 5.0) ** 2) / 0.2**2 - 0.5 * (wrap(hs - 1.0) / 0.2) ** 2)
    report = f.update(Evidence("fix", contour, 1.0))
    assert f.gaussian is not None and "re-seeded" in report.note
    assert f.gaussian.x == pytest.approx(4.0, abs=0.1) and f.gaussian.y == pytest.approx(5.0, abs=0.1)


def test_non_positive_definite_covariances_are_refused():
    with pytest.raises(ObservationError, match="not positive definite"):
        check_covariance([[1.0, 2.0, 0.0], [2.0, 1.0, 0.0], [0.0, 0.0, 0.1]])
    with pytest.raises(ObservationError, match="not symmetric"):
        check_covariance([[1.0, 0.2, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 0.1]])
    with pytest.raises(ObservationError, match="3 × 3"):
        check_covariance([[1.0, 0.0], [0.0, 1.0]])


def test_the_back_end_is_built_by_name_and_its_settings_are_checked():
    from fusion.backends.gaussian import GaussianSettings

    grid = PoseGrid(6.0, 4.0, 0.5, 8)
    assert build("gaussian", grid).name == "gaussian"
    with pytest.raises(ObservationError, match="gate_probability"):
        build("gaussian", grid, settings=GaussianSettings(gate_probability=1.5))


TINY = "tests/data/tiny.toml"


def test_a_gaussian_seen_on_a_fine_grid_is_found_again_by_its_moments():
    """A Gaussian put on a grid (``GridView.density``: cell integrals) and read back as the histogram's best mode:
    the moments are the covariance plus two cells' spread (res²/12 per axis, Δθ²/12: the variance of a uniform
    distribution): one from grouping into cells (Sheppard 1898, "On the calculation of the most probable values
    of frequency-constants"), one from reading each cell as a uniform pose (deliberately wide, see
    ``best_mode``)."""
    from fusion.backends.gaussian_grid import GridView, best_mode

    grid = PoseGrid(8.0, 6.0, 0.05, 144)
    cov = np.array([[0.09, 0.03, 0.0], [0.03, 0.04, 0.0], [0.0, 0.0, math.radians(10.0) ** 2]])
    truth = PoseGaussian(np.array([3.0, 2.5, 0.4]), cov)
    p = GridView(grid, np.ones(grid.n_cells, bool)).density(truth)
    mode = best_mode(grid, p)
    cell = np.diag([grid.resolution_m**2, grid.resolution_m**2, grid.heading_step**2]) / 12
    np.testing.assert_allclose(mode.belief.mean, truth.mean, atol=0.01)
    np.testing.assert_allclose(mode.belief.cov, cov + 2 * cell, atol=2e-3)
    assert mode.share > 0.999


def test_a_mode_short_of_the_share_or_wider_than_asked_is_none_and_the_bounds_are_the_cells_own():
    """Two well-separated Gaussians mixed 0.6 : 0.4: the best mode holds the larger weight (the mixture's own
    weights, a closed form).  Asked for at least its share, or at most its spread, to the last bit, it is the same
    mode as unasked; asked for a hair more share (1e-12), a hair less spread, a share of 0.7 or a spread of 0.1 m,
    there is none.  The hair is inside the bounds' first judgement on the heading-summed plane, so this checks that
    the answer at the bound is the one the cells give (the filter uses the bounds between re-seeds)."""
    from fusion.backends.gaussian_grid import GridView, best_mode

    grid = PoseGrid(8.0, 6.0, 0.1, 36)
    view = GridView(grid, np.ones(grid.n_cells, bool))
    cov = np.diag([0.04, 0.04, math.radians(10.0) ** 2])
    p = 0.6 * view.density(PoseGaussian(np.array([2.0, 2.0, 0.4]), cov))
    p += 0.4 * view.density(PoseGaussian(np.array([6.0, 4.0, 2.0]), cov))
    mode = best_mode(grid, p)
    assert mode.share == pytest.approx(0.6, abs=1e-3)
    for at_least, within_m in ((0.5, math.inf), (mode.share, math.inf), (0.0, mode.spread_m), (0.5, 1.0)):
        again = best_mode(grid, p, at_least, within_m)
        figures = (again.share, again.spread_m, again.heading_spread_deg)
        assert figures == (mode.share, mode.spread_m, mode.heading_spread_deg)
        assert np.array_equal(again.belief.mean, mode.belief.mean)
        assert np.array_equal(again.belief.cov, mode.belief.cov)
    for at_least, within_m in ((mode.share + 1e-12, math.inf), (0.0, mode.spread_m * (1 - 1e-12)), (0.7, 1.0)):
        assert best_mode(grid, p, at_least, within_m) is None
    assert best_mode(grid, p, 0.5, 0.1) is None


def test_a_start_covariance_is_the_same_prior_for_every_back_end():
    from fusion.io.case import load_case
    from fusion.localizer import Localizer

    case = load_case(TINY)
    cov = np.diag([0.5**2, 0.5**2, math.radians(20.0) ** 2])
    loc = Localizer.from_case(case, "gaussian")
    assert loc.start_at(2.0, 1.5, 0.0, covariance=cov) is None
    assert loc.filter.gaussian.x == pytest.approx(2.0, abs=0.15) and loc.filter.gaussian.y == pytest.approx(
        1.5, abs=0.15
    )
    bayes = Localizer.from_case(case, "bayes")
    bayes.start_at(2.0, 1.5, 0.0, covariance=cov)
    np.testing.assert_allclose(bayes.filter.distribution(), loc.filter.distribution(), atol=0.02)


def test_an_unlinearisable_reading_is_a_rejected_record_of_the_decision_not_a_crash():
    from fusion.io.case import load_case
    from fusion.io.observations import Observation
    from fusion.localizer import Localizer
    from fusion.sensors.markers import MarkerSighting

    loc = Localizer.from_case(load_case(TINY), "gaussian")
    loc.start_at(3.75, 1.5, 90.0)
    decision = loc.step(None, [Observation(0.0, "camera", "markers", MarkerSighting("R-west", 0.0, 0.0))])
    assert any(s == "camera" and "could not use it" in r and "range 0" in r for s, r in decision.rejected)
