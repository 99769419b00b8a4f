import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from strategies import frames_and_pairs, frames_and_triples, mass_functions
from support import assert_close, dense
from support import conjunctive as ref_conjunctive
from support import disjunctive as ref_disjunctive

from fusion.belief import rules
from fusion.belief.mass import MassFunction
from fusion.errors import FrameMismatchError, MassValueError, RuleError, TotalConflictError

A, B, C = (0,), (1,), (2,)


def zadeh():
    # Zadeh (1984), "Review of A Mathematical Theory of Evidence", AI Magazine 5(3): two experts,
    # three hypotheses, each almost sure of a different one and both nearly ruling out C.
    m1 = MassFunction.from_focal(3, {A: 0.99, C: 0.01})
    m2 = MassFunction.from_focal(3, {B: 0.99, C: 0.01})
    return m1, m2


# ---------------------------------------------------------------- published worked examples
def test_zadeh_conjunctive_keeps_the_conflict():
    joint = rules.conjunctive(*zadeh())
    assert_close(joint.conflict, 0.9999)  # K = 1 − 0.01 · 0.01
    assert_close(joint.mass(C), 0.0001)


def test_zadeh_dempster_puts_all_mass_on_c():
    m = rules.dempster(*zadeh())
    assert_close(m.mass(C), 1.0)
    assert len(m) == 1


def test_zadeh_yager_moves_conflict_to_the_frame():
    # Yager (1987), "On the Dempster–Shafer framework and new combination rules".
    m = rules.yager(*zadeh())
    assert_close(m.mass(C), 0.0001)
    assert_close(m.mass((0, 1, 2)), 0.9999)


def test_zadeh_dubois_prade_gives_conflicting_pairs_to_their_union():
    # Dubois & Prade (1988), "Representation and combination of uncertainty with belief functions
    # and possibility measures", Computational Intelligence 4.
    m = rules.dubois_prade(*zadeh())
    assert_close(m.mass(C), 0.0001)
    assert_close(m.mass((0, 1)), 0.9801)
    assert_close(m.mass((0, 2)), 0.0099)
    assert_close(m.mass((1, 2)), 0.0099)


def test_zadeh_pcr5():
    # Hand-computed from the PCR5 definition (Smarandache & Dezert 2005, "Information fusion based on
    # new proportional conflict redistribution rules"): A gets 0.99²·0.99/1.98 + 0.99²·0.01/1.00,
    # C gets 0.0001 + 2 · 0.01²·0.99/1.00.
    m = rules.pcr5(*zadeh())
    a = 0.99**3 / 1.98 + 0.99**2 * 0.01
    assert_close(m.mass(A), a)
    assert_close(m.mass(B), a)
    assert_close(m.mass(C), 0.0001 + 2 * 0.01**2 * 0.99)
    assert_close(m.masses.sum(), 1.0)


def test_zadeh_murphy():
    # Murphy (2000), "Combining belief functions when evidence conflicts": average (0.495, 0.495, 0.01),
    # then Dempster with itself; values hand-computed from that definition.
    m = rules.murphy(*zadeh())
    k = 1 - (0.495**2 + 0.495**2 + 0.01**2)
    assert_close(m.mass(A), 0.495**2 / (1 - k))
    assert_close(m.mass(C), 0.01**2 / (1 - k))


def test_shafer_discounting():
    # Shafer (1976), ch. 11: m^α(A) = (1 − α) m(A) for A ≠ Θ, m^α(Θ) = (1 − α) m(Θ) + α.
    m = MassFunction.from_focal(3, {A: 0.6, (0, 1): 0.3, (0, 1, 2): 0.1})
    d = rules.discount(m, reliability=0.8)
    assert_close(d.mass(A), 0.48)
    assert_close(d.mass((0, 1)), 0.24)
    assert_close(d.mass((0, 1, 2)), 0.8 * 0.1 + 0.2)
    assert rules.discount(m, 1.0) is m
    assert_close(rules.discount(m, 0.0).mass((0, 1, 2)), 1.0)


