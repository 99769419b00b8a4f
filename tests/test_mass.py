import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from strategies import mass_functions
from support import assert_close, bel, dense, pignistic, pl

from fusion.belief import bitset
from fusion.belief.mass import MassFunction
from fusion.errors import CellIndexError, FrameMismatchError, MassValueError, TotalConflictError


# ---------------------------------------------------------------- construction and queries
def test_queries_on_a_small_example_match_definitions():
    # Hand-computed from the definitions (Shafer 1976, ch. 2): Θ = {0, 1, 2}.
    m = MassFunction.from_focal(3, {(0,): 0.5, (0, 1): 0.3, (0, 1, 2): 0.2})
    assert_close(m.bel({0}), 0.5)
    assert_close(m.bel({0, 1}), 0.8)
    assert_close(m.pl({1}), 0.5)
    assert_close(m.pl({2}), 0.2)
    assert_close(m.q({0, 1}), 0.5)
    assert_close(m.q(set()), 1.0)
    assert_close(m.mass({0, 1}), 0.3)
    assert_close(m.contour(), [1.0, 0.5, 0.2])
    # BetP(0) = 0.5 + 0.3/2 + 0.2/3
    assert_close(m.pignistic(), [0.5 + 0.15 + 0.2 / 3, 0.15 + 0.2 / 3, 0.2 / 3])
    assert_close(m.plausibility_transform(), np.array([1.0, 0.5, 0.2]) / 1.7)
    assert len(m) == 3 and m.is_normal and not m.is_bayesian


def test_pignistic_of_a_subnormal_mass_function_renormalises_by_one_minus_conflict():
    # Smets & Kennes (1994), The transferable belief model: BetP(x) = Σ_{B∋x} m(B) / (|B| (1 − m(∅))).
    # Values hand-computed from that definition.
    m = MassFunction.from_focal(3, {(): 0.2, (0,): 0.4, (1, 2): 0.4})
    assert_close(m.conflict, 0.2)
    assert_close(m.pignistic(), [0.5, 0.25, 0.25])
    assert not m.is_normal


def test_vacuous_and_categorical():
    v = MassFunction.vacuous(5)
    assert_close(v.bel({0, 1}), 0.0)
    assert_close(v.pl({3}), 1.0)
    c = MassFunction.categorical(5, [1, 3])
    assert_close(c.bel({1, 3}), 1.0)
    assert_close(c.pignistic(), [0, 0.5, 0, 0.5, 0])


def test_equal_sets_given_twice_are_merged():
    m = MassFunction(3, np.vstack([bitset.pack_indices([0], 3)] * 2), np.array([0.25, 0.75]))
    assert len(m) == 1 and m.mass({0}) == 1.0


def test_masses_are_rescaled_to_sum_to_one():
    m = MassFunction.from_focal(2, {(0,): 0.3 + 5e-10, (1,): 0.7})
    assert abs(m.masses.sum() - 1.0) < 1e-15


def test_consonant_contour_round_trip():
    # Shafer (1976), ch. 10: a consonant mass function is fixed by its contour, pl({x}) = contour(x),
    # and its plausibility of a set is the maximum of the contour on that set.
    c = np.array([0.2, 1.0, 0.7, 0.7, 0.0, 0.4])
    m = MassFunction.from_contour(c)
    assert_close(m.contour(), c)
    assert_close(m.pl({0, 5}), 0.4)
    assert_close(m.conflict, 0.0)
    sets = [set(fs.cells.tolist()) for fs in m.focal_sets()]
    assert all(a <= b or b <= a for a in sets for b in sets), "focal sets of a consonant mass function nest"


def test_subnormal_contour_puts_the_gap_on_the_empty_set():
    m = MassFunction.from_contour([0.5, 0.25])
    assert_close(m.conflict, 0.5)
    assert_close(m.contour(), [0.5, 0.25])


def test_quantised_contour_never_loses_plausibility():
    # Outer approximation (Denœux 2001, Inner and outer approximation of belief structures):
    # rounding the contour up keeps every cell at least as plausible.
    rng = np.random.default_rng(3)
    c = rng.random(500)
    m = MassFunction.from_contour(c, levels=8)
    assert len(m) <= 9
    assert (m.contour() >= c - 1e-12).all()
    assert (m.contour() - c < 1 / 8 + 1e-12).all()


def test_from_likelihood_scales_by_the_maximum():
    m = MassFunction.from_likelihood(np.array([2e-5, 1e-5, 0.0]))
    assert_close(m.contour(), [1.0, 0.5, 0.0])


def test_bayesian_constructor():
    m = MassFunction.bayesian([0.2, 0.0, 0.8])
    assert m.is_bayesian and len(m) == 2
    assert_close(m.pignistic(), [0.2, 0.0, 0.8])


