"""The comparison sweep: settings, identical evidence, figures, intervals, verdicts, resume, engines, CLI."""

import dataclasses
import json
import math
import os
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from scipy import stats

from fusion.case_model import FaultSpec, SweepSpec
from fusion.cli import main
from fusion.compare import (
    RunFigures,
    RunRecord,
    RunSeries,
    Setting,
    bayes_dempster_identity,
    calibration,
    check_sweep,
    longest_measured_first,
    run_in_processes,
    run_sweep,
    settings_of,
    summarise,
    variant,
    verdicts,
)
from fusion.compare.runs import _figures
from fusion.errors import FusionError, InputFileError
from fusion.io.case import load_case, parse_case
from fusion.monitor import ALERT, CARRY_ON
from fusion.simulate import simulate

TINY = Path(__file__).parent / "data" / "tiny.toml"
TWO = [Setting("bayes"), Setting("evidential", "dempster")]


def _figure_free(rec: RunRecord) -> str:
    """A run's record without its wall times (the only figures that may differ between repeats), as text
    so that NaN (no carry, no alert) compares equal to NaN."""
    return json.dumps({k: v for k, v in rec.to_json().items() if k not in ("ms_per_step", "wall_s")}, sort_keys=True)


def _record(key: str, seed: int, wall_s: float = math.nan, **figures) -> RunRecord:
    """A run record with the given figures and every other figure NaN (does not apply)."""
    values = {f.name: math.nan for f in dataclasses.fields(RunFigures)}
    values.update({"ticks": 0, "false_alerts": 0, **figures})
    return RunRecord(key, seed, {"backend": key}, RunFigures(**values), RunSeries((), (), ()), wall_s)


# ----------------------------------------------------------------------------- settings
def test_default_sweep_is_every_family_with_six_rules_for_the_evidential_one():
    keys = [s.key for s in settings_of(SweepSpec())]
    assert keys == [
        "bayes",
        "evidential-dempster",
        "evidential-conjunctive",
        "evidential-yager",
        "evidential-dubois_prade",
        "evidential-pcr5",
        "evidential-murphy",
        "particles",
        "gaussian",
    ]


def test_grid_of_discounts_and_fault_rates():
    spec = SweepSpec(
        backends=("bayes", "evidential"), rules=("dempster", "yager"), reliabilities=(0.8, 1.0), fault_rates=(0.0, 0.5)
    )
    settings = settings_of(spec)
    assert len(settings) == 2 * 2 * 3  # fault rates × discounts × (Bayes + two rules)
    assert len({s.key for s in settings}) == len(settings)


@pytest.mark.parametrize(
    "spec, words",
    [
        (SweepSpec(rules=("dempster", "bogus")), ["bogus", "dempster", "yager", "pcr5"]),
        (SweepSpec(backends=("kalman",)), ["kalman", "bayes", "evidential"]),
        (SweepSpec(reliabilities=(1.5,)), ["discount factor", "1.5", "[0, 1]"]),
        (SweepSpec(fault_rates=(-0.1,)), ["fault rate", "[0, 1]"]),
    ],
)
def test_bad_sweeps_are_refused_with_the_choices(spec, words):
    with pytest.raises(FusionError) as err:
        check_sweep(spec)
    for w in words:
        assert w in str(err.value)


def test_case_compare_table_is_validated_with_its_line():
    text = TINY.read_text() + '\n[compare]\nseeds = 4\nrules = ["dempster", "guesswork"]\n'
    with pytest.raises(InputFileError) as err:
        parse_case(text, "bay.toml")
    assert err.value.line == text.splitlines().index('rules = ["dempster", "guesswork"]') + 1
    assert "guesswork" in str(err.value) and "dubois_prade" in str(err.value)
    ok = parse_case(TINY.read_text() + '\n[compare]\nseeds = 4\nrules = ["yager"]\nreliabilities = [0.7, 0.9]\n')
    assert ok.sweep == SweepSpec(seeds=4, rules=("yager",), reliabilities=(0.7, 0.9))


def test_discounting_leaves_the_readings_identical():
    case = load_case(TINY)
    plain = simulate(case, seed=5)
    discounted = simulate(variant(case, 0.4, None), seed=5)
    assert [t.observations for t in plain] == [t.observations for t in discounted]
    assert all(s.params.reliability == 0.4 for s in variant(case, 0.4, None).sensors if s.kind != "odometry")


