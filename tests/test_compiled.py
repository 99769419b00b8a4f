"""The compiled loops (numba) against their numpy twins, and the switch that chooses between them.

The numpy code is the reference here; it is itself checked against closed forms and outside references
in the other test files (e.g. ``test_motion.py``).  A compiled loop keeps the numpy code's order of
operations, so the two must agree to the last bit, not merely to a tolerance.
"""

import dataclasses
import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fusion import compiled, motion
from fusion.sensors.odometry import Motion

numba = pytest.importorskip("numba")


@pytest.fixture
def kernels(monkeypatch):
    monkeypatch.delenv(compiled.ENV, raising=False)
    compiled.reset()
    loops = compiled.kernels()
    assert loops is not None, compiled.choice().why
    yield loops
    compiled.reset()


def _motion(headings, speed, angle, turn, sigma, sigma_turn):
    ang = angle + np.arange(headings) * 2 * math.pi / headings
    return Motion(
        dx=speed * np.cos(ang), dy=speed * np.sin(ang), turn=turn, sigma=sigma, sigma_turn=sigma_turn,
        bound=1, bound_turn=1, reliability=1.0, slip=0, slip_turn=0,
    )  # fmt: skip


def _both_ways(monkeypatch, compute):
    """``compute()`` with the compiled loops and then with the numpy code only: (compiled result, numpy result)."""
    got = {}
    for mode in ("numpy", "auto"):
        monkeypatch.setenv(compiled.ENV, mode)
        compiled.reset()
        got[mode] = compute()
    compiled.reset()
    assert compiled.choice().compiled
    return got["auto"], got["numpy"]


def _numpy_prediction(belief, m):
    across, along = motion._tap_table(m.dx, m.sigma), motion._tap_table(m.dy, m.sigma)
    return motion._predict_numpy(belief, across, along, motion._turn_taps(m.turn, m.sigma_turn, belief.shape[0]))


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    st.integers(1, 12),
    st.integers(1, 40),  # more than two blocks of rows (the loop's block is 16)
    st.integers(1, 19),
    st.floats(0, 25),  # shifts up to beyond the whole array: everything leaves the map
    st.floats(-math.pi, math.pi),
    st.floats(-30, 30),
    st.sampled_from([0.0, 1e-9, 0.3, 1.1, 4.0]),
    st.sampled_from([0.0, 0.25, 2.0]),
    st.integers(0, 2**32 - 1),
)
def test_compiled_prediction_equals_numpy_bit_for_bit(
    kernels, headings, ny, nx, speed, angle, turn, sigma, sigma_turn, seed
):
    belief = np.random.default_rng(seed).random((headings, ny, nx))
    m = _motion(headings, speed, angle, turn, sigma, sigma_turn)
    np.testing.assert_array_equal(motion.predict_density(belief, m), _numpy_prediction(belief, m))


def test_compiled_prediction_masks_as_numpy_does(kernels):
    # The free-space mask applied inside the loop equals the prediction multiplied by the mask afterwards.
    # Heading noises from none to wide: one to four turn taps (mixed and masked in one pass) and more than four.
    rng = np.random.default_rng(5)
    for shape in ((6, 37, 21), (36, 20, 30), (3, 1, 40)):
        belief = rng.random(shape)
        free = rng.random(shape[1:]) < 0.6
        for turn, sigma_turn in ((0.0, 0.0), (25.4, 0.0), (25.0, 0.2), (0.4, 0.134), (25.0, 0.4), (25.0, 2.0)):
            m = _motion(shape[0], 2.3, 0.4, turn, 0.6, sigma_turn)
            taps = len(motion._turn_taps(m.turn, m.sigma_turn, shape[0]))
            np.testing.assert_array_equal(
                motion.predict_density(belief, m, free=np.broadcast_to(free, shape)),
                _numpy_prediction(belief, m) * free,
                err_msg=f"{taps} turn taps",
            )


def test_compiled_heading_mix_pairs_headings_only_when_the_offsets_run_on(kernels):
    # Two headings are mixed in one pass when the turn taps' offsets run on by one (o, o + 1, … round the circle, as
    # ``_turn_taps`` makes them): the same sums, in the same order, as one heading at a time.  Other orders (backwards,
    # with gaps, shuffled) take the one-heading pass.  Both against numpy, with 1 to 4 taps, heading counts odd and
    # even (the last one then mixed alone), one heading, and the fixed-point total against numpy's integer sum.
    rng = np.random.default_rng(9)
    for headings in (1, 2, 3, 5, 8):
        belief = rng.random((headings, 18, 13))
        belief /= belief.sum()
        free = rng.random(belief.shape) < 0.7
        m = _motion(headings, 1.3, 0.2, 0.0, 0.5, 0.0)
        across, along = motion._tap_table(m.dx, m.sigma), motion._tap_table(m.dy, m.sigma)
        for offsets in ([0], [-1, 0], [0, 1, 2], [3, 4, 5, 6], [-1, 0, 1, 2], [2, 1, 0], [0, 2], [1, 0, 3, 2]):
            turn: dict[int, float] = {}
            for o in offsets:
                turn.setdefault(o % headings, float(rng.random()))
            want = motion._predict_numpy(belief, across, along, turn) * free
            out = np.empty_like(belief)
            total = kernels.predict_density(belief, *across, *along, *motion._pair(turn), free, out, motion._UNIT)
            np.testing.assert_array_equal(out, want, err_msg=f"{headings} headings, offsets {list(turn)}")
            assert total == int((want * motion._UNIT).astype(np.int64).sum())


