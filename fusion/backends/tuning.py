"""What a back end's settings may be: one statement, asked by the case loader (``[run.<back end>]``, with file,
line and field) and by the back ends themselves (the embedding API), so both refuse the same values.

A settings dataclass declares ``RULES``: field -> (low, high, whole, open_low), and may add checks across
fields in ``joint_problems()``.
"""

from __future__ import annotations

from fusion.errors import ObservationError
from fusion.sensors.limits import breaks_rule

__all__ = ["problems", "require_settings"]


def problems(settings) -> list[tuple[str, str]]:
    """(field, what is wrong) for each field of ``settings`` outside its rule, then the joint checks."""
    out = []
    for name, (low, high, whole, open_low) in settings.RULES.items():
        value = getattr(settings, name)
        if breaks_rule(value, low, high, open_low, whole):
            out.append((name, f"{_words(low, high, whole, open_low)}, got {value!r}"))
    if not out:
        out += settings.joint_problems()
    return out


def require_settings(settings, backend: str) -> None:
    """``ObservationError`` naming the first bad field, as the back end refuses it."""
    found = problems(settings)
    if found:
        field, problem = found[0]
        raise ObservationError(f"back end {backend!r}: {field} {problem}")


def _words(low, high, whole, open_low) -> str:
    kind = "a whole number" if whole else "a number"
    low_words = f"greater than {low:g}" if open_low else f"at least {low:g}"
    if high is None:
        return f"must be {kind} {low_words}"
    return f"must be {kind} {low_words} and at most {high:g}"