# ----------------------------------------------------------------------------- figures
def test_calibration_figures_match_their_definitions():
    rng = np.random.default_rng(2)
    p = rng.dirichlet(np.ones(200))
    cell = 17
    p_true, level, brier = calibration(p, cell)
    onehot = np.zeros(200)
    onehot[cell] = 1.0
    # Brier (1950), Verification of forecasts expressed in terms of probability: Σ (p_i − o_i)².
    assert brier == pytest.approx(float(((p - onehot) ** 2).sum()), abs=1e-12)
    assert p_true == p[cell]
    # The true cell's level: the mass of every cell more probable than it (sorted reference).
    ranked = np.sort(p)[::-1]
    assert level == pytest.approx(float(ranked[ranked > p[cell]].sum()), abs=1e-12)


def test_alert_precision_recall_and_recovery_on_a_hand_made_run():
    case = load_case(TINY)
    contact = dataclasses.replace(case.sensor("contact"), faults=(FaultSpec("stuck", 5.0, 8.0, {"value": True}),))
    case = dataclasses.replace(case, sensors=tuple(contact if s.name == "contact" else s for s in case.sensors))
    rows = []
    for k in range(21):
        t = float(k)
        rows.append(
            SimpleNamespace(
                t=t,
                error_m=0.1,
                heading_error_deg=1.0,
                action=ALERT if k in (6, 7, 15) else CARRY_ON,
                seconds=0.01,
                carried=False,
            )
        )
    figs, _ = _figures(case, rows, [(0.5, 0.0, 0.25)] * 21)
    # Two alert episodes: 6–7 s inside the fault (5–8 s, + grace), 15 s outside: precision 1/2, recall 1/1.
    assert figs.alert_precision == 0.5 and figs.alert_recall == 1.0 and figs.false_alerts == 1
    assert figs.nll == pytest.approx(math.log(2)) and figs.brier == 0.25
    assert math.isnan(figs.recovery_s)


def test_summary_interval_is_the_bca_bootstrap_of_the_mean():
    # Efron & Tibshirani (1993), An Introduction to the Bootstrap, ch. 14: the BCa interval, here as the
    # general-purpose reference library computes it (scipy.stats.bootstrap, same resamples and seed).
    values = [0.21, 0.35, 0.18, 0.40, 0.27, 0.30, 0.22, 0.33, 0.25, 0.29]
    records = [_record("bayes", i, median_error_m=v) for i, v in enumerate(values)]
    table = summarise(records, [Setting("bayes")])
    row = table[table.figure == "median_error_m"].iloc[0]
    ci = stats.bootstrap(
        (np.array(values),), np.mean, n_resamples=2000, method="BCa", rng=np.random.default_rng(0)
    ).confidence_interval
    assert row["runs"] == 10 and row["mean"] == pytest.approx(np.mean(values))
    assert row["low"] == pytest.approx(ci.low) and row["high"] == pytest.approx(ci.high)
    assert table[table.figure == "nll"].iloc[0]["runs"] == 0


def test_the_interval_agrees_with_student_t_on_many_seeds_and_stays_in_range_on_skewed_ones():
    from fusion.compare.verdicts import interval

    # Student (1908), The probable error of a mean: for 50 near-normal values the t-interval and the bootstrap
    # estimate the same spread of the mean; they agree within 10% (tolerance ours).
    values = np.random.default_rng(5).normal(0.3, 0.05, 50)
    lo, hi = interval(values)
    half = stats.t.ppf(0.975, 49) * np.std(values, ddof=1) / math.sqrt(50)
    assert (hi - lo) / 2 == pytest.approx(half, rel=0.1)
    # One bad seed among nine good ones: the t-interval of an error would reach below 0 m and of a share
    # above 1; the bootstrap, made of resampled means, cannot leave the values' range.
    errors, shares = np.array([0.0] * 9 + [5.0]), np.array([1.0] * 9 + [0.0])
    assert np.mean(errors) - stats.t.ppf(0.975, 9) * np.std(errors, ddof=1) / math.sqrt(10) < 0
    assert interval(errors)[0] >= 0.0 and interval(shares)[1] <= 1.0


