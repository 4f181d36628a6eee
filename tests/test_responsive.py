"""gloam.responsive: moderated F-tests of change over time, FDR and the gene selection.

Each check names its outside source: scipy (one-way ANOVA, F and chi-square distributions),
statsmodels (OLS nested-model and two-way ANOVA tables, Benjamini-Hochberg), the model and
limits in Smyth (2004, Stat. Appl. Genet. Mol. Biol. 3:3), the FDR guarantee of Benjamini &
Hochberg (1995, J. R. Stat. Soc. B 57:289), or binomial sampling bounds on simulated data.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.special
import scipy.stats
from numpy.testing import assert_allclose, assert_array_equal
from statsmodels.formula.api import ols
from statsmodels.stats.anova import anova_lm
from statsmodels.stats.multitest import multipletests

from gloam.errors import GloamError, GloamWarning
from gloam.responsive import (
    REASONS,
    TABLE_COLUMNS,
    benjamini_hochberg,
    fit_prior_variance,
    interaction_designs,
    log2_range,
    nested_f_test,
    select_responsive,
    time_designs,
)

# ------------------------------------------------------------------------- simulation


def layout(n_times: int, n_replicates: int, conditions=("a",)):
    """Group of each sample and condition / time of each group (groups ordered by condition)."""
    condition_of_group = np.repeat(np.array(conditions, dtype=object), n_times)
    time_of_group = np.tile(np.arange(n_times, dtype=float), len(conditions))
    group_of_sample = np.repeat(np.arange(condition_of_group.size), n_replicates)
    return group_of_sample, condition_of_group, time_of_group


def prior_variances(rng, n_genes: int, d0: float, s0_squared) -> np.ndarray:
    """Smyth (2004) prior: 1 / sigma^2 ~ chi2(d0) / (d0 s0^2), i.e. scaled inverse chi-square."""
    return d0 * np.asarray(s0_squared) / rng.chisquare(d0, n_genes)


def simulate(
    rng,
    *,
    n_genes: int = 3000,
    n_times: int = 8,
    n_replicates: int = 3,
    conditions=("a",),
    d0: float = 10.0,
    s0_squared=0.1,
    level=None,
    effect=None,
):
    """Gaussian log2 values: level + effect of the group + noise with gene-wise variances.

    effect : (n_genes, n_groups) or None (no time effect: the null).
    """
    groups, condition_of_group, time_of_group = layout(n_times, n_replicates, conditions)
    if level is None:
        level = rng.uniform(3.0, 12.0, n_genes)
    sd = np.sqrt(prior_variances(rng, n_genes, d0, s0_squared))
    values = level[:, None] + rng.normal(size=(n_genes, groups.size)) * sd[:, None]
    if effect is not None:
        values = values + effect[:, groups]
    return values, groups, condition_of_group, time_of_group


def gene_names(n: int) -> list[str]:
    return [f"g{i}" for i in range(n)]


def binomial_bounds(rate: float, n: int, n_sd: float = 4.0) -> tuple[float, float]:
    """Normal approximation to a binomial proportion: rate +- n_sd standard errors."""
    half = n_sd * np.sqrt(rate * (1 - rate) / n)
    return rate - half, rate + half


# --------------------------------------------------------------- the F-test and designs


def test_unmoderated_time_f_equals_one_way_anova():
    """Reference: scipy.stats.f_oneway (one-way ANOVA) per gene, F and p to 1e-10."""
    rng = np.random.default_rng(1)
    values, groups, conditions, _ = simulate(rng, n_genes=50, n_times=6, n_replicates=3)
    values[:10] += rng.normal(0, 1.0, size=(10, 6))[:, groups]  # some genes with an effect
    full, reduced = time_designs(groups, conditions)
    result = nested_f_test(values, full, reduced, moderate=False)
    reference = scipy.stats.f_oneway(*[values[:, groups == g] for g in range(6)], axis=1)
    assert result.df_numerator == 5
    assert result.df_residual == 12
    assert_allclose(result.statistic, reference.statistic, rtol=1e-10)
    assert_allclose(result.p_value, reference.pvalue, rtol=1e-10, atol=1e-14)


def test_time_f_with_two_conditions_equals_nested_ols_comparison():
    """Reference: statsmodels anova_lm(reduced, full) comparing OLS fits y ~ C(condition)
    and y ~ C(group) (F-test of nested linear models) on one gene."""
    rng = np.random.default_rng(2)
    values, groups, conditions, times = simulate(
        rng, n_genes=1, n_times=4, n_replicates=3, conditions=("ctrl", "heat")
    )
    full, reduced = time_designs(groups, conditions)
    result = nested_f_test(values, full, reduced, moderate=False)
    frame = pd.DataFrame(
        {"y": values[0], "group": groups.astype(str), "condition": conditions[groups]}
    )
    table = anova_lm(ols("y ~ C(condition)", frame).fit(), ols("y ~ C(group)", frame).fit())
    assert result.df_numerator == int(table["df_diff"].iloc[1])
    assert_allclose(result.statistic[0], table["F"].iloc[1], rtol=1e-8)
    assert_allclose(result.p_value[0], table["Pr(>F)"].iloc[1], rtol=1e-8)


def test_interaction_f_equals_two_way_anova_interaction():
    """Reference: statsmodels ols('y ~ C(condition) * C(time)') + anova_lm(typ=2), the
    C(condition):C(time) row, on one gene of a balanced 2 x 4 x 3 design."""
    rng = np.random.default_rng(3)
    values, groups, conditions, times = simulate(
        rng, n_genes=1, n_times=4, n_replicates=3, conditions=("ctrl", "heat")
    )
    values = values + rng.normal(0, 0.5, size=(1, 8))[:, groups]
    full, reduced = interaction_designs(groups, conditions, times)
    result = nested_f_test(values, full, reduced, moderate=False)
    frame = pd.DataFrame(
        {"y": values[0], "condition": conditions[groups], "time": times[groups].astype(str)}
    )
    table = anova_lm(ols("y ~ C(condition) * C(time)", frame).fit(), typ=2)
    row = table.loc["C(condition):C(time)"]
    assert result.df_numerator == int(row["df"]) == 3
    assert_allclose(result.statistic[0], row["F"], rtol=1e-8)
    assert_allclose(result.p_value[0], row["PR(>F)"], rtol=1e-8)


def test_interaction_designs_need_shared_time_points():
    """Definition of the additive reduced model: every condition must have every time."""
    groups = np.repeat(np.arange(4), 2)
    with pytest.raises(GloamError, match="every condition at every time point") as info:
        interaction_designs(groups, ["a", "a", "b", "b"], [0.0, 1.0, 0.0, 2.0])
    assert "\n" not in str(info.value)
    assert "a at time 2" in str(info.value)


def test_benjamini_hochberg_matches_statsmodels():
    """Reference: statsmodels.stats.multitest.multipletests(method='fdr_bh'), with ties,
    zeros and ones; NaN stays NaN and is not counted (Benjamini & Hochberg 1995)."""
    rng = np.random.default_rng(4)
    p = np.concatenate([rng.uniform(size=200), rng.beta(0.2, 5, size=100), [0, 0, 1, 1, 0.03]])
    p[[7, 8, 9]] = p[6]  # ties
    rng.shuffle(p)
    expected = multipletests(p, method="fdr_bh")[1]
    assert_allclose(benjamini_hochberg(p), expected, rtol=1e-12, atol=0)
    with_nan = np.concatenate([p, [np.nan, np.nan]])
    adjusted = benjamini_hochberg(with_nan)
    assert np.isnan(adjusted[-2:]).all()
    assert_allclose(adjusted[:-2], expected, rtol=1e-12)


# ------------------------------------------------------------------------ the prior


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_fit_prior_variance_recovers_known_prior(seed):
    """Smyth (2004), section 6.2: under the hierarchical model (s^2 = sigma^2 chi2(d)/d,
    1/sigma^2 = chi2(d0)/(d0 s0^2)) the moment estimator is consistent for d0 and s0^2.
    20,000 genes, d0 = 6, d = 4.  Tolerance 10 % for d0, 5 % for s0^2: about 5 standard
    deviations of the estimates measured over 40 simulated data sets (1.8 % and 0.9 %)."""
    rng = np.random.default_rng(seed)
    d0, s0_squared, d = 6.0, 0.05, 4
    sigma_squared = prior_variances(rng, 20_000, d0, s0_squared)
    s_squared = sigma_squared * rng.chisquare(d, sigma_squared.size) / d
    prior, df_prior = fit_prior_variance(s_squared, d)
    assert_allclose(df_prior, d0, rtol=0.10)
    assert_allclose(prior, s0_squared, rtol=0.05)


def test_fit_prior_variance_recovers_a_trend():
    """Smyth (2004) model with a prior variance that falls with expression, as in log counts
    (the trended prior of Law et al. 2014): the fitted trend follows the true s0^2(x) within
    a factor exp(0.2) at every gene (measured worst case over 20 data sets: exp(0.09)), and
    d0 is recovered within 10 % as without a trend."""
    rng = np.random.default_rng(5)
    d0, d = 6.0, 4
    x = rng.uniform(0.0, 10.0, 20_000)
    s0_squared = 0.05 + 2.0 * 2.0**-x
    s_squared = prior_variances(rng, x.size, d0, s0_squared) * rng.chisquare(d, x.size) / d
    prior, df_prior = fit_prior_variance(s_squared, d, covariate=x)
    assert np.max(np.abs(np.log(prior / s0_squared))) < 0.2
    assert_allclose(df_prior, d0, rtol=0.10)
    constant, _ = fit_prior_variance(s_squared, d)
    assert np.ptp(constant) == 0
    assert np.max(np.abs(np.log(constant / s0_squared))) > 1.0  # a constant cannot follow it


def test_fit_prior_variance_handles_zero_variances_and_few_genes():
    """Guards: zero variances get a floor (finite result); a trend on too few genes falls
    back to a constant prior with a warning."""
    rng = np.random.default_rng(6)
    s_squared = rng.chisquare(4, 100) / 4
    s_squared[:5] = 0.0
    prior, df_prior = fit_prior_variance(s_squared, 4)
    assert np.isfinite(prior).all() and df_prior > 0
    with pytest.warns(GloamWarning, match="constant prior"):
        prior, _ = fit_prior_variance(s_squared[:10], 4, covariate=np.arange(10.0))
    assert np.ptp(prior) == 0


def test_infinite_prior_df_gives_f_with_prior_variance():
    """Smyth (2004): as d0 -> inf the posterior variance is s0^2 and the moderated F is
    referred to F(df1, inf) = chi2(df1) / df1.  Every gene gets the same residual variance
    (residuals are +-1 times one vector), so var(log s^2) = 0 < trigamma(d/2) and d0 = inf;
    then s0^2 = exp(mean(e)) with e = log s^2 - digamma(d/2) + log(d/2) (section 6.2).
    F is checked against scipy's one-way ANOVA F rescaled by s^2 / s0^2, p against
    scipy.stats.chi2 and, as a limit, scipy.stats.f with 1e9 denominator df."""
    rng = np.random.default_rng(7)
    groups, conditions, _ = layout(5, 3)
    noise = rng.normal(size=groups.size)
    noise -= np.bincount(groups, noise)[groups] / 3  # centred within each group
    effects = rng.normal(0, 0.8, size=(200, 5))
    signs = rng.choice([-1.0, 1.0], size=(200, 1))
    values = 6.0 + effects[:, groups] + signs * noise
    full, reduced = time_designs(groups, conditions)
    result = nested_f_test(values, full, reduced)
    assert result.df_prior == np.inf
    d = result.df_residual
    s_squared = np.sum(noise**2) / d
    assert_allclose(result.residual_variance, s_squared, rtol=1e-10)
    s0_squared = s_squared * np.exp(np.log(d / 2) - scipy.special.digamma(d / 2))
    assert_allclose(result.prior_variance, s0_squared, rtol=1e-10)
    assert_allclose(result.posterior_variance, s0_squared, rtol=1e-10)
    ordinary = scipy.stats.f_oneway(*[values[:, groups == g] for g in range(5)], axis=1)
    assert_allclose(result.statistic, ordinary.statistic * s_squared / s0_squared, rtol=1e-9)
    df1 = result.df_numerator
    assert_allclose(result.p_value, scipy.stats.chi2.sf(df1 * result.statistic, df1), rtol=1e-9)
    assert_allclose(result.p_value, scipy.stats.f.sf(result.statistic, df1, 1e9), rtol=1e-6)


def test_moderated_f_uses_posterior_variance_and_augmented_df():
    """Smyth (2004), section 6.3: F = (SS_diff / df1) / s~^2 with
    s~^2 = (d0 s0^2 + d s^2) / (d0 + d) and reference F(df1, d0 + d).  SS_diff is taken from
    scipy's one-way ANOVA (F x s^2 x df1); p from scipy.stats.f."""
    rng = np.random.default_rng(8)
    values, groups, conditions, _ = simulate(rng, n_genes=400, n_times=4, n_replicates=3)
    full, reduced = time_designs(groups, conditions)
    result = nested_f_test(values, full, reduced)
    d, d0 = result.df_residual, result.df_prior
    assert 0 < d0 < np.inf
    ordinary = scipy.stats.f_oneway(*[values[:, groups == g] for g in range(4)], axis=1)
    s_squared = result.residual_variance
    posterior = (d0 * result.prior_variance + d * s_squared) / (d0 + d)
    assert_allclose(result.posterior_variance, posterior, rtol=1e-12)
    assert_allclose(result.statistic, ordinary.statistic * s_squared / posterior, rtol=1e-9)
    assert_allclose(result.p_value, scipy.stats.f.sf(result.statistic, 3, d0 + d), rtol=1e-9)
    assert_allclose(result.fdr, multipletests(result.p_value, method="fdr_bh")[1], rtol=1e-12)


