"""Aligning starts, consensus memberships, stability and the order of clusters.

Sources: the assignment problem solved by the Hungarian method (Kuhn 1955, Naval Research
Logistics Quarterly 2:83) for alignment — checked by recovering a known permutation and against
an exhaustive search over all permutations; Fisher's iris data shipped by scikit-learn (PyPI)
for a real multi-start run; scikit-fuzzy's ``cmeans`` (PyPI) as the reference level of
agreement with the species; scikit-learn's ``adjusted_rand_score`` (PyPI) as the measure.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import skfuzzy
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal
from sklearn.datasets import load_iris
from sklearn.metrics import adjusted_rand_score

from gloam.consensus import (
    align_starts,
    alignment_permutations,
    cluster_names,
    consensus_partition,
    membership_table,
    order_clusters_by_peak_time,
    reorder,
)
from gloam.errors import GloamError
from gloam.fcm import MultiStartResult, fuzzy_cmeans


def _memberships(rng: np.random.Generator, n: int, c: int, sharpness: float = 4.0) -> np.ndarray:
    logits = sharpness * rng.normal(size=(n, c))
    U = np.exp(logits - logits.max(axis=1, keepdims=True))
    return U / U.sum(axis=1, keepdims=True)


# --- alignment --------------------------------------------------------------------------------


@settings(max_examples=60, deadline=None)
@given(
    n_starts=st.integers(1, 5),
    c=st.integers(2, 9),
    reference=st.integers(0, 4),
    seed=st.integers(0, 2**32 - 1),
)
def test_alignment_undoes_a_random_relabelling_of_every_start(n_starts, c, reference, seed):
    """Kuhn (1955): relabelling a partition's clusters is undone by maximum-overlap matching."""
    rng = np.random.default_rng(seed)
    reference = reference % n_starts
    truth = _memberships(rng, 200, c)
    labels = np.stack([rng.permutation(c) for _ in range(n_starts)])
    labels[reference] = np.arange(c)
    starts = np.stack([truth[:, p] for p in labels])
    starts += rng.uniform(0, 0.01, size=starts.shape)  # small disagreement between starts
    starts /= starts.sum(axis=2, keepdims=True)

    perm = alignment_permutations(starts, reference)
    aligned = np.take_along_axis(starts, perm[:, None, :], axis=2)
    for s in range(n_starts):
        # start s holds truth's cluster labels[s][k] in column k; aligning must invert that.
        assert_array_equal(labels[s][perm[s]], np.arange(c))
    # noise of at most 0.01 per entry, renormalised, moves a membership by at most c * 0.01
    assert np.abs(aligned - truth[None]).max() <= c * 0.01


@settings(max_examples=30, deadline=None)
@given(c=st.integers(2, 5), seed=st.integers(0, 2**32 - 1))
def test_alignment_maximises_total_overlap_like_an_exhaustive_search(c, seed):
    """The assignment problem's optimum, checked against all c! permutations."""
    rng = np.random.default_rng(seed)
    starts = np.stack([_memberships(rng, 30, c, sharpness=1.0) for _ in range(2)])
    perm = alignment_permutations(starts, 0)[1]
    overlap = starts[1].T @ starts[0]  # (cluster of start 1, cluster of reference)
    best = max(overlap[list(p), range(c)].sum() for p in itertools.permutations(range(c)))
    assert_allclose(overlap[perm, range(c)].sum(), best, rtol=1e-12)


def test_reference_start_keeps_its_labels_even_with_duplicate_clusters():
    U = np.full((1, 6, 3), 1.0 / 3.0)
    assert_array_equal(alignment_permutations(U, 0), [[0, 1, 2]])


def test_alignment_rejects_bad_input():
    with pytest.raises(GloamError):
        alignment_permutations(np.ones((4, 2)), 0)
    with pytest.raises(GloamError):
        alignment_permutations(np.full((2, 4, 2), 0.5), 2)


# --- order by peak time ------------------------------------------------------------------------


def test_clusters_are_ordered_by_the_time_of_their_peak_on_an_uneven_axis():
    times = np.array([0.0, 0.5, 1.0, 3.0, 8.0, 24.0])
    centroids = np.array(
        [
            [0, 0, 0, 0, 1, 0],  # peaks at 8 h
            [1, 0, 0, 0, 0, 0],  # peaks at 0 h
            [0, 0, 0, 2, 0, 0],  # peaks at 3 h
        ],
        dtype=float,
    )
    assert_array_equal(order_clusters_by_peak_time(centroids, times), [1, 2, 0])


