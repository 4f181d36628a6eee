"""Specification of robustness by resampling (gloam.robustness).

External references used here:
- Hennig, C. (2007). Cluster-wise assessment of cluster stability. *Computational Statistics
  & Data Analysis* 52:258-271: the cluster-wise Jaccard coefficient
  ``gamma_k = max_j |A_k ∩ B_j| / |A_k ∪ B_j|`` over the points in the resample, evaluated
  here with Python sets; the stability level 0.75 (from memory);
- Efron, B. & Tibshirani, R. J. (1993). *An Introduction to the Bootstrap*. Chapman & Hall:
  a bootstrap mean of n values has expectation the sample mean and variance
  ``(1/n) * mean((x - xbar)^2)``; a bootstrap sample holds about 1 - 1/e = 63.2 % of the
  distinct points;
- Kuhn (1955), the assignment problem, checked by brute force over all permutations
  (``itertools.permutations``);
- NumPy's ``nanpercentile`` (linear interpolation) and scipy's ``stats.zscore``;
- Davé, R. N. (1991), *Pattern Recognition Letters* 12:657-664: the noise-clustering
  membership formula, written out in a test; Varadhan & Roland (2008), *Scandinavian
  Journal of Statistics* 35:335-353: SQUAREM keeps the fixed points of the plain iteration.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy.stats import zscore

from gloam.errors import GloamError
from gloam.noise import noise_cmeans, noise_distance
from gloam.robustness import (
    DISSOLVED_JACCARD,
    STABLE_JACCARD,
    Robustness,
    align_to_reference,
    bootstrap_genes,
    cluster_jaccard,
    hard_labels,
    recluster_from_centroids,
    resample_replicates,
    resampling_robustness,
    zscore_rows,
)


def _jaccard_with_sets(reference, resampled, genes, c):
    """Hennig (2007) with Python sets: clusters restricted to the genes in the resample."""
    reference_sets = [{g for g in genes if reference[g] == k} for k in range(c)]  # A_k ∩ resample
    resampled_sets = [
        {g for g, label in zip(genes, resampled, strict=True) if label == j} for j in range(c)
    ]
    result = []
    for A in reference_sets:
        if not A:
            result.append(np.nan)
            continue
        result.append(max(len(A & B) / len(A | B) for B in resampled_sets))
    return np.array(result)


def _memberships_from_labels(labels, c, level=0.8):
    """Memberships with ``level`` in the labelled cluster, the rest spread evenly."""
    U = np.full((labels.size, c), (1.0 - level) / (c - 1))
    U[np.arange(labels.size), labels] = level
    return U


# --------------------------------------------------------------------------------------------
# Cluster-wise Jaccard
# --------------------------------------------------------------------------------------------


@settings(max_examples=80, deadline=None)
@given(
    seed=st.integers(0, 100_000),
    n_genes=st.integers(1, 60),
    c=st.integers(1, 6),
    subset=st.booleans(),
)
def test_cluster_jaccard_equals_the_set_definition(seed, n_genes, c, subset):
    """Reference: Hennig (2007), gamma_k = max_j |A_k ∩ B_j| / |A_k ∪ B_j| with Python
    sets; noise genes (-1) belong to no cluster; NaN where A_k has no gene in the resample."""
    rng = np.random.default_rng(seed)
    reference = rng.integers(-1, c, size=n_genes)
    if subset:
        genes = rng.permutation(n_genes)[: rng.integers(0, n_genes + 1)]
        index = genes
    else:
        genes = np.arange(n_genes)
        index = None
    resampled = rng.integers(-1, c, size=genes.size)
    expected = _jaccard_with_sets(reference, resampled, genes.tolist(), c)
    result = cluster_jaccard(reference, resampled, genes_in_resample=index, n_clusters=c)
    assert_allclose(result, expected, rtol=0, atol=1e-15)


def test_identical_and_relabelled_partitions_give_jaccard_one():
    """Hennig (2007): the max over resampled clusters makes gamma_k label-free; a cluster
    with no gene gives NaN."""
    rng = np.random.default_rng(0)
    labels = rng.integers(0, 4, size=200)
    labels[labels == 3] = -1  # cluster 3 is empty, its genes are noise
    assert_allclose(
        cluster_jaccard(labels, labels, n_clusters=4), [1.0, 1.0, 1.0, np.nan], rtol=0, atol=0
    )
    relabel = np.array([2, 0, 1, 3])
    renamed = np.where(labels >= 0, relabel[labels], -1)
    assert_allclose(
        cluster_jaccard(labels, renamed, n_clusters=4), [1.0, 1.0, 1.0, np.nan], rtol=0, atol=0
    )


def test_hard_labels_pick_the_top_class_with_noise_as_minus_one():
    U = np.array([[0.6, 0.3], [0.2, 0.3], [0.3, 0.3], [0.2, 0.1]])
    noise = np.array([0.1, 0.5, 0.4, 0.7])
    np.testing.assert_array_equal(hard_labels(U), [0, 1, 0, 0])
    np.testing.assert_array_equal(hard_labels(U, noise), [0, -1, -1, -1])


# --------------------------------------------------------------------------------------------
# Resampling
# --------------------------------------------------------------------------------------------


def test_one_replicate_per_group_is_returned_exactly():
    """With one sample per group the bootstrap can only draw that sample."""
    rng = np.random.default_rng(1)
    values = rng.normal(size=(30, 4))
    groups = np.array([2, 0, 3, 1])
    resampled = resample_replicates(values, groups, rng=rng)
    assert_allclose(resampled, values[:, np.argsort(groups)], rtol=0, atol=0)


def test_resampled_group_means_have_the_bootstrap_mean_and_variance():
    """Efron & Tibshirani (1993): the bootstrap mean of n values has expectation their mean
    and variance mean((x - xbar)^2) / n. Over 4000 draws the mean is within 5 standard
    errors and the variance within 15 %; every draw stays inside its own group."""
    rng = np.random.default_rng(2)
    groups = np.array([0, 1, 0, 2, 1, 0, 2, 0, 1])
    values = rng.normal(size=(3, groups.size)) + 10.0 * groups  # groups far apart
    draws = np.stack([resample_replicates(values, groups, rng=rng) for _ in range(4000)])
    sizes = np.bincount(groups)
    group_means = np.stack([values[:, groups == g].mean(axis=1) for g in range(3)], axis=1)
    bootstrap_var = np.stack(
        [values[:, groups == g].var(axis=1) / sizes[g] for g in range(3)], axis=1
    )
    standard_error = np.sqrt(bootstrap_var / draws.shape[0])
    assert (np.abs(draws.mean(axis=0) - group_means) < 5 * standard_error).all()
    assert_allclose(draws.var(axis=0), bootstrap_var, rtol=0.15)
    for g in range(3):
        inside = values[:, groups == g]
        assert (draws[:, :, g] >= inside.min(axis=1) - 1e-12).all()
        assert (draws[:, :, g] <= inside.max(axis=1) + 1e-12).all()


def test_bootstrap_genes_are_distinct_and_about_63_percent():
    """Efron & Tibshirani (1993): a bootstrap sample of n holds 1 - (1 - 1/n)^n ≈ 0.632 of
    the distinct points (binomial SD about 0.005 at n = 10,000; tolerance 0.02)."""
    index = bootstrap_genes(10_000, rng=np.random.default_rng(3))
    assert np.array_equal(index, np.unique(index))
    assert index.min() >= 0 and index.max() < 10_000
    assert index.size / 10_000 == pytest.approx(1 - (1 - 1e-4) ** 10_000, abs=0.02)


def test_zscore_rows_match_scipy_and_flat_rows_become_zero():
    """Reference: scipy.stats.zscore with ddof = 1 along rows."""
    rng = np.random.default_rng(4)
    profiles = rng.normal(size=(10, 6))
    profiles[3] = 2.5
    result = zscore_rows(profiles)
    keep = np.arange(10) != 3
    expected = zscore(profiles[keep], axis=1, ddof=1)
    assert_allclose(result[keep], expected, rtol=0, atol=1e-12)
    assert_allclose(result[3], 0.0, rtol=0, atol=0)
    with pytest.raises(GloamError, match="at least 2 columns"):
        zscore_rows(profiles[:, :1])


def test_align_to_reference_recovers_a_known_permutation():
    """Kuhn (1955): the matching minimising the summed squared centroid distance, checked
    against brute force over all 5! permutations."""
    rng = np.random.default_rng(5)
    reference = rng.normal(size=(5, 4))
    shuffle = np.array([3, 0, 4, 1, 2])
    moved = reference[shuffle] + rng.normal(scale=0.05, size=(5, 4))
    permutation = align_to_reference(reference, moved)
    np.testing.assert_array_equal(permutation, np.argsort(shuffle))
    assert_allclose(moved[permutation], reference, atol=0.2)
    # A harder case (no small shift): brute force gives the same optimum.
    other = rng.normal(size=(5, 4))
    permutation = align_to_reference(reference, other)
    costs = {
        perm: ((other[list(perm)] - reference) ** 2).sum()
        for perm in itertools.permutations(range(5))
    }
    best = min(costs, key=costs.get)
    assert ((other[permutation] - reference) ** 2).sum() == pytest.approx(costs[best])


# --------------------------------------------------------------------------------------------
# Robustness over resamples
# --------------------------------------------------------------------------------------------


def test_reclustering_that_returns_the_reference_is_perfectly_robust():
    """Identical partitions: Jaccard 1 (Hennig 2007), zero-width intervals at the reference
    memberships, core share 0 or 1 as the reference is below or above the threshold."""
    rng = np.random.default_rng(6)
    labels = rng.integers(0, 3, size=90)
    U = _memberships_from_labels(labels, 3) * 0.9
    noise = np.full(90, 0.1)
    noise[:5] = 0.95  # noise genes
    U[:5] *= 0.05 / 0.9

    def recluster(generator):
        return None, U.copy(), noise.copy()

    result = resampling_robustness(U, noise, recluster, n_resamples=7, scheme="replicates", rng=0)
    assert isinstance(result, Robustness) and result.n_resamples == 7
    assert_allclose(result.jaccard, 1.0, rtol=0, atol=0)
    assert_allclose(result.mean_jaccard, 1.0, rtol=0, atol=0)
    assert_allclose(result.membership_low, U, rtol=0, atol=0)
    assert_allclose(result.membership_high, U, rtol=0, atol=0)
    assert_allclose(result.core_frequency, (U >= 0.5).astype(float), rtol=0, atol=0)
    assert_allclose(result.top_agreement, 1.0, rtol=0, atol=0)


def test_shuffling_half_the_genes_dissolves_the_clusters():
    """Moving half of every cluster's genes to other clusters leaves |A ∩ B| ≈ |A| / 2 and
    |A ∪ B| ≈ 3 |A| / 2, Jaccard ≈ 1/3: far below the stable level 0.75 (Hennig 2007, from
    memory) and below the dissolution level 0.5."""
    rng = np.random.default_rng(7)
    labels = np.repeat(np.arange(3), 100)
    U = _memberships_from_labels(labels, 3)

    def recluster(generator):
        moved = generator.permutation(300)[:150]
        new_labels = labels.copy()
        new_labels[moved] = (labels[moved] + generator.integers(1, 3, size=150)) % 3
        return None, _memberships_from_labels(new_labels, 3), np.zeros(300)

    result = resampling_robustness(U, None, recluster, n_resamples=20, scheme="replicates", rng=rng)
    assert (result.mean_jaccard < DISSOLVED_JACCARD).all()
    assert (result.mean_jaccard < STABLE_JACCARD - 0.3).all()
    assert_allclose(result.mean_jaccard, 1 / 3, atol=0.08)
    assert ((result.core_frequency >= 0) & (result.core_frequency <= 1)).all()
    assert result.top_agreement.mean() == pytest.approx(0.5, abs=0.05)


def test_gene_resampling_summarises_each_gene_over_the_resamples_that_hold_it():
    """Percentiles equal NumPy's nanpercentile (linear interpolation) over the resamples
    holding the gene; a gene in no resample gets NaN; shares lie in [0, 1]."""
    rng = np.random.default_rng(8)
    n, c = 40, 3
    labels = rng.integers(0, c, size=n)
    U = _memberships_from_labels(labels, c)
    drawn = []

    def recluster(generator):
        index = bootstrap_genes(n - 5, rng=generator)  # genes 35..39 are never drawn
        memberships = generator.dirichlet(np.ones(c), size=index.size)
        drawn.append((index, memberships))
        return index, memberships, None

    result = resampling_robustness(
        U, None, recluster, n_resamples=25, scheme="genes", rng=rng, interval=(10, 90)
    )
    stacked = np.full((25, n, c), np.nan)
    for r, (index, memberships) in enumerate(drawn):
        stacked[r, index] = memberships
    seen = np.arange(n) < n - 5
    low, high = np.nanpercentile(stacked[:, seen], [10, 90], axis=0)
    assert_allclose(result.membership_low[seen], low, rtol=0, atol=1e-12)
    assert_allclose(result.membership_high[seen], high, rtol=0, atol=1e-12)
    counts = (~np.isnan(stacked[:, seen, 0])).sum(axis=0)
    core = (np.nan_to_num(stacked[:, seen], nan=-1) >= 0.5).sum(axis=0) / counts[:, None]
    assert_allclose(result.core_frequency[seen], core, rtol=0, atol=1e-15)
    assert np.isnan(result.membership_low[~seen]).all()
    assert np.isnan(result.core_frequency[~seen]).all()
    assert np.isnan(result.top_agreement[~seen]).all()
    assert ((result.core_frequency[seen] >= 0) & (result.core_frequency[seen] <= 1)).all()
    assert ((result.top_agreement[seen] >= 0) & (result.top_agreement[seen] <= 1)).all()
    assert result.scheme == "genes" and result.jaccard.shape == (25, c)


def test_well_separated_responses_are_stable_under_replicate_resampling():
    """End to end with noise clustering: three distinct responses measured in 3 replicates
    with small noise keep mean Jaccard >= 0.75, Hennig's (2007) stable level (from memory)."""
    rng = np.random.default_rng(9)
    n_times, n_replicates = 6, 3
    t = np.linspace(0.0, 1.0, n_times)
    shapes = np.stack([t, -t, np.sin(2 * np.pi * t)])
    truth = np.repeat(np.arange(3), 40)
    groups = np.repeat(np.arange(n_times), n_replicates)
    replicates = shapes[truth][:, groups] * 2.0 + rng.normal(
        scale=0.3, size=(truth.size, groups.size)
    )
    profiles = np.stack([replicates[:, groups == g].mean(axis=1) for g in range(n_times)], 1)
    X = zscore_rows(profiles)
    delta2 = noise_distance(X)
    reference = noise_cmeans(
        X, np.stack([X[truth == k].mean(0) for k in range(3)]), 1.5, noise_distance=delta2
    )

    def recluster(generator):
        Z = zscore_rows(resample_replicates(replicates, groups, rng=generator))
        part = noise_cmeans(Z, reference.centroids, 1.5, noise_distance=delta2, tol=1e-3)
        permutation = align_to_reference(reference.centroids, part.centroids)
        return None, part.memberships[:, permutation], part.noise

    result = resampling_robustness(
        reference.memberships,
        reference.noise,
        recluster,
        n_resamples=10,
        scheme="replicates",
        rng=1,
    )
    assert (result.mean_jaccard >= STABLE_JACCARD).all()
    assert (result.membership_low <= result.membership_high).all()


