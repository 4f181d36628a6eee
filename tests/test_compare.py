"""gloam.compare: interaction test, shared responses, transitions, matched clusters.

Each check names its outside source: statsmodels (OLS nested-model comparison with
anova_lm, Benjamini-Hochberg), the moderated F of Smyth (2004, Stat. Appl. Genet. Mol. Biol.
3:3), the FDR guarantee of Benjamini & Hochberg (1995, J. R. Stat. Soc. B 57:289), pandas
group means (the documented effect sizes computed independently), scikit-fuzzy (fuzzy
c-means memberships for given centroids), scikit-learn (adjusted Rand index), or an
exhaustive search over permutations (the assignment the Hungarian method must find).
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
import scipy.stats
import skfuzzy
from numpy.testing import assert_allclose, assert_array_equal
from sklearn.metrics import adjusted_rand_score
from statsmodels.formula.api import ols
from statsmodels.stats.anova import anova_lm
from statsmodels.stats.multitest import multipletests

from gloam.compare import (
    CHANGE_STATUSES,
    FLAT_LABEL,
    NOISE_LABEL,
    ClusteredRun,
    adjusted_rand_index,
    centroid_correlation,
    changed_gene_sets,
    condition_profiles,
    interaction_test,
    match_clusters,
    plot_transitions,
    sensitivity_summary,
    shared_responses,
    transition_table,
)
from gloam.errors import GloamError
from gloam.robustness import zscore_rows
from gloam.simulate import simulate_switching

# ------------------------------------------------------------------------- simulation


def layout(n_times: int, n_replicates: int, conditions=("wt", "mut")):
    """Group of each sample, condition and time of each group (groups by condition)."""
    condition_of_group = np.repeat(np.array(conditions, dtype=object), n_times)
    time_of_group = np.tile(np.arange(n_times, dtype=float) * 2.0, len(conditions))
    group_of_sample = np.repeat(np.arange(condition_of_group.size), n_replicates)
    return group_of_sample, condition_of_group, time_of_group


def additive_data(rng, *, n_genes=3000, n_times=6, n_replicates=3, d0=8.0, s0_squared=0.1):
    """Gaussian log2 values with condition and time effects but no interaction (the null).

    Gene variances follow Smyth's (2004) prior, 1/sigma^2 ~ chi2(d0) / (d0 s0^2).
    """
    groups, conditions, times = layout(n_times, n_replicates)
    sd = np.sqrt(d0 * s0_squared / rng.chisquare(d0, n_genes))
    time_effect = rng.normal(0.0, 1.0, (n_genes, n_times))
    condition_effect = rng.normal(0.0, 1.0, (n_genes, 2))
    group_effect = np.tile(time_effect, 2) + np.repeat(condition_effect, n_times, axis=1)
    level = rng.uniform(4.0, 12.0, n_genes)
    values = (
        level[:, None]
        + group_effect[:, groups]
        + rng.normal(size=(n_genes, groups.size)) * sd[:, None]
    )
    return values, groups, conditions, times


def names(n: int) -> list[str]:
    return [f"g{i}" for i in range(n)]


def binomial_bounds(rate: float, n: int, n_sd: float = 4.0) -> tuple[float, float]:
    """Normal approximation to a binomial proportion: rate +- n_sd standard errors."""
    half = n_sd * np.sqrt(rate * (1 - rate) / n)
    return rate - half, rate + half


def switching_log_data(seed: int, **settings):
    """simulate_switching log data as (values, groups, conditions, times, truth)."""
    experiment = simulate_switching(value_type="log", seed=seed, **settings)
    samples = experiment.samples
    key = samples["condition"] + "@" + samples["time"].astype(str)
    groups, _ = pd.factorize(key)
    first = samples.groupby(groups).first()
    return (
        experiment.matrix.to_numpy(dtype=float),
        groups,
        first["condition"].to_numpy(dtype=object),
        first["time"].to_numpy(dtype=float),
        experiment.truth.set_index("gene"),
    )


@pytest.fixture(scope="module")
def switching():
    """An easy two-condition experiment (log values), its test and shared responses."""
    values, groups, conditions, times, truth = switching_log_data(
        4, n_genes=600, n_responses=4, switch_share=0.2
    )
    test = interaction_test(values, groups, conditions, times, genes=truth.index, trend=False)
    shared = shared_responses(test, n_clusters=4, n_starts=5, rng=0)
    return test, shared, truth


# ---------------------------------------------------------------- the interaction test


def test_unmoderated_interaction_f_equals_nested_ols_comparison():
    """Reference: statsmodels anova_lm(additive, full) comparing the OLS fits
    y ~ C(condition) + C(time) and y ~ C(condition) * C(time) (the F-test of nested linear
    models), gene by gene: F, numerator df and p to 1e-8."""
    rng = np.random.default_rng(1)
    values, groups, conditions, times = additive_data(rng, n_genes=5, n_times=4)
    values[:3] += rng.normal(0.0, 0.8, (3, 8))[:, groups]  # some genes with an interaction
    result = interaction_test(values, groups, conditions, times, genes=names(5), moderate=False)
    for gene in range(5):
        frame = pd.DataFrame(
            {"y": values[gene], "condition": conditions[groups], "time": times[groups].astype(str)}
        )
        table = anova_lm(
            ols("y ~ C(condition) + C(time)", frame).fit(),
            ols("y ~ C(condition) * C(time)", frame).fit(),
        )
        row = result.table.iloc[gene]
        assert row["df_numerator"] == table["df_diff"].iloc[1] == 3
        assert_allclose(row["statistic"], table["F"].iloc[1], rtol=1e-8)
        assert_allclose(row["p_value"], table["Pr(>F)"].iloc[1], rtol=1e-8)


def test_moderated_interaction_follows_smyth_formula():
    """Smyth (2004), section 6.3: F~ = (SS_int / df1) / s~^2 with the posterior variance
    s~^2 = (d0 s0^2 + d s^2) / (d0 + d) and reference F(df1, d0 + d).  With a constant
    prior, s~^2 = s^2 F / F~ must be affine in s^2 with slope d / (d0 + d); s^2 is the
    pooled within-group variance (numpy), F the ordinary F (checked against statsmodels
    above); p from scipy.stats.f; FDR from statsmodels multipletests(fdr_bh)."""
    rng = np.random.default_rng(2)
    values, groups, conditions, times = additive_data(rng, n_genes=500)
    values[:50] += rng.normal(0.0, 0.7, (50, 12))[:, groups]
    ordinary = interaction_test(values, groups, conditions, times, genes=names(500), moderate=False)
    moderated = interaction_test(values, groups, conditions, times, genes=names(500), trend=False)
    d = int(groups.size - 12)
    d0 = moderated.df_prior
    assert 0 < d0 < np.inf
    means = pd.DataFrame(values.T).groupby(groups).transform("mean").to_numpy().T
    s_squared = np.sum((values - means) ** 2, axis=1) / d
    posterior = s_squared * ordinary.table["statistic"] / moderated.table["statistic"]
    slope, intercept = np.polyfit(s_squared, posterior, 1)
    assert_allclose(slope, d / (d0 + d), rtol=1e-8)
    assert intercept > 0
    assert_allclose(moderated.table["df_denominator"].to_numpy(), np.full(500, d0 + d), rtol=1e-12)
    p = scipy.stats.f.sf(moderated.table["statistic"], 5, d0 + d)
    assert_allclose(moderated.table["p_value"], p, rtol=1e-9)
    assert_allclose(
        moderated.table["fdr"], multipletests(p, method="fdr_bh")[1], rtol=1e-9, atol=1e-15
    )


@pytest.mark.parametrize("seed", [10, 11, 12])
def test_null_data_keep_fdr_significant_share_at_or_below_the_level(seed):
    """Benjamini & Hochberg (1995): with no interaction at all, P(any discovery) <= alpha,
    so the share of FDR-significant genes is at most the level; null p-values are uniform,
    so the share below 0.05 lies within 4 binomial standard errors of 0.05.  3000 genes with
    large condition and time effects (which the test must not mistake for an interaction)."""
    rng = np.random.default_rng(seed)
    values, groups, conditions, times = additive_data(rng)
    table = interaction_test(values, groups, conditions, times, genes=names(3000)).table
    assert table["significant"].mean() <= 0.05
    low, high = binomial_bounds(0.05, 3000)
    assert low <= (table["p_value"] < 0.05).mean() <= high


def test_null_switching_experiment_has_few_false_discoveries():
    """Benjamini & Hochberg (1995) on simulate_switching(null=True) log data: no gene
    changes, so the share of FDR-significant genes must be at most the 0.05 level."""
    values, groups, conditions, times, truth = switching_log_data(5, n_genes=800, null=True)
    assert not truth["changed"].any()
    table = interaction_test(values, groups, conditions, times, genes=truth.index).table
    assert table["significant"].mean() <= 0.05


def test_effect_sizes_match_group_means_computed_with_pandas():
    """Reference: pandas groupby means of the replicates, from which the documented effect
    sizes are computed independently: per condition the mean over its samples, the range
    and the time of the maximum of its mean profile; effect_log2 the largest difference of
    the two mean-centred profiles at any time."""
    rng = np.random.default_rng(3)
    values, groups, conditions, times = additive_data(rng, n_genes=40, n_times=5)
    values[:10] += rng.normal(0.0, 1.0, (10, 10))[:, groups]
    table = interaction_test(values, groups, conditions, times, genes=names(40)).table
    long = pd.DataFrame(values.T, columns=names(40))
    long["condition"] = conditions[groups]
    long["time"] = times[groups]
    for condition in ("wt", "mut"):
        block = long[long["condition"] == condition]
        profile = block.groupby("time")[names(40)].mean()  # times x genes
        assert_allclose(table[f"mean_log2_{condition}"], block[names(40)].mean(), rtol=1e-12)
        assert_allclose(table[f"log2_range_{condition}"], profile.max() - profile.min(), rtol=1e-12)
        assert_array_equal(table[f"peak_time_{condition}"], profile.idxmax().to_numpy())
    wt = long[long["condition"] == "wt"].groupby("time")[names(40)].mean()
    mut = long[long["condition"] == "mut"].groupby("time")[names(40)].mean()
    difference = (wt - wt.mean()) - (mut - mut.mean())
    assert_allclose(table["effect_log2"], difference.abs().max(), rtol=1e-12)


def test_interaction_test_refuses_data_it_cannot_test():
    rng = np.random.default_rng(4)
    values, groups, conditions, times = additive_data(rng, n_genes=30, n_replicates=1)
    with pytest.raises(GloamError, match="needs replicates"):
        interaction_test(values, groups, conditions, times, genes=names(30))
    values, groups, conditions, times = additive_data(rng, n_genes=30)
    with pytest.raises(GloamError, match="at least two conditions"):
        interaction_test(
            values, groups, np.full(conditions.size, "wt"), np.arange(12.0), genes=names(30)
        )
    with pytest.raises(GloamError, match="fdr"):
        interaction_test(values, groups, conditions, times, genes=names(30), fdr=1.5)


# ---------------------------------------------------------------- shared responses


def test_given_centroid_memberships_equal_scikit_fuzzy_prediction():
    """Reference: skfuzzy.cluster.cmeans_predict (fuzzy c-means memberships of new data for
    fixed centroids, Bezdek 1981) on the gene-condition profiles z-scored one by one."""
    rng = np.random.default_rng(5)
    means = rng.normal(size=(50, 12))
    profiles = condition_profiles(
        means, np.repeat(["a", "b"], 6), np.tile(np.arange(6.0), 2), genes=names(50)
    )
    centroids = zscore_rows(rng.normal(size=(3, 6)))
    shared = shared_responses(profiles, centroids=centroids, m=1.7, noise="none", min_log2_range=0)
    X = zscore_rows(profiles.values.reshape(100, 6))
    reference, *_ = skfuzzy.cluster.cmeans_predict(X.T, centroids, 1.7, error=0.0, maxiter=1)
    blocks = reference.T.reshape(50, 2, 3)
    for index, condition in enumerate(("a", "b")):
        columns = [f"{condition}_C{k}" for k in (1, 2, 3)]
        assert_allclose(shared.table[columns].to_numpy(), blocks[:, index, :], atol=1e-10)
    assert set(CHANGE_STATUSES) >= set(shared.table["status"])
    assert (shared.table["status"] == "untested").all()


def test_changed_means_significant_interaction_and_a_different_response(switching):
    """The documented rule (Gelman & Stern 2006: only a test of the difference shows one):
    changed <=> interaction FDR <= level and different top labels; significant genes with
    the same label are 'modulated', the rest 'unchanged'."""
    test, shared, _ = switching
    table = shared.table
    significant = table["interaction_fdr"] <= 0.05
    differs = table["response_wt"] != table["response_mut"]
    assert_array_equal(table["changed"], significant & differs)
    assert_array_equal(table["status"] == "modulated", significant & ~differs)
    assert_array_equal(table["status"] == "unchanged", ~significant)
    assert_array_equal(table["interaction_fdr"], test.table["fdr"])


def test_planted_switches_are_recovered(switching):
    """Against the simulator's truth (simulate_switching, 600 genes, 20 % of the planted
    genes switch, log2 amplitude 1.5-3): precision of the changed genes >= 0.9 and recall
    >= 0.8, the issue's targets for easy settings."""
    _, shared, truth = switching
    changed = shared.table["changed"]
    planted = truth.loc[changed.index, "changed"]
    assert (changed & planted).sum() / changed.sum() >= 0.9
    assert (changed & planted).sum() / planted.sum() >= 0.8


