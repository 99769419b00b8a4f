import numpy as np
import pytest
from scipy.special import logsumexp
from scipy.stats import entropy as scipy_entropy
from support import assert_close

from fusion.belief.posterior import Posterior
from fusion.errors import LikelihoodValueError, ZeroEvidenceError


def test_door_example():
    # Thrun, Burgard & Fox (2005), Probabilistic Robotics, §2.4.2: cells (open, closed), uniform prior,
    # p(sense open | open) = 0.6, p(sense open | closed) = 0.2.
    belief = Posterior.uniform(2)
    sense_open = np.array([0.6, 0.2])
    belief.update(sense_open)
    assert_close(belief.probabilities[0], 0.75)
    # Action "push": p(open | push, open) = 1, p(open | push, closed) = 0.8.
    push = np.array([[1.0, 0.8], [0.0, 0.2]])
    belief.set(push @ belief.probabilities)
    assert_close(belief.probabilities[0], 0.95)
    belief.update(sense_open)
    assert_close(belief.probabilities[0], 0.983, tol=5e-4)  # the book prints three decimals


def test_log_evidence_is_the_log_marginal_likelihood():
    # Sum of per-update log normalisers = log Σ_x p0(x) Π_t p(z_t | x) (chain rule of probability);
    # the reference is computed in one shot with scipy's logsumexp.
    rng = np.random.default_rng(0)
    n, steps = 50, 40
    prior = rng.dirichlet(np.ones(n))
    logliks = rng.normal(-3.0, 2.0, size=(steps, n))
    belief = Posterior(prior)
    per_step = [belief.update_log(ll) for ll in logliks]
    expected = logsumexp(np.log(prior) + logliks.sum(axis=0))
    assert_close(belief.log_evidence, expected, tol=1e-9)
    assert_close(sum(per_step), expected, tol=1e-9)
    posterior = np.exp(np.log(prior) + logliks.sum(axis=0) - expected)
    assert_close(belief.probabilities, posterior, tol=1e-12)


def test_long_runs_with_tiny_likelihoods_neither_underflow_nor_produce_nan():
    rng = np.random.default_rng(1)
    belief = Posterior.uniform(200)
    for _ in range(5000):
        lik = 1e-300 * (0.5 + rng.random(200))  # every product of two such numbers underflows
        belief.update(lik)
    p = belief.probabilities
    assert np.isfinite(p).all() and (p >= 0).all()
    assert_close(p.sum(), 1.0, tol=1e-12)
    assert np.isfinite(belief.log_evidence)
    assert belief.log_evidence < -5000 * 690  # each step carried its own log(1e-300) ≈ -690.8


def test_update_and_update_log_agree():
    rng = np.random.default_rng(2)
    lik = rng.random(30)
    a, b = Posterior.uniform(30), Posterior.uniform(30)
    assert_close(a.update(lik), b.update_log(np.log(lik)))
    assert_close(a.probabilities, b.probabilities, tol=1e-15)


def test_zero_evidence_is_reported_and_the_belief_kept():
    belief = Posterior.uniform(4, mask=[1, 1, 0, 0])
    before = belief.probabilities.copy()
    with pytest.raises(ZeroEvidenceError, match="zero evidence"):
        belief.update([0.0, 0.0, 0.7, 0.3])
    with pytest.raises(ZeroEvidenceError):
        belief.update_log([-np.inf] * 4)
    assert_close(belief.probabilities, before)


def test_entropy_map_and_region():
    belief = Posterior([0.1, 0.4, 0.2, 0.3])
    assert_close(belief.entropy(), scipy_entropy([0.1, 0.4, 0.2, 0.3]))  # scipy.stats.entropy, natural log
    assert_close(Posterior.uniform(8).entropy(), np.log(8))
    assert belief.map_cell() == 1
    assert belief.hpd_region(0.7).tolist() == [1, 3]
    assert belief.hpd_region(0.71).tolist() == [1, 2, 3]
    assert belief.hpd_region(1.0).tolist() == [0, 1, 2, 3]


@pytest.mark.parametrize(
    "values, error, message",
    [
        ([0.5, -0.1, 0.2], LikelihoodValueError, "cell 1 is negative"),
        ([0.5, np.nan, 0.2], LikelihoodValueError, "non-finite value nan at cell 1"),
        ([0.5, 0.2], LikelihoodValueError, r"one entry per cell \(3\)"),
        ("abc", LikelihoodValueError, "vector of numbers"),
    ],
)
def test_bad_likelihoods_are_refused(values, error, message):
    with pytest.raises(error, match=message):
        Posterior.uniform(3).update(values)


