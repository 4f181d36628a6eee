"""From an expression matrix and a sample sheet to standardised genes x time-point profiles.

Steps, in order (each recorded per gene in the report):

1. Validate values (Inf; for counts also missing and negative values) and match the matrix's
   samples to the sample sheet (a transposed matrix is named as such).  Warn, from the values
   themselves, when they do not fit the declared value type, and when one count dominates a
   sample's library (:mod:`gloam.sanity`).
2. Library-size normalisation of counts (CPM or median-of-ratios size factors) and
   ``log2(x + pseudocount)``; values declared ``log`` are used as they are.  Both are
   computed over every sample of the sheet, before any condition is selected, so runs on
   separate conditions share one normalisation.
3. Missing values (``log`` data only): genes missing in more than ``max_missing_fraction``
   of the samples are dropped; the other gaps are filled with the mean of the gene's other
   replicates at the same condition and time, else by linear interpolation over time within
   the condition (before the first / after the last observed time point: the nearest one).
4. Expression filter: at least ``min_samples_expressed`` samples at or above
   ``min_expression`` (CPM for counts; the input's own units for log data).
5. Replicate summary (mean or median) per condition and time point.
6. Genes whose profile is flat are dropped.
7. Time-responsive genes (``gene_selection="responsive"``, the default): a moderated F-test
   of change over time within each condition against the replicate noise, FDR and a minimum
   log2 range (:mod:`gloam.responsive`); without replicates a documented variance rule.
8. Optional variability filters on the standard deviation of the profile (``min_sd``, then
   the ``top_variable`` most variable genes).
9. z-score of each gene across its profile (``ddof=1``, see :data:`ZSCORE_DDOF`).

Counts must not contain missing values: RNA-seq quantifiers write 0 for an unobserved gene,
so an empty cell in a counts table means a damaged file, and it is reported as an error.

Orientation: in memory genes x samples / genes x columns; in ``.h5ad`` files observations
are the prepared time-point columns and variables are genes (bulk convention).
"""

from __future__ import annotations

import contextlib
import dataclasses
import os
import warnings
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from gloam.errors import GloamError, GloamWarning
from gloam.io import atomic_output, read_h5ad_checked, write_h5ad, write_table
from gloam.sanity import cell_examples as _examples
from gloam.sanity import check_libraries, check_value_scale

__all__ = [
    "DROP_REASONS",
    "ZSCORE_DDOF",
    "PrepareSettings",
    "PreparedData",
    "settings_from_mapping",
    "prepare_expression",
    "write_prepared",
    "read_prepared",
    "read_prepared_replicates",
    "counts_per_million",
    "median_of_ratios_size_factors",
    "INTERACTION_COLUMNS",
    "log_transform",
    "interpolate_over_time",
    "fill_missing",
    "summarise_replicates",
    "zscore_rows",
]

#: Delta degrees of freedom of every standard deviation in this module (sample SD, n - 1).
ZSCORE_DDOF = 1

#: Reasons a gene is dropped, in the order the steps run; a gene gets the first that applies.
DROP_REASONS = (
    "too_many_missing",
    "missing_in_whole_condition",
    "low_expression",
    "flat",
    "not_significant",
    "small_change",
    "low_variance_for_level",
    "low_variability",
    "not_in_top_variable",
)
KEPT = "kept"

#: Genes with a first-pass response FDR below this are left out of the re-estimated
#: median-of-ratios size factors (DEG elimination, Kadota et al. 2012, who remove genes found
#: changing at FDR 0.1; the level is from memory of their default).
DEGES_FDR = 0.1
#: Fewest genes, positive in every sample, the factors are re-estimated from: when fewer pass
#: the FDR rule, the genes with the largest p-values make up the number (common practice: a
#: median over fewer genes is itself noisy).
DEGES_MIN_GENES = 100
#: Most preparation passes (the first, then re-estimates until the reference genes repeat).
DEGES_MAX_PASSES = 5
#: The reference has settled when fewer than this share of all genes left or joined it.
DEGES_SETTLED_SHARE = 0.01

#: Condition name used when the sample sheet has no ``condition`` column.
DEFAULT_CONDITION = "all"

#: Key of the run's record in ``AnnData.uns`` and prefix of per-gene ``var`` columns.
UNS_KEY = "prepare"
VAR_PREFIX = "prepare_"
RAW_VARM_KEY = "prepare_raw"
REPLICATES_VARM_KEY = "prepare_replicates"
LOG_MEAN_LAYER = "log_mean"
#: How to make a damaged prepared matrix again (the end of the one-line error).
PREPARED_REMAKE = (
    "give the prepared.h5ad that gloam prepare (or the workflow's prepare step) wrote, or "
    "delete it and prepare again"
)

# A profile whose SD is below this share of its magnitude is constant up to rounding.
_FLAT_RELATIVE_TOLERANCE = 1e-10

_CHOICES = {
    "value_type": ("counts", "log"),
    "normalisation": ("cpm", "median_ratio", "none"),
    "gene_selection": ("responsive", "all"),
    "replicate_summary": ("mean", "median"),
    "conditions": ("concatenate", "separate"),
}


@dataclass(frozen=True)
class PrepareSettings:
    """How a matrix is prepared; checked once, on construction.

    Parameters
    ----------
    value_type : {"counts", "log"}
        ``counts``: raw RNA-seq counts (non-negative, no missing values).  ``log``: values
        already on a log scale (microarray, proteomics, pre-normalised data); may hold
        missing values.
    normalisation : {"cpm", "median_ratio", "none"} or None
        Library-size normalisation of counts.  None (default) means ``median_ratio`` for
        counts (Anders & Huber 2010: robust to a few genes that dominate a library) and
        ``none`` for log data; log data accept only ``none``.
    pseudocount : float
        Added before ``log2`` for counts, > 0 (default 1).
    max_missing_fraction : float
        Genes missing in more than this share of the samples are dropped, in [0, 1)
        (default 0.25).
    min_expression : float or None
        Floor of the expression filter: CPM for counts (default 1 CPM), the input's own units
        for log data (default None: no expression filter).
    min_samples_expressed : int
        A gene is kept when at least this many samples are at or above ``min_expression``,
        >= 0 (default 2; 0 switches the filter off).
    gene_selection : {"responsive", "all"}
        ``responsive`` (default): keep genes that change over time (:mod:`gloam.responsive`:
        moderated F-test at ``fdr`` and a log2 range of at least ``min_log2_range``; without
        replicates a variance rule).  ``all``: no such test.
    fdr : float
        Benjamini–Hochberg level of the test for change over time, in (0, 1) (default 0.05).
    min_log2_range : float
        Smallest range (max - min, log2 units) of the mean profile a responsive gene needs in
        at least one condition, >= 0 (default 1: two-fold, common practice).
    min_sd : float
        Genes whose profile SD (log scale, ddof=1) is below this are dropped, >= 0
        (default 0: off).
    top_variable : int or None
        Keep only this many genes with the largest profile SD, >= 1 (default None: all).
    replicate_summary : {"mean", "median"}
        How replicates of one condition and time point are combined (default ``mean``).
    conditions : {"concatenate", "separate"}
        ``concatenate``: every condition's profile side by side in one matrix.
        ``separate``: only ``condition`` is prepared (one run per condition).
    condition : str or None
        The condition prepared with ``conditions="separate"``; may be None when the sheet
        has a single condition.  Not allowed with ``concatenate``.

    Raises
    ------
    GloamError
        A value outside its allowed set or range; the message names the setting, the value
        received and what is allowed.
    """

    value_type: str = "counts"
    normalisation: str | None = None
    pseudocount: float = 1.0
    max_missing_fraction: float = 0.25
    min_expression: float | None = None
    min_samples_expressed: int = 2
    gene_selection: str = "responsive"
    fdr: float = 0.05
    min_log2_range: float = 1.0
    min_sd: float = 0.0
    top_variable: int | None = None
    replicate_summary: str = "mean"
    conditions: str = "concatenate"
    condition: str | None = None

    def __post_init__(self) -> None:
        _validate_settings(self)

    @property
    def expression_filter_on(self) -> bool:
        """Whether the expression filter removes anything at all."""
        return self.min_expression is not None and self.min_samples_expressed > 0

    def to_dict(self) -> dict[str, object]:
        """Settings as a plain mapping (keys as in the config)."""
        return dataclasses.asdict(self)