def test_transition_tables_sum_to_the_genes_counted(switching):
    _, shared, _ = switching
    everything = transition_table(shared)
    assert everything.to_numpy().sum() == len(shared.table)
    assert list(everything.index) == list(everything.columns) == shared.labels
    assert shared.labels[-1] == FLAT_LABEL and NOISE_LABEL in shared.labels
    changed = transition_table(shared, changed_only=True)
    assert changed.to_numpy().sum() == shared.table["changed"].sum()
    assert np.trace(changed.to_numpy()) == 0  # with two conditions a change is off-diagonal
    assert (changed.to_numpy() <= everything.to_numpy()).all()
    reference = pd.crosstab(shared.table["response_wt"], shared.table["response_mut"])
    assert_array_equal(everything.loc[reference.index, reference.columns], reference)


def test_changed_gene_sets_hold_only_changed_genes_and_all_tested_genes_as_background(switching):
    _, shared, _ = switching
    sets, background = changed_gene_sets(shared, prefix="demo")
    assert background == shared.table.index.to_list()
    changed = set(shared.changed_genes)
    every = sets.pop("demo_changed_wt_vs_mut")[1]
    assert set(every) == changed
    fdr = shared.table.loc[every, "interaction_fdr"].to_numpy()
    assert (np.diff(fdr) >= 0).all()
    covered = []
    for name, (_, genes) in sets.items():
        source, target = name.removeprefix("demo_wt_").split("_to_mut_")
        rows = shared.table.loc[genes]
        assert set(genes) <= changed
        assert (rows["response_wt"] == source).all() and (rows["response_mut"] == target).all()
        covered += genes
    assert sorted(covered) == sorted(changed)
    with pytest.raises(GloamError, match="prefix"):
        changed_gene_sets(shared, prefix="bad name")


