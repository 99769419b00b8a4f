"""Measured comparison of fusion schemes: one case, many seeds, a grid of settings.

A *setting* is a back end, a combination rule (evidential only), a discount factor
for the sensors and a fault rate.  Every setting runs on every seed; for one seed,
all settings that share a fault rate see **identical** readings (the simulator's
draws depend on the seed and the sensor only, never on the model's reliability or
the rule).  Each run yields one row of figures (``FIGURES``) plus its per-tick error
and calibration series, and is written to its own file as soon as it finishes, so an
interrupted sweep loses nothing and the same command resumes it.

Intervals over seeds are BCa bootstrap intervals of the mean (scipy.stats.bootstrap); the
verdict on each figure compares the two best settings seed by seed (paired, since
they saw the same readings) with the Wilcoxon signed-rank test (scipy.stats.wilcoxon).

The package: ``settings`` (what is swept, the figures), ``records`` (typed run records, verdicts and the
sanity row), ``runs`` (one run), ``engine`` (running a sweep
in processes or on Dask, resumably), ``verdicts`` (intervals, paired tests, the sanity row).  Its names
are importable from here.
"""

from fusion.compare.engine import (
    SweepInterrupted,
    longest_measured_first,
    run_in_processes,
    run_sweep,
    sweep_digest,
)
from fusion.compare.records import IdentityCheck, RunFigures, RunRecord, RunSeries, Verdict
from fusion.compare.runs import calibration, run_one
from fusion.compare.settings import (
    ALERT_GRACE_S,
    CARRY_WINDOW_TICKS,
    ENGINES,
    FIGURES,
    P_FLOOR,
    RECOVERY_DEG,
    RECOVERY_M,
    RECOVERY_TICKS,
    Figure,
    Setting,
    check_sweep,
    settings_of,
    variant,
)
from fusion.compare.verdicts import bayes_dempster_identity, summarise, verdicts

__all__ = [
    "RunRecord",
    "RunFigures",
    "RunSeries",
    "Verdict",
    "IdentityCheck",
    "Setting",
    "Figure",
    "FIGURES",
    "settings_of",
    "check_sweep",
    "variant",
    "run_one",
    "run_sweep",
    "run_in_processes",
    "longest_measured_first",
    "sweep_digest",
    "SweepInterrupted",
    "summarise",
    "verdicts",
    "bayes_dempster_identity",
    "calibration",
    "ENGINES",
    "RECOVERY_TICKS",
    "RECOVERY_M",
    "RECOVERY_DEG",
    "ALERT_GRACE_S",
    "CARRY_WINDOW_TICKS",
    "P_FLOOR",
]