def test_dempster_on_bayesian_mass_functions_is_bayes_rule():
    # Shafer (1976), ch. 3: combining Bayesian mass functions by Dempster's rule multiplies and
    # renormalises the probabilities, which is Bayes' rule with a uniform prior.
    rng = np.random.default_rng(5)
    p1, p2 = rng.dirichlet(np.ones(9)), rng.dirichlet(np.ones(9))
    m = rules.dempster(MassFunction.bayesian(p1), MassFunction.bayesian(p2))
    assert m.is_bayesian
    assert_close(m.pignistic(), p1 * p2 / (p1 * p2).sum())


@settings(max_examples=100, deadline=None)
@given(frames_and_pairs())
def test_contour_of_dempster_is_proportional_to_the_product_of_contours(case):
    # Shafer (1976), ch. 3; used as the plausibility transform's defining property by
    # Cobb & Shenoy (2006), "On the plausibility transformation method for translating belief
    # function models to probability models".
    _, m1, m2 = case
    joint = rules.conjunctive(m1, m2)
    if joint.conflict > 1 - 1e-9:
        return
    product = m1.contour() * m2.contour()
    assert_close(rules.dempster(m1, m2).contour(), product / (1 - joint.conflict))


# ---------------------------------------------------------------- invariants against the dense reference
@settings(max_examples=150, deadline=None)
@given(frames_and_pairs(allow_empty=True))
def test_conjunctive_matches_the_commonality_product(case):
    # Smets (1990): q_{1∩2} = q1 · q2; the reference inverts it by Möbius transform on the power set.
    n, m1, m2 = case
    joint = rules.conjunctive(m1, m2)
    assert_close(dense(joint), ref_conjunctive(dense(m1), dense(m2), n), tol=1e-9)
    assert_close(joint.masses.sum(), 1.0)


@settings(max_examples=150, deadline=None)
@given(frames_and_pairs(allow_empty=True))
def test_disjunctive_matches_the_implicability_product(case):
    # Smets (1993), "Belief functions: the disjunctive rule of combination": b_{1∪2} = b1 · b2.
    n, m1, m2 = case
    assert_close(dense(rules.disjunctive(m1, m2)), ref_disjunctive(dense(m1), dense(m2), n), tol=1e-9)


@settings(max_examples=100, deadline=None)
@given(frames_and_pairs())
def test_conjunctive_and_disjunctive_commute(case):
    _, m1, m2 = case
    assert rules.conjunctive(m1, m2).is_close(rules.conjunctive(m2, m1), 1e-12)
    assert rules.disjunctive(m1, m2).is_close(rules.disjunctive(m2, m1), 1e-12)
    assert rules.pcr5(m1, m2).is_close(rules.pcr5(m2, m1), 1e-12)
    assert rules.dubois_prade(m1, m2).is_close(rules.dubois_prade(m2, m1), 1e-12)


@settings(max_examples=100, deadline=None)
@given(frames_and_triples())
def test_conjunctive_is_associative(case):
    _, m1, m2, m3 = case
    left = rules.conjunctive(rules.conjunctive(m1, m2), m3)
    right = rules.conjunctive(m1, rules.conjunctive(m2, m3))
    assert left.is_close(right, 1e-12)


@settings(max_examples=100, deadline=None)
@given(frames_and_pairs())
def test_every_rule_returns_masses_summing_to_one(case):
    _, m1, m2 = case
    for name in rules.RULES:
        options = {"if_total_conflict": "unnormalised"} if name in ("dempster", "murphy") else {}
        out = rules.combine(m1, m2, rule=name, **options)
        assert_close(out.masses.sum(), 1.0, what=name)
        assert (out.masses > 0).all()
        if name in ("dempster", "yager", "dubois_prade", "pcr5", "disjunctive") and out.conflict == 0:
            assert out.is_normal


