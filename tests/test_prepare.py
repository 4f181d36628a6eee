"""gloam.prepare: normalisation, missing values, filters, standardisation and outputs.

Each check names its outside source: a published formula, a reference library from PyPI
(pydeseq2, scipy, numpy) or values worked by hand from the small matrix in the test.
"""

from __future__ import annotations

import warnings

import anndata
import numpy as np
import pandas as pd
import pytest
import scipy.stats
from numpy.testing import assert_allclose, assert_array_equal

from gloam import prepare as prep
from gloam.errors import GloamError, GloamWarning
from gloam.prepare import (
    DROP_REASONS,
    ZSCORE_DDOF,
    PrepareSettings,
    counts_per_million,
    fill_missing,
    interpolate_over_time,
    log_transform,
    median_of_ratios_size_factors,
    prepare_expression,
    read_prepared,
    settings_from_mapping,
    summarise_replicates,
    write_prepared,
    zscore_rows,
)


def _steps(**settings) -> PrepareSettings:
    """Settings that isolate one preparation step: CPM for counts and no test for change
    over time (the defaults, median-of-ratios and the responsive selection, have tests of
    their own below and in tests/test_responsive.py)."""
    settings.setdefault("gene_selection", "all")
    if settings.get("value_type", "counts") == "counts":
        settings.setdefault("normalisation", "cpm")
    return PrepareSettings(**settings)


def make_sheet(times, replicates=1, conditions=("all",)) -> pd.DataFrame:
    rows = [
        {"sample": f"{c}_t{t}_r{r}", "time": float(t), "replicate": str(r), "condition": c}
        for c in conditions
        for t in times
        for r in range(replicates)
    ]
    sheet = pd.DataFrame(rows)
    if conditions == ("all",):
        sheet = sheet.drop(columns="condition")
    return sheet


