"""Embedding the localizer: the names a robot program imports, the runnable example, and the example in the docs.

The check of the result is the simulator's own truth: replaying the log that ``fusion run`` wrote, the last
estimate lies within the target bounds used throughout (0.5 m; our choice, common practice) of the last true pose.
"""

from __future__ import annotations

import json
import math
import re
import subprocess
import sys
from pathlib import Path

import pytest

from fusion.cli import main
from tests.test_case import TINY

ROOT = Path(__file__).parents[1]


@pytest.fixture(scope="module")
def logged(tmp_path_factory):
    out = tmp_path_factory.mktemp("run")
    assert main(["run", str(TINY), "--backend", "bayes", "--out", str(out), "--quiet"]) == 0
    last = json.loads((out / "truth.jsonl").read_text().splitlines()[-1])
    return out / "observations.jsonl", last


def test_the_names_a_robot_program_needs_are_importable_from_the_package():
    import fusion
    from fusion import Decision, Localizer, Observation, load_case, read_observations  # noqa: F401

    assert "Localizer" in fusion.__all__ and "load_case" in fusion.__all__


def test_the_example_script_replays_a_log(logged):
    log, last = logged
    done = subprocess.run(
        [sys.executable, str(ROOT / "examples" / "replay_log.py"), str(TINY), str(log), "bayes"],
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert done.returncode == 0, done.stderr
    found = re.search(r"(\d+) steps; last estimate \(([-\d.]+) m, ([-\d.]+) m", done.stdout)
    assert found, done.stdout
    assert int(found[1]) == sum(1 for line in log.read_text().splitlines() if line.strip())
    assert math.dist((float(found[2]), float(found[3])), (last["x_m"], last["y_m"])) < 0.5


def test_the_example_in_the_docs_runs_as_written(logged, tmp_path, monkeypatch, capsys):
    # The block is run with its two file names pointed at this test's case and log, and the dock pose at the
    # case's first waypoint; nothing else is changed.
    log, last = logged
    text = (ROOT / "docs" / "localizer.md").read_text()
    block = re.search(r"```python\n(.*?)```", text, re.S)[1]
    assert 'load_case("cases/depot.toml")' in block and 'read_observations("observations.jsonl")' in block
    code = (
        block.replace('"cases/depot.toml"', repr(str(TINY)))
        .replace('"observations.jsonl"', repr(str(log)))
        .replace("loc.start_at(2.0, 2.0, 72.0)", "loc.start_at(1.5, 1.5, 0.0)")
    )
    namespace: dict = {}
    exec(compile(code, "docs/localizer.md", "exec"), namespace)
    decision = namespace["decision"]
    assert math.dist((decision.x_m, decision.y_m), (last["x_m"], last["y_m"])) < 0.5