def test_plot_transitions_draws_a_labelled_figure(switching, tmp_path):
    from gloam.plots import save_figure

    _, shared, _ = switching
    figure = plot_transitions(
        transition_table(shared),
        transition_table(shared, changed_only=True),
        centroids=shared.centroids,
        times=shared.times,
    )
    ax = figure.axes[0]
    assert ax.get_xlabel() == "response in mut" and ax.get_ylabel() == "response in wt"
    assert [t.get_text() for t in ax.get_yticklabels()] == shared.labels
    save_figure(figure, tmp_path / "transitions.png")
    assert (tmp_path / "transitions.png").stat().st_size > 0
    with pytest.raises(GloamError, match="square"):
        plot_transitions(transition_table(shared).iloc[:-1])


# ---------------------------------------------------------------- matched clusters


@pytest.mark.parametrize("seed", range(5))
def test_adjusted_rand_index_equals_scikit_learn(seed):
    """Reference: sklearn.metrics.adjusted_rand_score (Hubert & Arabie 1985), on random
    partitions, related partitions and the degenerate cases."""
    rng = np.random.default_rng(seed)
    a = rng.integers(-1, 5, 300)
    b = np.where(rng.random(300) < 0.7, a, rng.integers(0, 3, 300))
    for x, y in ((a, b), (a, rng.permutation(a)), (a, a), (np.zeros(9), np.arange(9))):
        assert_allclose(adjusted_rand_index(x, y), adjusted_rand_score(x, y), atol=1e-12)
    for x, y in ((np.zeros(9), np.zeros(9)), (np.arange(9), np.arange(9))):
        assert adjusted_rand_index(x, y) == adjusted_rand_score(x, y) == 1.0


