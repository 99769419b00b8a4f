import json
import math
from pathlib import Path

import pytest

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


def test_runner_writes_complete_results(case, tmp_path):
    result = run_case(case)
    folder = write_results(result, tmp_path / "out")
    names = sorted(p.name for p in folder.iterdir())
    assert names == ["observations.jsonl", "steps.csv", "summary.json", "timing.json", "truth.jsonl"]
    summary = json.loads((folder / "summary.json").read_text())
    assert set(summary["backends"]) == {"bayes", "evidential"}
    assert "not a certified safety function" in summary["notice"]
    header = (folder / "steps.csv").read_text().splitlines()[0].split(",")
    assert tuple(header) == STEP_COLUMNS
    lines = (folder / "observations.jsonl").read_text().splitlines()
    assert len(lines) == sum(len(t.observations) for t in result.ticks)


def test_same_case_and_seed_give_byte_identical_summaries(case, tmp_path):
    first = write_results(run_case(case), tmp_path / "a")
    second = write_results(run_case(case), tmp_path / "b")
    for name in ("summary.json", "observations.jsonl", "truth.jsonl"):
        assert (first / name).read_bytes() == (second / name).read_bytes(), name
    timing = json.loads((first / "timing.json").read_text())
    assert set(timing["backends"]["bayes"]) == {"mean_step_ms", "p95_step_ms"}


def test_cli_run_check_and_bad_case(tmp_path, capsys):
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