# ------------------------------------------------------------- calibration and power


@pytest.mark.parametrize("seed", [10, 11, 12])
def test_null_data_selection_stays_within_the_fdr_level(seed):
    """Benjamini & Hochberg (1995): with no true effect, P(any selection) <= alpha, so the
    share selected is at most the level; and null p-values are uniform, so the share below
    0.05 lies within binomial bounds (4 standard errors) of 0.05.  3000 genes, 8 times x 3
    replicates, gene variances from Smyth's (2004) prior (d0 = 10)."""
    rng = np.random.default_rng(seed)
    values, groups, conditions, times = simulate(rng)
    selection = select_responsive(
        values, groups, conditions, times, genes=gene_names(3000), min_log2_range=0.0
    )
    table = selection.table
    assert selection.method == "moderated_f"
    assert table["responsive"].mean() <= 0.05
    low, high = binomial_bounds(0.05, 3000)
    assert low <= (table["p_value"] < 0.05).mean() <= high


def test_planted_time_effects_are_found_with_few_false_discoveries():
    """Power and Benjamini & Hochberg (1995) FDR control: 10 % of 3000 genes get a time
    profile with a range of 1.5-3 log2 units.  At least 90 % of them are found in each of
    three data sets (a check of power; measured 97-99 %), and the mean false discovery
    proportion is at most the level plus 3 binomial standard errors (expected FDP
    pi0 x alpha = 0.045)."""
    n_genes, n_planted, n_times = 3000, 300, 8
    proportions = []
    for seed in (20, 21, 22):
        rng = np.random.default_rng(seed)
        shape = rng.normal(size=(n_planted, n_times))
        shape -= shape.mean(axis=1, keepdims=True)
        shape /= np.ptp(shape, axis=1, keepdims=True)
        effect = np.zeros((n_genes, n_times))
        effect[:n_planted] = shape * rng.uniform(1.5, 3.0, size=(n_planted, 1))
        values, groups, conditions, times = simulate(rng, effect=effect)
        selection = select_responsive(values, groups, conditions, times, genes=gene_names(n_genes))
        selected = selection.table["responsive"].to_numpy()
        planted = np.arange(n_genes) < n_planted
        assert (selected & planted).sum() >= 0.9 * n_planted
        proportions.append((selected & ~planted).sum() / selected.sum())
        n_selected = selected.sum()
    standard_error = np.sqrt(0.05 * 0.95 / n_selected / len(proportions))
    assert np.mean(proportions) <= 0.05 + 3 * standard_error


