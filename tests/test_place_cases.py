"""Place-graph cases: the case format's refusals (file, line, field), the simulator's faults, and `fusion run` and
`fusion check` on the shipped basement case.  These check our own format and plumbing (no outside source); the
filters' results are checked against outside references in ``test_places.py``."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from fusion.cli import main
from fusion.errors import InputFileError
from fusion.place_cases.case import load_place_case, parse_place_case
from fusion.place_cases.simulate import simulate_places

BASEMENT = Path(__file__).parent.parent / "cases" / "basement.toml"

SMALL = """
[case]
name = "two doors"

[places]
resolution_m = 1.0

[[places.place]]
name = "west"
at = [0.0, 0.0]

[[places.place]]
name = "door a"
at = [4.0, 0.0]
features = ["door"]

[[places.place]]
name = "door b"
at = [12.0, 0.0]
features = ["door"]

[[places.passage]]
between = ["west", "door a"]
length_m = 4.0

[[places.passage]]
between = ["door a", "door b"]
length_m = 8.0

[[sensors]]
name = "wheels"
kind = "odometry"
rate_hz = 4.0

[[sensors]]
name = "doors"
kind = "feature"
feature = "door"
rate_hz = 4.0

[route]
through = ["west", "door b"]
speed_mps = 1.0
"""


def _line(text: str, needle: str) -> int:
    return next(i for i, line in enumerate(text.splitlines(), start=1) if needle in line)


@pytest.mark.parametrize(
    "old, new, field, words",
    [
        (
            'between = ["door a", "door b"]',
            'between = ["door a", "lift"]',
            "places.passage[1].between",
            "unknown place 'lift'",
        ),
        ("length_m = 8.0", "length_m = 0.0", "places.passage[1].length_m", "greater than 0"),
        ("length_m = 8.0", "length_m = -8.0", "places.passage[1].length_m", "greater than 0"),
        ('kind = "feature"', 'kind = "ranging"', "sensors[1].kind", "reads a metric site"),
        ('through = ["west", "door b"]', 'through = ["west", "roof"]', "route.through", "unknown place 'roof'"),
        ('feature = "door"', 'feature = "door"\nhit_rate = 0.01', "sensors", "must exceed"),
    ],
)
def test_bad_graphs_are_refused_with_file_line_and_field(old, new, field, words):
    text = SMALL.replace(old, new, 1)
    assert text != SMALL
    with pytest.raises(InputFileError) as err:
        parse_place_case(text, "small.toml")
    message = str(err.value)
    assert "small.toml" in message and field in message and words in message, message
    assert f"line {_line(text, new.splitlines()[0])}" in message or field == "sensors", message


def test_a_route_across_pieces_of_the_graph_is_refused():
    text = SMALL + '\n[[places.place]]\nname = "island"\nat = [30.0, 0.0]\n'
    text = text.replace('through = ["west", "door b"]', 'through = ["west", "island"]')
    with pytest.raises(InputFileError, match="in pieces"):
        parse_place_case(text, "small.toml")


def test_a_feature_no_sensor_sees_is_a_warning_and_place_kinds_are_refused_on_metric_sites():
    case = parse_place_case(SMALL.replace('features = ["door"]', 'features = ["door", "fire hose"]', 1), "small.toml")
    assert case.warnings == ("no sensor detects the feature 'fire hose': it is drawn, not used",)
    from fusion.io.case import parse_case
    from tests.test_case import TINY

    metric = TINY.read_text() + '\n[[sensors]]\nname = "doors"\nkind = "feature"\nrate_hz = 2.0\n'
    with pytest.raises(InputFileError, match="reads a place graph"):
        parse_case(metric, "tiny.toml")
    with pytest.raises(InputFileError, match="place-graph case"):
        parse_case(SMALL, "small.toml")


def test_simulated_faults_show_in_the_readings():
    case = parse_place_case(
        SMALL.replace(
            "rate_hz = 4.0\n\n[route]",
            'rate_hz = 4.0\n[[sensors.faults]]\nkind = "missed"\nplace = "door b"\n'
            '[[sensors.faults]]\nkind = "phantom"\nrate = 1.0\nstart_s = 2.0\nend_s = 3.0\n\n[route]',
        ),
        "small.toml",
    )
    ticks = simulate_places(case, seed=3)
    seen = [(t.truth.t, t.truth.near(0.5), o.reading) for t in ticks for o in t.observations if o.sensor == "doors"]
    door_b = case.graph.cell_of("door b")
    assert all(not r for _, at, r in seen if at == door_b)  # missed at door b
    assert all(r for t, at, r in seen if 2.0 <= t < 3.0 and at is None)  # phantom in its window
    again = simulate_places(case, seed=3)
    assert [o.to_record() for t in again for o in t.observations] == [
        o.to_record() for t in ticks for o in t.observations
    ]


def test_wheel_slip_makes_a_passage_look_longer():
    slip = SMALL.replace(
        'rate_hz = 4.0\n\n[[sensors]]\nname = "doors"',
        'rate_hz = 4.0\n[[sensors.faults]]\nkind = "drift"\nscale = 1.5\n\n[[sensors]]\nname = "doors"',
    )
    case = parse_place_case(slip, "small.toml")
    driven = sum(o.reading.forward_m for t in simulate_places(case, seed=1) for o in t.observations if o.moves)
    assert abs(driven - 1.5 * 12.0) < 0.5


def test_run_and_check_on_the_basement(tmp_path, capsys):
    out = tmp_path / "run"
    assert main(["run", str(BASEMENT), "--out", str(out), "--seed", "4"]) == 0
    said = capsys.readouterr().out
    assert "found itself from the start" in said and "not a certified safety function" in said
    for name in ("observations.jsonl", "truth.jsonl", "steps.csv", "summary.json", "beliefs.png"):
        assert (out / name).stat().st_size > 0
    summary = json.loads((out / "summary.json").read_text())
    assert set(summary["backends"]) == {"bayes", "evidential"} and summary["seed"] == 4
    # Other work into the same folder is refused, and nothing is overwritten.
    assert main(["run", str(BASEMENT), "--out", str(out), "--seed", "5"]) != 0
    assert json.loads((out / "summary.json").read_text())["seed"] == 4
    picture = tmp_path / "graph.png"
    assert main(["check", str(BASEMENT), "--preview", str(picture)]) == 0
    assert picture.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "13 places" in capsys.readouterr().out
    assert main(["run", str(BASEMENT), "--out", str(tmp_path / "x"), "--backend", "particles"]) != 0
    assert "does not run on a place graph" in capsys.readouterr().err


def test_both_back_ends_find_the_courier_from_an_unknown_start():
    from fusion.place_cases.run import run_places

    case = load_place_case(BASEMENT)
    result = run_places(case)
    for b in ("bayes", "evidential"):
        first = result.episodes(b)[0]
        assert first.localized_s is not None and first.places_needed <= 3, first
    assert np.mean([r.right for r in result.rows if r.t > 30.0 and r.t < 150.0]) > 0.9


def test_readings_that_rule_out_little_do_not_vouch_for_the_belief():
    # A door seen (informative: it rules out every cell without a door) where the belief has none, every other
    # tick; between them only "no junction here", which rules out almost nothing.  Those quiet ticks must not
    # end the run of conflicting ticks (our policy: a calm tick needs a clear reading that rules out at least
    # half the site, fusion.monitor.policy.INFORMATIVE), so the monitor acts.
    from fusion.io.observations import Observation
    from fusion.localizer import Localizer
    from fusion.monitor import CARRY_ON, Policy
    from fusion.sensors.odometry import OdometryReading

    case = load_place_case(BASEMENT)
    loc = Localizer("bayes", case.sensor_set(), Policy())
    prior = np.zeros(case.frame.n_cells)
    prior[case.frame.cell_of("lift lobby", "pharmacy store", 6.0)] = 1.0
    loc.start_with(prior)
    actions = []
    for k in range(12):
        t = 0.25 * k
        reading = (
            Observation(t, "door spotter", "feature", True)
            if k % 2 == 0
            else Observation(t, "junction sonar", "feature", False)
        )
        actions.append(loc.step(Observation(t, "wheels", "odometry", OdometryReading(0.0)), [reading]).action)
    assert any(a != CARRY_ON for a in actions), actions


def test_targets_on_a_place_graph(capsys):
    assert main(["targets", "--case", str(BASEMENT), "--seeds", "2", "--backend", "bayes"]) == 0
    out = capsys.readouterr().out
    assert "finding itself on the graph" in out and "2/2 (100%" in out


def test_stream_on_a_place_graph_answers_every_line_with_the_place():
    import io

    from fusion.place_cases.run import place_localizer
    from fusion.stream import stream

    case = load_place_case(BASEMENT)
    ticks = simulate_places(case, seed=2)[:60]
    lines = [json.dumps(o.to_record()) for t in ticks for o in t.observations]
    lines.insert(5, '{"t": 1.0, "sensor": "door spotter", "kind": "feature", "seen": "yes"}')
    loc = place_localizer(case, "evidential")
    loc.start_with(case.frame.start_prior(case.graph.places[ticks[0].truth.a]))
    out, err = io.StringIO(), io.StringIO()
    written, rejected = stream(loc, io.BytesIO(("\n".join(lines) + "\n").encode()), out, err)
    answers = [json.loads(x) for x in out.getvalue().splitlines()]
    assert [a["line"] for a in answers] == list(range(1, len(lines) + 1)) and rejected == 1
    assert "must be true or false" in answers[5]["error"]
    decided = [a for a in answers if "place" in a]
    assert len(decided) == written and decided[-1]["place"]["share"] > 0.5
    truth = ticks[-1].truth
    assert decided[-1]["place"]["name"] in {case.graph.places[truth.a], case.graph.places[truth.b]}


def test_the_live_view_draws_the_graph_with_each_back_ends_belief():
    from rich.console import Console

    from fusion.place_cases.run import run_places
    from fusion.view.place_live import GraphRunView

    case = load_place_case(BASEMENT)
    view = GraphRunView(case, ("bayes", "evidential"), 1074)
    ticks = []

    def on_tick(tick, decisions, localizers):
        view.on_tick(tick, decisions, localizers)
        ticks.append(tick)
        if len(ticks) == 120:
            raise StopIteration

    with pytest.raises(StopIteration):
        run_places(case, on_tick=on_tick)
    console = Console(width=120, height=40, record=True, color_system=None)
    console.print(view)
    screen = console.export_text()
    assert "◆" in screen and "○" in screen and screen.count("holds") == 2 and "error along the graph" in screen


def test_compare_on_a_place_graph_writes_runs_and_verdicts(tmp_path, capsys):
    out = tmp_path / "cmp"
    argv = ["compare", str(BASEMENT), "--seeds", "2", "--rule", "dempster", "--rule", "conjunctive", "--out", str(out)]
    assert main(argv) == 0
    said = capsys.readouterr().out
    assert "alerts" in said and "Bayes" in said
    rows = (out / "runs.csv").read_text().splitlines()
    assert len(rows) == 1 + 3 * 2  # header, then 3 settings × 2 seeds
    summary = json.loads((out / "summary.json").read_text())
    assert summary["verdicts"] and {f["figure"] for f in summary["figures"]} >= {"right_share", "carry_found"}
    # Dempster's rule and the unnormalised conjunctive rule hold the same contour up to scale: same figures.
    by = {r.split(",")[0] + r.split(",")[1]: r.split(",")[4:-1] for r in rows[1:]}
    assert by["evidential-dempster1"] == by["evidential-conjunctive1"]
    assert main(["compare", str(BASEMENT), "--backend", "gaussian", "--out", str(tmp_path / "g")]) != 0


def test_inspect_a_graph_log_finds_the_carry_and_sets_aside_what_it_cannot_use(tmp_path, capsys):
    run = tmp_path / "run"
    assert main(["run", str(BASEMENT), "--out", str(run), "--quiet"]) == 0
    log = tmp_path / "log.jsonl"
    lines = (run / "observations.jsonl").read_text().splitlines()
    lines.insert(10, '{"t": 1.0, "sensor": "bumper ranger", "kind": "ranging", "ranges_m": [1.0]}')  # a metric sensor
    lines.insert(20, "not json")
    log.write_text("\n".join(lines) + "\n")
    truth = tmp_path / "truth.jsonl"
    truth.write_text(
        (run / "truth.jsonl").read_text() + '{"t": 999, "from": "roof", "to": "lift lobby", "along_m": 1}\n'
    )
    out = tmp_path / "inspect"
    argv = ["inspect", str(log), "--site", str(BASEMENT), "--truth", str(truth), "--out", str(out)]
    assert main(argv) == 0
    said = " ".join(capsys.readouterr().out.split())
    assert "conflict episode" in said and "Median error along the graph" in said
    aside = [json.loads(x) for x in (out / "set_aside.jsonl").read_text().splitlines()]
    reasons = " ".join(a["reason"] for a in aside)
    assert len(aside) == 3 and "bumper ranger" in reasons and "roof" in reasons
    episodes = json.loads((out / "episodes.json").read_text())
    carried_at = next(
        json.loads(x)["t"] for x in (run / "truth.jsonl").read_text().splitlines() if json.loads(x)["carried"]
    )
    assert any(e["start_t"] >= carried_at and e["actions"] for e in episodes)  # the carry is caught and acted on
    assert (out / "beliefs.png").stat().st_size > 0
    assert main(["inspect", str(log), "--site", str(BASEMENT), "--layout", str(log), "--out", str(tmp_path / "x")]) != 0


def test_one_sure_reading_of_each_of_two_sensors_is_not_a_move():
    # A door detector's false alarm and a misread tag, one reading each, on two ticks: each is what the sensor's
    # own error rates expect now and then (false_alarm_rate, false_read), so the monitor must not take them for
    # the robot having been moved (two conflicting readings of a sensor at least make it a voice).
    from fusion.io.observations import Observation
    from fusion.localizer import Localizer
    from fusion.monitor import RELOCALIZE, Policy
    from fusion.sensors.odometry import OdometryReading

    case = load_place_case(BASEMENT)
    loc = Localizer("bayes", case.sensor_set(), Policy())
    prior = np.zeros(case.frame.n_cells)
    prior[case.frame.cell_of("lift lobby", "pharmacy store", 6.0)] = 1.0
    loc.start_with(prior)
    said = [("door spotter", "feature", True), ("tag reader", "place_marker", "B-XRAY")]
    said += [("junction sonar", "feature", False)] * 10
    actions = []
    for k, (sensor, kind, reading) in enumerate(said):
        t = 0.25 * k
        odometry = Observation(t, "wheels", "odometry", OdometryReading(0.0))
        actions.append(loc.step(odometry, [Observation(t, sensor, kind, reading)]).action)
    assert RELOCALIZE not in actions, actions


def test_a_route_longer_than_the_tick_limit_is_refused():
    # The simulator stops at 100,000 ticks; a route it cannot finish is refused before anything runs, not cut short.
    with pytest.raises(InputFileError, match="limit is 100,000 ticks"):
        parse_place_case(SMALL.replace("speed_mps = 1.0", "speed_mps = 0.0001"), "small.toml")