def _three_responses(seed: int):
    rng = np.random.default_rng(seed)
    t = np.linspace(0.0, 1.0, 6)
    shapes = np.stack([t, -t, np.sin(2 * np.pi * t)])
    truth = np.repeat(np.arange(3), 60)
    X = zscore_rows(shapes[truth] * 2.0 + rng.normal(scale=0.6, size=(truth.size, 6)))
    return X, truth


def test_recluster_from_centroids_returns_the_reference_order_and_daves_memberships():
    """Warm start from permuted reference centroids: the result comes back in the reference
    order, and its memberships follow Davé's (1991) formula u_ik = D_ik^(-p) /
    (sum_j D_ij^(-p) + delta^(-2p)) for the returned centroids (a fixed point)."""
    X, truth = _three_responses(3)
    delta2 = noise_distance(X)
    reference = np.stack([X[truth == k].mean(0) for k in range(3)])
    order = np.array([2, 0, 1])
    memberships, noise, centroids = recluster_from_centroids(
        X, reference[order], 1.5, noise_distance=delta2, tol=1e-10, max_iter=5000
    )
    # In the order of the centroids passed: column j holds response order[j].
    assert np.mean(order[memberships.argmax(1)] == truth) > 0.9
    D = ((X[:, None, :] - centroids[None]) ** 2).sum(2)
    weights = D ** (-2.0)  # p = 1 / (m - 1) = 2
    total = weights.sum(1) + delta2 ** (-2.0)
    assert_allclose(memberships, weights / total[:, None], atol=1e-8)
    assert_allclose(noise, delta2 ** (-2.0) / total, atol=1e-8)