def test_compiled_tap_tables_are_numpys(kernels):
    # The x and y taps built by the compiled loop against numpy's table (``_tap_table``): the same counts, offsets and
    # weights to the last bit, for shifts negative, whole, a hair from whole, -0.0 and far off, and noises from none
    # to wide.
    rng = np.random.default_rng(17)
    shifts = np.concatenate(
        [rng.normal(0, 3, 40), [0.0, -0.0, 1.0, -2.0, 2.9999999999999996, -1e-17, 1e-17, 733.25, -512.5, 0.5]]
    )
    for sigma in (0.0, 1e-7, 0.11, 0.134, 0.44, 1.7, 6.0):
        across, along = motion._tap_tables(shifts[:25], shifts[25:], sigma)
        want = motion._tap_table(shifts, sigma)
        for h in range(shifts.size):
            got = across if h < 25 else along
            row = h if h < 25 else h - 25
            c = int(want[2][h])
            assert int(got[2][row]) == c, (sigma, shifts[h])
            assert got[0][row, :c].tolist() == want[0][h, :c].tolist(), (sigma, shifts[h])
            assert got[1][row, :c].tobytes() == want[1][h, :c].tobytes(), (sigma, shifts[h])


def test_compiled_prediction_takes_a_strided_belief(kernels):
    # A belief seen through a view (every other heading) is copied to a contiguous array first.
    belief = np.random.default_rng(1).random((16, 9, 11))[::2]
    m = _motion(8, 1.7, 0.3, 12.0, 0.4, 0.3)
    np.testing.assert_array_equal(motion.predict_density(belief, m), _numpy_prediction(np.array(belief), m))


def test_the_numpy_path_runs_when_asked(monkeypatch):
    monkeypatch.setenv(compiled.ENV, "numpy")
    compiled.reset()
    try:
        assert compiled.kernels() is None
        assert compiled.choice() == compiled.KernelChoice(False, "FUSION_KERNELS=numpy")
        belief = np.random.default_rng(2).random((4, 6, 5))
        m = _motion(4, 0.8, 0.1, 40.0, 0.3, 0.5)
        np.testing.assert_array_equal(motion.predict_density(belief, m), _numpy_prediction(belief, m))
    finally:
        compiled.reset()


def test_a_wrong_kernel_setting_is_refused_with_the_choices(monkeypatch):
    monkeypatch.setenv(compiled.ENV, "fastest")
    compiled.reset()
    try:
        with pytest.raises(compiled.KernelSetupError, match="expected one of auto, numpy, compiled"):
            compiled.kernels()
    finally:
        compiled.reset()


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.integers(1, 9), st.integers(1, 9), st.integers(1, 300), st.booleans(), st.integers(0, 2**32 - 1))
def test_compiled_pair_sets_equal_numpy_fingerprint_and_emptiness(kernels, k1, k2, words, union, seed):
    from fusion.belief import bitset

    rng = np.random.default_rng(seed)
    a = rng.integers(0, 2**64, size=(k1, words), dtype=np.uint64)
    b = rng.integers(0, 2**64, size=(k2, words), dtype=np.uint64)
    rows = np.empty((k1, k2, words), dtype=np.uint64)
    a[rng.random(k1) < 0.3] = 0  # empty sets, and pairs that meet in nothing
    b[rng.random(k2) < 0.3] = 0
    fps = np.empty((k1, k2), dtype=np.uint64)
    empty = np.empty((k1, k2), dtype=bool)
    kernels.pair_sets(a, b, bitset.multipliers(words), union, rows, fps, empty)
    op = np.bitwise_or if union else np.bitwise_and
    expected = op(a[:, None, :], b[None, :, :])
    np.testing.assert_array_equal(rows, expected)
    np.testing.assert_array_equal(fps, bitset.fingerprint(expected))
    np.testing.assert_array_equal(empty, ~expected.any(axis=2))


def test_rules_on_a_large_frame_give_the_same_result_either_way(monkeypatch):
    # 32 × 32 focal sets on 40,000 cells: enough candidate words for the compiled pair loop.
    from fusion.belief import rules
    from fusion.belief.mass import MassFunction

    rng = np.random.default_rng(3)
    n = 40_000
    m1 = MassFunction.from_contour(np.clip(rng.random(n) + 0.05, 0, 1), levels=32)
    m2 = MassFunction.from_contour(np.clip(rng.random(n) + 0.1, 0, 1), levels=32)
    fast, slow = _both_ways(
        monkeypatch,
        lambda: (
            [rules.dempster(m1, m2), rules.disjunctive(m1, m2), rules.yager(m1, m2)]
            + [rules.conjunctive_reduced(m1, m2, 12, merge).mass_function for merge in ("union", "nearest")]
        ),
    )
    for got, expected in zip(fast, slow):
        np.testing.assert_array_equal(got.sets, expected.sets)
        np.testing.assert_array_equal(got.masses, expected.masses)
    k_fast, k_slow = _both_ways(monkeypatch, lambda: rules.conflict_mass(m1, m2))
    assert k_fast == k_slow


