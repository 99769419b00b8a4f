"""Compiled kernels for the hot loops, with the numpy code as the fallback and the reference.

A kernel here is used only where it was measured to pay for itself, its start-up and first-call compilation
included (``docs/benchmark.md``).  Each one computes the same numbers as its numpy twin, in the same order of
operations, and ``tests/test_compiled.py`` checks the two against each other.

The kernels need numba (``pip install "fusion-localize[fast]"``); numba is imported on the first call, never
with ``import fusion``, and its compiled code is cached on disk, so a process after the first loads it
instead of compiling it again.  Without numba, or with ``FUSION_KERNELS=numpy`` in the environment, the numpy
code runs; ``FUSION_KERNELS=compiled`` makes a missing numba an error instead of a silent fallback.
"""

from __future__ import annotations

import importlib.util
import os
from dataclasses import dataclass
from types import ModuleType

from fusion.errors import KernelSetupError

__all__ = [
    "ENV",
    "SUM_LANES",
    "CHOICES",
    "KernelChoice",
    "KernelSetupError",
    "kernels",
    "kernels_if_loaded",
    "float_of_bits",
    "plain_vector",
    "choice",
    "setting",
    "reset",
]

ENV = "FUSION_KERNELS"
SUM_LANES = 256
"""Lanes of a sum that a compiled loop adds up as it writes (``checked_product``): lane j takes every L-th value
from j.  Fewer lanes cost the numpy twin more (32: 0.82 against 0.31 ms over 1.4 M values, whose plain sum takes
0.28), more cost the loop more (1,024: +0.14 ms, 256: +0.03, measured)."""
CHOICES = ("auto", "numpy", "compiled")


@dataclass(frozen=True)
class KernelChoice:
    """Which code runs the hot loops in this process, and why."""

    compiled: bool
    why: str  # e.g. "numba 0.68.1", "FUSION_KERNELS=numpy", "numba is not installed"


_loaded: tuple[KernelChoice, ModuleType | None] | None = None


def setting() -> str:
    """``FUSION_KERNELS`` as given (``auto`` when unset), checked without importing numba: the command line checks
    it before any work, so a wrong value is refused up front rather than at the first loop."""
    wanted = os.environ.get(ENV, "auto").strip().lower() or "auto"
    if wanted not in CHOICES:
        raise KernelSetupError(
            f"{ENV}={wanted!r} in the environment: expected one of {', '.join(CHOICES)}; unset it or set one of those"
        )
    if wanted == "compiled" and importlib.util.find_spec("numba") is None:
        raise KernelSetupError(f"{ENV}=compiled, but numba is not installed; install fusion-localize[fast]")
    return wanted


def _load() -> tuple[KernelChoice, ModuleType | None]:
    wanted = setting()
    if wanted == "numpy":
        return KernelChoice(False, f"{ENV}=numpy"), None
    try:
        import numba

        from fusion.compiled import loops
    except ImportError as exc:  # numba absent, or its llvmlite broken on this platform
        if wanted == "compiled":
            raise KernelSetupError(
                f"{ENV}=compiled, but numba cannot be imported ({exc}); install fusion-localize[fast]"
            ) from exc
        return KernelChoice(False, "numba is not installed (pip install fusion-localize[fast])"), None
    return KernelChoice(True, f"numba {numba.__version__}"), loops


def kernels() -> ModuleType | None:
    """The compiled loops (``fusion.compiled.loops``), or None when the numpy code is to run."""
    global _loaded
    if _loaded is None:
        _loaded = _load()
    return _loaded[1]


def kernels_if_loaded() -> ModuleType | None:
    """The compiled loops when this process has loaded them already, else None: for calls too small to pay numba's
    start-up (0.4 s, ``fusion bench``) but worth the loops once something else has paid it."""
    return None if _loaded is None else _loaded[1]


def choice() -> KernelChoice:
    """Which code runs the hot loops, loading the kernels if that has not happened yet."""
    kernels()
    assert _loaded is not None
    return _loaded[0]


def reset() -> None:
    """Forget the choice, so the next call reads ``FUSION_KERNELS`` again (for tests)."""
    global _loaded
    _loaded = None


def float_of_bits(bits: int) -> float:
    """The float64 whose bit pattern is ``bits``: how a loop's maximum comes back (non-negative float64 values order
    as their patterns do, IEEE 754, and an integer maximum vectorises where a float one does not)."""
    import numpy as np  # numpy is loaded by then; ``import fusion`` does not load it

    return float(np.int64(bits).view(np.float64))


def plain_vector(a) -> bool:
    """A float64 vector in one run of memory: what the compiled loops take as it is (anything else goes to numpy)."""
    return a.dtype.char == "d" and a.dtype.isnative and a.ndim == 1 and a.flags.c_contiguous