def test_peak_order_follows_time_not_column_order():
    times = np.array([24.0, 0.0, 8.0])
    centroids = np.array([[3.0, 0.0, 0.0], [0.0, 0.0, 3.0], [0.0, 3.0, 0.0]])
    assert_array_equal(order_clusters_by_peak_time(centroids, times), [2, 1, 0])


def test_peak_ties_go_to_the_higher_peak_then_the_earlier_minimum_then_the_index():
    times = np.array([0.0, 1.0, 2.0, 3.0])
    centroids = np.array(
        [
            [2.0, 0.0, 0.0, -1.0],  # peak at 0 (height 2), minimum at 3
            [2.0, -1.0, 0.0, 0.0],  # peak at 0 (height 2), minimum at 1
            [3.0, 0.0, 0.0, -1.0],  # peak at 0 (height 3): first
            [2.0, -1.0, 0.0, 0.0],  # identical to cluster 1: after it by index
        ]
    )
    assert_array_equal(order_clusters_by_peak_time(centroids, times), [2, 1, 3, 0])


def test_peak_order_with_conditions_puts_the_first_condition_first():
    times = np.array([0.0, 4.0, 0.0, 4.0])
    conditions = ["warm", "warm", "cold", "cold"]
    centroids = np.array(
        [
            [0.0, 0.0, 0.0, 1.0],  # cold, 4 h
            [0.0, 1.0, 0.0, 0.0],  # warm, 4 h
            [0.0, 0.0, 1.0, 0.0],  # cold, 0 h
            [1.0, 0.0, 0.0, 0.0],  # warm, 0 h
        ]
    )
    order = order_clusters_by_peak_time(centroids, times, conditions)
    assert_array_equal(order, [3, 1, 2, 0])


def test_peak_order_rejects_mismatched_shapes():
    with pytest.raises(GloamError):
        order_clusters_by_peak_time(np.zeros((2, 3)), np.arange(4.0))
    with pytest.raises(GloamError):
        order_clusters_by_peak_time(np.zeros((2, 3)), np.arange(3.0), ["a", "b"])
    with pytest.raises(GloamError):
        order_clusters_by_peak_time(np.full((2, 3), np.nan), np.arange(3.0))


def test_cluster_names_are_one_based():
    assert cluster_names(3) == ["C1", "C2", "C3"]
    with pytest.raises(GloamError):
        cluster_names(0)


# --- consensus over real multi-start runs -------------------------------------------------------


def _relabelled_copies(partition, permutations) -> MultiStartResult:
    """A run whose starts are all the same solution under different cluster labels."""
    permutations = np.asarray(permutations)
    return MultiStartResult(
        centroids=np.stack([partition.centroids[p] for p in permutations]),
        memberships=np.stack([partition.memberships[:, p] for p in permutations]),
        objectives=np.full(len(permutations), partition.objective),
        n_iter=np.full(len(permutations), partition.n_iter),
        converged=np.ones(len(permutations), dtype=bool),
        m=partition.m,
        best_index=0,
    )


@pytest.fixture(scope="module")
def iris_run():
    X, species = load_iris(return_X_y=True)
    return X, species, fuzzy_cmeans(X, 3, 2.0, n_starts=12, rng=7, tol=1e-7)


def test_stability_is_one_and_sd_zero_when_all_starts_agree_up_to_labels(iris_run):
    """Relabelled copies of one solution: alignment (Kuhn 1955) recovers it in every start."""
    X, _, result = iris_run
    best = result.best()
    run = _relabelled_copies(best, [[0, 1, 2], [2, 0, 1], [1, 2, 0], [2, 1, 0]])
    consensus = consensus_partition(run)
    assert_array_equal(consensus.stability, 1.0)
    assert_allclose(consensus.membership_sd, 0.0, atol=1e-15)
    assert_allclose(consensus.memberships, best.memberships, rtol=0, atol=1e-15)
    assert_allclose(consensus.centroids, best.centroids, rtol=0, atol=0)
    aligned = align_starts(run)
    assert_allclose(aligned.centroids, np.broadcast_to(best.centroids, (4, 3, 4)), atol=0)


