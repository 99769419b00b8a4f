import pytest

from fusion.monitor import ALERT, CARRY_ON, QUARANTINE, RELOCALIZE, Monitor, Policy


def test_one_spurious_tick_triggers_nothing_and_a_lasting_conflict_escalates():
    m = Monitor(Policy(alert_after=2, relocalize_after=4, cooldown_ticks=3))
    assert m.judge(True, False, []).action == CARRY_ON
    assert m.judge(False, True, []).action == CARRY_ON  # a clear tick ends the episode
    actions = [m.judge(True, False, [("ranger", 0.4)]).action for _ in range(4)]
    assert actions == [CARRY_ON, ALERT, CARRY_ON, RELOCALIZE]
    # cool-down: no second re-localization straight away
    assert [m.judge(True, False, []).action for _ in range(3)] == [CARRY_ON, ALERT, CARRY_ON]


def test_neutral_ticks_neither_start_nor_end_an_episode():
    m = Monitor(Policy(alert_after=2))
    m.judge(True, False, [])
    assert m.judge(False, False, []).action == CARRY_ON  # neutral: the run of conflicts is kept
    assert m.judge(True, False, []).action == ALERT


def test_no_alert_on_a_neutral_tick_after_a_run_the_persistence_test_vetoed():
    # Two lone odd readings of two door contacts on two ticks (no sensor persistent): no alert then, and
    # none on the neutral tick after, which brings no new evidence of a fault (found on calm seed 49).
    m = Monitor(Policy(alert_after=2))
    assert m.judge(True, False, [], persistent=False).action == CARRY_ON
    assert m.judge(True, False, [], persistent=False).action == CARRY_ON
    assert m.judge(False, False, []).action == CARRY_ON
    assert m.judge(True, False, [], persistent=True).action == ALERT  # a persistent conflict still alerts


def test_a_sensor_that_keeps_disagreeing_alone_is_quarantined_and_released():
    m = Monitor(Policy(quarantine_after=3, quarantine_window=5, release_after=2))
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


def test_quarantine_count_is_the_binomial_tail_of_the_sensors_own_error_rates():
    # A working camera whose model allows 2% false sightings and 2% misread identities is odd in
    # 0.02 + 0.98·0.02 = 3.96% of its readings.  Binomial tails over a window of 6 (hand-computed from
    # the binomial formula, cross-checked with scipy.stats.binom.sf): P(X ≥ 3) = 1.15e-3,
    # P(X ≥ 4) = 3.46e-5, so at the default alpha 1e-4 it takes 4 of 6; a sensor that declares no
    # odd readings keeps the policy's floor of 3.
    from scipy.stats import binom

    rate = 0.02 + 0.98 * 0.02
    tail3 = sum(binom.pmf(k, 6, rate) for k in range(3, 7))
    assert (
        abs(
            tail3 - 20 * rate**3 * (1 - rate) ** 3 - 15 * rate**4 * (1 - rate) ** 2 - 6 * rate**5 * (1 - rate) - rate**6
        )
        < 1e-15
    )
    m = Monitor(Policy(quarantine_window=6, quarantine_after=3), {"camera": rate, "ranger": 0.0})
    k, chance = m.quarantine_count("camera")
    assert k == 4 and abs(chance - binom.sf(3, 6, rate)) < 1e-15 and chance < 1e-4 < tail3
    assert m.quarantine_count("ranger") == (3, 0.0)
    assert m.quarantine_count("unnamed") == (3, 0.0)
    # Three odd readings in six are luck for this camera; a fourth gets it quarantined, and the
    # reason gives the count and the chance.
    for odd in (True, False, True, False, True):
        m.record_reading("camera", odd)
        m.record_reading("ranger", False)
        assert m.judge(False, False, []).action != QUARANTINE
    m.record_reading("camera", True)
    m.record_reading("ranger", False)
    verdict = m.judge(False, False, [])
    assert verdict.action == QUARANTINE and "4 of its last 6 readings" in verdict.reasons[0]
    assert "chance 3e-05" in verdict.reasons[0]


@pytest.mark.parametrize("n", [1, 6, 50, 2000, 10_000])
def test_the_binomial_tail_agrees_with_scipy(n):
    """``binomial_tail`` (written out, to keep scipy.stats out of a stream's first tick) against scipy.stats.binom.sf,
    the registry's reference, over whole windows and rates from rare to common."""
    from scipy.stats import binom

    from fusion.monitor.policy import binomial_tail

    for rate in (1e-6, 0.0396, 0.3, 0.97):
        for k in sorted({0, 1, 2, n // 3, n // 2, n - 1, n, n + 1}):
            want = float(binom.sf(k - 1, n, rate))
            got = binomial_tail(k, n, rate)
            assert got == pytest.approx(want, rel=1e-9, abs=1e-300), (n, rate, k)


def test_a_sensor_declared_too_noisy_for_its_window_needs_the_whole_window():
    # Odd in 30% of its readings: even 6 of 6 happens with chance 0.3**6 = 7.3e-4 > 1e-4, so the count
    # is capped at the window (a sensor odd in every reading is quarantined whatever it declares).
    m = Monitor(Policy(quarantine_window=6), {"contact": 0.3})
    assert m.quarantine_count("contact")[0] == 6


def test_no_quarantine_when_everyone_disagrees():
    m = Monitor(Policy(quarantine_after=2))
    for _ in range(4):
        m.record_reading("door", True)
        m.record_reading("ranger", True)
        assert m.judge(True, False, []).action != QUARANTINE


def test_uninformative_agreement_cannot_get_a_sensor_quarantined():
    # A quiet door contact far from any door agrees with every belief: it must not outvote the ranger
    # when the robot has been carried off and only the ranger notices.
    m = Monitor(Policy(quarantine_after=2, quarantine_window=4))
    for _ in range(4):
        m.record_reading("ranger", True, informative=0.99)
        m.record_reading("door", False, informative=0.01)
        assert m.judge(True, False, [("ranger", 0.9)]).action != QUARANTINE


def test_no_alert_until_some_sensor_disagrees_persistently():
    m = Monitor(Policy(alert_after=2, relocalize_after=6))
    assert m.judge(True, False, [], persistent=False).action == CARRY_ON
    assert m.judge(True, False, [], persistent=False).action == CARRY_ON  # two ticks, but two lone readings
    assert m.judge(True, False, [("door", 0.9)], persistent=True).action == ALERT


def test_a_move_found_elsewhere_re_localizes_at_once_and_cools_down():
    m = Monitor(Policy(alert_after=2, cooldown_ticks=3))
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
    from fusion.backends import BACKENDS  # the test bay names no back ends: every family runs

    assert seen == [("calm", 1, list(BACKENDS))]
    assert [(r.case, r.seed, r.backend) for r in rows] == [("calm", 1, b) for b in BACKENDS]


def test_targets_can_be_measured_for_one_back_end_from_a_given_seed(tmp_path):
    import shutil
    from pathlib import Path

    from fusion.targets import measure_targets

    shutil.copy(Path(__file__).parent / "data" / "tiny.toml", tmp_path / "calm.toml")
    rows = measure_targets(tmp_path, range(3, 5), ["calm"], backends=["bayes"])
    assert [(r.seed, r.backend) for r in rows] == [(3, "bayes"), (4, "bayes")]