def test_is_close_within_tolerance():
    a = MassFunction.from_focal(3, {(0,): 0.5, (1, 2): 0.5})
    b = MassFunction.from_focal(3, {(0,): 0.5 + 1e-12, (1, 2): 0.5 - 1e-12})
    c = MassFunction.from_focal(3, {(0,): 0.5, (1,): 0.5})
    assert a.is_close(b) and not a.is_close(c)


def test_focal_set_iteration_and_repr():
    m = MassFunction.from_focal(70, {range(70): 0.1, (69,): 0.9})
    listed = m.focal_sets()
    assert listed[0].cells.tolist() == [69] and listed[0].mass == 0.9
    assert sorted(len(fs.cells) for fs in m) == [1, 70]
    assert "n=70" in repr(m) and "2 focal sets" in repr(m)


def test_mass_function_is_immutable():
    m = MassFunction.vacuous(4)
    with pytest.raises(ValueError):
        m.masses[0] = 0.5


# ---------------------------------------------------------------- invariants against the dense reference
@settings(max_examples=150, deadline=None)
@given(mass_functions(allow_empty=True), st.integers(0, 2**10 - 1))
def test_bel_pl_q_match_the_power_set_definitions(m, a):
    a &= 2**m.n - 1
    cells = [c for c in range(m.n) if a >> c & 1]
    vec = dense(m)
    assert_close(m.bel(cells), bel(vec, a))
    assert_close(m.pl(cells), pl(vec, a))
    assert_close(m.q(cells), sum(v for b, v in enumerate(vec) if (a & ~b) == 0))
    # Duality Pl(A) = 1 − m(∅) − Bel(Ā) (Shafer 1976, eq. 2.6, extended to m(∅) by Smets 1990).
    assert_close(m.pl(cells), 1 - m.conflict - m.bel([c for c in range(m.n) if c not in cells]))


@settings(max_examples=150, deadline=None)
@given(mass_functions(allow_empty=False), st.integers(0, 2**10 - 1))
def test_bel_le_betp_le_pl(m, a):
    # Smets & Kennes (1994): Bel(A) ≤ BetP(A) ≤ Pl(A) for a normal mass function.
    a &= 2**m.n - 1
    cells = [c for c in range(m.n) if a >> c & 1]
    betp = m.pignistic()
    assert_close(betp, pignistic(dense(m), m.n))
    assert_close(betp.sum(), 1.0)
    assert m.bel(cells) - 1e-12 <= betp[cells].sum() <= m.pl(cells) + 1e-12


# ---------------------------------------------------------------- bad input
@pytest.mark.parametrize(
    "focal, message",
    [
        ({(0,): -0.1, (1,): 1.1}, "negative"),
        ({(0,): float("nan"), (1,): 1.0}, "not a finite number"),
        ({(0,): 0.5, (1,): 0.4}, "sum to 0.9"),
        ({(0,): "half", (1,): 0.5}, "must be a number"),
        ({}, "non-empty mapping"),
    ],
)
def test_bad_masses_are_refused_with_a_clear_message(focal, message):
    with pytest.raises(MassValueError, match=message):
        MassFunction.from_focal(3, focal)


def test_cells_outside_the_frame_are_refused():
    with pytest.raises(CellIndexError, match="cell index 3 is outside the frame of 3 cells"):
        MassFunction.from_focal(3, {(0, 3): 1.0})
    with pytest.raises(CellIndexError):
        MassFunction.categorical(3, ["a"])


def test_bad_frames_and_mismatched_frames():
    with pytest.raises(MassValueError, match="whole number of cells"):
        MassFunction.vacuous(0)
    with pytest.raises(FrameMismatchError, match="over 4 cells but mass function 1 is over 3"):
        MassFunction.vacuous(3).is_close(MassFunction.vacuous(4))


def test_contour_and_likelihood_errors():
    with pytest.raises(MassValueError, match="cell 1 has 1.5"):
        MassFunction.from_contour([0.5, 1.5])
    with pytest.raises(MassValueError, match="non-finite"):
        MassFunction.from_contour([0.5, np.inf])
    with pytest.raises(MassValueError, match="levels=8"):
        MassFunction.from_contour(np.linspace(0.001, 1, 1000))
    with pytest.raises(TotalConflictError, match="zero on every cell"):
        MassFunction.from_likelihood([0.0, 0.0])
    with pytest.raises(TotalConflictError):
        MassFunction.from_focal(2, {(): 1.0}).pignistic()


# ---------------------------------------------------------------- large frames
def test_a_million_cell_frame_with_tens_of_focal_sets():
    n = 1_000_000
    rng = np.random.default_rng(11)
    focal = {}
    for k in range(30):
        lo = int(rng.integers(0, n - 50_000))
        focal[range(lo, lo + 1000 * (k + 1))] = 1.0
    total = len(focal)
    m = MassFunction.from_focal(n, {key: w / total for key, w in focal.items()})
    assert len(m) == 30 and m.sets.shape == (30, bitset.n_words(n))
    contour = m.contour()
    assert contour.shape == (n,)
    assert_close(m.pignistic().sum(), 1.0)
    assert_close(m.pl(range(n)), 1.0)
