from fusion.monitor import ALERT, CARRY_ON, QUARANTINE, RELOCALIZE, Monitor, Policy


def test_one_spurious_tick_triggers_nothing_and_a_lasting_conflict_escalates():
    m = Monitor("evidential", Policy(alert_after=2, relocalize_after=4, cooldown_ticks=3))
    assert m.judge(True, False, []).action == CARRY_ON
    assert m.judge(False, True, []).action == CARRY_ON  # a clear tick ends the episode
    actions = [m.judge(True, False, [("ranger", 0.4)]).action for _ in range(4)]
    assert actions == [CARRY_ON, ALERT, CARRY_ON, RELOCALIZE]
    # cool-down: no second re-localization straight away
    assert [m.judge(True, False, []).action for _ in range(3)] == [CARRY_ON, ALERT, CARRY_ON]


def test_neutral_ticks_neither_start_nor_end_an_episode():
    m = Monitor("bayes", Policy(alert_after=2))
    m.judge(True, False, [])
    assert m.judge(False, False, []).action == CARRY_ON  # neutral: the run of conflicts is kept
    assert m.judge(True, False, []).action == ALERT


def test_a_sensor_that_keeps_disagreeing_alone_is_quarantined_and_released():
    m = Monitor("evidential", Policy(quarantine_after=3, quarantine_window=5, release_after=2))
    verdicts = []
    for _ in range(4):
        m.record_reading("door", True)
        m.record_reading("ranger", False)
        verdicts.append(m.judge(False, False, []))
    assert QUARANTINE in [v.action for v in verdicts]
    assert "door" in verdicts[-1].quarantined
    assert any("door" in r for v in verdicts for r in v.reasons)
    for _ in range(2):
        m.record_reading("door", False)
    assert "door" in m.judge(False, True, []).released


def test_no_quarantine_when_everyone_disagrees():
    m = Monitor("evidential", Policy(quarantine_after=2))
    for _ in range(4):
        m.record_reading("door", True)
        m.record_reading("ranger", True)
        assert m.judge(True, False, []).action != QUARANTINE


def test_uninformative_agreement_cannot_get_a_sensor_quarantined():
    # A quiet door contact far from any door agrees with every belief: it must not outvote the ranger
    # when the robot has been carried off and only the ranger notices.
    m = Monitor("bayes", Policy(quarantine_after=2, quarantine_window=4))
    for _ in range(4):
        m.record_reading("ranger", True, informative=0.99)
        m.record_reading("door", False, informative=0.01)
        assert m.judge(True, False, [("ranger", 0.9)]).action != QUARANTINE


def test_no_alert_until_some_sensor_disagrees_persistently():
    m = Monitor("bayes", Policy(alert_after=2, relocalize_after=6))
    assert m.judge(True, False, [], persistent=False).action == CARRY_ON
    assert m.judge(True, False, [], persistent=False).action == CARRY_ON  # two ticks, but two lone readings
    assert m.judge(True, False, [("door", 0.9)], persistent=True).action == ALERT


def test_a_move_found_elsewhere_re_localizes_at_once_and_cools_down():
    m = Monitor("evidential", Policy(alert_after=2, cooldown_ticks=3))
    m.judge(True, False, [])
    verdict = m.judge(True, False, [], moved="ranger and camera disagree ...: the robot was probably moved")
    assert verdict.action == RELOCALIZE and "probably moved" in verdict.reasons[0]
    assert [m.judge(True, False, []).action for _ in range(2)] == [CARRY_ON, ALERT]  # no second re-seed yet


def test_target_verdicts_land_run_by_run_and_survive_an_interruption(tmp_path):
    import shutil
    from pathlib import Path

    import pytest

    from fusion.targets import measure_targets

    # The test bay stands in for the fault-free case; the sweep is stopped after its first seed.
    shutil.copy(Path(__file__).parent / "data" / "tiny.toml", tmp_path / "calm.toml")
    rows, seen = [], []

    def stop_after_first(case, seed, verdicts):
        seen.append((case, seed, [v.backend for v in verdicts]))
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        measure_targets(tmp_path, [1, 2], ["calm"], progress=stop_after_first, out=rows)
    assert seen == [("calm", 1, ["bayes", "evidential"])]
    assert [(r.case, r.seed, r.backend) for r in rows] == [("calm", 1, "bayes"), ("calm", 1, "evidential")]


def test_targets_can_be_measured_for_one_back_end_from_a_given_seed(tmp_path):
    import shutil
    from pathlib import Path

    from fusion.targets import measure_targets

    shutil.copy(Path(__file__).parent / "data" / "tiny.toml", tmp_path / "calm.toml")
    rows = measure_targets(tmp_path, range(3, 5), ["calm"], backends=["bayes"])
    assert [(r.seed, r.backend) for r in rows] == [(3, "bayes"), (4, "bayes")]