# ---------------------------------------------------------------- total conflict
def test_total_conflict_raises_or_returns_the_unnormalised_result():
    m1, m2 = MassFunction.categorical(4, [0]), MassFunction.categorical(4, [1])
    with pytest.raises(TotalConflictError, match="total conflict"):
        rules.dempster(m1, m2)
    out = rules.dempster(m1, m2, if_total_conflict="unnormalised")
    assert_close(out.conflict, 1.0)
    with pytest.raises(TotalConflictError):
        rules.combine(m1, m2, rule="dempster")


# ---------------------------------------------------------------- reduction
@settings(max_examples=100, deadline=None)
@given(mass_functions(max_focal=12, allow_empty=True))
def test_reduction_caps_focal_sets_and_only_moves_mass_upwards(m):
    cap = 3
    red = rules.reduce_focal_sets(m, cap)
    out = red.mass_function
    assert (out.cardinalities > 0).sum() <= cap
    assert_close(out.masses.sum(), 1.0)
    assert_close(out.conflict, m.conflict)
    # Merging into a union never lowers a plausibility (Denœux 2001, outer approximation).
    assert (out.contour() >= m.contour() - 1e-12).all()
    nonempty = int((m.cardinalities > 0).sum())
    assert red.sets_merged == (nonempty - cap + 1 if nonempty > cap else 0)
    dropped = np.sort(m.masses[m.cardinalities > 0])[: red.sets_merged].sum()
    assert_close(red.mass_moved, dropped)


def test_reduction_reports_nothing_moved_when_under_the_cap():
    m = MassFunction.from_focal(3, {A: 0.5, B: 0.5})
    red = rules.reduce_focal_sets(m, 4)
    assert red.mass_function is m and red.mass_moved == 0.0 and red.sets_merged == 0


# ---------------------------------------------------------------- entry point and bad input
def test_combine_folds_many_sources():
    rng = np.random.default_rng(2)
    ps = [rng.dirichlet(np.ones(6)) for _ in range(4)]
    out = rules.combine(*[MassFunction.bayesian(p) for p in ps], rule="dempster")
    product = np.prod(ps, axis=0)
    assert_close(out.pignistic(), product / product.sum())
    ms = [MassFunction.bayesian(p) for p in ps[:3]]
    # Yager for n sources: the joint conjunctive result with its conflict on Θ, in any order.
    assert rules.combine(*ms, rule="yager").is_close(rules.combine(*ms[::-1], rule="yager"), 1e-12)


def test_combine_refuses_bad_requests():
    m1, m2 = zadeh()
    with pytest.raises(RuleError, match="unknown combination rule 'best'; choose one of: conjunctive"):
        rules.combine(m1, m2, rule="best")
    with pytest.raises(RuleError, match="two sources, got 3"):
        rules.combine(m1, m2, m1, rule="pcr5")
    with pytest.raises(RuleError, match="takes no options"):
        rules.combine(m1, m2, rule="yager", if_total_conflict="raise")
    with pytest.raises(FrameMismatchError):
        rules.combine(m1, MassFunction.vacuous(4))
    with pytest.raises(RuleError, match="not a MassFunction"):
        rules.combine(m1, {A: 1.0})
    with pytest.raises(MassValueError, match=r"reliability must lie in \[0, 1\]"):
        rules.discount(m1, 1.2)
    with pytest.raises(RuleError, match="max_focal"):
        rules.reduce_focal_sets(m1, 0)
    with pytest.raises(RuleError, match="normal mass functions"):
        rules.pcr5(rules.conjunctive(m1, m2), m1)


def test_combining_two_32_focal_set_mass_functions_on_a_million_cells():
    # The size the engine is built for; the timing is in the benchmark, not here.
    n = 1_000_000
    rng = np.random.default_rng(4)

    def random_nested(seed_shift):
        contour = np.clip(rng.random(n) + seed_shift, 0, 1)
        return MassFunction.from_contour(contour, levels=32)

    m1, m2 = random_nested(0.0), random_nested(0.1)
    assert len(m1) == 32 and len(m2) >= 28
    conflict = rules.conjunctive(m1, m2).conflict
    joint = rules.dempster(m1, m2)
    assert_close(joint.masses.sum(), 1.0)
    product = m1.contour() * m2.contour()  # Shafer (1976), ch. 3: contours multiply under Dempster's rule
    assert_close(joint.contour(), product / (1 - conflict), tol=1e-9)