def membership_frame(labels: np.ndarray, n_clusters: int, genes: list[str]) -> pd.DataFrame:
    U = np.full((labels.size, n_clusters), 0.1 / max(n_clusters - 1, 1))
    U[np.arange(labels.size), labels] = 0.9
    return pd.DataFrame(U, index=genes, columns=[f"C{k + 1}" for k in range(n_clusters)])


@pytest.mark.parametrize("seed", range(4))
def test_matching_recovers_a_permutation_and_is_optimal(seed):
    """The matching must undo a random relabelling (centroids with a little noise, the same
    genes), and its pairs must maximise the summed correlation, checked by an exhaustive
    search over all 5! assignments (the optimum the Hungarian method finds, Kuhn 1955)."""
    rng = np.random.default_rng(seed)
    centroids = rng.normal(size=(5, 8))
    permutation = rng.permutation(5)
    labels = rng.integers(0, 5, 200)
    inverse = np.argsort(permutation)
    match = match_clusters(
        centroids,
        centroids[permutation] + rng.normal(0.0, 0.05, (5, 8)),
        membership_frame(labels, 5, names(200)),
        membership_frame(inverse[labels], 5, names(200)),
    )
    table = match.table
    assert_array_equal(
        table["cluster_b"].str[1:].astype(int) - 1,
        inverse[table["cluster_a"].str[1:].astype(int) - 1],
    )
    assert_allclose(table["jaccard"], 1.0)
    assert match.ari == pytest.approx(1.0)
    assert match.n_shared_genes == 200
    correlation = match.correlation.to_numpy()
    best = max(
        sum(correlation[i, p[i]] for i in range(5)) for p in itertools.permutations(range(5))
    )
    assert table["correlation"].sum() == pytest.approx(best)