def test_stability_is_the_share_of_starts_agreeing_on_the_top_cluster():
    # Three starts that agree on gene 0 and disagree on gene 1 in one start of three.
    U = np.array(
        [
            [[0.9, 0.1], [0.8, 0.2], [0.5, 0.5], [0.1, 0.9]],
            [[0.8, 0.2], [0.7, 0.3], [0.6, 0.4], [0.2, 0.8]],
            [[0.9, 0.1], [0.3, 0.7], [0.4, 0.6], [0.0, 1.0]],
        ]
    )
    run = MultiStartResult(
        centroids=np.zeros((3, 2, 1)) + np.array([[0.0], [1.0]]),
        memberships=U,
        objectives=np.array([1.0, 2.0, 3.0]),
        n_iter=np.array([5, 5, 5]),
        converged=np.ones(3, dtype=bool),
        m=2.0,
        best_index=0,
    )
    consensus = consensus_partition(run)
    assert_allclose(consensus.memberships[1], [0.6, 0.4])
    assert_array_equal(consensus.top_cluster, [0, 0, 0, 1])
    # gene 2: mean (0.5, 0.5) ties -> first column; start tops are 0 (tie), 0, 1.
    assert_allclose(consensus.stability, [1.0, 2 / 3, 2 / 3, 1.0])
    assert_allclose(consensus.membership_sd[0], np.std([0.9, 0.8, 0.9]) * np.ones(2))
    assert_allclose(consensus.memberships.sum(axis=1), 1.0, rtol=1e-15)


def test_iris_consensus_agrees_with_the_species_as_well_as_scikit_fuzzy(iris_run):
    """Fisher's iris (scikit-learn) with c = 3, m = 2: the consensus top clusters match the
    species about as well as scikit-fuzzy's cmeans hard labels do (adjusted Rand index from
    scikit-learn), and the starts that reached the best objective align onto the best start."""
    X, species, result = iris_run
    consensus = consensus_partition(result)
    _, u, _, _, _, _, _ = skfuzzy.cmeans(X.T, 3, 2.0, error=1e-7, maxiter=1000, seed=0)
    reference = adjusted_rand_score(species, u.argmax(axis=0))
    assert adjusted_rand_score(species, consensus.top_cluster) >= reference - 0.02
    aligned = align_starts(result)
    same_optimum = np.isclose(result.objectives, result.objectives[result.best_index], rtol=1e-9)
    assert same_optimum.sum() >= 2
    deviation = np.abs(aligned.memberships[same_optimum] - aligned.memberships[result.best_index])
    assert deviation.max() < 1e-4


def test_reorder_keeps_genes_with_their_clusters(iris_run):
    X, _, result = iris_run
    consensus = consensus_partition(result)
    times = np.array([0.0, 1.0, 2.0, 4.0])  # treat iris' four measurements as an axis
    perm = order_clusters_by_peak_time(consensus.centroids, times)
    ordered = reorder(consensus, perm)
    assert_array_equal(ordered.top_cluster, ordered.memberships.argmax(axis=1))
    assert_array_equal(ordered.order, perm)
    assert_array_equal(ordered.centroids, consensus.centroids[perm])
    assert_array_equal(ordered.stability, consensus.stability)
    # Reordering again by the (already sorted) peak order changes nothing.
    again = order_clusters_by_peak_time(ordered.centroids, times)
    assert_array_equal(again, np.arange(3))
    with pytest.raises(GloamError, match="permutation"):
        reorder(consensus, [0, 0, 1])


def test_membership_table_has_the_documented_columns(iris_run):
    X, _, result = iris_run
    consensus = consensus_partition(result)
    genes = [f"g{i:03d}" for i in range(X.shape[0])]
    table = membership_table(consensus, genes)
    assert table.index.name == "gene"
    assert list(table.columns) == ["C1", "C2", "C3", "top_cluster", "top_membership", "stability"]
    assert_allclose(table[["C1", "C2", "C3"]].sum(axis=1), 1.0, rtol=1e-12)
    assert (table["top_cluster"] == table[["C1", "C2", "C3"]].idxmax(axis=1)).all()
    with pytest.raises(GloamError, match="repeat"):
        membership_table(consensus, ["g"] * X.shape[0])
    with pytest.raises(GloamError, match="gene IDs"):
        membership_table(consensus, genes[:-1])


def test_consensus_of_already_aligned_starts_equals_consensus_of_raw_starts():
    X = np.random.default_rng(3).normal(size=(200, 5))
    result = fuzzy_cmeans(X, 3, 1.8, n_starts=6, rng=2, tol=1e-6)
    direct = consensus_partition(result)
    from_aligned = consensus_partition(align_starts(result), already_aligned=True)
    np.testing.assert_array_equal(direct.memberships, from_aligned.memberships)
    np.testing.assert_array_equal(direct.stability, from_aligned.stability)
