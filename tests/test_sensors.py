import math

import numpy as np
import pytest
from scipy import integrate
from support import assert_close

from fusion.belief import rules
from fusion.belief.mass import MassFunction
from fusion.errors import ObservationError, SiteError
from fusion.sensors.base import Evidence
from fusion.sensors.doors import DoorParams, DoorReading, DoorSensor
from fusion.sensors.markers import MarkerMiss, MarkerParams, MarkerSensor, MarkerSighting
from fusion.sensors.odometry import OdometryParams, OdometryReading, OdometrySensor
from fusion.sensors.ranging import RangeParams, RangeScan, RangeSensor
from fusion.site import Door, Marker, SiteMap


@pytest.fixture(scope="module")
def depot():
    # Our test bay: 12 m × 8 m at 0.25 m, one rack block, one door on the west wall, two markers.
    site = SiteMap.empty(
        12.0,
        8.0,
        0.25,
        doors=(Door("bay door", 0.5, 4.0, 0.0, 1.0),),
        markers=(Marker("R1", 9.0, 7.5), Marker("R2", 9.0, 0.5)),
        name="test bay",
    )
    return site.with_box(4.0, 3.0, 6.0, 5.0)


def test_beam_mixture_integrates_to_one_over_the_measurement_range(depot):
    # Thrun, Burgard & Fox (2005), Probabilistic Robotics, ch. 6: the beam density is a mixture whose
    # components each integrate to one over [0, no_echo_share], plus the point mass no_echo_share at the maximum range.
    # A beam facing a wall 4 m away: the end-point distance is |z − 4|.
    sensor = RangeSensor("lidar", depot, depot.grid(4), RangeParams(max_range_m=8.0, wall_spread_m=0.2))
    p = sensor.params
    total, _ = integrate.quad(
        lambda z: float(sensor.beam_density(z, np.array(abs(z - 4.0)))), 0.0, p.max_range_m, points=[4.0], limit=200
    )
    assert_close(total + p.no_echo_share, 1.0, tol=1e-6)


def test_range_scan_favours_the_true_pose(depot):
    grid = depot.grid(36)
    sensor = RangeSensor("lidar", depot, grid)
    x, y, th = 8.1, 2.1, math.radians(30)
    scan = RangeScan(tuple(depot.ray_range(x, y, th + math.radians(b), 8.0) for b in sensor.params.bearings_deg))
    ev = sensor.encode(scan)
    truth = grid.cell_of(x, y, th)
    assert ev.contour[truth] > 0.3  # within the half-cell snapping error of the best
    free = grid.broadcast(depot.free)
    assert ev.contour[truth] >= np.quantile(ev.contour[free], 0.99)


def test_a_return_a_little_long_off_a_border_wall_still_fits_the_true_pose():
    # A return 0.3 m long (about 1.3 grid sigmas) off the walled north edge ends past the map.  It is
    # 0.3 m from the wall, so the true cell keeps about exp(−½ (0.3/σ)²) of the best fit (Gaussian hit term,
    # Thrun, Burgard & Fox 2005, §6.4), not the random-return floor an unknown distance would give.
    from fusion.site import SiteMap

    site = SiteMap.empty(10.0, 6.0, 0.25, border=True)
    grid = site.grid(36)
    sensor = RangeSensor("lidar", site, grid, RangeParams(bearings_deg=(0.0,), wall_spread_m=0.15))
    x, y, th = 5.125, 3.125, math.radians(90)
    z = site.ray_range(x, y, th, 8.0) + 0.3
    assert y + z > 6.0  # the end point lies past the map's edge
    ev = sensor.encode(RangeScan((z,)))
    sigma = sensor.grid_sigma(z)
    c = ev.contour[grid.cell_of(x, y, th)]
    assert c > 0.5 * math.exp(-0.5 * (0.3 / sigma) ** 2)


def test_reliability_maps_to_discounting_and_the_matching_outlier_mixture():
    # Shafer (1976), ch. 11: the contour of the discounted consonant mass function is r·c + (1 − r),
    # which is the Bayesian side's likelihood.
    c = np.array([1.0, 0.5, 0.25, 0.0])
    ev = Evidence("s", c, reliability=0.8, levels=4)
    assert_close(ev.likelihood, 0.8 * c + 0.2)
    assert_close(ev.masses.contour(), ev.likelihood)
    expected = rules.discount(MassFunction.from_contour(c), 0.8)
    assert ev.masses.is_close(expected)


def test_range_bad_input(depot):
    sensor = RangeSensor("lidar", depot, depot.grid(4))
    with pytest.raises(ObservationError, match="beam 2 has range -1.0"):
        sensor.encode(RangeScan((1.0, -1.0, 2.0, 3.0)))
    with pytest.raises(ObservationError, match="expected 4 ranges"):
        sensor.encode(RangeScan((1.0,)))
    with pytest.raises(ObservationError, match="must sum to 1"):
        RangeSensor("lidar", depot, depot.grid(4), RangeParams(wall_share=0.9))