def _one_word_mass(rng, n: int, k: int, tiny: bool):
    """A mass function on ``n`` ≤ 64 cells with up to ``k`` focal sets, repeats and empty-meeting pairs likely;
    ``tiny``: one set's mass 1e-200, whose products with another such underflow to 0 (left out by the rule)."""
    from fusion.belief.mass import MassFunction

    focal = {}
    for _ in range(k):
        cells = tuple(np.flatnonzero(rng.random(n) < rng.uniform(0.05, 0.9)).tolist()) or (int(rng.integers(n)),)
        focal[cells] = focal.get(cells, 0.0) + float(rng.random())
    total = sum(focal.values())
    masses = {cells: v / total for cells, v in focal.items()}
    if tiny and len(masses) > 1:
        first = next(iter(masses))
        masses[next(c for c in masses if c != first)] += masses[first] - 1e-200
        masses[first] = 1e-200
    return MassFunction.from_focal(n, masses)


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.integers(1, 64), st.integers(1, 40), st.integers(1, 40), st.booleans(), st.integers(0, 2**32 - 1))
def test_the_one_word_conjunctive_rule_equals_numpy_bit_for_bit(monkeypatch, n, k1, k2, tiny, seed):
    """Frames of up to 64 cells: the compiled merge (``word_products``) gives numpy's sets in numpy's order and
    its masses to the last bit, for the conjunctive rule and Dempster's (the numpy code is checked against
    published examples in ``test_rules.py``)."""
    from fusion.belief import rules

    rng = np.random.default_rng(seed)
    m1, m2 = _one_word_mass(rng, n, k1, tiny), _one_word_mass(rng, n, k2, tiny)

    def both():
        loaded = compiled.kernels() is not None  # the one-word loop runs only once the loops are loaded
        joint = rules.conjunctive(m1, m2)
        k = float(joint.masses[joint.sets[:, 0] == 0].sum())
        return loaded, joint, rules.dempster(m1, m2) if k < 1.0 else None

    (loaded, fast, fast_d), (_, slow, slow_d) = _both_ways(monkeypatch, both)
    assert loaded
    for got, expected in ((fast, slow), (fast_d, slow_d)):
        if expected is None:
            assert got is None
            continue
        np.testing.assert_array_equal(got.sets, expected.sets)
        np.testing.assert_array_equal(got.masses.view(np.int64), expected.masses.view(np.int64))


def test_the_one_word_rule_refuses_as_numpy_does_when_every_product_underflows(monkeypatch):
    """Every product rounds to 0 (1e-200 · 1e-200): no set keeps any weight, and the compiled path hands the case to
    the numpy code, which refuses it with the same words.  No valid mass function gets here (masses summing to 1
    give some product of at least 1/(k₁k₂)); this one is built past the checks, to cover the branch."""
    from fusion.belief import rules
    from fusion.belief.mass import MassFunction
    from fusion.errors import MassValueError

    tiny = MassFunction._trusted(3, np.array([[1], [2]], dtype=np.uint64), np.array([1e-200, 1e-200]))

    def attempt():
        compiled.kernels()
        with pytest.raises(MassValueError, match="no focal set received any mass") as caught:
            rules.conjunctive(tiny, tiny)
        return str(caught.value)

    fast, slow = _both_ways(monkeypatch, attempt)
    assert fast == slow


def test_the_one_word_rule_does_not_load_the_compiled_loops(monkeypatch):
    """A rule on a small frame never pays numba's start-up: with the loops not loaded yet it takes the numpy code,
    and they are still not loaded after it."""
    from fusion.belief import rules
    from fusion.belief.mass import MassFunction

    monkeypatch.delenv(compiled.ENV, raising=False)
    compiled.reset()
    m = MassFunction.from_focal(4, {(0, 1): 0.5, (1, 2, 3): 0.5})
    try:
        rules.dempster(m, m)
        assert compiled.kernels_if_loaded() is None and compiled._loaded is None
    finally:
        compiled.reset()


def test_a_pair_block_reads_as_the_rows_it_stands_for(kernels):
    # A PairBlock is indexed, taken, selected and united as the array of its rows op(a[i], b[j]) would be.
    from fusion.belief.pairs import PairBlock

    rng = np.random.default_rng(9)
    a = rng.integers(0, 2**64, size=(5, 70), dtype=np.uint64)
    b = rng.integers(0, 2**64, size=(3, 70), dtype=np.uint64)
    a[:, rng.random(70) < 0.3] = 0  # empty words, so the word marks have zeros
    left, right = rng.integers(0, 5, 11), rng.integers(0, 3, 11)
    for union, op in ((False, np.bitwise_and), (True, np.bitwise_or)):
        block, rows = PairBlock(a, b, union, left, right, kernels), op(a[left], b[right])
        mask = rng.random(11) < 0.5
        for key in (0, 7, -1, np.int64(3), slice(2, 9, 3), mask, np.array([4, 0, 4, 10])):
            np.testing.assert_array_equal(block[key], rows[key])
        out = np.zeros((3, 70), dtype=np.uint64)
        block.take(np.array([1, 5, 2]), axis=0, out=out)
        np.testing.assert_array_equal(out, rows[[1, 5, 2]])
        np.testing.assert_array_equal(block.select(mask)[:], rows[mask])
        union_of = np.zeros(70, dtype=np.uint64)
        block.union_into(np.array([0, 3, 8]), union_of)
        np.testing.assert_array_equal(union_of, rows[0] | rows[3] | rows[8])
        np.testing.assert_array_equal(block.word_marks(mask), np.packbits(rows[mask] != 0, axis=1))
        target = rows[2].copy()
        assert not block.or_into(2, target)  # a row ORed into itself adds nothing
        assert block.or_into(5, target) == bool((rows[5] & ~rows[2]).any())
        np.testing.assert_array_equal(target, rows[2] | rows[5])
        assert len(block) == 11 and block.shape == (11, 70)
        for which, against in ((np.array([0, 3, 8]), np.array([1, 4, 2])), (np.arange(11), np.arange(11))):
            same = all(np.array_equal(rows[p], rows[q]) for p, q in zip(which, against))
            assert block.rows_equal(which, against) == same


