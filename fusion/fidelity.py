"""How far each approximate output of the evidential back end is from the exact result, on a small site.

The contour filter (``fusion.backends.contour``) is exact for the contour under Dempster's rule; the
outputs that need the whole mass function read it as the consonant mass function of its contour.  Here
the exact mass function is carried along too: the focal-set filter with no cap (every focal set kept),
on a site small enough for that (12 × 8 cells × 4 headings), through a few ticks of bounded motion and
discounted consonant readings whose contours lie on the quantisation levels (so the focal-set side
quantises nothing).  Each row gives the largest distance seen over the ticks:

- total variation ½ Σ |p − q| for the plausibility and pignistic transforms;
- |K − K_exact| for the conflict of each reading with the belief;
- max |Pl(A) − Pl_exact(A)| and max |Bel(A) − Bel_exact(A)| over random boxes A;
- and, with probabilistic motion, the plausibility transform against the Bayes posterior (the identity of
  Shafer 1976 and Cobb & Shenoy 2006: rounding level expected).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from fusion.backends.bayes import HistogramFilter
from fusion.backends.contour import ContourFilter
from fusion.backends.evidential import MassFilter
from fusion.grid import PoseGrid
from fusion.sensors.base import Evidence
from fusion.sensors.odometry import OdometryParams, OdometryReading, OdometrySensor

__all__ = ["FidelityRow", "measure_fidelity"]


@dataclass(frozen=True)
class FidelityRow:
    output: str
    reading: str  # how the contour filter obtains it
    distance: float  # largest over the ticks
    measure: str
    note: str = ""

    def as_dict(self) -> dict:
        return asdict(self)


def _levels_contour(rng, n: int, levels: int = 6) -> np.ndarray:
    c = 0.5 ** rng.integers(0, levels, size=n).astype(float)
    c[rng.integers(n)] = 1.0
    return c


def _boxes(grid: PoseGrid, rng, count: int = 40) -> list[np.ndarray]:
    out = []
    for _ in range(count):
        x0, y0 = rng.integers(0, grid.nx), rng.integers(0, grid.ny)
        x1, y1 = x0 + rng.integers(1, 5), y0 + rng.integers(1, 4)
        plane = np.zeros((grid.ny, grid.nx), bool)
        plane[y0:y1, x0:x1] = True
        out.append(np.broadcast_to(plane, grid.shape).reshape(-1))
    return out


def measure_fidelity(seed: int = 0, ticks: int = 5) -> list[FidelityRow]:
    rng = np.random.default_rng(seed)
    grid = PoseGrid(3.0, 2.0, 0.25, 4)
    odometry = OdometrySensor("wheels", grid, OdometryParams(sigma_per_m=0.1, turn_sigma_per_m_deg=5.0))
    exact = MassFilter(grid, rule="dempster", max_focal=10**7, refine_evidence=False, report_region=False)
    approx = ContourFilter(grid, motion="bounded", report_region=False)
    boxes = _boxes(grid, rng)
    worst = dict.fromkeys(("plausibility", "pignistic", "conflict", "pl", "bel"), 0.0)
    for _ in range(ticks):
        motion = odometry.motion(OdometryReading(float(rng.uniform(0.1, 0.4)), 0.0, float(rng.uniform(-20, 20))))
        exact.predict(motion)
        approx.predict(motion)
        ev = Evidence("s", _levels_contour(rng, grid.n_cells), reliability=0.9, levels=6)
        k_exact, k_approx = exact.update(ev).conflict, approx.update(ev).conflict
        m, c = exact.belief, approx.belief
        worst["conflict"] = max(worst["conflict"], abs(k_exact - k_approx))
        tv = 0.5 * float(np.abs(m.plausibility_transform() - c.plausibility_transform()).sum())
        worst["plausibility"] = max(worst["plausibility"], tv)
        worst["pignistic"] = max(worst["pignistic"], 0.5 * float(np.abs(m.pignistic() - c.pignistic()).sum()))
        for box in boxes:
            cells = np.flatnonzero(box)
            worst["pl"] = max(worst["pl"], abs(m.pl(cells) - c.pl(box)))
            worst["bel"] = max(worst["bel"], abs(m.bel(cells) - c.bel(box)))
    focal = len(exact.belief)
    where = f"{grid.n_cells} cells, {ticks} ticks of bounded motion and readings; exact belief: {focal:,} focal sets"
    rows = [
        FidelityRow("plausibility transform", "contour (running max under motion)", worst["plausibility"], "TV", where),
        FidelityRow("pignistic transform", "consonant reading of the contour", worst["pignistic"], "TV", where),
        FidelityRow("K of each reading", "consonant reading of the contour", worst["conflict"], "|ΔK|", where),
        FidelityRow("Pl of a region", "max of the contour over it", worst["pl"], "max |Δ|", "40 random boxes"),
        FidelityRow("Bel of a region", "1 − max of the contour outside", worst["bel"], "max |Δ|", "40 random boxes"),
    ]
    rows.append(_identity_row(rng))
    return rows


def _identity_row(rng) -> FidelityRow:
    """Probabilistic motion: the plausibility transform against the Bayes posterior over 50 cycles."""
    grid = PoseGrid(3.0, 2.0, 0.25, 8)
    odometry = OdometrySensor("wheels", grid, OdometryParams(sigma_per_m=0.1, turn_sigma_per_m_deg=5.0))
    bayes, contour = HistogramFilter(grid, report_region=False), ContourFilter(grid, report_region=False)
    worst = 0.0
    for _ in range(50):
        motion = odometry.motion(OdometryReading(float(rng.uniform(0, 0.3)), 0.0, float(rng.uniform(-30, 30))))
        bayes.predict(motion)
        contour.predict(motion)
        ev = Evidence("s", rng.random(grid.n_cells) ** 3, reliability=0.8)
        bayes.update(ev)
        contour.update(ev)
        worst = max(worst, 0.5 * float(np.abs(bayes.distribution() - contour.distribution()).sum()))
    return FidelityRow(
        "plausibility transform = Bayes posterior",
        "contour, probabilistic motion",
        worst,
        "TV",
        f"{grid.n_cells} cells, 50 predict/update cycles (Shafer 1976; exact up to rounding)",
    )
