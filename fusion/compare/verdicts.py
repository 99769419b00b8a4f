"""Summaries and verdicts over seeds: bootstrap intervals, paired Wilcoxon tests, ties, and the Bayes-Dempster sanity row."""

from __future__ import annotations

import math
import warnings
from collections.abc import Iterable

import numpy as np

from fusion.case_model import Case
from fusion.compare.records import IdentityCheck, RunRecord, Verdict
from fusion.compare.settings import FIGURES, Figure, Setting, variant

# ----------------------------------------------------------------------------- figures over seeds
INTERVAL = "95% bootstrap interval (BCa, 2,000 resamples; Efron & Tibshirani 1993)"
"""How the comparison's intervals are made, as its tables and report say it."""
RESAMPLES = 2000


def summarise(records: list[RunRecord], settings: list[Setting], level: float = 0.95, table: dict | None = None):
    """One row per setting and figure: runs, mean and its bootstrap interval over seeds (pandas DataFrame).

    ``table``: the figures' definitions by name (``FIGURES`` when None).  The interval is the bias-corrected and accelerated bootstrap of the mean (Efron & Tibshirani 1993, An
    Introduction to the Bootstrap, ch. 14; scipy.stats.bootstrap), seeded so that it is reproducible.  Being
    made of means of resampled runs, it never leaves the range a run's figure can take (an error is never
    below 0 m, a share never above 1), which a Student-t interval on skewed figures does."""
    import pandas as pd

    rows = []
    for s in settings:
        mine = [r for r in records if r.key == s.key]
        for name in FIGURES if table is None else table:
            values = np.array([r.value(name) for r in mine], dtype=float)
            values = values[np.isfinite(values)]
            mean = float(values.mean()) if len(values) else math.nan
            lo, hi = interval(values, level)
            rows.append(
                {
                    "setting": s.label,
                    "key": s.key,
                    "figure": name,
                    "runs": len(values),
                    "mean": mean,
                    "low": lo,
                    "high": hi,
                }
            )
    return pd.DataFrame(rows, columns=["setting", "key", "figure", "runs", "mean", "low", "high"])


def interval(values: np.ndarray, level: float = 0.95) -> tuple[float, float]:
    """The BCa bootstrap interval of the mean of ``values`` (NaN for fewer than two; the value itself when all
    are equal); the percentile interval where BCa is undefined (a resample distribution with no spread)."""
    from scipy import stats

    if len(values) < 2:
        return math.nan, math.nan
    if np.all(values == values[0]):
        return float(values[0]), float(values[0])
    with warnings.catch_warnings():  # scipy warns when BCa degenerates; the percentile interval is then used
        warnings.simplefilter("ignore")
        for method in ("BCa", "percentile"):
            ci = stats.bootstrap(
                (values,),
                np.mean,
                confidence_level=level,
                n_resamples=RESAMPLES,
                method=method,
                rng=np.random.default_rng(0),
            ).confidence_interval
            if np.isfinite(ci.low) and np.isfinite(ci.high):
                return float(ci.low), float(ci.high)
    return math.nan, math.nan


def verdicts(
    records: list[RunRecord], settings: list[Setting], figures: Iterable[str] = FIGURES, table: dict | None = None
) -> list[Verdict]:
    """Per figure: the best setting, the runner-up, and how sure that order is (paired over seeds).  ``table``: the
    figures' definitions (``Figure``) by name, ``FIGURES`` when None (a place graph has its own)."""
    table = FIGURES if table is None else table
    by_key = {s.key: s for s in settings}
    out = []
    for name in figures:
        fig = table[name]
        sign = 1.0 if fig.better == "low" else -1.0
        per = {}
        for s in settings:
            vals = {r.seed: r.value(name) for r in records if r.key == s.key and math.isfinite(r.value(name))}
            if vals:
                per[s.key] = vals
        if len(per) < 2:
            continue
        ranked = sorted(per, key=lambda k: sign * float(np.mean(list(per[k].values()))))
        best, second = ranked[0], ranked[1]
        mb = float(np.mean(list(per[best].values())))
        if all(_same(float(np.mean(list(v.values()))), mb) for k, v in per.items() if k != best):
            out.append(_tie(name, fig, mb, len(per)))
            continue
        out.append(_paired(name, fig, sign, per, by_key[best], by_key[second]))
    return out


