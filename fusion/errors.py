"""Every error the engine raises.

Each error subclasses the built-in a caller would expect (``ValueError`` for a bad
value, ``IndexError`` for a cell outside the frame, ...) and also ``FusionError``,
so a tool can catch everything of ours in one place.  Messages say what was
expected, what was given, where, and how to fix it.
"""

from __future__ import annotations

__all__ = [
    "FusionError",
    "MassValueError",
    "CellIndexError",
    "FrameMismatchError",
    "TotalConflictError",
    "ZeroEvidenceError",
    "LikelihoodValueError",
    "RuleError",
    "PoseError",
    "SiteError",
    "ObservationError",
    "ResourceError",
    "InputFileError",
    "KernelSetupError",
]


class FusionError(Exception):
    """Base of every error raised by the fusion engine."""


class MassValueError(FusionError, ValueError):
    """A mass is negative, not finite, or the masses do not sum to one."""


class CellIndexError(FusionError, IndexError):
    """A cell index lies outside the frame of discernment."""


class FrameMismatchError(FusionError, ValueError):
    """Two beliefs over frames of different sizes were combined or compared."""


class TotalConflictError(FusionError, ZeroDivisionError):
    """Dempster normalisation was asked for while all mass lies on the empty set."""


class ZeroEvidenceError(FusionError, ZeroDivisionError):
    """A Bayesian update gave every cell zero probability: the evidence excludes the whole belief."""


class LikelihoodValueError(FusionError, ValueError):
    """A likelihood vector has the wrong length, a negative or a non-finite entry."""


class RuleError(FusionError, ValueError):
    """An unknown combination rule, or a rule used outside what it is defined for."""


class PoseError(FusionError, ValueError):
    """A pose or position lies off the site, or is not finite."""


class SiteError(FusionError, ValueError):
    """A site description is inconsistent: a door or marker off the map, an unknown marker, a bad size."""


class ObservationError(FusionError, ValueError):
    """An observation cannot be encoded: a negative range, an unknown sensor or marker, a wrong field."""


class ResourceError(FusionError, MemoryError):
    """A request would need more memory than the engine allows; the message gives the figure."""


class InputFileError(FusionError, ValueError):
    """A file we read is malformed; the message names the file, the line and the field."""

    def __init__(self, path, line: int | None, field: str | None, problem: str):
        self.path, self.line, self.field, self.problem = str(path), line, field, problem
        where = self.path + (f", line {line}" if line else "")
        super().__init__(f"{where}: {field + ': ' if field else ''}{problem}")


class KernelSetupError(FusionError, RuntimeError):
    """``FUSION_KERNELS`` asks for something this process cannot give (``fusion.compiled``)."""
