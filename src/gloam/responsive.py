"""Replicate evidence of change over time: moderated F-tests, FDR and effect sizes.

This is gloam's default gene selection.  A gene is *responsive* when its replicates show that
its mean log2 expression changes over time (within at least one condition) and the change is
large enough to matter:

1. A nested linear-model F-test per gene: the full model has one mean per (condition, time)
   group, the reduced model one mean per condition (:func:`time_designs`), so the test asks
   whether the group means differ over time within the conditions.  For the condition x time
   interaction, :func:`interaction_designs` gives the additive model as the reduced one.
2. The residual variance of each gene is moderated across genes by empirical Bayes (Smyth,
   2004): each gene's variance is shrunk towards a prior variance ``s0^2`` with a weight given
   by the prior degrees of freedom ``d0``, both estimated from all genes by the method of
   moments on ``log s^2``.  For log counts, whose variance falls with the expression level,
   the prior variance can follow a smooth trend in mean expression (the "limma-trend" approach
   compared by Law et al., 2014), fitted here by local linear regression (Cleveland, 1979).
3. p-values from ``F(df1, d0 + d)``; Benjamini-Hochberg (1995) adjusted p-values (FDR).
4. Effect size: the range (max - min, log2 units) of the mean profile in each condition.

Without replicates no test is possible; :func:`select_responsive` then uses a documented
variance rule and says so in its notes.

Orientation: genes x samples, values on a log2 scale, complete (no missing values).

References
----------
Smyth, G. K. (2004). Linear models and empirical Bayes methods for assessing differential
expression in microarray experiments. *Statistical Applications in Genetics and Molecular
Biology* 3(1):3.

Law, C. W., Chen, Y., Shi, W. & Smyth, G. K. (2014). voom: precision weights unlock linear
model analysis tools for RNA-seq read counts. *Genome Biology* 15:R29.

Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery rate: a practical and
powerful approach to multiple testing. *Journal of the Royal Statistical Society B*
57(1):289-300.

Cleveland, W. S. (1979). Robust locally weighted regression and smoothing scatterplots.
*Journal of the American Statistical Association* 74(368):829-836.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import optimize, special, stats

from gloam.errors import GloamError, GloamWarning

__all__ = [
    "ModeratedFTest",
    "ResponseSelection",
    "REASONS",
    "TABLE_COLUMNS",
    "TREND_SPAN",
    "NO_REPLICATE_BINS",
    "nested_f_test",
    "fit_prior_variance",
    "benjamini_hochberg",
    "time_designs",
    "interaction_designs",
    "log2_range",
    "select_responsive",
]

#: Reasons a gene gets in :attr:`ResponseSelection.table`.
REASONS = ("responsive", "not_significant", "small_change", "low_variance_for_level")

#: Columns of :attr:`ResponseSelection.table`, in order.
TABLE_COLUMNS = [
    "statistic",
    "df_numerator",
    "df_denominator",
    "p_value",
    "fdr",
    "log2_range",
    "responsive",
    "reason",
]

#: Share of the genes in each local window of the variance trend (local linear regression).
TREND_SPAN = 0.3
#: Number of grid points at which the variance trend is fitted (then interpolated linearly).
_TREND_GRID = 41
#: Fewest genes for a variance trend; fewer genes get a constant prior variance.
_TREND_MIN_GENES = 20

#: Bins of mean expression (equal numbers of genes) for the no-replicate variance rule.
NO_REPLICATE_BINS = 10
_MIN_GENES_PER_BIN = 10

#: Fewest residual degrees of freedom for a test of change over time.
_MIN_RESIDUAL_DF = 2

# Sums of squares below this share of a gene's sum of squared values are rounding noise.
_ZERO_SS_RELATIVE = 1e-24
# Zero (or rounding-level) variances are raised to this share of the median before log().
_VARIANCE_FLOOR_RELATIVE = 1e-5


# ------------------------------------------------------------------------------ results


@dataclass(frozen=True)
class ModeratedFTest:
    """Per-gene nested F-test, with variances moderated across genes.

    Attributes
    ----------
    statistic : ndarray of shape (n_genes,)
        Moderated F (ordinary F when not moderated).
    df_numerator : int
        ``p_full - p_reduced`` (ranks of the designs).
    df_residual : int
        Residual degrees of freedom ``d`` of each gene's own fit, ``n_samples - p_full``.
    df_prior : float
        Estimated prior degrees of freedom ``d0``; ``np.inf`` when the genes' variances vary
        no more than sampling alone explains; 0 when not moderated.
    prior_variance : ndarray of shape (n_genes,)
        Prior variance ``s0^2`` (log2 units squared); constant unless a trend was fitted;
        NaN when not moderated.
    residual_variance : ndarray of shape (n_genes,)
        ``s^2 = RSS_full / d``.
    posterior_variance : ndarray of shape (n_genes,)
        ``(d0 s0^2 + d s^2) / (d0 + d)``; ``s0^2`` when ``d0`` is infinite, ``s^2`` when not
        moderated.
    p_value : ndarray of shape (n_genes,)
        Upper tail of ``F(df_numerator, d0 + d)``.
    fdr : ndarray of shape (n_genes,)
        Benjamini-Hochberg adjusted p-values.
    """

    statistic: np.ndarray
    df_numerator: int
    df_residual: int
    df_prior: float
    prior_variance: np.ndarray
    residual_variance: np.ndarray
    posterior_variance: np.ndarray
    p_value: np.ndarray
    fdr: np.ndarray

    @property
    def df_denominator(self) -> float:
        """Denominator degrees of freedom of the reference F distribution, ``d0 + d``."""
        return self.df_prior + self.df_residual


@dataclass(frozen=True)
class ResponseSelection:
    """Which genes change over time, and why.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per gene (index ``gene``), columns :data:`TABLE_COLUMNS`: the moderated F
        ``statistic``, its degrees of freedom (``df_numerator``, ``df_denominator``),
        ``p_value``, ``fdr`` (Benjamini-Hochberg), ``log2_range`` (largest range of the mean
        log2 profile over the conditions), ``responsive`` (bool) and ``reason`` (one of
        :data:`REASONS`).  Test columns are NaN for the no-replicate rule.
    method : {"moderated_f", "no_replicates"}
        The rule used.
    notes : list of str
        Plain-language notes for the log: the rule, why it was used, and the counts.
    """

    table: pd.DataFrame
    method: str
    notes: list[str]

    @property
    def genes(self) -> list[str]:
        """Names of the responsive genes, in table order."""
        return self.table.index[self.table["responsive"].to_numpy()].to_list()


# ------------------------------------------------------------------------ input checks


def _as_matrix(values: object, name: str) -> np.ndarray:
    try:
        matrix = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as error:
        raise GloamError(f"{name} must hold numbers only ({error})") from None
    if matrix.ndim != 2:
        raise GloamError(f"{name} must be a 2-D matrix; got {matrix.ndim} dimension(s)")
    if not np.isfinite(matrix).all():
        n_bad = int((~np.isfinite(matrix)).sum())
        raise GloamError(
            f"{name} has {n_bad} missing or infinite value(s); fill or drop them first "
            "(gloam.prepare fills missing log values)"
        )
    return matrix


def _as_vector(values: object, name: str, length: int) -> np.ndarray:
    try:
        vector = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as error:
        raise GloamError(f"{name} must hold numbers only ({error})") from None
    if vector.shape != (length,):
        raise GloamError(f"{name} must have shape ({length},); got {vector.shape}")
    if not np.isfinite(vector).all():
        raise GloamError(f"{name} has missing or infinite values; every entry must be finite")
    return vector


def _check_groups(group_of_sample: object, n_groups: int) -> np.ndarray:
    groups = np.asarray(group_of_sample)
    if groups.ndim != 1 or groups.size == 0:
        raise GloamError(
            f"group_of_sample must be a 1-D array of group indices; got shape {groups.shape}"
        )
    if not np.issubdtype(groups.dtype, np.integer):
        if not np.issubdtype(groups.dtype, np.number) or not np.all(groups == np.round(groups)):
            raise GloamError("group_of_sample must hold integer group indices 0 .. n_groups - 1")
        groups = groups.astype(np.int64)
    if groups.min() < 0 or groups.max() >= n_groups:
        raise GloamError(
            f"group_of_sample must lie in 0 .. {n_groups - 1} (one label per group was given "
            f"for {n_groups} groups); got values {groups.min()} .. {groups.max()}"
        )
    empty = np.flatnonzero(np.bincount(groups, minlength=n_groups) == 0)
    if empty.size:
        raise GloamError(
            f"group(s) {empty.tolist()} have no sample; every group needs at least one sample"
        )
    return groups.astype(np.int64)


def _condition_and_time_labels(
    condition_of_group: np.ndarray, time_of_group: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Checked condition and time labels of the groups, one of each per group."""
    conditions = _group_labels(condition_of_group, "condition_of_group")
    times = _group_labels(time_of_group, "time_of_group")
    if times.size != conditions.size:
        raise GloamError(
            f"time_of_group has {times.size} entries but condition_of_group has "
            f"{conditions.size}; give one condition and one time per group"
        )
    return conditions, times


