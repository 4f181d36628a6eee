"""Validity indices and the rule that recommends c.

Sources: Bezdek (1981) "Pattern Recognition with Fuzzy Objective Function Algorithms" for the
partition coefficient/entropy and their bounds; Xie & Beni (1991) IEEE TPAMI 13:841 for the
Xie–Beni index; Fukuyama & Sugeno (1989) for their index; scikit-fuzzy (PyPI) for an independent
partition coefficient; scikit-learn's ``make_blobs`` (PyPI) for data with known structure.
"""

from __future__ import annotations

import math
import warnings
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
import skfuzzy
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from numpy.testing import assert_allclose
from sklearn.datasets import load_iris, make_blobs

from gloam.errors import ConvergenceWarning, GloamError
from gloam.fcm import fuzzy_cmeans
from gloam.validity import (
    VALIDITY_COLUMNS,
    fukuyama_sugeno,
    min_centroid_distance,
    partition_coefficient,
    partition_entropy,
    recommend_n_clusters,
    recommendation_reasons,
    validity_table,
    xie_beni,
)


def _random_memberships(rng: np.random.Generator, n: int, c: int) -> np.ndarray:
    U = rng.random((n, c)) + 1e-3
    return U / U.sum(axis=1, keepdims=True)


memberships = st.tuples(st.integers(1, 30), st.integers(2, 8), st.integers(0, 2**32 - 1)).map(
    lambda args: _random_memberships(np.random.default_rng(args[2]), args[0], args[1])
)


# --- Bezdek (1981): bounds and extreme cases of PC and PE ---------------------------------


@given(memberships)
def test_partition_coefficient_and_entropy_lie_within_bezdeks_bounds(U):
    """Bezdek (1981): 1/c <= PC <= 1 and 0 <= PE <= ln c for any fuzzy c-partition."""
    c = U.shape[1]
    pc, pe = partition_coefficient(U), partition_entropy(U)
    assert 1.0 / c - 1e-12 <= pc <= 1.0 + 1e-12
    assert -1e-12 <= pe <= math.log(c) + 1e-12


@pytest.mark.parametrize("c", [2, 3, 7])
def test_crisp_partition_has_pc_one_and_pe_zero(c):
    """Bezdek (1981): PC = 1 and PE = 0 exactly when the partition is crisp."""
    labels = np.arange(20) % c
    U = np.eye(c)[labels]
    assert partition_coefficient(U) == pytest.approx(1.0, abs=1e-15)
    assert partition_entropy(U) == pytest.approx(0.0, abs=1e-15)


@pytest.mark.parametrize("c", [2, 3, 7])
def test_uniform_partition_has_pc_one_over_c_and_pe_log_c(c):
    """Bezdek (1981): PC = 1/c and PE = ln c when every membership is 1/c."""
    U = np.full((15, c), 1.0 / c)
    assert partition_coefficient(U) == pytest.approx(1.0 / c, rel=1e-12)
    assert partition_entropy(U) == pytest.approx(math.log(c), rel=1e-12)


def test_partition_coefficient_matches_scikit_fuzzy():
    """scikit-fuzzy's cmeans returns the fuzzy partition coefficient of its final memberships."""
    X, _ = make_blobs(n_samples=120, centers=3, n_features=4, random_state=1)
    _, u, _, _, _, _, fpc = skfuzzy.cmeans(X.T, 3, 2.0, error=1e-6, maxiter=200, seed=0)
    assert_allclose(partition_coefficient(u.T), fpc, rtol=1e-12)


def test_partition_entropy_matches_the_formula_on_a_small_example():
    """Bezdek (1981): PE = -(1/n) sum u ln u, with 0 ln 0 = 0, written out by hand."""
    U = np.array([[0.5, 0.5, 0.0], [0.2, 0.3, 0.5]])
    expected = (
        -(2 * 0.5 * math.log(0.5) + 0.2 * math.log(0.2) + 0.3 * math.log(0.3) + 0.5 * math.log(0.5))
        / 2
    )
    assert partition_entropy(U) == pytest.approx(expected, rel=1e-14)


# --- Xie & Beni (1991) -------------------------------------------------------------------


