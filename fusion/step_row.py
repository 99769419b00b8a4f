"""The cells of one decision in a per-tick table, shared by ``fusion run`` (``runner.StepRow``) and
``fusion inspect`` (its ``steps.csv``): the estimate, its spread, the conflict figures, the action, the blame
and the quarantined sensors; and the errors of the estimate against a true pose."""

from __future__ import annotations

import math

__all__ = ["decision_cells", "pose_errors", "FIGURE_COLUMNS"]

FIGURE_COLUMNS = (
    "spread_m",
    "region_cells",
    "conflict",
    "weight_of_conflict",
    "disagreement",
    "jousselme",
    "surprise",
    "evidence_ratio",
    "action",
)
"""The decision's columns after its estimate, in the order both tables write them."""


def decision_cells(d) -> dict:
    """The decision's cells of a per-tick row (``fusion.localizer.Decision``)."""
    fig = d.figures
    return {
        "x_m": d.x_m,
        "y_m": d.y_m,
        "heading_deg": d.heading_deg,
        "spread_m": d.spread_m,
        "region_cells": d.region_cells,
        "conflict": fig.conflict,
        "weight_of_conflict": fig.weight_of_conflict,
        "disagreement": fig.disagreement,
        "jousselme": fig.value("jousselme"),
        "surprise": fig.surprise,
        "evidence_ratio": fig.evidence_ratio,
        "action": d.action,
        "blame": ";".join(f"{s}={v:.3f}" for s, v in d.blame[:3]),
        "quarantined": ";".join(d.quarantined),
    }


def pose_errors(d, x_m: float, y_m: float, heading_deg: float) -> tuple[float, float]:
    """Position error (m) and heading error (degrees, in [0, 180]) of the decision's estimate."""
    return math.hypot(d.x_m - x_m, d.y_m - y_m), abs((d.heading_deg - heading_deg + 180.0) % 360.0 - 180.0)