def make_counts(sheet: pd.DataFrame, n_genes: int = 40, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    means = rng.uniform(20, 500, size=(n_genes, 1))
    trend = rng.normal(0, 0.6, size=(n_genes, 1)) * np.log1p(sheet["time"].to_numpy())
    values = rng.poisson(means * np.exp(trend)).astype(float)
    genes = pd.Index([f"g{i}" for i in range(n_genes)], name="gene")
    return pd.DataFrame(values, index=genes, columns=sheet["sample"].to_list())


# ---------------------------------------------------------------- normalisation


def test_median_of_ratios_matches_pydeseq2():
    """Reference library: pydeseq2.preprocessing.deseq2_norm (samples x genes input)."""
    from pydeseq2.preprocessing import deseq2_norm

    rng = np.random.default_rng(3)
    counts = rng.negative_binomial(5, 0.05, size=(300, 7)).astype(float)
    counts[:25, 2] = 0  # genes with a zero must not enter the geometric means
    _, expected = deseq2_norm(counts.T)
    assert_allclose(median_of_ratios_size_factors(counts), expected, rtol=1e-12)


def test_median_of_ratios_worked_by_hand():
    """Anders & Huber 2010, Genome Biology 11:R106, eq. (5), worked by hand.

    Genes (rows) with geometric means 2, 2, 6 (the zero gene is excluded):
    sample 1 ratios 1/2, 2/2, 3/6 -> median 0.5; sample 2 ratios 4/2, 2/2, 12/6 -> median 2.
    """
    counts = np.array([[1.0, 4.0], [2.0, 2.0], [3.0, 12.0], [0.0, 7.0]])
    assert_allclose(median_of_ratios_size_factors(counts), [0.5, 2.0], rtol=1e-12)


def test_median_of_ratios_without_a_complete_gene_is_a_user_error():
    with pytest.raises(GloamError, match="at least one gene with a positive count in every"):
        median_of_ratios_size_factors(np.array([[0.0, 1.0], [1.0, 0.0]]))


def test_cpm_and_log2_worked_by_hand():
    """CPM = count / library size * 1e6 (Robinson & Oshlack 2010, Genome Biology 11:R25).

    Library sizes 100 and 200 by hand; log2 compared with numpy.log2 directly.
    """
    counts = np.array([[10.0, 0.0], [30.0, 50.0], [60.0, 150.0]])
    expected = np.array([[1e5, 0.0], [3e5, 2.5e5], [6e5, 7.5e5]])
    assert_allclose(counts_per_million(counts), expected, rtol=1e-12)
    assert_allclose(log_transform(expected, 0.5), np.log2(expected + 0.5), rtol=1e-12)


def test_prepared_log_means_equal_direct_numpy_cpm_log2_replicate_mean():
    """Pipeline check against a direct NumPy computation of mean(log2(CPM + 1))."""
    sheet = make_sheet([0, 1, 2], replicates=2)
    counts = make_counts(sheet, n_genes=12)
    prepared = prepare_expression(counts, sheet, _steps(min_samples_expressed=0))
    values = counts.to_numpy()
    log_cpm = np.log2(values / values.sum(axis=0) * 1e6 + 1.0)
    expected = np.column_stack([log_cpm[:, 2 * t : 2 * t + 2].mean(axis=1) for t in range(3)])
    kept = counts.index.get_indexer(prepared.log_means.index)
    assert_allclose(prepared.log_means.to_numpy(), expected[kept], rtol=1e-12)


def test_median_ratio_pipeline_divides_by_pydeseq2_size_factors():
    """Reference library: pydeseq2 normalised counts, then log2(x + 1) by NumPy."""
    from pydeseq2.preprocessing import deseq2_norm

    sheet = make_sheet([0, 1, 2, 3])
    counts = make_counts(sheet, n_genes=30, seed=5)
    settings = _steps(normalisation="median_ratio", min_samples_expressed=0)
    prepared = prepare_expression(counts, sheet, settings)
    normalised, _ = deseq2_norm(counts.to_numpy().T)
    expected = np.log2(normalised.T + 1.0)
    kept = counts.index.get_indexer(prepared.log_means.index)
    assert_allclose(prepared.log_means.to_numpy(), expected[kept], rtol=1e-12)


def test_normalisation_none_logs_raw_counts():
    """log2(count + pseudocount) directly by NumPy, no library-size scaling."""
    sheet = make_sheet([0, 1, 2])
    counts = make_counts(sheet, n_genes=10)
    settings = _steps(normalisation="none", pseudocount=0.5, min_samples_expressed=0)
    prepared = prepare_expression(counts, sheet, settings)
    expected = np.log2(counts.loc[prepared.log_means.index].to_numpy() + 0.5)
    assert_allclose(prepared.log_means.to_numpy(), expected, rtol=1e-12)


# ---------------------------------------------------------------- z-scores


def test_zscores_have_mean_zero_and_sample_sd_one():
    """Definition of the z-score with ddof=1 (sample SD); scipy.stats.zscore as reference."""
    rng = np.random.default_rng(1)
    profiles = rng.normal(5, 2, size=(50, 6))
    z, mean, sd = zscore_rows(profiles)
    assert ZSCORE_DDOF == 1
    assert_allclose(z.mean(axis=1), 0.0, atol=1e-12)
    assert_allclose(z.std(axis=1, ddof=1), 1.0, rtol=1e-12)
    assert_allclose(z, scipy.stats.zscore(profiles, axis=1, ddof=1), rtol=1e-12)
    assert_allclose(sd, np.std(profiles, axis=1, ddof=1), rtol=1e-12)


def test_prepared_zscores_are_standardised_with_ddof_one():
    sheet = make_sheet([0, 1, 2, 4, 8], replicates=2)
    prepared = prepare_expression(make_counts(sheet), sheet, _steps())
    z = prepared.zscores.to_numpy()
    assert_allclose(z.mean(axis=1), 0.0, atol=1e-12)
    assert_allclose(z.std(axis=1, ddof=1), 1.0, rtol=1e-12)


def test_flat_genes_are_dropped_without_division_by_zero():
    sheet = make_sheet([0, 1, 2], replicates=2)
    counts = make_counts(sheet, n_genes=8)
    counts.loc["g0"] = 0.0  # flat after log2(x + 1) whatever the library sizes
    log_sheet = make_sheet([0, 1, 2])
    log_values = pd.DataFrame(
        [[3.0, 3.0, 3.0], [1.0, 2.0, 3.0]],
        index=pd.Index(["flat", "rising"], name="gene"),
        columns=log_sheet["sample"].to_list(),
    )
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a division by zero would warn
        prepared = prepare_expression(counts, sheet, _steps(min_samples_expressed=0))
        prepared_log = prepare_expression(log_values, log_sheet, _steps(value_type="log"))
    report = prepared.gene_report.set_index("gene")
    assert report.loc["g0", "status"] == "flat"
    assert "g0" not in prepared.zscores.index
    assert np.isfinite(prepared.zscores.to_numpy()).all()
    assert prepared_log.zscores.index.tolist() == ["rising"]
    # z-scores of 1, 2, 3 with ddof=1 worked by hand: mean 2, SD 1.
    assert_allclose(prepared_log.zscores.loc["rising"].to_numpy(), [-1.0, 0.0, 1.0], rtol=1e-12)


# ---------------------------------------------------------------- missing values


def test_interpolation_matches_numpy_interp():
    """Reference: numpy.interp (linear between points, nearest value beyond the ends)."""
    rng = np.random.default_rng(7)
    times = np.array([0.0, 0.5, 2.0, 3.0, 7.0, 8.0])
    values = rng.normal(size=(40, times.size))
    values[rng.random(values.shape) < 0.35] = np.nan
    values[0] = np.nan  # nothing to interpolate from: stays missing
    result = interpolate_over_time(values, times)
    assert np.isnan(result[0]).all()
    for row in range(1, values.shape[0]):  # per-gene loop only in the reference
        observed = ~np.isnan(values[row])
        if not observed.any():
            continue
        expected = np.interp(times, times[observed], values[row, observed])
        assert_allclose(result[row], expected, rtol=1e-12, atol=1e-12)


def test_fill_from_replicates_then_interpolation_worked_by_hand():
    """Values worked by hand on a log-scale matrix with 2 replicates at times 0, 1, 3."""
    sheet = make_sheet([0, 1, 3], replicates=2)
    nan = np.nan
    values = pd.DataFrame(
        [
            # t0 r0, t0 r1, t1 r0, t1 r1, t3 r0, t3 r1
            [1.0, 3.0, nan, 6.0, 9.0, 9.0],  # t1 r0 <- replicate t1 r1 = 6
            [2.0, 2.0, nan, nan, 8.0, 8.0],  # t1 both missing <- 2 + (8 - 2) * 1/3 = 4
            [nan, nan, 5.0, 7.0, 1.0, 1.0],  # t0 both missing <- nearest time, mean 6
            [1.0, 2.0, 4.0, 3.0, 0.0, 1.0],  # nothing missing
        ],
        index=pd.Index(["rep", "interp", "edge", "full"], name="gene"),
        columns=sheet["sample"].to_list(),
    )
    settings = _steps(value_type="log", max_missing_fraction=0.5)
    prepared = prepare_expression(values, sheet, settings)
    report = prepared.gene_report.set_index("gene")
    assert report["n_filled"].tolist() == [1, 2, 2, 0]
    assert report["n_missing"].tolist() == [1, 2, 2, 0]
    expected = np.array([[2.0, 6.0, 9.0], [2.0, 4.0, 8.0], [6.0, 6.0, 1.0], [1.5, 3.5, 0.5]])
    assert_allclose(prepared.log_means.to_numpy(), expected, rtol=1e-12)


def test_fill_missing_stays_within_condition():
    """Interpolation uses the gene's own condition only (by hand: 10 + (30 - 10) / 2)."""
    group_times = np.array([0.0, 1.0, 2.0, 0.0, 1.0, 2.0])
    group_conditions = np.array(["a", "a", "a", "b", "b", "b"], dtype=object)
    values = np.array([[10.0, np.nan, 30.0, 100.0, 100.0, 100.0]])
    filled, n_filled = fill_missing(values, np.arange(6), group_times, group_conditions)
    assert_allclose(filled, [[10.0, 20.0, 30.0, 100.0, 100.0, 100.0]], rtol=1e-12)
    assert n_filled.tolist() == [1]


def test_genes_with_too_many_missing_or_a_missing_condition_are_dropped():
    sheet = make_sheet([0, 1, 2], replicates=1, conditions=("ctl", "heat"))
    nan = np.nan
    values = pd.DataFrame(
        [
            [1.0, 2.0, 3.0, 3.0, 2.0, 1.0],
            [1.0, nan, nan, nan, 2.0, 1.0],  # 3/6 missing > 0.4
            [1.0, 2.0, 4.0, nan, nan, nan],  # would be 3/6 too; see second run
        ],
        index=pd.Index(["ok", "holes", "no_heat"], name="gene"),
        columns=sheet["sample"].to_list(),
    )
    report = prepare_expression(
        values, sheet, _steps(value_type="log", max_missing_fraction=0.4)
    ).gene_report.set_index("gene")
    assert report["status"].tolist() == ["kept", "too_many_missing", "too_many_missing"]
    assert report.loc["holes", "n_filled"] == 0
    report = prepare_expression(
        values, sheet, _steps(value_type="log", max_missing_fraction=0.6)
    ).gene_report.set_index("gene")
    assert report.loc["holes", "status"] == "kept"
    assert report.loc["holes", "n_filled"] == 3
    assert report.loc["no_heat", "status"] == "missing_in_whole_condition"


# ---------------------------------------------------------------- filters


def test_expression_filter_counts_samples_at_or_above_the_cpm_floor():
    """CPM by hand: each sample's library is 1e6 reads, so CPM equals the count."""
    sheet = make_sheet([0, 1, 2])
    counts = pd.DataFrame(
        [[10.0, 5.0, 1.0], [0.0, 6.0, 0.0], [999_990.0, 999_989.0, 999_999.0]],
        index=pd.Index(["two_of_three", "one_of_three", "rest"], name="gene"),
        columns=sheet["sample"].to_list(),
    )
    assert_allclose(counts.sum(axis=0).to_numpy(), 1e6)
    settings = _steps(min_expression=5.0, min_samples_expressed=2)
    report = prepare_expression(counts, sheet, settings).gene_report.set_index("gene")
    assert report.loc["two_of_three", "status"] == "kept"
    assert report.loc["two_of_three", "n_samples_expressed"] == 2  # 10 and 5 (>= floor)
    assert report.loc["one_of_three", "status"] == "low_expression"
    assert report.loc["one_of_three", "n_samples_expressed"] == 1


def test_variability_filters_min_sd_then_top_n():
    """Profile SDs (ddof=1) worked by hand: 0.5, 1, 2 and 3 for these log profiles."""
    sheet = make_sheet([0, 1, 2])
    values = pd.DataFrame(
        [[0.0, 0.5, 1.0], [0.0, 1.0, 2.0], [0.0, 2.0, 4.0], [0.0, 3.0, 6.0]],
        index=pd.Index(["sd05", "sd1", "sd2", "sd3"], name="gene"),
        columns=sheet["sample"].to_list(),
    )
    settings = _steps(value_type="log", min_sd=0.75, top_variable=2)
    prepared = prepare_expression(values, sheet, settings)
    report = prepared.gene_report.set_index("gene")
    assert_allclose(report["sd"].to_numpy(), [0.5, 1.0, 2.0, 3.0], rtol=1e-12)
    assert report["status"].tolist() == [
        "low_variability",
        "not_in_top_variable",
        "kept",
        "kept",
    ]
    assert prepared.zscores.index.tolist() == ["sd2", "sd3"]


def test_replicate_median_differs_from_mean():
    """By hand: replicates 1, 2, 9 have mean 4 and median 2."""
    values = np.array([[1.0, 2.0, 9.0, 5.0]])
    group = np.array([0, 0, 0, 1])
    assert_allclose(summarise_replicates(values, group, 2, "mean"), [[4.0, 5.0]])
    assert_allclose(summarise_replicates(values, group, 2, "median"), [[2.0, 5.0]])


def test_report_and_summary_account_for_every_input_gene():
    sheet = make_sheet([0, 1, 2, 3], replicates=2)
    counts = make_counts(sheet, n_genes=60, seed=2)
    counts.iloc[:5] = 0.0
    prepared = prepare_expression(counts, sheet, _steps(top_variable=20))
    report = prepared.gene_report
    assert report["gene"].tolist() == counts.index.tolist()
    assert report.columns.tolist() == [
        "gene",
        "status",
        "n_missing",
        "n_filled",
        "n_samples_expressed",
        "mean_log",
        "sd",
        "log2_range",
        "response_statistic",
        "response_p_value",
        "response_fdr",
    ]
    summary = prepared.summary.set_index("reason")["n_genes"]
    assert summary.index.tolist() == [*DROP_REASONS, "kept"]
    assert summary.sum() == 60
    assert summary["low_expression"] == 5
    assert summary["kept"] == 20 == prepared.zscores.shape[0]
    assert (report["status"].value_counts().reindex(summary.index, fill_value=0) == summary).all()


# ---------------------------------------------------------------- conditions


def test_concatenated_conditions_are_ordered_condition_then_time():
    sheet = make_sheet([4, 0, 1], replicates=2, conditions=("heat", "ctl"))
    prepared = prepare_expression(make_counts(sheet), sheet, _steps())
    assert prepared.zscores.columns.tolist() == [
        "heat_t0",
        "heat_t1",
        "heat_t4",
        "ctl_t0",
        "ctl_t1",
        "ctl_t4",
    ]
    assert prepared.columns["condition"].tolist() == ["heat"] * 3 + ["ctl"] * 3
    assert_allclose(prepared.columns["time"].to_numpy(), [0, 1, 4, 0, 1, 4])
    assert prepared.columns["n_samples"].tolist() == [2] * 6


def test_separate_conditions_prepare_the_selected_one_with_shared_normalisation():
    sheet = make_sheet([0, 1, 2.5], replicates=2, conditions=("ctl", "heat"))
    counts = make_counts(sheet, n_genes=20)
    settings = _steps(conditions="separate", condition="heat", min_samples_expressed=0)
    prepared = prepare_expression(counts, sheet, settings)
    assert prepared.zscores.columns.tolist() == ["t0", "t1", "t2.5"]
    assert set(prepared.columns["condition"]) == {"heat"}
    assert prepared.raw.columns.tolist() == sheet["sample"][sheet["condition"] == "heat"].tolist()
    # CPM uses each sample's own library, computed before the condition is selected.
    values = counts.to_numpy()
    log_cpm = np.log2(values / values.sum(axis=0) * 1e6 + 1.0)[:, 6:]
    expected = np.column_stack([log_cpm[:, 2 * t : 2 * t + 2].mean(axis=1) for t in range(3)])
    kept = counts.index.get_indexer(prepared.log_means.index)
    assert_allclose(prepared.log_means.to_numpy(), expected[kept], rtol=1e-12)


def test_separate_without_a_condition_needs_one_when_there_are_several():
    sheet = make_sheet([0, 1, 2], conditions=("ctl", "heat"))
    with pytest.raises(GloamError, match="has 2: \\['ctl', 'heat'\\]; set condition"):
        prepare_expression(make_counts(sheet), sheet, _steps(conditions="separate"))
    with pytest.raises(GloamError, match="condition='cold' is not a condition"):
        prepare_expression(
            make_counts(sheet), sheet, _steps(conditions="separate", condition="cold")
        )


# ---------------------------------------------------------------- bad input


@pytest.mark.parametrize(
    "change,settings,message",
    [
        (lambda m: m.iloc.__setitem__((1, 2), np.inf), {}, "infinite values \\(gene 'g1' in"),
        (lambda m: m.iloc.__setitem__((3, 0), -4.0), {}, "negative values \\(gene 'g3' in"),
        (lambda m: m.iloc.__setitem__((2, 1), np.nan), {}, "counts matrix has missing values"),
        (lambda m: m.iloc.__setitem__((slice(None), 0), 0.0), {}, "have no counts at all"),
        (lambda m: None, {"min_samples_expressed": 7}, "more than the 6 samples used"),
        (lambda m: m.iloc.__setitem__(slice(None), 0.0), {}, "have no counts at all"),
    ],
)
def test_bad_values_are_user_errors(change, settings, message):
    sheet = make_sheet([0, 1, 2], replicates=2)
    counts = make_counts(sheet, n_genes=6)
    change(counts)
    with pytest.raises(GloamError, match=message):
        prepare_expression(counts, sheet, _steps(**settings))


def test_non_integer_counts_warn_and_continue():
    sheet = make_sheet([0, 1, 2])
    counts = make_counts(sheet, n_genes=6) + 0.25
    with pytest.warns(GloamWarning, match="18 non-integer values"):
        prepared = prepare_expression(counts, sheet, _steps(min_samples_expressed=0))
    assert prepared.zscores.shape[1] == 3


def test_fewer_than_three_time_points_is_an_error():
    sheet = make_sheet([0, 6], replicates=3)
    with pytest.raises(GloamError, match="cover 2 distinct time point\\(s\\) \\(\\['0', '6'\\]\\)"):
        prepare_expression(make_counts(sheet), sheet, _steps())
    sheet = pd.concat(
        [make_sheet([0, 1, 2], conditions=("a",)), make_sheet([0, 1], conditions=("b",))]
    )
    with pytest.raises(GloamError, match="of condition 'b' cover 2"):
        prepare_expression(make_counts(sheet), sheet, _steps())


def test_sheet_samples_must_be_in_the_matrix_and_extra_matrix_samples_warn():
    sheet = make_sheet([0, 1, 2])
    counts = make_counts(sheet)
    with pytest.raises(GloamError, match="not columns of the matrix: \\['t3'\\]"):
        prepare_expression(
            counts, pd.concat([sheet, pd.DataFrame({"sample": ["t3"], "time": [3.0]})])
        )
    counts["unlisted"] = 1.0
    with pytest.warns(
        GloamWarning, match="not in the sample sheet and are ignored: \\['unlisted'\\]"
    ):
        prepared = prepare_expression(counts, sheet, _steps(min_samples_expressed=0))
    assert "unlisted" not in prepared.raw.columns


def test_a_matrix_with_samples_as_rows_is_called_transposed():
    """The documented orientation (genes in rows, samples in columns) read the wrong way
    round: the sheet's names sit in the row index, or (names lost) the shape is inverted."""
    sheet = make_sheet([0, 1, 2], replicates=2)
    counts = make_counts(sheet, n_genes=30)
    with pytest.raises(
        GloamError,
        match="matrix looks transposed: 6 of the sample sheet's samples are row names of the "
        "matrix, not column names .*; put genes in rows and samples in columns",
    ):
        prepare_expression(counts.T, sheet, _steps())
    unnamed = counts.T.reset_index(drop=True)
    unnamed.index = unnamed.index.astype(str)
    with pytest.raises(GloamError, match="looks transposed: .*6 rows but 30 columns"):
        prepare_expression(unnamed, sheet, _steps())


def test_raw_counts_declared_log_warn_from_their_values():
    """Counts: integers whose variance rises with the mean (Poisson, slope 1), far above any
    log-scale value; the opposite mistake warns too (see tests/test_sanity.py)."""
    sheet = make_sheet([0, 1, 2], replicates=2)
    counts = make_counts(sheet)
    with pytest.warns(GloamWarning, match="declared value_type 'log' look like raw counts"):
        prepare_expression(counts, sheet, _steps(value_type="log"))
    with pytest.warns(GloamWarning, match="declared value_type 'counts' look like log values"):
        prepare_expression(np.log2(counts + 1), sheet, _steps(min_samples_expressed=0))


def test_empty_and_duplicated_matrices_are_errors():
    sheet = make_sheet([0, 1, 2])
    counts = make_counts(sheet)
    with pytest.raises(GloamError, match="the matrix is empty \\(0 genes"):
        prepare_expression(counts.iloc[:0], sheet, _steps())
    with pytest.raises(GloamError, match="duplicate gene IDs \\(e.g. \\['g0'\\]\\)"):
        prepare_expression(pd.concat([counts, counts.iloc[:1]]), sheet, _steps())


def test_no_gene_left_reports_the_reasons():
    sheet = make_sheet([0, 1, 2])
    counts = make_counts(sheet, n_genes=5)
    with pytest.raises(GloamError, match="no gene is left after preparation \\(low_expression: 5"):
        prepare_expression(counts, sheet, _steps(min_expression=1e7))


def test_all_flat_genes_point_at_the_data_not_the_filters():
    sheet = make_sheet([0, 1, 2], replicates=2)
    levels = np.array([[1.0], [5.0], [9.0]])  # each gene the same at every time point
    values = pd.DataFrame(
        np.repeat(levels, len(sheet), axis=1),
        index=pd.Index(["a", "b", "c"], name="gene"),
        columns=sheet["sample"].to_list(),
    )
    with pytest.raises(GloamError, match="\\(flat: 3\\): every gene is flat") as caught:
        prepare_expression(values, sheet, _steps(value_type="log"))
    message = str(caught.value)
    assert "flat genes are always dropped" in message
    assert "sample sheet's time column" in message
    assert "relax the filters" not in message  # no filter removed anything


def test_flat_genes_left_after_the_filters_get_both_kinds_of_advice():
    sheet = make_sheet([0, 1, 2])
    values = pd.DataFrame(
        [[4.0, 4.0, 4.0], [0.0, 0.5, 0.2]],  # worked by hand: flat; below 1 everywhere
        index=pd.Index(["flat", "low"], name="gene"),
        columns=sheet["sample"].to_list(),
    )
    settings = _steps(value_type="log", min_expression=1.0, min_samples_expressed=1)
    with pytest.raises(GloamError, match="every gene that passed the filters is flat") as caught:
        prepare_expression(values, sheet, settings)
    message = str(caught.value)
    assert "(low_expression: 1, flat: 1)" in message
    assert "sample sheet's time column" in message and "relax the filters" in message


# ---------------------------------------------------------------- settings


@pytest.mark.parametrize(
    "field,value,allowed",
    [
        ("value_type", "tpm", "one of 'counts', 'log'"),
        ("normalisation", "tmm", "one of 'cpm', 'median_ratio', 'none'"),
        ("pseudocount", 0, "a number in \\(0, inf\\)"),
        ("pseudocount", "1", "a number in \\(0, inf\\)"),
        ("max_missing_fraction", 1.0, "a number in \\[0, 1\\)"),
        ("max_missing_fraction", np.nan, "a number in \\[0, 1\\)"),
        ("min_expression", -1.0, "a number in \\[0, inf\\)"),
        ("min_samples_expressed", 1.5, "an integer in \\[0, inf\\)"),
        ("min_samples_expressed", True, "an integer in \\[0, inf\\)"),
        ("min_sd", -0.1, "a number in \\[0, inf\\)"),
        ("top_variable", 0, "an integer in \\[1, inf\\) or null"),
        ("replicate_summary", "max", "one of 'mean', 'median'"),
        ("conditions", "stack", "one of 'concatenate', 'separate'"),
        ("condition", "heat", "null unless conditions is 'separate'"),
    ],
)
def test_each_bad_setting_names_parameter_value_and_allowed_range(field, value, allowed):
    with pytest.raises(
        GloamError, match=f"{field}={value!r} is not allowed; {field} must be {allowed}"
    ):
        PrepareSettings(**{field: value})


def test_log_values_accept_no_library_size_normalisation():
    with pytest.raises(GloamError, match="normalisation='cpm'.*'none' when value_type is 'log'"):
        PrepareSettings(value_type="log", normalisation="cpm")


def test_defaults_resolve_by_value_type():
    counts = PrepareSettings()
    log = PrepareSettings(value_type="log")
    assert (counts.normalisation, counts.min_expression) == ("median_ratio", 1.0)
    assert (counts.gene_selection, counts.fdr, counts.min_log2_range) == ("responsive", 0.05, 1.0)
    assert (log.normalisation, log.min_expression) == ("none", None)
    assert not log.expression_filter_on


def test_settings_from_mapping_rejects_unknown_keys_and_builds_settings():
    with pytest.raises(GloamError, match="unknown preparation setting\\(s\\) \\['min_cpm'\\]"):
        settings_from_mapping({"value_type": "counts", "min_cpm": 1})
    with pytest.raises(GloamError, match="must be a mapping"):
        settings_from_mapping(["value_type"])  # type: ignore[arg-type]
    settings = settings_from_mapping({"value_type": "log", "top_variable": 100, "min_sd": 0.2})
    assert settings == PrepareSettings(value_type="log", top_variable=100, min_sd=0.2)
    assert settings.normalisation == "none"
    with pytest.raises(GloamError, match="min_sd=None is not allowed"):
        settings_from_mapping({"min_sd": None})
    assert settings_from_mapping(None) == PrepareSettings()


# ---------------------------------------------------------------- files


def make_prepared():
    sheet = make_sheet([0, 1, 2, 5], replicates=2, conditions=("ctl", "heat"))
    counts = make_counts(sheet, n_genes=30)
    counts.index = pd.Index([f"{i:04d}" for i in range(29)] + ["1-Mar"], name="gene")
    return counts, prepare_expression(counts, sheet, _steps())


def output_paths(directory):
    return {
        "h5ad_path": directory / "p.h5ad",
        "tsv_path": directory / "p.tsv",
        "report_path": directory / "report.tsv",
        "summary_path": directory / "summary.tsv",
    }


def test_written_files_round_trip_and_follow_the_bulk_convention(tmp_path):
    counts, prepared = make_prepared()
    paths = output_paths(tmp_path)
    write_prepared(prepared, **paths)
    zscores, columns = read_prepared(paths["h5ad_path"])
    pd.testing.assert_frame_equal(zscores, prepared.zscores, check_names=False)
    assert columns["condition"].tolist() == prepared.columns["condition"].tolist()
    assert_allclose(columns["time"].to_numpy(), prepared.columns["time"].to_numpy())
    data = anndata.read_h5ad(paths["h5ad_path"])
    assert data.shape == (8, prepared.zscores.shape[0])  # obs = columns, var = genes
    assert {"prepare_n_filled", "prepare_sd", "prepare_mean_log"} <= set(data.var.columns)
    assert_allclose(data.layers["log_mean"], prepared.log_means.to_numpy().T)
    raw = data.varm["prepare_raw"]
    assert_array_equal(raw, counts.loc[prepared.zscores.index].to_numpy())
    assert list(data.uns["prepare"]["raw_samples"]) == counts.columns.tolist()
    assert data.uns["prepare"]["zscore_ddof"] == 1
    table = pd.read_csv(paths["tsv_path"], sep="\t", dtype={"gene": str})
    assert table.columns.tolist() == ["gene", *prepared.zscores.columns]
    assert table["gene"].tolist() == prepared.zscores.index.tolist()  # "0001" stays text
    assert_allclose(table.iloc[:, 1:].to_numpy(), prepared.zscores.to_numpy(), rtol=1e-5)
    report = pd.read_csv(paths["report_path"], sep="\t", dtype={"gene": str})
    assert report["gene"].tolist() == counts.index.tolist()
    summary = pd.read_csv(paths["summary_path"], sep="\t")
    assert summary.columns.tolist() == ["reason", "n_genes"]


def test_a_failed_write_leaves_no_result_file(tmp_path, monkeypatch):
    _, prepared = make_prepared()
    paths = output_paths(tmp_path)

    def broken(table, path, index=False):
        raise OSError("disk full")

    monkeypatch.setattr(prep, "write_table", broken)
    with pytest.raises(OSError, match="disk full"):
        write_prepared(prepared, **paths)
    assert list(tmp_path.iterdir()) == []


def test_read_prepared_rejects_foreign_or_missing_files(tmp_path):
    with pytest.raises(GloamError, match="does not exist; run the preparation step first"):
        read_prepared(tmp_path / "none.h5ad")
    anndata.AnnData(np.zeros((2, 2))).write_h5ad(tmp_path / "other.h5ad")
    with pytest.raises(GloamError, match="not written by gloam's preparation step"):
        read_prepared(tmp_path / "other.h5ad")


# ---------------------------------------------------------------- the default gene selection


def _simulated(n_replicates: int, seed: int = 0):
    from gloam.simulate import simulate_experiment

    experiment = simulate_experiment(
        n_genes=1500, flat_share=0.6, n_replicates=n_replicates, seed=seed
    )
    truth = experiment.truth.set_index("gene")["response"]
    return experiment.matrix, experiment.samples, truth


@pytest.mark.parametrize("seed", [0, 1])
def test_default_selection_keeps_responses_and_drops_flat_genes(seed):
    """Defaults (median-of-ratios, moderated F-test at FDR 0.05, two-fold range) on counts with
    60 % flat genes: BH controls the share of flat genes among those kept (Benjamini &
    Hochberg 1995), so at most 5 % of the flat genes may pass; most planted genes pass."""
    counts, sheet, truth = _simulated(3, seed)
    prepared = prepare_expression(counts, sheet, PrepareSettings())
    assert prepared.settings.normalisation == "median_ratio"
    assert prepared.selection_method == "moderated_f"
    kept = truth.loc[prepared.zscores.index]
    flat = truth == "flat"
    assert (kept == "flat").sum() <= 0.05 * flat.sum()
    assert (kept != "flat").sum() >= 0.9 * (~flat).sum()
    report = prepared.gene_report.set_index("gene")
    tested = report["status"].isin(["kept", "not_significant", "small_change"])
    assert report.loc[tested, "response_fdr"].between(0, 1).all()
    assert (report.loc[report["status"] == "kept", "response_fdr"] <= 0.05).all()
    assert (report.loc[report["status"] == "kept", "log2_range"] >= 1.0).all()
    # Replicates travel on for resampling: one column per sample, the kept genes as rows.
    assert prepared.replicates.shape == (len(prepared.zscores), len(sheet))


def test_without_replicates_the_variance_rule_is_used_and_said():
    counts, sheet, truth = _simulated(1)
    prepared = prepare_expression(counts, sheet, PrepareSettings())
    assert prepared.selection_method == "no_replicates"
    assert any("replicate" in note for note in prepared.selection_notes)
    assert prepared.gene_report["response_p_value"].isna().all()
    kept = truth.loc[prepared.zscores.index]
    assert (kept != "flat").mean() > 0.5  # the rule enriches for responses
