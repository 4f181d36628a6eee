"""Simulated experiments (gloam.simulate): reproducible, in the workflow's layouts, with the
planted answer visible in the data and noise that follows the published models."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from gloam.errors import GloamError
from gloam.io import read_matrix, read_sample_sheet
from gloam.simulate import (
    DEFAULT_TIMES_HOURS,
    KINDS,
    MAX_SHAPE_CORRELATION,
    negative_binomial_counts,
    response_shapes,
    simulate_experiment,
)

EVEN_TIMES = np.linspace(0.0, 48.0, 10)


@pytest.fixture(scope="module")
def counts_experiment():
    return simulate_experiment(seed=1)


@pytest.fixture(scope="module")
def log_experiment():
    return simulate_experiment(seed=2, value_type="log", n_replicates=4, log_noise_sd=0.3)


@pytest.fixture(scope="module")
def two_conditions():
    return simulate_experiment(
        seed=3, value_type="log", n_conditions=2, switch_share=0.2, log_noise_sd=0.1
    )


def replicate_means(experiment) -> tuple[np.ndarray, np.ndarray]:
    """Means over replicates (genes x condition-time columns, in sample order) and their times."""
    samples = experiment.samples
    key = samples["condition"] + "|" + samples["time"].astype(str)
    codes, uniques = pd.factorize(key)
    values = experiment.matrix.to_numpy(dtype=float)
    sums = np.zeros((values.shape[0], uniques.size))
    np.add.at(sums.T, codes, values.T)
    means = sums / np.bincount(codes)
    times = samples.groupby(codes)["time"].first().to_numpy()
    return means, times


def flat_normalised_counts(experiment) -> np.ndarray:
    """Counts divided by each sample's share of the flat genes' total (library size)."""
    flat = (experiment.truth["response"] == "flat").to_numpy()
    counts = experiment.matrix.to_numpy(dtype=float)
    library = counts[flat].sum(axis=0)
    return counts / (library / library.mean())


# ----------------------------------------------------------------- layout and determinism


@pytest.mark.parametrize("kind", KINDS)
def test_same_seed_gives_the_same_experiment_and_another_seed_does_not(kind):
    settings = {"kind": kind, "n_genes": 300, "n_conditions": 2}
    first = simulate_experiment(seed=5, **settings)
    second = simulate_experiment(seed=5, **settings)
    pd.testing.assert_frame_equal(first.matrix, second.matrix)
    pd.testing.assert_frame_equal(first.samples, second.samples)
    pd.testing.assert_frame_equal(first.truth, second.truth)
    pd.testing.assert_frame_equal(first.shapes, second.shapes)
    other = simulate_experiment(seed=6, **settings)
    assert not np.array_equal(first.matrix.to_numpy(), other.matrix.to_numpy())


def test_tables_have_the_documented_layout(counts_experiment):
    experiment = counts_experiment
    times = len(DEFAULT_TIMES_HOURS)
    assert experiment.matrix.shape == (2000, times * 3)
    assert experiment.matrix.index.name == "gene"
    assert list(experiment.samples.columns) == ["sample", "time", "replicate", "condition"]
    assert list(experiment.samples["sample"]) == list(experiment.matrix.columns)
    assert sorted(experiment.samples["time"].unique()) == list(DEFAULT_TIMES_HOURS)
    assert (experiment.samples.groupby("time")["replicate"].nunique() == 3).all()
    assert set(experiment.samples["condition"]) == {"wt"}
    assert list(experiment.truth.columns) == ["gene", "response", "amplitude_log2", "base_mean"]
    assert list(experiment.truth["gene"]) == list(experiment.matrix.index)
    assert experiment.n_planted == 5 and experiment.value_type == "counts"
    assert list(experiment.shapes.index) == ["R1", "R2", "R3", "R4", "R5"]
    assert experiment.shapes.shape == (5, 1 + times)


def test_counts_are_non_negative_integers(counts_experiment):
    values = counts_experiment.matrix.to_numpy()
    assert values.dtype.kind == "i"
    assert (values >= 0).all()


def test_response_shares_follow_the_settings(counts_experiment):
    shares = counts_experiment.truth["response"].value_counts()
    assert shares["flat"] == 1000
    planted = shares.drop("flat")
    assert sorted(planted.index) == ["R1", "R2", "R3", "R4", "R5"]
    assert planted.max() - planted.min() <= 1
    truth = counts_experiment.truth
    assert (truth.loc[truth["response"] == "flat", "amplitude_log2"] == 0).all()
    planted_amplitude = truth.loc[truth["response"] != "flat", "amplitude_log2"]
    assert planted_amplitude.between(1.5, 3.0).all()


def test_without_replicates_each_time_point_has_one_sample():
    experiment = simulate_experiment(seed=4, n_genes=200, n_replicates=1, value_type="log")
    assert len(experiment.samples) == len(DEFAULT_TIMES_HOURS)
    assert (experiment.samples["replicate"] == 1).all()
    assert experiment.matrix.shape == (200, len(DEFAULT_TIMES_HOURS))


def test_written_files_are_read_back_by_gloam_readers(tmp_path, log_experiment):
    paths = log_experiment.write(tmp_path / "sim")
    assert set(paths) == {"matrix", "samples", "truth", "shapes"}
    matrix = read_matrix(paths["matrix"])
    # Written in shortest round-trip form; pandas' fast float parser may differ in the last bit.
    np.testing.assert_allclose(matrix.to_numpy(), log_experiment.matrix.to_numpy(), rtol=1e-14)
    sheet = read_sample_sheet(paths["samples"])
    assert list(sheet["sample"]) == list(log_experiment.samples["sample"])
    np.testing.assert_array_equal(sheet["time"], log_experiment.samples["time"])
    truth = pd.read_csv(paths["truth"], sep="\t", dtype={"gene": str})
    pd.testing.assert_frame_equal(truth, log_experiment.truth)


@pytest.mark.parametrize(
    "settings",
    [
        {"kind": "clusters"},
        {"value_type": "tpm"},
        {"n_genes": 5},
        {"flat_share": 1.0},
        {"n_responses": 0},
        {"amplitude_log2": (2.0, 1.0)},
        {"n_replicates": 0},
        {"n_conditions": 3},
        {"switch_share": 1.5},
        {"dispersion": -0.1},
        {"log_noise_sd": -1.0},
        {"times": [0.0, 1.0]},
        {"times": [0.0, 1.0, 1.0, 2.0]},
        {"times": [0.0, np.nan, 2.0]},
        # Ten clearly distinct shapes cannot fit on three time points.
        {"times": [0.0, 1.0, 2.0], "n_responses": 10},
    ],
)
def test_bad_settings_are_refused_with_a_gloam_error(settings):
    settings = dict(settings)
    with pytest.raises(GloamError, match="simulation|distinct"):
        simulate_experiment(n_genes=settings.pop("n_genes", 100), **settings)


# -------------------------------------------------------------------- the planted answer


@pytest.mark.parametrize("n_responses", [4, 5, 7])
@pytest.mark.parametrize("times", [DEFAULT_TIMES_HOURS, EVEN_TIMES], ids=["uneven", "even"])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_planted_shapes_are_clearly_distinct(n_responses, times, seed):
    """Pairwise Pearson correlation (numpy.corrcoef) of the z-scored shapes is at most 0.7."""
    shapes, descriptions = response_shapes(times, n_responses, rng=seed)
    assert shapes.shape == (n_responses, len(times)) and len(descriptions) == n_responses
    np.testing.assert_allclose(shapes[:, 0], 0.0, atol=1e-12)
    np.testing.assert_allclose(np.abs(shapes).max(axis=1), 1.0)
    correlation = np.corrcoef(shapes)
    upper = correlation[np.triu_indices(n_responses, k=1)]
    assert upper.max() <= MAX_SHAPE_CORRELATION + 1e-9


def test_shape_family_is_varied():
    """Across a few seeds the drawn shapes come from at least four different families."""
    words = set()
    for seed in range(4):
        _, descriptions = response_shapes(DEFAULT_TIMES_HOURS, 5, rng=seed)
        words.update(" ".join(text.split()[:2]) for text in descriptions)
    assert len(words) >= 4, words


def test_planted_genes_follow_their_own_shape(log_experiment):
    """Each planted gene's replicate means correlate best with its own planted shape, and its
    largest change from the first time point is its amplitude (within noise)."""
    means, _ = replicate_means(log_experiment)
    truth = log_experiment.truth
    planted = (truth["response"] != "flat").to_numpy()
    shapes = log_experiment.shapes.drop(columns="description")
    change = means[planted] - means[planted, :1]
    correlation = np.corrcoef(np.vstack([change, shapes.to_numpy()]))[: planted.sum(), -5:]
    best = shapes.index.to_numpy()[correlation.argmax(axis=1)]
    assert np.mean(best == truth.loc[planted, "response"].to_numpy()) > 0.95
    # Noise of a difference of two 4-replicate means: sd 0.3 * sqrt(2 / 4) ~ 0.21.
    error = np.abs(change).max(axis=1) - truth.loc[planted, "amplitude_log2"].to_numpy()
    assert abs(np.median(error)) < 0.3


def test_flat_genes_do_not_correlate_with_time_in_log_data(log_experiment):
    """Flat genes: the Pearson test of replicate means against time (exact under Gaussian
    noise, scipy.stats.pearsonr) and Fisher's one-way ANOVA over time points
    (scipy.stats.f_oneway) give uniform p-values (Kolmogorov-Smirnov, scipy.stats.kstest);
    planted genes show a time effect."""
    means, times = replicate_means(log_experiment)
    flat = (log_experiment.truth["response"] == "flat").to_numpy()
    p_flat = stats.pearsonr(means[flat], np.broadcast_to(times, means[flat].shape), axis=1).pvalue
    assert stats.kstest(p_flat, "uniform").pvalue > 1e-3
    values = log_experiment.matrix.to_numpy()
    sample_times = log_experiment.samples["time"].to_numpy()
    groups = [values[:, sample_times == t] for t in np.unique(sample_times)]
    p_anova = stats.f_oneway(*groups, axis=1).pvalue
    assert stats.kstest(p_anova[flat], "uniform").pvalue > 1e-3
    assert np.mean(p_anova[~flat] < 0.05) > 0.9


def test_flat_genes_do_not_correlate_with_time_in_counts(counts_experiment):
    """Flat genes: Spearman tests of library-normalised counts against time (Pearson on ranks,
    scipy.stats.rankdata and pearsonr) are significant at 5 % in about 5 % of the genes
    (binomial test, scipy.stats.binomtest); planted genes far more often."""
    normalised = flat_normalised_counts(counts_experiment)
    time_ranks = stats.rankdata(counts_experiment.samples["time"].to_numpy())
    truth = counts_experiment.truth
    flat = (truth["response"] == "flat").to_numpy() & (truth["base_mean"] > 20).to_numpy()
    planted = (truth["response"] != "flat").to_numpy()

    def n_significant(rows: np.ndarray) -> int:
        ranks = stats.rankdata(normalised[rows], axis=1)
        p = stats.pearsonr(ranks, np.broadcast_to(time_ranks, ranks.shape), axis=1).pvalue
        return int(np.sum(p < 0.05))

    assert stats.binomtest(n_significant(flat), int(flat.sum()), 0.05).pvalue > 1e-3
    assert n_significant(planted) / planted.sum() > 0.3


# ---------------------------------------------------------------------- two conditions


def test_two_condition_truth_is_consistent(two_conditions):
    truth = two_conditions.truth
    assert {"response_wt", "response_mut", "switched"} <= set(truth.columns)
    assert (truth["switched"] == (truth["response_wt"] != truth["response_mut"])).all()
    flat = truth["response_wt"] == "flat"
    assert not truth.loc[flat, "switched"].any()
    assert (truth.loc[flat, "response_mut"] == "flat").all()
    n_planted = int((~flat).sum())
    assert truth["switched"].sum() == round(0.2 * n_planted)
    combined = np.where(
        truth["switched"], truth["response_wt"] + ">" + truth["response_mut"], truth["response_wt"]
    )
    assert (truth["response"] == combined).all()
    samples = two_conditions.samples
    assert set(samples["condition"]) == {"wt", "mut"}
    for condition in ("wt", "mut"):
        assert sorted(samples.loc[samples["condition"] == condition, "time"].unique()) == list(
            DEFAULT_TIMES_HOURS
        )


def test_switched_genes_follow_the_mut_shape_in_mut(two_conditions):
    """In the mut samples a switched gene correlates best with its mut shape (or is flat)."""
    means, _ = replicate_means(two_conditions)
    n_times = len(DEFAULT_TIMES_HOURS)
    mut = means[:, n_times:]  # the sample sheet lists wt first, then mut
    truth = two_conditions.truth
    shapes = two_conditions.shapes.drop(columns="description")
    moved = (truth["switched"] & (truth["response_mut"] != "flat")).to_numpy()
    change = mut[moved] - mut[moved, :1]
    correlation = np.corrcoef(np.vstack([change, shapes.to_numpy()]))[: moved.sum(), -5:]
    best = shapes.index.to_numpy()[correlation.argmax(axis=1)]
    assert np.mean(best == truth.loc[moved, "response_mut"].to_numpy()) > 0.9
    # Genes switched off: the mut part is flat, so its range is noise (sd 0.1 / sqrt(3)) only.
    off = (truth["response_mut"] == "flat") & truth["switched"]
    assert np.ptp(mut[off.to_numpy()], axis=1).max() < 0.5


# ------------------------------------------------------------------- negative binomial


@pytest.mark.parametrize(("mean", "dispersion"), [(5.0, 0.0), (50.0, 0.1), (500.0, 0.5)])
def test_negative_binomial_moments_follow_the_published_variance(mean, dispersion):
    """Mean mu and variance mu + phi * mu**2 (Anders & Huber 2010, Genome Biology 11:R106),
    each within 5 standard errors of its estimate over 200,000 draws."""
    draws = negative_binomial_counts(np.full(200_000, mean), dispersion, rng=9).astype(float)
    expected_variance = mean + dispersion * mean**2
    assert abs(draws.mean() - mean) < 5 * np.sqrt(expected_variance / draws.size)
    squared = (draws - draws.mean()) ** 2
    assert abs(draws.var(ddof=1) - expected_variance) < 5 * squared.std() / np.sqrt(draws.size)


@pytest.mark.parametrize("dispersion", [0.05, 0.3])
def test_simulated_counts_have_the_given_dispersion(dispersion):
    """Method-of-moments dispersion of well-expressed flat genes, (v - m * mean(1/s)) / m**2
    from variance = mu + phi * mu**2 (Anders & Huber 2010), averages to the setting."""
    experiment = simulate_experiment(
        seed=8, n_genes=3000, flat_share=0.9, dispersion=dispersion, n_replicates=3
    )
    counts = experiment.matrix.to_numpy(dtype=float)
    truth = experiment.truth
    flat = (truth["response"] == "flat").to_numpy()
    library = counts[flat].sum(axis=0)
    library = library / library.mean()
    rows = flat & (truth["base_mean"] > 100).to_numpy()
    normalised = counts[rows] / library
    m = normalised.mean(axis=1)
    v = normalised.var(axis=1, ddof=1)
    estimate = (v - m * np.mean(1.0 / library)) / m**2
    np.testing.assert_allclose(estimate.mean(), dispersion, rtol=0.1)
    # Library sizes are uneven: drawn from [0.6, 1.6], so the largest is > 1.5 x the smallest.
    assert 1.5 < library.max() / library.min() < 1.6 / 0.6 * 1.05


# ------------------------------------------------------------------ structureless kinds


@pytest.mark.parametrize("kind", ["gaussian", "independent"])
def test_structureless_kinds_plant_nothing(kind):
    experiment = simulate_experiment(kind=kind, n_genes=500, seed=1)
    assert experiment.n_planted == 0
    assert experiment.shapes.empty
    assert set(experiment.truth["response"]) == {"flat", "unstructured"}
    changing = experiment.truth["response"] == "unstructured"
    assert (experiment.truth.loc[changing, "amplitude_log2"] > 0).all()


def test_gaussian_kind_has_the_squared_exponential_correlation():
    """Across genes, time points correlate as exp(-(x_i - x_j)^2 / (2 l^2)) with
    x = log1p(hours) and l a fifth of the range of x (squared-exponential covariance,
    Rasmussen & Williams 2006, Gaussian Processes for Machine Learning, eq. 2.16; the
    equation number is from memory)."""
    experiment = simulate_experiment(
        kind="gaussian",
        n_genes=4000,
        flat_share=0.0,
        value_type="log",
        n_replicates=1,
        log_noise_sd=0.05,
        seed=3,
    )
    profiles = experiment.matrix.to_numpy() - experiment.truth["base_mean"].to_numpy()[:, None]
    x = np.log1p(np.asarray(DEFAULT_TIMES_HOURS))
    length = np.ptp(x) / 5.0
    kernel = np.exp(-((x[:, None] - x[None, :]) ** 2) / (2 * length**2))
    # Sampling error of a correlation over 4000 genes is below 0.016.
    np.testing.assert_allclose(np.corrcoef(profiles.T), kernel, atol=0.07)


def test_independent_kind_has_uncorrelated_time_points():
    experiment = simulate_experiment(
        kind="independent",
        n_genes=4000,
        flat_share=0.0,
        value_type="log",
        n_replicates=1,
        log_noise_sd=0.05,
        seed=3,
    )
    profiles = experiment.matrix.to_numpy() - experiment.truth["base_mean"].to_numpy()[:, None]
    n_times = len(DEFAULT_TIMES_HOURS)
    np.testing.assert_allclose(np.corrcoef(profiles.T), np.eye(n_times), atol=0.07)


# ------------------------------------------------------------- switching (two conditions)


def test_switching_truth_marks_exactly_the_genes_whose_profiles_differ():
    """Definition of a condition x time interaction (the conditions' profiles are not
    parallel): without noise (log data, log_noise_sd = 0) an unchanged gene's mut values
    equal its wt values, and a changed gene's differ by more than a constant shift."""
    from gloam.simulate import SWITCH_KINDS, simulate_switching

    experiment = simulate_switching(
        value_type="log", log_noise_sd=0.0, n_genes=300, switch_share=0.25, seed=3
    )
    truth = experiment.truth
    samples = experiment.samples
    values = experiment.matrix.to_numpy()
    wt = values[:, (samples["condition"] == "wt").to_numpy()]
    mut = values[:, (samples["condition"] == "mut").to_numpy()]
    difference = mut - wt  # the sheet lists both conditions in the same time/replicate order
    not_parallel = np.ptp(difference, axis=1) > 1e-9
    assert (truth["changed"].to_numpy() == not_parallel).all()
    assert (truth["changed"] == truth["switched"]).all()
    assert set(truth["change"]) <= set(SWITCH_KINDS)
    lost = (truth["change"] == "lost_response").to_numpy()
    assert (truth.loc[lost, "response_mut"] == "flat").all()
    assert np.ptp(mut[lost], axis=1).max() < 1e-9
    planted = (truth["response_wt"] != "flat").sum()
    assert truth["changed"].sum() == round(0.25 * planted)


def test_switching_null_has_no_changed_gene_and_bad_settings_are_refused():
    from gloam.simulate import simulate_switching

    null = simulate_switching(null=True, n_genes=200, seed=4)
    assert not null.truth["changed"].any()
    assert (null.truth["change"] == "none").all()
    assert null.matrix.shape == (200, 2 * len(DEFAULT_TIMES_HOURS) * 3)
    with pytest.raises(GloamError, match="n_replicates"):
        simulate_switching(n_replicates=1)
    with pytest.raises(GloamError, match="switch_share"):
        simulate_switching(switch_share=0.0)
