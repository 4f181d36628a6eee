"""Checks of an input matrix's values that warn instead of stopping the run.

Two mistakes leave a matrix that every reader accepts, yet distort the result:

* **A value on the wrong scale.**  Raw counts declared as log values (or log values declared
  as counts) are recognised from the values themselves: whether they are integers, their
  range, and how the variance of a gene grows with its mean (:func:`value_scale`,
  :func:`check_value_scale`).
* **A library dominated by one value.**  A single absurd count (a typo such as ``1e8``)
  inflates its sample's library size; scaling by library size (CPM) then pushes every other
  gene of that sample down.  :func:`library_checks` compares each sample's library size with
  its median-of-ratios size factor, which one value barely moves, and names the gene that
  holds the excess (:func:`check_libraries` turns the findings into one-line warnings).

Both only warn (:class:`~gloam.errors.GloamWarning`): the values may be right, and only the
user can tell.

Orientation: ``values`` / ``counts`` are genes x samples arrays, as in :mod:`gloam.prepare`.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from gloam.errors import GloamError, GloamWarning

__all__ = [
    "INTEGER_TOLERANCE",
    "LOG_SCALE_MAX",
    "COUNT_SLOPE",
    "DOMINANT_SHARE",
    "DOMINANT_FOLD",
    "LIBRARY_EXCESS",
    "SIZE_FACTOR_MADS",
    "SIZE_FACTOR_FOLD",
    "ValueScale",
    "cell_examples",
    "value_scale",
    "check_value_scale",
    "library_checks",
    "check_libraries",
]

#: Values further than this from an integer are non-integer (rounding noise aside).
INTEGER_TOLERANCE = 1e-6

#: Largest value a log-scale expression matrix plausibly holds.  log2 of a 16-bit scanner
#: intensity ends at 16, log2 of a million counts per million at about 20, and log2
#: mass-spectrometry intensities reach about 35-40 (from memory); 50 would be log2 of 1e15,
#: so a larger value is not on a log scale.
LOG_SCALE_MAX = 50.0

#: Slope of log(variance) on log(mean) across genes that separates counts from log values.
#: Counts have a slope of at least 1 (Poisson: variance = mean; negative binomial:
#: mean + phi * mean**2, Anders & Huber 2010); after a log transform the variance no longer
#: rises with the mean (delta method: var(log k) ~ 1/mean + phi), slope about 0 or below.
#: 0.5 lies halfway (a rule of thumb chosen here).
COUNT_SLOPE = 0.5

#: A sample is dominated when one gene holds at least this share of its library beyond what
#: the gene's level in the other samples predicts; CPM then scales every other gene of the
#: sample down by more than 10 % (a rule of thumb chosen here, not a published value).
DOMINANT_SHARE = 0.10

#: ... and that gene's count is at least this many times its predicted count (a typo such as
#: 1e8 is many orders of magnitude off; rule of thumb chosen here).
DOMINANT_FOLD = 10.0

#: A sample is dominated when its library, relative to the median library, is more than this
#: many times its relative median-of-ratios size factor: more than half of its counts lie in
#: values the bulk of its genes do not support (rule of thumb chosen here).  Composition
#: differences between ordinary samples stay well below two-fold (in the demo data 0.76 to
#: 1.16, measured).
LIBRARY_EXCESS = 2.0

#: A size factor is far from the others when its log differs from the median log size factor
#: by more than this many scaled median absolute deviations (common practice for library-size
#: outliers, e.g. Lun, McCarthy & Marioni 2016, F1000Research 5:2122) ...
SIZE_FACTOR_MADS = 3.0

#: ... and by more than this factor, so that tightly matched replicates are not flagged for an
#: ordinary 1.5-fold difference in depth (rule of thumb chosen here).
SIZE_FACTOR_FOLD = 4.0

# Consistency constant that makes the MAD estimate the SD of normal data (1 / Phi^-1(3/4)).
_MAD_TO_SD = 1.4826
# The mean-variance slope needs this many genes with a positive mean and variance, and a
# library's typical level this many genes; fewer say nothing about either.
_MIN_GENES = 20


def cell_examples(
    genes: Sequence[str] | np.ndarray,
    samples: Sequence[str] | np.ndarray,
    mask: np.ndarray,
    limit: int = 3,
) -> str:
    """The first ``limit`` cells of ``mask`` as ``gene 'g' in sample 's'``, for a message.

    Parameters
    ----------
    genes : sequence of str, length n_genes
    samples : sequence of str, length n_samples
    mask : bool ndarray of shape (n_genes, n_samples)
    limit : int
        Cells named; the rest are counted (``and 4 more``).
    """
    rows, cols = np.nonzero(mask)
    shown = [
        f"gene {genes[r]!r} in sample {samples[c]!r}"
        for r, c in zip(rows[:limit], cols[:limit], strict=True)
    ]
    more = f" and {rows.size - limit} more" if rows.size > limit else ""
    return "; ".join(shown) + more


@dataclass(frozen=True)
class ValueScale:
    """What the values of a matrix say about their scale.

    Attributes
    ----------
    integer_share : float
        Share of the finite values within :data:`INTEGER_TOLERANCE` of an integer, in [0, 1].
    minimum, maximum : float
        Smallest and largest finite value (NaN when there is none).
    mean_variance_slope : float
        Least-squares slope of log(variance) on log(mean) across the genes with a positive
        mean and variance (variance over samples, ddof=1, missing values skipped); NaN with
        fewer than 20 such genes or fewer than 2 samples.
    """

    integer_share: float
    minimum: float
    maximum: float
    mean_variance_slope: float

    @property
    def looks_like_counts(self) -> bool:
        """Values off the log scale whose variance rises with the mean (or cannot tell)."""
        return self.maximum > LOG_SCALE_MAX and not self.mean_variance_slope < COUNT_SLOPE

    @property
    def looks_like_log(self) -> bool:
        """Mostly non-integer values within the log range whose variance does not rise."""
        return (
            self.maximum <= LOG_SCALE_MAX
            and self.integer_share < 0.5
            and not self.mean_variance_slope >= COUNT_SLOPE
        )

    def describe(self) -> str:
        """The evidence in words, for a message."""
        if self.integer_share == 1.0 and self.minimum >= 0:
            kind = "all non-negative integers"
        else:
            kind = f"{100 * (1 - self.integer_share):.0f} % non-integer"
        parts = [f"values from {self.minimum:.4g} to {self.maximum:.4g}", kind]
        if np.isfinite(self.mean_variance_slope):
            rises = "rising" if self.mean_variance_slope >= COUNT_SLOPE else "not rising"
            parts.append(
                f"variance {rises} with the mean (log-log slope {self.mean_variance_slope:.2f};"
                " counts have 1 or more, log values about 0)"
            )
        return ", ".join(parts)


def value_scale(values: np.ndarray) -> ValueScale:
    """Summarise the scale of a genes x samples matrix (see :class:`ValueScale`).

    Parameters
    ----------
    values : ndarray of shape (n_genes, n_samples)
        NaN marks a missing value; infinite values must have been refused before.

    Returns
    -------
    ValueScale

    References
    ----------
    .. [1] Anders S, Huber W (2010). Differential expression analysis for sequence count
       data. Genome Biology 11:R106 (variance of counts: mean + phi * mean**2).
    """
    values = np.asarray(values, dtype=np.float64)
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return ValueScale(1.0, np.nan, np.nan, np.nan)
    integer_share = float(np.mean(np.abs(finite - np.round(finite)) <= INTEGER_TOLERANCE))
    slope = np.nan
    if values.ndim == 2 and values.shape[1] >= 2:
        observed = np.isfinite(values).sum(axis=1)
        rows = values[observed >= 2]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-missing rows give NaN
            mean = np.nanmean(rows, axis=1)
            variance = np.nanvar(rows, axis=1, ddof=1)
        usable = (mean > 0) & (variance > 0)
        if np.count_nonzero(usable) >= _MIN_GENES:
            x = np.log(mean[usable])
            y = np.log(variance[usable])
            x_centred = x - x.mean()
            spread = float(np.dot(x_centred, x_centred))
            if spread > 0:
                slope = float(np.dot(x_centred, y - y.mean()) / spread)
    return ValueScale(integer_share, float(finite.min()), float(finite.max()), slope)


def check_value_scale(
    values: np.ndarray,
    value_type: str,
    *,
    genes: Sequence[str] | np.ndarray,
    samples: Sequence[str] | np.ndarray,
) -> ValueScale:
    """Warn when the values do not look like the declared ``value_type``.

    One check for both mistakes: counts declared ``log`` (values beyond
    :data:`LOG_SCALE_MAX` whose variance rises with the mean) and log values declared
    ``counts`` (mostly non-integer values within the log range whose variance does not rise).
    Counts with a few non-integer values (estimated counts can be fractional) get a milder
    warning that names them.

    Parameters
    ----------
    values : ndarray of shape (n_genes, n_samples)
    value_type : {"counts", "log"}
    genes, samples : sequences of str
        Names of the rows and columns, for the message.

    Returns
    -------
    ValueScale
        The evidence the decision used.

    Warns
    -----
    GloamWarning
        One line, with the evidence and the setting to change.
    """
    scale = value_scale(values)
    if value_type == "log" and scale.looks_like_counts:
        what = (
            "raw counts"
            if scale.integer_share == 1.0 and scale.minimum >= 0
            else "values on a linear scale"
        )
        warnings.warn(
            f"the values declared value_type 'log' look like {what} ({scale.describe()}); "
            "set value_type 'counts' for raw counts, or log-transform the values first",
            GloamWarning,
            stacklevel=2,
        )
    elif value_type == "counts" and scale.looks_like_log:
        warnings.warn(
            f"the values declared value_type 'counts' look like log values "
            f"({scale.describe()}); set value_type 'log' if they are already on a log scale",
            GloamWarning,
            stacklevel=2,
        )
    elif value_type == "counts" and scale.integer_share < 1.0:
        with np.errstate(invalid="ignore"):
            fractional = np.abs(values - np.round(values)) > INTEGER_TOLERANCE
        warnings.warn(
            f"the counts matrix has {int(fractional.sum())} non-integer values "
            f"({cell_examples(genes, samples, fractional)}); continuing, as estimated counts "
            "can be fractional — set value_type 'log' if the values are already on a log scale",
            GloamWarning,
            stacklevel=2,
        )
    return scale


def _size_factors(counts: np.ndarray) -> np.ndarray:
    """Median-of-ratios size factors; library sizes when no gene is positive in every sample.

    With the fallback ``library_excess`` is 1 for every sample and only the single-gene rule
    of :func:`library_checks` can find a dominated sample.
    """
    from gloam.prepare import median_of_ratios_size_factors

    try:
        return median_of_ratios_size_factors(counts)
    except GloamError:
        library = counts.sum(axis=0)
        return library / np.median(library)


def library_checks(
    counts: np.ndarray,
    genes: Sequence[str] | np.ndarray,
    samples: Sequence[str] | np.ndarray,
    *,
    size_factors: np.ndarray | None = None,
) -> pd.DataFrame:
    """Per sample: is the library dominated by one value, is its depth far from the others?

    Each gene's typical level is its median over samples of the size-factor-normalised
    counts; multiplied by a sample's size factor it predicts the gene's count there.  The gene
    whose count exceeds its prediction by the most is the sample's ``top_gene``.

    Parameters
    ----------
    counts : ndarray of shape (n_genes, n_samples)
        Non-negative counts, every sample's total positive.
    genes, samples : sequences of str
    size_factors : ndarray of shape (n_samples,), optional
        Median-of-ratios size factors (Anders & Huber 2010) if already computed; computed
        here otherwise (library sizes when no gene is positive in every sample).

    Returns
    -------
    DataFrame of shape (n_samples, 10)
        ``sample``; ``library_size`` (counts); ``size_factor``; ``library_excess`` (library
        relative to the median library, divided by the size factor relative to the median
        factor; about 1 when the bulk of the genes explain the library); ``top_gene``,
        ``top_count`` and ``top_expected`` (its count and predicted count), ``top_share``
        (its excess over the prediction as a share of the library); ``dominated``
        (``top_share >= DOMINANT_SHARE`` and ``top_count >= DOMINANT_FOLD * top_expected``,
        or ``library_excess > LIBRARY_EXCESS``); ``size_factor_outlier`` (log size factor
        more than :data:`SIZE_FACTOR_MADS` scaled MADs and more than
        :data:`SIZE_FACTOR_FOLD`-fold from the median).

    References
    ----------
    .. [1] Anders S, Huber W (2010). Differential expression analysis for sequence count
       data. Genome Biology 11:R106 (median-of-ratios size factors).
    .. [2] Lun ATL, McCarthy DJ, Marioni JC (2016). A step-by-step workflow for low-level
       analysis of single-cell RNA-seq data with Bioconductor. F1000Research 5:2122
       (outliers as more than 3 MADs from the median of log library sizes).
    """
    counts = np.asarray(counts, dtype=np.float64)
    genes_array = np.asarray(genes, dtype=object)
    library = counts.sum(axis=0)
    factors = (
        _size_factors(counts)
        if size_factors is None
        else np.asarray(size_factors, dtype=np.float64)
    )
    relative_factor = factors / np.median(factors)
    library_excess = (library / np.median(library)) / relative_factor
    typical = np.median(counts / factors, axis=1)
    expected = typical[:, None] * factors[None, :]
    excess = counts - expected
    top = np.argmax(excess, axis=0)
    columns = np.arange(counts.shape[1])
    top_count = counts[top, columns]
    top_expected = expected[top, columns]
    top_share = np.maximum(excess[top, columns], 0.0) / library
    dominated = (top_share >= DOMINANT_SHARE) & (top_count >= DOMINANT_FOLD * top_expected)
    dominated |= library_excess > LIBRARY_EXCESS
    log_factor = np.log(relative_factor)
    deviation = np.abs(log_factor - np.median(log_factor))
    spread = _MAD_TO_SD * np.median(deviation)
    size_factor_outlier = (deviation > SIZE_FACTOR_MADS * spread) & (
        deviation > np.log(SIZE_FACTOR_FOLD)
    )
    return pd.DataFrame(
        {
            "sample": np.asarray(samples, dtype=object),
            "library_size": library,
            "size_factor": factors,
            "library_excess": library_excess,
            "top_gene": genes_array[top],
            "top_count": top_count,
            "top_expected": top_expected,
            "top_share": top_share,
            "dominated": dominated,
            "size_factor_outlier": size_factor_outlier,
        }
    )


def _named(rows: pd.DataFrame, describe, limit: int = 3) -> str:
    shown = "; ".join(describe(row) for row in rows.head(limit).itertuples())
    more = f"; and {len(rows) - limit} more sample(s)" if len(rows) > limit else ""
    return shown + more


def check_libraries(
    counts: np.ndarray,
    genes: Sequence[str] | np.ndarray,
    samples: Sequence[str] | np.ndarray,
    normalisation: str,
    *,
    size_factors: np.ndarray | None = None,
) -> pd.DataFrame | None:
    """Warn about dominated libraries and far-off size factors (see :func:`library_checks`).

    Parameters
    ----------
    counts : ndarray of shape (n_genes, n_samples)
    genes, samples : sequences of str
    normalisation : {"cpm", "median_ratio", "none"}
        The normalisation that will be used; the advice depends on it.
    size_factors : ndarray of shape (n_samples,), optional
        Passed on to :func:`library_checks`.

    Returns
    -------
    DataFrame or None
        The table of :func:`library_checks`; None with fewer than 20 genes or 2 samples,
        too few to tell a sample's typical level (nothing is checked then).

    Warns
    -----
    GloamWarning
        One line for the dominated samples (sample, gene, count, share of the library and
        the count its level elsewhere predicts), one line for far-off size factors.
    """
    if counts.shape[0] < _MIN_GENES or counts.shape[1] < 2:
        return None
    table = library_checks(counts, genes, samples, size_factors=size_factors)
    dominated = table[table["dominated"]]
    if len(dominated):
        if normalisation == "cpm":
            advice = (
                "with normalisation 'cpm' every other gene of such a sample is scaled down "
                f"about {dominated['library_excess'].max():.3g}-fold; correct the value, or use "
                "normalisation 'median_ratio', which one value barely moves"
            )
        elif normalisation == "median_ratio":
            advice = (
                "median-of-ratios size factors barely move, but that gene's own profile is "
                "distorted; check the value for a typo and correct it"
            )
        else:
            advice = "check the value for a typo and correct it"
        described = _named(
            dominated,
            lambda row: (
                f"sample {row.sample!r} is dominated by gene {row.top_gene!r} "
                f"({row.top_count:.6g} counts, {100 * row.top_share:.1f} % of the sample's "
                f"total, where its level in the other samples predicts {row.top_expected:.3g})"
            ),
        )
        warnings.warn(f"{described}; {advice}", GloamWarning, stacklevel=2)
    far = table[table["size_factor_outlier"]]
    if len(far):
        median = float(np.median(table["size_factor"]))
        described = _named(
            far,
            lambda row: (
                f"sample {row.sample!r} has size factor {row.size_factor:.3g} "
                f"({max(row.size_factor / median, median / row.size_factor):.3g}-fold from "
                "the median sample)"
            ),
        )
        warnings.warn(
            f"{described}: its sequencing depth is far from the others (more than "
            f"{SIZE_FACTOR_MADS:g} MADs and {SIZE_FACTOR_FOLD:g}-fold); check that it is the "
            "intended library — its values are normalised, but noisier if it is shallow",
            GloamWarning,
            stacklevel=2,
        )
    return table