def test_variance_trend_calibrates_null_p_values_across_expression():
    """Law et al. (2014), limma-trend: with a prior variance that falls with expression (as
    for log counts), a constant prior makes low-expression genes anti-conservative and high
    ones conservative.  Null data, 3 x 3000 genes; in the lowest and highest thirds of
    expression the share of p < 0.05 with the trend lies within binomial bounds (4 standard
    errors) of 0.05 and nearer to 0.05 than with a constant prior, whose lowest third is
    above the bound (measured: constant ~0.08 / ~0.02, trend ~0.045 / ~0.05)."""
    low_third = {"constant": [], "trend": []}
    high_third = {"constant": [], "trend": []}
    for seed in (30, 31, 32):
        rng = np.random.default_rng(seed)
        level = rng.uniform(2.0, 12.0, 3000)
        s0_squared = 0.05 + 2.0 ** (-(level - 2.0) / 1.5)
        values, groups, conditions, _ = simulate(rng, d0=20.0, s0_squared=s0_squared, level=level)
        full, reduced = time_designs(groups, conditions)
        low = level < np.quantile(level, 1 / 3)
        high = level > np.quantile(level, 2 / 3)
        for name, covariate in (("constant", None), ("trend", values.mean(axis=1))):
            p = nested_f_test(values, full, reduced, covariate=covariate).p_value
            low_third[name].append(p[low] < 0.05)
            high_third[name].append(p[high] < 0.05)
    bound_low, bound_high = binomial_bounds(0.05, 3000)
    rate = {
        (third, name): np.concatenate(shares[name]).mean()
        for third, shares in (("low", low_third), ("high", high_third))
        for name in ("constant", "trend")
    }
    assert rate["low", "constant"] > bound_high
    for third in ("low", "high"):
        assert bound_low <= rate[third, "trend"] <= bound_high
        assert abs(rate[third, "trend"] - 0.05) < abs(rate[third, "constant"] - 0.05)