def _records(a_values, b_values, name="median_error_m"):
    out = []
    for key, values in (("bayes", a_values), ("evidential-dempster", b_values)):
        for seed, v in enumerate(values):
            out.append(_record(key, seed, **{name: v}))
    return out


def test_verdict_uses_the_paired_wilcoxon_test():
    # Wilcoxon (1945), Individual comparisons by ranking methods: with all n = 10 paired
    # differences of one sign, the exact two-sided p-value is 2 / 2^10.
    a = [0.2 + 0.01 * i for i in range(10)]
    b = [v + 0.05 + 0.001 * i for i, v in enumerate(a)]
    (v,) = verdicts(_records(a, b), TWO, ["median_error_m"])
    assert v.best == "Bayes" and v.wins == 10 and v.losses == 0
    assert v.p_value == pytest.approx(2 / 2**10)
    assert v.sureness == "clear" and "Bayes is best" in v.sentence
    (few,) = verdicts(_records(a[:3], b[:3]), TWO, ["median_error_m"])
    assert few.sureness == "too few paired seeds to tell"
    (tie,) = verdicts(_records([1.0] * 8, [1.0] * 8), TWO, ["median_error_m"])
    assert tie.sureness == "a tie"
    # Figures equal to rounding (exact Dempster-Shafer with probabilistic motion places the robot as Bayes
    # does; their errors then differ by ~1e-16) are a tie, not a "clear" win found in rounding noise.
    rounding = [v * (1 + 3e-16 * (-1) ** i) for i, v in enumerate(a)]
    (same,) = verdicts(_records(a, rounding), TWO, ["median_error_m"])
    assert same.sureness == "a tie" and same.p_value != same.p_value  # NaN: no test on rounding


def test_bayes_and_dempster_agree_on_bayesian_masses():
    # Shafer (1976), A Mathematical Theory of Evidence: Dempster's rule on Bayesian mass
    # functions is Bayes' rule; the sweep's sanity row checks this on the case's own readings.
    check = bayes_dempster_identity(load_case(TINY), cells=256, readings=10)
    assert check.readings == 10 and check.cells == 256
    assert check.holds and check.max_abs_difference < 1e-12


# ----------------------------------------------------------------------------- sweeps
def test_sweep_writes_run_by_run_and_resumes(tmp_path):
    out = tmp_path / "sweep"
    started, done = [], []
    first = run_sweep(
        TINY, TWO, [1, 2], out, workers=2, on_start=lambda total, d: started.append((total, d)), on_done=done.append
    )
    assert started == [(4, 0)] and len(done) == 4 and len(first) == 4
    assert sorted(p.name for p in (out / "runs").glob("*.json")) == [
        "bayes-seed1.json",
        "bayes-seed2.json",
        "evidential-dempster-seed1.json",
        "evidential-dempster-seed2.json",
    ]
    # An interrupted sweep: one run file missing.  The same call redoes only that run.
    (out / "runs" / "bayes-seed2.json").unlink()
    started.clear()
    done.clear()
    again = run_sweep(
        TINY, TWO, [1, 2], out, workers=1, on_start=lambda t, d: started.append((t, d)), on_done=done.append
    )
    assert started == [(4, 3)] and [(r.key, r.seed) for r in done] == [("bayes", 2)]
    # Determinism: the redone run and the parallel first run agree figure for figure.
    assert [_figure_free(r) for r in again] == [_figure_free(r) for r in first]


def test_the_sweep_starts_unmeasured_settings_first_then_the_longest_measured():
    # Longest processing time first (Graham 1969, "Bounds on multiprocessing timing anomalies").
    slow, fast, new = Setting("evidential", "pcr5"), Setting("bayes"), Setting("evidential", "yager")
    records = [_record(slow.key, 1, 30.0), _record(slow.key, 2, 50.0), _record(fast.key, 1, 9.0)]
    order = longest_measured_first(records)
    jobs = [("case", s, seed, None) for s in (fast, slow, new) for seed in (1, 2)]
    assert [(j[1].key, j[2]) for j in order(jobs)] == [
        (new.key, 1),
        (new.key, 2),
        (slow.key, 1),
        (slow.key, 2),
        (fast.key, 1),
        (fast.key, 2),
    ]
    records.append(_record(new.key, 1, 35.0))  # a run lands: the order follows the view
    assert [j[1].key for j in order(jobs)][:4] == [slow.key, slow.key, new.key, new.key]  # 40 s > 35 s


