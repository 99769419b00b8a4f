"""Recordings as robots write them: log layouts over tables, odometry forms, and readings placed in time.

Sources of the expected values:
- the arc of constant speeds is the noise-free motion of the velocity motion model (Thrun,
  Burgard & Fox 2005, Probabilistic Robotics, §5.3, eq. 5.9);
- the move between two poses seen from the first is the relative pose of the odometry motion
  model (the same book, §5.4): translation rotated into the first heading, heading difference;
- pose composition (SE(2)) is associative: splitting a move and composing the parts gives it back.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from fusion.errors import InputFileError
from fusion.inspect import inspect_log
from fusion.io.case import parse_case
from fusion.io.layout import load_layout
from fusion.io.observations import Observation
from fusion.io.odometry_forms import MAX_HOLD_S, OdometryForm, arc
from fusion.io.recording import observations
from fusion.io.ticks import SAME_TIME_S, form_ticks
from fusion.sensors.markers import MarkerSighting
from fusion.sensors.odometry import OdometryReading, Travel, moved_pose, split_reading
from tests.support import assert_close

CASE = """[case]
name = "yard"
[site]
origin_m = [-5.0, -3.0]
width_m = 10.0
height_m = 6.0
resolution_m = 0.25
headings = 16
border = false
[[site.markers]]
id = "7"
x_m = 3.0
y_m = 0.0
[[site.markers]]
id = "8"
x_m = -3.0
y_m = 2.0
[[sensors]]
name = "wheels"
kind = "odometry"
[[sensors]]
name = "eye"
kind = "markers"
rate_hz = 4.0
max_range_m = 8.0
fov_deg = 360.0
[[sensors]]
name = "bumper"
kind = "door"
rate_hz = 2.0
door = "gate"
[[site.doors]]
name = "gate"
x_m = 0.0
y_m = 2.5
facing_deg = 270.0
"""


def _case(tmp_path: Path):
    path = tmp_path / "yard.toml"
    path.write_text(CASE)
    return parse_case(CASE, str(path))


# ----------------------------------------------------------------- odometry forms
@pytest.mark.parametrize("v,u,w,span", [(0.5, 0.0, 0.4, 0.5), (0.3, 0.1, -1.2, 0.25), (0.4, 0.0, 0.0, 1.0)])
def test_velocities_integrate_to_the_exact_arc(v, u, w, span):
    # Closed form of the arc (Thrun et al. 2005, §5.3) checked against a fine numerical integration.
    r = arc(v, u, w, span)
    n = 200_000
    s = (np.arange(n) + 0.5) * span / n
    x = np.sum(v * np.cos(w * s) - u * np.sin(w * s)) * span / n
    y = np.sum(v * np.sin(w * s) + u * np.cos(w * s)) * span / n
    assert_close([r.forward_m, r.left_m, math.radians(r.turn_deg)], [x, y, w * span], 1e-9, "arc")


def test_velocity_rows_are_held_until_the_next_row_and_not_longer():
    form = OdometryForm("velocities")
    assert form.record(10.0, 0.5, 0.0, 0.0) is None  # nothing moved yet
    step = form.record(10.2, 0.1, 0.0, 0.0)
    assert_close(step.forward_m, 0.5 * 0.2, 1e-12, "held speed")  # the first row's speed over its span
    gap = form.record(15.0, 0.0, 0.0, 0.0)
    assert_close(gap.forward_m, 0.1 * MAX_HOLD_S, 1e-12, "gap") and form.gaps == 1


def test_poses_become_moves_seen_from_the_first_pose():
    form = OdometryForm("poses")
    assert form.record(0.0, 1.0, 1.0, math.pi / 2) is None
    r = form.record(0.1, 1.0, 2.0, math.pi)  # one metre north while facing north: straight ahead, then a left turn
    assert_close([r.forward_m, r.left_m, r.turn_deg], [1.0, 0.0, 90.0], 1e-12, "relative pose")
    # Composing the move onto the first pose gives the second (Thrun et al. 2005, §5.4).
    x, y, h = moved_pose(1.0, 1.0, math.pi / 2, r)
    assert_close([x, y, h], [1.0, 2.0, math.pi], 1e-12, "composed")


@pytest.mark.parametrize("share", [0.0, 0.3, 0.5, 1.0])
def test_a_split_record_composes_back_to_the_whole(share):
    whole = OdometryReading(0.4, 0.05, 30.0)
    first, rest = split_reading(whole, share)
    net = Travel().then(first).then(rest)
    assert_close([net.reading.forward_m, net.reading.left_m, net.reading.turn_deg], [0.4, 0.05, 30.0], 1e-12, "split")
    assert_close(net.path_m, math.hypot(0.4, 0.05), 1e-12, "path length is kept")


# ----------------------------------------------------------------- readings placed in time
def _odo(t, f, turn=0.0):
    return Observation(t, "wheels", "odometry", OdometryReading(f, 0.0, turn))


def _seen(t):
    return Observation(t, "eye", "markers", MarkerSighting("7", 2.0, 0.0))


def test_each_reading_is_applied_at_the_pose_of_its_own_time():
    # Odometry at 10 Hz moving 0.1 m per record; sightings between records.
    records = [_odo(0.0, 0.0)]
    for k in range(1, 11):
        if k in (3, 7):
            records.append(_seen(k / 10 - 0.025))  # in time order: before the record that covers its time
        records.append(_odo(k / 10, 0.1))
    ticks = list(form_ticks(list(enumerate(records, 1)), lambda o: o.kind == "odometry"))
    travelled = 0.0
    for tick in ticks:
        for _, obs in tick:
            if obs.kind == "odometry":
                travelled += obs.reading.forward_m
            else:
                # the robot moves 1 m/s: the motion applied before the sighting is its own time
                assert_close(travelled, obs.t, 1e-9, f"motion before the sighting at {obs.t}")
    assert_close(travelled, 1.0, 1e-9, "all motion applied")


def test_odometry_is_merged_into_ticks_of_the_case_tick_and_readings_close_in_time_share_one():
    records = [_odo(k / 100, 0.01) for k in range(101)]  # 100 Hz odometry, one second
    records += [_seen(1.0 + SAME_TIME_S / 2), _seen(1.0 + SAME_TIME_S / 2 + SAME_TIME_S / 4)]
    ticks = list(form_ticks(list(enumerate(records, 1)), lambda o: o.kind == "odometry", 0.25))
    motion_only = [t for t in ticks if all(o.kind == "odometry" for _, o in t)]
    assert 4 <= len(motion_only) <= 6  # about one per 0.25 s, not one per record
    assert sum(len([o for _, o in t if o.kind == "markers"]) == 2 for t in ticks) == 1


# ----------------------------------------------------------------- layouts over tables
def _write(path: Path, text: str) -> Path:
    path.write_text(text)
    return path


def _layout(tmp_path: Path, case, feeds: str, truth: str = ""):
    return load_layout(_write(tmp_path / "layout.toml", f'[layout]\ntime_unit = "ms"\n{feeds}\n{truth}'), case)


def test_tables_with_named_columns_and_units_replay_in_time_order(tmp_path):
    case = _case(tmp_path)
    _write(tmp_path / "wheels.csv", "stamp,v,w\n" + "".join(f"{k * 100},0.2,0.0\n" for k in range(0, 31)))
    _write(tmp_path / "eye.tsv", "stamp\tid\tdist_cm\tangle\n1050\t7\t250\t0.1\n2050\t8\t300\t-0.2\n2060\t99\t1\t0\n")
    _write(tmp_path / "bump.csv", "t,on\n500,true\n1500,0\n2500,maybe\n")
    layout = _layout(
        tmp_path,
        case,
        """