# ----------------------------------------------------------------------- the selection


def test_selection_reasons_follow_the_documented_order():
    """Documented rules: 'not_significant' (FDR above the level), then 'small_change'
    (significant, range below min_log2_range), else 'responsive'; the range is the largest
    range of the group means over the conditions (recomputed here with pandas groupby)."""
    rng = np.random.default_rng(40)
    n_genes, n_times = 600, 5
    conditions = ("ctrl", "heat")
    effect = np.zeros((n_genes, 2 * n_times))
    ramp = np.linspace(0.0, 1.0, n_times)
    effect[:60, n_times:] = 2.5 * ramp  # changes in "heat" only, 2.5 log2 units
    effect[60:120, :n_times] = 0.6 * ramp  # clear but small change in "ctrl"
    values, groups, condition_of_group, times = simulate(
        rng,
        n_genes=n_genes,
        n_times=n_times,
        conditions=conditions,
        s0_squared=0.005,
        effect=effect,
    )
    selection = select_responsive(
        values, groups, condition_of_group, times, genes=gene_names(n_genes)
    )
    table = selection.table
    assert list(table.columns) == TABLE_COLUMNS
    assert set(table["reason"]) <= set(REASONS)
    assert_array_equal(table["responsive"], table["reason"] == "responsive")
    assert (table["reason"].iloc[:60] == "responsive").mean() >= 0.95
    assert (table["reason"].iloc[60:120] == "small_change").mean() >= 0.95
    assert (table["reason"].iloc[120:] == "not_significant").mean() >= 0.95
    significant = table["fdr"] <= 0.05
    assert (table.loc[~significant, "reason"] == "not_significant").all()
    assert (table.loc[significant & (table["log2_range"] < 1.0), "reason"] == "small_change").all()

    long = pd.DataFrame(values, columns=groups).T.groupby(level=0).mean().T  # genes x groups
    by_condition = long.T.groupby(condition_of_group)
    ranges = by_condition.max() - by_condition.min()  # conditions x genes
    assert_allclose(table["log2_range"], ranges.max(axis=0), rtol=1e-12)
    assert any("Smyth 2004" in note for note in selection.notes)