def _setting_error(name: str, value: object, allowed: str) -> GloamError:
    return GloamError(
        f"preparation setting {name}={value!r} is not allowed; {name} must be {allowed}"
    )


def _check_number(
    name: str,
    value: object,
    *,
    low: float,
    low_open: bool = False,
    high: float = np.inf,
    high_open: bool = True,
    integer: bool = False,
    allow_none: bool = False,
) -> None:
    left = "(" if low_open else "["
    right = ")" if high_open else "]"
    kind = "an integer" if integer else "a number"
    allowed = f"{kind} in {left}{low:g}, {high:g}{right}" + (" or null" if allow_none else "")
    if value is None:
        if allow_none:
            return
        raise _setting_error(name, value, allowed)
    numeric = isinstance(value, int | float | np.integer | np.floating) and not isinstance(
        value, bool | np.bool_
    )
    if not numeric or not np.isfinite(value):  # type: ignore[arg-type]
        raise _setting_error(name, value, allowed)
    if integer and float(value) != int(value):  # type: ignore[arg-type]
        raise _setting_error(name, value, allowed)
    number = float(value)  # type: ignore[arg-type]
    too_low = number <= low if low_open else number < low
    too_high = number >= high if high_open else number > high
    if too_low or too_high:
        raise _setting_error(name, value, allowed)


def _validate_settings(settings: PrepareSettings) -> None:
    """The one place where preparation settings are checked and defaults resolved."""
    for name, choices in _CHOICES.items():
        value = getattr(settings, name)
        if name == "normalisation" and value is None:
            continue
        if value not in choices:
            raise _setting_error(name, value, "one of " + ", ".join(repr(c) for c in choices))
    if settings.normalisation is None:
        object.__setattr__(
            settings,
            "normalisation",
            "median_ratio" if settings.value_type == "counts" else "none",
        )
    if settings.value_type == "log" and settings.normalisation != "none":
        raise _setting_error(
            "normalisation",
            settings.normalisation,
            "'none' when value_type is 'log' (library-size normalisation is for counts)",
        )
    _check_number("pseudocount", settings.pseudocount, low=0.0, low_open=True)
    _check_number(
        "max_missing_fraction", settings.max_missing_fraction, low=0.0, high=1.0, high_open=True
    )
    if settings.min_expression is None and settings.value_type == "counts":
        object.__setattr__(settings, "min_expression", 1.0)
    if settings.value_type == "counts":
        _check_number("min_expression", settings.min_expression, low=0.0)
    else:
        _check_number("min_expression", settings.min_expression, low=-np.inf, allow_none=True)
    _check_number("min_samples_expressed", settings.min_samples_expressed, low=0, integer=True)
    _check_number("min_sd", settings.min_sd, low=0.0)
    _check_number("fdr", settings.fdr, low=0.0, low_open=True, high=1.0, high_open=True)
    _check_number("min_log2_range", settings.min_log2_range, low=0.0)
    _check_number("top_variable", settings.top_variable, low=1, integer=True, allow_none=True)
    for name in ("pseudocount", "max_missing_fraction", "min_sd", "fdr", "min_log2_range"):
        object.__setattr__(settings, name, float(getattr(settings, name)))
    if settings.min_expression is not None:
        object.__setattr__(settings, "min_expression", float(settings.min_expression))
    object.__setattr__(settings, "min_samples_expressed", int(settings.min_samples_expressed))
    if settings.top_variable is not None:
        object.__setattr__(settings, "top_variable", int(settings.top_variable))
    if settings.condition is not None:
        if not isinstance(settings.condition, str) or not settings.condition.strip():
            raise _setting_error("condition", settings.condition, "a condition name or null")
        if settings.conditions != "separate":
            raise _setting_error(
                "condition",
                settings.condition,
                "null unless conditions is 'separate' (with 'concatenate' every condition "
                "is prepared)",
            )


def settings_from_mapping(mapping: Mapping[str, object] | None) -> PrepareSettings:
    """Build :class:`PrepareSettings` from a config mapping (e.g. the ``prepare`` block).

    Parameters
    ----------
    mapping : mapping of setting name to value, or None
        Keys are the field names of :class:`PrepareSettings`; missing keys take their
        defaults; None (an empty YAML block) gives all defaults.

    Raises
    ------
    GloamError
        ``mapping`` is not a mapping, has a key that is not a setting (all allowed keys are
        listed), or a value is not allowed.
    """
    if mapping is None:
        return PrepareSettings()
    if not isinstance(mapping, Mapping):
        raise GloamError(
            f"preparation settings must be a mapping of setting: value, got "
            f"{type(mapping).__name__} {mapping!r}"
        )
    allowed = [field.name for field in dataclasses.fields(PrepareSettings)]
    unknown = [str(key) for key in mapping if key not in allowed]
    if unknown:
        raise GloamError(
            f"unknown preparation setting(s) {unknown}; allowed settings are "
            f"{', '.join(allowed)} (check the spelling)"
        )
    return PrepareSettings(**{str(key): value for key, value in mapping.items()})


