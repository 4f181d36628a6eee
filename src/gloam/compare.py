"""Compare conditions and runs: different responses, shared responses, matched clusters.

Three questions, one section each:

**Which genes respond differently in two (or more) conditions?**  :func:`interaction_test`
tests every gene for a condition x time interaction with replicates: the full model has one
mean per (condition, time) group, the reduced model is additive (one level per condition plus
one effect per time point shared by the conditions, i.e. parallel profiles).  The residual
variances are moderated across genes by empirical Bayes (Smyth, 2004; limma-trend for log
counts, Law et al., 2014), exactly as in gloam's gene selection (:mod:`gloam.responsive`), and
p-values are adjusted by Benjamini & Hochberg (1995).  Testing the difference itself avoids
the fallacy of comparing "significant in one condition, not in the other" (Gelman & Stern,
2006).

**Which response does a gene follow in each condition, and does it change?**
:func:`shared_responses` treats every gene-condition profile (z-scored on its own) as one
observation and places all of them on one shared set of centroids, fitted here by fuzzy
c-means (Bezdek, 1981) with a noise class (Davé, 1991) or given by the caller.  Every gene
then has memberships in each condition against the same responses.  A gene has *changed*
when its interaction FDR is at most the level **and** its top response differs between the
conditions (see :data:`CHANGE_STATUSES`).  :func:`transition_table` counts genes by response
in one condition x response in the other, :func:`changed_gene_sets` makes gene sets of the
changed genes with the tested genes as background, and :func:`plot_transitions` draws where
genes move.

**Which clusters of two runs are the same?**  :func:`match_clusters` pairs the clusters of
two runs one-to-one by the Pearson correlation of their centroids on a shared time axis
(Hungarian method, Kuhn 1955, through :func:`scipy.optimize.linear_sum_assignment`), reports
the Jaccard overlap of the paired clusters' core genes and the adjusted Rand index (Hubert &
Arabie, 1985) of the two partitions on the genes both runs clustered.
:func:`sensitivity_summary` does this for every variant of one dataset against a reference.

Orientation: genes x samples (or genes x columns), values on a log2 scale.

References
----------
Smyth, G. K. (2004). Linear models and empirical Bayes methods for assessing differential
expression in microarray experiments. *Statistical Applications in Genetics and Molecular
Biology* 3(1):3.

Law, C. W., Chen, Y., Shi, W. & Smyth, G. K. (2014). voom: precision weights unlock linear
model analysis tools for RNA-seq read counts. *Genome Biology* 15:R29.

Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery rate. *Journal of the
Royal Statistical Society B* 57(1):289-300.

Gelman, A. & Stern, H. (2006). The difference between "significant" and "not significant" is
not itself statistically significant. *The American Statistician* 60(4):328-331.

Bezdek, J. C. (1981). *Pattern Recognition with Fuzzy Objective Function Algorithms*. Plenum.

Davé, R. N. (1991). Characterization and detection of noise in clustering. *Pattern
Recognition Letters* 12(11):657-664.

Kuhn, H. W. (1955). The Hungarian method for the assignment problem. *Naval Research
Logistics Quarterly* 2:83-97.

Hubert, L. & Arabie, P. (1985). Comparing partitions. *Journal of Classification* 2:193-218.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Literal

import matplotlib
import numpy as np
import pandas as pd
from matplotlib import patheffects
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle
from scipy.optimize import linear_sum_assignment

from gloam.consensus import cluster_names, order_clusters_by_peak_time
from gloam.errors import GloamError
from gloam.fcm import fuzzy_cmeans, predict_memberships
from gloam.genesets import _check_prefix
from gloam.noise import noise_cmeans, noise_memberships
from gloam.plots import (
    _INK,
    _MUTED,
    _STYLE,
    NOISE_COLOUR,
    _figure,
    _tint,
    _wrap,
    cluster_colours,
    time_axis_transform,
)
from gloam.responsive import (
    _check_selection_inputs,
    _group_means,
    interaction_designs,
    nested_f_test,
)
from gloam.robustness import hard_labels, zscore_rows

__all__ = [
    "flat_profiles",
    "NOISE_LABEL",
    "FLAT_LABEL",
    "CHANGE_STATUSES",
    "ConditionProfiles",
    "condition_profiles",
    "InteractionTest",
    "interaction_test",
    "SharedResponses",
    "shared_responses",
    "transition_table",
    "changed_gene_sets",
    "adjusted_rand_index",
    "centroid_correlation",
    "ClusterMatch",
    "match_clusters",
    "ClusteredRun",
    "sensitivity_summary",
    "plot_transitions",
]

#: Label of a changing gene-condition profile close to no shared response (noise class).
NOISE_LABEL = "noise"
#: Label of a gene-condition profile that does not change over time (no response there).
FLAT_LABEL = "flat"

#: Per-gene status of :func:`shared_responses`, and what it means.
CHANGE_STATUSES: dict[str, str] = {
    "changed": (
        "interaction FDR <= level and the top response differs between conditions (a move "
        "to or from flat or noise counts)"
    ),
    "modulated": (
        "interaction FDR <= level but the same top response in every condition (the profile "
        "differs in size or timing, not in kind)"
    ),
    "unchanged": "interaction FDR above the level (no evidence of a different response)",
    "untested": "no interaction test (no replicates); top responses are shown as they are",
}

# Fewest residual degrees of freedom for the interaction test (as for the gene selection).
_MIN_RESIDUAL_DF = 2
# Fewest points of the shared time axis on which two runs' centroids are compared.
_MIN_SHARED_TIMES = 3
_SAFE_PART = re.compile(r"[^A-Za-z0-9_.-]+")


# ------------------------------------------------------------------- condition profiles


@dataclass(frozen=True)
class ConditionProfiles:
    """Mean log2 profile of every gene in every condition, on one shared time axis.

    Attributes
    ----------
    values : ndarray of shape (n_genes, n_conditions, n_times)
        Group means (log2 units), time points in increasing order.
    genes : pandas.Index
        Gene names (unique), named ``gene``.
    conditions : tuple of str
        Condition names, in order of first appearance.
    times : ndarray of shape (n_times,)
        The shared time points, increasing (the unit of the sample sheet, e.g. hours).
    """

    values: np.ndarray
    genes: pd.Index
    conditions: tuple[str, ...]
    times: np.ndarray


def _profile_cube(
    means: np.ndarray, condition_of_group: np.ndarray, time_of_group: np.ndarray
) -> tuple[np.ndarray, tuple[str, ...], np.ndarray]:
    """Group means (n_genes, n_groups) -> (n_genes, n_conditions, n_times), times sorted.

    Assumes every (condition, time) pair is one group (checked by the caller).
    """
    condition_codes, condition_names = pd.factorize(pd.Series(condition_of_group))
    time_codes, time_values = pd.factorize(pd.Series(time_of_group), sort=True)
    position = np.empty((condition_names.size, time_values.size), dtype=np.intp)
    position[condition_codes, time_codes] = np.arange(condition_codes.size)
    conditions = tuple(str(name) for name in condition_names)
    return means[:, position], conditions, np.asarray(time_values, dtype=np.float64)


def condition_profiles(
    means: np.ndarray | pd.DataFrame,
    condition_of_column: Sequence[object] | np.ndarray,
    time_of_column: Sequence[float] | np.ndarray,
    *,
    genes: Sequence[str] | pd.Index,
) -> ConditionProfiles:
    """Arrange per-column mean profiles by condition and time.

    With prepared data: ``condition_profiles(prepared.log_means,
    prepared.columns["condition"], prepared.columns["time"], genes=prepared.log_means.index)``.

    Parameters
    ----------
    means : ndarray or DataFrame of shape (n_genes, n_columns)
        Mean log2 value of each gene in each (condition, time) column, finite.
    condition_of_column : sequence of length n_columns
        Condition of each column.
    time_of_column : sequence of float of length n_columns
        Time of each column; every condition must have every time point once.
    genes : sequence of str of length n_genes
        Unique gene names.

    Returns
    -------
    ConditionProfiles

    Raises
    ------
    GloamError
        Shapes that disagree, non-finite values, repeated genes, fewer than two conditions,
        or conditions that do not share their time points.
    """
    values = np.asarray(means, dtype=np.float64)
    if values.ndim != 2 or not np.isfinite(values).all():
        raise GloamError(
            f"means must be a finite 2-D matrix (genes x columns); got shape {values.shape} "
            "or missing values"
        )
    conditions = np.asarray(condition_of_column, dtype=object)
    times = np.asarray(time_of_column, dtype=np.float64)
    if conditions.shape != (values.shape[1],) or times.shape != (values.shape[1],):
        raise GloamError(
            f"give one condition and one time per column of means ({values.shape[1]}); got "
            f"{conditions.shape[0] if conditions.ndim else 0} and "
            f"{times.shape[0] if times.ndim else 0}"
        )
    # interaction_designs checks the layout: >= 2 conditions, each pair once, shared times.
    interaction_designs(np.arange(values.shape[1]), conditions, times)
    gene_index = _gene_index(genes, values.shape[0])
    cube, names, time_values = _profile_cube(values, conditions, times)
    return ConditionProfiles(values=cube, genes=gene_index, conditions=names, times=time_values)


def _gene_index(genes: object, n_genes: int) -> pd.Index:
    index = pd.Index(np.asarray(genes, dtype=object).ravel().astype(str), name="gene")
    if index.size != n_genes:
        raise GloamError(f"genes has {index.size} names for {n_genes} rows; give one name per row")
    if index.has_duplicates:
        repeated = index[index.duplicated()].unique()[:3].tolist()
        raise GloamError(f"gene names must be unique; repeated: {repeated}")
    return index


# --------------------------------------------------------------------- interaction test


@dataclass(frozen=True)
class InteractionTest:
    """Per-gene test of a condition x time interaction (do the conditions respond differently?).

    Attributes
    ----------
    table : pandas.DataFrame
        One row per gene (index ``gene``).  Columns: ``statistic`` (moderated F),
        ``df_numerator``, ``df_denominator``, ``p_value``, ``fdr`` (Benjamini-Hochberg),
        ``significant`` (``fdr <= fdr_level``), ``effect_log2`` and, for every condition
        ``<c>``: ``mean_log2_<c>`` (mean log2 expression over the condition's samples),
        ``log2_range_<c>`` (max - min of the condition's mean profile, log2 units) and
        ``peak_time_<c>`` (time of the profile's maximum, the first on ties) and
        ``time_fdr_<c>`` (Benjamini-Hochberg FDR of a moderated F-test of change over time
        within the condition alone; NaN for a condition without replicates).
        ``effect_log2`` is the size of the interaction in log2 units: each condition's mean
        profile is centred on its own mean over time (which removes the condition's level,
        as the test does), and the effect is the largest difference between two conditions'
        centred profiles at any time point.  It is 0 for parallel profiles; 1 means that at
        some time the conditions differ two-fold more than they do on average.
    profiles : ConditionProfiles
        The mean profiles the effect sizes come from.
    fdr_level : float
        The FDR level of ``significant``.
    df_prior : float
        Prior degrees of freedom of the moderated variances (``inf``: no gene-wise spread).
    notes : list of str
        Plain-language notes for the log.
    """

    table: pd.DataFrame
    profiles: ConditionProfiles
    fdr_level: float
    df_prior: float
    notes: list[str]

    @property
    def significant_genes(self) -> list[str]:
        """Genes with an interaction FDR at or below the level, in table order."""
        return self.table.index[self.table["significant"].to_numpy()].to_list()


def interaction_test(
    log_values: np.ndarray,
    group_of_sample: np.ndarray,
    condition_of_group: Sequence[object] | np.ndarray,
    time_of_group: Sequence[float] | np.ndarray,
    *,
    genes: Sequence[str] | pd.Index,
    fdr: float = 0.05,
    trend: bool = True,
    mean_expression: np.ndarray | None = None,
    moderate: bool = True,
) -> InteractionTest:
    """Test every gene for a condition x time interaction, with moderated variances.

    Full model: one mean per (condition, time) group; reduced model: additive, one level per
    condition plus one effect per time point shared by all conditions
    (:func:`gloam.responsive.interaction_designs`).  The F statistic uses the residual
    variance moderated across genes (:func:`gloam.responsive.nested_f_test`, Smyth 2004),
    with a prior variance that follows mean expression when ``trend`` is true (limma-trend,
    Law et al. 2014), and the p-values are adjusted by Benjamini-Hochberg: the same
    framework as gloam's gene selection.  The background of any gene set made from the
    result is the genes tested here.

    With prepared data: ``interaction_test(prepared.replicates, group, columns["condition"],
    columns["time"], genes=prepared.replicates.index)`` where ``columns = prepared.columns``
    and ``group`` is the position of ``prepared.samples["column"]`` in ``columns.index``.

    Parameters
    ----------
    log_values : ndarray of shape (n_genes, n_samples)
        Log2-scale values of the replicates (e.g. log2 CPM), finite.
    group_of_sample : ndarray of shape (n_samples,) of int
        Index of each sample's (condition, time) group, 0 .. n_groups - 1.
    condition_of_group : sequence of length n_groups
        Condition of each group; at least two conditions.
    time_of_group : sequence of float of length n_groups
        Time of each group; every condition must have every time point.
    genes : sequence of str of length n_genes
        Unique gene names.
    fdr : float
        FDR level of the ``significant`` column, in (0, 1) (default 0.05).
    trend : bool
        Prior variance follows a trend in mean expression (default True: right for log
        counts, harmless otherwise).
    mean_expression : ndarray of shape (n_genes,), optional
        Expression level for the trend (default: the row mean of ``log_values``).
    moderate : bool
        Moderate the variances (default True).  False gives the ordinary F-test of each gene
        on its own (``df_prior`` 0; ``trend`` is then ignored), e.g. to compare with a
        textbook ANOVA.

    Returns
    -------
    InteractionTest

    Raises
    ------
    GloamError
        Inputs of the wrong shape or with missing values, repeated genes or groups, fewer
        than two conditions, conditions without shared time points, no replicates
        (fewer than 2 residual degrees of freedom), or ``fdr`` outside (0, 1).

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
        0.0,
        mean_expression,
        0.5,
    )
    values, groups = layout.values, layout.groups
    n_genes, n_samples = values.shape
    conditions = np.asarray(condition_of_group, dtype=object)
    times = np.asarray(time_of_group, dtype=np.float64)
    full, reduced = interaction_designs(groups, conditions, times)
    n_groups = conditions.size
    residual_df = n_samples - n_groups
    if residual_df < _MIN_RESIDUAL_DF:
        raise GloamError(
            f"the interaction test needs replicates: {n_samples} samples in {n_groups} "
            f"(condition, time) groups leave {residual_df} residual degree(s) of freedom, at "
            f"least {_MIN_RESIDUAL_DF} are needed; add replicates or compare the conditions' "
            "clusters without a test"
        )
    level = values.mean(axis=1) if layout.mean_expression is None else layout.mean_expression
    trend = trend and moderate
    test = nested_f_test(
        values, full, reduced, moderate=moderate, covariate=level if trend else None
    )

    cube, names, time_values = _profile_cube(
        _group_means(values, groups, n_groups), conditions, times
    )
    centred = cube - cube.mean(axis=2, keepdims=True)
    effect = np.max(centred.max(axis=1) - centred.min(axis=1), axis=1)
    condition_codes, _ = pd.factorize(pd.Series(conditions))
    sample_condition = condition_codes[groups]
    indicators = np.zeros((n_samples, len(names)))
    indicators[np.arange(n_samples), sample_condition] = 1.0
    condition_means = (values @ indicators) / indicators.sum(axis=0)

    columns: dict[str, object] = {
        "statistic": test.statistic,
        "df_numerator": float(test.df_numerator),
        "df_denominator": test.df_denominator,
        "p_value": test.p_value,
        "fdr": test.fdr,
        "significant": test.fdr <= fdr,
        "effect_log2": effect,
    }
    time_fdr = _time_fdr_within_conditions(
        values,
        groups,
        condition_codes,
        condition_means if layout.mean_expression is None else layout.mean_expression,
        trend,
        moderate,
    )
    for index, name in enumerate(names):
        columns[f"mean_log2_{name}"] = condition_means[:, index]
        columns[f"log2_range_{name}"] = np.ptp(cube[:, index, :], axis=1)
        columns[f"peak_time_{name}"] = time_values[np.argmax(cube[:, index, :], axis=1)]
        columns[f"time_fdr_{name}"] = time_fdr[:, index]
    table = pd.DataFrame(columns, index=layout.genes)

    prior = (
        "not moderated"
        if not moderate
        else "prior df infinite (the genes' variances vary no more than sampling explains)"
        if np.isinf(test.df_prior)
        else f"prior df {test.df_prior:.3g}"
    )
    notes = [
        ("moderated F-test (empirical Bayes, Smyth 2004)" if moderate else "ordinary F-test")
        + " of the condition x time interaction "
        f"between {', '.join(names)}: {test.df_numerator} and {test.df_denominator:.4g} degrees "
        f"of freedom ({residual_df} residual from {n_samples} samples in {n_groups} groups; "
        f"{prior})"
        + (
            ""
            if not moderate
            else "; prior variance "
            + ("a trend in mean log2 expression" if trend else "constant across genes")
        ),
        f"{int(table['significant'].sum())} of {n_genes} genes respond differently "
        f"(Benjamini-Hochberg FDR <= {fdr:g}); the background is the {n_genes} genes tested",
    ]
    profiles = ConditionProfiles(
        values=cube, genes=layout.genes, conditions=names, times=time_values
    )
    return InteractionTest(
        table=table, profiles=profiles, fdr_level=float(fdr), df_prior=test.df_prior, notes=notes
    )


def _time_fdr_within_conditions(
    values: np.ndarray,
    groups: np.ndarray,
    condition_of_group: np.ndarray,
    level: np.ndarray,
    trend: bool,
    moderate: bool,
) -> np.ndarray:
    """FDR of a moderated F-test of change over time within each condition on its own.

    Returns (n_genes, n_conditions); NaN for a condition without replicates.  ``level`` is
    (n_genes,) or (n_genes, n_conditions), the covariate of the variance trend.
    """
    n_conditions = int(condition_of_group.max()) + 1
    result = np.full((values.shape[0], n_conditions), np.nan)
    level = level.reshape(values.shape[0], -1)
    for code in range(n_conditions):  # a loop over the few conditions
        in_condition = condition_of_group[groups] == code
        local, _ = pd.factorize(pd.Series(groups[in_condition]))
        n_local = int(local.max()) + 1
        if int(in_condition.sum()) - n_local < _MIN_RESIDUAL_DF:
            continue
        full = np.zeros((local.size, n_local))
        full[np.arange(local.size), local] = 1.0
        covariate = level[:, min(code, level.shape[1] - 1)] if trend else None
        result[:, code] = nested_f_test(
            values[:, in_condition],
            full,
            np.ones((local.size, 1)),
            moderate=moderate,
            covariate=covariate,
        ).fdr
    return result


# --------------------------------------------------------------------- shared responses


@dataclass(frozen=True)
class SharedResponses:
    """Every gene's response in each condition, against one shared set of centroids.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per gene (index ``gene``).  Columns: ``response_<c>`` (the top response
        ``C1`` ..., :data:`NOISE_LABEL` or :data:`FLAT_LABEL`) and ``membership_<c>`` (the
        membership of that response or of the noise class; NaN for ``flat``) for every
        condition ``<c>``; ``interaction_fdr`` (NaN when untested); ``status`` (one of
        :data:`CHANGE_STATUSES`); ``changed`` (status is ``changed``); then the full
        memberships ``<c>_C1`` ... ``<c>_C<k>`` and, with a noise class, ``<c>_noise`` for
        every condition (each condition's memberships sum to 1, also for flat profiles).
    centroids : ndarray of shape (n_clusters, n_times)
        Shared response centroids (z-score units), ordered by peak time when fitted here.
    clusters : list of str
        Names of the responses, ``C1`` ... ``C<k>``, in centroid order.
    labels : list of str
        Every label a gene-condition can get, in display order: the clusters, then
        :data:`NOISE_LABEL` (with a noise class), then :data:`FLAT_LABEL`.
    conditions : tuple of str
    times : ndarray of shape (n_times,)
    m : float
        Fuzzifier of the memberships.
    noise_distance : float
        ``delta^2`` of the noise class (``inf``: no noise class).
    fdr_level : float
    notes : list of str
        Plain-language notes for the log.
    """

    table: pd.DataFrame
    centroids: np.ndarray
    clusters: list[str]
    labels: list[str]
    conditions: tuple[str, ...]
    times: np.ndarray
    m: float
    noise_distance: float
    fdr_level: float
    notes: list[str]

    @property
    def changed_genes(self) -> list[str]:
        """Genes whose response changes (status ``changed``), in table order."""
        return self.table.index[self.table["changed"].to_numpy()].to_list()


def _check_positive_int(name: str, value: object, low: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < low:
        raise GloamError(f"{name}={value!r} is not allowed; {name} must be an integer >= {low}")
    return int(value)


def _check_number(name: str, value: object, ok: Callable[[float], bool], allowed: str) -> float:
    if (
        isinstance(value, bool)
        or not isinstance(value, int | float | np.integer | np.floating)
        or not math.isfinite(float(value))
        or not ok(float(value))
    ):
        raise GloamError(f"{name}={value!r} is not allowed; {name} must be {allowed}")
    return float(value)


def _noise_setting(noise: object, n_times: int) -> float:
    """``delta^2`` from the ``noise`` setting of :func:`shared_responses`."""
    if isinstance(noise, str):
        if noise not in ("flat_profile", "none"):
            raise GloamError(
                f"noise={noise!r} is not allowed; use 'flat_profile', 'none' or a number > 0"
            )
        return np.inf if noise == "none" else float(n_times - 1)
    return _check_number("noise", noise, lambda v: v > 0, "'flat_profile', 'none' or a number > 0")


def _fit_shared(
    X: np.ndarray,
    times: np.ndarray,
    n_clusters: int,
    m: float,
    delta2: float,
    n_starts: int,
    rng: np.random.Generator,
) -> np.ndarray:
    """Centroids (k, n_times) of the observations X, ordered by peak time."""
    best = fuzzy_cmeans(X, n_clusters, m, n_starts=n_starts, init="kmeans++", rng=rng).best()
    centroids = best.centroids
    if np.isfinite(delta2):
        centroids = noise_cmeans(X, centroids, m, noise_distance=delta2).centroids
    return centroids[order_clusters_by_peak_time(centroids, times)]


def flat_profiles(
    profiles: ConditionProfiles,
    test_table: pd.DataFrame | None,
    min_log2_range: float,
    fdr: float,
) -> np.ndarray:
    """Which gene-condition profiles do not change: bool array (n_genes, n_conditions).

    Flat when the condition's mean profile has a log2 range below ``min_log2_range`` (or none
    at all), or, with a test table holding ``time_fdr_<c>``, when its change over time in that
    condition is not significant at ``fdr``: the rule of gloam's gene selection, per condition.
    """
    spread = np.ptp(profiles.values, axis=2)
    flat = (spread < min_log2_range) | (spread <= 0)
    if test_table is not None:
        time_fdr = np.column_stack(
            [test_table[f"time_fdr_{c}"].to_numpy(np.float64) for c in profiles.conditions]
        )
        flat |= ~np.isnan(time_fdr) & (time_fdr > fdr)
    return flat


def shared_responses(
    data: InteractionTest | ConditionProfiles,
    *,
    centroids: np.ndarray | None = None,
    n_clusters: int | None = None,
    m: float = 2.0,
    noise: Literal["flat_profile", "none"] | float = "flat_profile",
    min_log2_range: float = 1.0,
    fdr: float | None = None,
    n_starts: int = 20,
    rng: int | np.random.Generator | None = None,
) -> SharedResponses:
    """Place every gene-condition profile on one shared set of responses.

    Each gene's mean profile in each condition is z-scored on its own (mean 0, SD 1 with
    ddof = 1 over the condition's time points; a flat profile becomes all zeros) and is one
    observation; all ``n_genes x n_conditions`` observations get memberships against the
    same centroids.

    A gene-condition is :data:`FLAT_LABEL` (no response there) when its mean profile has a
    log2 range below ``min_log2_range`` or, with an interaction test, its change over time
    within that condition is not significant (``time_fdr_<c>`` above the level): the rule
    of gloam's gene selection, applied per condition.  A z-scored flat profile is noise
    blown up to unit size, so it is not placed on a response.

    The centroids are either given (e.g. the ones the workflow chose, with their ``m``) or
    fitted here on the profiles that are not flat: fuzzy c-means (Bezdek 1981) from
    ``n_starts`` k-means++ starts (the best objective kept), refined with the noise class,
    and ordered by peak time.  With a noise class (the default ``noise="flat_profile"``:
    ``delta^2 = n_times - 1``, the squared distance of a z-scored profile to the flat
    one; Davé 1991, :mod:`gloam.noise`), a profile that changes but is no closer to any
    response than to a flat line gets the label :data:`NOISE_LABEL`.

    A gene's status (:data:`CHANGE_STATUSES`): ``changed`` when its interaction FDR is at
    most the level and its top label is not the same in every condition (a move to or from
    ``flat`` or ``noise`` counts); ``modulated`` when significant with the same label;
    ``unchanged`` when not significant; ``untested`` without a test.  A different top
    response without a significant interaction is not called a change: the comparison of
    "significant here, not there" is no test of a difference (Gelman & Stern 2006), and
    memberships near a boundary flip with noise.

    Parameters
    ----------
    data : InteractionTest or ConditionProfiles
        An interaction test (gives profiles, interaction FDR, per-condition time FDR and the
        level), or bare profiles (:func:`condition_profiles`; every status ``untested``).
    centroids : ndarray of shape (n_clusters, n_times), optional
        Shared centroids (z-score units, columns in time order).  Default: fitted here.
    n_clusters : int, optional
        Number of responses to fit, >= 2; required when ``centroids`` is not given.
    m : float
        Fuzzifier, > 1 (default 2.0); with given centroids, the one they were found with.
    noise : {"flat_profile", "none"} or float
        The noise class: the flat-profile rule (default), none, or ``delta^2`` itself
        (squared z-score units, > 0).
    min_log2_range : float
        Smallest log2 range of a condition's mean profile that counts as a response, >= 0
        (default 1: two-fold, as the gene selection).
    fdr : float, optional
        FDR level of a change and of the per-condition time test, in (0, 1).  Default: the
        interaction test's level (0.05 for bare profiles).
    n_starts : int
        Random starts of the fit, >= 1 (default 20).
    rng : int, numpy.random.Generator or None
        Seed or generator of the fit's starts.

    Returns
    -------
    SharedResponses

    Raises
    ------
    GloamError
        Settings out of range, centroids of the wrong shape, neither centroids nor
        ``n_clusters``, or too few profiles that are not flat to fit ``n_clusters``.

    References
    ----------
    Bezdek (1981); Davé (1991); Gelman & Stern (2006): see the module docstring.
    """
    if isinstance(data, InteractionTest):
        profiles, test_table = data.profiles, data.table
        default_fdr = data.fdr_level
    elif isinstance(data, ConditionProfiles):
        profiles, test_table, default_fdr = data, None, 0.05
    else:
        raise GloamError(
            "shared_responses takes an interaction test (interaction_test(...)) or condition "
            f"profiles (condition_profiles(...)); got {type(data).__name__}"
        )
    level = default_fdr if fdr is None else fdr
    level = _check_number("fdr", level, lambda v: 0.0 < v < 1.0, "a number in (0, 1)")
    m = _check_number("m", m, lambda v: v > 1.0, "a finite number > 1")
    min_range = _check_number("min_log2_range", min_log2_range, lambda v: v >= 0.0, "a number >= 0")
    n_starts = _check_positive_int("n_starts", n_starts, 1)
    generator = np.random.default_rng(rng)
    cube = profiles.values
    n_genes, n_conditions, n_times = cube.shape
    delta2 = _noise_setting(noise, n_times)
    X = zscore_rows(cube.reshape(n_genes * n_conditions, n_times))  # gene-major rows

    flat = flat_profiles(profiles, test_table, min_range, level)
    flat_rows = flat.ravel()

    if centroids is None:
        if n_clusters is None:
            raise GloamError(
                "give the shared centroids (centroids=...) or the number of responses to fit "
                "(n_clusters=...)"
            )
        k = _check_positive_int("n_clusters", n_clusters, 2)
        n_responding = int((~flat_rows).sum())
        if k >= n_responding:
            raise GloamError(
                f"n_clusters={k} is not allowed: only {n_responding} gene-condition profiles "
                "change over time; fit fewer responses or lower min_log2_range"
            )
        V = _fit_shared(X[~flat_rows], profiles.times, k, m, delta2, n_starts, generator)
        origin = f"fitted on {n_responding} changing gene-condition profiles ({n_starts} starts)"
    else:
        V = np.asarray(centroids, dtype=np.float64)
        if V.ndim != 2 or V.shape[1] != n_times or V.shape[0] < 1 or not np.isfinite(V).all():
            raise GloamError(
                f"centroids must be a finite array of shape (n_clusters, {n_times}) (one "
                f"column per shared time point); got shape {V.shape}"
            )
        origin = "given"
    if np.isfinite(delta2):
        U, noise_share = noise_memberships(X, V, m, delta2)
    else:
        U, noise_share = predict_memberships(X, V, m), None
    codes = hard_labels(U, noise_share)  # -1: noise
    top = np.where(codes >= 0, U.max(axis=1), np.nan)
    if noise_share is not None:
        top = np.where(codes < 0, noise_share, top)
    codes = np.where(flat_rows, -2, codes).reshape(n_genes, n_conditions)
    top = np.where(flat_rows, np.nan, top).reshape(n_genes, n_conditions)
    names = cluster_names(V.shape[0])
    labels = [*names, *([NOISE_LABEL] if noise_share is not None else []), FLAT_LABEL]
    lookup = np.asarray([*names, FLAT_LABEL, NOISE_LABEL], dtype=object)  # index -2, -1 wrap
    label_names = lookup[codes]

    if test_table is None:
        adjusted = np.full(n_genes, np.nan)
    else:
        adjusted = test_table["fdr"].to_numpy(np.float64)
    differs = (codes != codes[:, :1]).any(axis=1)
    status = np.where(
        np.isnan(adjusted),
        "untested",
        np.where(adjusted <= level, np.where(differs, "changed", "modulated"), "unchanged"),
    ).astype(object)

    columns: dict[str, object] = {}
    for index, condition in enumerate(profiles.conditions):
        columns[f"response_{condition}"] = label_names[:, index]
    for index, condition in enumerate(profiles.conditions):
        columns[f"membership_{condition}"] = top[:, index]
    columns["interaction_fdr"] = adjusted
    columns["status"] = status
    columns["changed"] = status == "changed"
    blocks = U.reshape(n_genes, n_conditions, V.shape[0])
    noise_blocks = None if noise_share is None else noise_share.reshape(n_genes, n_conditions)
    for index, condition in enumerate(profiles.conditions):
        for cluster, name in enumerate(names):
            columns[f"{condition}_{name}"] = blocks[:, index, cluster]
        if noise_blocks is not None:
            columns[f"{condition}_{NOISE_LABEL}"] = noise_blocks[:, index]
    table = pd.DataFrame(columns, index=profiles.genes)

    counts = pd.Series(status).value_counts()
    flat_rule = f"log2 range below {min_range:g}"
    if test_table is not None:
        flat_rule += f" or change over time not significant (FDR > {level:g})"
    tally = ", ".join(f"{name} {int(counts[name])}" for name in CHANGE_STATUSES if name in counts)
    notes = [
        f"shared responses: {V.shape[0]} centroids {origin}, m = {m:.3g}, "
        + (f"noise distance {delta2:.3g}" if np.isfinite(delta2) else "no noise class")
        + f"; each of the {n_genes} genes x {n_conditions} conditions placed on them",
        f"flat in a condition: {flat_rule} ({int(flat.sum())} gene-condition profiles)",
        f"status: {tally}",
    ]
    return SharedResponses(
        table=table,
        centroids=V,
        clusters=names,
        labels=labels,
        conditions=profiles.conditions,
        times=profiles.times,
        m=m,
        noise_distance=delta2,
        fdr_level=level,
        notes=notes,
    )


def _condition_pair(
    shared: SharedResponses, condition_a: str | None, condition_b: str | None
) -> tuple[str, str]:
    a = shared.conditions[0] if condition_a is None else str(condition_a)
    b = shared.conditions[1] if condition_b is None else str(condition_b)
    for name in (a, b):
        if name not in shared.conditions:
            raise GloamError(
                f"condition {name!r} is not compared here; choose from {list(shared.conditions)}"
            )
    if a == b:
        raise GloamError(f"compare two different conditions; got {a!r} twice")
    return a, b


def transition_table(
    shared: SharedResponses,
    condition_a: str | None = None,
    condition_b: str | None = None,
    *,
    changed_only: bool = False,
) -> pd.DataFrame:
    """Number of genes by top response in one condition x top response in another.

    Parameters
    ----------
    shared : SharedResponses
    condition_a, condition_b : str, optional
        The conditions of the rows and the columns (default: the first two).
    changed_only : bool
        Count only the genes whose response changed (default: all genes).

    Returns
    -------
    pandas.DataFrame of shape (n_labels, n_labels), int
        Rows: response in ``condition_a`` (index named ``response_<a>``); columns: response
        in ``condition_b`` (named ``response_<b>``); labels ``C1`` ... ``C<k>`` then
        :data:`NOISE_LABEL` when there is a noise class.  The entries sum to the number of
        genes counted (all genes, or the changed ones); the diagonal holds the genes that
        keep their response.

    Raises
    ------
    GloamError
        Unknown or equal conditions.
    """
    a, b = _condition_pair(shared, condition_a, condition_b)
    labels = shared.labels
    rows = shared.table
    if changed_only:
        rows = rows[rows["changed"].to_numpy()]
    code = {label: index for index, label in enumerate(labels)}
    row_codes = rows[f"response_{a}"].map(code).to_numpy(dtype=np.intp)
    column_codes = rows[f"response_{b}"].map(code).to_numpy(dtype=np.intp)
    counts = np.bincount(
        row_codes * len(labels) + column_codes, minlength=len(labels) ** 2
    ).reshape(len(labels), len(labels))
    return pd.DataFrame(
        counts,
        index=pd.Index(labels, name=f"response_{a}"),
        columns=pd.Index(labels, name=f"response_{b}"),
    )


def _safe(text: str) -> str:
    return _SAFE_PART.sub("_", text).strip("_") or "x"


def changed_gene_sets(
    shared: SharedResponses,
    condition_a: str | None = None,
    condition_b: str | None = None,
    *,
    prefix: str = "gloam",
) -> tuple[dict[str, tuple[str, list[str]]], list[str]]:
    """Gene sets of the genes whose response changed, and their background.

    Parameters
    ----------
    shared : SharedResponses
    condition_a, condition_b : str, optional
        The pair of conditions (default: the first two).
    prefix : str
        Start of every set name (letters, digits, ``_ . -``), e.g. the dataset name.

    Returns
    -------
    gene_sets : dict of str to (str, list of str)
        ``<prefix>_changed_<a>_vs_<b>``: every changed gene; then one set per observed
        transition, ``<prefix>_<a>_<Ci>_to_<b>_<Cj>``: the changed genes with response
        ``Ci`` in ``a`` and ``Cj`` in ``b``.  Each value is (description, genes), genes by
        increasing interaction FDR (ties by name), ready for :func:`gloam.io.write_gmt`.
        Empty sets are left out.  Unchanged and modulated genes are in no set.
    background : list of str
        Every gene tested (all genes of ``shared``), the right universe for enrichment of
        these sets.

    Raises
    ------
    GloamError
        An unusable prefix, or unknown conditions.
    """
    prefix = _check_prefix(prefix)
    a, b = _condition_pair(shared, condition_a, condition_b)
    table = shared.table
    changed = table[table["changed"].to_numpy()]
    order = np.lexsort((changed.index.to_numpy(dtype=str), changed["interaction_fdr"].to_numpy()))
    changed = changed.iloc[order]
    level = f"interaction FDR <= {shared.fdr_level:g}"
    sets: dict[str, tuple[str, list[str]]] = {}
    if len(changed):
        sets[f"{prefix}_changed_{_safe(a)}_vs_{_safe(b)}"] = (
            f"{len(changed)} genes whose response differs between {a} and {b} ({level})",
            changed.index.to_list(),
        )
    pairs = changed.groupby([f"response_{a}", f"response_{b}"], sort=True).groups
    for (from_label, to_label), genes in pairs.items():
        members = changed.index[changed.index.isin(genes)].to_list()
        if from_label == to_label:
            continue  # only possible with more than two conditions: the change is elsewhere
        name = f"{prefix}_{_safe(a)}_{from_label}_to_{_safe(b)}_{to_label}"
        sets[name] = (
            f"{len(members)} genes with response {from_label} in {a} and {to_label} in {b} "
            f"({level})",
            members,
        )
    return sets, table.index.to_list()


# ------------------------------------------------------------------------ matched clusters


def adjusted_rand_index(labels_a: np.ndarray, labels_b: np.ndarray) -> float:
    """Adjusted Rand index of two partitions of the same items (Hubert & Arabie, 1985).

    ``ARI = (I - E) / (M - E)`` with ``I = sum_ij C(n_ij, 2)`` over the contingency table,
    ``E = sum_i C(a_i, 2) sum_j C(b_j, 2) / C(n, 2)`` its expectation under random labels
    with the same cluster sizes, and ``M = (sum_i C(a_i, 2) + sum_j C(b_j, 2)) / 2``.  1 for
    identical partitions (up to label names), about 0 for unrelated ones, negative below
    chance.  When ``M = E`` (both partitions a single cluster, or both all singletons) the
    partitions agree and the index is 1.

    Parameters
    ----------
    labels_a, labels_b : ndarray of shape (n_items,)
        Labels of any type (noise can be a label of its own).

    Returns
    -------
    float

    Raises
    ------
    GloamError
        Labels of different lengths, or not 1-D.
    """
    a = np.asarray(labels_a)
    b = np.asarray(labels_b)
    if a.ndim != 1 or a.shape != b.shape:
        raise GloamError(
            f"the two partitions must label the same items; got shapes {a.shape} and {b.shape}"
        )
    n = a.size
    if n < 2:
        return 1.0
    _, codes_a = np.unique(a, return_inverse=True)
    _, codes_b = np.unique(b, return_inverse=True)
    n_b = int(codes_b.max()) + 1
    table = np.bincount(codes_a * n_b + codes_b).astype(np.float64)

    def pairs(counts: np.ndarray) -> float:
        return float(np.sum(counts * (counts - 1.0)) / 2.0)

    index = pairs(table)
    sum_a = pairs(np.bincount(codes_a).astype(np.float64))
    sum_b = pairs(np.bincount(codes_b).astype(np.float64))
    expected = sum_a * sum_b / (n * (n - 1.0) / 2.0)
    maximum = (sum_a + sum_b) / 2.0
    if maximum == expected:
        return 1.0
    return float((index - expected) / (maximum - expected))


def _comparable(
    centroids_a: np.ndarray,
    centroids_b: np.ndarray,
    times_a: np.ndarray | None,
    times_b: np.ndarray | None,
) -> tuple[np.ndarray, np.ndarray]:
    """Both runs' centroids on one time axis: columns matched, or interpolated on the union
    of the sampled times inside the overlap of the two time ranges."""
    if times_a is None or times_b is None:
        if times_a is not None or times_b is not None:
            raise GloamError("give the time points of both runs, or of neither")
        if centroids_a.shape[1] != centroids_b.shape[1]:
            raise GloamError(
                f"the runs' centroids have {centroids_a.shape[1]} and {centroids_b.shape[1]} "
                "columns; give times_a and times_b to compare them on a shared time axis"
            )
        return centroids_a, centroids_b
    ta = np.asarray(times_a, dtype=np.float64)
    tb = np.asarray(times_b, dtype=np.float64)
    for name, t, V in (("times_a", ta, centroids_a), ("times_b", tb, centroids_b)):
        if t.shape != (V.shape[1],) or not np.isfinite(t).all():
            raise GloamError(
                f"{name} must give one finite time per centroid column ({V.shape[1]}); got "
                f"shape {t.shape}"
            )
        if np.unique(t).size != t.size:
            raise GloamError(
                f"{name} repeats time points; compare runs with concatenated conditions "
                "column by column (times_a=None, times_b=None)"
            )
    order_a, order_b = np.argsort(ta), np.argsort(tb)
    ta, tb = ta[order_a], tb[order_b]
    Va, Vb = centroids_a[:, order_a], centroids_b[:, order_b]
    if ta.size == tb.size and np.array_equal(ta, tb):
        return Va, Vb
    low, high = max(ta[0], tb[0]), min(ta[-1], tb[-1])
    grid = np.union1d(ta, tb)
    grid = grid[(grid >= low) & (grid <= high)]
    if grid.size < _MIN_SHARED_TIMES:
        raise GloamError(
            f"the runs share {grid.size} sampled time point(s) in the overlap of their time "
            f"ranges ({low:g} to {high:g}); at least {_MIN_SHARED_TIMES} are needed to compare "
            "response shapes"
        )
    # np.interp works on one row at a time: a loop over the few clusters, not over genes.
    on_grid_a = np.stack([np.interp(grid, ta, row) for row in Va])
    on_grid_b = np.stack([np.interp(grid, tb, row) for row in Vb])
    return on_grid_a, on_grid_b


def centroid_correlation(
    centroids_a: np.ndarray,
    centroids_b: np.ndarray,
    *,
    times_a: np.ndarray | None = None,
    times_b: np.ndarray | None = None,
) -> np.ndarray:
    """Pearson correlation of every centroid of one run with every centroid of another.

    Without times the centroids are compared column by column (same columns in both runs).
    With times they are compared on a shared time axis: the union of both runs' sampled
    times inside the overlap of their time ranges, each centroid interpolated linearly in
    time between its own sampled times (identical time points need no interpolation).

    Parameters
    ----------
    centroids_a : ndarray of shape (n_clusters_a, n_columns_a)
    centroids_b : ndarray of shape (n_clusters_b, n_columns_b)
    times_a : ndarray of shape (n_columns_a,), optional
        Distinct time of each column of ``centroids_a``.
    times_b : ndarray of shape (n_columns_b,), optional

    Returns
    -------
    ndarray of shape (n_clusters_a, n_clusters_b)
        Correlations in [-1, 1]; NaN where a centroid is flat on the shared axis.

    Raises
    ------
    GloamError
        Non-finite centroids, mismatched columns or times, or fewer than three shared time
        points.
    """
    Va = np.asarray(centroids_a, dtype=np.float64)
    Vb = np.asarray(centroids_b, dtype=np.float64)
    for name, V in (("centroids_a", Va), ("centroids_b", Vb)):
        if V.ndim != 2 or V.shape[0] < 1 or V.shape[1] < 2 or not np.isfinite(V).all():
            raise GloamError(
                f"{name} must be a finite array of shape (n_clusters, n_timepoints); got "
                f"shape {V.shape}"
            )
    Va, Vb = _comparable(Va, Vb, times_a, times_b)
    za, zb = (V - V.mean(axis=1, keepdims=True) for V in (Va, Vb))
    norm_a = np.sqrt(np.sum(za**2, axis=1))
    norm_b = np.sqrt(np.sum(zb**2, axis=1))
    scale = norm_a[:, None] * norm_b[None, :]
    flat = scale <= 1e-12 * max(float(scale.max(initial=0.0)), 1e-300)
    with np.errstate(divide="ignore", invalid="ignore"):
        correlation = np.where(flat, np.nan, (za @ zb.T) / scale)
    return np.clip(correlation, -1.0, 1.0)


@dataclass(frozen=True)
class ClusterMatch:
    """Clusters of two runs matched one-to-one.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per cluster of either run: ``cluster_a``, ``cluster_b`` (empty string for a
        cluster left without a partner when the runs have different numbers of clusters),
        ``correlation`` (Pearson correlation of the centroids on the shared time axis),
        ``jaccard`` (Jaccard coefficient of the two clusters' core genes among the shared
        genes), ``n_core_a``, ``n_core_b``, ``n_core_both``.  Matched pairs first, in the
        order of run a's clusters; NaN for unmatched clusters.
    correlation : pandas.DataFrame of shape (n_clusters_a, n_clusters_b)
        Every centroid correlation.
    jaccard : pandas.DataFrame of shape (n_clusters_a, n_clusters_b)
        Every core-gene Jaccard coefficient (NaN when both clusters have no shared core gene).
    ari : float
        Adjusted Rand index of the two partitions (top cluster of each gene, noise as a
        label of its own) on the shared genes; NaN with fewer than two shared genes.
    n_shared_genes : int
        Genes clustered in both runs.
    """

    table: pd.DataFrame
    correlation: pd.DataFrame
    jaccard: pd.DataFrame
    ari: float
    n_shared_genes: int


def _check_memberships(
    memberships: pd.DataFrame, noise: pd.Series | None, n_clusters: int, name: str
) -> tuple[pd.DataFrame, pd.Series | None]:
    if not isinstance(memberships, pd.DataFrame):
        raise GloamError(
            f"memberships_{name} must be a DataFrame (genes x clusters) indexed by gene"
        )
    if memberships.shape[1] != n_clusters:
        raise GloamError(
            f"memberships_{name} has {memberships.shape[1]} cluster columns but centroids_{name} "
            f"has {n_clusters} rows; give them in the same cluster order"
        )
    if memberships.index.has_duplicates:
        raise GloamError(f"memberships_{name} repeats genes; each gene must appear once")
    values = memberships.to_numpy(dtype=np.float64)
    if not np.isfinite(values).all():
        raise GloamError(f"memberships_{name} has missing or infinite values")
    if noise is not None:
        if not isinstance(noise, pd.Series) or not noise.index.equals(memberships.index):
            raise GloamError(f"noise_{name} must be a Series with the genes of memberships_{name}")
    return memberships, noise


def _core(
    U: np.ndarray, noise: np.ndarray | None, threshold: float | None
) -> tuple[np.ndarray, np.ndarray]:
    """Hard labels (n,) and core-gene indicators (n, c) of one run."""
    labels = hard_labels(U, noise)
    if threshold is None:
        core = labels[:, None] == np.arange(U.shape[1])[None, :]
    else:
        core = (U >= threshold) & (labels >= 0)[:, None]
    return labels, core


def match_clusters(
    centroids_a: np.ndarray,
    centroids_b: np.ndarray,
    memberships_a: pd.DataFrame,
    memberships_b: pd.DataFrame,
    *,
    times_a: np.ndarray | None = None,
    times_b: np.ndarray | None = None,
    noise_a: pd.Series | None = None,
    noise_b: pd.Series | None = None,
    core_threshold: float | None = None,
) -> ClusterMatch:
    """Match the clusters of two runs by centroid similarity and report their overlap.

    Pairs are chosen one-to-one to maximise the summed Pearson correlation of the paired
    centroids (:func:`centroid_correlation`, Hungarian method through
    :func:`scipy.optimize.linear_sum_assignment`; a flat centroid counts as correlation 0).
    With different numbers of clusters the smaller run's clusters are all paired and the
    others are listed without a partner.  Gene overlap and agreement are measured on the
    genes both runs clustered, so runs that selected different genes are compared on what
    they share.

    Parameters
    ----------
    centroids_a : ndarray of shape (n_clusters_a, n_columns_a)
    centroids_b : ndarray of shape (n_clusters_b, n_columns_b)
    memberships_a : DataFrame of shape (n_genes_a, n_clusters_a)
        Index gene IDs, one column per cluster in centroid order (e.g. ``C1`` ...); the
        column names name the clusters in the result.
    memberships_b : DataFrame of shape (n_genes_b, n_clusters_b)
    times_a, times_b : ndarray, optional
        Time of each centroid column, to compare runs sampled at different times (see
        :func:`centroid_correlation`).
    noise_a, noise_b : Series, optional
        Noise membership of each gene (same index as the memberships); a gene whose noise
        membership beats every cluster is core nowhere and labelled noise.
    core_threshold : float, optional
        A gene is a core gene of a cluster when its membership there is at least this, in
        (0, 1].  Default: its top cluster (each gene core in one cluster, unless noise).

    Returns
    -------
    ClusterMatch

    Raises
    ------
    GloamError
        Mismatched shapes, non-finite values, repeated genes, or too few shared time points.

    References
    ----------
    Kuhn (1955); Hubert & Arabie (1985): see the module docstring.
    """
    Va = np.asarray(centroids_a, dtype=np.float64)
    Vb = np.asarray(centroids_b, dtype=np.float64)
    correlation = centroid_correlation(Va, Vb, times_a=times_a, times_b=times_b)
    memberships_a, noise_a = _check_memberships(memberships_a, noise_a, Va.shape[0], "a")
    memberships_b, noise_b = _check_memberships(memberships_b, noise_b, Vb.shape[0], "b")
    if core_threshold is not None and not (
        isinstance(core_threshold, int | float | np.integer | np.floating)
        and 0.0 < float(core_threshold) <= 1.0
    ):
        raise GloamError(f"core_threshold={core_threshold!r} must be a number in (0, 1]")
    names_a = [str(name) for name in memberships_a.columns]
    names_b = [str(name) for name in memberships_b.columns]

    shared = memberships_a.index[memberships_a.index.isin(memberships_b.index)]
    Ua = memberships_a.loc[shared].to_numpy(dtype=np.float64)
    Ub = memberships_b.loc[shared].to_numpy(dtype=np.float64)
    na = None if noise_a is None else noise_a.loc[shared].to_numpy(dtype=np.float64)
    nb = None if noise_b is None else noise_b.loc[shared].to_numpy(dtype=np.float64)
    threshold = None if core_threshold is None else float(core_threshold)
    labels_a, core_a = _core(Ua, na, threshold)
    labels_b, core_b = _core(Ub, nb, threshold)
    both = core_a.T.astype(np.int64) @ core_b.astype(np.int64)
    size_a, size_b = core_a.sum(axis=0), core_b.sum(axis=0)
    union = size_a[:, None] + size_b[None, :] - both
    with np.errstate(divide="ignore", invalid="ignore"):
        jaccard = np.where(union > 0, both / union, np.nan)
    ari = adjusted_rand_index(labels_a, labels_b) if shared.size >= 2 else float("nan")

    rows, columns = linear_sum_assignment(-np.nan_to_num(correlation, nan=0.0))
    records = [
        {
            "cluster_a": names_a[i],
            "cluster_b": names_b[j],
            "correlation": correlation[i, j],
            "jaccard": jaccard[i, j],
            "n_core_a": int(size_a[i]),
            "n_core_b": int(size_b[j]),
            "n_core_both": int(both[i, j]),
        }
        for i, j in zip(rows, columns, strict=True)
    ]
    unmatched_a = sorted(set(range(Va.shape[0])) - set(rows.tolist()))
    unmatched_b = sorted(set(range(Vb.shape[0])) - set(columns.tolist()))
    for i in unmatched_a:
        records.append(_unmatched(names_a[i], "", int(size_a[i]), 0))
    for j in unmatched_b:
        records.append(_unmatched("", names_b[j], 0, int(size_b[j])))
    table = pd.DataFrame.from_records(
        records,
        columns=[
            "cluster_a",
            "cluster_b",
            "correlation",
            "jaccard",
            "n_core_a",
            "n_core_b",
            "n_core_both",
        ],
    )
    return ClusterMatch(
        table=table,
        correlation=pd.DataFrame(correlation, index=names_a, columns=names_b),
        jaccard=pd.DataFrame(jaccard, index=names_a, columns=names_b),
        ari=ari,
        n_shared_genes=int(shared.size),
    )


def _unmatched(cluster_a: str, cluster_b: str, n_core_a: int, n_core_b: int) -> dict:
    return {
        "cluster_a": cluster_a,
        "cluster_b": cluster_b,
        "correlation": np.nan,
        "jaccard": np.nan,
        "n_core_a": n_core_a,
        "n_core_b": n_core_b,
        "n_core_both": 0,
    }


@dataclass(frozen=True)
class ClusteredRun:
    """What :func:`sensitivity_summary` needs of one run.

    Attributes
    ----------
    centroids : ndarray of shape (n_clusters, n_columns)
    memberships : DataFrame of shape (n_genes, n_clusters)
        Index gene IDs, columns cluster names in centroid order.
    times : ndarray of shape (n_columns,), optional
        Time of each centroid column (needed when runs are sampled differently).
    noise : Series of shape (n_genes,), optional
        Noise membership of each gene.
    """

    centroids: np.ndarray
    memberships: pd.DataFrame
    times: np.ndarray | None = None
    noise: pd.Series | None = None


def sensitivity_summary(
    runs: Mapping[str, ClusteredRun],
    *,
    reference: str,
    core_threshold: float | None = None,
) -> pd.DataFrame:
    """How much the clusters change across variants of one dataset, against a reference run.

    Every other run is matched to ``reference`` with :func:`match_clusters`.

    Parameters
    ----------
    runs : mapping of str to ClusteredRun
        The runs (e.g. one per settings variant), by name; must include ``reference``.
    reference : str
        Name of the run the others are compared with (e.g. the default settings).
    core_threshold : float, optional
        Core-gene threshold passed to :func:`match_clusters`.

    Returns
    -------
    pandas.DataFrame
        One row per other run (index ``run``, in the order given): ``n_clusters``,
        ``n_clusters_reference``, ``n_matched`` (pairs), ``n_unmatched`` (clusters of either
        run without a partner), ``mean_correlation``, ``min_correlation`` (over the matched
        pairs' centroid correlations), ``mean_jaccard``, ``min_jaccard`` (core-gene
        Jaccard of the matched pairs; 1 means the same core genes), ``ari`` (whole
        partitions on shared genes) and ``n_shared_genes``.

    Raises
    ------
    GloamError
        ``reference`` not among the runs, or fewer than two runs.
    """
    if reference not in runs:
        raise GloamError(
            f"reference run {reference!r} is not among the runs {sorted(runs)}; name one of them"
        )
    if len(runs) < 2:
        raise GloamError("a sensitivity summary needs the reference and at least one other run")
    base = runs[reference]
    records = []
    for name, run in runs.items():  # a loop over a handful of runs
        if name == reference:
            continue
        match = match_clusters(
            base.centroids,
            run.centroids,
            base.memberships,
            run.memberships,
            times_a=base.times,
            times_b=run.times,
            noise_a=base.noise,
            noise_b=run.noise,
            core_threshold=core_threshold,
        )
        paired = match.table[(match.table["cluster_a"] != "") & (match.table["cluster_b"] != "")]
        records.append(
            {
                "run": name,
                "n_clusters": int(np.asarray(run.centroids).shape[0]),
                "n_clusters_reference": int(np.asarray(base.centroids).shape[0]),
                "n_matched": len(paired),
                "n_unmatched": len(match.table) - len(paired),
                "mean_correlation": paired["correlation"].mean(),
                "min_correlation": paired["correlation"].min(),
                "mean_jaccard": paired["jaccard"].mean(),
                "min_jaccard": paired["jaccard"].min(),
                "ari": match.ari,
                "n_shared_genes": match.n_shared_genes,
            }
        )
    return pd.DataFrame.from_records(records).set_index("run")


# ------------------------------------------------------------------------------ figure


def plot_transitions(
    transitions: pd.DataFrame,
    changed: pd.DataFrame | None = None,
    *,
    centroids: np.ndarray | None = None,
    times: np.ndarray | None = None,
    fdr: float = 0.05,
    width: Literal["single", "double"] = "single",
) -> Figure:
    """Where genes move between responses: a grid of transitions with the changed share.

    Rows are the labels in the first condition, columns those in the second.  A diagonal
    cell (same label in both) is shaded grey and holds its count.  An off-diagonal cell (a
    move) holds a square, in the colour of the response the genes move to, whose area is
    proportional to the genes making that move (scaled to the largest move, so moves stay
    visible beside the many genes that keep their response); inside it a solid square
    whose area is proportional to the genes called changed, so the solid share of the square
    is the changed share.  The number of genes is written in the cell.  Beside each row and
    above each column a small line shows the response's centroid (z-scores over time);
    ``flat`` gets a dashed flat line, the noise class none.

    Parameters
    ----------
    transitions : DataFrame of shape (n_labels, n_labels)
        From :func:`transition_table` (all genes); index and columns named
        ``response_<condition>`` and holding the same labels.
    changed : DataFrame of shape (n_labels, n_labels), optional
        The same table for the changed genes (``changed_only=True``).
    centroids : ndarray of shape (n_clusters, n_times), optional
        Shared centroids of the first ``n_clusters`` labels, drawn as small lines.
    times : ndarray of shape (n_times,), optional
        Time of each centroid column (default: evenly spaced); placed on gloam's time axis
        (:func:`gloam.plots.time_axis_transform`).
    fdr : float
        FDR level named in the note under the grid.
    width : {"single", "double"}
        Journal column width.

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    GloamError
        Tables that do not match, or centroids of the wrong shape.
    """
    counts = transitions.to_numpy(dtype=np.int64)
    labels = [str(label) for label in transitions.index]
    n = len(labels)
    if counts.shape != (n, n) or [str(c) for c in transitions.columns] != labels:
        raise GloamError("transitions must be square with the same labels on rows and columns")
    moved = np.zeros_like(counts) if changed is None else changed.to_numpy(dtype=np.int64)
    if moved.shape != counts.shape or (moved > counts).any():
        raise GloamError("changed must have the shape of transitions and no larger counts")
    V = None if centroids is None else np.asarray(centroids, dtype=np.float64)
    if V is not None and (V.ndim != 2 or V.shape[0] > n or not np.isfinite(V).all()):
        raise GloamError(
            f"centroids must be finite with shape (n_clusters <= {n}, n_times); got {V.shape}"
        )
    special = {NOISE_LABEL, FLAT_LABEL}
    n_clusters = sum(label not in special for label in labels)
    palette = cluster_colours(n_clusters) + [NOISE_COLOUR] * (n - n_clusters)
    name_a = str(transitions.index.name or "response_a").removeprefix("response_")
    name_b = str(transitions.columns.name or "response_b").removeprefix("response_")
    off_diagonal = counts[~np.eye(n, dtype=bool)]
    largest = max(int(off_diagonal.max(initial=0)), 1)
    header = 1.3 if V is not None else 0.0  # room for the centroid lines, in cells

    with matplotlib.rc_context(_STYLE):
        grid_mm = 70.0 if width == "single" else 115.0
        n_changed = int(moved.sum())
        probe = _figure(width, grid_mm)
        note = _wrap_text(
            probe,
            f"{int(counts.sum())} genes (numbers). Coloured square: genes moving between two "
            f"responses (area); its solid part: changed genes ({n_changed} in all: interaction "
            f"FDR ≤ {fdr:g} and a different response). Shaded cells: same response.",
        )
        note_mm = 3.0 * (note.count("\n") + 1) + 3.0
        figure = _figure(width, grid_mm + note_mm)
        bottom = note_mm / (grid_mm + note_mm)
        figure.get_layout_engine().set(rect=(0.0, bottom, 1.0, 1.0 - bottom))
        ax = figure.add_subplot()
        ax.set_xlim(-0.5 - header, n - 0.5)
        ax.set_ylim(n - 0.5, -0.5 - header)
        ax.set_aspect("equal", adjustable="box")
        for spine in ax.spines.values():
            spine.set_visible(False)
        ax.tick_params(length=0)
        ax.xaxis.tick_top()
        ax.xaxis.set_label_position("top")
        ax.set_xticks(range(n), labels)
        ax.set_yticks(range(n), labels)
        for tick_labels in (ax.get_xticklabels(), ax.get_yticklabels()):
            for tick, colour in zip(tick_labels, palette, strict=True):
                tick.set_color(_INK if colour == NOISE_COLOUR else colour)
        ax.set_xlabel(f"response in {name_b}")
        ax.set_ylabel(f"response in {name_a}")

        for k in range(n + 1):  # cell guides
            ax.plot([k - 0.5] * 2, [-0.5, n - 0.5], color=_GUIDE_LIGHT, lw=0.5, zorder=0)
            ax.plot([-0.5, n - 0.5], [k - 0.5] * 2, color=_GUIDE_LIGHT, lw=0.5, zorder=0)
        stroke = [patheffects.withStroke(linewidth=1.2, foreground="white")]
        for i in range(n):  # a loop over the few labels (cells), not over genes
            ax.add_patch(Rectangle((i - 0.5, i - 0.5), 1, 1, facecolor="#EDEDED", lw=0))
            for j in range(n):
                total, inner = int(counts[i, j]), int(moved[i, j])
                if total == 0:
                    continue
                if i != j:
                    size = 0.9 * math.sqrt(total / largest)
                    ax.add_patch(
                        Rectangle(
                            (j - size / 2, i - size / 2),
                            size,
                            size,
                            facecolor=_tint(palette[j], 0.28),
                            edgecolor=palette[j],
                            lw=0.4,
                            zorder=1,
                        )
                    )
                    if inner:
                        small = size * math.sqrt(inner / total)
                        ax.add_patch(
                            Rectangle(
                                (j - small / 2, i - small / 2),
                                small,
                                small,
                                facecolor=palette[j],
                                lw=0,
                                zorder=2,
                            )
                        )
                ax.text(
                    j,
                    i,
                    f"{total}",
                    ha="center",
                    va="center",
                    color=_INK,
                    zorder=3,
                    path_effects=stroke,
                )

        if V is not None:
            t = np.arange(V.shape[1], dtype=np.float64) if times is None else times
            x = time_axis_transform(np.asarray(t, dtype=np.float64))
            x = (x - x.min()) / max(float(np.ptp(x)), 1e-12)
            limit = max(float(np.abs(V).max()), 1e-12)
            for k, label in enumerate(labels):
                if k < V.shape[0] and label not in special:
                    y, style = V[k] / limit, {"color": palette[k], "lw": 0.9, "ls": "-"}
                elif label == FLAT_LABEL:
                    y, style = np.zeros_like(x), {"color": NOISE_COLOUR, "lw": 0.8, "ls": "--"}
                else:
                    continue
                # Row k: a line left of the grid; column k: a line above it (cell units).
                ax.plot(-0.5 - header + 0.1 + header * 0.85 * x, k - 0.36 * y, **_SPARK, **style)
                ax.plot(k - 0.42 + 0.84 * x, -0.5 - header / 2 - 0.4 * y, **_SPARK, **style)
        figure.text(0.02, 0.01, note, ha="left", va="bottom", color=_MUTED)
        figure.suptitle(
            f"Where genes move from {name_a} to {name_b}", x=0.02, ha="left", fontsize=8
        )
    return figure


# Small centroid lines: drawn outside the grid's data box, never clipped.
_SPARK = {"clip_on": False, "solid_capstyle": "round"}
_GUIDE_LIGHT = "#DCDCDC"


def _wrap_text(figure: Figure, text: str) -> str:
    """Break ``text`` to the figure's width (less a small margin)."""
    room_mm = figure.get_figwidth() * 25.4 - 8.0
    return _wrap(figure, text, room_mm)
