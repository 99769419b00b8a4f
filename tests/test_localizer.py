import csv
import io
import json
import math
from pathlib import Path

import numpy as np
import pytest

from fusion.backends import BACKENDS
from fusion.cli import main
from fusion.io.case import load_case
from fusion.io.observations import Observation
from fusion.localizer import Localizer
from fusion.runner import STEP_COLUMNS, run_case, write_results
from fusion.sensors.doors import DoorReading
from fusion.sensors.odometry import OdometryReading
from fusion.simulate import simulate

TINY = Path(__file__).parent / "data" / "tiny.toml"


@pytest.fixture(scope="module")
def case():
    return load_case(TINY)


@pytest.fixture(params=["bayes", "evidential"])
def localizer(request, case):
    loc = Localizer.from_case(case, request.param)
    first = simulate(case)[0].truth
    loc.start_at(first.x_m, first.y_m, first.heading_deg)
    return loc


def test_localizer_tracks_the_simulated_route_in_a_few_lines(case, localizer):
    errors = []
    for tick in simulate(case):
        odometry = next(o for o in tick.observations if o.kind == "odometry")
        decision = localizer.step(odometry, [o for o in tick.observations if o.kind != "odometry"])
        errors.append(math.hypot(decision.x_m - tick.truth.x_m, decision.y_m - tick.truth.y_m))
        record = decision.to_record()
        json.dumps(record, allow_nan=False)  # every decision serialises as strict JSON
    assert sorted(errors)[len(errors) // 2] < 0.75  # median error under 1.5 cells of this coarse test grid


@pytest.mark.parametrize("backend", BACKENDS)
def test_each_step_keeps_the_estimate_of_the_belief_it_left(case, backend):
    # The replay draws each tick's belief from the step's own estimate (its headings-summed plane) instead of
    # summing the distribution again: the two must be the same array, value for value, on every tick.
    loc = Localizer.from_case(case, backend)
    first = simulate(case)[0].truth
    loc.start_at(first.x_m, first.y_m, first.heading_deg)
    for tick in simulate(case)[:25]:
        odometry = next(o for o in tick.observations if o.kind == "odometry")
        decision = loc.step(odometry, [o for o in tick.observations if o.kind != "odometry"])
        est = loc.last_estimate
        assert (est.x_m, est.y_m) == (decision.x_m, decision.y_m) or loc._pending is not None
        if est.plane is not None:
            plane = loc.filter.distribution().reshape(loc.sensors.grid.shape).sum(axis=0)
            np.testing.assert_array_equal(est.plane, plane)


def test_rejected_readings_leave_the_state_unchanged(case, localizer):
    before = localizer.filter.distribution().copy()
    bad = [
        Observation(1.0, "sonar", "ranging", None),
        Observation(1.0, "contact", "ranging", None),
        Observation(float("nan"), "contact", "door", DoorReading(True)),
    ]
    decision = localizer.step(None, bad)
    assert [s for s, _ in decision.rejected] == ["sonar", "contact", "contact"]
    assert "unknown sensor 'sonar'" in decision.rejected[0][1]
    assert "is a door sensor" in decision.rejected[1][1]
    assert (localizer.filter.distribution() == before).all()
    localizer.step(Observation(5.0, "wheels", "odometry", OdometryReading(0.0)), [])
    late = localizer.step(None, [Observation(2.0, "contact", "door", DoorReading(False))])
    assert "out of time order" in late.rejected[0][1]


def test_an_odometry_record_with_no_time_step_is_rejected_with_its_field(case, localizer):
    # Each record reports the motion since an earlier one: two at one time mean a duplicated or mis-stamped log.
    localizer.step(Observation(1.0, "wheels", "odometry", OdometryReading(0.1)), [])
    before = localizer.filter.distribution().copy()
    same = localizer.step(Observation(1.0, "wheels", "odometry", OdometryReading(0.1)), [])
    assert same.rejected and "field t" in same.rejected[0][1] and "zero time step" in same.rejected[0][1]
    assert (localizer.filter.distribution() == before).all()
    later = localizer.step(Observation(1.25, "wheels", "odometry", OdometryReading(0.1)), [])
    assert not later.rejected


def test_odometry_composed_past_one_records_limits_is_applied_not_refused(case, localizer):
    # Each record is checked (≤ 360° of turn, ≤ the site's diagonal); their composition may exceed one
    # record's limits (89° pending, then a full turn) and must still be applied, not raise.
    localizer.step(Observation(1.0, "wheels", "odometry", OdometryReading(0.0, 0.0, 89.0)), [])
    d = localizer.step(Observation(1.25, "wheels", "odometry", OdometryReading(0.0, 0.0, 360.0)), [])
    assert not d.rejected and math.isfinite(d.x_m)


def test_odometry_is_applied_once_per_batch_of_readings_whatever_the_record_rate(case):
    # The same motion logged as 1 or 10 records before one reading gives the same belief: records are
    # composed exactly and predicted once (no per-record rounding to the grid, no per-record noise floor).
    from test_rate_invariance import _root

    from fusion.sensors.markers import MarkerSighting

    for backend in ("bayes", "evidential"):
        beliefs = []
        for records in (1, 10):
            loc = Localizer.from_case(case, backend)
            loc.start_at(1.5, 1.5, 0.0)
            x, y, th = _root((0.9, 0.1, math.radians(9.0)), records)  # equal twists composing to one move
            for k in range(records):
                loc.step(Observation(0.1 * (k + 1), "wheels", "odometry", OdometryReading(x, y, math.degrees(th))), [])
            sighting = Observation(1.0, "camera", "markers", MarkerSighting("R-west", 2.0, 30.0))
            loc.step(Observation(1.05, "wheels", "odometry", OdometryReading(0.0)), [sighting])
            beliefs.append(loc.filter.distribution().copy())
        assert 0.5 * abs(beliefs[0] - beliefs[1]).sum() < 1e-9, backend


def test_runner_writes_complete_results(case, tmp_path):
    result = run_case(case)
    folder = write_results(result, tmp_path / "out")
    names = sorted(p.name for p in folder.iterdir())
    assert names == ["observations.jsonl", "steps.csv", "summary.json", "timing.json", "truth.jsonl"]
    summary = json.loads((folder / "summary.json").read_text())
    assert set(summary["backends"]) == set(BACKENDS)  # the case names none: every family runs
    assert "not a certified safety function" in summary["notice"]
    header = (folder / "steps.csv").read_text().splitlines()[0].split(",")
    assert tuple(header) == STEP_COLUMNS
    lines = (folder / "observations.jsonl").read_text().splitlines()
    assert len(lines) == sum(len(t.observations) for t in result.ticks)


def test_summary_leaves_out_the_injected_ticks_in_its_quiet_percentile(tmp_path):
    # The "nothing injected" 95th percentile is numpy's (linear interpolation, Hyndman & Fan 1996, type 7) of the
    # errors at the ticks with no fault being injected and no carry, from the written per-tick table; with a fault
    # over the whole run there is no such tick (null).
    plain = TINY.read_text()
    for start, end, any_quiet in ((2.0, 4.0, True), (0.0, 1000.0, False)):
        fault = f'faults = [{{ kind = "people", start_s = {start}, end_s = {end}, rate = 0.5 }}]'
        text = plain.replace("rate_hz = 4.0\nbearings_deg", f"rate_hz = 4.0\n{fault}\nbearings_deg")
        assert text != plain
        path = tmp_path / f"faulty{int(end)}.toml"
        path.write_text(text)
        folder = write_results(run_case(load_case(path), backends=["bayes"]), tmp_path / f"out{int(end)}")
        rows = list(csv.DictReader(io.StringIO((folder / "steps.csv").read_text())))
        quiet = [float(r["error_m"]) for r in rows if not r["faults"] and r["carried"] == "False"]
        figures = json.loads((folder / "summary.json").read_text())["backends"]["bayes"]
        assert any(r["faults"] for r in rows)
        if any_quiet:
            assert len(quiet) < len(rows)
            # the table's errors have six significant digits
            assert figures["p95_error_quiet_m"] == pytest.approx(float(np.percentile(quiet, 95)), rel=1e-5)
        else:
            assert quiet == [] and figures["p95_error_quiet_m"] is None


def test_same_case_and_seed_give_byte_identical_summaries(case, tmp_path):
    first = write_results(run_case(case), tmp_path / "a")
    second = write_results(run_case(case), tmp_path / "b")
    for name in ("summary.json", "observations.jsonl", "truth.jsonl"):
        assert (first / name).read_bytes() == (second / name).read_bytes(), name
    timing = json.loads((first / "timing.json").read_text())
    assert set(timing["backends"]["bayes"]) == {"first_step_ms", "mean_step_ms", "p95_step_ms"}


def test_cli_run_check_and_bad_case(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)  # check draws the site into the current folder
    assert main(["check", str(TINY)]) == 0
    assert "valid" in capsys.readouterr().out
    out = tmp_path / "run"
    assert main(["run", str(TINY), "--quiet", "--out", str(out), "--backend", "bayes"]) == 0
    text = capsys.readouterr().out
    assert "not a certified safety function" in text and "results written to" in text
    broken = tmp_path / "broken.toml"
    broken.write_text(TINY.read_text().replace('kind = "markers"', 'kind = "lidar3d"'))
    target = tmp_path / "never"
    assert main(["run", str(broken), "--quiet", "--out", str(target)]) == 2
    err = capsys.readouterr().err
    assert "broken.toml, line" in err and "sensors[2].kind" in err and "lidar3d" in err
    assert not target.exists()  # nothing half-written


@pytest.mark.slow
def test_a_carried_robot_is_reseeded_from_readings_that_agree_elsewhere():
    # The depot's carried case, one seed: after the forklift puts the robot down in the west
    # cross-aisle, the ranger and the camera both disagree with where the robot was, and every
    # sensor agrees with every other at the new place, so the trial belief built from the episode's
    # readings alone has no conflicting reading and becomes the belief; the estimate is back within
    # the target's bounds (0.5 m, 15°) within 10 ticks, and no sensor was quarantined for it.
    import dataclasses

    from fusion.monitor import QUARANTINE, RELOCALIZE
    from fusion.targets import _judge, _seeded

    case = _seeded(load_case(Path(__file__).parents[1] / "cases" / "carried.toml"), 7)
    case = dataclasses.replace(case, run=dataclasses.replace(case.run, backends=("bayes",)))
    result = run_case(case)
    ok, detail = _judge(case, result, "bayes")
    assert ok, detail
    rows = result.rows
    start = next(i for i, r in enumerate(rows) if r.carried)
    actions = [r.action for r in rows[start : start + 4]]
    assert RELOCALIZE in actions and QUARANTINE not in actions[: actions.index(RELOCALIZE)]
    events = [e for e in result.events if e.action == RELOCALIZE and e.t >= rows[start].t]
    reason = " ".join(events[0].reasons)
    assert "probably moved" in reason and "bumper ranger" in reason and "rack camera" in reason


def test_one_camera_sighting_seconds_the_ranger_when_the_robot_is_carried():
    # Seed 28 of the carried case: the camera sees a marker once in the two ticks after the put-down.
    # Its K is at most its reliability r = 0.9 (a discounted reading keeps 1 − r on the whole frame,
    # Shafer 1976), so one sighting weighs at most −log(1 − 0.9) ≈ 2.30, short of twice the weight of
    # the threshold, 2·(−log(1 − 0.8)) ≈ 3.22: on weights alone it is no second voice.  Every informative
    # reading it gave disagrees with where the robot was, so it seconds the ranger, the trial agrees at
    # the new place, and the robot is re-seeded on the second tick after the carry.
    from fusion.monitor import QUARANTINE, RELOCALIZE
    from fusion.targets import RECOVERY_DEG, RECOVERY_M, _seeded

    case = _seeded(load_case(Path(__file__).parents[1] / "cases" / "carried.toml"), 28)
    camera = case.sensor("rack camera").params.reliability
    assert -math.log(1 - camera) < 2 * -math.log(1 - 0.8)  # the premise: one sighting cannot reach the weight
    ticks = simulate(case)
    loc = Localizer.from_case(case, "bayes")
    loc.start_at(ticks[0].truth.x_m, ticks[0].truth.y_m, ticks[0].truth.heading_deg)
    start = next(i for i, tick in enumerate(ticks) if tick.truth.carried)
    decisions = []
    for tick in ticks[: start + 3]:
        odometry = next(o for o in tick.observations if o.kind == "odometry")
        decisions.append(loc.step(odometry, [o for o in tick.observations if o.kind != "odometry"]))
    after = decisions[start:]
    sightings = [o for tick in ticks[start : start + 2] for o in tick.observations if o.sensor == "rack camera"]
    assert len(sightings) == 1
    assert [d.action for d in after[:2]] == ["carry on", RELOCALIZE] and QUARANTINE not in [d.action for d in after]
    assert "bumper ranger and rack camera disagree" in after[1].reasons[0]
    truth = ticks[start + 2].truth
    assert math.hypot(after[2].x_m - truth.x_m, after[2].y_m - truth.y_m) <= RECOVERY_M
    assert abs((after[2].heading_deg - truth.heading_deg + 180) % 360 - 180) <= RECOVERY_DEG


def test_a_ranger_that_still_fits_the_old_place_vetoes_a_seconded_move():
    # Seed 5 of the stuck-contact case: the chiller contact sticks at 15 s, and at 15.5 s the camera's
    # one sighting of the episode also disagrees with where the robot was.  The ranger's readings still
    # fit that place, so the sighting does not second the contact: the trial re-seed (which would have
    # settled 12 m away, by the door, where the ranger fits too) is not tried, and the contact is named.
    from fusion.monitor import ALERT, RELOCALIZE
    from fusion.targets import _seeded

    case = _seeded(load_case(Path(__file__).parents[1] / "cases" / "stuck_door.toml"), 5)
    ticks = [tick for tick in simulate(case) if tick.truth.t <= 17.0]
    loc = Localizer.from_case(case, "bayes")
    loc.start_at(ticks[0].truth.x_m, ticks[0].truth.y_m, ticks[0].truth.heading_deg)
    decisions = []
    for tick in ticks:
        odometry = next(o for o in tick.observations if o.kind == "odometry")
        decisions.append(loc.step(odometry, [o for o in tick.observations if o.kind != "odometry"]))
    assert RELOCALIZE not in [d.action for d in decisions]
    alerts = [d for d in decisions if d.action == ALERT]
    assert alerts and "chiller contact" in alerts[0].reasons[0]
    # The alert also gives the pairwise conflict of the tick's own readings: the contact saying "here,
    # by the door" against the ranger's view of an aisle away from it (K 0.40 on this seed).
    top = alerts[0].to_record()["pairwise_conflict"][0]
    assert "chiller contact" in top[:2] and top[2] > 0.3, top
    assert "conflict most with each other" in alerts[0].reasons[-1]
    truth = ticks[-1].truth
    assert math.hypot(decisions[-1].x_m - truth.x_m, decisions[-1].y_m - truth.y_m) <= 0.5


def _replayed(case, backend, extra):
    """Run the test bay's simulated ticks through a localizer, adding ``extra[i]`` (a list of
    observations made at tick i's time) to tick i; returns the decisions."""
    loc = Localizer.from_case(case, backend)
    ticks = simulate(case)
    loc.start_at(ticks[0].truth.x_m, ticks[0].truth.y_m, ticks[0].truth.heading_deg)
    decisions = []
    for i, tick in enumerate(ticks[:48]):
        odometry = next(o for o in tick.observations if o.kind == "odometry")
        readings = [o for o in tick.observations if o.kind != "odometry"]
        added = [make(odometry.t) for make in extra.get(i, [])]
        kinds = {o.sensor for o in added}
        decisions.append(loc.step(odometry, [o for o in readings if o.sensor not in kinds] + added))
    return decisions


@pytest.mark.parametrize("backend", ["bayes", "evidential"])
def test_two_lone_odd_readings_of_two_sensors_raise_no_alert_but_a_stuck_one_does(case, backend):
    from fusion.monitor import ALERT, CARRY_ON, QUARANTINE
    from fusion.sensors.markers import MarkerSighting

    # Ticks 22-23: the robot drives east along y = 1.5 m, far from the bay door at x = 0.75 m.
    # A door contact false alarm, then on the next tick a camera sighting of the west marker 0.6 m
    # dead ahead (it is behind the robot): each conflicts with the belief on its own tick, and the
    # two make two conflicting ticks in a row, but no sensor disagrees more than once.
    def door(t):
        return Observation(t, "contact", "door", DoorReading(True))

    def ghost(t):
        return Observation(t, "camera", "markers", MarkerSighting("R-west", 0.6, 0.0))

    lone = _replayed(case, backend, {22: [door], 23: [ghost]})
    assert lone[22].figures.conflict > 0.8 and lone[23].figures.conflict > 0.8  # the premise holds
    assert [d.action for d in lone] == [CARRY_ON] * len(lone)
    # The contact stuck active for 2 s (8 ticks): it disagrees again and again, and is named.
    stuck = _replayed(case, backend, {i: [door] for i in range(22, 30)})
    acted = [d for d in stuck if d.action in (ALERT, QUARANTINE)]
    assert acted and all("contact" in " ".join(d.reasons) for d in acted[:1])


def test_the_actions_timeline_says_what_was_injected_at_each_action():
    from types import SimpleNamespace

    from rich.console import Console

    from fusion.compare import CARRY_WINDOW_TICKS
    from fusion.runner import RunEvent
    from fusion.simulate import Tick, TruePose
    from fusion.view.live import actions_timeline

    truths = [TruePose(0.25 * i, 1.0, 1.0, 0.0) for i in range(40)]
    truths[4] = TruePose(1.0, 1.0, 1.0, 0.0, faults=("door: stuck",))
    truths[20] = TruePose(5.0, 9.0, 1.0, 0.0, carried=True)
    events = [
        RunEvent(1.0, "bayes", "alert operator", ("door disagrees",)),
        RunEvent(2.0, "bayes", "alert operator", ("a lone odd reading",)),
        RunEvent(5.5, "evidential", "re-localize", ("probably moved",)),
        RunEvent(0.25 * (20 + CARRY_WINDOW_TICKS + 1), "bayes", "alert operator", ()),
    ]
    result = SimpleNamespace(ticks=[Tick(t) for t in truths], events=events)
    console = Console(record=True, width=100)
    console.print(actions_timeline(result, limit=3))
    text = console.export_text()
    assert "monitor actions (4)" in text and "1 more;" in text
    lines = [line for line in text.splitlines() if " s " in line]
    assert "injected: door: stuck" in lines[0] and "door disagrees" in text
    assert "injected: nothing" in lines[1]
    assert "injected: carried 0.50 s ago" in lines[2] and "probably moved" in text
    whole = Console(record=True, width=100)
    whole.print(actions_timeline(result))
    late = f"{events[-1].t:.2f} s"  # one tick past the carry's window: no longer "just carried"
    assert "injected: nothing" in [line for line in whole.export_text().splitlines() if late in line][0]


@pytest.mark.parametrize("backend", ["bayes", "evidential"])
def test_an_alert_names_each_sensor_once_and_the_reading_at_fault(case, backend):
    import re

    from fusion.monitor import CARRY_ON
    from fusion.sensors.markers import MarkerSighting

    # Ticks 22-29: a camera that keeps reporting marker R-west 0.6 m dead ahead while the robot
    # drives east along y = 1.5 m with R-west behind it.  The expected sighting is plane geometry
    # (range = Euclidean distance, bearing = atan2 less the heading), checked against the true pose.
    def ghost(t):
        return Observation(t, "camera", "markers", MarkerSighting("R-west", 0.6, 0.0))

    decisions = _replayed(case, backend, {i: [ghost] for i in range(22, 30)})
    acted = [(i, d) for i, d in enumerate(decisions) if d.action != CARRY_ON]
    assert acted, "a camera stuck on a ghost marker for 2 s must make the monitor act"
    truths = [tick.truth for tick in simulate(case)]
    for i, d in acted:
        named = re.search(r"most to blame: ([^;|]*)", " ".join(d.reasons))
        if named:
            sensors = [part.split(" (")[0] for part in named.group(1).split(", ")]
            assert len(sensors) == len(set(sensors)), d.reasons  # each sensor once
        fault = d.at_fault
        assert fault is not None and fault.sensor == "camera", d.reasons
        assert "marker R-west measured at 0.60 m, +0°" in fault.said
        assert any("reading at fault: camera, marker R-west" in r for r in d.reasons)
        expected_m = float(re.search(r"expected at ([0-9.]+) m", fault.said).group(1))
        truth = truths[i]
        true_range = math.hypot(3.75 - truth.x_m, 3.0 - truth.y_m)
        assert abs(expected_m - true_range) < 1.0  # from the estimate before the tick, within two cells
        assert d.to_record()["reading_at_fault"]["sensor"] == "camera"


def test_each_sensor_says_its_reading_against_a_pose(case):
    import re

    from fusion.sensors.markers import MarkerMiss
    from fusion.sensors.ranging import RangeScan
    from fusion.sensors.sensor_set import SensorSet

    sensors = SensorSet(case.site, case.site.grid(case.headings), case.sensors)
    # At (2, 1.5) facing east: the site's border wall fills its top row of cells (y ≥ 5.5 m), so it
    # lies 4.0 m to the left (plane geometry); a 1.00 m return there is the beam furthest from the map.
    said = sensors.explain("ranger", RangeScan((1.5, 6.0, 1.0)), 2.0, 1.5, 0.0)
    first = re.match(r"beam at \+90° measured 1.00 m, expected ([0-9.]+) m", said)
    assert case.site.occupied[-1].all() and not case.site.occupied[-2, 4]  # the premise holds
    assert first and abs(float(first.group(1)) - 4.0) <= 0.125, said  # marched at a quarter cell
    door = sensors.explain("contact", DoorReading(True), 4.75, 3.0, 0.0)
    assert "fired" in door and "4.00 m from the door" in door  # |4.75 − 0.75| m
    miss = sensors.explain("camera", MarkerMiss(), 2.0, 1.5, 0.0)
    assert "R-east" in miss or "R-west" in miss


def test_the_terminal_summary_and_the_report_explain_their_figures_in_the_same_words(case):
    # One note says what the run summary's figures are (errors of which estimate, which time, the quiet percentile,
    # the first tick apart); the terminal table and the HTML report both carry it, word for word.
    import html

    from fusion.view.live import summary_table
    from fusion.view.run_report import SUMMARY_NOTE, run_report

    result = run_case(case)
    assert summary_table(result.summary()).caption == SUMMARY_NOTE
    assert html.escape(SUMMARY_NOTE) in run_report(result)
    assert "wall-clock" in SUMMARY_NOTE and "start-up" in SUMMARY_NOTE and "'—'" in SUMMARY_NOTE
