"""The bench's timing of inputs taken in turn, on a scripted clock (the method is ours; the statistics are the
median and the maximum of each input's fastest run)."""

from __future__ import annotations

import numpy as np
import pytest

from fusion import bench


@pytest.fixture
def scripted_clock(monkeypatch):
    """``time.process_time`` as the bench sees it, advancing by the durations the test gives, one run at a time."""
    state = {"now": 0.0, "durations": iter(())}

    def process_time():
        return state["now"]

    def run_for():
        state["now"] += next(state["durations"])

    monkeypatch.setattr(bench.time, "process_time", process_time)

    def script(durations):
        state["durations"] = iter(durations)
        return run_for

    return script


def test_inputs_are_taken_in_turn_and_each_keeps_its_fastest_run(scripted_clock):
    # rounds = 2 after a warm-up round, inputs = 3: durations[round][input]; the warm-up's (first row) are dropped
    durations = np.array([[9.0, 9.0, 9.0], [1.0, 5.0, 2.0], [3.0, 4.0, 7.0]])
    run_for = scripted_clock(durations.ravel())
    calls, prepared = [], []

    def fn(i):
        calls.append(i)
        run_for()

    timing = bench.timed_in_turn(fn, rounds=2, inputs=3, setup=prepared.append)
    assert calls == [0, 1, 2] * 3 and prepared == calls  # in turn, each run after its own setup
    fastest = durations[1:].min(axis=0)  # per input: 1, 4, 2
    assert timing == bench.Timing(typical_s=float(np.median(fastest)), slowest_s=4.0, inputs=3)
    assert timing.typical_s == 2.0


def test_a_row_is_the_median_input_over_the_floors_median_input():
    op, floor = bench.Timing(3e-3, 6e-3, 8), bench.Timing(1e-3, 1.5e-3, 8)
    row = bench.BenchRow.timed("grid", "bayes", "update", op, floor, None, "target ≤ 3× floor")
    assert (row.best_ms, row.floor_ms) == pytest.approx((3.0, 1.0))
    assert row.ratio == pytest.approx(3.0) and row.slowest_ratio == pytest.approx(6.0)
    assert row.as_dict()["slowest_ratio"] == pytest.approx(6.0)