[[feeds]]
sensor = "wheels"
file = "wheels.csv"
header = true
odometry = "velocities"
columns = {t = "stamp", forward = "v", turn = "w"}
[[feeds]]
sensor = "eye"
file = "eye.tsv"
header = true
angle_unit = "rad"
length_unit = "cm"
columns = {t = "stamp", marker = "id", range = "dist_cm", bearing = "angle"}
[[feeds]]
sensor = "bumper"
file = "bump.csv"
header = true
columns = {t = 1, active = 2}
""",
    )
    aside = []
    got = list(observations(None, layout, aside.append))
    times = [obs.t for _, obs in got]
    assert times == sorted(times)
    seen = [obs.reading for _, obs in got if obs.kind == "markers"]
    assert seen[0] == MarkerSighting("7", 2.5, math.degrees(0.1))
    assert len([o for _, o in got if o.kind == "door"]) == 2
    reasons = " ".join(f"{row.where}: {row.reason}" for row in aside)
    assert "bump.csv:" in reasons and "'active' must be true or false" in reasons
    # marker 99 is read (it is the replay that sets aside a marker not on the map)
    assert any(r.marker_id == "99" for r in seen)


def test_layout_refusals_name_file_line_and_field(tmp_path):
    case = _case(tmp_path)
    _write(tmp_path / "wheels.csv", "stamp,v,w\n0,0,0\n")
    bad = {
        'sensor = "nobody"\nfile = "wheels.csv"': "unknown value 'nobody'",
        'sensor = "wheels"\nfile = "../outside.csv"\ncolumns = {t = 1, forward = 2, turn = 3}': "outside the layout",
        'sensor = "wheels"\nfile = "absent.csv"\ncolumns = {t = 1, forward = 2, turn = 3}': "is not a file",
        'sensor = "wheels"\nfile = "wheels.csv"\ncolumns = {t = 1, forward = 2}': "needs a column for 'turn'",
        'sensor = "wheels"\nfile = "wheels.csv"\ncolumns = {t = "stamp", forward = 2, turn = 3}': "header = true",
        'sensor = "wheels"\nfile = "wheels.csv"\ncolumns = {t = 0, forward = 2, turn = 3}': "column number from 1",
    }
    for feed, message in bad.items():
        with pytest.raises(InputFileError) as err:
            _layout(tmp_path, case, f"[[feeds]]\n{feed}\n")
        assert message in str(err.value) and "layout.toml, line" in str(err.value), str(err.value)
    layout = _layout(
        tmp_path,
        case,
        '[[feeds]]\nsensor = "wheels"\nfile = "wheels.csv"\nheader = true\ncolumns = {t = "time", forward = "v", turn = "w"}',
    )
    with pytest.raises(InputFileError, match="names column 'time' for 't', but the header has no such column"):
        list(observations(None, layout, lambda row: None))


def test_a_site_with_an_origin_replays_at_negative_coordinates(tmp_path):
    case = _case(tmp_path)
    grid = case.site.grid(case.headings)
    assert grid.pose_of(grid.cell_of(-4.9, -2.9, 0.0))[:2] == (-4.875, -2.875)
    # The robot drives east along y = 0 from x = -2 at 0.5 m/s, seeing marker 7 at (3, 0) dead ahead.
    rows = "".join(f"{k * 100},0.5,0.0\n" for k in range(0, 41))
    _write(tmp_path / "w.csv", rows)
    sightings = "".join(f"{k * 250 + 30},7,{3.0 - (-2.0 + 0.5 * (k * 0.25 + 0.03)):.4f},0\n" for k in range(16))
    _write(tmp_path / "e.csv", sightings)
    truth = "".join(f"{k * 100},{-2.0 + 0.05 * k:.3f},0,0\n" for k in range(0, 41))
    _write(tmp_path / "truth.csv", truth)
    layout = _layout(
        tmp_path,
        case,
        """
[[feeds]]
sensor = "wheels"
file = "w.csv"
odometry = "velocities"
angle_unit = "rad"
columns = {t = 1, forward = 2, turn = 3}
[[feeds]]
sensor = "eye"
file = "e.csv"
columns = {t = 1, marker = 2, range = 3, bearing = 4}
""",
        '[truth]\nfile = "truth.csv"\nangle_unit = "rad"\ncolumns = {t = 1, x = 2, y = 3, heading = 4}',
    )
    found = inspect_log(
        case,
        tmp_path / "layout.toml",
        tmp_path / "out",
        layout=layout,
        frames=False,
        report=False,
        backends=("bayes",),
    )
    assert found.set_aside == 0 and found.truth
    median, p95 = found.errors["bayes"]
    assert median <= 0.25 and p95 <= 0.5, found.errors
