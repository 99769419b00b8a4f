"""Every back end behind one ``Backend`` protocol (see ``base``), listed in one table.

``build(name, grid, free, rule=…, motion=…, max_focal=…)`` is the only place that turns a back-end
name into a filter; nothing outside this package compares back-end names.  Given a place graph's frame
instead of a pose grid, it builds that frame's filters (``fusion.places.filters.build_on``: the histogram
filter and the evidential contour filter; the other families are refused there).

- ``bayes``: the histogram filter (``bayes.HistogramFilter``);
- ``particles``: Monte Carlo localization with KLD-sampling and random-particle recovery
  (``particles.ParticleFilter``);
- ``gaussian``: an extended Kalman filter with χ² gating (``gaussian.GaussianFilter``);
- ``evidential``: Dempster–Shafer.  Dempster's rule and the unnormalised conjunctive rule run on the
  dense contour, exact with no cap (``contour.ContourFilter``); the rules that move conflict to unions
  of sets (Yager, Dubois–Prade, PCR5, Murphy's averaging, disjunctive) keep explicit focal sets under a
  documented cap (``evidential.MassFilter``), moved by set-valued motion.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from fusion.backends.base import Backend
from fusion.errors import RuleError

__all__ = ["BACKENDS", "BackendKind", "build", "Backend", "backend_kind", "rule_names"]


def _bayes(grid, free, *, rule, motion, max_focal, report_region, seed, settings):
    from fusion.backends.bayes import HistogramFilter

    return HistogramFilter(grid, free, report_region=report_region)


def _particles(grid, free, *, rule, motion, max_focal, report_region, seed, settings):
    from fusion.backends.particles import ParticleFilter, ParticleSettings

    settings = settings or ParticleSettings()
    return ParticleFilter(grid, free, seed=seed, report_region=report_region, settings=settings)


def _gaussian(grid, free, *, rule, motion, max_focal, report_region, seed, settings):
    from fusion.backends.gaussian import GaussianFilter, GaussianSettings

    return GaussianFilter(grid, free, report_region=report_region, settings=settings or GaussianSettings())


def _evidential(grid, free, *, rule, motion, max_focal, report_region, seed, settings):
    from fusion.backends.contour import CONTOUR_RULES, ContourFilter
    from fusion.backends.evidential import MassFilter

    if rule in CONTOUR_RULES:
        return ContourFilter(grid, free, rule=rule, motion=motion, report_region=report_region)
    # Explicit focal sets move by set-valued motion whatever the case chooses: averaging every displacement
    # would multiply them by the kernel's width at each step (documented in docs/evidential.md).
    return MassFilter(grid, free, rule=rule, max_focal=max_focal, report_region=report_region)


@dataclass(frozen=True)
class BackendKind:
    """What the other stages need to know of a back end, so that none of them compares its name."""

    name: str
    build: object  # (grid, free, *, rule, motion, max_focal, report_region) -> Backend
    title: str  # for views
    short: str  # in setting labels
    takes_rule: bool  # runs once per combination rule in a sweep
    bytes_per_cell: int  # resident memory per pose cell (measured on the demo case; fusion.budget)
    focal_sets: bool  # the rules that keep focal sets cost memory and time per focal set (fusion.budget)
    figure: tuple[str, str]  # the conflict figure the live view plots: (key of the figures, label)
    rules: tuple[str, ...] = ()  # the combination rules it runs (the first is the default)
    settings: str | None = None  # "module:Class" of its settings, which the case's [run.<name>] table may set

    def settings_type(self):
        """The dataclass of the back end's settings, or None (imported on first use)."""
        if self.settings is None:
            return None
        from fusion.sensors.kinds import named

        return named(self.settings)

    def label(self, rule: str | None) -> str:
        """Short name of a setting: the back end, with its rule when it takes one."""
        return f"{self.short}/{rule}" if self.takes_rule and rule else self.short


BACKENDS = {
    "bayes": BackendKind(
        "bayes",
        _bayes,
        "Bayesian histogram filter",
        "Bayes",
        False,
        48,
        False,
        ("surprise", "surprise −log p(z|past), nats"),
    ),
    "evidential": BackendKind(
        "evidential",
        _evidential,
        "Dempster–Shafer mass filter",
        "evidential",
        True,
        64,
        True,
        ("conflict", "conflict K = m(∅)"),
        ("dempster", "conjunctive", "yager", "dubois_prade", "pcr5", "murphy", "disjunctive"),
    ),
    "particles": BackendKind(
        "particles",
        _particles,
        "Particle filter",
        "particles",
        False,
        24,  # the per-cell histogram and the estimate's arrays (not measured: the particles themselves are few)
        False,
        ("surprise", "surprise −log p(z|past), nats"),
        settings="fusion.backends.particles:ParticleSettings",
    ),
    "gaussian": BackendKind(
        "gaussian",
        _gaussian,
        "Gaussian filter (extended Kalman)",
        "Gaussian",
        False,
        48,  # while it follows a histogram (re-seeding) it holds the histogram filter's belief
        False,
        ("surprise", "surprise −log p(z|past), nats"),
        settings="fusion.backends.gaussian:GaussianSettings",
    ),
}
"""Back-end name -> what it is and how to build it; the order is the order tools list them in."""


def rule_names() -> tuple[str, ...]:
    """Every combination rule a back end runs, in the order they are listed."""
    return tuple(dict.fromkeys(r for kind in BACKENDS.values() for r in kind.rules))


def backend_kind(name: str) -> BackendKind:
    kind = BACKENDS.get(name)
    if kind is None:
        raise RuleError(f"unknown back end {name!r}; choose one of: {', '.join(BACKENDS)}")
    return kind


def build(
    name: str,
    grid,
    free: np.ndarray | None = None,
    *,
    rule: str = "dempster",
    motion: str = "probabilistic",
    max_focal: int = 32,
    report_region: bool = False,
    seed: int = 0,
    settings=None,
) -> Backend:
    """The filter called ``name`` on ``grid`` (cells off ``free`` are impossible); ``settings``: an instance of
    the back end's settings dataclass (``BackendKind.settings_type``), or None for its defaults."""
    from fusion.motion import MOTION_MODELS

    builder = backend_kind(name).build
    from fusion.grid import PoseGrid

    if not isinstance(grid, PoseGrid):  # a place graph's frame (fusion.places)
        from fusion.places.filters import build_on

        return build_on(name, grid, rule=rule, motion=motion, report_region=report_region)
    if motion not in MOTION_MODELS:
        raise RuleError(f"unknown motion model {motion!r}; choose one of: {', '.join(MOTION_MODELS)}")
    return builder(
        grid,
        free,
        rule=rule,
        motion=motion,
        max_focal=max_focal,
        report_region=report_region,
        seed=seed,
        settings=settings,
    )