@dataclass(frozen=True)
class PreparedData:
    """Result of :func:`prepare_expression`.

    Attributes
    ----------
    zscores : DataFrame of shape (n_kept_genes, n_columns)
        Standardised profiles (mean 0, SD 1 with ddof=1 per gene); index = gene IDs (str,
        named ``gene``), columns ordered by condition then time.
    columns : DataFrame of shape (n_columns, 3)
        Index = column name (``t<time>``, or ``<condition>_t<time>`` when several
        conditions are concatenated); columns ``time`` (float), ``condition`` (str) and
        ``n_samples`` (replicates combined into the column).
    log_means : DataFrame of shape (n_kept_genes, n_columns)
        Replicate summaries on the log scale, before standardisation.
    raw : DataFrame of shape (n_input_genes, n_used_samples)
        Input values as read, for the samples used (all samples of the selected
        condition(s), in sample-sheet order).
    gene_report : DataFrame of shape (n_input_genes, 11 or more)
        One row per input gene, in input order; columns ``gene``, ``status`` (``kept`` or
        one of :data:`DROP_REASONS`), ``n_missing``, ``n_filled``, ``n_samples_expressed``
        (NA when the expression filter is off), ``mean_log`` (mean log value over the used
        samples after filling), ``sd`` (profile SD, ddof=1; NA when dropped earlier),
        ``log2_range`` (largest range of the mean log2 profile within a condition),
        ``response_statistic``, ``response_p_value``, ``response_fdr`` (moderated F-test of
        change over time; NA without replicates, with ``gene_selection="all"`` or when the
        gene was dropped before the test). With several conditions and replicates also
        :data:`INTERACTION_COLUMNS` (condition x time interaction, moderated F and BH FDR;
        ``interaction_effect_log2`` is the largest difference between the conditions'
        mean-centred log2 profiles) and, per condition ``<c>``, ``mean_log2_<c>``,
        ``log2_range_<c>``, ``peak_time_<c>`` and ``time_fdr_<c>`` (change over time within
        that condition alone).
    summary : DataFrame of shape (len(DROP_REASONS) + 1, 2)
        Columns ``reason`` and ``n_genes``: every drop reason in step order, then ``kept``;
        ``n_genes`` sums to the number of input genes.
    replicates : DataFrame of shape (n_kept_genes, n_used_samples)
        Per-sample log values of the kept genes after filling (what the replicate summary
        averaged); with ``samples["column"]`` it lets robustness checks resample replicates.
    selection_method : str
        How genes were tested for change over time: ``moderated_f``, ``no_replicates``
        (variance rule) or ``none`` (``gene_selection="all"``).
    selection_notes : list of str
        Plain-language notes of the gene selection, for the log.
    samples : DataFrame of shape (n_used_samples, k)
        The samples used: ``sample``, ``time``, ``condition``, ``replicate`` (when given),
        ``column`` (the prepared column fed), and ``library_size`` / ``size_factor`` for
        counts.
    settings : PrepareSettings
        The settings used, defaults resolved.
    """

    zscores: pd.DataFrame
    columns: pd.DataFrame
    log_means: pd.DataFrame
    raw: pd.DataFrame
    gene_report: pd.DataFrame
    summary: pd.DataFrame
    samples: pd.DataFrame
    settings: PrepareSettings
    replicates: pd.DataFrame | None = None
    selection_method: str = "none"
    selection_notes: tuple[str, ...] = ()


# --------------------------------------------------------------------------------------
# Numeric building blocks (no checks: callers validate)


def counts_per_million(counts: np.ndarray) -> np.ndarray:
    """Counts per million reads of each sample's library.

    Parameters
    ----------
    counts : ndarray of shape (n_genes, n_samples)
        Non-negative counts; every sample's total must be positive.

    Returns
    -------
    ndarray of shape (n_genes, n_samples)
        ``counts[g, j] / sum_g counts[g, j] * 1e6``.

    References
    ----------
    .. [1] Robinson MD, Oshlack A (2010). A scaling normalization method for differential
       expression analysis of RNA-seq data. Genome Biology 11:R25 (CPM as counts scaled by
       library size).
    """
    library_sizes = counts.sum(axis=0)
    return counts / library_sizes * 1e6


def median_of_ratios_size_factors(
    counts: np.ndarray, reference_genes: np.ndarray | None = None
) -> np.ndarray:
    """Median-of-ratios size factors of each sample.

    ``s_j = median_g ( k_gj / (prod_i k_gi)^(1/m) )`` over the genes with a positive count
    in every one of the ``m`` samples (a zero would make the geometric mean zero).  The
    factors are not rescaled, as in the published estimator.

    Parameters
    ----------
    counts : ndarray of shape (n_genes, n_samples)
        Non-negative counts.
    reference_genes : bool ndarray of shape (n_genes,), optional
        Take the median over these genes only (for example the genes a first pass did not
        find changing: the DEG-elimination strategy of Kadota et al. 2012).  All genes by
        default.

    Returns
    -------
    ndarray of shape (n_samples,)
        Positive size factors; divide each sample's counts by its factor.

    Raises
    ------
    GloamError
        No gene has a positive count in every sample.

    References
    ----------
    .. [1] Anders S, Huber W (2010). Differential expression analysis for sequence count
       data. Genome Biology 11:R106, equation (5).
    .. [2] Kadota K, Nishiyama T, Shimizu K (2012). A normalization strategy for comparing
       tag count data. Algorithms for Molecular Biology 7:5.
    """
    usable = np.all(counts > 0, axis=1)
    if reference_genes is not None:
        usable &= np.asarray(reference_genes, dtype=bool)
    if not usable.any():
        raise GloamError(
            "median-of-ratios normalisation needs at least one gene with a positive count in "
            "every sample, and there is none; use normalisation 'cpm' or remove empty samples"
        )
    log_counts = np.log(counts[usable])
    log_ratios = log_counts - log_counts.mean(axis=1, keepdims=True)
    return np.exp(np.median(log_ratios, axis=0))


def log_transform(values: np.ndarray, pseudocount: float) -> np.ndarray:
    """``log2(values + pseudocount)``, shape preserved."""
    return np.log2(values + pseudocount)


def interpolate_over_time(values: np.ndarray, times: np.ndarray) -> np.ndarray:
    """Fill gaps of each row by linear interpolation over time; nearest value at the edges.

    Parameters
    ----------
    values : ndarray of shape (n_genes, n_times)
        NaN marks a gap.
    times : ndarray of shape (n_times,)
        Strictly increasing time points of the columns.

    Returns
    -------
    ndarray of shape (n_genes, n_times)
        Observed values unchanged; a gap between two observed time points gets the value on
        the straight line between them, a gap before the first (after the last) observed
        point gets that point's value; rows with no observed value stay NaN.
    """
    n_times = values.shape[1]
    observed = ~np.isnan(values)
    positions = np.arange(n_times)
    previous = np.maximum.accumulate(np.where(observed, positions, -1), axis=1)
    following = np.minimum.accumulate(np.where(observed, positions, n_times)[:, ::-1], axis=1)[
        :, ::-1
    ]
    has_previous = previous >= 0
    has_following = following < n_times
    previous_clipped = np.clip(previous, 0, n_times - 1)
    following_clipped = np.clip(following, 0, n_times - 1)
    previous_value = np.take_along_axis(values, previous_clipped, axis=1)
    following_value = np.take_along_axis(values, following_clipped, axis=1)
    previous_time = times[previous_clipped]
    following_time = times[following_clipped]
    span = following_time - previous_time
    with np.errstate(invalid="ignore", divide="ignore"):
        weight = np.where(span > 0, (times - previous_time) / span, 0.0)
    between = previous_value + weight * (following_value - previous_value)
    filled = np.where(
        has_previous & has_following,
        between,
        np.where(has_previous, previous_value, following_value),
    )
    return np.where(observed, values, filled)


