"""Targets on a place graph, over many seeds: does each back end find itself from an unknown start, and again
after the robot is carried, within few distinctive places?

Each seed drives the case's route from a different place: the list of places the route goes through is
rotated by the seed (seed mod its length), the legs being shortest paths as in the case, so the start, its
direction and the places seen first differ from seed to seed; sensor noise and faults follow the seed as in
every run.  Carries stay at their times.  "Found itself" and the places it took are ``fusion.place_cases.run``'s.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from fusion.place_cases.case import PlaceCase
from fusion.place_cases.run import run_places

__all__ = ["GraphTarget", "measure_graph", "CARRY_PLACES", "rotated"]

CARRY_PLACES = 3
"""A carried robot should be found again within this many distinctive places."""


@dataclass(frozen=True)
class GraphTarget:
    backend: str
    seeds: int
    found: int  # runs that found themselves from the start
    places: tuple[int, ...]  # distinctive places each of those took
    carries: int  # carries measured
    carried_found: int  # found again within CARRY_PLACES
    carried_places: tuple[int, ...]  # places each carry took to be found again (found ones only)

    @staticmethod
    def median(values) -> float | None:
        return float(np.median(values)) if values else None


def rotated(case: PlaceCase, seed: int) -> PlaceCase:
    """The case with its route started ``seed`` places further along its list, and the seed set."""
    from fusion.place_cases.case import route_through

    through = case.route.through
    k = seed % len(through)
    turned = through[k:] + through[:k]
    if turned[0] == turned[-1] and len(turned) > 2:
        turned = turned[:-1]
    route = dataclasses.replace(case.route, through=turned, path=route_through(case.graph, turned))
    return dataclasses.replace(case, route=route, run=dataclasses.replace(case.run, seed=seed))


def measure_graph(case: PlaceCase, seeds, backends=None, landed=None) -> list[GraphTarget]:
    """One ``GraphTarget`` per back end over ``seeds``; ``landed(seed, result)`` after each run."""
    backends = tuple(backends or case.run.backends)
    found = {b: [] for b in backends}
    carried = {b: [] for b in backends}
    count = 0
    for seed in seeds:
        result = run_places(rotated(case, seed), backends=backends)
        count += 1
        for b in backends:
            episodes = result.episodes(b)
            found[b].append(episodes[0].places_needed)
            carried[b] += [e.places_needed for e in episodes[1:]]
        if landed is not None:
            landed(seed, result)
    out = []
    for b in backends:
        starts = [n for n in found[b] if n is not None]
        again = [n for n in carried[b] if n is not None and n <= CARRY_PLACES]
        out.append(
            GraphTarget(
                b,
                count,
                len(starts),
                tuple(starts),
                len(carried[b]),
                len(again),
                tuple(n for n in carried[b] if n is not None),
            )
        )
    return out