def _paired(name: str, fig: Figure, sign: float, per: dict, best: Setting, second: Setting) -> Verdict:
    """The verdict between the best setting and the runner-up, seed by seed (Wilcoxon signed-rank test)."""
    from scipy import stats

    a, b = per[best.key], per[second.key]
    common = sorted(set(a) & set(b))
    diff = np.array([sign * (b[k] - a[k]) for k in common])  # > 0: best is better
    # Rounding is no difference: exact Dempster-Shafer with probabilistic motion places the robot as
    # Bayes does, and their figures then differ by 1e-16, which a rank test would call "clear".
    scale = np.array([max(1.0, abs(b[k]), abs(a[k])) for k in common])
    diff[np.abs(diff) <= ROUNDING * scale] = 0.0
    wins, losses = int((diff > 0).sum()), int((diff < 0).sum())
    mb, ms = float(np.mean(list(a.values()))), float(np.mean(list(b.values())))
    p = math.nan
    if len(common) >= 6 and np.any(diff != 0):
        with warnings.catch_warnings():  # scipy notes when ties force its normal approximation
            warnings.simplefilter("ignore")
            p = float(stats.wilcoxon(diff, alternative="two-sided").pvalue)
    if len(common) < 6:
        sure = "too few paired seeds to tell"
    elif not np.any(diff != 0):
        sure = "a tie on every seed (to rounding)"
    elif p < 0.01:
        sure = "clear"
    elif p < 0.05:
        sure = "likely"
    else:
        sure = "not distinguishable"
    sentence = (
        f"{fig.label}: {best.label} is best ({_fmt(mb, fig)}) ahead of {second.label} ({_fmt(ms, fig)}); "
        f"better on {wins} of {len(common)} paired seeds, worse on {losses}"
        + (f", Wilcoxon p = {p:.2g}" if math.isfinite(p) else "")
        + f": {sure}."
    )
    return Verdict(name, best.label, second.label, mb, ms, len(common), wins, losses, p, sure, sentence)


ROUNDING = 1e-9
"""Relative difference below which two settings' figures count as equal (rounding, our choice)."""


def _same(a: float, b: float) -> bool:
    return abs(a - b) <= ROUNDING * max(1.0, abs(a), abs(b))


def _tie(name: str, fig: Figure, value: float, settings: int) -> Verdict:
    sentence = f"{fig.label}: all {settings} settings tie at {_fmt(value, fig)}."
    return Verdict(name, None, None, value, value, 0, 0, 0, math.nan, "a tie", sentence)


def _fmt(v: float, fig: Figure) -> str:
    if fig.unit in ("", "nats"):
        return f"{v:.3g}" + (f" {fig.unit}" if fig.unit else "")
    return f"{v:.3g} {fig.unit}"


# ----------------------------------------------------------------------------- sanity row
def bayes_dempster_identity(case: Case, seed: int | None = None, cells: int = 512, readings: int = 12) -> IdentityCheck:
    """Bayes' rule and Dempster's rule on Bayesian mass functions from fully reliable sensors must agree.

    Shafer (1976), A Mathematical Theory of Evidence: Dempster's rule restricted to Bayesian
    mass functions is Bayes' rule with a uniform prior.  Checked on the case's own readings
    (the first ``readings`` of the run, reliability forced to 1) over the ``cells`` free cells
    nearest the start pose, so the general set-based rule stays cheap.
    """
    from fusion.belief.mass import MassFunction
    from fusion.belief.posterior import Posterior
    from fusion.belief.rules import dempster
    from fusion.sensors.sensor_set import SensorSet
    from fusion.simulate import simulate

    reliable = variant(case, 1.0, None)
    grid = reliable.site.grid(reliable.headings)
    sensors = SensorSet(reliable.site, grid, reliable.sensors)
    ticks = simulate(reliable, seed=seed)
    x0, y0 = ticks[0].truth.x_m, ticks[0].truth.y_m
    xs, ys, _ = grid.poses_of(np.arange(grid.n_cells))
    free = grid.broadcast(reliable.site.free).astype(bool)
    d2 = np.where(free, (xs - x0) ** 2 + (ys - y0) ** 2, np.inf)
    window = np.sort(np.argsort(d2, kind="stable")[: min(cells, int(free.sum()))])
    post = Posterior.uniform(len(window))
    mass = MassFunction.bayesian(np.full(len(window), 1.0 / len(window)))
    used = 0
    for tick in ticks:
        for obs in tick.observations:
            if obs.moves or used >= readings:
                continue
            lik = sensors.encode(obs).likelihood[window]
            if float(lik @ post.probabilities) <= 0:
                continue  # this reading rules the whole window out: both rules refuse it alike
            post.update(lik)
            mass = dempster(mass, MassFunction.bayesian(lik / lik.sum()))
            used += 1
        if used >= readings:
            break
    gap = float(np.max(np.abs(mass.pignistic() - post.probabilities))) if used else math.nan
    return IdentityCheck(used, int(len(window)), gap, bool(gap < 1e-9))