def test_a_pair_block_compares_rows_without_writing_them(kernels):
    # Equal sets from different pairs (a row of ``a`` repeated, and a pair repeated) are equal, a row differing in
    # one bit of its last word is not, and the answer is numpy's comparison of the written rows.
    from fusion.belief.pairs import PairBlock

    rng = np.random.default_rng(12)
    a = rng.integers(0, 2**64, size=(4, 9), dtype=np.uint64)
    b = rng.integers(0, 2**64, size=(2, 9), dtype=np.uint64)
    a[1] = a[0]
    a[2] = a[0]
    a[2, -1] ^= np.uint64(1) << np.uint64(63)
    b[1, -1] |= np.uint64(1) << np.uint64(63)  # so that bit survives the AND with b[1]
    left, right = np.array([0, 1, 2, 0, 3]), np.array([1, 1, 1, 1, 0])
    for union, op in ((False, np.bitwise_and), (True, np.bitwise_or)):
        block, rows = PairBlock(a, b, union, left, right, kernels), op(a[left], b[right])
        for p, q in ((0, 1), (0, 3), (0, 2), (1, 2), (4, 0), (4, 4)):
            expected = bool(np.array_equal(rows[p], rows[q]))
            assert block.rows_equal(np.array([p]), np.array([q])) == expected, (union, p, q)
        assert block.rows_equal(np.array([0, 1]), np.array([1, 3]))
        # a[2] differs from a[0] only in a bit b[1] has: the AND keeps the difference, the OR hides it.
        assert block.rows_equal(np.array([0, 0]), np.array([1, 2])) == union


def test_compiled_pair_fingerprints_without_rows_equal_the_written_pairs(kernels):
    from fusion.belief import bitset

    rng = np.random.default_rng(10)
    a = rng.integers(0, 2**64, size=(6, 130), dtype=np.uint64)
    b = rng.integers(0, 2**64, size=(4, 130), dtype=np.uint64)
    a[2] = 0
    b[1] = a[0] ^ np.uint64(2**64 - 1)  # meets a[0] in nothing
    for union in (False, True):
        rows, fps, empty = np.empty((6, 4, 130), np.uint64), np.empty((6, 4), np.uint64), np.empty((6, 4), bool)
        kernels.pair_sets(a, b, bitset.multipliers(130), union, rows, fps, empty)
        fps2, empty2, unwritten = np.empty((6, 4), np.uint64), np.empty((6, 4), bool), np.empty((6, 4, 0), np.uint64)
        kernels.pair_sets(a, b, bitset.multipliers(130), union, unwritten, fps2, empty2)
        np.testing.assert_array_equal(fps2, fps)
        np.testing.assert_array_equal(empty2, empty)


@pytest.mark.parametrize("max_range_m", [3.0, 12.0])  # short: the whole padded field is gathered; long: windows
def test_compiled_scan_likelihood_equals_numpy_bit_for_bit(monkeypatch, max_range_m):
    from fusion.sensors.ranging import RangeParams, RangeScan, RangeSensor
    from fusion.site import SiteMap

    site = SiteMap.empty(9.0, 6.0, 0.25, name="test bay").with_box(3.0, 2.0, 4.5, 3.5)
    sensor = RangeSensor("lidar", site, site.grid(12), RangeParams(max_range_m=max_range_m))

    def scans():
        rng = np.random.default_rng(int(max_range_m))  # the same scans both ways
        bearings = len(sensor.params.bearings_deg)
        return [
            sensor.log_likelihood(RangeScan(tuple(rng.uniform(0.1, max_range_m * 1.1, bearings)))) for _ in range(4)
        ]

    for a, b in zip(*_both_ways(monkeypatch, scans)):
        np.testing.assert_array_equal(a, b)


def test_compiled_region_size_counts_as_numpy_does(monkeypatch):
    # Tracked (a few cells), spread (every cell a candidate), heavy-tailed, tied and two-level beliefs, on both sides of
    # the sizes where the count stops gathering every cell at once (8,192) and its sample thins out (65,536).
    from fusion.backends.region import region_size

    rng = np.random.default_rng(11)
    beliefs = []
    for n in (7, 5_000, 9_000, 70_000, 200_000):
        tracked = np.zeros(n)
        tracked[rng.integers(0, n, 5)] = rng.random(5)
        beliefs += [
            rng.random(n),
            rng.random(n) ** 8,
            np.exp(rng.normal(0, 3, n)),
            np.round(rng.random(n), 2),
            np.where(rng.random(n) < 0.001, 1.0, 1e-9),
            np.ones(n),
            (rng.random(n) < 0.6) * 1.0,
            tracked,
        ]
    fast, slow = _both_ways(monkeypatch, lambda: [region_size(p) for p in beliefs])
    assert fast == slow