def test_matching_handles_different_cluster_numbers_and_gene_sets():
    rng = np.random.default_rng(6)
    centroids = rng.normal(size=(4, 6))
    labels = rng.integers(0, 4, 120)
    keep = labels != 3  # run b lost cluster 4 and its genes, and clustered 10 other genes
    genes_b = [g for g, k in zip(names(120), keep, strict=True) if k] + [f"x{i}" for i in range(10)]
    labels_b = np.concatenate([labels[keep], rng.integers(0, 3, 10)])
    match = match_clusters(
        centroids,
        centroids[:3],
        membership_frame(labels, 4, names(120)),
        membership_frame(labels_b, 3, genes_b),
    )
    paired = match.table[match.table["cluster_b"] != ""]
    assert list(paired["cluster_a"]) == list(paired["cluster_b"]) == ["C1", "C2", "C3"]
    assert_allclose(paired["jaccard"], 1.0)
    unmatched = match.table[match.table["cluster_b"] == ""]
    assert list(unmatched["cluster_a"]) == ["C4"] and unmatched["correlation"].isna().all()
    assert match.n_shared_genes == int(keep.sum())


def test_centroids_sampled_at_different_times_are_compared_on_a_shared_axis():
    """Pearson correlation (scipy.stats.pearsonr) of known functions on the union of the
    sampled times inside the overlap; a piecewise-linear truth is recovered exactly by the
    linear interpolation."""

    def shapes(t):
        return np.stack([np.minimum(t, 6.0), np.abs(t - 5.0), np.where(t < 3, 0.0, t - 3)])

    times_a = np.array([0.0, 2.0, 3.0, 5.0, 6.0, 8.0, 12.0])
    times_b = np.array([1.0, 3.0, 5.0, 6.0, 9.0, 10.0])
    correlation = centroid_correlation(
        shapes(times_a), shapes(times_b), times_a=times_a, times_b=times_b
    )
    grid = np.array([1.0, 2.0, 3.0, 5.0, 6.0, 8.0, 9.0, 10.0])
    reference = np.array(
        [[scipy.stats.pearsonr(x, y)[0] for y in shapes(grid)] for x in shapes(grid)]
    )
    assert_allclose(correlation, reference, atol=1e-12)
    with pytest.raises(GloamError, match="shared time axis"):
        centroid_correlation(shapes(times_a), shapes(times_b)[:, :5])
    with pytest.raises(GloamError, match="at least 3"):
        centroid_correlation(
            shapes(times_a), shapes(times_a + 11.0), times_a=times_a, times_b=times_a + 11.0
        )


def test_sensitivity_summary_separates_a_stable_variant_from_a_reshuffled_one():
    """A variant with the same partition must score ARI 1 and Jaccard 1; a variant whose
    genes were reassigned at random must score an ARI near 0 (sklearn adjusted_rand_score
    as the reference for the value)."""
    rng = np.random.default_rng(7)
    centroids = rng.normal(size=(3, 6))
    labels = rng.integers(0, 3, 300)
    shuffled = rng.permutation(labels)
    runs = {
        "default": ClusteredRun(centroids, membership_frame(labels, 3, names(300))),
        "same": ClusteredRun(
            centroids[[2, 0, 1]], membership_frame(np.array([1, 2, 0])[labels], 3, names(300))
        ),
        "shuffled": ClusteredRun(centroids, membership_frame(shuffled, 3, names(300))),
    }
    summary = sensitivity_summary(runs, reference="default")
    assert list(summary.index) == ["same", "shuffled"]
    assert summary.loc["same", "ari"] == pytest.approx(1.0)
    assert summary.loc["same", "min_jaccard"] == pytest.approx(1.0)
    assert summary.loc["same", "n_matched"] == 3
    assert_allclose(
        summary.loc["shuffled", "ari"], adjusted_rand_score(labels, shuffled), atol=1e-12
    )
    assert summary.loc["shuffled", "mean_jaccard"] < 0.5
    with pytest.raises(GloamError, match="reference run"):
        sensitivity_summary(runs, reference="missing")
