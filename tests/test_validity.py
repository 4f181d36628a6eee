"""Validity indices and the rule that judges each c and recommends one.

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
    judge_n_clusters,
    min_centroid_distance,
    partition_coefficient,
    partition_entropy,
    recommended_n_clusters,
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


def _criteria_table(c, jaccard, core, correlation, coherence=None):
    return pd.DataFrame(
        {
            "n_clusters": c,
            "min_jaccard": jaccard,
            "min_core_genes": core,
            "max_centroid_correlation": correlation,
            "min_coherence": [0.8] * len(c) if coherence is None else coherence,
        }
    )


def test_the_largest_passing_c_is_recommended_and_failures_are_named():
    table = _criteria_table(
        [2, 3, 4, 5, 6],
        [0.95, 0.9, 0.8, 0.6, 0.5],
        [300, 120, 40, 4, 2],
        [0.1, 0.5, 0.7, 0.95, 0.97],
    )
    judged = judge_n_clusters(table, structure_present=True)
    assert recommended_n_clusters(judged) == 4
    assert judged["recommended"].tolist() == [False, False, True, False, False]
    assert judged["passes"].tolist() == [True, True, True, False, False]
    assert judged.loc[3, "failed"] == "robust,sizeable,distinct"
    assert judged["coherent"].all()
    assert "Jaccard 0.60 < 0.75" in judged.loc[3, "reason"]
    assert "only 4 core genes" in judged.loc[3, "reason"]
    assert "larger c = 4 passes" in judged.loc[0, "reason"]


def test_no_structure_means_no_clusters_whatever_the_other_criteria():
    table = _criteria_table([2, 3], [1.0, 1.0], [500, 500], [0.0, 0.0])
    judged = judge_n_clusters(table, structure_present=False)
    assert recommended_n_clusters(judged) == 1
    assert not judged["recommended"].any()
    assert (judged["failed"] == "structure").all()
    assert judged["reason"].str.contains("no evidence of cluster structure").all()


def test_a_cluster_gathered_near_the_flat_profile_fails_coherence():
    """A cluster of genes pointing every way has a centroid near 0: its coherence (squared
    centroid norm over a gene's squared norm) is about the mean pairwise correlation of its
    genes, here 0.1, so that c fails even though it is robust and sizeable."""
    table = _criteria_table([2, 3], [0.9, 0.9], [100, 100], [0.1, 0.2], [0.8, 0.1])
    judged = judge_n_clusters(table, structure_present=True)
    assert recommended_n_clusters(judged) == 2
    assert judged.loc[1, "failed"] == "coherent"
    assert "coherence 0.10" in judged.loc[1, "reason"]


def test_coherence_is_the_mean_pairwise_correlation_of_the_members():
    """For z-scored rows of squared norm n - 1, ||mean x_i||^2 / (n - 1) equals the mean of
    the pairwise Pearson correlations including the diagonal (algebra of the mean; numpy
    corrcoef as the reference)."""
    from gloam.partition import centroid_coherence

    rng = np.random.default_rng(5)
    X = rng.normal(size=(40, 8)) + np.linspace(-1, 1, 8)
    X = (X - X.mean(1, keepdims=True)) / X.std(1, ddof=1, keepdims=True)
    expected = np.corrcoef(X).mean()
    assert_allclose(centroid_coherence(X, X.mean(0, keepdims=True))[0], expected, rtol=1e-12)


def test_a_cut_through_one_response_fails_separation():
    """The nearest-pair test (SigClust, Liu et al. 2008, on each merge as in Kimes et al. 2017)
    finds no two-cluster structure in the pair at c = 3: that c fails ``separated``; a
    missing (NaN) p-value is not a failure."""
    table = _criteria_table([2, 3, 4], [0.9, 0.9, 0.9], [100, 100, 100], [0.1, 0.6, 0.6])
    table["max_pair_p_value"] = [1e-9, 0.3, np.nan]
    judged = judge_n_clusters(table, structure_present=True)
    assert judged["separated"].tolist() == [True, False, True]
    assert judged.loc[1, "failed"] == "separated"
    assert "one cut response (p = 0.3" in judged.loc[1, "reason"]
    assert recommended_n_clusters(judged) == 4
    # The level is the caller's: at 0.5 the pair at p = 0.3 counts as separated.
    assert judge_n_clusters(table, structure_present=True, separation_alpha=0.5)["passes"].all()


def test_no_passing_c_recommends_one():
    judged = judge_n_clusters(
        _criteria_table([2, 3], [0.5, 0.4], [500, 500], [0.0, 0.0]), structure_present=True
    )
    assert recommended_n_clusters(judged) == 1


@settings(max_examples=200, deadline=None)
@given(
    st.lists(
        st.tuples(st.floats(0, 1), st.integers(0, 50), st.floats(-1, 1), st.booleans()),
        min_size=2,
        max_size=14,
    ),
    st.integers(1, 13),
    st.booleans(),
)
def test_widening_the_scan_changes_the_answer_only_when_a_larger_c_passes(rows, cut, structure):
    """The property the rule is built for: judging c = 2..k and c = 2..K (K > k) gives the same
    recommendation unless some c in k+1..K passes, and then it is the largest such c."""
    cs = list(range(2, 2 + len(rows)))
    table = _criteria_table(
        cs,
        [row[0] if row[3] else np.nan for row in rows],
        [row[1] for row in rows],
        [row[2] for row in rows],
        [row[0] for row in rows],
    )
    k = cs[min(cut, len(cs) - 1) - 1]
    narrow = judge_n_clusters(table[table["n_clusters"] <= k], structure_present=structure)
    wide = judge_n_clusters(table, structure_present=structure)
    larger_passing = wide.loc[(wide["n_clusters"] > k) & wide["passes"], "n_clusters"]
    if len(larger_passing):
        assert recommended_n_clusters(wide) == larger_passing.max()
    else:
        assert recommended_n_clusters(wide) == recommended_n_clusters(narrow)
    # Each c is judged on its own row: the verdicts of c <= k do not change.
    assert wide.loc[wide["n_clusters"] <= k, "passes"].tolist() == narrow["passes"].tolist()


@pytest.mark.parametrize(
    "table, options",
    [
        (pd.DataFrame({"n_clusters": [2]}), {}),
        (_criteria_table([], [], [], []), {}),
        (_criteria_table([2, 2], [1, 1], [10, 10], [0, 0]), {}),
        (_criteria_table([2], [1], [10], [0]), {"stable_jaccard": 1.5}),
        (_criteria_table([2], [1], [10], [0]), {"max_centroid_correlation": 2}),
    ],
)
def test_judging_rejects_unusable_tables(table, options):
    with pytest.raises(GloamError):
        judge_n_clusters(table, structure_present=True, **options)


# --- with gloam's own engine ------------------------------------------------------------------


def _judged_scan(X, cs, seed=0):
    from gloam.partition import solve_partition

    rows = []
    for c in cs:
        partition = solve_partition(
            X, c, 2.0, rng=np.random.default_rng(seed), n_starts=5, n_resamples=10
        )
        rows.append(partition.metrics)
    return judge_n_clusters(pd.DataFrame(rows), structure_present=True)


@pytest.mark.parametrize("random_state", [3, 4])
def test_gloam_partitions_of_three_clear_blobs_recommend_three(random_state):
    """scikit-learn make_blobs (PyPI): three well-separated groups, profiles z-scored as gloam
    does; c = 4 and more split a group into two nearly identical responses, so c = 3."""
    X, _ = make_blobs(
        n_samples=300,
        centers=3,
        n_features=6,
        cluster_std=1.0,
        center_box=(-15, 15),
        random_state=random_state,
    )
    X = (X - X.mean(axis=1, keepdims=True)) / X.std(axis=1, ddof=1, keepdims=True)
    judged = _judged_scan(X, range(2, 7))
    assert recommended_n_clusters(judged) == 3, judged[["n_clusters", "failed"]]


def test_iris_objective_falls_with_c():
    """Fisher's iris data (shipped by scikit-learn): the optimal J_m cannot rise with c
    (Bezdek 1981); best-of-10 starts should show it."""
    X, _ = load_iris(return_X_y=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        results = {c: fuzzy_cmeans(X, c, 2.0, n_starts=10, rng=0, tol=1e-5) for c in range(2, 7)}
    table = validity_table(X, {c: result.best() for c, result in results.items()})
    assert table["objective"].is_monotonic_decreasing