def test_each_next_run_is_chosen_when_a_worker_comes_free(tmp_path):
    asked, landed = [], []

    def order(remaining):
        asked.append(len(remaining))
        return remaining

    jobs = [(str(TINY), TWO[0], seed, None) for seed in (1, 2, 3)]
    run_in_processes(jobs, 1, None, landed.append, lambda job, err: pytest.fail(str(err)), order)
    assert asked == [3, 2, 1] and [r.seed for r in landed] == [1, 2, 3]
    assert all(r.wall_s > 0 for r in landed)


def _die_on(word: str) -> dict:
    """A stand-in run for the pool test: ``"die"`` ends its worker process at once."""
    if word == "die":
        os._exit(3)
    return {"word": word}


def test_a_worker_that_dies_fails_the_runs_left_and_nothing_hangs():
    # The first run takes its worker down: the pool breaks, and the runs not yet handed out can never
    # start.  Each is reported failed, none is lost silently, and the call returns.
    landed, failures = [], []
    jobs = [("die",), ("b",), ("c",)]
    run_in_processes(jobs, 1, None, landed.append, lambda job, err: failures.append(job), target=_die_on)
    assert landed == [] and sorted(failures) == sorted(jobs)


def test_sweep_refuses_a_folder_of_another_case(tmp_path):
    out = tmp_path / "sweep"
    run_sweep(TINY, TWO[:1], [1], out, workers=1)
    other = tmp_path / "other.toml"
    other.write_text(TINY.read_text().replace('name = "test bay"', 'name = "other bay"'))
    with pytest.raises(FusionError, match="different case"):
        run_sweep(other, TWO[:1], [1], out, workers=1)


def test_dask_engine_gives_the_local_results(tmp_path):
    pytest.importorskip("distributed")
    local = run_sweep(TINY, TWO[:1], [4], tmp_path / "local", workers=1)
    dask = run_sweep(TINY, TWO[:1], [4], tmp_path / "dask", workers=1, engine="dask")
    assert [_figure_free(r) for r in dask] == [_figure_free(r) for r in local]


def test_dask_engine_runs_beside_another_cluster_s_port(tmp_path):
    # Two sweeps on one machine (or two test runs) must not fight over the HTTP port a Dask scheduler takes by
    # default (8787): the engine asks for any free port, so holding 8787 here changes nothing and warns of nothing.
    import socket

    pytest.importorskip("distributed")
    held = socket.socket()
    try:
        held.bind(("", 8787))
        held.listen(1)
    except OSError:
        pass  # something else holds it already: the same situation
    try:
        records = run_sweep(TINY, TWO[:1], [4], tmp_path / "dask", workers=1, engine="dask")
    finally:
        held.close()
    assert len(records) == 1


# ----------------------------------------------------------------------------- command line
def test_compare_command_writes_the_report(tmp_path, capsys):
    out = tmp_path / "cmp"
    code = main(
        [
            "compare",
            str(TINY),
            "--seeds",
            "2",
            "--rule",
            "dempster",
            "--rule",
            "yager",
            "--out",
            str(out),
            "--quiet",
            "--workers",
            "2",
        ]
    )
    text = capsys.readouterr().out
    assert code == 0
    for name in ("runs.csv", "settings.csv", "report.html", "error_over_time.png", "calibration.png", "sweep.json"):
        assert (out / name).stat().st_size > 0
    import pandas as pd

    runs = pd.read_csv(out / "runs.csv")
    # Every family by default (the case's [run] backends): Bayes, the two rules asked for, particles, Gaussian.
    assert len(runs) == 5 * 2 and set(runs.key) == {
        "bayes",
        "evidential-dempster",
        "evidential-yager",
        "particles",
        "gaussian",
    }
    assert "not a certified safety function" in text and "Sanity row" in text and "holds" in text
    page = (out / "report.html").read_text()
    assert "data:image/png;base64," in page and "not a certified safety function" in page
    assert json.loads((out / "sweep.json").read_text())["settings"] == list(runs.key.unique())


