"""Bayesian belief over the cells of a frame: a posterior updated by likelihoods.

The posterior is kept as float64 probabilities normalised after every update;
the normalising constant of each update, p(z_t | z_1..t-1), is returned as a log
and summed, so a long run never underflows and the evidence of every update is
available for conflict detection (a low evidence means the observation was
surprising under the belief).  The update is Bayes' rule as in a histogram filter
(Thrun, Burgard & Fox 2005, *Probabilistic Robotics*, §4.1).
"""

from __future__ import annotations

import math
import sys

import numpy as np

from fusion import compiled
from fusion.belief.frame_checks import cell_vector
from fusion.errors import LikelihoodValueError, ZeroEvidenceError

__all__ = ["Posterior", "COMPILED_FROM", "lane_sums"]

COMPILED_FROM = 4096
"""Cells from which an update runs the compiled product (``fusion.compiled``).  It is faster at every size once
loaded (6.7 against 4.8 µs at 256 cells, 53 against 39 µs at 65,536, measured), but loading the loops costs about
0.5 s: a small belief is not worth that to a process that has no large one (our choice).  From this size the
normalising sum is the lane sum (``lane_sums``, added up as the product is written) whichever code runs, so the
compiled and numpy updates give the same posterior; below it, numpy's sum."""


class Posterior:
    """A probability per cell, updated in place by likelihood vectors.

    >>> p = Posterior.uniform(2)
    >>> round(p.update([0.6, 0.2]), 4)   # log p(z) = log(0.4)
    -0.9163
    >>> p.probabilities.tolist()
    [0.75, 0.25]
    """

    __slots__ = ("_p", "_scratch", "_retired", "_lent", "log_evidence")

    def __init__(self, probabilities):
        p = _vector(probabilities, "prior")
        total = p.sum()
        if (p < 0).any():
            i = int(np.flatnonzero(p < 0)[0])
            raise LikelihoodValueError(f"prior probability of cell {i} is negative ({float(p[i])!r})")
        if total <= 0:
            raise ZeroEvidenceError("the prior gives zero probability to every cell; give at least one cell weight")
        self._p = p / total
        self._scratch = self._retired = None
        self._lent = False
        self.log_evidence = 0.0
        """Sum of the log evidence of every update since the prior (nats)."""

    @classmethod
    def uniform(cls, n: int, mask=None) -> Posterior:
        """Uniform over ``n`` cells, or over the cells where ``mask`` is true."""
        if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1:
            raise LikelihoodValueError(f"a belief needs a whole number of cells ≥ 1, got {n!r}")
        p = np.ones(int(n)) if mask is None else np.asarray(mask, dtype=np.float64)
        if p.shape != (int(n),):
            raise LikelihoodValueError(f"the mask must have one entry per cell ({n}), got shape {p.shape}")
        return cls(p)

    @property
    def n(self) -> int:
        return len(self._p)

    @property
    def probabilities(self) -> np.ndarray:
        """The posterior as a read-only array (it is not changed by later updates)."""
        view = self._p.view()
        view.flags.writeable = False
        self._lent = True  # this buffer must not be reused as scratch space
        return view

    def copy(self) -> Posterior:
        out = object.__new__(Posterior)
        out._p, out._scratch, out._retired, out._lent = self._p.copy(), None, None, False
        out.log_evidence = self.log_evidence
        return out

    def set(self, probabilities, *, owned: bool = False) -> None:
        """Replace the belief (after a prediction step), renormalising it; evidence is kept.

        With ``owned=True`` the caller hands over a float64 array it will not touch again,
        known to be finite and non-negative (a prediction of this belief): it is normalised in
        place instead of being checked and copied.
        """
        if owned:
            p = np.asarray(probabilities).reshape(-1)
            total = float(p.sum())
            if p.shape != (self.n,) or p.dtype != np.float64 or not total > 0 or not np.isfinite(total):
                owned = False
            else:
                p *= 1.0 / total
                self._p, self._lent = p, False
                return
        fresh = Posterior(probabilities)
        if fresh.n != self.n:
            raise LikelihoodValueError(f"the new belief has {fresh.n} cells, this one has {self.n}")
        self._p, self._lent = fresh._p, False

    def move(self, predict) -> None:
        """Replace the belief by a prediction of it, renormalised; evidence is kept.  ``predict(p, out)`` writes the
        prediction of the probabilities ``p`` (read-only) into ``out``, a spare buffer of the same shape, finite and
        non-negative: unlike ``set`` no new belief-sized array is made.  When it returns a float, that is the sum of
        what it wrote (``fusion.motion.predict_into`` adds it up as it writes), saving a pass; anything else (None,
        ``out`` itself): summed here.  Raises ``ZeroEvidenceError`` (belief unchanged) when the prediction holds
        nothing."""
        out = self._spare()
        current = self._p.view()
        current.flags.writeable = False
        written = predict(current, out)
        del current
        total = written if isinstance(written, float) else float(out.sum())
        if not (total > 0 and np.isfinite(total)):
            self.set(out.copy())  # the checks and messages of ``set``
            return
        out *= 1.0 / total
        self._swap(out)

    # ----------------------------------------------------------------- updates
    def update(self, likelihood, normalise=None) -> float:
        """Multiply by p(z | x) per cell and renormalise; returns log p(z | past) in nats.

        Raises ``ZeroEvidenceError`` (and leaves the belief unchanged) when the
        likelihood is zero wherever the belief is positive.  ``normalise(post, factor)``: does the renormalising
        ``post *= factor`` in place instead, with figures of its own in the same pass (the best region's count,
        ``fusion.backends.region.normalise_and_count``); it is not called when the update is refused.
        """
        try:
            lik = np.asarray(likelihood, dtype=np.float64)
        except (TypeError, ValueError):
            lik = None
        if lik is None or lik.shape != (self.n,):
            lik = self._check(likelihood, "likelihood")
        post, hi, z = self._spare(), -1.0, None
        large = lik.size >= COMPILED_FROM
        loops = compiled.kernels() if large else None
        if loops is not None and lik.dtype == np.float64 and lik.flags.c_contiguous:
            lanes = np.zeros(compiled.SUM_LANES)
            bits = loops.checked_product(self._p, lik, post, lanes)  # −1: a bad likelihood, found and named below
            hi = compiled.float_of_bits(bits) if bits >= 0 else -1.0
            z = _fold(lanes)
        if hi < 0:
            hi = self._checked_maximum(lik)
            np.multiply(self._p, lik, out=post)
            z = _fold(lane_sums(post)) if large else float(post.sum())
        if hi <= 0:
            raise ZeroEvidenceError(self._zero_message())
        if z < 1e-250:  # may have underflowed: redo with the likelihood scaled to a maximum of 1
            return self._absorb(lik / hi, float(np.log(hi)), normalise)
        (normalise or _rescale)(post, 1.0 / z)
        self._swap(post)
        step = float(np.log(z))
        self.log_evidence += step
        return step

    def _checked_maximum(self, lik: np.ndarray) -> float:
        """The largest likelihood, after refusing NaN, infinities and negatives (min and max find them in two
        passes, without a copy)."""
        lo, hi = float(lik.min()), float(lik.max())
        if not (np.isfinite(lo) and np.isfinite(hi)):
            self._check(lik, "likelihood")  # names the first bad cell
        if lo < 0:
            i = int(np.flatnonzero(lik < 0)[0])
            raise LikelihoodValueError(f"likelihood of cell {i} is negative ({float(lik[i])!r}); likelihoods are ≥ 0")
        return hi

    def update_log(self, log_likelihood) -> float:
        """As ``update`` but from log p(z | x) (−inf allowed); safe for likelihoods below 1e-308."""
        ll = np.asarray(log_likelihood, dtype=np.float64)
        if ll.shape != (self.n,):
            raise LikelihoodValueError(f"log-likelihood must have one entry per cell ({self.n}), got shape {ll.shape}")
        if np.isnan(ll).any() or np.isposinf(ll).any():
            i = int(np.flatnonzero(np.isnan(ll) | np.isposinf(ll))[0])
            raise LikelihoodValueError(f"log-likelihood of cell {i} is {float(ll[i])!r}; it must be finite or -inf")
        top = ll.max()
        if np.isneginf(top):
            raise ZeroEvidenceError(self._zero_message())
        return self._absorb(np.exp(ll - top), float(top))

    def _absorb(self, scaled: np.ndarray, log_scale: float, normalise=None) -> float:
        post = np.multiply(self._p, scaled, out=self._spare())
        z = float(post.sum())
        if not z > 0:
            raise ZeroEvidenceError(self._zero_message())
        (normalise or _rescale)(post, 1.0 / z)
        self._swap(post)
        step = float(np.log(z)) + log_scale
        self.log_evidence += step
        return step

    def _spare(self) -> np.ndarray:
        """A second buffer the size of the belief, so an update allocates nothing and a refused one changes nothing.

        A buffer lent out by ``probabilities`` is never written while a view of it lives.  Once every view is gone
        (a step's snapshots usually are by the next step) it is taken back instead of allocating: a fresh buffer of
        a large belief costs more in first-touch page faults than the update's own arithmetic (measured)."""
        if self._scratch is None and self._retired is not None and _unshared(self):
            self._scratch = self._retired
        self._retired = None
        if self._scratch is None or self._scratch.shape != self._p.shape:
            self._scratch = np.empty_like(self._p)
        return self._scratch

    def _swap(self, post: np.ndarray) -> None:
        if self._lent:
            self._p, self._scratch, self._retired = post, None, self._p
        else:
            self._p, self._scratch = post, self._p
        self._lent = False

    def _zero_message(self) -> str:
        return (
            "the observation has zero likelihood on every cell the belief allows (zero evidence): "
            "the sensor contradicts the belief completely. The belief was left unchanged; "
            "re-localize, or give the sensor model an outlier share so no reading is impossible."
        )

    def _check(self, values, name: str) -> np.ndarray:
        v = _vector(values, name)
        if v.shape != (self.n,):
            raise LikelihoodValueError(f"{name} must have one entry per cell ({self.n}), got shape {v.shape}")
        return v

    # ----------------------------------------------------------------- queries
    def entropy(self) -> float:
        """Shannon entropy in nats (0 log 0 = 0)."""
        p = self._p[self._p > 0]
        return float(-(p * np.log(p)).sum())

    def map_cell(self) -> int:
        """The most probable cell (the lowest index on ties)."""
        return int(np.argmax(self._p))

    def hpd_region(self, level: float = 0.95) -> np.ndarray:
        """Smallest set of cells holding at least ``level`` of the probability (sorted indices).

        Cells are taken most probable first; ties at the boundary are broken by index.
        """
        level = float(level)
        if not 0.0 < level <= 1.0:
            raise LikelihoodValueError(f"the region's level must lie in (0, 1], got {level!r}")
        order = np.argsort(-self._p, kind="stable")
        cumulative = np.cumsum(self._p[order])
        # Small tolerance so that a level equal to a cumulative sum is reached.
        count = int(np.searchsorted(cumulative, level - 1e-12)) + 1
        return np.sort(order[: min(count, self.n)])

    def __repr__(self) -> str:
        return f"Posterior(n={self.n}, MAP cell {self.map_cell()}, entropy {self.entropy():.3g} nats)"


