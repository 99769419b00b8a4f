"""Shared test helpers: one float comparison, and a dense power-set reference for small frames.

The reference stores a mass function as a vector over all 2**n subsets
(subset = bitmask integer) and implements each operation straight from its
textbook definition, with no code shared with the package, so that the sparse
bitset engine is checked against an independent implementation.
"""

from __future__ import annotations

import numpy as np

from fusion.belief.mass import MassFunction


def assert_close(actual, expected, tol: float = 1e-9, what: str = "") -> None:
    """Absolute comparison of floats or arrays (all our quantities lie in [0, 1] or are logs)."""
    a, e = np.asarray(actual, dtype=np.float64), np.asarray(expected, dtype=np.float64)
    assert a.shape == e.shape, f"{what}: shape {a.shape} != {e.shape}"
    err = np.max(np.abs(a - e)) if a.size else 0.0
    assert err <= tol, f"{what}: max |actual - expected| = {err:.3g} > {tol:g}\nactual={a}\nexpected={e}"


def dense(m: MassFunction) -> np.ndarray:
    """Mass vector over all 2**n subsets of a small frame (n ≤ 12)."""
    assert m.n <= 12
    out = np.zeros(2**m.n)
    for fs in m:
        out[sum(1 << int(c) for c in fs.cells)] += fs.mass
    return out


def sparse(vec: np.ndarray, n: int) -> MassFunction:
    focal = {tuple(c for c in range(n) if a >> c & 1): float(v) for a, v in enumerate(vec) if v > 0}
    total = sum(focal.values())
    return MassFunction.from_focal(n, {k: v / total for k, v in focal.items()})


def _subset_sum(vec: np.ndarray, n: int, upward: bool) -> np.ndarray:
    """Zeta transform: f(A) = Σ_{B ⊆ A} v(B) (upward=False) or Σ_{B ⊇ A} v(B) (upward=True)."""
    f = vec.astype(np.float64).copy()
    for bit in range(n):
        step = 1 << bit
        for a in range(2**n):
            if upward and not a & step:
                f[a] += f[a | step]
            elif not upward and a & step:
                f[a] += f[a ^ step]
    return f


def _subset_diff(f: np.ndarray, n: int, upward: bool) -> np.ndarray:
    """Möbius inversion of ``_subset_sum``."""
    v = f.astype(np.float64).copy()
    for bit in range(n):
        step = 1 << bit
        for a in range(2**n):
            if upward and not a & step:
                v[a] -= v[a | step]
            elif not upward and a & step:
                v[a] -= v[a ^ step]
    return v


def commonality(vec, n):
    return _subset_sum(vec, n, upward=True)


def implicability(vec, n):
    """b(A) = Σ_{B ⊆ A} m(B), including m(∅)."""
    return _subset_sum(vec, n, upward=False)


def conjunctive(v1, v2, n):
    """Unnormalised conjunctive rule via commonalities: q12 = q1 · q2 (Smets 1990)."""
    return _subset_diff(commonality(v1, n) * commonality(v2, n), n, upward=True)


def disjunctive(v1, v2, n):
    """Disjunctive rule via implicabilities: b12 = b1 · b2 (Smets 1993)."""
    return _subset_diff(implicability(v1, n) * implicability(v2, n), n, upward=False)


def bel(vec, a):
    return sum(v for b, v in enumerate(vec) if b and (b & ~a) == 0)


def pl(vec, a):
    return sum(v for b, v in enumerate(vec) if b & a)


def pignistic(vec, n):
    k = vec[0]
    out = np.zeros(n)
    for b, v in enumerate(vec):
        if b:
            cells = [c for c in range(n) if b >> c & 1]
            for c in cells:
                out[c] += v / len(cells) / (1 - k)
    return out


def reference_predict_sets(masks: np.ndarray, motion, bound: int, bound_turn: int) -> np.ndarray:
    """Set-valued motion on boolean arrays (k, headings, ny, nx), one offset at a time: the obvious
    implementation, used to check the packed-word version."""
    import math

    k, headings, ny, nx = masks.shape
    out = np.zeros_like(masks)
    for h in range(headings):
        xs = range(math.floor(motion.dx[h] - bound), math.ceil(motion.dx[h] + bound) + 1)
        ys = range(math.floor(motion.dy[h] - bound), math.ceil(motion.dy[h] + bound) + 1)
        for sx in xs:
            for sy in ys:
                dst_y, src_y = slice(max(0, sy), ny + min(0, sy)), slice(max(0, -sy), ny - max(0, sy))
                dst_x, src_x = slice(max(0, sx), nx + min(0, sx)), slice(max(0, -sx), nx - max(0, sx))
                if abs(sx) < nx and abs(sy) < ny:
                    out[:, h, dst_y, dst_x] |= masks[:, h, src_y, src_x]
    result = np.zeros_like(out)
    for t in range(math.floor(motion.turn - bound_turn), math.ceil(motion.turn + bound_turn) + 1):
        result |= np.roll(out, t, axis=1)
    return result
