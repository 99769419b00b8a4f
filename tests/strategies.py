"""Hypothesis strategies for small random mass functions (frames of up to 10 cells)."""

from __future__ import annotations

import numpy as np
from hypothesis import strategies as st

from fusion.belief.mass import MassFunction


@st.composite
def mass_functions(draw, n=None, allow_empty=False, max_focal=6):
    n = draw(st.integers(1, 10)) if n is None else n
    lowest = 0 if allow_empty else 1
    subsets = draw(st.lists(st.integers(lowest, 2**n - 1), min_size=1, max_size=max_focal, unique=True))
    weights = draw(st.lists(st.floats(0.01, 1.0), min_size=len(subsets), max_size=len(subsets)))
    w = np.array(weights) / sum(weights)
    focal = {tuple(c for c in range(n) if a >> c & 1): float(x) for a, x in zip(subsets, w)}
    w_sum = sum(focal.values())
    return MassFunction.from_focal(n, {k: v / w_sum for k, v in focal.items()})


@st.composite
def frames_and_pairs(draw, allow_empty=False):
    n = draw(st.integers(1, 10))
    return n, draw(mass_functions(n, allow_empty)), draw(mass_functions(n, allow_empty))


@st.composite
def frames_and_triples(draw):
    n = draw(st.integers(1, 8))
    return n, draw(mass_functions(n)), draw(mass_functions(n)), draw(mass_functions(n))
