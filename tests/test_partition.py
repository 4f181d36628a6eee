"""One c end to end (gloam.partition): starts at the optimum, consensus, noise class, evidence.

Sources: scikit-learn's adjusted_rand_score (PyPI) as the outside measure of agreement with
planted labels; Davé (1991) for memberships plus noise summing to 1; Hennig (2007) for the
Jaccard levels.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import adjusted_rand_score

from gloam.consensus import starts_at_optimum
from gloam.errors import ConvergenceWarning
from gloam.fcm import fuzzy_cmeans
from gloam.genesets import core_genes
from gloam.partition import solve_partition
from gloam.prepare import summarise_replicates
from gloam.robustness import zscore_rows
from gloam.simulate import simulate_experiment


def _planted(seed: int, n_genes: int = 600, flat_share: float = 0.0):
    """Planted responses as log2 replicate values, their z-scored profiles and the truth."""
    experiment = simulate_experiment(
        n_genes=n_genes,
        n_responses=5,
        flat_share=flat_share,
        value_type="log",
        log_noise_sd=0.5,
        seed=seed,
    )
    samples = experiment.samples
    times = np.sort(samples["time"].unique())
    group = np.searchsorted(times, samples["time"].to_numpy())
    values = experiment.matrix.to_numpy(dtype=float)
    profiles = summarise_replicates(values, group, len(times), "mean")
    truth = experiment.truth.set_index("gene").loc[experiment.matrix.index, "response"]
    return values, group, zscore_rows(profiles), truth.to_numpy()


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_consensus_agrees_with_the_truth_at_least_as_well_as_the_best_start(seed):
    """ARI against the planted responses (scikit-learn): the consensus of the starts at the
    optimum must never be worse than the best single start."""
    values, group, X, truth = _planted(seed)
    m = 1.5
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        best = fuzzy_cmeans(X, 5, m, n_starts=20, init="kmeans++", rng=seed).best()
    partition = solve_partition(
        X, 5, m, rng=np.random.default_rng(seed), noise_class=False, n_resamples=0
    )
    best_ari = adjusted_rand_score(truth, best.memberships.argmax(axis=1))
    consensus_ari = adjusted_rand_score(truth, partition.memberships.argmax(axis=1))
    assert consensus_ari >= best_ari - 1e-12, (consensus_ari, best_ari)


def test_starts_that_miss_the_optimum_are_left_out():
    """Random initialisation at c = 6 on 5 planted responses reaches distinct local optima;
    only starts within 1e-6 of the best objective and with the same hard partition count."""
    _, _, X, _ = _planted(3)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        result = fuzzy_cmeans(X, 6, 1.5, n_starts=30, init="random", rng=3)
    aligned, at_optimum = starts_at_optimum(result)
    best = result.objectives[result.best_index]
    assert at_optimum[result.best_index]
    assert np.all(result.objectives[at_optimum] - best <= 1e-6 * best)
    top = aligned.memberships.argmax(axis=2)
    agreement = (top == top[result.best_index]).mean(axis=1)
    assert np.all(agreement[at_optimum] >= 0.99)
    # Starts with a clearly worse objective are never at the optimum.
    assert not np.any(at_optimum & (result.objectives > best * (1 + 1e-3)))


def test_memberships_and_noise_sum_to_one_and_evidence_has_its_shapes():
    values, group, X, _ = _planted(4, n_genes=400, flat_share=0.3)
    partition = solve_partition(
        X, 5, 1.5, rng=np.random.default_rng(4), n_resamples=6, replicates=values,
        sample_column=group,
    )  # fmt: skip
    np.testing.assert_allclose(partition.memberships.sum(axis=1) + partition.noise, 1.0)
    assert partition.jaccard.shape == (6, 5)
    assert partition.membership_low.shape == (400, 5)
    assert np.all(partition.membership_low <= partition.membership_high + 1e-12)
    assert partition.metrics["resampling"] == "replicates"
    assert partition.metrics["n_noise"] > 0  # flat genes z-scored are noise, not a response
    # Planted responses at this noise level are stable (Hennig 2007: >= 0.75).
    assert partition.metrics["min_jaccard"] >= 0.75


def test_without_replicates_genes_are_resampled():
    _, _, X, _ = _planted(5, n_genes=300)
    partition = solve_partition(X, 4, 1.5, rng=np.random.default_rng(5), n_resamples=4)
    assert partition.metrics["resampling"] == "genes"


@settings(max_examples=40, deadline=None)
@given(st.integers(0, 2**31 - 1), st.integers(2, 5), st.sampled_from([0.5, 0.6, 0.7, 0.9]))
def test_a_gene_whose_largest_membership_is_noise_is_never_core(seed, c, threshold):
    """Property (Davé 1991 noise class): whatever the memberships, a gene with noise as its
    largest membership is in no core set."""
    rng = np.random.default_rng(seed)
    classes = rng.dirichlet(np.full(c + 1, 0.4), size=50)
    memberships = pd.DataFrame(classes[:, :c], columns=[f"C{k + 1}" for k in range(c)])
    memberships.index = [f"g{i}" for i in range(50)]
    noise = pd.Series(classes[:, c], index=memberships.index)
    sets = core_genes(memberships, threshold, noise)
    noise_top = set(memberships.index[noise.to_numpy() > memberships.to_numpy().max(axis=1)])
    for genes in sets.values():
        assert not noise_top & set(genes)