def test_log2_range_is_max_minus_min():
    """Definition: the range of a row; 1 log2 unit is a two-fold change."""
    profiles = np.array([[1.0, 3.0, 2.0], [np.log2(8), np.log2(2), np.log2(4)]])
    assert_allclose(log2_range(profiles), [2.0, 2.0])


@pytest.mark.parametrize("extra_replicate", [False, True])
def test_no_replicates_fall_back_to_the_documented_variance_rule(extra_replicate):
    """Documented variance rule (residual df < 2, here 0 or 1): responsive when the largest
    per-condition range >= min_log2_range and the pooled within-condition profile SD is above
    the quantile of SDs in its bin of mean expression (10 equal-size bins).  Recomputed here
    with pandas (qcut of ranks, groupby quantile), a different route to the same rule."""
    rng = np.random.default_rng(50)
    n_genes, n_times = 400, 6
    values, groups, conditions, times = simulate(
        rng, n_genes=n_genes, n_times=n_times, n_replicates=1, conditions=("a", "b")
    )
    values[:40, :n_times] += np.linspace(0, 3, n_times)  # large change in condition a
    if extra_replicate:
        values = np.column_stack([values, values[:, 0] + rng.normal(0, 0.3, n_genes)])
        groups = np.append(groups, 0)
    selection = select_responsive(
        values, groups, conditions, times, genes=gene_names(n_genes), no_replicate_quantile=0.6
    )
    table = selection.table
    assert selection.method == "no_replicates"
    assert any("no replicates" in note for note in selection.notes)
    assert table[["statistic", "p_value", "fdr"]].isna().all().all()

    frame = pd.DataFrame(values, columns=groups).T.groupby(level=0).mean()  # groups x genes
    by_condition = frame.groupby(conditions)
    largest_range = (by_condition.max() - by_condition.min()).max(axis=0).to_numpy()
    deviations = frame - frame.groupby(conditions).transform("mean")
    sd = np.sqrt((deviations**2).sum(axis=0) / (frame.shape[0] - 2)).to_numpy()
    level = pd.Series(values.mean(axis=1))
    bins = pd.qcut(level.rank(method="first"), 10, labels=False).to_numpy()
    cut = pd.Series(sd).groupby(bins).quantile(0.6).to_numpy()[bins]
    expected = np.where(
        largest_range < 1.0,
        "small_change",
        np.where(sd > cut, "responsive", "low_variance_for_level"),
    )
    assert_array_equal(table["reason"].to_numpy(), expected)
    assert table["responsive"].iloc[:40].mean() >= 0.9  # planted changes pass both parts


