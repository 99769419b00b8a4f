"""Bayesian models of each sensor's parameters, fitted with pyro (imported only when a fit runs).

Small models run NUTS (Hoffman & Gelman 2014) on two chains, so that split R-hat and the
effective sample size can be reported (Gelman et al. 2013, Bayesian Data Analysis, §11.4);
models with more than ``NUTS_MAX_POINTS`` data points run stochastic variational inference
(Hoffman et al. 2013) with a mean-field normal guide, and report the ELBO trace.

Priors are weakly informative and stated per model; they are ours (common practice, no source).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from fusion.errors import FusionError

__all__ = ["Fit", "FitSettings", "fit_sensor", "NUTS_MAX_POINTS", "require_pyro"]

NUTS_MAX_POINTS = 20_000
MIN_TRAVEL_M = 5.0
MIN_TURN_DEG = 360.0
"""Least driving and turning from which odometry noise per metre and per turn is learned (our choice: a few
windows' worth; less leaves the posterior to the prior)."""
RHAT_WARN = 1.05
"""Split R-hat above this means the chains disagree (Gelman et al. 2013 suggest 1.1; we are stricter)."""
ESS_WARN = 100
"""Fewer effective draws than this make the 90% interval's ends unreliable (common practice, no source)."""


@dataclass(frozen=True)
class FitSettings:
    method: str = "auto"  # auto | nuts | svi
    samples: int = 500
    warmup: int = 300
    chains: int = 2
    svi_steps: int = 2000
    seed: int = 0


@dataclass
class Fit:
    sensor: str
    kind: str
    method: str
    points: int
    draws: dict[str, np.ndarray]  # parameter -> posterior draws
    diagnostics: dict[str, dict] = field(default_factory=dict)  # parameter -> {"r_hat", "ess"}
    elbo: list[float] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    unidentified: dict[str, str] = field(default_factory=dict)  # parameter -> why this log cannot teach it


def require_pyro():
    try:
        import pyro  # noqa: F401
        import torch  # noqa: F401
    except ImportError:
        raise FusionError(
            "calibration needs the optional extra: install a CPU PyTorch first (pip install torch==2.13.0, "
            "or see https://pytorch.org for a CPU-only build), then pip install 'fusion-localize[calibrate]'"
        ) from None


# ----------------------------------------------------------------------------- models
def _door_model(inside, active):
    import pyro
    import pyro.distributions as dist
    import torch

    hit = pyro.sample("hit_rate", dist.Beta(1.0, 1.0))  # uniform priors
    false_alarm = pyro.sample("false_alarm_rate", dist.Beta(1.0, 1.0))
    p = torch.where(inside, hit, false_alarm)
    with pyro.plate("readings", len(active)):
        pyro.sample("active", dist.Bernoulli(probs=p), obs=active)


def _marker_model(visible, outcome, dr, db, false_density):
    """Detection and noise of a marker camera in one model, false readings as a mixture component.

    Every firing is a miss, a sighting of a marker in view (with range and bearing residuals
    ``dr``, ``db`` against the truth), or a sighting no marker in view explains.  A working firing
    (probability 1 − false_rate) sees a marker in view with probability p_detect, its residuals
    Gaussian (σ_range, σ_bearing); a false firing (false_rate) gives a reading spread uniformly
    over the sensor's range and field of view (density ``false_density`` per metre and degree),
    whatever marker id it names.  So a sighting far off its marker is counted as false, not as a
    wider σ (the usual mixture treatment of outliers; Thrun, Burgard & Fox 2005, §6.3, does the
    same for range beams)."""
    import pyro
    import pyro.distributions as dist
    import torch

    p_detect = pyro.sample("p_detect", dist.Beta(1.0, 1.0))
    false_rate = pyro.sample("false_rate", dist.Beta(1.0, 1.0))
    shape, scale = NOISE_PRIORS["sigma_range_m"]
    var_r = pyro.sample("sigma_range_m_variance", dist.InverseGamma(shape, scale))
    shape, scale = NOISE_PRIORS["sigma_bearing_deg"]
    var_b = pyro.sample("sigma_bearing_deg_variance", dist.InverseGamma(shape, scale))
    miss = torch.where(visible & (outcome == 0), (1 - false_rate) * (1 - p_detect), 1 - false_rate)
    log_p = torch.where(outcome == 0, torch.log(miss), torch.log(false_rate).expand(outcome.shape))
    pyro.factor("firings", log_p[outcome != 1].sum())
    if len(dr):
        working = (
            torch.log((1 - false_rate) * p_detect)
            + dist.Normal(0.0, var_r.sqrt()).log_prob(dr)
            + dist.Normal(0.0, var_b.sqrt()).log_prob(db)
        )
        spurious = torch.log(false_rate) + math.log(false_density)
        pyro.factor("sightings", torch.logaddexp(working, spurious).sum())


NOISE_PRIORS = {"sigma_range_m": (2.0, 0.02), "sigma_bearing_deg": (2.0, 10.0)}
"""Inverse-gamma (shape, scale) priors on the variance of a zero-mean Gaussian residual: prior mean
variances of 0.02 m² and 10 deg² (σ ≈ 0.14 m and 3°), conjugate, so a test can check the fit against
the closed form."""


def noise_model(residual, name: str, shape: float, scale: float):
    import pyro
    import pyro.distributions as dist

    variance = pyro.sample(f"{name}_variance", dist.InverseGamma(shape, scale))
    with pyro.plate("residuals", len(residual)):
        pyro.sample("residual", dist.Normal(0.0, variance.sqrt()), obs=residual)


def _range_model(measured, expected, max_range):
    """Beam model (Thrun, Burgard & Fox 2005, §6.3): a no-echo return at the maximum range with share
    ``no_echo_share``; the others a mixture of a wall return (Gaussian around the ray-cast range), an early return
    before it (exponential) and a stray return (uniform)."""
    import pyro
    import pyro.distributions as dist
    import torch

    at_max = measured >= max_range - 1e-9
    no_echo_share = pyro.sample("no_echo_share", dist.Beta(1.0, 1.0))
    w = pyro.sample("weights", dist.Dirichlet(torch.ones(3)))  # wall, early, stray among returns < max
    sigma = pyro.sample("wall_spread_m", dist.HalfNormal(0.5))
    lam = pyro.sample("early_decay_per_m", dist.Gamma(2.0, 2.0))
    z, zs = measured[~at_max], expected[~at_max]
    log_hit = dist.Normal(zs, sigma).log_prob(z)
    log_short = torch.where(
        z <= zs,
        torch.log(lam) - lam * z - torch.log(-torch.expm1(-lam * zs.clamp(min=1e-6))),
        torch.full_like(z, -1e30),
    )
    log_rand = torch.full_like(z, -math.log(max_range))
    mix = torch.logsumexp(torch.stack([log_hit, log_short, log_rand]) + torch.log(w)[:, None], dim=0)
    pyro.factor("returns", mix.sum() + torch.log1p(-no_echo_share) * len(z))
    pyro.factor("maxed", torch.log(no_echo_share) * at_max.sum())


def _odometry_model(mf, tf, mt, tt):
    import pyro
    import pyro.distributions as dist

    a = pyro.sample("sigma_per_m", dist.HalfNormal(0.2))
    b1 = pyro.sample("turn_sigma_per_m_deg", dist.HalfNormal(5.0))
    b2 = pyro.sample("turn_sigma_per_turn", dist.HalfNormal(0.2))
    # The error model of fusion.sensors.odometry: variances per metre and per radian, no per-record floor
    # (a small fixed jitter keeps records of zero motion from making the likelihood singular).
    deg_per_rad = 180.0 / math.pi
    with pyro.plate("ticks", len(mf)):
        pyro.sample("forward", dist.Normal(tf, (a**2 * tf.abs() + _JITTER_M**2).sqrt()), obs=mf)
        spread = b1**2 * tf.abs() + b2**2 * tt.abs() * deg_per_rad + _JITTER_DEG**2
        pyro.sample("turn", dist.Normal(tt, spread.sqrt()), obs=mt)


_JITTER_M = 1e-3
_JITTER_DEG = 0.05
"""Numerical jitter of the odometry fit (metres, degrees): far below any real odometry error (our choice)."""


# ----------------------------------------------------------------------------- inference
def _run(model, args, points: int, settings: FitSettings, sensor: str, kind: str) -> Fit:
    import pyro
    import torch

    method = settings.method
    if method == "auto":
        method = "nuts" if points <= NUTS_MAX_POINTS else "svi"
    if method not in ("nuts", "svi"):
        raise FusionError(f"unknown inference method {settings.method!r}; choose auto, nuts or svi")
    torch.set_default_dtype(torch.float64)
    torch.set_num_threads(1)  # these models are small: more threads only add overhead (measured)
    fit = Fit(sensor, kind, method, points, {})
    if method == "nuts":
        from pyro.infer import MCMC, NUTS
        from pyro.ops.stats import effective_sample_size, split_gelman_rubin

        chains = []
        for c in range(settings.chains):
            pyro.set_rng_seed(settings.seed * 1000 + c)
            pyro.clear_param_store()
            # A dense mass matrix: the scale parameters trade off against each other (per metre vs floor).
            mcmc = MCMC(
                NUTS(model, full_mass=True),
                num_samples=settings.samples,
                warmup_steps=settings.warmup,
                disable_progbar=True,
            )
            mcmc.run(*args)
            chains.append({k: v.detach() for k, v in mcmc.get_samples().items()})
        for name in chains[0]:
            stacked = torch.stack([ch[name] for ch in chains])  # (chains, draws, ...)
            fit.draws[name] = stacked.reshape(-1, *stacked.shape[2:]).numpy()
            if settings.chains >= 2:
                r_hat = split_gelman_rubin(stacked, chain_dim=0, sample_dim=1)
                ess = effective_sample_size(stacked, chain_dim=0, sample_dim=1)
                fit.diagnostics[name] = {"r_hat": _worst(r_hat, max), "ess": _worst(ess, min)}
        fit.warnings += _diagnostic_warnings(fit.diagnostics)
    else:
        from pyro.infer import SVI, Predictive, Trace_ELBO
        from pyro.infer.autoguide import AutoNormal
        from pyro.optim import Adam

        pyro.set_rng_seed(settings.seed)
        pyro.clear_param_store()
        guide = AutoNormal(model)
        svi = SVI(model, guide, Adam({"lr": 0.02}), Trace_ELBO())
        fit.elbo = [float(svi.step(*args)) for _ in range(settings.svi_steps)]
        draws = Predictive(model, guide=guide, num_samples=settings.samples * settings.chains)(*args)
        fit.draws = {k: v.detach().numpy() for k, v in draws.items() if k not in _OBSERVED}
        tail = max(10, len(fit.elbo) // 10)
        last, before = np.mean(fit.elbo[-tail:]), np.mean(fit.elbo[-2 * tail : -tail])
        if abs(before - last) > 0.01 * abs(last) + 1.0:
            fit.warnings.append(f"ELBO still moving at the end ({before:.1f} → {last:.1f}); raise --svi-steps")
    return fit


def _diagnostic_warnings(diagnostics: dict) -> list[str]:
    """What the chains' split R-hat and effective sample size say, per parameter, and which option to raise."""
    out = []
    for name, d in diagnostics.items():
        if not d["r_hat"] <= RHAT_WARN:
            out.append(
                f"{name}: split R-hat {d['r_hat']:.3f} is above {RHAT_WARN}, so the chains disagree; raise "
                "--samples and --warmup (or --chains)"
            )
        if not d["ess"] >= ESS_WARN:
            out.append(
                f"{name}: only {d['ess']:.0f} effective draws (at least {ESS_WARN} make the interval's ends "
                "reliable); raise --samples"
            )
    return out


_OBSERVED = {"active", "outcome", "residual", "forward", "turn"}  # sampled sites that hold data, not parameters


def _worst(values, pick) -> float:
    arr = np.atleast_1d(values.numpy())
    return float(pick(arr))


def fit_sensor(name: str, kind: str, data, settings: FitSettings = FitSettings()) -> list[Fit]:
    """Fit every parameter of one sensor's model; one ``Fit`` per sub-model."""
    require_pyro()
    import torch

    torch.set_default_dtype(torch.float64)
    from fusion.sensors.kinds import sensor_kind

    calibrator = sensor_kind(kind).calibrator
    if calibrator is None:
        raise FusionError(f"no calibration model for sensor kind {kind!r}")
    return [calibrator.fit(name, kind, data, settings)]


def _tensor(a, dtype=None):
    import torch

    return torch.as_tensor(np.asarray(a), dtype=dtype or torch.float64)


def fit_door(name, kind, data, settings) -> Fit:
    import torch

    args = (_tensor(data.inside, torch.bool), _tensor(data.active))
    fit = _run(_door_model, args, len(data.active), settings, name, kind)
    if not data.inside.any():
        fit.unidentified["hit_rate"] = "the robot was never inside the door's contact zone in this log"
    if data.inside.all():
        fit.unidentified["false_alarm_rate"] = "the robot was never outside the door's contact zone in this log"
    return fit


def fit_markers(name, kind, data, settings) -> Fit:
    import torch

    args = (
        _tensor(data.visible, torch.bool),
        _tensor(data.outcome, torch.int64),
        _tensor(data.range_residual_m),
        _tensor(data.bearing_residual_deg),
        data.false_density,
    )
    fit = _run(_marker_model, args, len(data.outcome), settings, name, kind)
    for param in ("sigma_range_m", "sigma_bearing_deg"):
        fit.draws[param] = np.sqrt(fit.draws.pop(f"{param}_variance"))
        # R-hat and ESS of the variance stand for σ too (a monotone transform of the same draws).
        diag = fit.diagnostics.pop(f"{param}_variance", None)
        if diag is not None:
            fit.diagnostics[param] = diag
    if not (data.visible & (data.outcome == 0)).any():
        fit.unidentified["p_detect"] = (
            "the log has no 'looked, saw nothing' record while a marker was in view, so how often the sensor "
            "misses cannot be learned from it"
        )
    if len(data.range_residual_m) < 2:
        for param in ("sigma_range_m", "sigma_bearing_deg"):
            fit.unidentified[param] = "fewer than two sightings of a marker in view"
    return fit


def fit_ranging(name, kind, data, settings) -> Fit:
    args = (_tensor(data.measured_m), _tensor(data.expected_m), data.max_range_m)
    fit = _run(_range_model, args, len(data.measured_m), settings, name, kind)
    w = fit.draws.pop("weights")
    no_echo = fit.draws["no_echo_share"]
    for i, part in enumerate(("wall_share", "early_share", "stray_share")):
        fit.draws[part] = (1 - no_echo) * w[:, i]
    return fit


def fit_odometry(name, kind, data, settings) -> Fit:
    args = tuple(
        _tensor(a) for a in (data.measured_forward_m, data.true_forward_m, data.measured_turn_deg, data.true_turn_deg)
    )
    fit = _run(_odometry_model, args, len(data.measured_forward_m), settings, name, kind)
    if np.abs(data.true_forward_m).sum() < MIN_TRAVEL_M:
        for param in ("sigma_per_m", "turn_sigma_per_m_deg"):
            fit.unidentified[param] = f"the robot drove less than {MIN_TRAVEL_M:g} m in this log"
    if np.abs(data.true_turn_deg).sum() < MIN_TURN_DEG:
        fit.unidentified["turn_sigma_per_turn"] = f"the robot turned less than {MIN_TURN_DEG:g}° in this log"
    return fit