def _group_means(values: np.ndarray, group_of_sample: np.ndarray, n_groups: int) -> np.ndarray:
    """Mean of the observed values of each group of samples; NaN where none is observed."""
    means = np.full((values.shape[0], n_groups), np.nan)
    for group in range(n_groups):
        block = values[:, group_of_sample == group]
        observed = ~np.isnan(block)
        count = observed.sum(axis=1)
        total = np.where(observed, block, 0.0).sum(axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            means[:, group] = np.where(count > 0, total / count, np.nan)
    return means


def fill_missing(
    values: np.ndarray,
    group_of_sample: np.ndarray,
    group_times: np.ndarray,
    group_conditions: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Fill missing values from replicates, else by interpolation over time.

    Parameters
    ----------
    values : ndarray of shape (n_genes, n_samples)
        Log-scale values; NaN = missing.
    group_of_sample : ndarray of shape (n_samples,) of int
        Index of each sample's (condition, time) group.
    group_times, group_conditions : ndarray of shape (n_groups,)
        Time and condition of each group.

    Returns
    -------
    filled : ndarray of shape (n_genes, n_samples)
        A missing value gets the mean of the gene's observed replicates in the same group;
        when the gene has none there, the group value is interpolated linearly over the
        condition's time points (:func:`interpolate_over_time`).  Values stay NaN only for a
        gene with no observed value in a whole condition.
    n_filled : ndarray of shape (n_genes,) of int
        Number of values filled per gene.
    """
    n_groups = group_times.shape[0]
    group_values = _group_means(values, group_of_sample, n_groups)
    for condition in pd.unique(group_conditions):
        members = np.flatnonzero(group_conditions == condition)
        members = members[np.argsort(group_times[members], kind="stable")]
        group_values[:, members] = interpolate_over_time(
            group_values[:, members], group_times[members]
        )
    missing = np.isnan(values)
    filled = np.where(missing, group_values[:, group_of_sample], values)
    n_filled = (missing & ~np.isnan(filled)).sum(axis=1)
    return filled, n_filled


def summarise_replicates(
    values: np.ndarray, group_of_sample: np.ndarray, n_groups: int, how: str = "mean"
) -> np.ndarray:
    """Combine the replicates of each group into one column.

    Parameters
    ----------
    values : ndarray of shape (n_genes, n_samples)
    group_of_sample : ndarray of shape (n_samples,) of int
        Group index of each sample, 0 .. n_groups - 1; every group has a sample.
    how : {"mean", "median"}

    Returns
    -------
    ndarray of shape (n_genes, n_groups)
    """
    reduce = {"mean": np.mean, "median": np.median}[how]
    profiles = np.empty((values.shape[0], n_groups))
    for group in range(n_groups):
        profiles[:, group] = reduce(values[:, group_of_sample == group], axis=1)
    return profiles


def zscore_rows(
    profiles: np.ndarray, ddof: int = ZSCORE_DDOF
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Standardise each row to mean 0 and standard deviation 1.

    Parameters
    ----------
    profiles : ndarray of shape (n_genes, n_columns)
        Rows must not be flat (SD > 0): the caller removes flat rows first.
    ddof : int
        Delta degrees of freedom of the SD (default 1: sample SD, divisor n - 1).

    Returns
    -------
    zscores : ndarray of shape (n_genes, n_columns)
    mean, sd : ndarray of shape (n_genes,)
    """
    mean = profiles.mean(axis=1)
    sd = profiles.std(axis=1, ddof=ddof)
    return (profiles - mean[:, None]) / sd[:, None], mean, sd


def _is_flat(mean: np.ndarray, sd: np.ndarray) -> np.ndarray:
    return ~(sd > _FLAT_RELATIVE_TOLERANCE * np.maximum(1.0, np.abs(mean)))


# --------------------------------------------------------------------------------------
# Validation of the inputs


def _validate_values(
    values: np.ndarray,
    genes: np.ndarray,
    samples: np.ndarray,
    value_type: str,
    *,
    check_scale: bool = True,
) -> None:
    """Refuse values no preparation can use; warn when they do not fit ``value_type``.

    The scale check (:func:`gloam.sanity.check_value_scale`) runs when ``check_scale``.
    """
    infinite = np.isinf(values)
    if infinite.any():
        raise GloamError(
            f"the matrix holds infinite values ({_examples(genes, samples, infinite)}); "
            "replace them with real values, or with NA if they are missing"
        )
    if value_type == "counts":
        missing = np.isnan(values)
        if missing.any():
            raise GloamError(
                f"the counts matrix has missing values ({_examples(genes, samples, missing)}); "
                "counts of unobserved genes are 0, so fix the file, or set value_type 'log' if "
                "the values are already on a log scale"
            )
        negative = values < 0
        if negative.any():
            raise GloamError(
                f"the counts matrix has negative values "
                f"({_examples(genes, samples, negative)}); counts are >= 0 — set value_type "
                "'log' if the values are already on a log scale"
            )
    if check_scale:
        check_value_scale(values, value_type, genes=genes, samples=samples)


def _check_not_transposed(matrix: pd.DataFrame, sheet: pd.DataFrame, absent: list[str]) -> None:
    """Refuse a matrix with samples as rows, when the names or the shape show it.

    Called when sample-sheet samples are missing from the columns: if at least half of them
    are row names instead, or the matrix has no more rows than the sheet has samples but more
    columns (genes outnumber samples in any expression matrix), the matrix is transposed.
    """
    rows = set(matrix.index.astype(str))
    as_rows = [sample for sample in absent if sample in rows]
    n_rows, n_columns = matrix.shape
    if as_rows and 2 * len(as_rows) >= len(absent):
        evidence = (
            f"{len(as_rows)} of the sample sheet's samples are row names of the matrix, not "
            f"column names (e.g. {as_rows[:3]})"
        )
    elif not (set(matrix.columns) & set(sheet["sample"])) and n_rows <= len(sheet) < n_columns:
        evidence = (
            f"no sample of the sample sheet is a column name, and the matrix has {n_rows} "
            f"rows but {n_columns} columns, while the sheet lists {len(sheet)} samples"
        )
    else:
        return
    raise GloamError(
        f"the matrix looks transposed: {evidence}; put genes in rows and samples in columns "
        "(first column gene IDs, header line sample names)"
    )


def _match_samples(matrix: pd.DataFrame, sheet: pd.DataFrame) -> pd.DataFrame:
    """The sheet with a condition for every row, restricted to nothing it cannot find."""
    for column in ("sample", "time"):
        if column not in sheet.columns:
            raise GloamError(
                f"the sample sheet lacks the column {column!r} (found {list(sheet.columns)}); "
                "it needs sample and time, optionally replicate and condition"
            )
    sheet = sheet.copy()
    sheet["sample"] = sheet["sample"].astype(str)
    if "condition" in sheet.columns:
        sheet["condition"] = sheet["condition"].astype(str)
    else:
        sheet["condition"] = DEFAULT_CONDITION
    sheet["time"] = pd.to_numeric(sheet["time"], errors="coerce").astype(np.float64)
    bad_time = ~np.isfinite(sheet["time"].to_numpy())
    if bad_time.any():
        raise GloamError(
            f"sample sheet: time of sample {sheet['sample'][bad_time].iloc[0]!r} is not a "
            "finite number; write times as plain numbers"
        )
    if sheet["sample"].duplicated().any():
        raise GloamError(
            "the sample sheet lists samples more than once "
            f"({sorted(set(sheet['sample'][sheet['sample'].duplicated()]))[:5]}); list each once"
        )
    in_matrix = set(matrix.columns)
    absent = [sample for sample in sheet["sample"] if sample not in in_matrix]
    if absent:
        _check_not_transposed(matrix, sheet, absent)
        raise GloamError(
            f"{len(absent)} sample(s) of the sample sheet are not columns of the matrix: "
            f"{absent[:5]}{' ...' if len(absent) > 5 else ''}; fix the names or remove those "
            "rows from the sheet"
        )
    listed = set(sheet["sample"])
    ignored = [sample for sample in matrix.columns if sample not in listed]
    if ignored:
        warnings.warn(
            f"{len(ignored)} matrix column(s) are not in the sample sheet and are ignored: "
            f"{ignored[:5]}{' ...' if len(ignored) > 5 else ''}",
            GloamWarning,
            stacklevel=3,
        )
    return sheet.reset_index(drop=True)


def _format_time(time: float) -> str:
    return np.format_float_positional(time, trim="-")


def _select_conditions(sheet: pd.DataFrame, settings: PrepareSettings) -> list[str]:
    conditions = list(pd.unique(sheet["condition"]))
    if settings.conditions == "concatenate":
        return conditions
    if settings.condition is None:
        if len(conditions) > 1:
            raise GloamError(
                f"conditions 'separate' prepares one condition per run, and the sample sheet "
                f"has {len(conditions)}: {conditions}; set condition to one of them"
            )
        return conditions
    if settings.condition not in conditions:
        raise GloamError(
            f"preparation setting condition={settings.condition!r} is not a condition of the "
            f"sample sheet; choose one of {conditions}"
        )
    return [settings.condition]


def _layout(
    sheet: pd.DataFrame, conditions: list[str]
) -> tuple[pd.DataFrame, pd.DataFrame, np.ndarray]:
    """Used samples, the prepared columns (condition, then time) and each sample's column."""
    used = sheet[sheet["condition"].isin(conditions)].reset_index(drop=True)
    for condition in conditions:
        times = np.unique(used.loc[used["condition"] == condition, "time"])
        if times.size < 3:
            where = "" if condition == DEFAULT_CONDITION else f" of condition {condition!r}"
            raise GloamError(
                f"the samples{where} cover {times.size} distinct time point(s) "
                f"({[_format_time(t) for t in times]}); clustering time courses needs at "
                "least 3"
            )
    groups = (
        used[["condition", "time"]]
        .drop_duplicates()
        .assign(order=lambda table: table["condition"].map(conditions.index))
        .sort_values(["order", "time"], kind="stable")
        .drop(columns="order")
        .reset_index(drop=True)
    )
    several = len(conditions) > 1
    groups.index = pd.Index(
        [
            (f"{condition}_t{_format_time(time)}" if several else f"t{_format_time(time)}")
            for condition, time in zip(groups["condition"], groups["time"], strict=True)
        ],
        name="column",
    )
    position = {
        key: index
        for index, key in enumerate(zip(groups["condition"], groups["time"], strict=True))
    }
    group_of_sample = np.array(
        [position[key] for key in zip(used["condition"], used["time"], strict=True)], dtype=np.intp
    )
    groups = groups[["time", "condition"]]
    groups["n_samples"] = np.bincount(group_of_sample, minlength=len(groups))
    used["column"] = groups.index.to_numpy()[group_of_sample]
    return used, groups, group_of_sample


# --------------------------------------------------------------------------------------
# The public pipeline


def _no_gene_left_error(summary: pd.DataFrame) -> GloamError:
    """The error when every gene was dropped, with advice that fits the reasons.

    Flat genes are dropped whatever the settings, so when the flat step removed every gene
    that reached it, the message points at the data (values, time column) instead of, or
    besides, the filters.

    Parameters
    ----------
    summary : DataFrame
        Columns ``reason`` and ``n_genes``, as in :class:`PreparedData`.
    """
    n_genes = dict(zip(summary["reason"], summary["n_genes"], strict=True))
    counts = ", ".join(f"{reason}: {n}" for reason, n in n_genes.items() if n)
    relax_filters = (
        "relax the filters (min_expression, min_samples_expressed, fdr, min_log2_range, "
        "min_sd, max_missing_fraction; gene_selection: all switches the test for change "
        "over time off)"
    )
    check_flat_data = (
        "check that the matrix holds the intended values and that the sample sheet's time "
        "column assigns the samples to different times"
    )
    flat_steps_after = DROP_REASONS[DROP_REASONS.index("flat") + 1 :]
    if n_genes["flat"] == 0 or any(n_genes[reason] for reason in flat_steps_after):
        return GloamError(f"no gene is left after preparation ({counts}); {relax_filters}")
    if n_genes["flat"] == sum(n_genes.values()):
        return GloamError(
            f"no gene is left after preparation ({counts}): every gene is flat, with the same "
            "value at every time point, and flat genes are always dropped whatever the "
            f"settings; {check_flat_data}"
        )
    return GloamError(
        f"no gene is left after preparation ({counts}): every gene that passed the filters "
        f"is flat, with the same value at every time point; {check_flat_data}, or "
        f"{relax_filters} to keep genes that vary"
    )


def prepare_expression(
    matrix: pd.DataFrame,
    sheet: pd.DataFrame,
    settings: PrepareSettings | None = None,
    *,
    _reference_genes: np.ndarray | None = None,
    _pass: int = 1,
) -> PreparedData:
    """Validate, normalise, fill, filter, summarise and standardise an expression matrix.

    Parameters
    ----------
    matrix : DataFrame of shape (n_genes, n_samples)
        As returned by :func:`gloam.io.read_matrix`: index = unique gene IDs (str),
        columns = sample names, float values.
    sheet : DataFrame
        As returned by :func:`gloam.io.read_sample_sheet`: ``sample``, ``time`` and
        optional ``replicate``, ``condition``.  Matrix columns missing from the sheet are
        ignored with a :class:`~gloam.errors.GloamWarning`.
    settings : PrepareSettings, optional
        Defaults when omitted.

    Returns
    -------
    PreparedData
        See :class:`PreparedData` for every table's columns.

    Raises
    ------
    GloamError
        Empty matrix, duplicate gene IDs, Inf, missing/negative counts, sheet samples absent
        from the matrix, fewer than 3 time points in a used condition, an unknown selected
        condition, a zero library, ``min_samples_expressed`` above the number of samples, or
        no gene left after filtering (the message gives the count per reason).

    Warns
    -----
    GloamWarning
        Values that do not look like ``value_type`` (raw counts declared ``log``, log
        values declared ``counts``, non-integer counts; :func:`gloam.sanity.check_value_scale`);
        a sample dominated by one gene's count, or with a size factor far from the others
        (:func:`gloam.sanity.check_libraries`); matrix columns not in the sample sheet.

    References
    ----------
    .. [1] Anders S, Huber W (2010). Differential expression analysis for sequence count
       data. Genome Biology 11:R106 (median-of-ratios size factors).
    """
    settings = PrepareSettings() if settings is None else settings
    if matrix.shape[0] == 0 or matrix.shape[1] == 0:
        raise GloamError(
            f"the matrix is empty ({matrix.shape[0]} genes x {matrix.shape[1]} samples); it "
            "needs genes as rows and samples as columns"
        )
    genes = np.asarray(matrix.index.astype(str), dtype=object)
    if pd.Index(genes).has_duplicates:
        duplicated = pd.Index(genes)[pd.Index(genes).duplicated()].unique()[:5].tolist()
        raise GloamError(f"the matrix has duplicate gene IDs (e.g. {duplicated}); make them unique")
    sheet = _match_samples(matrix, sheet)
    raw_all = matrix.loc[:, sheet["sample"].to_list()]
    values_all = raw_all.to_numpy(dtype=np.float64)
    # Later passes of the size-factor re-estimation see the same values: warn once.
    first_pass = _pass == 1
    _validate_values(
        values_all,
        genes,
        sheet["sample"].to_numpy(dtype=object),
        settings.value_type,
        check_scale=first_pass,
    )

    conditions = _select_conditions(sheet, settings)
    used, columns, group_of_sample = _layout(sheet, conditions)
    used_positions = sheet.index[sheet["condition"].isin(conditions)].to_numpy()
    n_used = used.shape[0]
    if settings.expression_filter_on and settings.min_samples_expressed > n_used:
        raise GloamError(
            f"preparation setting min_samples_expressed={settings.min_samples_expressed} is "
            f"more than the {n_used} samples used; lower it to at most {n_used} (or 0 to "
            "switch the expression filter off)"
        )

    expressed_level: np.ndarray | None = None
    if settings.value_type == "counts":
        library_sizes = values_all.sum(axis=0)
        empty = library_sizes <= 0
        if empty.any():
            raise GloamError(
                f"sample(s) {sheet['sample'][empty].tolist()[:5]} have no counts at all; "
                "remove them from the sample sheet"
            )
        size_factors = (
            median_of_ratios_size_factors(values_all, _reference_genes)
            if settings.normalisation == "median_ratio"
            else None
        )
        if first_pass:
            check_libraries(
                values_all,
                genes,
                sheet["sample"].to_numpy(dtype=object),
                settings.normalisation,
                size_factors=size_factors,
            )
        cpm = counts_per_million(values_all)
        if settings.normalisation == "cpm":
            scaled = cpm
        elif size_factors is not None:
            scaled = values_all / size_factors
            used["size_factor"] = size_factors[used_positions]
        else:
            scaled = values_all
        used["library_size"] = library_sizes[used_positions]
        log_values = log_transform(scaled[:, used_positions], settings.pseudocount)
        expressed_level = cpm[:, used_positions]
        del cpm, scaled
    else:
        log_values = values_all[:, used_positions]
        expressed_level = log_values

    n_genes = genes.shape[0]
    status = np.full(n_genes, KEPT, dtype=object)

    def drop(mask: np.ndarray, reason: str) -> None:
        status[(status == KEPT) & mask] = reason

    missing = np.isnan(log_values)
    n_missing = missing.sum(axis=1)
    n_filled = np.zeros(n_genes, dtype=np.int64)
    if n_missing.any():
        drop(n_missing > settings.max_missing_fraction * n_used, "too_many_missing")
        log_values, n_filled = fill_missing(
            log_values,
            group_of_sample,
            columns["time"].to_numpy(),
            columns["condition"].to_numpy(dtype=object),
        )
        n_filled = np.where(status == KEPT, n_filled, 0)
        drop(np.isnan(log_values).any(axis=1), "missing_in_whole_condition")
        if settings.value_type == "log":
            expressed_level = log_values

    n_expressed = None
    if settings.expression_filter_on:
        with np.errstate(invalid="ignore"):
            n_expressed = (expressed_level >= settings.min_expression).sum(axis=1)
        drop(n_expressed < settings.min_samples_expressed, "low_expression")

    observed = ~np.isnan(log_values)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_log = np.where(observed, log_values, 0.0).sum(axis=1) / observed.sum(axis=1)
    profiles = summarise_replicates(
        log_values, group_of_sample, len(columns), settings.replicate_summary
    )
    profile_mean = profiles.mean(axis=1)
    profile_sd = profiles.std(axis=1, ddof=ZSCORE_DDOF)
    drop(_is_flat(profile_mean, profile_sd), "flat")
    log2_range = _largest_condition_range(profiles, columns["condition"].to_numpy(dtype=object))
    response_columns = {
        name: np.full(n_genes, np.nan)
        for name in ("response_statistic", "response_p_value", "response_fdr")
    }
    selection_method, selection_notes = "none", ()
    if settings.gene_selection == "responsive":
        tested = np.flatnonzero(status == KEPT)
        if tested.size:
            selection_method, selection_notes = _select_responsive(
                log_values[tested],
                group_of_sample,
                columns,
                genes[tested],
                mean_log[tested],
                settings,
                status_of_tested=status,
                tested=tested,
                response_columns=response_columns,
            )
    if settings.min_sd > 0:
        drop(profile_sd < settings.min_sd, "low_variability")
    if settings.top_variable is not None:
        candidates = np.flatnonzero(status == KEPT)
        if candidates.size > settings.top_variable:
            # Stable order on -sd: ties keep input order, so the choice is reproducible.
            ranked = candidates[np.argsort(-profile_sd[candidates], kind="stable")]
            outside = np.zeros(n_genes, dtype=bool)
            outside[ranked[settings.top_variable :]] = True
            drop(outside, "not_in_top_variable")

    reasons = [*DROP_REASONS, KEPT]
    summary = pd.DataFrame(
        {
            "reason": reasons,
            "n_genes": [int(np.count_nonzero(status == reason)) for reason in reasons],
        }
    )
    kept = status == KEPT
    if not kept.any():
        raise _no_gene_left_error(summary)

    zscores, _, _ = zscore_rows(profiles[kept])
    kept_genes = pd.Index(genes[kept], name="gene")
    reached_summary = np.isin(status, [KEPT, *DROP_REASONS[DROP_REASONS.index("flat") :]])
    gene_report = pd.DataFrame(
        {
            "gene": genes,
            "status": status,
            "n_missing": n_missing.astype(np.int64),
            "n_filled": n_filled.astype(np.int64),
            "n_samples_expressed": pd.array(
                [pd.NA] * n_genes if n_expressed is None else n_expressed, dtype="Int64"
            ),
            "mean_log": mean_log,
            "sd": np.where(reached_summary, profile_sd, np.nan),
            "log2_range": np.where(reached_summary, log2_range, np.nan),
            **response_columns,
        }
    )
    if (
        settings.value_type == "counts"
        and settings.normalisation == "median_ratio"
        and selection_method != "none"
    ):
        # DEG elimination (Kadota et al. 2012): median-of-ratios assumes that most genes do
        # not change; when many change in one direction at a time point, the median moves
        # with them and unchanged genes get a shared false "profile".  Estimate the factors
        # again from the genes this pass did not find changing, and prepare again, until that
        # set settles.
        reference = _unchanged_reference(
            response_columns["response_fdr"],
            response_columns["response_p_value"],
            np.all(values_all > 0, axis=1),
        )
        previous = np.ones(n_genes, dtype=bool) if _reference_genes is None else _reference_genes
        moved = np.count_nonzero(reference != previous)
        if _pass < DEGES_MAX_PASSES and moved > DEGES_SETTLED_SHARE * n_genes:
            return prepare_expression(
                matrix, sheet, settings, _reference_genes=reference, _pass=_pass + 1
            )
        if _pass > 1:
            selection_notes = (
                *selection_notes,
                f"size factors re-estimated {_pass - 1} time(s) from the "
                f"{int(np.count_nonzero(previous))} genes the previous pass did not find "
                f"changing (FDR >= {DEGES_FDR}; Kadota et al. 2012)",
            )
    if columns["condition"].nunique() > 1 and selection_method == "moderated_f":
        gene_report, note = _add_interaction_test(
            gene_report, log_values, group_of_sample, columns, genes, mean_log, settings
        )
        selection_notes = (*selection_notes, note)
    return PreparedData(
        zscores=pd.DataFrame(zscores, index=kept_genes, columns=columns.index),
        columns=columns,
        log_means=pd.DataFrame(profiles[kept], index=kept_genes, columns=columns.index),
        raw=raw_all.iloc[:, used_positions].rename_axis(index="gene"),
        gene_report=gene_report,
        summary=summary,
        samples=used,
        settings=settings,
        replicates=pd.DataFrame(
            log_values[kept], index=kept_genes, columns=used["sample"].astype(str).to_numpy()
        ),
        selection_method=selection_method,
        selection_notes=tuple(selection_notes),
    )


#: Columns the condition x time interaction test adds to the gene report (several conditions
#: with replicates): the moderated F statistic, its p-value and BH FDR, and the effect size.
INTERACTION_COLUMNS = (
    "interaction_statistic",
    "interaction_p_value",
    "interaction_fdr",
    "interaction_effect_log2",
)


def _add_interaction_test(
    gene_report: pd.DataFrame,
    log_values: np.ndarray,
    group_of_sample: np.ndarray,
    columns: pd.DataFrame,
    genes: np.ndarray,
    mean_log: np.ndarray,
    settings: PrepareSettings,
) -> tuple[pd.DataFrame, str]:
    """Add the condition x time interaction test of every gene that reached the time test.

    The genes tested are the same as for the change over time (those that passed the
    missing-value and expression filters and are not constant), so the prior of the moderated
    variances is not estimated from selected genes only. Per-condition effect sizes
    (``mean_log2_<c>``, ``log2_range_<c>``, ``peak_time_<c>``) come with it. Conditions
    without shared time points, or no replicates, skip the test with a note.
    """
    from gloam.compare import interaction_test

    tested = np.flatnonzero(gene_report["response_p_value"].notna().to_numpy())
    if tested.size < 2:
        return gene_report, "condition x time interaction: fewer than 2 genes to test"
    try:
        result = interaction_test(
            log_values[tested],
            group_of_sample,
            columns["condition"].to_numpy(dtype=object),
            columns["time"].to_numpy(dtype=np.float64),
            genes=genes[tested],
            fdr=settings.fdr,
            trend=settings.value_type == "counts",
            mean_expression=mean_log[tested],
        )
    except GloamError as error:
        return gene_report, f"condition x time interaction not tested: {error}"
    table = result.table
    report = gene_report.copy()
    sources = {
        "interaction_statistic": "statistic",
        "interaction_p_value": "p_value",
        "interaction_fdr": "fdr",
        "interaction_effect_log2": "effect_log2",
    }
    extra = [
        name
        for name in table.columns
        if name.startswith(("mean_log2_", "log2_range_", "peak_time_", "time_fdr_"))
    ]
    for target, source in [*sources.items(), *((name, name) for name in extra)]:
        values = np.full(len(report), np.nan)
        values[tested] = table[source].to_numpy(dtype=float)
        report[target] = values
    n_significant = int((table["fdr"] <= settings.fdr).sum())
    note = (
        f"condition x time interaction (moderated F, Smyth 2004; BH FDR): {n_significant} of "
        f"{tested.size} genes respond differently between conditions at FDR {settings.fdr:g}"
    )
    return report, note


def _unchanged_reference(
    fdr: np.ndarray, p_value: np.ndarray, expressed_everywhere: np.ndarray
) -> np.ndarray:
    """Genes to take size factors from: not found changing (FDR >= ``DEGES_FDR`` or untested).

    When fewer than ``DEGES_MIN_GENES`` of them are positive in every sample, the usable genes
    with the largest p-values are added until there are that many (or all usable genes).
    """
    reference = ~(fdr < DEGES_FDR)
    usable = np.flatnonzero(expressed_everywhere)
    if np.count_nonzero(reference[usable]) < DEGES_MIN_GENES:
        least_changing = usable[np.argsort(-np.nan_to_num(p_value[usable], nan=1.0), kind="stable")]
        reference[least_changing[:DEGES_MIN_GENES]] = True
    return reference


def _largest_condition_range(profiles: np.ndarray, condition_of_column: np.ndarray) -> np.ndarray:
    """Per gene, the largest range (max - min) of the profile within one condition (log2)."""
    largest = np.zeros(profiles.shape[0])
    for condition in dict.fromkeys(condition_of_column.tolist()):
        block = profiles[:, condition_of_column == condition]
        largest = np.maximum(largest, block.max(axis=1) - block.min(axis=1))
    return largest


def _select_responsive(
    log_values: np.ndarray,
    group_of_sample: np.ndarray,
    columns: pd.DataFrame,
    genes: np.ndarray,
    mean_log: np.ndarray,
    settings: PrepareSettings,
    *,
    status_of_tested: np.ndarray,
    tested: np.ndarray,
    response_columns: dict[str, np.ndarray],
) -> tuple[str, tuple[str, ...]]:
    """Test the genes still kept for change over time; mark the others with their reason.

    Writes the drop reason into ``status_of_tested[tested]`` and the test's statistic, p-value
    and FDR into ``response_columns`` (arrays over every input gene).
    """
    from gloam.responsive import select_responsive

    selection = select_responsive(
        log_values,
        group_of_sample,
        columns["condition"].to_numpy(dtype=object),
        columns["time"].to_numpy(dtype=np.float64),
        genes=genes,
        fdr=settings.fdr,
        min_log2_range=settings.min_log2_range,
        trend=settings.value_type == "counts",
        mean_expression=mean_log,
    )
    table = selection.table
    reasons = table["reason"].to_numpy(dtype=object)
    dropped = reasons != "responsive"
    status_of_tested[tested[dropped]] = reasons[dropped]
    response_columns["response_statistic"][tested] = table["statistic"].to_numpy(dtype=float)
    response_columns["response_p_value"][tested] = table["p_value"].to_numpy(dtype=float)
    response_columns["response_fdr"][tested] = table["fdr"].to_numpy(dtype=float)
    return selection.method, tuple(selection.notes)


def _uns_safe(settings: PrepareSettings) -> dict[str, object]:
    # h5ad cannot store None; an absent key reads back as "not set".
    return {key: value for key, value in settings.to_dict().items() if value is not None}


def _to_anndata(prepared: PreparedData):  # -> anndata.AnnData (imported lazily)
    import anndata

    report = prepared.gene_report.set_index("gene").loc[prepared.zscores.index]
    var = pd.DataFrame(index=prepared.zscores.index.astype(str))
    for column in ("n_missing", "n_filled", "mean_log", "sd", "log2_range", "response_fdr"):
        var[f"{VAR_PREFIX}{column}"] = report[column].to_numpy()
    for column in ("interaction_fdr", "interaction_effect_log2"):
        if column in report.columns:
            var[f"{VAR_PREFIX}{column}"] = report[column].to_numpy()
    var[f"{VAR_PREFIX}n_samples_expressed"] = (
        report["n_samples_expressed"].astype("float64").to_numpy()
    )
    obs = prepared.columns.copy()
    obs.index = obs.index.astype(str)
    obs["condition"] = obs["condition"].astype(str)
    raw = prepared.raw.loc[prepared.zscores.index]
    samples = prepared.samples.copy()
    for column in samples.columns:
        if samples[column].dtype == object:
            samples[column] = samples[column].astype(str)
    data = anndata.AnnData(
        X=prepared.zscores.to_numpy(dtype=np.float64).T,
        obs=obs,
        var=var,
        layers={LOG_MEAN_LAYER: prepared.log_means.to_numpy(dtype=np.float64).T},
        varm={
            RAW_VARM_KEY: raw.to_numpy(dtype=np.float64),
            **(
                {}
                if prepared.replicates is None
                else {REPLICATES_VARM_KEY: prepared.replicates.to_numpy(dtype=np.float64)}
            ),
        },
        uns={
            UNS_KEY: {
                "settings": _uns_safe(prepared.settings),
                "zscore_ddof": ZSCORE_DDOF,
                "selection_method": prepared.selection_method,
                "raw_samples": np.asarray(raw.columns.astype(str), dtype=object),
                "samples": samples.reset_index(drop=True),
                "summary": prepared.summary,
            }
        },
    )
    return data


def write_prepared(
    prepared: PreparedData,
    *,
    h5ad_path: str | os.PathLike[str],
    tsv_path: str | os.PathLike[str],
    report_path: str | os.PathLike[str],
    summary_path: str | os.PathLike[str],
) -> None:
    """Write the prepared matrix (TSV and ``.h5ad``), the per-gene report and the summary.

    All four files are written to temporary names first and renamed only when every one is
    complete, so a failure leaves none of them behind.

    Parameters
    ----------
    prepared : PreparedData
    h5ad_path : path-like
        AnnData, bulk orientation: ``obs`` = prepared columns (``time``, ``condition``,
        ``n_samples``), ``var`` = kept genes with ``prepare_n_missing``,
        ``prepare_n_filled``, ``prepare_n_samples_expressed`` (NaN when the filter is off),
        ``prepare_mean_log``, ``prepare_sd``; ``X`` = z-scores; layer ``log_mean`` =
        replicate summaries on the log scale; ``varm["prepare_raw"]`` = input values of the
        kept genes (n_kept_genes x n_used_samples), sample names in
        ``uns["prepare"]["raw_samples"]``; ``uns["prepare"]`` also holds ``settings``,
        ``zscore_ddof``, ``samples`` (the sample table) and ``summary``.
    tsv_path : path-like
        Column ``gene`` then one column of z-scores per prepared column.
    report_path : path-like
        ``gene_report`` table (see :class:`PreparedData`).
    summary_path : path-like
        ``summary`` table: ``reason``, ``n_genes``.
    """
    data = _to_anndata(prepared)
    with contextlib.ExitStack() as stack:
        temporary = [
            stack.enter_context(atomic_output(path))
            for path in (h5ad_path, tsv_path, report_path, summary_path)
        ]
        write_h5ad(data, temporary[0])
        write_table(prepared.zscores.reset_index(), temporary[1])
        write_table(prepared.gene_report, temporary[2])
        write_table(prepared.summary, temporary[3])


def read_prepared(h5ad_path: str | os.PathLike[str]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Read the prepared matrix written by :func:`write_prepared`.

    Parameters
    ----------
    h5ad_path : path-like

    Returns
    -------
    zscores : DataFrame of shape (n_genes, n_columns)
        Index = gene IDs (str, named ``gene``), columns = prepared column names in order.
    columns : DataFrame of shape (n_columns, 3)
        Index = column names; ``time`` (float), ``condition`` (str), ``n_samples`` (int).

    Raises
    ------
    GloamError
        The file is missing, unreadable or was not written by :func:`write_prepared`.
    """

    path = Path(h5ad_path)
    if not path.is_file():
        raise GloamError(
            f"prepared matrix {str(path)!r} does not exist; run the preparation step first"
        )
    data = read_h5ad_checked(path, "prepared matrix", remake=PREPARED_REMAKE)
    needed = {"time", "condition"}
    if UNS_KEY not in data.uns or not needed <= set(data.obs.columns):
        raise GloamError(
            f"{str(path)!r} was not written by gloam's preparation step (no uns['{UNS_KEY}'] "
            "or obs columns time/condition); prepare the matrix with gloam first"
        )
    zscores = pd.DataFrame(
        np.asarray(data.X, dtype=np.float64).T,
        index=pd.Index(data.var_names.astype(str), name="gene"),
        columns=pd.Index(data.obs_names.astype(str), name="column"),
    )
    columns = data.obs.copy()
    columns.index = pd.Index(columns.index.astype(str), name="column")
    columns["time"] = columns["time"].astype(np.float64)
    columns["condition"] = columns["condition"].astype(str)
    return zscores, columns


def read_prepared_replicates(
    h5ad_path: str | os.PathLike[str],
) -> tuple[pd.DataFrame | None, pd.DataFrame | None]:
    """Per-sample log values of the kept genes and the sample table, from ``prepared.h5ad``.

    Returns
    -------
    replicates : DataFrame of shape (n_genes, n_samples) or None
        ``varm["prepare_replicates"]`` with sample names as columns (None for files written
        before it existed).
    samples : DataFrame or None
        ``uns["prepare"]["samples"]`` (``sample``, ``time``, ``condition``, ``column``, ...).
    """

    data = read_h5ad_checked(h5ad_path, "prepared matrix", remake=PREPARED_REMAKE)
    if REPLICATES_VARM_KEY not in data.varm or UNS_KEY not in data.uns:
        return None, None
    samples = pd.DataFrame(data.uns[UNS_KEY]["samples"])
    replicates = pd.DataFrame(
        np.asarray(data.varm[REPLICATES_VARM_KEY], dtype=np.float64),
        index=pd.Index(data.var_names.astype(str), name="gene"),
        columns=samples["sample"].astype(str).to_numpy(),
    )
    return replicates, samples