def test_compare_command_refuses_a_bad_rule_before_running(tmp_path, capsys):
    out = tmp_path / "never"
    code = main(["compare", str(TINY), "--rule", "majority-vote", "--out", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and "majority-vote" in err and "dempster" in err and "pcr5" in err
    assert not out.exists()
    code = main(["compare", str(TINY), "--reliability", "2", "--out", str(out), "--quiet"])
    assert code == 2 and "[0, 1]" in capsys.readouterr().err and not out.exists()


def test_a_failing_run_is_reported_and_the_others_are_kept(tmp_path):
    out = tmp_path / "sweep"
    broken = Setting("bayes", calibrated=True)  # asks for a calibration file the sweep does not have
    with pytest.raises(FusionError) as err:
        run_sweep(TINY, [Setting("bayes"), broken], [1], out, workers=1)
    assert "1 of 2 runs failed" in str(err.value) and "calibration file" in str(err.value)
    assert [p.name for p in (out / "runs").glob("*.json")] == ["bayes-seed1.json"]


def test_compare_ranks_the_schemes_under_calibrated_parameters_too(tmp_path, capsys):
    cal = tmp_path / "cal.toml"
    cal.write_text(
        '[calibration]\nsite = "test bay"\n\n[[sensors]]\nname = "contact"\nkind = "door"\n'
        "hit_rate = 0.8\nfalse_alarm_rate = 0.05\nreliability = 0.9\n"
    )
    out = tmp_path / "cmp"
    code = main(
        [
            "compare",
            str(TINY),
            "--seeds",
            "1",
            "--backend",
            "bayes",
            "--calibration",
            str(cal),
            "--out",
            str(out),
            "--quiet",
            "--workers",
            "1",
        ]
    )
    assert code == 0 and "calibrated" in capsys.readouterr().out
    import pandas as pd

    assert sorted(pd.read_csv(out / "runs.csv").key) == ["bayes", "bayes-cal"]


def test_the_recommendation_names_the_scheme_the_figure_how_sure_and_the_evidence():
    # Built from verdicts whose p-values are exact (Wilcoxon 1945: ten paired differences of one sign give
    # p = 2/2^10 < 0.01, "clear"); the recommendation must say so in words and name the trade-off.
    from fusion.compare.recommend import recommend

    a = [0.2 + 0.01 * i for i in range(10)]
    b = [v + 0.05 + 0.001 * i for i, v in enumerate(a)]
    recall = {"bayes": [0.5] * 10, "evidential-dempster": [0.8 + 0.01 * i for i in range(10)]}
    records = [
        _record(key, seed, median_error_m=err, alert_recall=recall[key][seed])
        for key, errs in (("bayes", a), ("evidential-dempster", b))
        for seed, err in enumerate(errs)
    ]
    verdict_list = verdicts(records, TWO, ["median_error_m", "alert_recall"])
    advice = recommend(verdict_list, "median_error_m", 2, 10, "test bay")
    assert advice.setting == "Bayes" and advice.sureness == "clear"
    assert advice.text.startswith("Recommendation: Bayes for median error, clear")
    assert "better on 10 of 10 paired seeds" in advice.text and "2 settings × 10 seeds of test bay" in advice.text
    assert advice.trade_offs and "better on alert recall (clear)" in advice.text
    few = recommend(verdicts(_records(a[:3], b[:3]), TWO, ["median_error_m"]), "median_error_m", 2, 3, "bay")
    assert few.setting is None and few.text.startswith("No recommendation on median error") and "--seeds" in few.text


@pytest.mark.parametrize("width", [80, 120])
def test_comparison_tables_fit_the_terminal_and_never_cut_a_name(width):
    from rich.console import Console

    from fusion.compare.settings import FIGURES
    from fusion.view.compare_tables import TABLE_FIGURES, tables

    settings = [Setting("bayes"), Setting("evidential", "dempster"), Setting("evidential", "dubois_prade")]
    records = [
        _record(s.key, seed, **{name: 0.123 + seed for name in TABLE_FIGURES}) for s in settings for seed in range(6)
    ]
    console = Console(width=width, record=True)
    for part in tables(summarise(records, settings), settings, "median_error_m", "bay", width):
        console.print(part)
    text = console.export_text()
    assert max(len(line) for line in text.splitlines()) <= width
    for s in settings:
        assert s.label in text  # whole, on one line
    flat = " ".join(text.split())
    assert all(FIGURES[n].label in flat for n in TABLE_FIGURES)
