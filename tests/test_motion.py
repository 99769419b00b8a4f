import math

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from support import assert_close, reference_predict_sets

from fusion.belief import bitset
from fusion.grid import PoseGrid
from fusion.motion import predict_density, predict_sets, shift_kernel
from fusion.sensors.odometry import OdometryParams, OdometryReading, OdometrySensor


def test_shift_kernel_moves_the_mean_exactly_and_adds_the_noise_variance():
    for shift, sigma in ((2.3, 1.5), (-0.7, 0.8), (4.0, 0.0)):
        whole, w = shift_kernel(shift, sigma)
        offsets = np.arange(len(w)) - len(w) // 2 + whole
        mean = float(w @ offsets)
        var = float(w @ (offsets - mean) ** 2)
        frac = shift - math.floor(shift)
        assert_close(w.sum(), 1.0)
        assert_close(mean, shift, tol=1e-9)
        # discrete Gaussian variance ≈ σ² (truncated at 4σ: −0.03 % of σ²) plus the linear split's
        # frac·(1 − frac)
        assert abs(var - (sigma**2 + frac * (1 - frac))) < 1e-3 * max(sigma**2, 1e-3)


def test_predicted_density_conserves_mass_away_from_the_edges():
    grid = PoseGrid(20.0, 20.0, 0.25, 36)
    belief = np.zeros(grid.shape)
    belief[3, 40, 40] = 1.0
    motion = OdometrySensor("wheels", grid).motion(OdometryReading(1.0, 0.0, 20.0))
    out = predict_density(belief, motion)
    assert_close(out.sum(), 1.0, tol=1e-12)
    h, y, x = np.unravel_index(np.argmax(out), out.shape)
    assert h == 5  # heading bin 3 (30°) turned by 20°
    th = math.radians(30)
    assert abs(x - (40 + 4 * math.cos(th))) <= 1 and abs(y - (40 + 4 * math.sin(th))) <= 1


def test_set_valued_motion_contains_every_reachable_cell_and_wraps_heading():
    grid = PoseGrid(10.0, 10.0, 0.5, 8)
    masks = np.zeros((1, *grid.shape), bool)
    masks[0, 0, 10, 10] = True  # heading 0 (east), cell (10, 10)
    motion = OdometrySensor("wheels", grid, OdometryParams(sigma_per_m=0.1)).motion(OdometryReading(1.0, 0.0, -45.0))
    packed = predict_sets(bitset.pack_masks(masks.reshape(1, -1)), grid, motion)
    out = bitset.unpack(packed, grid.n_cells).reshape(grid.shape)
    # moved 2 cells east, bound ceil(3 · 0.1 m / 0.5 m) = 1 cell, heading −1 bin → bin 7 (wraps)
    assert out[7, 10, 12] and out[7, 9, 11] and out[7, 11, 13]
    assert not out[7, 10, 10] and not out[3].any()
    assert out[7].sum() == 9


@settings(max_examples=60, deadline=None)
@given(
    st.integers(1, 21),
    st.integers(1, 13),
    st.integers(1, 7),
    st.floats(-3, 3),
    st.floats(-3, 3),
    st.floats(-60, 60),
    st.integers(0, 2),
    st.integers(0, 2),
    st.integers(0, 2**32 - 1),
)
def test_packed_set_motion_equals_the_cell_by_cell_reference(
    nx, ny, headings, fwd, left, turn, bound, bound_turn, seed
):
    grid = PoseGrid(nx * 0.5, ny * 0.5, 0.5, headings)
    rng = np.random.default_rng(seed)
    masks = rng.random((3, *grid.shape)) < 0.05
    motion = OdometrySensor("wheels", grid).motion(OdometryReading(fwd, left, turn))
    expected = reference_predict_sets(masks, motion, bound, bound_turn)
    packed = predict_sets(bitset.pack_masks(masks.reshape(3, -1)), grid, motion, bound=bound, bound_turn=bound_turn)
    np.testing.assert_array_equal(bitset.unpack(packed, grid.n_cells).reshape(masks.shape), expected)


def _taps(shift: float, sigma: float) -> list[tuple[int, float]]:
    """The reference: (offset, weight) pairs of ``shift_kernel`` for one shift, weights under 1e-15 dropped."""
    whole, weights = shift_kernel(shift, sigma)
    radius = len(weights) // 2
    return [(whole + i - radius, float(w)) for i, w in enumerate(weights) if w > 1e-15]


def test_taps_of_every_heading_at_once_are_each_headings_own_bit_for_bit():
    # The batched kernels of predict_density (one Gaussian for all headings) against shift_kernel per shift:
    # identical operations on identical numbers, so identical weights (our implementation's own invariant).
    from fusion.motion import _tap_table

    rng = np.random.default_rng(4)
    for sigma in (0.0, 1e-7, 0.3, 1.7, 6.0):
        shifts = np.concatenate([rng.normal(0, 3, 36), [0.0, -0.5, 2.0, -3.25]])
        offsets, weights, counts = _tap_table(shifts, sigma)
        rows = [list(zip(offsets[h, :c].tolist(), weights[h, :c].tolist())) for h, c in enumerate(counts.tolist())]
        assert rows == [_taps(float(s), sigma) for s in shifts]


def test_turn_taps_and_joint_tables_are_shift_kernels_own_bit_for_bit():
    # The heading kernel built in plain floats from the cached Gaussian, and the x and y tables made as one, against
    # shift_kernel's taps (``_taps``) one shift at a time: the same weights, offsets folded round the headings and
    # summed where two land on one (our implementation's own invariant).
    from fusion.motion import _tap_table, _tap_tables, _turn_taps

    rng = np.random.default_rng(5)
    for sigma in (0.0, 1e-7, 0.134, 0.3, 1.7, 6.0):
        for turn in (0.0, 0.4, -0.5, 2.0, 35.9, -71.25, float(rng.normal(0, 20))):
            for headings in (1, 2, 7, 36):
                folded: dict[int, float] = {}
                for offset, w in _taps(turn, sigma):
                    folded[offset % headings] = folded.get(offset % headings, 0.0) + w
                assert list(_turn_taps(turn, sigma, headings).items()) == list(folded.items())  # order: the sum's
        dx, dy = rng.normal(0, 3, 12), rng.normal(0, 0.2, 12)
        across, along = _tap_tables(dx, dy, sigma)
        for joint, alone in zip((across, along), (_tap_table(dx, sigma), _tap_table(dy, sigma))):
            for h in range(12):
                c = alone[2][h]
                assert joint[2][h] == c
                assert joint[0][h, :c].tolist() == alone[0][h, :c].tolist()
                assert joint[1][h, :c].tolist() == alone[1][h, :c].tolist()
