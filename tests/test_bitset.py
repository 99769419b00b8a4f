import numpy as np
import pytest

from fusion.belief import bitset
from fusion.errors import CellIndexError


@pytest.mark.parametrize("n", [1, 63, 64, 65, 130, 1000])
def test_pack_unpack_round_trip_and_cardinality(n):
    rng = np.random.default_rng(n)
    masks = rng.random((5, n)) < 0.3
    words = bitset.pack_masks(masks)
    assert words.shape == (5, bitset.n_words(n)) and words.dtype == bitset.WORD
    np.testing.assert_array_equal(bitset.unpack(words, n), masks)
    # Reference: numpy's own count of true entries.
    np.testing.assert_array_equal(bitset.cardinality(words), np.count_nonzero(masks, axis=1))


def test_full_has_no_bits_past_the_frame():
    for n in (1, 64, 70):
        words = bitset.full(n)
        assert bitset.cardinality(words) == n
        assert bitset.indices(words, n).tolist() == list(range(n))


def test_pack_indices_refuses_cells_outside_the_frame():
    with pytest.raises(CellIndexError, match="cell index 10 is outside the frame of 10 cells"):
        bitset.pack_indices([1, 10], 10)
    with pytest.raises(CellIndexError, match="outside"):
        bitset.pack_indices([-1], 10)
    with pytest.raises(CellIndexError, match="integers"):
        bitset.pack_indices([0.5], 10)
    with pytest.raises(CellIndexError, match="one entry per cell"):
        bitset.pack_indices(np.ones(3, dtype=bool), 10)


def test_fingerprint_is_equal_for_equal_sets_and_deterministic():
    rng = np.random.default_rng(1)
    words = bitset.pack_masks(rng.random((50, 300)) < 0.5)
    fp = bitset.fingerprint(np.vstack([words, words]))
    np.testing.assert_array_equal(fp[:50], fp[50:])
    assert len(np.unique(fp[:50])) == 50
    assert bitset.fingerprint(words).tolist() == fp[:50].tolist()


def test_intersection_counts_match_numpy():
    rng = np.random.default_rng(5)
    a = rng.random((4, 70_000)) < 0.5
    b = rng.random((3, 70_000)) < 0.3
    counts = bitset.intersection_counts(bitset.pack_masks(a), bitset.pack_masks(b))
    np.testing.assert_array_equal(counts, (a[:, None, :] & b[None, :, :]).sum(axis=2))


@pytest.mark.parametrize("n", [1, 63, 64, 65, 1000])
def test_rows_packed_one_at_a_time_equal_the_packed_table(n):
    # pack_rows builds no (count, n) table of booleans; its words equal numpy's packbits of that table, with the
    # bits past cell n − 1 zero.
    rng = np.random.default_rng(n)
    masks = rng.random((5, n)) < 0.4
    rows = bitset.pack_rows(n, 5, lambda i, out: np.copyto(out, masks[i]))
    np.testing.assert_array_equal(rows, bitset.pack_masks(masks))
    np.testing.assert_array_equal(bitset.unpack(rows, n), masks)
    assert bitset.pack_rows(n, 0, None).shape == (0, bitset.n_words(n))