def lane_sums(values: np.ndarray) -> np.ndarray:
    """The ``SUM_LANES`` lane sums of a large update's product (``fusion.compiled.loops.checked_product`` makes the
    same numbers as it writes): lane j adds values j, j + L, j + 2L, … of the first n − n mod L in order (numpy adds
    a C-ordered table's rows in order along its first axis), then value n − n mod L + j."""
    width = compiled.SUM_LANES
    body = values.size - values.size % width
    lanes = np.add.reduce(values[:body].reshape(-1, width), axis=0) if body else np.zeros(width)
    lanes[: values.size - body] += values[body:]
    return lanes


def _fold(lanes: np.ndarray) -> float:
    """The sum of the lanes, correctly rounded (``math.fsum``), so the order they are added in cannot matter."""
    return math.fsum(lanes.tolist())


def _rescale(post: np.ndarray, factor: float) -> None:
    """The renormalisation an update does unless it is given its own: ``post *= factor`` in place."""
    post *= factor


def _references(buffer: np.ndarray) -> int:
    return sys.getrefcount(buffer)


class _Probe:
    __slots__ = ("buffer",)

    def __init__(self):
        self.buffer = np.empty(1)


_PROBE = _Probe()
_ALONE = _references(_PROBE.buffer)
"""What ``_references(holder.buffer)`` counts for a buffer nothing else holds, measured at import the way ``_spare``
counts (the reference counts an interpreter adds for arguments differ between versions)."""


def _unshared(holder: Posterior) -> bool:
    """True when nothing but ``holder`` holds its retired buffer: every numpy view keeps its owner in ``base`` (views
    of views too), so a live view raises the owner's reference count."""
    return holder._retired.base is None and _references(holder._retired) <= _ALONE


def _vector(values, name: str) -> np.ndarray:
    return cell_vector(values, name, LikelihoodValueError, copy=True)
