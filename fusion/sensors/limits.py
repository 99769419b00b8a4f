"""The one statement of what a sensor parameter may be: the case loader, the calibration loader and the
sensor models all ask ``problems(params)``, so ``fusion check`` accepts exactly what a run can start.

Each field of a parameter class has a rule (a probability, a positive size, a count of levels …);
rules across fields (mixture weights summing to 1) are in ``_joint``.  Upper bounds keep the
arrays a sensor builds within reason; the memory and work a whole case needs are estimated
separately (``fusion.budget``).
"""

from __future__ import annotations

import math

from fusion.errors import ObservationError

__all__ = ["problems", "require_valid", "breaks_rule", "MAX_LEVELS", "MAX_BEAMS", "MAX_RANGE_M", "WEIGHT_TOLERANCE"]

MAX_LEVELS = 64
"""Most nested focal sets a reading's contour is cut into (2⁻⁶⁴ is below a double's resolution near 1)."""
MAX_BEAMS = 2880
"""Most beams in one range scan (an eighth of a degree all round; real scanners have fewer)."""
MAX_RANGE_M = 500.0
"""Longest sensor range in metres (longer than any indoor site; the distance field is padded by it)."""
WEIGHT_TOLERANCE = 1e-9
"""How far the range model's mixture weights may sum from 1 (rounding only)."""

_RULES = {
    "probability": (0.0, 1.0, False, "must lie in [0, 1]"),
    "positive": (0.0, None, True, "must be greater than 0"),
    "non_negative": (0.0, None, False, "must be at least 0"),
    "range": (0.0, MAX_RANGE_M, True, f"must be greater than 0 and at most {MAX_RANGE_M:g} m"),
    "angle": (0.0, 360.0, True, "must be greater than 0 and at most 360 degrees"),
    "levels": (1, MAX_LEVELS, False, f"must be a whole number from 1 to {MAX_LEVELS}"),
}

FIELD_RULES = {
    "reliability": "probability",
    "hit_rate": "probability",
    "false_alarm_rate": "probability",
    "p_detect": "probability",
    "false_rate": "probability",
    "confusion": "probability",
    "wall_share": "probability",
    "early_share": "probability",
    "no_echo_share": "probability",
    "stray_share": "probability",
    "max_range_m": "range",
    "fov_deg": "angle",
    "wall_spread_m": "positive",
    "sigma_range_m": "positive",
    "sigma_bearing_deg": "positive",
    "early_decay_per_m": "positive",
    "sigma_per_m": "non_negative",
    "turn_sigma_per_m_deg": "non_negative",
    "turn_sigma_per_turn": "non_negative",
    "bound_sigmas": "non_negative",
    "slip_m": "non_negative",
    "slip_deg": "non_negative",
    "levels": "levels",
}


def problems(params) -> list[tuple[str, str]]:
    """``(field, what is wrong)`` for every parameter of ``params`` that a sensor model would refuse."""
    out = []
    for name, rule in {**FIELD_RULES, **_kind_rules(params)}.items():
        if not hasattr(params, name):
            continue
        value = getattr(params, name)
        low, high, open_low, words = _RULES[rule]
        if breaks_rule(value, low, high, open_low, whole=rule == "levels"):
            out.append((name, f"{words}, got {value!r}"))
    out += _joint(params)
    return out


def breaks_rule(value, low, high, open_low: bool, whole: bool = False) -> bool:
    """Is ``value`` not a finite number (a bool is not one), not whole when it must be, below ``low`` (or at it
    when ``open_low``), or above ``high`` (None: no upper bound)?  The one test behind every parameter rule."""
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        return True
    if whole and not float(value).is_integer():
        return True
    return value < low or (open_low and value == low) or (high is not None and value > high)


def _kind_rules(params) -> dict[str, str]:
    """The rules a registered sensor kind declares for its own parameter fields (``SensorKind.rules``)."""
    from fusion.sensors.kinds import kinds

    for kind in kinds().values():
        if type(params) is kind.params:
            return kind.rules
    return {}


def _joint(params) -> list[tuple[str, str]]:
    out = []
    bearings = getattr(params, "bearings_deg", None)
    if bearings is not None:
        if not bearings:
            out.append(("bearings_deg", "needs at least one beam bearing"))
        elif len(bearings) > MAX_BEAMS:
            out.append(("bearings_deg", f"holds {len(bearings):,} beams; the limit is {MAX_BEAMS:,}"))
        elif not all(isinstance(b, (int, float)) and math.isfinite(b) for b in bearings):
            out.append(("bearings_deg", "must hold finite numbers of degrees"))
    weights = [getattr(params, f, None) for f in ("wall_share", "early_share", "no_echo_share", "stray_share")]
    if all(isinstance(w, (int, float)) and math.isfinite(w) for w in weights) and None not in weights:
        if abs(sum(weights) - 1.0) > WEIGHT_TOLERANCE:
            out.append(
                (
                    "wall_share",
                    f"wall_share + early_share + no_echo_share + stray_share must sum to 1, got {sum(weights):.6g}",
                )
            )
    return out


def require_valid(params, sensor: str) -> None:
    """Refuse ``params`` as a sensor model does: ``ObservationError`` naming the first bad field."""
    found = problems(params)
    if found:
        field, problem = found[0]
        raise ObservationError(f"sensor {sensor!r}: {field} {problem}")