def test_xie_beni_on_a_hand_computed_example():
    """Xie & Beni (1991), m = 2: XB = sum u^2 ||x - v||^2 / (n min ||v_i - v_k||^2).

    Points 0, 1, 9, 10 on a line, centroids 0.5 and 9.5, crisp memberships:
    compactness = 4 * 0.25 = 1, separation = 9^2 = 81, n = 4, so XB = 1 / 324.
    """
    X = np.array([[0.0], [1.0], [9.0], [10.0]])
    V = np.array([[0.5], [9.5]])
    U = np.array([[1.0, 0.0], [1.0, 0.0], [0.0, 1.0], [0.0, 1.0]])
    assert xie_beni(X, V, U, 2.0) == pytest.approx(1.0 / 324.0, rel=1e-14)


def test_xie_beni_with_fuzzy_memberships_on_a_hand_computed_example():
    """Xie & Beni (1991), m = 2, fuzzy memberships on two points and two centroids.

    x = (0, 2), v = (0, 2); u = [[0.75, 0.25], [0.25, 0.75]]:
    compactness = 0.25^2 * 4 + 0.25^2 * 4 = 0.5, separation = 4, n = 2, so XB = 0.0625.
    """
    X = np.array([[0.0], [2.0]])
    V = np.array([[0.0], [2.0]])
    U = np.array([[0.75, 0.25], [0.25, 0.75]])
    assert xie_beni(X, V, U, 2.0) == pytest.approx(0.0625, rel=1e-14)


def _xie_beni_by_loops(X, V, U, m):
    """The formula of Xie & Beni (1991) with u^m, written element by element."""
    n, c = U.shape
    compactness = sum(
        U[j, i] ** m * float(np.sum((X[j] - V[i]) ** 2)) for j in range(n) for i in range(c)
    )
    separation = min(
        float(np.sum((V[i] - V[k]) ** 2)) for i in range(c) for k in range(c) if i != k
    )
    return compactness / (n * separation)


def _fukuyama_sugeno_by_loops(X, V, U, m):
    """The formula of Fukuyama & Sugeno (1989), written element by element."""
    n, c = U.shape
    grand_mean = X.mean(axis=0)
    return sum(
        U[j, i] ** m * (float(np.sum((X[j] - V[i]) ** 2)) - float(np.sum((V[i] - grand_mean) ** 2)))
        for j in range(n)
        for i in range(c)
    )


@settings(max_examples=40, deadline=None)
@given(
    st.integers(2, 25),
    st.integers(2, 5),
    st.integers(1, 4),
    st.floats(1.1, 3.0),
    st.integers(0, 2**32 - 1),
)
def test_xie_beni_and_fukuyama_sugeno_match_their_formulas(n, c, d, m, seed):
    """Xie & Beni (1991) and Fukuyama & Sugeno (1989), against element-wise loops."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, d))
    V = rng.normal(size=(c, d))
    U = _random_memberships(rng, n, c)
    assert_allclose(xie_beni(X, V, U, m), _xie_beni_by_loops(X, V, U, m), rtol=1e-9)
    assert_allclose(
        fukuyama_sugeno(X, V, U, m), _fukuyama_sugeno_by_loops(X, V, U, m), rtol=1e-9, atol=1e-9
    )


def test_xie_beni_is_infinite_when_two_centroids_coincide():
    """Xie & Beni (1991): the separation term is zero, so the ratio is unbounded."""
    X = np.array([[0.0], [1.0], [2.0]])
    V = np.array([[1.0], [1.0]])
    U = np.full((3, 2), 0.5)
    assert xie_beni(X, V, U, 2.0) == math.inf


@given(
    arrays(np.float64, st.tuples(st.integers(2, 6), st.integers(1, 4)), elements=st.floats(-10, 10))
)
def test_min_centroid_distance_is_the_smallest_pairwise_squared_distance(V):
    """Schwämmle & Jensen (2010): min over pairs of squared Euclidean distance (loop reference)."""
    c = V.shape[0]
    expected = min(float(np.sum((V[i] - V[k]) ** 2)) for i in range(c) for k in range(i + 1, c))
    assert_allclose(min_centroid_distance(V), expected, rtol=1e-12, atol=1e-12)


# --- bad input -----------------------------------------------------------------------------


@pytest.mark.parametrize(
    "call",
    [
        lambda: partition_coefficient(np.ones(4)),
        lambda: partition_entropy(np.array([[0.5, np.nan]])),
        lambda: min_centroid_distance(np.zeros((1, 3))),
        lambda: xie_beni(np.zeros((4, 2)), np.zeros((2, 3)), np.full((4, 2), 0.5), 2.0),
        lambda: xie_beni(np.zeros((4, 2)), np.eye(2), np.full((4, 2), 0.5), 1.0),
        lambda: fukuyama_sugeno(np.zeros((4, 2)), np.eye(2), np.full((3, 2), 0.5), 2.0),
    ],
)
def test_bad_input_raises_one_gloam_error(call):
    with pytest.raises(GloamError):
        call()


# --- validity table and recommendation -----------------------------------------------------


def _skfuzzy_partitions(X, cs, m=2.0, n_seeds=5):
    """Best-of-``n_seeds`` partitions from scikit-fuzzy (a reference library), shaped like
    gloam's FuzzyPartition."""
    partitions = {}
    for c in cs:
        runs = [
            skfuzzy.cmeans(X.T, c, m, error=1e-7, maxiter=1000, seed=seed)
            for seed in range(n_seeds)
        ]
        centroids, u, _, _, jm, _, _ = min(runs, key=lambda run: run[4][-1])
        partitions[c] = SimpleNamespace(
            centroids=centroids, memberships=u.T, objective=float(jm[-1]), m=m
        )
    return partitions