@settings(max_examples=100, deadline=None)
@given(frames_and_pairs(allow_empty=True), st.integers(1, 6))
def test_one_pass_combine_and_cap_equals_the_two_steps(case, cap):
    _, m1, m2 = case
    one = rules.conjunctive_reduced(m1, m2, cap)
    two = rules.reduce_focal_sets(rules.conjunctive(m1, m2), cap)
    assert one.mass_function.is_close(two.mass_function, 1e-12)
    assert_close(one.mass_moved, two.mass_moved, tol=1e-12)
    assert one.sets_merged == two.sets_merged


# ---------------------------------------------------------------- exact merging under fingerprint collisions
def _conjunctive_by_definition(f1: dict, f2: dict) -> dict:
    # m(A) = Σ_{B∩C=A} m1(B) m2(C) (Smets 1990), on Python sets: no fingerprints, no packing.
    out: dict = {}
    for b, x in f1.items():
        for c, y in f2.items():
            out[b & c] = out.get(b & c, 0.0) + x * y
    return out


@pytest.mark.parametrize("n", [150, 700])
def test_different_sets_sharing_a_fingerprint_are_never_merged(monkeypatch, n):
    # A fingerprint that is only the set's size makes many different sets collide, within one batch and
    # across batches; the exact comparison behind every merge must keep them apart.
    from fusion.belief import bitset

    monkeypatch.setattr(bitset, "fingerprint", lambda w: np.bitwise_count(w).sum(axis=-1).astype(np.uint64))
    rng = np.random.default_rng(n)
    sizes = rng.integers(1, 4, 24)  # few sizes: most sets collide with another of their size
    masks = np.zeros((24, n), dtype=bool)
    for i, size in enumerate(sizes):
        masks[i, rng.choice(n // 10, size, replace=False)] = True  # small cells range: intersections repeat
    masks[12:15] = masks[0]  # and some sets really are equal
    w1, w2 = rng.random(12), rng.random(12)
    w1, w2 = w1 / w1.sum(), w2 / w2.sum()
    f1, f2 = {}, {}
    for f, rows, w in ((f1, masks[:12], w1), (f2, masks[12:], w2)):
        for row, x in zip(rows, w):
            key = frozenset(np.flatnonzero(row).tolist())
            f[key] = f.get(key, 0.0) + x
    m1 = MassFunction.from_focal(n, {tuple(sorted(k)): v for k, v in f1.items()})
    m2 = MassFunction.from_focal(n, {tuple(sorted(k)): v for k, v in f2.items()})
    got = {frozenset(fs.cells): fs.mass for fs in rules.conjunctive(m1, m2)}
    expected = {k: v for k, v in _conjunctive_by_definition(f1, f2).items() if v > 0}
    assert got.keys() == expected.keys()
    for key, value in expected.items():
        assert_close(got[key], value, tol=1e-12)


def test_a_cap_of_one_set_merges_everything_into_the_union_with_either_strategy():
    # With room for one set the nearest-set merge has no kept set to merge into: every non-empty set goes to the
    # union, as with merge="union" (an outer approximation, Denœux 2001); it used to raise a numpy error.
    m1 = MassFunction.from_focal(10, {(1, 2): 0.5, (2, 3): 0.3, (7,): 0.2})
    m2 = MassFunction.from_focal(10, {(2,): 0.5, (1, 2, 3): 0.5})
    nearest = rules.conjunctive_reduced(m1, m2, 1, "nearest")
    union = rules.conjunctive_reduced(m1, m2, 1, "union")
    assert nearest.mass_function.is_close(union.mass_function, 1e-15)
    assert {frozenset(fs.cells) for fs in nearest.mass_function} == {frozenset(), frozenset({1, 2, 3})}
    assert nearest.sets_merged == union.sets_merged
