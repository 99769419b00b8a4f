"""Typed results of a comparison: one run's record (its figures and per-tick series), a verdict on one
figure, and the Bayes–Dempster sanity row.  A run record is saved as one flat JSON object per run (the
figures beside the setting, key and seed) and read back only when every figure is present."""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

from fusion.compare.settings import FIGURES
from fusion.words import plural

__all__ = ["RunFigures", "RunSeries", "RunRecord", "Verdict", "IdentityCheck"]


@dataclass(frozen=True)
class RunFigures:
    """The figures of one run (``fusion.compare.settings.FIGURES`` explains each; NaN where one does not apply)."""

    ticks: int
    median_error_m: float
    p95_error_m: float
    median_heading_error_deg: float
    p95_heading_error_deg: float
    in_region: float
    nll: float
    brier: float
    alert_precision: float
    alert_recall: float
    false_alerts: int
    ms_per_step: float
    recovery_s: float
    recovered: float

    def value(self, name: str) -> float:
        """The figure ``name`` (a key of ``FIGURES``) as a float."""
        return float(getattr(self, name))


_FIGURE_FIELDS = tuple(f.name for f in dataclasses.fields(RunFigures))
assert set(FIGURES) <= set(_FIGURE_FIELDS), "every compared figure is a field of RunFigures"


@dataclass(frozen=True)
class RunSeries:
    """Per tick of one run: time (s), position error (m), and the level of the true cell (see ``runs.calibration``)."""

    t: tuple[float, ...]
    error_m: tuple[float, ...]
    level: tuple[float, ...]


@dataclass(frozen=True)
class RunRecord:
    """One setting on one seed: what was run, what it measured, and how long it took (wall seconds)."""

    key: str
    seed: int
    setting: dict  # Setting.as_dict(): the columns of runs.csv that say what was run
    figures: RunFigures
    series: RunSeries
    wall_s: float = math.nan  # runs saved before wall times were kept have none

    def value(self, name: str) -> float:
        return self.figures.value(name)

    def to_json(self) -> dict:
        """The flat JSON object of a run file."""
        out = {"setting": self.setting, "key": self.key, "seed": self.seed, "wall_s": self.wall_s}
        out.update({name: _json_number(getattr(self.figures, name)) for name in _FIGURE_FIELDS})
        out["series"] = dataclasses.asdict(self.series)
        return out

    @classmethod
    def from_json(cls, rec) -> RunRecord | None:
        """The record of a run file, or None when it is not a complete run of ours (an older tool, a hand edit):
        such a run is run again rather than trusted."""
        if not isinstance(rec, dict) or not isinstance(rec.get("setting"), dict):
            return None
        key, seed = rec.get("key"), rec.get("seed")
        if not isinstance(key, str) or not _is_number(seed) or not float(seed).is_integer():
            return None
        values = {}
        for name in _FIGURE_FIELDS:
            v = rec.get(name, "missing")
            if v is None:
                v = math.nan  # JSON has no NaN: a figure that does not apply is saved as null
            if not _is_number(v):
                return None
            values[name] = v
        values["ticks"], values["false_alerts"] = int(values["ticks"]), int(values["false_alerts"])
        series = rec.get("series")
        if not isinstance(series, dict) or not all(
            isinstance(series.get(k), list) and all(_is_number(x) for x in series[k]) for k in ("t", "error_m", "level")
        ):
            return None
        wall = rec.get("wall_s")
        return cls(
            key,
            int(seed),
            rec["setting"],
            RunFigures(**values),
            RunSeries(*(tuple(float(x) for x in series[k]) for k in ("t", "error_m", "level"))),
            float(wall) if _is_number(wall) else math.nan,
        )


def _is_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _json_number(v):
    return None if isinstance(v, float) and not math.isfinite(v) else v


@dataclass(frozen=True)
class Verdict:
    """The order of the two best settings on one figure and how sure it is (paired over seeds)."""

    figure: str
    best: str | None  # None: every setting ties
    runner_up: str | None
    best_mean: float
    runner_up_mean: float
    paired_seeds: int
    wins: int
    losses: int
    p_value: float  # Wilcoxon signed-rank, NaN when no test was made
    sureness: str
    sentence: str


@dataclass(frozen=True)
class IdentityCheck:
    """Dempster's rule against Bayes' rule on Bayesian mass functions (see ``verdicts.bayes_dempster_identity``)."""

    readings: int
    cells: int
    max_abs_difference: float
    holds: bool

    def words(self) -> str:
        if not self.readings:
            return "no reading to check with."
        verdict = "holds" if self.holds else "FAILS: the two back ends' rules disagree; please report this"
        return (
            f"{verdict}: largest probability difference {self.max_abs_difference:.1e} after "
            f"{plural(self.readings, 'reading')} on {plural(self.cells, 'cell')}."
        )
