"""Calibration of sensor models from labelled logs: closed-form posteriors, coverage, the file round trip."""

import importlib.util
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from fusion.calibration.data import DoorData, datasets
from fusion.calibration.models import FitSettings, _run, fit_sensor, noise_model
from fusion.errors import InputFileError
from fusion.io.case import apply_calibration, load_case
from fusion.io.logs import read_observations
from fusion.io.truth_file import read_truth

TINY = Path(__file__).parent / "data" / "tiny.toml"


def test_core_does_not_import_torch():
    code = (
        "import sys, fusion.cli, fusion.compare, fusion.calibration.models, fusion.calibration.pipeline; "
        "print('torch' in sys.modules, 'pyro' in sys.modules)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.split() == ["False", "False"]


# ----------------------------------------------------------------------------- logs
def test_bad_log_rows_are_set_aside_with_line_and_reason(tmp_path):
    log = tmp_path / "log.jsonl"
    lines = [
        '{"t": 0.3, "sensor": "contact", "kind": "door", "active": false}',
        "not json at all",
        '{"t": 0.5, "sensor": "contact", "kind": "door", "active": NaN}',
        '{"t": 0.5, "sensor": "ranger", "kind": "ranging", "ranges_m": [1.0, NaN, 2.0]}',
        '{"t": 0.25, "sensor": "contact", "kind": "door", "active": true}',
        "",
        '{"t": 1.0, "sensor": "contact", "kind": "door", "active": true}',
        '{"t": 1.5, "sensor": "contact", "kind": "door", "active": true, "pad": "' + "x" * 70_000 + '"}',
    ]
    log.write_text("\n".join(lines) + "\n")
    read = read_observations(log)
    assert [line for line, _ in read.records] == [1, 7]
    reasons = {s.line: s.reason for s in read.set_aside}
    assert sorted(reasons) == [2, 3, 4, 5, 8]
    assert "not JSON (" in reasons[2] and "NaN" in reasons[3] and "NaN" in reasons[4]
    assert "before the previous" in reasons[5] and "longer than" in reasons[8]


# ----------------------------------------------------------------------------- closed forms
needs_pyro = pytest.mark.skipif(
    importlib.util.find_spec("pyro") is None, reason="needs the calibrate extra (pyro, torch)"
)
FAST = FitSettings(samples=400, warmup=200, chains=2, seed=1)


def _door_data(rng, n_in, n_out, hit, false_alarm) -> DoorData:
    inside = np.r_[np.ones(n_in, bool), np.zeros(n_out, bool)]
    active = np.where(inside, rng.random(inside.size) < hit, rng.random(inside.size) < false_alarm)
    return DoorData(inside, active)


def _close(draws, exact, ess):
    """Posterior draws against an exact distribution, within Monte Carlo error (4 standard errors)."""
    sd = exact.std()
    assert abs(draws.mean() - exact.mean()) < 4 * sd / np.sqrt(ess)
    for q in (0.05, 0.5, 0.95):  # quantiles carry more Monte Carlo error than the mean
        assert abs(np.quantile(draws, q) - exact.ppf(q)) < 0.25 * sd


@needs_pyro
def test_door_rates_match_the_beta_posterior():
    # Conjugacy of the Beta prior with Bernoulli data (Gelman et al. 2013, Bayesian Data Analysis, §2.4):
    # with a uniform prior and k hits in n readings, the posterior is Beta(1 + k, 1 + n − k).
    data = _door_data(np.random.default_rng(4), 80, 300, 0.9, 0.05)
    (fit,) = fit_sensor("contact", "door", data, FAST)
    assert fit.method == "nuts"
    k_in = int(data.active[data.inside].sum())
    k_out = int(data.active[~data.inside].sum())
    for name, k, n in (("hit_rate", k_in, 80), ("false_alarm_rate", k_out, 300)):
        diag = fit.diagnostics[name]
        assert diag["r_hat"] < 1.05
        _close(fit.draws[name], stats.beta(1 + k, 1 + n - k), diag["ess"])


@needs_pyro
def test_gaussian_noise_matches_the_inverse_gamma_posterior():
    # Known-mean normal with an inverse-gamma prior on the variance (Gelman et al. 2013, §2.6):
    # the posterior is InvGamma(a + n/2, b + Σx²/2).
    import torch

    x = np.random.default_rng(9).normal(0.0, 0.12, 60)
    a, b = 2.0, 0.02
    fit = _run(noise_model, (torch.as_tensor(x), "sigma_range_m", a, b), len(x), FAST, "camera", "markers")
    exact = stats.invgamma(a + len(x) / 2, scale=b + float((x**2).sum()) / 2)
    _close(fit.draws["sigma_range_m_variance"], exact, fit.diagnostics["sigma_range_m_variance"]["ess"])


@needs_pyro
def test_ninety_percent_intervals_cover_the_truth_at_about_that_rate():
    # Calibration of credible intervals on data simulated with known rates: over 16 seeds and two rates,
    # 32 intervals; Binomial(32, 0.9) gives fewer than 25 covers with probability 1.2% (scipy.stats.binom).
    covered = 0
    quick = FitSettings(samples=200, warmup=100, chains=1)
    for seed in range(16):
        rng = np.random.default_rng(100 + seed)
        hit, false_alarm = rng.uniform(0.7, 0.99), rng.uniform(0.01, 0.2)
        data = _door_data(rng, 40, 120, hit, false_alarm)
        (fit,) = fit_sensor("contact", "door", data, FitSettings(**{**quick.__dict__, "seed": seed}))
        for name, truth in (("hit_rate", hit), ("false_alarm_rate", false_alarm)):
            lo, hi = np.quantile(fit.draws[name], [0.05, 0.95])
            covered += lo <= truth <= hi
    assert 25 <= covered <= 32


@needs_pyro
def test_svi_is_used_when_asked_and_reports_its_elbo():
    data = _door_data(np.random.default_rng(5), 100, 100, 0.9, 0.1)
    (fit,) = fit_sensor("contact", "door", data, FitSettings(method="svi", svi_steps=800, samples=200, seed=2))
    assert fit.method == "svi" and len(fit.elbo) == 800
    k = int(data.active[data.inside].sum())
    assert abs(fit.draws["hit_rate"].mean() - stats.beta(1 + k, 101 - k).mean()) < 0.03


# ----------------------------------------------------------------------------- end to end
@needs_pyro
def test_calibrate_command_writes_a_file_the_case_reads(tmp_path, capsys):
    from fusion.cli import main
    from fusion.runner import run_case, write_results

    case = load_case(TINY)
    folder = write_results(run_case(case, backends=["bayes"]), tmp_path / "run")
    out = tmp_path / "calibrated.toml"
    code = main(
        [
            "calibrate",
            str(folder / "observations.jsonl"),
            "--truth",
            str(folder / "truth.jsonl"),
            "--site",
            str(TINY),
            "--out",
            str(out),
            "--samples",
            "150",
            "--method",
            "svi",
            "--svi-steps",
            "300",
        ]
    )
    text = capsys.readouterr().out
    assert code == 0 and "not a certified safety function" in text
    calibrated = apply_calibration(case, out)
    door = calibrated.sensor("contact").params
    assert 0 < door.false_alarm_rate < 0.5
    # The test bay's route never enters the door's zone: the hit rate cannot be learned from this log,
    # so it is not calibrated (the case's is kept, with a warning saying why), nor is the reliability.
    assert door.hit_rate == case.sensor("contact").params.hit_rate
    assert "hit_rate is not calibrated: the robot was never inside the door's contact zone" in " ".join(text.split())
    assert door.reliability == case.sensor("contact").params.reliability
    ranger = calibrated.sensor("ranger").params
    assert ranger.wall_share + ranger.early_share + ranger.no_echo_share + ranger.stray_share == pytest.approx(
        1.0, abs=1e-6
    )
    assert calibrated.sensor("wheels").params.sigma_per_m > 0
    # The calibrated parameters drop straight into a run.
    assert main(["run", str(TINY), "--calibration", str(out), "--out", str(tmp_path / "again"), "--quiet"]) == 0


def test_datasets_pair_readings_with_the_truth(tmp_path):
    from fusion.runner import run_case, write_results

    case = load_case(TINY)
    folder = write_results(run_case(case, backends=["bayes"]), tmp_path / "run")
    log, truth = read_observations(folder / "observations.jsonl"), read_truth(folder / "truth.jsonl")
    data = datasets(case, log.records, truth.records)
    assert not data.set_aside and set(data.by_sensor) == {"wheels", "ranger", "camera", "contact"}
    odo = data.by_sensor["wheels"]
    # The simulator's forward noise is σ·|d| + 1e-4 with σ = the case's sigma_per_m: residuals are that small.
    resid = odo.measured_forward_m - odo.true_forward_m
    assert np.std(resid) < 5 * case.sensor("wheels").params.sigma_per_m * np.abs(odo.true_forward_m).max() + 1e-3


def test_a_bad_calibration_file_names_file_line_and_field(tmp_path):
    case = load_case(TINY)
    bad = tmp_path / "cal.toml"
    bad.write_text('[calibration]\nsite = "x"\n\n[[sensors]]\nname = "contact"\nkind = "door"\nhit_rate = 1.7\n')
    with pytest.raises(InputFileError) as err:
        apply_calibration(case, bad)
    assert err.value.line == 7 and "hit_rate" in str(err.value) and "[0, 1]" in str(err.value)
    bad.write_text('[calibration]\n[[sensors]]\nname = "lidar"\nkind = "ranging"\n')
    with pytest.raises(InputFileError, match="no sensor 'lidar'"):
        apply_calibration(case, bad)
    # A calibration file written before the beam model's parameters were renamed: refused, with the new name.
    bad.write_text('[calibration]\n[[sensors]]\nname = "ranger"\nkind = "ranging"\nz_hit = 0.8\n')
    with pytest.raises(InputFileError) as err:
        apply_calibration(case, bad)
    assert err.value.line == 5 and "now called 'wall_share'" in str(err.value)


# ----------------------------------------------------------------------------- what a log can teach
@needs_pyro
def test_false_sightings_are_fitted_as_a_mixture_component_not_a_wider_sigma():
    # Data drawn from the camera model itself (fusion.sensors.markers: a firing is false with rate f and
    # then uniform over range × field of view; else a detection with probability p_detect and Gaussian
    # residuals): a fit of the right model covers the values it was drawn with (fake-data check, Gelman
    # et al. 2013, Bayesian Data Analysis, §6; the 99% bounds here are our choice, four parameters at once).
    from fusion.calibration.data import MarkerData

    rng = np.random.default_rng(21)
    n, f, p_detect, s_r, s_b = 800, 0.06, 0.85, 0.08, 1.0
    false = rng.random(n) < f
    seen = ~false & (rng.random(n) < p_detect)
    outcome = np.where(false | seen, 1, 0)
    dr = np.where(false, rng.uniform(-3.0, 3.0, n), rng.normal(0.0, s_r, n))[outcome == 1]
    db = np.where(false, rng.uniform(-60.0, 60.0, n), rng.normal(0.0, s_b, n))[outcome == 1]
    data = MarkerData(np.ones(n, bool), outcome, dr, db, 1.0 / (6.0 * 120.0))
    assert dr.std() > 5 * s_r  # the premise: one Gaussian for all sightings would be five times too wide
    (fit,) = fit_sensor("camera", "markers", data, FAST)
    for name, truth in (("false_rate", f), ("p_detect", p_detect), ("sigma_range_m", s_r), ("sigma_bearing_deg", s_b)):
        lo, hi = np.quantile(fit.draws[name], [0.005, 0.995])
        assert lo <= truth <= hi, (name, lo, hi)
    assert not fit.unidentified


@needs_pyro
def test_a_log_without_misses_leaves_the_detection_probability_uncalibrated():
    from fusion.calibration.data import MarkerData

    rng = np.random.default_rng(3)
    dr, db = rng.normal(0, 0.1, 300), rng.normal(0, 2.0, 300)
    data = MarkerData(np.ones(300, bool), np.ones(300, np.int64), dr, db, 1.0 / (6.0 * 120.0))
    (fit,) = fit_sensor("camera", "markers", data, FitSettings(samples=200, warmup=100, chains=1, seed=1))
    assert "p_detect" in fit.unidentified and "saw nothing" in fit.unidentified["p_detect"]
    assert "sigma_range_m" not in fit.unidentified


def test_odometry_noise_is_per_metre_whatever_the_record_rate():
    # Independent per-record errors of variance a²·|d| add up over a window to a²·|D| (variances of
    # independent errors add): windows of 0.5 s see the same noise per metre at 10 and at 50 records
    # per second.  Checked on the data the fit sees, by the closed-form estimate Σ e² / Σ |D|.
    from fusion.calibration.data import collect_odometry
    from fusion.io.logs import TruthPose
    from fusion.sensors.odometry import OdometryReading

    a, speed = 0.05, 0.8  # m per √m; m/s
    truth = [TruthPose(i / 100, speed * i / 100, 0.0, 0.0) for i in range(6001)]  # a minute of straight driving
    for rate in (10, 50):
        rng = np.random.default_rng(rate)
        d = speed / rate
        pairs = [
            (None, OdometryReading(d + rng.normal(0.0, a * np.sqrt(d))), k / rate) for k in range(1, 60 * rate + 1)
        ]
        data = collect_odometry(None, None, pairs, truth)
        assert len(data.true_forward_m) >= 100
        estimate = np.sqrt(((data.measured_forward_m - data.true_forward_m) ** 2).sum() / data.true_forward_m.sum())
        assert abs(estimate - a) < 0.2 * a, (rate, estimate)
