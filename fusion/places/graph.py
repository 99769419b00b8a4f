"""A site described by places rather than metres: named places joined by passages of known length.

Places carry features (a door, a junction, a dead end, anything the site defines) and may carry a
printed marker's id; passages carry a length and, where it is known, a width.  A place may also carry
``at``: coordinates in metres, used to draw the graph and to give the passages' bearings at a junction
(the turn rule of ``fusion.places.frame``); a graph with no coordinates is drawn by classical scaling
of its travel distances (Torgerson 1952) and its junctions have no bearings.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from fusion.errors import PoseError, SiteError

__all__ = ["Passage", "PlaceGraph"]


@dataclass(frozen=True)
class Passage:
    """A passage between places ``a`` and ``b`` (either way), ``length_m`` long, ``width_m`` wide (None: unknown)."""

    a: str
    b: str
    length_m: float
    width_m: float | None = None


def _finite_positive(value) -> bool:
    return not isinstance(value, bool) and isinstance(value, (int, float)) and math.isfinite(value) and value > 0


@dataclass(frozen=True)
class PlaceGraph:
    """Places (one node each) joined by passages of known length.

    ``passages``: ``Passage`` values or (a, b, length_m) tuples; ``features``: per place (in the order of
    ``places``), the tuple of its features; ``markers``: per place, its marker's id or None; ``at``: per place,
    (x, y) in metres or None.  Empty tuples mean none for every place."""

    places: tuple[str, ...]
    passages: tuple = ()
    features: tuple = ()
    markers: tuple = ()
    at: tuple = ()
    _index: dict = field(default=None, repr=False, compare=False)
    _pairs: dict = field(default=None, repr=False, compare=False)  # {a, b} -> the passage between them

    def __post_init__(self):
        if len(self.places) == 0 or len(set(self.places)) != len(self.places):
            raise SiteError(f"places must be a non-empty list of distinct names, got {list(self.places)!r}")
        object.__setattr__(self, "_index", {name: i for i, name in enumerate(self.places)})
        passages = tuple(p if isinstance(p, Passage) else Passage(*p) for p in self.passages)
        object.__setattr__(self, "passages", passages)
        seen = {}
        for i, p in enumerate(passages):
            what = f"passage {i + 1} ({p.a!r}–{p.b!r})"
            for end in (p.a, p.b):
                if end not in self._index:
                    raise SiteError(f"{what} names the unknown place {end!r}")
            if p.a == p.b:
                raise SiteError(f"{what} joins a place to itself; a passage joins two different places")
            if not _finite_positive(p.length_m):
                raise SiteError(f"{what} needs a positive length in metres, got {p.length_m!r}")
            if p.width_m is not None and not _finite_positive(p.width_m):
                raise SiteError(f"{what} needs a positive width in metres, got {p.width_m!r}")
            pair = frozenset((p.a, p.b))
            if pair in seen:
                raise SiteError(f"{what} repeats a passage between the same places; give each pair one passage")
            seen[pair] = p
        object.__setattr__(self, "_pairs", seen)
        n = len(self.places)
        for name, default in (("features", ()), ("markers", None), ("at", None)):
            values = getattr(self, name)
            if len(values) == 0:
                values = (default,) * n
            if len(values) != n:
                raise SiteError(f"{name} must give one entry per place ({n}), got {len(values)}")
            object.__setattr__(self, name, tuple(values))
        object.__setattr__(self, "features", tuple(tuple(f) for f in self.features))

    @property
    def n_cells(self) -> int:
        return len(self.places)

    @property
    def shape(self) -> tuple[int]:
        return (len(self.places),)

    def cell_of(self, place: str) -> int:
        index = self._index.get(place)
        if index is None:
            raise PoseError(f"unknown place {place!r}; known places: {', '.join(self.places)}")
        return index

    def pose_of(self, cell: int) -> str:
        if isinstance(cell, bool) or not isinstance(cell, (int, np.integer)) or not 0 <= cell < self.n_cells:
            raise PoseError(f"cell {cell!r} is not a place of this graph (valid: 0 to {self.n_cells - 1})")
        return self.places[int(cell)]

    def neighbours(self, place: str) -> list[str]:
        return [p.b if p.a == place else p.a for p in self.passages if place in (p.a, p.b)]

    def passage(self, a: str, b: str) -> Passage | None:
        """The passage between ``a`` and ``b`` (either way), or None."""
        return self._pairs.get(frozenset((a, b)))

    def feature_names(self) -> set[str]:
        return {f for fs in self.features for f in fs}

    def distances(self) -> np.ndarray:
        """Shortest travel distance between every pair of places (scipy's Dijkstra); inf between pieces."""
        from scipy.sparse.csgraph import shortest_path

        return shortest_path(self._matrix(), method="D", directed=False)

    def _matrix(self):
        from scipy.sparse import coo_matrix

        n = self.n_cells
        rows = [self._index[p.a] for p in self.passages]
        cols = [self._index[p.b] for p in self.passages]
        lengths = [float(p.length_m) for p in self.passages]
        return coo_matrix((lengths, (rows, cols)), shape=(n, n)).tocsr()

    def route(self, a: str, b: str) -> list[str]:
        """The places of a shortest path from ``a`` to ``b`` (both included); ``SiteError`` when none joins them."""
        from scipy.sparse.csgraph import shortest_path

        ia, ib = self.cell_of(a), self.cell_of(b)
        dist, before = shortest_path(self._matrix(), method="D", directed=False, indices=ia, return_predecessors=True)
        if not math.isfinite(dist[ib]):
            raise SiteError(f"no passages join {a!r} to {b!r}: the graph is in pieces between them")
        path = [ib]
        while path[-1] != ia:
            path.append(int(before[path[-1]]))
        return [self.places[i] for i in reversed(path)]

    def layout(self) -> np.ndarray:
        """(n, 2) coordinates in metres to draw the places at: ``at`` where every place has one, otherwise
        classical multidimensional scaling of the travel distances (Torgerson 1952); pieces side by side."""
        if all(a is not None for a in self.at):
            return np.asarray(self.at, dtype=np.float64)
        d = self.distances()
        out = np.zeros((self.n_cells, 2))
        done = np.zeros(self.n_cells, bool)
        shift = 0.0
        while not done.all():
            seed = int(np.flatnonzero(~done)[0])
            piece = np.flatnonzero(np.isfinite(d[seed]))
            out[piece] = _scaled(d[np.ix_(piece, piece)]) + [shift, 0.0]
            shift = float(out[piece, 0].max()) + max(float(np.max(d[np.ix_(piece, piece)])) * 0.2, 2.0)
            done[piece] = True
        return out


def _scaled(d: np.ndarray) -> np.ndarray:
    """Classical scaling: points in the plane whose distances best match ``d`` (Torgerson 1952)."""
    n = len(d)
    if n == 1:
        return np.zeros((1, 2))
    centre = np.eye(n) - 1.0 / n
    b = -0.5 * centre @ (d**2) @ centre
    values, vectors = np.linalg.eigh(b)
    top = np.argsort(values)[::-1][:2]
    return vectors[:, top] * np.sqrt(np.maximum(values[top], 0.0))