def test_prediction_total_is_the_same_integer_sum_either_way_and_close_to_the_float_sum(monkeypatch):
    # ``predict_into``'s total, added up in fixed point as the compiled loop writes, against numpy's sum of the same
    # integers (exact in any order, so equal), and against the floating-point sum of the prediction (within the
    # 3·10⁻¹³ the truncation can drop, our bound); None when less than half the mass is kept, or with slip.
    from fusion import motion

    rng = np.random.default_rng(41)
    belief = rng.random((12, 30, 40)) ** 3
    belief /= belief.sum()
    free = rng.random(belief.shape) < 0.9
    cases = [
        (_motion(12, 0.7, 0.3, 0.2, 0.6, 0.4), free),
        (_motion(12, 0.7, 0.3, 0.2, 0.6, 0.4), None),
        (_motion(12, 2.0, 1.0, 1.5, 0.0, 0.0), free),
        (_motion(12, 35.0, 0.0, 0.0, 0.5, 0.5), free),  # most of the mass moves off the map
    ]

    def run():
        got = []
        for m, mask in cases:
            out = np.empty(belief.size)
            total = motion.predict_into(belief, m, np.ones(belief.shape, bool) if mask is None else mask, out)
            got.append((total, out.copy()))
        return got

    fast, slow = _both_ways(monkeypatch, run)
    for (t1, a), (t2, b) in zip(fast, slow):
        assert t1 == t2
        np.testing.assert_array_equal(a, b)
    for total, out in fast[:3]:
        assert total is not None and abs(total - out.sum()) <= 3e-13 * out.sum()
    assert fast[3][0] is None and fast[3][1].sum() < 0.5
    slipping = dataclasses.replace(cases[0][0], reliability=0.9)
    assert motion.predict_into(belief, slipping, free, np.empty(belief.size)) is None


def test_compiled_bracket_pass_gathers_and_adds_up_as_numpy_does(kernels):
    # The one-pass gather of the region count (bit masks of 64 cells, set bits visited by a de Bruijn index, Leiserson,
    # Prokop & Randall 1998) against numpy's boolean masks: the same cells in the same order, the same count and
    # fixed-point masses at and above the top, the whole's, the values scaled as numpy's ``*=`` scales them; on a
    # length that is not a multiple of 64, with values equal to either end, an open top, and more cells than fit.
    from fusion.compiled import region_loops

    assert sorted(region_loops._DE_BRUIJN_INDEX.tolist()) == list(range(64))  # a permutation: every bit found
    rng = np.random.default_rng(31)
    values = np.round(rng.random(100_003), 3) * 1e-5
    scale = 2.0**61 / values.sum()
    for lo, hi, room in ((3e-6, 6e-6, 40_000), (3e-6, 6e-6, 1_000), (0.0, 1e-6, 40_000), (9e-6, np.inf, 40_000)):
        for factor in (1.0, 0.37):
            scaled = values * factor
            inside = scaled[(scaled >= lo) & (scaled < hi)]
            fixed = (scaled * scale).astype(np.int64)
            out, acc, work = np.full(room, -1.0), np.zeros(3, dtype=np.int64), values.copy()
            if factor == 1.0:
                n = kernels.region_bracket(work, scale, lo, hi, out, acc)
            else:
                n = kernels.region_bracket_scaling(work, factor, scale, lo, hi, out, acc)
            assert n == inside.size
            np.testing.assert_array_equal(out[: min(n, room)], inside[:room])
            assert acc.tolist() == [int((scaled >= hi).sum()), int(fixed[scaled >= hi].sum()), int(fixed.sum())]
            np.testing.assert_array_equal(work, scaled)
            if hi == np.inf:  # the pass with no top: the same cells and whole, nothing counted above
                out, acc, work = np.full(room, -1.0), np.zeros(3, dtype=np.int64), values.copy()
                if factor == 1.0:
                    n = kernels.region_above(work, scale, lo, out, acc)
                else:
                    n = kernels.region_above_scaling(work, factor, scale, lo, out, acc)
                assert n == inside.size
                np.testing.assert_array_equal(out[: min(n, room)], inside[:room])
                assert acc.tolist() == [0, 0, int(fixed.sum())]
                np.testing.assert_array_equal(work, scaled)


def test_compiled_radix_sort_sorts_bit_patterns_as_numpy_does(kernels):
    # The least-significant-byte-first radix sort (Knuth, TAOCP vol. 3, §5.2.5) of non-negative floats' bit patterns
    # against numpy's sort, on every size from 0 to 40 and larger ones, ties, one value, keys sharing every byte but
    # one, subnormals and infinity; a key with its sign bit set (-0.0, negatives) gives an empty array.
    rng = np.random.default_rng(21)
    sets = [rng.random(n) for n in range(41)] + [
        rng.random(4103) * 1e-5,
        np.exp(rng.uniform(-690.0, 690.0, 5000)),  # from about 1e-300 to 1e300
        rng.integers(0, 3, 1000).astype(np.float64),
        np.full(7, 3.5),
        np.array([1.0, np.nextafter(1.0, 2.0), 1.0, np.nextafter(1.0, 0.0)]),
        np.array([5e-324, 0.0, np.inf, 2.0**-1022, 1e-310, 1e300]),
    ]
    for values in sets:
        got = kernels.region_sorted(values.view(np.int64)).view(np.float64)
        np.testing.assert_array_equal(got, np.sort(values))
        assert got.tobytes() == np.sort(values).tobytes()
    for bad in (np.array([0.5, -0.0, 1.0]), np.array([2.0, -1.0])):
        assert kernels.region_sorted(bad.view(np.int64)).size == 0


