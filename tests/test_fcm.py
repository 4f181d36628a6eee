"""Specification of the fuzzy c-means engine (gloam.fcm).

External references used here:
- scikit-fuzzy's ``cmeans`` (PyPI reference implementation, used only in tests);
- Fisher's iris data as shipped by scikit-learn (``sklearn.datasets.load_iris``);
- scikit-learn's ``adjusted_rand_score`` and ``make_blobs``;
- Bezdek (1981), *Pattern Recognition with Fuzzy Objective Function Algorithms*, for the
  update equations and the monotone decrease of the objective.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import skfuzzy
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from sklearn.datasets import load_iris, make_blobs
from sklearn.metrics import adjusted_rand_score

from gloam.errors import ConvergenceWarning, GloamError
from gloam.fcm import (
    fuzzy_cmeans,
    kmeanspp_centroids,
    objective,
    predict_memberships,
    random_memberships,
    squared_distances,
)


def _random_start(n: int, c: int, seed: int) -> np.ndarray:
    return random_memberships(1, n, c, rng=np.random.default_rng(seed))[0]


@pytest.mark.parametrize("m", [1.25, 1.6, 2.0, 3.0])
def test_same_iterate_as_scikit_fuzzy_within_1e_10(m):
    """Reference: scikit-fuzzy ``cmeans`` (centroids first, then memberships), same start,
    same number of iterations; agreement within 1e-10.  Plain iteration (``acceleration=
    "none"``): the accelerated path is checked against the optimum in test_acceleration."""
    rng = np.random.default_rng(7)
    X = rng.normal(size=(400, 8))
    U0 = _random_start(400, 5, seed=3)
    iterations = 40
    ours = fuzzy_cmeans(
        X, 5, m, initial_memberships=U0, tol=0, max_iter=iterations, acceleration="none"
    )
    centroids, memberships, *_ = skfuzzy.cmeans(
        X.T, 5, m, error=0, maxiter=iterations, init=U0.T.copy()
    )
    assert ours.n_iter[0] == iterations
    assert_allclose(ours.centroids[0], centroids, rtol=0, atol=1e-10)
    assert_allclose(ours.memberships[0], memberships.T, rtol=0, atol=1e-10)


def test_iris_species_recovered_as_well_as_scikit_fuzzy():
    """Reference: Fisher's iris (scikit-learn), c = 3, m = 2; hard labels are compared with
    the species by the adjusted Rand index, against scikit-fuzzy run from the same starts."""
    X = load_iris().data
    species = load_iris().target
    starts = random_memberships(5, X.shape[0], 3, rng=np.random.default_rng(11))
    ours = fuzzy_cmeans(X, 3, 2.0, initial_memberships=starts, tol=1e-8, max_iter=1000)
    for index in range(5):
        _, reference_u, *_ = skfuzzy.cmeans(
            X.T, 3, 2.0, error=1e-10, maxiter=1000, init=starts[index].T.copy()
        )
        ours_ari = adjusted_rand_score(species, ours.memberships[index].argmax(axis=1))
        reference_ari = adjusted_rand_score(species, reference_u.argmax(axis=0))
        assert ours_ari == pytest.approx(reference_ari, abs=1e-12)
    best_ari = adjusted_rand_score(species, ours.best().memberships.argmax(axis=1))
    # From memory: fuzzy c-means with m = 2 on iris reaches an ARI of about 0.7.
    assert best_ari > 0.65


def test_each_start_equals_a_single_start_run_from_the_same_memberships():
    rng = np.random.default_rng(5)
    X = rng.normal(size=(300, 6))
    starts = random_memberships(4, 300, 4, rng=rng)
    together = fuzzy_cmeans(X, 4, 1.7, initial_memberships=starts, tol=1e-6, max_iter=400)
    for index in range(4):
        alone = fuzzy_cmeans(X, 4, 1.7, initial_memberships=starts[index], tol=1e-6, max_iter=400)
        assert alone.n_iter[0] == together.n_iter[index]
        assert_allclose(alone.memberships[0], together.memberships[index], rtol=0, atol=1e-12)
        assert_allclose(alone.objectives[0], together.objectives[index], rtol=1e-12)
    assert together.best_index == int(np.argmin(together.objectives))


def test_reported_objective_matches_its_definition():
    """J_m = sum u^m ||x - v||^2 (Bezdek 1981) for the returned pair."""
    rng = np.random.default_rng(2)
    X = rng.normal(size=(250, 5))
    result = fuzzy_cmeans(X, 3, 1.8, n_starts=3, rng=4, tol=1e-5, max_iter=2000)
    for index in range(3):
        part = result.start(index)
        assert part.objective == pytest.approx(
            objective(X, part.centroids, part.memberships, 1.8), rel=1e-10
        )


def test_same_seed_same_result_and_different_seed_different_start():
    X = np.random.default_rng(0).normal(size=(200, 4))
    first = fuzzy_cmeans(X, 3, 2.0, n_starts=3, rng=42)
    again = fuzzy_cmeans(X, 3, 2.0, n_starts=3, rng=42)
    other = fuzzy_cmeans(X, 3, 2.0, n_starts=3, rng=43)
    assert_allclose(first.memberships, again.memberships, rtol=0, atol=0)
    assert not np.allclose(first.objectives, other.objectives, rtol=0, atol=1e-12)


def test_kmeanspp_start_recovers_separated_blobs():
    """Reference: scikit-learn ``make_blobs`` truth, adjusted Rand index 1."""
    X, truth = make_blobs(n_samples=600, centers=4, n_features=5, cluster_std=0.5, random_state=0)
    result = fuzzy_cmeans(X, 4, 1.5, n_starts=4, init="kmeans++", rng=0)
    assert adjusted_rand_score(truth, result.best().memberships.argmax(axis=1)) == 1.0
    seeds = kmeanspp_centroids(X, 4, 3, rng=np.random.default_rng(0))
    assert seeds.shape == (3, 4, 5)
    # Every seed is a data row.
    assert np.all((squared_distances(X, seeds.reshape(-1, 5)) < 1e-12).any(axis=0))


def test_float32_elementwise_part_agrees_with_float64_within_1e_6():
    rng = np.random.default_rng(9)
    X = rng.normal(size=(2000, 12))
    starts = random_memberships(2, 2000, 8, rng=rng)
    exact = fuzzy_cmeans(X, 8, 1.6, initial_memberships=starts, tol=0, max_iter=100)
    fast = fuzzy_cmeans(
        X, 8, 1.6, initial_memberships=starts, tol=0, max_iter=100, precision="float32"
    )
    assert np.abs(fast.memberships - exact.memberships).max() < 1e-6


def test_predicted_memberships_of_clustered_rows_equal_the_fit():
    rng = np.random.default_rng(1)
    X = rng.normal(size=(300, 6))
    part = fuzzy_cmeans(X, 4, 1.9, rng=1, tol=1e-9, max_iter=2000).best()
    predicted = predict_memberships(X, part.centroids, 1.9)
    assert_allclose(predicted, part.memberships, rtol=0, atol=1e-12)
    new_rows = rng.normal(size=(50, 6))
    assert_allclose(predict_memberships(new_rows, part.centroids, 1.9).sum(axis=1), 1.0, atol=1e-12)


def test_row_on_a_centroid_gets_membership_one_and_no_nan():
    # Two tight groups of identical rows: each centroid sits exactly on its group's rows.
    X = np.vstack([np.tile([0.0, 0.0, 1.0], (10, 1)), np.tile([5.0, 5.0, -1.0], (10, 1))])
    result = fuzzy_cmeans(X, 2, 2.0, n_starts=3, rng=0)
    for index in range(3):
        U = result.memberships[index]
        assert np.isfinite(U).all()
        assert_allclose(np.sort(U, axis=1)[:, -1], 1.0, atol=1e-12)
    predicted = predict_memberships(np.array([[0.0, 0.0, 1.0]]), result.best().centroids, 2.0)
    assert_allclose(np.sort(predicted[0]), [0.0, 1.0], atol=1e-12)


def test_row_on_two_coinciding_centroids_is_split_evenly():
    centroids = np.array([[1.0, 2.0], [1.0, 2.0], [4.0, 0.0]])
    U = predict_memberships(np.array([[1.0, 2.0], [3.0, 3.0]]), centroids, 2.0)
    assert_allclose(U[0], [0.5, 0.5, 0.0], atol=1e-12)
    assert_allclose(U[1, 0], U[1, 1], rtol=1e-12)


def test_warns_when_stopped_before_tolerance():
    X = np.random.default_rng(0).normal(size=(200, 5))
    with pytest.warns(ConvergenceWarning, match="max_iter=2"):
        result = fuzzy_cmeans(X, 3, 2.0, max_iter=2, tol=1e-12, rng=0)
    assert not result.converged[0]
    assert result.n_iter[0] == 2


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"n_clusters": 1}, "n_clusters must satisfy 2 <= n_clusters < n_genes"),
        ({"n_clusters": 30}, "n_clusters must satisfy"),
        ({"m": 1.0}, "fuzzifier m must be a finite number > 1"),
        ({"m": float("nan")}, "fuzzifier m"),
        ({"tol": -1.0}, "tol must be"),
        ({"max_iter": 0}, "max_iter must be"),
        ({"n_starts": 0}, "n_starts must be"),
        ({"init": "spectral"}, "init must be one of"),
        ({"precision": "float16"}, "precision must be one of"),
    ],
)
def test_invalid_parameters_raise_one_clear_error(kwargs, message):
    X = np.random.default_rng(0).normal(size=(30, 3))
    arguments = {"n_clusters": 3, "m": 2.0} | kwargs
    with pytest.raises(GloamError, match=message):
        fuzzy_cmeans(X, arguments.pop("n_clusters"), arguments.pop("m"), **arguments)


def test_non_finite_data_names_the_row():
    X = np.random.default_rng(0).normal(size=(30, 3))
    X[7, 1] = np.nan
    with pytest.raises(GloamError, match="first: row 7"):
        fuzzy_cmeans(X, 3, 2.0)


def test_bad_initial_memberships_are_rejected():
    X = np.random.default_rng(0).normal(size=(30, 3))
    with pytest.raises(GloamError, match="must sum to 1"):
        fuzzy_cmeans(X, 3, 2.0, initial_memberships=np.full((30, 3), 0.5))
    with pytest.raises(GloamError, match="must have shape"):
        fuzzy_cmeans(X, 3, 2.0, initial_memberships=np.full((29, 3), 1 / 3))


# ---------------------------------------------------------------------------------------------
# Properties (hypothesis)
# ---------------------------------------------------------------------------------------------

data_shapes = st.tuples(st.integers(5, 60), st.integers(1, 6), st.integers(0, 10_000))


@settings(max_examples=40, deadline=None)
@given(shape=data_shapes, m=st.floats(1.1, 4.0), c_fraction=st.floats(0.0, 1.0))
def test_rows_sum_to_one_and_stay_in_unit_interval(shape, m, c_fraction):
    n, d, seed = shape
    c = 2 + int(c_fraction * (n - 3))  # anything from 2 to n - 1, c close to n included
    X = np.random.default_rng(seed).normal(size=(n, d))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        result = fuzzy_cmeans(X, c, m, n_starts=2, rng=seed, max_iter=100)
    U = result.memberships
    assert np.isfinite(U).all() and np.isfinite(result.centroids).all()
    assert_allclose(U.sum(axis=2), 1.0, atol=1e-12)
    assert U.min() >= 0.0 and U.max() <= 1.0 + 1e-12


@settings(max_examples=25, deadline=None)
@given(shape=data_shapes, m=st.floats(1.2, 3.0), c=st.integers(2, 5))
def test_objective_never_rises_between_iterations(shape, m, c):
    """Bezdek (1981): each half-step minimises J_m over one block, so J_m cannot rise."""
    n, d, seed = shape
    if c >= n:
        return
    X = np.random.default_rng(seed).normal(size=(n, d))
    U0 = _random_start(n, c, seed)
    values = [
        fuzzy_cmeans(X, c, m, initial_memberships=U0, tol=0, max_iter=k).objectives[0]
        for k in range(1, 12)
    ]
    assert np.all(np.diff(values) <= 1e-9 * (1 + abs(values[0])))


@settings(max_examples=25, deadline=None)
@given(shape=data_shapes, seed=st.integers(0, 1000))
def test_relabelling_the_start_relabels_the_result(shape, seed):
    n, d, data_seed = shape
    c = min(4, n - 1)
    X = np.random.default_rng(data_seed).normal(size=(n, d))
    U0 = _random_start(n, c, seed)
    permutation = np.random.default_rng(seed).permutation(c)
    # Plain iteration is equivariant to rounding; the SQUAREM safeguard compares two
    # objectives, and where they tie to rounding (near convergence) a relabelled run may
    # take the other branch, which moves results by far less than tol-level amounts.
    for acceleration, atol in (("none", 1e-10), ("squarem", 1e-6)):
        kwargs = {"tol": 0, "max_iter": 30, "acceleration": acceleration}
        plain = fuzzy_cmeans(X, c, 2.0, initial_memberships=U0, **kwargs)
        permuted = fuzzy_cmeans(X, c, 2.0, initial_memberships=U0[:, permutation], **kwargs)
        assert_allclose(permuted.memberships[0], plain.memberships[0][:, permutation], atol=atol)
        assert_allclose(permuted.centroids[0], plain.centroids[0][permutation], atol=atol)


@settings(max_examples=25, deadline=None)
@given(n_distinct=st.integers(3, 10), copies=st.integers(2, 6), seed=st.integers(0, 1000))
def test_duplicate_rows_get_identical_memberships(n_distinct, copies, seed):
    rng = np.random.default_rng(seed)
    X = np.repeat(rng.normal(size=(n_distinct, 3)), copies, axis=0)
    c = min(3, n_distinct)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        result = fuzzy_cmeans(X, c, 1.8, n_starts=2, rng=seed, max_iter=200)
    U = result.memberships.reshape(2, n_distinct, copies, c)
    assert np.isfinite(U).all()
    assert_allclose(U, np.repeat(U[:, :, :1, :], copies, axis=2), atol=1e-12)


# ---------------------------------------------------------------------------------------------
# Pruning, the objective stop, threads and the order of the random draws
# ---------------------------------------------------------------------------------------------


def _blobs_with_poor_starts() -> np.ndarray:
    """Well separated blobs (scikit-learn ``make_blobs``): random starts reach several local
    optima, so some starts trail the best one by far."""
    X, _ = make_blobs(n_samples=1500, centers=8, n_features=6, cluster_std=1.0, random_state=3)
    return X


@pytest.mark.parametrize("precision", ["fast", "float64"])
def test_pruning_never_changes_the_best_start_bit_for_bit(precision):
    X = _blobs_with_poor_starts()
    n_pruned = 0
    # The NumPy path is slower: two of the cases suffice there.
    cases = [(6, 0), (8, 1), (8, 2), (10, 3)] if precision == "fast" else [(8, 1), (10, 3)]
    for c, seed in cases:
        # Plain iteration: accelerated starts converge before the rule has anything to prune.
        kwargs = {
            "n_starts": 12,
            "tol": 1e-7,
            "max_iter": 300,
            "precision": precision,
            "acceleration": "none",
        }
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ConvergenceWarning)
            plain = fuzzy_cmeans(X, c, 1.6, rng=seed, **kwargs)
            pruned = fuzzy_cmeans(X, c, 1.6, rng=seed, prune=True, **kwargs)
        assert pruned.best_index == plain.best_index
        best = plain.best_index
        assert np.array_equal(pruned.memberships[best], plain.memberships[best])
        assert np.array_equal(pruned.centroids[best], plain.centroids[best])
        assert pruned.objectives[best] == plain.objectives[best]
        assert pruned.n_iter[best] == plain.n_iter[best]
        # Starts that go on are untouched too: every start not pruned equals its plain run.
        kept = ~pruned.pruned
        assert np.array_equal(pruned.memberships[kept], plain.memberships[kept])
        assert not plain.pruned.any()
        n_pruned += int(pruned.pruned.sum())
    # The check above has teeth only if the rule prunes something on these data.
    assert n_pruned > 0


def test_pruned_starts_are_flagged_never_converged_and_keep_a_consistent_last_iterate():
    """The objective of a pruned start is J_m (Bezdek 1981) of its returned pair."""
    X = _blobs_with_poor_starts()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        result = fuzzy_cmeans(
            X, 8, 1.6, n_starts=12, rng=1, tol=1e-7, prune=True, acceleration="none"
        )
    assert result.pruned.any()
    assert not (result.pruned & result.converged).any()
    assert not result.pruned[result.best_index]
    for index in np.flatnonzero(result.pruned):
        part = result.start(index)
        assert part.pruned and not part.converged
        assert part.objective == pytest.approx(
            objective(X, part.centroids, part.memberships, 1.6), rel=1e-10
        )
        # A pruned start trailed the best by more than the margin when it was stopped.
        assert part.objective > result.objectives[result.best_index] * (1 + 0.01)
        assert_allclose(part.memberships.sum(axis=1), 1.0, atol=1e-12)


@pytest.mark.parametrize("precision", ["fast", "float64"])
def test_thread_counts_give_the_results_of_one_thread(precision):
    rng = np.random.default_rng(4)
    X = rng.normal(size=(3000, 7))
    kwargs = {"n_starts": 5, "rng": 9, "tol": 1e-6, "max_iter": 200, "precision": precision}
    one = fuzzy_cmeans(X, 6, 1.5, n_threads=1, **kwargs)
    for threads in (2, 3):
        many = fuzzy_cmeans(X, 6, 1.5, n_threads=threads, **kwargs)
        assert_allclose(many.memberships, one.memberships, rtol=0, atol=1e-12)
        assert_allclose(many.centroids, one.centroids, rtol=0, atol=1e-12)
        assert_allclose(many.objectives, one.objectives, rtol=1e-12)
        assert np.array_equal(many.n_iter, one.n_iter)


def test_random_starts_are_the_documented_draws_in_order():
    """n_starts random starts equal ``random_memberships`` drawn from the same seed."""
    X = np.random.default_rng(0).normal(size=(400, 5))
    drawn = fuzzy_cmeans(X, 4, 1.8, n_starts=3, rng=12, tol=0, max_iter=40)
    starts = random_memberships(3, 400, 4, rng=np.random.default_rng(12))
    given_starts = fuzzy_cmeans(X, 4, 1.8, initial_memberships=starts, tol=0, max_iter=40)
    assert np.array_equal(drawn.memberships, given_starts.memberships)


def test_objective_stop_stops_at_the_first_small_relative_decrease():
    """Common practice: stop when J_{t-1} - J_t <= objective_tol * J_t.  The objectives of
    the iterations before the stop come from runs with fewer iterations (same start)."""
    rng = np.random.default_rng(6)
    X = rng.normal(size=(600, 4))
    U0 = _random_start(600, 5, seed=2)
    stopped = fuzzy_cmeans(X, 5, 2.0, initial_memberships=U0, tol=0, objective_tol=1e-6)
    t = int(stopped.n_iter[0])
    assert stopped.converged[0] and 2 < t < 500

    def J(k):
        return fuzzy_cmeans(X, 5, 2.0, initial_memberships=U0, tol=0, max_iter=k).objectives[0]

    assert stopped.objectives[0] == J(t)
    assert J(t - 1) - J(t) <= 1e-6 * J(t)
    assert J(t - 2) - J(t - 1) > 1e-6 * J(t - 1)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"objective_tol": -1e-3}, "objective_tol must be"),
        ({"prune": "yes"}, "prune must be True or False"),
        ({"prune_margin": 0.0}, "prune_margin must be"),
        ({"prune_window": 0}, "prune_window must be"),
        ({"n_threads": 0}, "n_threads must be"),
        ({"acceleration": "aitken"}, "acceleration must be one of"),
    ],
)
def test_invalid_stopping_options_raise_one_clear_error(kwargs, message):
    X = np.random.default_rng(0).normal(size=(30, 3))
    with pytest.raises(GloamError, match=message):
        fuzzy_cmeans(X, 3, 2.0, **kwargs)