def test_marker_sighting_and_miss(depot):
    grid = depot.grid(36)
    sensor = MarkerSensor("camera", depot, grid, MarkerParams(confusion=0.0))
    x, y, th = 8.125, 5.625, math.radians(80)  # a cell centre, so no snapping error
    m = depot.marker("R1")
    r, b = math.hypot(m.x - x, m.y - y), math.degrees(math.atan2(m.y - y, m.x - x) - th)
    ev = sensor.encode(MarkerSighting("R1", r, b))
    truth = grid.cell_of(x, y, th)
    assert ev.contour[truth] > 0.9
    # Facing away from both markers, nothing can be seen: a miss is fully expected there.
    miss = sensor.likelihood(MarkerMiss()).reshape(-1)
    away = grid.cell_of(2.0, 4.0, math.radians(180))
    assert_close(miss[away], 1.0)
    assert miss[truth] < 0.2


def test_marker_bad_input(depot):
    sensor = MarkerSensor("camera", depot, depot.grid(8))
    with pytest.raises(ObservationError, match="marker 'R9' is not on the map of site 'test bay'"):
        sensor.encode(MarkerSighting("R9", 1.0, 0.0))
    with pytest.raises(ObservationError, match="finite range"):
        sensor.encode(MarkerSighting("R1", float("nan"), 0.0))
    with pytest.raises(SiteError, match="has none on its map"):
        MarkerSensor("camera", SiteMap.empty(4.0, 4.0, 0.5), SiteMap.empty(4.0, 4.0, 0.5).grid(4))


def test_door_sensor_likelihood(depot):
    grid = depot.grid(4)
    sensor = DoorSensor("bay contact", "bay door", depot, grid, DoorParams(hit_rate=0.9, false_alarm_rate=0.05))
    near, far = grid.cell_of(0.9, 4.1, 0.0), grid.cell_of(10.0, 2.0, 0.0)
    on, off = sensor.likelihood(DoorReading(True)), sensor.likelihood(DoorReading(False))
    assert_close([on[near], on[far], off[near], off[far]], [0.9, 0.05, 0.1, 0.95])
    with pytest.raises(ObservationError, match="true or false"):
        sensor.likelihood(DoorReading("yes"))
    with pytest.raises(SiteError, match="door 'loading door' is not on the map"):
        DoorSensor("x", "loading door", depot, grid)


def test_odometry_noise_grows_with_distance(depot):
    grid = depot.grid(36)
    odo = OdometrySensor("wheels", grid, OdometryParams(sigma_per_m=0.1))
    short, long = odo.motion(OdometryReading(0.5)), odo.motion(OdometryReading(2.0))
    # Variances add along the path (a random walk in distance): 4× the distance, 4× the variance, and four
    # records of 0.5 m carry the variance of one of 2 m.  Set-valued bounds add: 4× the distance, 4× the bound.
    assert_close(long.sigma**2 / short.sigma**2, 4.0)
    assert_close(4 * short.sigma**2, long.sigma**2)
    assert_close(long.bound_cells / short.bound_cells, 4.0)
    assert_close(odo.motion(OdometryReading(0.0)).sigma, 0.0)  # no per-record floor
    assert_close(short.dx[0], 2.0) and assert_close(short.dy[9], 2.0)  # heading bin 9 = 90°
    with pytest.raises(ObservationError, match="forward_m must be a finite number"):
        odo.motion(OdometryReading(float("inf")))


def test_a_scan_reads_the_same_whether_the_padded_field_is_gathered_whole_or_by_window(depot, monkeypatch):
    # Two ways to the same sums (our implementation's invariant): the beam's density gathered over the whole padded
    # field once, or over each heading's window; a long range on a fine grid takes the second.
    # Both are the numpy code's paths, so the compiled loop is switched off here (it is checked against them in
    # tests/test_compiled.py).
    from fusion import compiled
    from fusion.sensors import ranging

    monkeypatch.setenv(compiled.ENV, "numpy")
    compiled.reset()
    try:
        sensor = RangeSensor("lidar", depot, depot.grid(4), RangeParams(max_range_m=8.0, wall_spread_m=0.2))
        scan = [1.5, 2.0, 8.0, 3.25]
        whole = sensor.log_likelihood(scan)
        original = ranging.gathers_whole_field
        monkeypatch.setattr(ranging, "gathers_whole_field", lambda field, grid: not original(field, grid))
        np.testing.assert_array_equal(sensor.log_likelihood(scan), whole)
    finally:
        compiled.reset()


def test_a_door_contact_s_evidence_is_made_once_per_state_and_read_only(depot):
    # A contact's reading is fired or quiet and nothing else, so its evidence is the same for every reading of one
    # state (made once, handed out again); it must still be p(reading | pose) as the hit and false-alarm rates give
    # it, scaled to a maximum of 1, and neither it nor its likelihood may be changed in place (every back end reads
    # the same arrays).
    grid = depot.grid(4)
    sensor = DoorSensor("bay contact", "bay door", depot, grid, DoorParams(hit_rate=0.9, false_alarm_rate=0.05))
    fired, quiet = sensor.encode(DoorReading(True)), sensor.encode(DoorReading(False))
    assert sensor.encode(DoorReading(True)) is fired and sensor.encode(np.True_) is fired
    zone = grid.broadcast(sensor.zone)
    np.testing.assert_allclose(fired.contour, np.where(zone, 1.0, 0.05 / 0.9))
    np.testing.assert_allclose(quiet.contour, np.where(zone, 0.1 / 0.95, 1.0))
    for array in (fired.contour, fired.likelihood):
        with pytest.raises(ValueError, match="read-only"):
            array[0] = 0.5