def test_compiled_crossing_counts_as_a_full_sort_does(kernels):
    # The count among the bracket's cells (``region_crossing``: the values' range cut into ranges, only the range
    # where the sum crosses kept) against its definition by a full sort, largest first (Hyndman 1996, "Computing and
    # graphing highest density regions"): ties, equal values, cells too small to weigh in fixed point, a range too
    # narrow to divide, one value, a need no subset reaches, a need every cell is needed for, and ranges that keep
    # most of the values; the values given are left as they were.
    rng = np.random.default_rng(41)

    def by_sort(values, scale, need):
        fixed = (values * scale).astype(np.int64)
        total = int(fixed.sum())
        if total < need:
            return total, -1
        return total, int(np.searchsorted(np.cumsum(np.sort(fixed)[::-1]), need, "left")) + 1

    families = [
        lambda n: rng.random(n),
        lambda n: rng.random(n) ** 25,
        lambda n: np.round(rng.random(n), 2),
        lambda n: np.full(n, 0.37),
        lambda n: np.append(np.where(rng.random(n - 1) < 0.5, 1e-300, rng.random(n - 1)), 0.75),
        lambda n: 0.5 + rng.random(n) * 1e-15,
        lambda n: 1e-290 * (1 + rng.integers(0, 2, n) * 2.0**-52),  # a range whose width's reciprocal overflows
        lambda n: np.concatenate([np.full(n - n // 50, 1e-3), rng.random(n // 50)]),  # most values in one range
    ]
    for family in families:
        for n in (1, 7, 256, 257, 3000, 30_000):
            values = family(n)
            with np.errstate(over="ignore"):
                scale = 2.0**61 / values.sum()
            if not np.isfinite(scale):  # region_size rescales such a belief first (its own test)
                continue
            whole = int((values * scale).astype(np.int64).sum())
            for need in {1, max(1, whole // 3), max(1, int(whole * 0.95)), whole, whole + 1}:
                given = values.copy()
                total, k = kernels.region_crossing(given, scale, need)
                assert (int(total), int(k)) == by_sort(values, scale, need), (n, need)
                np.testing.assert_array_equal(given, values)


def test_region_count_settles_from_any_first_bracket(monkeypatch):
    # The one-pass count from a first bracket that holds the crossing, lies wholly above or below it, holds too many
    # cells, or is empty: the exact masses found by the pass decide, so the count is the full sort's (Hyndman 1996,
    # Computing and graphing highest density regions) every time, with the compiled loops and with numpy.
    from fusion.backends import region

    rng = np.random.default_rng(32)
    values = rng.random(120_000) ** 4
    expected = region._by_sort(values, 0.95)
    cut = np.sort(values)[::-1][expected - 1]  # the crossing value
    below, above = np.nextafter(cut, 0), np.nextafter(cut, 1)
    brackets = [(cut * 0.99, cut * 1.01), (cut * 1.5, cut * 2), (cut * 0.2, cut * 0.5), (0.0, cut * 1.5), (cut, cut)]
    brackets += [(below, above), (cut, above), (0.0, np.inf)]

    def counts():  # as given, and as the pass leaves them scaled by a pending factor (a normalisation)
        total = float(values.sum())
        plain = [region._Bracket(values.copy(), 0.95, total).settle(lo, hi) for lo, hi in brackets]
        return plain + [region._Bracket(values * 2.0, 0.95, total, 0.5).settle(lo, hi) for lo, hi in brackets]

    fast, slow = _both_ways(monkeypatch, counts)
    assert fast == slow == [expected] * 2 * len(brackets)


def test_compiled_bayes_update_equals_numpy_and_refuses_the_same_likelihoods(monkeypatch):
    # The one-pass product and check against numpy's minimum, maximum and product: the same posterior and evidence
    # to the last bit, and the same error, naming the same cell, for each kind of bad likelihood (-0.0 is a zero).
    from fusion.belief.posterior import COMPILED_FROM, Posterior
    from fusion.errors import LikelihoodValueError, ZeroEvidenceError

    n = COMPILED_FROM + 37
    rng = np.random.default_rng(21)
    prior = rng.random(n)
    good = [rng.random(n), rng.random(n) ** 30, np.where(rng.random(n) < 0.5, -0.0, 1e-300), np.full(n, 2.0)]
    bad = []
    for value in (-1e-12, np.nan, np.inf, -np.inf, 0.0):
        bad.append(rng.random(n) if value != 0.0 else np.zeros(n))
        bad[-1][n // 3] = value

    def run():
        out = []
        for lik in good:
            belief = Posterior(prior)
            out.append((belief.update(lik), belief.probabilities.copy()))
        for lik in bad:
            belief = Posterior(prior)
            with pytest.raises((LikelihoodValueError, ZeroEvidenceError)) as caught:
                belief.update(lik)
            out.append((str(caught.value), belief.probabilities.copy()))
        return out

    for (a, pa), (b, pb) in zip(*_both_ways(monkeypatch, run)):
        assert a == b
        np.testing.assert_array_equal(pa, pb)


def test_compiled_pignistic_transform_equals_numpy_bit_for_bit(monkeypatch):
    from fusion.belief.contour import ContourBelief

    rng = np.random.default_rng(12)
    contours = [rng.random(5000) ** 3, np.where(rng.random(3000) < 0.3, 0.0, rng.random(3000)), np.ones(100)]
    for c in contours:
        c[np.argmax(c)] = 1.0
    for a, b in zip(*_both_ways(monkeypatch, lambda: [ContourBelief(c).pignistic() for c in contours])):
        np.testing.assert_array_equal(a, b)


def test_compiled_level_maxima_equal_numpy_maximum_at(kernels):
    # The per-level maxima of a reading (K against a consonant belief) against np.maximum.at, gathered and not,
    # with ties, empty bins and a NaN (kept once met, as np.maximum keeps it).
    rng = np.random.default_rng(13)
    values = rng.random(5000)
    values[17] = np.nan
    bins = rng.integers(0, 40, 5000)
    cells = rng.permutation(5000)[:3000]
    for gather in (cells, np.zeros(0, dtype=np.intp)):
        expected = np.full(50, -1.0)
        with np.errstate(invalid="ignore"):  # numpy warns as it keeps the NaN
            np.maximum.at(expected, bins[: len(gather) or None], values[gather] if len(gather) else values)
        got = np.full(50, -1.0)
        kernels.level_maxima(values, gather, bins[: len(gather) or None], got)
        np.testing.assert_array_equal(got, expected)


def test_compiled_geometric_levels_equal_frexp(monkeypatch):
    # Each value rounded up to 1, 1/2, 1/4, …: from the bits against np.frexp, on powers of two (down into the
    # subnormals), zeros of both signs, negatives, values above 1, infinity and NaN, for few and many levels.
    from fusion.belief.levels import geometric_level_index, geometric_levels

    rng = np.random.default_rng(14)
    values = np.concatenate(
        [
            rng.random(20_000),
            rng.random(2_000) ** 30,
            2.0 ** -np.arange(0, 1100, dtype=float),
            [0.0, -0.0, -0.3, 1.0, 1.5, np.inf, np.nan, 5e-324, 3e-320, 2.2250738585072014e-308, 0.75],
        ]
    )
    levels = (1, 2, 6, 40, 2000, 5000)
    for a, b in zip(*_both_ways(monkeypatch, lambda: [geometric_level_index(values, n) for n in levels])):
        assert a.dtype == b.dtype
        np.testing.assert_array_equal(a, b)
    # and which levels occur, against numpy's count of each (a level is present when its count is not 0), with at
    # most 64 levels (found as the loop goes) and more (counted)
    parts = (values, values[:20_000], np.zeros(5), values[20_000:22_000])
    fast, slow = _both_ways(monkeypatch, lambda: [geometric_levels(p, n) for p in parts for n in (*levels, 63, 64)])
    for (index, seen), (_, seen_numpy) in zip(fast, slow):
        np.testing.assert_array_equal(seen, seen_numpy)
        np.testing.assert_array_equal(seen, np.bincount(index, minlength=len(seen)) > 0)


def test_the_command_line_refuses_a_wrong_kernel_setting_before_any_work(monkeypatch, capsys, tmp_path):
    # An error in the environment, said as such (exit 2, the variable and its choices), and no output folder made.
    from fusion.cli import EXIT_BAD_INPUT, main

    monkeypatch.setenv(compiled.ENV, "fastest")
    compiled.reset()
    try:
        assert main(["run", "calm", "--quiet", "--out", str(tmp_path / "out")]) == EXIT_BAD_INPUT
    finally:
        compiled.reset()
    said = capsys.readouterr().err
    assert "FUSION_KERNELS='fastest' in the environment: expected one of auto, numpy, compiled" in said
    assert not (tmp_path / "out").exists()


def test_capped_rule_merges_exactly_when_every_fingerprint_collides(kernels, monkeypatch):
    # The capped rule's unwritten rows (PairBlock) under the worst fingerprint: 0 for every set, so every pair
    # collides and each merge rests on the exact comparison of rows written out on demand.  Uncapped, the result
    # is the conjunctive rule by its definition on Python sets (Smets 1990); capped, the two-step reduction.
    from fusion.belief import bitset, rules
    from fusion.belief.mass import MassFunction

    monkeypatch.setattr(rules, "_COMPILED_WORDS", 1)  # the compiled pair loops on a small frame
    monkeypatch.setattr(bitset, "multipliers", lambda w: np.zeros(w, dtype=np.uint64))
    rng = np.random.default_rng(17)
    n = 700
    masks = rng.random((20, n)) < 0.02
    masks[:, : n // 10] |= rng.random((20, n // 10)) < 0.3  # overlapping sets: intersections repeat
    masks[10:13] = masks[0]
    f1 = {tuple(np.flatnonzero(r).tolist()): w for r, w in zip(masks[:10], rng.random(10))}
    f2 = {tuple(np.flatnonzero(r).tolist()): w for r, w in zip(masks[10:], rng.random(10))}
    f1 = {k: v / sum(f1.values()) for k, v in f1.items()}
    f2 = {k: v / sum(f2.values()) for k, v in f2.items()}
    m1, m2 = MassFunction.from_focal(n, f1), MassFunction.from_focal(n, f2)
    expected = {}
    for b, x in f1.items():
        for c, y in f2.items():
            key = frozenset(b) & frozenset(c)
            expected[key] = expected.get(key, 0.0) + x * y
    got = {frozenset(fs.cells): fs.mass for fs in rules.conjunctive_reduced(m1, m2, 1000).mass_function}
    assert got.keys() == expected.keys()
    for key, value in expected.items():
        assert abs(got[key] - value) <= 1e-12
    for cap in (1, 3, 8):
        one = rules.conjunctive_reduced(m1, m2, cap, "nearest")
        two = rules.reduce_focal_sets(rules.conjunctive(m1, m2), cap, "nearest")
        assert one.mass_function.is_close(two.mass_function, 1e-12)
        assert one.sets_merged == two.sets_merged


def test_region_count_fused_into_the_normalisation_changes_no_bit(monkeypatch):
    # The Bayes update normalising through ``normalise_and_count``: the posterior and log evidence are those of the
    # plain update to the last bit, and the count is ``region_size`` of that posterior (the region by its definition,
    # Hyndman 1996, checked against a full sort), with the compiled loops and with numpy; also when the likelihood
    # underflows (the rescaled second try) and when the update is refused (the count of the belief kept).
    from fusion.backends.region import _by_sort, normalise_and_count, region_size
    from fusion.belief.posterior import Posterior
    from fusion.errors import ZeroEvidenceError

    def run():
        rng, out = np.random.default_rng(21), []
        for n, scale in ((300, 1.0), (40_000, 1.0), (200_000, 1.0), (200_000, 1e-290)):
            prior = rng.random(n) ** 3
            likelihood = (0.05 + rng.random(n)) * scale
            plain, fused, counted = Posterior(prior), Posterior(prior), []
            step = plain.update(likelihood)
            normalise = lambda post, f, counted=counted: counted.append(normalise_and_count(post, f))  # noqa: E731
            assert fused.update(likelihood, normalise) == step
            assert np.array_equal(plain.probabilities, fused.probabilities)
            assert counted == [region_size(plain.probabilities)] == [_by_sort(plain.probabilities, 0.95)]
            out.append((counted[0], fused.probabilities.copy()))
        refused, calls = Posterior(np.eye(1, 5_000, 7).ravel()), []
        with pytest.raises(ZeroEvidenceError):
            refused.update(np.ones(5_000) - np.eye(1, 5_000, 7).ravel(), lambda post, f: calls.append(f))
        assert calls == []
        return out

    fast, slow = _both_ways(monkeypatch, run)
    assert [c for c, _ in fast] == [c for c, _ in slow]
    assert all(np.array_equal(a, b) for (_, a), (_, b) in zip(fast, slow))


def test_bayes_filter_reports_the_region_of_its_posterior():
    # ``report_region``: the count of each step's posterior, as ``region_size`` counts it (fused into the update's
    # normalisation), and the kept belief's count when a reading is refused.
    from fusion.backends.bayes import HistogramFilter
    from fusion.backends.region import region_size
    from fusion.grid import PoseGrid
    from fusion.sensors.base import Evidence

    grid = PoseGrid(6.0, 4.0, 0.1, 24)
    rng = np.random.default_rng(4)
    filt = HistogramFilter(grid, report_region=True)
    for _ in range(3):
        report = filt.update(Evidence("blob", 0.01 + rng.random(grid.n_cells) ** 6))
        assert report.region_cells == region_size(filt.belief.probabilities)
    only = np.zeros(grid.n_cells)
    only[np.argmin(filt.belief.probabilities)] = 1.0
    filt.belief.set(np.where(only > 0, 0.0, filt.belief.probabilities))
    report = filt.update(Evidence("nowhere", only))
    assert report.rejected and report.region_cells == region_size(filt.belief.probabilities)


@pytest.mark.parametrize("reliability", [1.0, 0.9, 0.3, 1e-9])
def test_compiled_contour_product_equals_numpy_bit_for_bit(monkeypatch, reliability):
    # The contour filter's product with a reading (its likelihood r·c + 1 − r formed cell by cell inside the loop),
    # and the maximum found in the same pass, against numpy's product with Evidence.likelihood and its max.
    from fusion.backends.contour import _product
    from fusion.sensors.base import Evidence

    rng = np.random.default_rng(14)
    for n in (1, 7, 1000, 40_001):
        belief = np.where(rng.random(n) < 0.2, 0.0, rng.random(n))
        reading = np.where(rng.random(n) < 0.2, 0.0, rng.random(n) ** 4)
        got, want = _both_ways(monkeypatch, lambda b=belief, c=reading: _product(b, Evidence("r", c, reliability)))
        np.testing.assert_array_equal(got[0].view(np.int64), want[0].view(np.int64))
        assert got[1] == want[1] == float((belief * Evidence("r", reading, reliability).likelihood).max())


def test_compiled_support_conflict_equals_the_listed_support(monkeypatch):
    # The best reading value over the cells with p ≥ share · max p, found without listing them, against the list
    # (support_cells, then the reading's values there): beliefs with ties at the threshold, one cell, all zeros.
    from fusion.conflict import conflict_on, support_cells, support_conflict
    from fusion.sensors.base import Evidence

    rng = np.random.default_rng(15)
    cases = [rng.random(5000), np.where(rng.random(5000) < 0.5, 0.25, 1.0), np.eye(1, 300, 17)[0], np.zeros(50)]
    for p in cases:
        for dof in (0, 5):
            reading = Evidence("r", rng.random(p.size), reliability=0.8, dof=dof)
            got, want = _both_ways(monkeypatch, lambda p=p, e=reading: support_conflict(p, e, 0.25))
            assert got == want
            if p.max() > 0:
                assert got == conflict_on(support_cells(p, 0.25), reading)


def test_compiled_likelihood_and_ruled_out_share_equal_numpy(monkeypatch):
    # A reading's likelihood r·c + 1 − r (one compiled pass) bit for bit, and the share of cells it rules out
    # (contour < ½, counted without writing flags), on contours with zeros, exact halves and a NaN.
    from fusion.sensors.base import Evidence

    rng = np.random.default_rng(16)
    contours = [rng.random(40_001) ** 2, np.where(rng.random(999) < 0.3, 0.5, rng.random(999)), np.zeros(3)]
    contours[1][5] = np.nan
    for c in contours:
        for r in (1.0, 0.9, 1e-6):
            got, want = _both_ways(
                monkeypatch, lambda c=c, r=r: (Evidence("r", c, r).likelihood, Evidence("r", c, r).ruled_out)
            )
            np.testing.assert_array_equal(got[0].view(np.int64), want[0].view(np.int64))
            assert got[1] == want[1] == np.count_nonzero(c < 0.5) / c.size