def test_validity_table_has_documented_columns_and_one_row_per_c():
    X, _ = make_blobs(n_samples=90, centers=3, n_features=3, random_state=3)
    partitions = _skfuzzy_partitions(X, [4, 2, 3])
    table = validity_table(X, partitions, stability={2: 0.9, 3: 1.0, 4: 0.7})
    assert list(table.columns) == [*VALIDITY_COLUMNS, "mean_stability"]
    assert table["n_clusters"].tolist() == [2, 3, 4]
    assert table["mean_stability"].tolist() == [0.9, 1.0, 0.7]
    assert list(validity_table(X, partitions).columns) == list(VALIDITY_COLUMNS)


def test_validity_table_rejects_mismatched_keys_and_stability():
    X, _ = make_blobs(n_samples=30, centers=2, n_features=2, random_state=0)
    partitions = _skfuzzy_partitions(X, [2, 3])
    with pytest.raises(GloamError, match="stability"):
        validity_table(X, partitions, stability={2: 1.0})
    with pytest.raises(GloamError, match="clusters"):
        validity_table(X, {3: partitions[2]})
    with pytest.raises(GloamError):
        validity_table(X, {})


@pytest.mark.parametrize("random_state", [0, 1, 2])
def test_recommendation_picks_three_for_three_clear_blobs(random_state):
    """scikit-learn make_blobs (PyPI): three well-separated Gaussian groups; partitions from
    scikit-fuzzy's cmeans; the rule must recommend c = 3 out of 2..7."""
    X, _ = make_blobs(
        n_samples=300,
        centers=3,
        n_features=5,
        cluster_std=1.0,
        center_box=(-15, 15),
        random_state=random_state,
    )
    table = validity_table(X, _skfuzzy_partitions(X, range(2, 8)))
    assert recommend_n_clusters(table) == 3
    reasons = recommendation_reasons(table)
    assert reasons["chosen"].sum() == 1
    assert reasons.loc[reasons["n_clusters"] > 3, "eligible"].eq(False).all()


def _table(c, xb, distance):
    return pd.DataFrame({"n_clusters": c, "xie_beni": xb, "min_centroid_distance": distance})


def test_recommendation_takes_the_c_before_the_sharpest_fall():
    # distance ratios: 0.8 (2->3), 0.2 (3->4), 0.05 (4->5), 0.01 (5->6). Candidates halve the
    # distance from centroids still apart (previous >= 0.1 of the running maximum 10):
    # 3->4 and 4->5; 5->6 starts from 0.08, already collapsed. Sharpest: 4->5, so c = 4,
    # although the Xie–Beni index is smaller at c = 2.
    table = _table([2, 3, 4, 5, 6], [0.01, 0.20, 0.25, 3.0, 50.0], [10, 8, 1.6, 0.08, 0.0008])
    assert recommend_n_clusters(table) == 4
    reasons = recommendation_reasons(table)
    assert reasons["eligible"].tolist() == [True, True, True, False, False]
    assert reasons["chosen"].tolist() == [False, False, True, False, False]
    assert_allclose(reasons["distance_ratio"].to_numpy()[1:], [0.8, 0.2, 0.05, 0.01])
    # With a stricter candidate ratio only 4->5 and the excluded 5->6 remain: still c = 4.
    assert recommend_n_clusters(table, collapse_ratio=0.1) == 4


