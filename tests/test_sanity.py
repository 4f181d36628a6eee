"""gloam.sanity: values on the wrong scale and libraries dominated by one value.

Sources named beside each check: the variance of counts (Poisson: variance = mean; negative
binomial: mean + phi * mean**2; Anders & Huber 2010, Genome Biology 11:R106), the delta method
for the variance of a log, the median-of-ratios size factors (Anders & Huber 2010, eq. 5,
checked against pydeseq2 in tests/test_prepare.py) and its robustness to a single gene (a
median ignores one extreme value), and library-size outliers at 3 MADs (common practice,
Lun, McCarthy & Marioni 2016, F1000Research 5:2122).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from gloam.demo import simulate_demo
from gloam.errors import GloamWarning
from gloam.prepare import PrepareSettings, median_of_ratios_size_factors, prepare_expression
from gloam.sanity import (
    COUNT_SLOPE,
    check_libraries,
    check_value_scale,
    library_checks,
    value_scale,
)


def negative_binomial(n_genes: int, n_samples: int, seed: int) -> np.ndarray:
    """Counts of genes with log-normal means and dispersion 0.1 (numpy's generator)."""
    rng = np.random.default_rng(seed)
    means = np.exp(rng.normal(np.log(200.0), 1.2, size=(n_genes, 1)))
    shape = 1 / 0.1
    return rng.poisson(rng.gamma(shape, means / shape, size=(n_genes, n_samples))).astype(float)


def names(prefix: str, n: int) -> np.ndarray:
    return np.array([f"{prefix}{i}" for i in range(n)], dtype=object)


def no_gloam_warning(function, *args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("error", GloamWarning)
        return function(*args, **kwargs)


# ---------------------------------------------------------------- value scale


def test_poisson_counts_have_a_mean_variance_slope_of_one():
    """Poisson: variance = mean, so log(var) = log(mean) and the slope is 1."""
    rng = np.random.default_rng(1)
    counts = rng.poisson(rng.uniform(5, 2000, size=(400, 1)), size=(400, 12)).astype(float)
    scale = value_scale(counts)
    assert scale.mean_variance_slope == pytest.approx(1.0, abs=0.1)
    assert scale.integer_share == 1.0 and scale.minimum >= 0


def test_log_counts_have_a_flat_or_falling_mean_variance_relation():
    """Delta method: var(log k) ~ 1/mean + phi falls with the mean (slope below 0.5)."""
    logs = np.log2(negative_binomial(400, 12, seed=2) + 1)
    scale = value_scale(logs)
    assert scale.mean_variance_slope < COUNT_SLOPE
    assert scale.maximum < 50 and scale.integer_share < 0.5


def test_negative_binomial_counts_have_a_slope_above_one():
    """Anders & Huber 2010: variance = mean + phi * mean**2, between slope 1 and 2."""
    scale = value_scale(negative_binomial(400, 12, seed=3))
    assert 1.0 < scale.mean_variance_slope < 2.05


@pytest.mark.parametrize(
    "make,declared,message",
    [
        (lambda k: k, "log", "declared value_type 'log' look like raw counts"),
        (lambda k: k * 1.37, "log", "declared value_type 'log' look like values on a linear"),
        (lambda k: np.log2(k + 1), "counts", "declared value_type 'counts' look like log values"),
    ],
    ids=["counts_as_log", "linear_as_log", "log_as_counts"],
)
def test_a_wrong_value_type_warns_in_one_line_with_the_evidence(make, declared, message):
    values = make(negative_binomial(300, 10, seed=4))
    with pytest.warns(GloamWarning, match=message) as caught:
        check_value_scale(values, declared, genes=names("g", 300), samples=names("s", 10))
    assert len(caught) == 1
    text = str(caught[0].message)
    assert "\n" not in text and "log-log slope" in text


@pytest.mark.parametrize(
    "make,declared",
    [
        (lambda k: k, "counts"),
        (lambda k: np.log2(k + 1), "log"),
        # log2 intensities of mass spectrometry reach the 30s (from memory).
        (lambda k: np.log2(k * 1e6 + 1), "log"),
    ],
    ids=["counts", "log", "log2_intensities"],
)
def test_values_that_fit_their_type_do_not_warn(make, declared):
    values = make(negative_binomial(300, 10, seed=5))
    no_gloam_warning(
        check_value_scale, values, declared, genes=names("g", 300), samples=names("s", 10)
    )


def test_log_data_with_missing_values_and_negatives_is_not_called_counts():
    """Microarray-like log2 intensities centred on 0 (log ratios), some missing."""
    rng = np.random.default_rng(6)
    values = rng.normal(0.0, 1.0, size=(200, 8))
    values[rng.random(values.shape) < 0.05] = np.nan
    no_gloam_warning(check_value_scale, values, "log", genes=names("g", 200), samples=names("s", 8))


def test_fractional_counts_keep_their_mild_warning():
    """Estimated counts (fractional, on the count scale) are not log values."""
    values = negative_binomial(300, 10, seed=7) + 0.5
    with pytest.warns(GloamWarning, match="3000 non-integer values .*estimated counts"):
        check_value_scale(values, "counts", genes=names("g", 300), samples=names("s", 10))


# ---------------------------------------------------------------- dominated libraries


@pytest.fixture(scope="module")
def demo():
    return simulate_demo(n_genes=600)


def corrupted(counts: pd.DataFrame, value: float = 1e8) -> pd.DataFrame:
    """One typo: the first gene of the first sample set to ``value``."""
    changed = counts.astype(float)
    changed.iloc[0, 0] = value
    return changed


def test_clean_demo_libraries_are_not_flagged(demo):
    table = no_gloam_warning(
        check_libraries,
        demo.counts.to_numpy(float),
        demo.counts.index,
        demo.counts.columns,
        "median_ratio",
    )
    assert not table["dominated"].any() and not table["size_factor_outlier"].any()
    # Composition differences between ordinary samples: well below the two-fold limit.
    assert table["library_excess"].between(0.6, 1.5).all()


def test_one_absurd_count_is_named_with_its_sample_and_gene(demo):
    counts = corrupted(demo.counts)
    with pytest.warns(GloamWarning) as caught:
        table = check_libraries(counts.to_numpy(), counts.index, counts.columns, "cpm")
    flagged = table[table["dominated"]]
    assert flagged["sample"].tolist() == [counts.columns[0]]
    assert flagged["top_gene"].tolist() == [counts.index[0]]
    assert flagged["top_share"].iloc[0] > 0.9
    (message,) = [str(warning.message) for warning in caught]
    assert f"sample {counts.columns[0]!r} is dominated by gene {counts.index[0]!r}" in message
    assert "1e+08 counts" in message and "normalisation 'median_ratio'" in message
    assert "\n" not in message


def test_median_of_ratios_size_factors_ignore_one_absurd_count(demo):
    """A median ignores one extreme ratio: every factor moves by less than 1 %, while the
    library size of the corrupted sample, and so its CPM scaling, grows many-fold."""
    clean = demo.counts.to_numpy(float)
    typo = corrupted(demo.counts).to_numpy()
    before, after = median_of_ratios_size_factors(clean), median_of_ratios_size_factors(typo)
    np.testing.assert_allclose(after, before, rtol=0.01)
    assert typo[:, 0].sum() / clean[:, 0].sum() > 50


def _first_time_minimum_share(prepared) -> float:
    return float(np.mean(np.argmin(prepared.log_means.to_numpy(), axis=1) == 0))


def test_default_preparation_is_robust_to_one_absurd_count_and_cpm_is_not(demo):
    """The demo with one cell set to 1e8: with median-of-ratios (the default) the number of
    kept genes and the share whose minimum is at the first time point barely change; with
    CPM the corrupted time-0 sample is scaled down and that share jumps."""
    results = {}
    for normalisation in ("median_ratio", "cpm"):
        settings = PrepareSettings(normalisation=normalisation)
        clean = no_gloam_warning(prepare_expression, demo.counts, demo.samples, settings)
        with pytest.warns(GloamWarning, match="is dominated by gene"):
            typo = prepare_expression(corrupted(demo.counts), demo.samples, settings)
        results[normalisation] = (clean, typo)
    clean, typo = results["median_ratio"]
    assert abs(len(typo.zscores) - len(clean.zscores)) <= 0.01 * len(clean.zscores)
    assert abs(_first_time_minimum_share(typo) - _first_time_minimum_share(clean)) < 0.02
    clean, typo = results["cpm"]
    assert _first_time_minimum_share(typo) - _first_time_minimum_share(clean) > 0.3


def test_the_dominated_sample_is_warned_once_whatever_the_passes(demo):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        prepare_expression(corrupted(demo.counts), demo.samples)
    dominated = [w for w in caught if "is dominated by gene" in str(w.message)]
    assert len(dominated) == 1


def test_a_library_of_a_few_genes_dominating_everything_is_flagged():
    """Half of one sample's counts in 20 genes far above their level elsewhere: no single
    gene reaches 10 %, but the library is 2x what its size factor supports."""
    counts = negative_binomial(500, 8, seed=8)
    counts[:20, 3] += counts[:, 3].sum() / 20 * 1.2
    table = library_checks(counts, names("g", 500), names("s", 8))
    assert table["dominated"].tolist() == [i == 3 for i in range(8)]
    assert table.loc[3, "library_excess"] > 2 and table.loc[3, "top_share"] < 0.1


def test_a_much_shallower_sample_is_flagged_but_ordinary_depth_differences_are_not():
    """Binomial thinning to 5 % gives a size factor about 20-fold below the others (3 MADs,
    common practice); depths within 1.5-fold of each other are not flagged."""
    rng = np.random.default_rng(9)
    counts = negative_binomial(500, 8, seed=9)
    depths = np.array([1.0, 1.2, 0.8, 1.5, 1.0, 0.9, 1.1, 1.0])
    ordinary = rng.binomial(counts.astype(np.int64), depths / depths.max()).astype(float)
    table = no_gloam_warning(
        check_libraries, ordinary, names("g", 500), names("s", 8), "median_ratio"
    )
    assert not table["size_factor_outlier"].any()
    shallow = ordinary.copy()
    shallow[:, 5] = rng.binomial(ordinary[:, 5].astype(np.int64), 0.05)
    with pytest.warns(GloamWarning, match="sample 's5' has size factor .*far from the others"):
        table = check_libraries(shallow, names("g", 500), names("s", 8), "median_ratio")
    assert table["size_factor_outlier"].tolist() == [i == 5 for i in range(8)]
    assert not table["dominated"].any()


def test_sparse_counts_fall_back_to_library_sizes_and_still_find_the_typo():
    """No gene positive in every sample: median-of-ratios is impossible, and the single-gene
    rule still finds a 1e8 count."""
    counts = negative_binomial(300, 6, seed=10)
    counts[np.arange(300), np.arange(300) % 6] = 0.0
    counts[7, 2] = 1e8
    table = library_checks(counts, names("g", 300), names("s", 6))
    assert table["dominated"].tolist() == [i == 2 for i in range(6)]
    assert table.loc[2, "top_gene"] == "g7"


def test_too_few_genes_are_not_judged():
    counts = np.array([[10.0, 5.0, 1.0], [0.0, 6.0, 0.0], [999_990.0, 999_989.0, 999_999.0]])
    assert no_gloam_warning(check_libraries, counts, names("g", 3), names("s", 3), "cpm") is None