def test_recluster_from_centroids_accelerated_and_plain_reach_the_same_point():
    """Varadhan & Roland (2008): the resample's fixed point does not depend on the
    acceleration; both run to a tight tolerance on one replicate resample."""
    X, truth = _three_responses(4)
    delta2 = noise_distance(X)
    reference = np.stack([X[truth == k].mean(0) for k in range(3)])
    Z = zscore_rows(X + np.random.default_rng(0).normal(scale=0.3, size=X.shape))
    fast = recluster_from_centroids(
        Z, reference, 1.4, noise_distance=delta2, tol=1e-10, max_iter=5000
    )
    plain = recluster_from_centroids(
        Z, reference, 1.4, noise_distance=delta2, tol=1e-10, max_iter=5000, acceleration="none"
    )
    for ours, theirs in zip(fast, plain, strict=True):
        assert_allclose(ours, theirs, atol=1e-7)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"scheme": "samples"}, "scheme"),
        ({"n_resamples": 0}, "n_resamples"),
        ({"core_threshold": 1.5}, "core_threshold"),
        ({"interval": (95, 5)}, "interval"),
        ({"scheme": "genes"}, "gene indices"),
    ],
)
def test_invalid_robustness_settings_raise_gloam_errors(kwargs, message):
    U = _memberships_from_labels(np.array([0, 1, 2, 0]), 3)
    settings_ = {"n_resamples": 2, "scheme": "replicates", "rng": 0, **kwargs}
    with pytest.raises(GloamError, match=message):
        resampling_robustness(U, None, lambda g: (None, U, None), **settings_)


def test_invalid_inputs_raise_gloam_errors():
    U = _memberships_from_labels(np.array([0, 1, 2, 0]), 3)
    with pytest.raises(GloamError, match="expected"):
        resampling_robustness(
            U, None, lambda g: (None, U[:2], None), n_resamples=1, scheme="replicates", rng=0
        )
    with pytest.raises(GloamError, match="no sample"):
        resample_replicates(np.ones((2, 3)), np.array([0, 2, 2]), rng=0)
    with pytest.raises(GloamError, match="finite"):
        resample_replicates(np.array([[1.0, np.nan]]), np.array([0, 0]), rng=0)
    with pytest.raises(GloamError, match="repeats"):
        cluster_jaccard(
            np.array([0, 1]), np.array([0, 0]), genes_in_resample=np.array([1, 1]), n_clusters=2
        )
    with pytest.raises(GloamError, match="same shape"):
        align_to_reference(np.zeros((3, 2)), np.zeros((2, 2)))