def test_bad_priors_and_regions():
    with pytest.raises(ZeroEvidenceError, match="zero probability to every cell"):
        Posterior([0.0, 0.0])
    with pytest.raises(LikelihoodValueError, match="whole number of cells"):
        Posterior.uniform(0)
    with pytest.raises(LikelihoodValueError, match="level"):
        Posterior.uniform(3).hpd_region(0.0)
    with pytest.raises(LikelihoodValueError, match=r"finite or -inf"):
        Posterior.uniform(2).update_log([np.inf, 0.0])


def test_a_belief_read_before_an_update_is_not_changed_by_it():
    belief = Posterior.uniform(3)
    before = belief.probabilities
    belief.update([0.2, 0.3, 0.5])
    belief.update([0.2, 0.3, 0.5])
    assert_close(before, [1 / 3] * 3)


def test_beliefs_read_between_steps_never_change_while_they_are_held():
    # The buffers the posterior reuses are only taken back once no view of them is left: every belief read
    # along a run of updates and predictions (in any shape) keeps its values, whatever is dropped meanwhile.
    rng = np.random.default_rng(3)
    belief = Posterior(rng.random(64))
    held = []
    for step in range(40):
        if step % 3 == 0:
            view = belief.probabilities
            held.append((view.reshape(8, 8) if step % 2 else view, view.copy()))
        if step % 7 == 6:
            held = held[::2]  # drop some, so their buffers may be taken back
        if step % 2:
            belief.update(rng.random(64))
        else:
            belief.move(lambda p, out: np.copyto(out, np.roll(p, 1) * 0.9))
        for view, values in held:
            assert np.array_equal(view.reshape(-1), values)


def test_a_prediction_is_renormalised_and_allocates_no_belief():
    # move(f) is set(f(p), owned=True): f's output times the reciprocal of its sum; once nothing holds the old
    # buffers, a step makes no new belief-sized array (traced by tracemalloc, which numpy reports to).
    import tracemalloc

    rng = np.random.default_rng(4)
    n = 200_000
    belief, reference = Posterior(rng.random(n)), Posterior(rng.random(n))
    reference.set(belief.probabilities)
    kernel = np.array([0.25, 0.5, 0.25])
    for _ in range(3):
        belief.move(lambda p, out: np.copyto(out, np.convolve(p, kernel, mode="same")))
        reference.set(np.convolve(reference.probabilities, kernel, mode="same"), owned=True)
        np.testing.assert_array_equal(belief.probabilities, reference.probabilities)
    belief.update(rng.random(n))  # the views read above are gone: their buffer is free again
    half = np.full(n, 0.5)
    tracemalloc.start()
    try:
        belief.update(half)
        belief.move(lambda p, out: np.multiply(p, 0.5, out=out))
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < n * 8 / 2


def test_a_prediction_that_holds_nothing_is_refused_and_the_belief_kept():
    belief = Posterior([0.2, 0.8])
    with pytest.raises(ZeroEvidenceError):
        belief.move(lambda p, out: out.fill(0.0))
    assert_close(belief.probabilities, [0.2, 0.8])


def test_a_large_update_normalises_by_the_lane_sums_of_its_product():
    # From COMPILED_FROM cells the normalising sum is the lane sums of the product, added up exactly (math.fsum,
    # Shewchuk 1997, "Adaptive precision floating-point arithmetic").  The lanes are checked against their
    # definition written as a plain loop, and the sum against the correctly rounded one: L lanes of m values each,
    # added in order, are off by at most (m − 1)·u·Σ|x| (Higham 2002, *Accuracy and Stability of Numerical
    # Algorithms*, §4.2), u = 2⁻⁵³.
    import math

    from fusion import compiled
    from fusion.belief.posterior import COMPILED_FROM, lane_sums

    width = compiled.SUM_LANES
    rng = np.random.default_rng(5)
    for n in (1, width - 1, width, width + 1, 3 * width + 7):
        values = rng.random(n) ** 4
        expected = [0.0] * width
        body = n - n % width
        for i in range(body):
            expected[i % width] += float(values[i])
        for i in range(body, n):
            expected[i - body] += float(values[i])
        assert lane_sums(values).tolist() == expected
    n = COMPILED_FROM * 17 + 5
    prior, likelihood = rng.random(n), rng.random(n) ** 3
    belief = Posterior(prior)
    product = belief.probabilities * likelihood
    step = belief.update(likelihood)
    exact = math.fsum(product.tolist())
    bound = (n // width) * 2.0**-53 * exact
    assert abs(math.exp(step) - exact) <= bound + 4 * 2.0**-53 * exact  # + the rounding of log and exp
    assert step == math.log(math.fsum(lane_sums(product).tolist()))
