"""The conflict figures of one tick, as a decision reports them (``fusion.localizer.Decision.figures``).

- ``conflict``: the largest conflict K of a reading of the tick with the belief it met, as the back end
  scores it (``fusion.conflict``);
- ``weight_of_conflict``: −log(1 − K) of that conflict (Shafer 1976);
- ``disagreement``: the back end's second figure beside K, when it gives one (``SecondOpinion``);
- ``surprise``: −log p(z | past) of the tick's most surprising reading (back ends that report log evidence);
- ``evidence_ratio``: the slow/fast average of the evidence (the lost-robot test; 1 when calm);
- ``jousselme``: the distance the tick moved the belief, computed on busy ticks only (None otherwise);
- ``effective_share``: the smallest effective sample size of the tick's updates as a share of the particle
  count (back ends that sample; None otherwise): near 1 the particles covered the readings, near 0 a few
  particles carried all the weight.
- ``nis_share``: the largest normalised innovation squared of the tick's readings as a share of its χ² gate
  (the Gaussian back end; None otherwise): above 1 a reading was gated out.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

__all__ = ["TickFigures", "FIGURE_NAMES"]


@dataclass
class TickFigures:
    conflict: float = 0.0
    weight_of_conflict: float = 0.0
    disagreement: float = 0.0
    surprise: float = 0.0
    evidence_ratio: float = 1.0
    jousselme: float | None = None
    effective_share: float | None = None
    nis_share: float | None = None

    def value(self, name: str) -> float:
        """A figure by name, 0 where it was not computed (a calm tick's distance)."""
        v = getattr(self, name)
        return 0.0 if v is None else float(v)

    def to_record(self) -> dict:
        """Strict JSON: figures not computed are left out, non-finite ones are null."""
        out = {}
        for f in fields(self):
            v = getattr(self, f.name)
            if v is not None:
                out[f.name] = round(v, 6) if math.isfinite(v) else None
        return out


FIGURE_NAMES = tuple(f.name for f in fields(TickFigures))
