"""Localization on a graph of places, checked against outside results.

- Brute-force enumeration of every path (the definition of the filtering posterior: Rabiner 1989, A tutorial
  on hidden Markov models, eq. 18–20) and the forward pass of hmmlearn's ``CategoricalHMM`` (a general-purpose
  hidden-Markov-model library) on the same model.
- The three-door corridor after Fox, Burgard & Thrun (1999), Markov localization for mobile robots in
  dynamic environments: starting lost, a door, a move, a door again leaves one peak, at the only door
  the distance travelled allows; its share is computed here by hand from the model's numbers.
- With reliable Bayesian evidence and the same motion, the evidential belief's plausibility transform equals
  the Bayes posterior (Shafer 1976, A mathematical theory of evidence; Cobb & Shenoy 2006).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from fusion.errors import PoseError, RuleError, SiteError
from fusion.places.filters import PlaceContourFilter, PlaceHistogramFilter, build_on
from fusion.places.frame import FLOOR, PlaceFrame
from fusion.places.graph import PlaceGraph
from fusion.places.moves import PlaceMotion, PlaceMove
from fusion.places.sensors import FeatureDetector, MarkerReader, WidthDetector


def corridor(at: bool = False) -> PlaceFrame:
    """West end, three doors at 2, 5 and 11 m (gaps 3 and 6 m), east end at 20 m; 1 m steps."""
    places = ("west", "door 1", "door 2", "door 3", "east")
    xs = (0.0, 2.0, 5.0, 11.0, 20.0)
    passages = tuple((places[i], places[i + 1], xs[i + 1] - xs[i]) for i in range(4))
    features = ((), ("door",), ("door",), ("door",), ())
    graph = PlaceGraph(places, passages, features=features, at=tuple((x, 0.0) for x in xs) if at else ())
    return PlaceFrame(graph, 1.0)


def junction() -> PlaceFrame:
    """A T: a corridor from 'south' up to 'hub', then 'west' and 'east' wings; 'north' straight on."""
    graph = PlaceGraph(
        ("south", "hub", "west", "east", "north"),
        (("south", "hub", 6.0), ("hub", "west", 5.0), ("hub", "east", 7.0), ("hub", "north", 4.0)),
        features=((), ("junction",), ("door",), (), ()),
        markers=(None, "H1", "W1", None, None),
        at=((0.0, -6.0), (0.0, 0.0), (-5.0, 0.0), (7.0, 0.0), (0.0, 4.0)),
    )
    return PlaceFrame(graph, 1.0)


def test_operators_keep_probability_and_round_lengths():
    frame = junction()
    # 4 passages each way: 6 + 5 + 7 + 4 steps, each with its arrival cell, twice.
    assert frame.n_cells == 2 * (6 + 5 + 7 + 4 + 4)
    for op in (frame.forward, frame.backward):
        np.testing.assert_allclose(np.asarray(op.sum(axis=0)).ravel(), 1.0, atol=1e-12)
    p = np.random.default_rng(3).random(frame.n_cells)
    p /= p.sum()
    motion = PlaceMotion(frame)
    out = motion.shifted(p, {-2: 0.2, 0: 0.3, 3: 0.5})
    assert abs(out.sum() - 1.0) < 1e-12 and (out >= 0).all()


def test_turn_rule_takes_the_passage_turned_to():
    # Arriving at the hub from the south faces north (straight on); a 90° left turn then faces west.
    frame = junction()
    filt = PlaceHistogramFilter(frame)
    prior = np.zeros(frame.n_cells)
    prior[frame.cell_of("south", "hub")] = 1.0
    filt.reset(prior)
    for _ in range(6):
        filt.predict(PlaceMove(1.0))
    p = filt.distribution()
    assert p[frame.arrival[frame.edge_between("south", "hub")]] > 0.99
    assert frame.describe(int(np.argmax(p))) == "at hub, arrived from south"
    for _ in range(9):  # a 90° turn in 10° records, standing still
        filt.predict(PlaceMove(0.0, math.radians(10.0)))
    filt.predict(PlaceMove(1.0))
    p = filt.distribution()
    assert p[frame.cell_of("hub", "west", 1.0)] > 0.95


def _model_matrices(frame, taps, detector):
    """Column-stochastic transition (one predict) and the emission table (cells × {not seen, seen})."""
    motion = PlaceMotion(frame)
    eye = np.eye(frame.n_cells)
    transition = np.stack([motion.shifted(eye[c], taps) for c in range(frame.n_cells)], axis=1)
    emission = np.stack([detector.likelihood(False), detector.likelihood(True)], axis=1)
    return transition, emission


def test_filter_equals_brute_force_and_hmmlearn():
    hmm = pytest.importorskip("hmmlearn.hmm")
    frame = corridor(at=True)
    detector = FeatureDetector("doors", frame, feature="door", hit_rate=0.8, false_alarm_rate=0.1)
    readings = [True, False, False, True, False]
    transition, emission = _model_matrices(frame, {1: 1.0}, detector)
    n = frame.n_cells
    # The filter: a reading, then (move one step, reading) four times.
    filt = PlaceHistogramFilter(frame)
    filt.update(detector.encode(readings[0]))
    for seen in readings[1:]:
        filt.predict(PlaceMove(1.0))
        filt.update(detector.encode(seen))
    ours = filt.distribution()
    # Every path x0 … x4, weighted by prior · Π transition · Π emission, summed by its last cell.
    brute = np.zeros(n)
    z = [int(s) for s in readings]
    live = [np.flatnonzero(transition[:, c]) for c in range(n)]
    for x0 in range(n):
        stack = [((x0,), emission[x0, z[0]] / n)]
        while stack:
            path, w = stack.pop()
            if len(path) == len(z):
                brute[path[-1]] += w
                continue
            for nxt in live[path[-1]]:
                stack.append(((*path, nxt), w * transition[nxt, path[-1]] * emission[nxt, z[len(path)]]))
    brute /= brute.sum()
    np.testing.assert_allclose(ours, brute, atol=1e-12)
    model = hmm.CategoricalHMM(n_components=n, init_params="", params="")
    model.startprob_ = np.full(n, 1.0 / n)
    model.transmat_ = transition.T
    model.emissionprob_ = emission
    reference = model.predict_proba(np.array(z).reshape(-1, 1))[-1]  # smoothing at the last step is filtering
    np.testing.assert_allclose(ours, reference, atol=1e-9)


def test_noisy_moves_match_hmmlearn():
    hmm = pytest.importorskip("hmmlearn.hmm")
    frame = junction()
    reader = MarkerReader("tags", frame, confusion=0.1, false_read=0.02)
    taps = {0: 0.25, 1: 0.5, 2: 0.25}
    transition, _ = _model_matrices(frame, taps, FeatureDetector("d", frame, feature="door"))
    symbols = ["H1", "W1"]
    emission = np.stack([reader.likelihood(s) for s in symbols], axis=1)
    emission = np.column_stack([emission, 1.0 - emission.sum(axis=1)])  # a third symbol takes the rest
    z = [0, 1, 1, 0, 1]
    p = np.full(frame.n_cells, 1.0 / frame.n_cells) * emission[:, z[0]]
    p /= p.sum()
    motion = PlaceMotion(frame)
    for s in z[1:]:
        p = motion.shifted(p, taps) * emission[:, s]
        p /= p.sum()
    model = hmm.CategoricalHMM(n_components=frame.n_cells, init_params="", params="")
    model.startprob_ = np.full(frame.n_cells, 1.0 / frame.n_cells)
    model.transmat_ = transition.T
    model.emissionprob_ = emission
    np.testing.assert_allclose(p, model.predict_proba(np.array(z).reshape(-1, 1))[-1], atol=1e-9)


def _corridor_by_hand(hit: float, false: float, q: float) -> tuple[float, float]:
    """Share of 'arrived at door 3 from door 2' after door, 6 m east, door, from a start anywhere facing east.

    Worked out on the corridor's own numbers, not with the frame's operators.  The start is any cell facing
    east: positions 0–19 m, and a second one at each place the robot may have just arrived at (2, 5, 11, 20 m),
    all equally likely.  A door reading weighs hit at 2, 5, 11 m and ``false`` elsewhere.  Leaving a place it
    has arrived at, the robot goes on with probability q and turns back with 1 − q; at either end it turns
    back for sure.  Returns (the peak's share, the summed weight of every outcome)."""
    doors = {2, 5, 11}
    places = {0, 2, 5, 11, 20}
    weight = {}

    def walk(x, facing, arrived, left, w, came):
        if left == 0:
            key = (x, facing, arrived, came)
            weight[key] = weight.get(key, 0.0) + w
            return
        options = [(facing, 1.0)]
        if arrived:
            options = [(-facing, 1.0)] if x in (0, 20) else [(facing, q), (-facing, 1 - q)]
        for way, share in options:
            nxt = x + way
            walk(nxt, way, nxt in places, left - 1, w * share, x)

    starts = [(x, False) for x in range(20)] + [(x, True) for x in sorted(places - {0})]
    for x0, arrived in starts:
        walk(x0, +1, arrived, 6, (hit if x0 in doors else false) / len(starts), x0 - 1)
    total = sum(w * (hit if x in doors else false) for (x, _, _, _), w in weight.items())
    return weight[(11, +1, True, 10)] * hit / total, total


def test_three_door_corridor_after_fox_burgard_thrun():
    frame = corridor(at=False)
    hit, false = 0.9, 0.05
    detector = FeatureDetector("doors", frame, feature="door", hit_rate=hit, false_alarm_rate=false)
    for name in ("bayes", "evidential"):
        filt = build_on(name, frame)
        east = np.array([frame.edges[e][1] > frame.edges[e][0] for e in frame.edge_of])  # places listed west to east
        filt.reset(east.astype(float))
        filt.update(detector.encode(True))
        first = filt.distribution()
        # Three equal peaks, one at each door (its cell facing east and the cell arriving there from the west);
        # every other cell holds false / hit of a peak.
        doors = [frame.cell_of(d, on) for d, on in (("door 1", "door 2"), ("door 2", "door 3"), ("door 3", "east"))]
        doors += [
            frame.arrival[frame.edge_between(a, b)]
            for a, b in (("west", "door 1"), ("door 1", "door 2"), ("door 2", "door 3"))
        ]
        assert np.ptp(first[doors]) < 1e-12
        assert abs(np.sort(first)[-7] - first[doors[0]] * false / hit) < 1e-12
        for _ in range(6):
            filt.predict(PlaceMove(1.0))
        filt.update(detector.encode(True))
        p = filt.distribution()
        # Without coordinates, going on through a place weighs 1 against FLOOR for turning back.
        share, _ = _corridor_by_hand(hit, false, 1.0 / (1.0 + FLOOR))
        peak = frame.arrival[frame.edge_between("door 2", "door 3")]
        assert int(np.argmax(p)) == peak
        assert abs(p[peak] - share) < 1e-9, (name, p[peak], share)
        assert frame.fix(p).place == "door 3"


def test_evidential_equals_bayes_with_reliable_bayesian_evidence():
    frame = junction()
    detector = FeatureDetector("doors", frame, feature="door", hit_rate=0.85, false_alarm_rate=0.1)
    width = WidthDetector("width", frame, sigma_m=0.3)
    bayes, evid = PlaceHistogramFilter(frame), PlaceContourFilter(frame)
    rng = np.random.default_rng(11)
    for t in range(40):
        move = PlaceMove(float(rng.uniform(0.0, 0.6)), float(rng.normal(0.0, 0.3)), sigma_m=0.15, sigma_turn_rad=0.05)
        e = detector.encode(bool(rng.random() < 0.3)) if t % 3 else width.encode(float(rng.uniform(1.0, 3.0)))
        for f in (bayes, evid):
            f.predict(move)
            f.update(e)
    np.testing.assert_allclose(evid.distribution(), bayes.distribution(), atol=1e-12)


def test_motion_blur_follows_distance_not_records():
    # The same 8 m in 80 records or 4 gives the same spread (within the half-step kernels' rounding).
    frame = corridor(at=True)
    spreads = []
    for pieces in (4, 80):
        filt = PlaceHistogramFilter(frame)
        prior = np.zeros(frame.n_cells)
        prior[frame.cell_of("west", "door 1")] = 1.0
        filt.reset(prior)
        for _ in range(pieces):
            filt.predict(PlaceMove(8.0 / pieces, sigma_m=math.sqrt(0.5 * 8.0 / pieces)))  # 0.5 m² per metre
        xy = frame.positions()[:, 0]
        p = filt.distribution()
        spreads.append(math.sqrt(float(p @ (xy - p @ xy) ** 2)))
    assert abs(spreads[0] - spreads[1]) < 0.25, spreads
    assert 1.6 < spreads[1] < 2.4  # √(0.5 · 8) = 2 m


def test_bad_graphs_and_readings_are_refused():
    with pytest.raises(SiteError, match="unknown place 'lift'"):
        PlaceGraph(("dock",), (("dock", "lift", 2.0),))
    with pytest.raises(SiteError, match="positive length"):
        PlaceGraph(("a", "b"), (("a", "b", 0.0),))
    with pytest.raises(SiteError, match="positive length"):
        PlaceGraph(("a", "b"), (("a", "b", -3.0),))
    with pytest.raises(SiteError, match="itself"):
        PlaceGraph(("a", "b"), (("a", "a", 3.0),))
    pieces = PlaceGraph(("a", "b", "c", "d"), (("a", "b", 3.0), ("c", "d", 2.0)))
    with pytest.raises(SiteError, match="in pieces"):
        pieces.route("a", "d")
    assert pieces.route("b", "a") == ["b", "a"]
    frame = junction()
    with pytest.raises(PoseError, match="no passage joins"):
        frame.cell_of("west", "east")
    detector = FeatureDetector("doors", frame, feature="door")
    from fusion.errors import ObservationError

    with pytest.raises(ObservationError, match="true or false"):
        detector.encode(3.0)
    with pytest.raises(ObservationError, match="width in metres"):
        WidthDetector("w", frame).encode(float("nan"))
    with pytest.raises(SiteError, match="must exceed"):
        FeatureDetector("doors", frame, feature="door", hit_rate=0.1, false_alarm_rate=0.2)
    with pytest.raises(RuleError, match="does not run on a place graph"):
        build_on("particles", frame)
    with pytest.raises(RuleError, match="not built on a place graph"):
        build_on("evidential", frame, motion="bounded")


def test_layout_without_coordinates_keeps_travel_distances():
    # Classical scaling (Torgerson 1952) puts a path of places on a line at their travel distances.
    graph = PlaceGraph(("a", "b", "c"), (("a", "b", 3.0), ("b", "c", 4.0)))
    xy = graph.layout()
    d = np.linalg.norm(xy[:, None] - xy[None], axis=2)
    np.testing.assert_allclose(d[0, 2], 7.0, atol=1e-9)


def test_turning_all_places_at_once_equals_the_rule_place_by_place():
    # The vectorised turn (places with bearings) against turn_weights applied to each place on its own.
    frame = junction()
    p = np.random.default_rng(5).random(frame.n_cells)
    p /= p.sum()
    motion = PlaceMotion(frame)
    for turn in (-2.0, -0.8, 0.4, 1.6, math.pi):
        expected = p.copy()
        for place in range(frame.graph.n_cells):
            cells, w = frame.turn_weights(place, turn, 0.5)
            expected[cells[: w.shape[0]]] = w @ p[cells]
            expected[cells[w.shape[0] :]] = 0.0
        turned = motion.rotate(p, turn, 0.5)
        np.testing.assert_allclose(turned, expected, atol=1e-14)
        assert turned.sum() <= 1.0 + 1e-12  # a turn toward no passage keeps less of the mass (its fit)


def test_a_turn_toward_no_passage_is_evidence():
    # Standing at the dead end 'north' or at the T 'hub' (south, west, east, north), equally likely: a left turn of
    # 90° fits the T (south → west ... any passage 90° left of the one faced) and no passage of the dead end.
    frame = junction()
    filt = PlaceHistogramFilter(frame)
    prior = np.zeros(frame.n_cells)
    prior[frame.arrival[frame.edge_between("south", "hub")]] = 0.5  # at the hub, heading north
    prior[frame.arrival[frame.edge_between("hub", "north")]] = 0.5  # at the dead end, heading north
    filt.reset(prior)
    for _ in range(9):
        filt.predict(PlaceMove(0.0, math.radians(10.0)))
    filt.predict(PlaceMove(1.0))
    p = filt.distribution()
    at_hub = p[frame.cell_of("hub", "west", 1.0)]
    assert at_hub > 0.9, (at_hub, frame.describe(int(np.argmax(p))))