def _group_labels(labels: object, name: str) -> np.ndarray:
    array = np.asarray(labels, dtype=object)
    if array.ndim != 1 or array.size == 0:
        raise GloamError(f"{name} must be a non-empty 1-D sequence; got shape {array.shape}")
    return array


def _indicators(codes: np.ndarray, n_levels: int) -> np.ndarray:
    """One indicator column per level, shape (len(codes), n_levels)."""
    design = np.zeros((codes.size, n_levels))
    design[np.arange(codes.size), codes] = 1.0
    return design


# ---------------------------------------------------------------------------- designs


def time_designs(
    group_of_sample: np.ndarray, condition_of_group: Sequence[object] | np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Designs for the test of change over time within each condition.

    Parameters
    ----------
    group_of_sample : ndarray of shape (n_samples,) of int
        Index of each sample's (condition, time) group, 0 .. n_groups - 1.
    condition_of_group : sequence of length n_groups
        Condition label of each group.

    Returns
    -------
    full : ndarray of shape (n_samples, n_groups)
        One indicator column per group (one mean per condition and time).
    reduced : ndarray of shape (n_samples, n_conditions)
        One indicator column per condition (in order of first appearance): a constant level
        per condition, i.e. no change over time.

    Raises
    ------
    GloamError
        Bad group indices, or a group without samples.
    """
    conditions = _group_labels(condition_of_group, "condition_of_group")
    groups = _check_groups(group_of_sample, conditions.size)
    condition_codes, _ = pd.factorize(pd.Series(conditions))
    full = _indicators(groups, conditions.size)
    reduced = _indicators(condition_codes[groups], int(condition_codes.max()) + 1)
    return full, reduced


def interaction_designs(
    group_of_sample: np.ndarray,
    condition_of_group: Sequence[object] | np.ndarray,
    time_of_group: Sequence[float] | np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Designs for the condition x time interaction (do conditions change differently?).

    Parameters
    ----------
    group_of_sample : ndarray of shape (n_samples,) of int
        Index of each sample's (condition, time) group.
    condition_of_group : sequence of length n_groups
        Condition label of each group.
    time_of_group : sequence of length n_groups
        Time point of each group.

    Returns
    -------
    full : ndarray of shape (n_samples, n_groups)
        One indicator column per group.
    reduced : ndarray of shape (n_samples, n_conditions + n_times - 1)
        Additive model: one indicator per condition plus one per time point except the first
        (time as a factor), i.e. parallel profiles.

    Raises
    ------
    GloamError
        Fewer than two conditions, a repeated (condition, time) group, or conditions that do
        not share every time point.
    """
    conditions, times = _condition_and_time_labels(condition_of_group, time_of_group)
    groups = _check_groups(group_of_sample, conditions.size)
    condition_codes, condition_names = pd.factorize(pd.Series(conditions))
    time_codes, time_values = pd.factorize(pd.Series(times), sort=True)
    n_conditions, n_times = condition_names.size, time_values.size
    if n_conditions < 2:
        raise GloamError(
            "the condition x time interaction needs at least two conditions; "
            f"got only {list(condition_names)}"
        )
    pair = condition_codes * n_times + time_codes
    if np.unique(pair).size != pair.size:
        raise GloamError(
            "each (condition, time) pair must be one group; some pair appears in several "
            "groups; merge them"
        )
    if pair.size != n_conditions * n_times:
        present = np.zeros((n_conditions, n_times), dtype=bool)
        present[condition_codes, time_codes] = True
        missing = [
            f"{condition_names[c]} at time {time_values[t]}"
            for c, t in zip(*np.nonzero(~present), strict=True)
        ]
        raise GloamError(
            "the interaction test needs every condition at every time point; missing: "
            + ", ".join(missing[:5])
            + (" ..." if len(missing) > 5 else "")
            + "; drop the unshared time points or test change over time within each condition"
        )
    full = _indicators(groups, conditions.size)
    condition_part = _indicators(condition_codes[groups], n_conditions)
    time_part = _indicators(time_codes[groups], n_times)[:, 1:]
    return full, np.hstack([condition_part, time_part])


# ------------------------------------------------------------------ prior and the F-test


def _trigamma_inverse(target: float) -> float:
    """The x > 0 with trigamma(x) = target (target > 0).

    The bounds 1/x + 1/(2 x^2) < trigamma(x) < 1/x + 1/x^2 (x > 0) bracket the root between
    1/target and the positive root of 1/x + 1/x^2 = target.
    """
    low = 1.0 / target
    high = (1.0 + np.sqrt(1.0 + 4.0 * target)) / (2.0 * target)
    low, high = low * (1 - 1e-9), high * (1 + 1e-9)
    return optimize.brentq(
        lambda x: special.polygamma(1, x) - target, low, high, xtol=1e-14, rtol=1e-13
    )


def _local_linear_trend(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, float]:
    """Local linear regression of y on x (tricube weights, nearest-neighbour windows).

    Fitted on a grid of quantiles of x and interpolated linearly between grid points, so the
    cost is O(n_grid * n) for any number of genes.  Returns the fitted values (n,) and the
    equivalent degrees of freedom (trace of the smoother matrix) used by the fit.
    """
    n = x.size
    grid = np.unique(np.quantile(x, np.linspace(0.0, 1.0, _TREND_GRID)))
    neighbours = min(n, max(int(np.ceil(TREND_SPAN * n)), 5))
    offset = x[None, :] - grid[:, None]  # (n_grid, n)
    distance = np.abs(offset)
    width = np.partition(distance, neighbours - 1, axis=1)[:, neighbours - 1]
    width = np.maximum(width, np.finfo(float).tiny) * (1 + 1e-8)
    u = np.minimum(distance / width[:, None], 1.0)
    weight = (1.0 - u**3) ** 3
    s0 = weight.sum(axis=1)
    s1 = (weight * offset).sum(axis=1)
    s2 = (weight * offset**2).sum(axis=1)
    determinant = s0 * s2 - s1**2
    linear = determinant > 1e-10 * s0 * s2
    with np.errstate(invalid="ignore", divide="ignore"):
        # Row k of the smoother: the weights that give the local line's value at grid[k].
        smoother = np.where(
            linear[:, None],
            weight * (s2[:, None] - s1[:, None] * offset) / determinant[:, None],
            weight / s0[:, None],
        )
    fit_grid = smoother @ y
    left = np.clip(np.searchsorted(grid, x, side="right") - 1, 0, grid.size - 2)
    share = np.clip((x - grid[left]) / (grid[left + 1] - grid[left]), 0.0, 1.0)
    fitted = (1.0 - share) * fit_grid[left] + share * fit_grid[left + 1]
    genes = np.arange(n)
    leverage = (1.0 - share) * smoother[left, genes] + share * smoother[left + 1, genes]
    return fitted, float(leverage.sum())


def fit_prior_variance(
    residual_variance: np.ndarray,
    df_residual: float | np.ndarray,
    *,
    covariate: np.ndarray | None = None,
) -> tuple[np.ndarray, float]:
    """Estimate the prior variance ``s0^2`` and prior degrees of freedom ``d0`` across genes.

    Smyth's (2004) hierarchical model: ``s^2 | sigma^2 ~ sigma^2 chi2(d) / d`` and
    ``1 / sigma^2 ~ chi2(d0) / (d0 s0^2)``.  Then ``z = log s^2`` has mean
    ``log s0^2 + digamma(d/2) - digamma(d0/2) + log(d0/d)`` and variance
    ``trigamma(d/2) + trigamma(d0/2)``.  With ``e = z - digamma(d/2) + log(d/2)``, the
    method of moments solves ``trigamma(d0/2) = var(e) - mean(trigamma(d/2))`` and sets
    ``s0^2 = exp(mean(e) + digamma(d0/2) - log(d0/2))``.

    With a covariate (e.g. mean log2 expression), ``mean(e)`` becomes a smooth trend in the
    covariate, fitted by local linear regression (Cleveland, 1979; tricube weights,
    windows of :data:`TREND_SPAN` of the genes), and ``var(e)`` is the residual variance
    around it (divided by ``n_genes`` minus the trend's equivalent degrees of freedom).

    Parameters
    ----------
    residual_variance : ndarray of shape (n_genes,)
        Per-gene residual variances ``s^2`` (>= 0).  Zeros are raised to
        ``1e-5 x median(s^2)`` before taking logs.
    df_residual : float or ndarray of shape (n_genes,)
        Residual degrees of freedom ``d`` of each variance (> 0).
    covariate : ndarray of shape (n_genes,), optional
        When given, ``s0^2`` follows a trend in it.  With fewer than 20 genes or fewer than
        three distinct covariate values a constant prior is fitted (with a GloamWarning).

    Returns
    -------
    prior_variance : ndarray of shape (n_genes,)
        ``s0^2`` for each gene (constant without a covariate).
    df_prior : float
        ``d0``; ``np.inf`` when the variance of ``e`` does not exceed what sampling alone
        gives (then ``s0^2 = exp(mean(e))``).

    Raises
    ------
    GloamError
        Fewer than two genes, negative or non-finite variances, non-positive degrees of
        freedom, a covariate of the wrong shape, or all variances zero.

    References
    ----------
    Smyth (2004), Stat. Appl. Genet. Mol. Biol. 3:3, section 6.2; Law et al. (2014),
    Genome Biol. 15:R29 (the trended prior, "limma-trend").
    """
    variance = np.asarray(residual_variance, dtype=float)
    if variance.ndim != 1 or variance.size < 2:
        raise GloamError(
            "residual_variance must be a 1-D array with at least two genes to estimate a prior; "
            f"got shape {variance.shape}"
        )
    n_genes = variance.size
    if not np.isfinite(variance).all() or (variance < 0).any():
        raise GloamError("residual_variance must be finite and >= 0 for every gene")
    df = np.broadcast_to(np.asarray(df_residual, dtype=float), (n_genes,))
    if not np.isfinite(df).all() or (df <= 0).any():
        raise GloamError(f"df_residual must be finite and > 0; got {df_residual!r}")
    positive = variance[variance > 0]
    if positive.size == 0:
        raise GloamError(
            "every gene has zero residual variance, so no prior can be estimated; "
            "check that the replicates are not copies of each other"
        )
    floored = np.maximum(variance, _VARIANCE_FLOOR_RELATIVE * np.median(positive))
    half_df = df / 2.0
    e = np.log(floored) - special.digamma(half_df) + np.log(half_df)

    trend_df = 1.0
    centre = np.full(n_genes, e.mean())
    if covariate is not None:
        x = _as_vector(covariate, "covariate", n_genes)
        if n_genes < _TREND_MIN_GENES or np.unique(x).size < 3:
            warnings.warn(
                f"a variance trend needs at least {_TREND_MIN_GENES} genes and three distinct "
                "covariate values; a constant prior variance is used instead",
                GloamWarning,
                stacklevel=2,
            )
        else:
            centre, trend_df = _local_linear_trend(x, e)
    excess = np.sum((e - centre) ** 2) / max(n_genes - trend_df, 1.0) - np.mean(
        special.polygamma(1, half_df)
    )
    if excess <= 0:
        return np.exp(centre), float(np.inf)
    half_prior_df = _trigamma_inverse(float(excess))
    prior_variance = np.exp(centre + special.digamma(half_prior_df) - np.log(half_prior_df))
    return prior_variance, float(2.0 * half_prior_df)


def _orthonormal_basis(design: np.ndarray) -> np.ndarray:
    """Orthonormal basis of the column space of design, shape (n_samples, rank)."""
    left, singular, _ = np.linalg.svd(design, full_matrices=False)
    if singular.size == 0 or singular[0] == 0:
        return left[:, :0]
    tolerance = singular[0] * max(design.shape) * np.finfo(float).eps
    return left[:, singular > tolerance]


def _f_upper_tail(statistic: np.ndarray, df1: int, df2: float) -> np.ndarray:
    """P(F(df1, df2) >= statistic); the chi-square limit chi2(df1) / df1 for df2 = inf."""
    if np.isinf(df2):
        return stats.chi2.sf(statistic * df1, df1)
    return stats.f.sf(statistic, df1, df2)


def nested_f_test(
    values: np.ndarray,
    full_design: np.ndarray,
    reduced_design: np.ndarray,
    *,
    moderate: bool = True,
    covariate: np.ndarray | None = None,
) -> ModeratedFTest:
    """Per-gene F-test of a reduced linear model against a full one, optionally moderated.

    ``F = ((RSS_reduced - RSS_full) / df1) / s~^2`` with ``df1 = p_full - p_reduced`` and
    ``s~^2`` the moderated residual variance of the full model,
    ``(d0 s0^2 + d s^2) / (d0 + d)``; the reference distribution is ``F(df1, d0 + d)``
    (Smyth, 2004).  ``moderate=False`` gives the ordinary F with reference ``F(df1, d)``.
    All genes share one pair of projection matrices (one matrix product for all genes).

    Parameters
    ----------
    values : ndarray of shape (n_genes, n_samples)
        Log2-scale values, finite.
    full_design : ndarray of shape (n_samples, p_full)
        Design of the full model (rank-deficient designs are handled through their rank).
    reduced_design : ndarray of shape (n_samples, p_reduced)
        Design of the reduced model; its column space must lie inside that of the full one.
    moderate : bool
        Moderate the residual variances across genes (default True).
    covariate : ndarray of shape (n_genes,), optional
        With ``moderate=True``: the prior variance is a trend in it (e.g. mean log2
        expression, for log counts).  See :func:`fit_prior_variance`.

    Returns
    -------
    ModeratedFTest
        With ``moderate=False``: ``df_prior = 0``, ``prior_variance`` NaN.  A gene with zero
        residual and zero explained change gets F = 0, p = 1; with zero residual and a
        change (unmoderated only), F = inf, p = 0.

    Raises
    ------
    GloamError
        Shapes that do not match, non-finite values, designs that are not nested, no
        difference between the designs, no residual degrees of freedom, or a covariate
        without moderation.

    References
    ----------
    Smyth (2004), Stat. Appl. Genet. Mol. Biol. 3:3 (moderated F, section 6.3).
    """
    y = _as_matrix(values, "values")
    n_genes, n_samples = y.shape
    full = _as_matrix(full_design, "full_design")
    reduced = _as_matrix(reduced_design, "reduced_design")
    for name, design in (("full_design", full), ("reduced_design", reduced)):
        if design.shape[0] != n_samples:
            raise GloamError(
                f"{name} has {design.shape[0]} rows but values has {n_samples} samples "
                "(columns); give one design row per sample"
            )
    if covariate is not None and not moderate:
        raise GloamError(
            "covariate sets the trend of the prior variance; use it with moderate=True"
        )
    basis_full = _orthonormal_basis(full)
    basis_reduced = _orthonormal_basis(reduced)
    outside = basis_reduced - basis_full @ (basis_full.T @ basis_reduced)
    if outside.size and np.abs(outside).max() > 1e-8:
        raise GloamError(
            "reduced_design is not nested in full_design: every reduced column must be a "
            "combination of full columns"
        )
    df1 = basis_full.shape[1] - basis_reduced.shape[1]
    df_residual = n_samples - basis_full.shape[1]
    if df1 < 1:
        raise GloamError(
            "full_design and reduced_design span the same models, so there is nothing to test; "
            "the full design needs columns the reduced one lacks"
        )
    if df_residual < 1:
        raise GloamError(
            f"no residual degrees of freedom ({n_samples} samples, full model of rank "
            f"{basis_full.shape[1]}); replicates are needed for a test"
        )

    # Projection onto the part of the full space orthogonal to the reduced space.
    difference = basis_full - basis_reduced @ (basis_reduced.T @ basis_full)
    basis_difference = _orthonormal_basis(difference)[:, :df1]
    ss_difference = np.sum((y @ basis_difference) ** 2, axis=1)
    residual = y - (y @ basis_full) @ basis_full.T
    rss = np.sum(residual**2, axis=1)
    rounding = _ZERO_SS_RELATIVE * np.sum(y**2, axis=1)
    rss = np.where(rss <= rounding, 0.0, rss)
    ss_difference = np.where(ss_difference <= rounding, 0.0, ss_difference)
    residual_variance = rss / df_residual

    if moderate:
        cov = None if covariate is None else _as_vector(covariate, "covariate", n_genes)
        prior_variance, df_prior = fit_prior_variance(residual_variance, df_residual, covariate=cov)
        if np.isinf(df_prior):
            posterior = prior_variance.copy()
        else:
            posterior = (df_prior * prior_variance + df_residual * residual_variance) / (
                df_prior + df_residual
            )
    else:
        prior_variance, df_prior = np.full(n_genes, np.nan), 0.0
        posterior = residual_variance.copy()

    mean_square = ss_difference / df1
    with np.errstate(divide="ignore", invalid="ignore"):
        statistic = np.where(
            posterior > 0, mean_square / posterior, np.where(mean_square > 0, np.inf, 0.0)
        )
    p_value = _f_upper_tail(statistic, df1, df_prior + df_residual)
    return ModeratedFTest(
        statistic=statistic,
        df_numerator=int(df1),
        df_residual=int(df_residual),
        df_prior=float(df_prior),
        prior_variance=prior_variance,
        residual_variance=residual_variance,
        posterior_variance=posterior,
        p_value=p_value,
        fdr=benjamini_hochberg(p_value),
    )


def benjamini_hochberg(p_values: np.ndarray) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (false discovery rate).

    ``q_(i) = min_{j >= i} min(1, m p_(j) / j)`` over the sorted p-values, so the adjusted
    values keep the order of the p-values and never exceed 1.

    Parameters
    ----------
    p_values : ndarray of shape (n,)
        p-values in [0, 1]; NaN entries stay NaN and do not count in ``m``.

    Returns
    -------
    ndarray of shape (n,)

    Raises
    ------
    GloamError
        Not 1-D, or values outside [0, 1].

    References
    ----------
    Benjamini & Hochberg (1995), J. R. Stat. Soc. B 57:289-300.
    """
    p = np.asarray(p_values, dtype=float)
    if p.ndim != 1:
        raise GloamError(f"p_values must be a 1-D array; got shape {p.shape}")
    observed = ~np.isnan(p)
    finite = p[observed]
    if ((finite < 0) | (finite > 1)).any():
        raise GloamError("p_values must lie in [0, 1]")
    adjusted = np.full(p.shape, np.nan)
    m = finite.size
    if m == 0:
        return adjusted
    order = np.argsort(finite, kind="stable")
    scaled = finite[order] * m / np.arange(1, m + 1)
    monotone = np.minimum(np.minimum.accumulate(scaled[::-1])[::-1], 1.0)
    ranked = np.empty(m)
    ranked[order] = monotone
    adjusted[observed] = ranked
    return adjusted


def log2_range(profiles: np.ndarray) -> np.ndarray:
    """Range (max - min) of each row, in the units of the values (log2 units: fold change).

    Parameters
    ----------
    profiles : ndarray of shape (n_genes, n_columns)

    Returns
    -------
    ndarray of shape (n_genes,)
        A range of 1 is a two-fold change between the highest and lowest column.
    """
    matrix = np.asarray(profiles, dtype=float)
    if matrix.ndim != 2 or matrix.shape[1] == 0:
        raise GloamError(f"profiles must be a 2-D matrix with columns; got shape {matrix.shape}")
    return matrix.max(axis=1) - matrix.min(axis=1)


# ------------------------------------------------------------------------ the selection


@dataclass(frozen=True)
class _Layout:
    """Checked inputs of :func:`select_responsive`."""

    values: np.ndarray
    groups: np.ndarray
    condition_codes: np.ndarray  # (n_groups,)
    genes: pd.Index
    mean_expression: np.ndarray | None


def _check_selection_inputs(
    log_values: object,
    group_of_sample: object,
    condition_of_group: object,
    time_of_group: object,
    genes: object,
    fdr: float,
    min_log2_range: float,
    mean_expression: object,
    no_replicate_quantile: float,
) -> _Layout:
    values = _as_matrix(log_values, "log_values")
    n_genes, n_samples = values.shape
    if n_genes < 2:
        raise GloamError(
            f"log_values has {n_genes} gene(s); the selection needs at least two, since "
            "variances are compared across genes"
        )
    gene_index = pd.Index(np.asarray(genes, dtype=object).ravel(), name="gene")
    if gene_index.size != n_genes:
        raise GloamError(
            f"genes has {gene_index.size} names but log_values has {n_genes} rows; "
            "give one name per row"
        )
    if gene_index.has_duplicates:
        repeated = gene_index[gene_index.duplicated()].unique()[:3].tolist()
        raise GloamError(f"gene names must be unique; repeated: {repeated}")
    conditions, times = _condition_and_time_labels(condition_of_group, time_of_group)
    groups = np.asarray(group_of_sample)
    if groups.shape != (n_samples,):
        raise GloamError(
            f"group_of_sample must have one entry per sample ({n_samples}); got shape "
            f"{groups.shape}"
        )
    groups = _check_groups(groups, conditions.size)
    if pd.MultiIndex.from_arrays([conditions, times]).has_duplicates:
        raise GloamError(
            "each (condition, time) pair must be one group; some pair appears in several groups"
        )
    codes, names = pd.factorize(pd.Series(conditions))  # codes: condition of each group
    if names.size == conditions.size:
        raise GloamError(
            "every condition has a single time point, so nothing can change over time; "
            "give at least two time points in a condition"
        )
    checks = (
        ("fdr", fdr, 0.0 < fdr < 1.0, "a number in (0, 1), e.g. 0.05"),
        ("min_log2_range", min_log2_range, min_log2_range >= 0, "a number >= 0 (log2 units)"),
        (
            "no_replicate_quantile",
            no_replicate_quantile,
            0.0 <= no_replicate_quantile < 1.0,
            "a number in [0, 1)",
        ),
    )
    for name, value, ok, allowed in checks:
        if not isinstance(value, int | float | np.integer | np.floating) or isinstance(value, bool):
            raise GloamError(f"{name}={value!r} is not allowed; {name} must be {allowed}")
        if not np.isfinite(value) or not ok:
            raise GloamError(f"{name}={value!r} is not allowed; {name} must be {allowed}")
    mean = None
    if mean_expression is not None:
        mean = _as_vector(mean_expression, "mean_expression", n_genes)
    return _Layout(
        values=values,
        groups=groups,
        condition_codes=codes,
        genes=gene_index,
        mean_expression=mean,
    )


def _group_means(values: np.ndarray, groups: np.ndarray, n_groups: int) -> np.ndarray:
    """Mean of each group's samples, shape (n_genes, n_groups)."""
    indicators = _indicators(groups, n_groups)
    return (values @ indicators) / indicators.sum(axis=0)


def _largest_condition_range(profiles: np.ndarray, condition_codes: np.ndarray) -> np.ndarray:
    """Largest range of the mean profile over the conditions, shape (n_genes,)."""
    ranges = [
        log2_range(profiles[:, condition_codes == code])
        for code in range(int(condition_codes.max()) + 1)
    ]
    return np.max(np.column_stack(ranges), axis=1)


def _within_condition_sd(profiles: np.ndarray, condition_codes: np.ndarray) -> np.ndarray:
    """Pooled SD of the group means around their condition's mean, shape (n_genes,).

    With one condition this is the ordinary sample SD (ddof=1) of the profile.
    """
    n_conditions = int(condition_codes.max()) + 1
    counts = np.bincount(condition_codes, minlength=n_conditions)
    indicators = _indicators(condition_codes, n_conditions)
    condition_means = (profiles @ indicators) / counts
    deviations = profiles - condition_means[:, condition_codes]
    return np.sqrt(np.sum(deviations**2, axis=1) / (profiles.shape[1] - n_conditions))


def _bin_by_rank(level: np.ndarray, n_bins: int) -> np.ndarray:
    """Bin index (0 .. n_bins - 1) of each gene: equal numbers of genes per bin by level."""
    ranks = np.empty(level.size, dtype=np.int64)
    ranks[np.argsort(level, kind="stable")] = np.arange(level.size)
    return ranks * n_bins // level.size


def _fold(log2_units: float) -> str:
    return f"{2.0**log2_units:.3g}-fold"


def select_responsive(
    log_values: np.ndarray,
    group_of_sample: np.ndarray,
    condition_of_group: Sequence[object] | np.ndarray,
    time_of_group: Sequence[float] | np.ndarray,
    *,
    genes: Sequence[str] | pd.Index,
    fdr: float = 0.05,
    min_log2_range: float = 1.0,
    trend: bool = True,
    mean_expression: np.ndarray | None = None,
    no_replicate_quantile: float = 0.5,
) -> ResponseSelection:
    """Select the genes whose expression changes over time (gloam's default gene selection).

    With replicates (``n_samples - n_groups >= 2``): a moderated F-test of change over time
    within each condition (:func:`time_designs`, :func:`nested_f_test`).  A gene is
    responsive when its Benjamini-Hochberg FDR is at most ``fdr`` and the range of its mean
    log2 profile (group means) is at least ``min_log2_range`` in at least one condition.
    Reasons, checked in this order: ``not_significant`` (FDR above ``fdr``),
    ``small_change`` (significant, range below ``min_log2_range``), else ``responsive``.

    Without replicates (residual df < 2) no test is possible, and the *variance rule* is
    used: a gene is responsive when its largest per-condition range is at least
    ``min_log2_range`` and the SD of its mean profile is above the ``no_replicate_quantile``
    quantile of the SDs of genes with similar mean expression (:data:`NO_REPLICATE_BINS`
    bins with equal numbers of genes, at least 10 genes per bin).  Reasons, in order:
    ``small_change``, ``low_variance_for_level``, else ``responsive``; the test columns are
    NaN.  The profile SD is pooled within conditions: the squared deviations of the group
    means from their condition's mean, summed and divided by ``n_groups - n_conditions``
    (with one condition, the sample SD of the profile, ddof=1).

    Parameters
    ----------
    log_values : ndarray of shape (n_genes, n_samples)
        Log2-scale values (e.g. log2 CPM), finite.
    group_of_sample : ndarray of shape (n_samples,) of int
        Index of each sample's (condition, time) group, 0 .. n_groups - 1.
    condition_of_group : sequence of length n_groups
        Condition label of each group.
    time_of_group : sequence of length n_groups
        Time point of each group; (condition, time) pairs must be distinct.
    genes : sequence of str of length n_genes
        Unique gene names (the table's index).
    fdr : float
        FDR level, in (0, 1) (default 0.05).
    min_log2_range : float
        Smallest change that counts, in log2 units (default 1: two-fold), >= 0.
    trend : bool
        Let the prior variance follow a trend in mean expression (default True; right for
        log counts, harmless for data without a trend).
    mean_expression : ndarray of shape (n_genes,), optional
        Expression level of each gene for the trend and the no-replicate bins (default: the
        row mean of ``log_values``).
    no_replicate_quantile : float
        Quantile of the profile SDs, within a bin of mean expression, that a gene must
        exceed under the no-replicate rule, in [0, 1) (default 0.5: the median).

    Returns
    -------
    ResponseSelection

    Raises
    ------
    GloamError
        Inputs of the wrong shape, non-finite values, repeated gene names or (condition,
        time) groups, no condition with two time points, or settings out of range.

    References
    ----------
    Smyth (2004); Law et al. (2014); Benjamini & Hochberg (1995): see the module docstring.
    """
    layout = _check_selection_inputs(
        log_values,
        group_of_sample,
        condition_of_group,
        time_of_group,
        genes,
        fdr,
        min_log2_range,
        mean_expression,
        no_replicate_quantile,
    )
    values, groups, codes = layout.values, layout.groups, layout.condition_codes
    n_genes, n_samples = values.shape
    n_groups = codes.size
    profiles = _group_means(values, groups, n_groups)
    change = _largest_condition_range(profiles, codes)
    large = change >= min_log2_range
    level = values.mean(axis=1) if layout.mean_expression is None else layout.mean_expression
    residual_df = n_samples - n_groups
    size_rule = f"a log2 range of at least {min_log2_range:g} ({_fold(min_log2_range)})"

    if residual_df >= _MIN_RESIDUAL_DF:
        full, reduced = time_designs(groups, np.asarray(condition_of_group, dtype=object))
        test = nested_f_test(values, full, reduced, covariate=level if trend else None)
        significant = test.fdr <= fdr
        reason = np.where(
            ~significant, "not_significant", np.where(large, "responsive", "small_change")
        )
        statistic, p_value, adjusted = test.statistic, test.p_value, test.fdr
        df_numerator, df_denominator = float(test.df_numerator), test.df_denominator
        method = "moderated_f"
        if np.isinf(test.df_prior):
            prior = (
                "prior df infinite: the genes' variances vary no more than sampling explains, "
                "so each gene is tested against the prior variance"
            )
        else:
            prior = f"prior df {test.df_prior:.3g}"
        notes = [
            "moderated F-test (empirical Bayes, Smyth 2004) of change over time within each "
            f"condition: {test.df_numerator} and {test.df_denominator:.4g} degrees of freedom "
            f"({residual_df} residual from {n_samples} samples in {n_groups} groups; {prior})",
            "prior variance: "
            + ("a trend in mean log2 expression" if trend else "constant across genes"),
            f"responsive: Benjamini-Hochberg FDR <= {fdr:g} and {size_rule} of the mean "
            "profile in at least one condition",
        ]
    else:
        n_bins = max(1, min(NO_REPLICATE_BINS, n_genes // _MIN_GENES_PER_BIN))
        spread = _within_condition_sd(profiles, codes)
        bins = _bin_by_rank(level, n_bins)
        cut = np.empty(n_bins)
        for index in range(n_bins):
            cut[index] = np.quantile(spread[bins == index], no_replicate_quantile)
        variable = spread > cut[bins]
        reason = np.where(
            ~large, "small_change", np.where(variable, "responsive", "low_variance_for_level")
        )
        statistic = p_value = adjusted = np.full(n_genes, np.nan)
        df_numerator = df_denominator = np.nan
        method = "no_replicates"
        notes = [
            f"no replicates (residual df {residual_df} < {_MIN_RESIDUAL_DF}: {n_samples} "
            f"samples in {n_groups} groups), so no test of change over time is possible; "
            "the variance rule is used instead",
            f"responsive: {size_rule} of the profile in at least one condition and a profile "
            f"SD above the {no_replicate_quantile:g} quantile of genes with similar mean "
            f"expression ({n_bins} bins of equal size)",
        ]

    responsive = reason == "responsive"
    counts = pd.Series(reason).value_counts()
    notes.append(
        f"{int(responsive.sum())} of {n_genes} genes responsive; "
        + ", ".join(f"{name}: {int(counts.get(name, 0))}" for name in REASONS[1:] if name in counts)
    )
    table = pd.DataFrame(
        {
            "statistic": statistic,
            "df_numerator": df_numerator,
            "df_denominator": df_denominator,
            "p_value": p_value,
            "fdr": adjusted,
            "log2_range": change,
            "responsive": responsive,
            "reason": reason.astype(object),
        },
        index=layout.genes,
    )[TABLE_COLUMNS]
    return ResponseSelection(table=table, method=method, notes=notes)