def test_mean_expression_is_used_for_the_trend():
    """The trend covariate is mean_expression when given: giving the row means explicitly
    reproduces the default (same p-values); another covariate changes them."""
    rng = np.random.default_rng(60)
    values, groups, conditions, times = simulate(rng, n_genes=500, n_times=4)
    names = gene_names(500)
    default = select_responsive(values, groups, conditions, times, genes=names).table
    explicit = select_responsive(
        values, groups, conditions, times, genes=names, mean_expression=values.mean(axis=1)
    ).table
    other = select_responsive(
        values, groups, conditions, times, genes=names, mean_expression=rng.uniform(size=500)
    ).table
    assert_allclose(explicit["p_value"], default["p_value"], rtol=1e-12)
    assert not np.allclose(other["p_value"], default["p_value"])


# ------------------------------------------------------------------------- bad inputs


def _good_inputs():
    rng = np.random.default_rng(70)
    values, groups, conditions, times = simulate(rng, n_genes=30, n_times=3, n_replicates=2)
    return {
        "log_values": values,
        "group_of_sample": groups,
        "condition_of_group": conditions,
        "time_of_group": times,
        "genes": gene_names(30),
    }


def _with_nan(inputs):
    values = inputs["log_values"].copy()
    values[3, 2] = np.nan
    return {**inputs, "log_values": values}


@pytest.mark.parametrize(
    ("change", "message"),
    [
        (_with_nan, "missing or infinite"),
        (lambda i: {**i, "group_of_sample": i["group_of_sample"][:-1]}, "group_of_sample"),
        (lambda i: {**i, "genes": gene_names(29)}, "genes has 29 names"),
        (lambda i: {**i, "genes": ["x"] * 30}, "unique"),
        (lambda i: {**i, "fdr": 0.0}, "fdr=0.0"),
        (lambda i: {**i, "fdr": 1.5}, "fdr=1.5"),
        (lambda i: {**i, "min_log2_range": -1.0}, "min_log2_range=-1.0"),
        (lambda i: {**i, "no_replicate_quantile": 1.0}, "no_replicate_quantile"),
        (lambda i: {**i, "mean_expression": np.ones(5)}, "mean_expression"),
        (lambda i: {**i, "time_of_group": [0.0, 0.0, 1.0]}, "(condition, time)"),
    ],
)
def test_bad_selection_inputs_raise_one_line_gloam_error(change, message):
    """Project rule: user mistakes raise GloamError with a one-line message naming the input."""
    with pytest.raises(GloamError) as info:
        select_responsive(**change(_good_inputs()))
    assert message in str(info.value)
    assert "\n" not in str(info.value)


def test_bad_designs_raise_gloam_error():
    """Project rule: non-nested designs, equal designs, no residual df and a covariate
    without moderation are user mistakes with one-line messages."""
    rng = np.random.default_rng(71)
    values = rng.normal(size=(20, 6))
    groups = np.repeat(np.arange(3), 2)
    full, reduced = time_designs(groups, ["a", "a", "a"])
    slope = np.arange(6.0)[:, None]
    cases = [
        ((values, full, slope), {}, "not nested"),
        ((values, full, full), {}, "nothing to test"),
        ((values, np.eye(6), reduced), {}, "no residual degrees of freedom"),
        ((values, full, reduced), {"moderate": False, "covariate": np.ones(20)}, "moderate"),
        ((values[:, :5], full, reduced), {}, "one design row per sample"),
    ]
    for args, keywords, message in cases:
        with pytest.raises(GloamError, match=message) as info:
            nested_f_test(*args, **keywords)
        assert "\n" not in str(info.value)