def test_recommendation_prefers_a_later_sharper_fall_to_an_earlier_milder_one():
    # An extra cluster can halve the distance early (2 -> 3 here, ratio 0.45) and the real
    # collapse come later (5 -> 6, ratio 0.2): the sharper fall wins, c = 5.
    table = _table(
        [2, 3, 4, 5, 6, 7], [0.3, 0.5, 0.4, 0.45, 1.7, 1.3], [13.0, 5.9, 5.8, 5.0, 1.0, 1.1]
    )
    assert recommend_n_clusters(table) == 5


def test_recommendation_without_collapse_takes_the_smallest_xie_beni_ties_to_smaller_c():
    table = _table([4, 3, 2], [0.1, 0.1, 0.2], [5.0, 5.0, 5.0])
    assert recommend_n_clusters(table) == 3
    reasons = recommendation_reasons(table)
    assert reasons["eligible"].all()
    assert "scanning larger" in reasons.loc[reasons["chosen"], "reason"].iloc[0]


def test_recommendation_ignores_steps_from_an_already_zero_distance():
    # c = 3 already has coinciding centroids: 3 -> 4 (0/0) is not a collapse; 2 -> 3 is.
    table = _table([2, 3, 4], [0.1, np.inf, np.inf], [4.0, 0.0, 0.0])
    assert recommend_n_clusters(table) == 2


def test_recommendation_with_a_single_row_returns_that_c():
    assert recommend_n_clusters(_table([5], [0.4], [1.0])) == 5


@pytest.mark.parametrize(
    "table, ratio",
    [
        (pd.DataFrame({"n_clusters": [2]}), 0.5),
        (_table([], [], []), 0.5),
        (_table([2, 2], [0.1, 0.2], [1.0, 1.0]), 0.5),
        (_table([2, 3], [0.1, 0.2], [1.0, 1.0]), 1.5),
    ],
)
def test_recommendation_rejects_unusable_tables(table, ratio):
    with pytest.raises(GloamError):
        recommend_n_clusters(table, collapse_ratio=ratio)


# --- with gloam's own engine ------------------------------------------------------------------


def _gloam_scan(X, cs, n_starts=5):
    with warnings.catch_warnings():
        # Surplus clusters (c > 3 on three blobs) converge slowly; the best start is still used.
        warnings.simplefilter("ignore", ConvergenceWarning)
        return {c: fuzzy_cmeans(X, c, 2.0, n_starts=n_starts, rng=0, tol=1e-5) for c in cs}


@pytest.mark.parametrize("random_state", [3, 4])
def test_recommendation_on_gloam_partitions_picks_three_for_three_clear_blobs(random_state):
    """scikit-learn make_blobs (PyPI), three well-separated groups, gloam's engine: c = 3."""
    X, _ = make_blobs(
        n_samples=300,
        centers=3,
        n_features=5,
        cluster_std=1.0,
        center_box=(-15, 15),
        random_state=random_state,
    )
    results = _gloam_scan(X, range(2, 8))
    table = validity_table(X, {c: result.best() for c, result in results.items()})
    assert recommend_n_clusters(table) == 3


def test_iris_validity_is_sane():
    """Fisher's iris data (shipped by scikit-learn). Validity studies report that indices
    choose 2 or 3 clusters for iris, because versicolor and virginica overlap while setosa
    stands apart (from memory: Pal & Bezdek 1995, IEEE Trans. Fuzzy Systems 3:370)."""
    X, _ = load_iris(return_X_y=True)
    results = _gloam_scan(X, range(2, 7), n_starts=10)
    table = validity_table(X, {c: result.best() for c, result in results.items()})
    assert recommend_n_clusters(table) in (2, 3)
    # The optimal J_m cannot rise with c (Bezdek 1981); best-of-10 starts should show it.
    assert table["objective"].is_monotonic_decreasing
