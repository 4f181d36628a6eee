"""Robustness of a partition by resampling: cluster-wise Jaccard and per-gene intervals.

A partition is clustered again on many resampled versions of the data and compared with
the reference partition (Hennig 2007):

* **replicates** (:func:`resample_replicates`): for every time point its replicates are
  drawn again with replacement and averaged, a bootstrap of the replicate summary, so the
  genes stay the same and what varies is the measurement noise;
* **genes** (:func:`bootstrap_genes`): without replicates, a bootstrap sample of the genes
  is clustered again, and each gene is judged only on the resamples that contain it.

Each reference cluster gets, per resample, Hennig's cluster-wise Jaccard coefficient
(:func:`cluster_jaccard`): its overlap with the most similar resampled cluster.  Each gene
gets a resampling interval for every membership, the share of resamples in which it is a
core gene of each cluster, and the share of resamples that give it the same top class.

The module is pure: the caller passes a ``recluster`` callback that clusters one resample
(and aligns its clusters to the reference, e.g. with :func:`align_to_reference`), so the
engine settings stay with the caller.  :func:`recluster_from_centroids` is such a
clustering: one start per resample, warm-started from the reference (full-data) centroids,
so each resample is judged by the optimum next to the reference partition rather than by
the best of new random starts, and the resamples cost a few iterations each.

References
----------
Hennig, C. (2007). Cluster-wise assessment of cluster stability. *Computational Statistics &
Data Analysis* 52(1):258-271.
Hennig, C. (2008). Dissolution point and isolation robustness: robustness criteria for
general cluster analysis methods. *Journal of Multivariate Analysis* 99(6):1154-1176.
Kuhn, H. W. (1955). The Hungarian method for the assignment problem. *Naval Research
Logistics Quarterly* 2:83-97.
Varadhan, R. & Roland, C. (2008). Simple and globally convergent methods for accelerating
the convergence of any EM algorithm. *Scandinavian Journal of Statistics* 35(2):335-353.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy.optimize import linear_sum_assignment

from gloam.errors import ConvergenceWarning, GloamError
from gloam.fcm import Acceleration, squared_distances, warm_start_cmeans
from gloam.prepare import ZSCORE_DDOF

__all__ = [
    "STABLE_JACCARD",
    "DISSOLVED_JACCARD",
    "SCHEMES",
    "Robustness",
    "resample_replicates",
    "zscore_rows",
    "bootstrap_genes",
    "hard_labels",
    "cluster_jaccard",
    "align_to_reference",
    "recluster_from_centroids",
    "RESAMPLE_TOL",
    "RESAMPLE_MAX_ITER",
    "resampling_robustness",
]

#: Mean Jaccard at or above which a cluster counts as stable (Hennig 2007; the level is
#: recalled from memory, not checked against the paper text).
STABLE_JACCARD = 0.75
#: Jaccard at or below which a cluster counts as dissolved in a resample (Hennig 2007, with the
#: justification in Hennig 2008; from memory, not checked against the paper text).
DISSOLVED_JACCARD = 0.5

#: Membership-change tolerance of the clustering of each resample: memberships to 1e-3
#: suffice for percentile intervals and top classes (common practice).
RESAMPLE_TOL = 1e-3
#: Iterations (membership passes) allowed for the clustering of each resample; it starts
#: next to the answer, so few are needed.
RESAMPLE_MAX_ITER = 150

#: Resampling schemes: what the ``recluster`` callback resamples.
SCHEMES = ("replicates", "genes")

#: Result of one ``recluster`` call: gene indices (None: all genes), memberships (n_sub, c)
#: and noise memberships (n_sub,), clusters already in the reference order.
Reclustered = tuple[np.ndarray | None, np.ndarray, np.ndarray]


@dataclass(frozen=True)
class Robustness:
    """Resampling evidence for one partition.

    Attributes
    ----------
    jaccard : ndarray of shape (n_resamples, n_clusters)
        Hennig's Jaccard of each reference cluster in each resample; NaN where the cluster
        has no gene in the resample.
    mean_jaccard : ndarray of shape (n_clusters,)
        Mean over the resamples (NaN values left out); compare with :data:`STABLE_JACCARD`.
    membership_low, membership_high : ndarray of shape (n_genes, n_clusters)
        Lower and upper percentile (by default the 5th and 95th) of each membership over the
        resamples, NumPy's linear interpolation; NaN for a gene in no resample.
    core_frequency : ndarray of shape (n_genes, n_clusters)
        Share, in [0, 1], of the resamples in which the gene's membership in the cluster is
        at least the core threshold; NaN for a gene in no resample.
    top_agreement : ndarray of shape (n_genes,)
        Share of resamples whose top class for the gene (a cluster, or noise) equals the
        reference's; NaN for a gene in no resample.
    n_resamples : int
    scheme : str
        ``"replicates"`` or ``"genes"``.
    """

    jaccard: np.ndarray
    mean_jaccard: np.ndarray
    membership_low: np.ndarray
    membership_high: np.ndarray
    core_frequency: np.ndarray
    top_agreement: np.ndarray
    n_resamples: int
    scheme: str


# --------------------------------------------------------------------------------------------
# Resampling
# --------------------------------------------------------------------------------------------


def _check_groups(group_of_sample: np.ndarray, n_samples: int) -> np.ndarray:
    groups = np.asarray(group_of_sample)
    if groups.shape != (n_samples,):
        raise GloamError(
            f"group_of_sample must give one group per sample ({n_samples}); got shape "
            f"{groups.shape}"
        )
    if n_samples == 0 or not np.issubdtype(groups.dtype, np.integer) or groups.min() < 0:
        raise GloamError("group_of_sample must hold integer group indices 0, 1, ... per sample")
    counts = np.bincount(groups)
    if (counts == 0).any():
        raise GloamError(
            f"group {int(np.flatnonzero(counts == 0)[0])} has no sample; number the groups "
            "0 .. n_groups - 1 without gaps"
        )
    return groups.astype(np.intp)


def resample_replicates(
    log_values: np.ndarray, group_of_sample: np.ndarray, *, rng: np.random.Generator | int | None
) -> np.ndarray:
    """A bootstrap of the replicate summary: replicates drawn again per group, then averaged.

    For each group (time point, or condition and time point) with ``n_g`` samples, ``n_g``
    of its samples are drawn with replacement; the group's value for a gene is the mean of
    the drawn samples.  All genes share the same draw, so their correlation is kept.

    Parameters
    ----------
    log_values : ndarray of shape (n_genes, n_samples)
        Per-sample values on the log scale; must be finite.
    group_of_sample : ndarray of shape (n_samples,), int
        Group of each sample, ``0 .. n_groups - 1``; every group has a sample.
    rng : numpy.random.Generator, int or None
        Seed or generator, keyword-only.

    Returns
    -------
    ndarray of shape (n_genes, n_groups)
        Resampled group means (log scale).

    Raises
    ------
    GloamError
        If the values are not a finite 2-D array or the groups do not match the samples.
    """
    values = np.asarray(log_values, dtype=np.float64)
    if values.ndim != 2 or not np.isfinite(values).all():
        raise GloamError(
            "log_values must be a finite 2-D array of shape (n_genes, n_samples); fill missing "
            "values before resampling"
        )
    groups = _check_groups(group_of_sample, values.shape[1])
    generator = np.random.default_rng(rng)
    counts = np.bincount(groups)
    by_group = np.argsort(groups, kind="stable")
    first = np.concatenate([[0], np.cumsum(counts)[:-1]])
    slot_group = groups[by_group]  # one slot per sample, in group order
    drawn = by_group[first[slot_group] + generator.integers(counts[slot_group])]
    # weights[j, g]: how often sample j was drawn for group g, over n_g; one product averages.
    weights = np.zeros((values.shape[1], counts.size))
    np.add.at(weights, (drawn, slot_group), 1.0 / counts[slot_group])
    return values @ weights


def zscore_rows(profiles: np.ndarray) -> np.ndarray:
    """z-score every row (mean 0, SD 1 with ddof = 1); a flat row becomes all zeros.

    Resampled profiles are standardised as the clustered data were
    (:data:`gloam.prepare.ZSCORE_DDOF`).  A resample can make a row flat, which
    :func:`gloam.prepare.zscore_rows` (for prepared, non-flat rows) would turn into NaN.

    Parameters
    ----------
    profiles : ndarray of shape (n_genes, n_columns)

    Returns
    -------
    ndarray of shape (n_genes, n_columns)

    Raises
    ------
    GloamError
        If ``profiles`` is not 2-D with at least 2 columns.
    """
    values = np.asarray(profiles, dtype=np.float64)
    if values.ndim != 2 or values.shape[1] < 2:
        raise GloamError(
            f"z-scores need a 2-D array with at least 2 columns (time points); got shape "
            f"{values.shape}"
        )
    centred = values - values.mean(axis=1, keepdims=True)
    sd = centred.std(axis=1, ddof=ZSCORE_DDOF, keepdims=True)
    return np.divide(centred, sd, out=np.zeros_like(centred), where=sd > 0)


def bootstrap_genes(n_genes: int, *, rng: np.random.Generator | int | None) -> np.ndarray:
    """The distinct genes of a bootstrap sample (``n_genes`` draws with replacement).

    Each gene is kept once (about 63 % of the genes are drawn): a gene drawn twice would
    otherwise weigh twice in the clustering, and the Jaccard coefficient counts sets.

    Parameters
    ----------
    n_genes : int
        Number of genes, >= 1.
    rng : numpy.random.Generator, int or None

    Returns
    -------
    ndarray of shape (n_drawn,), int
        Sorted, distinct row indices.
    """
    if isinstance(n_genes, bool) or not isinstance(n_genes, int | np.integer) or n_genes < 1:
        raise GloamError(f"n_genes must be an integer >= 1; got {n_genes!r}")
    generator = np.random.default_rng(rng)
    return np.unique(generator.integers(int(n_genes), size=int(n_genes)))


def hard_labels(memberships: np.ndarray, noise: np.ndarray | None = None) -> np.ndarray:
    """Top cluster of every gene; -1 where the noise membership is larger than every cluster's.

    Parameters
    ----------
    memberships : ndarray of shape (n_genes, n_clusters)
    noise : ndarray of shape (n_genes,), optional

    Returns
    -------
    ndarray of shape (n_genes,), int
        0-based cluster (the first on exact ties), or -1 for noise.
    """
    U = np.asarray(memberships, dtype=np.float64)
    if U.ndim != 2 or U.shape[1] < 1:
        raise GloamError(f"memberships must have shape (n_genes, n_clusters); got {U.shape}")
    labels = np.argmax(U, axis=1).astype(np.intp)
    if noise is not None:
        noise = np.asarray(noise, dtype=np.float64)
        if noise.shape != (U.shape[0],):
            raise GloamError(
                f"noise must have shape ({U.shape[0]},) to match memberships; got {noise.shape}"
            )
        labels[noise > U.max(axis=1)] = -1
    return labels


def cluster_jaccard(
    reference_labels: np.ndarray,
    resampled_labels: np.ndarray,
    *,
    genes_in_resample: np.ndarray | None = None,
    n_clusters: int,
) -> np.ndarray:
    """Hennig's cluster-wise Jaccard coefficient of every reference cluster in one resample.

    For reference cluster ``A_k`` (its genes present in the resample) and resampled clusters
    ``B_j``: ``gamma_k = max_j |A_k ∩ B_j| / |A_k ∪ B_j|``.  Genes labelled noise (-1) belong
    to no cluster on either side.

    Parameters
    ----------
    reference_labels : ndarray of shape (n_genes,), int
        Reference label of every gene, ``-1 .. n_clusters - 1``.
    resampled_labels : ndarray of shape (n_sub,), int
        Label of each resampled gene, ``-1 .. n_clusters - 1``.
    genes_in_resample : ndarray of shape (n_sub,), int, optional
        Distinct row indices (into ``reference_labels``) of the resampled genes; None when
        the resample has every gene in the reference order.
    n_clusters : int
        c, >= 1.

    Returns
    -------
    ndarray of shape (n_clusters,)
        Jaccard in [0, 1]; NaN for a reference cluster with no gene in the resample.

    References
    ----------
    Hennig, C. (2007). *Computational Statistics & Data Analysis* 52:258-271.
    """
    if isinstance(n_clusters, bool) or not isinstance(n_clusters, int | np.integer):
        raise GloamError(f"n_clusters must be an integer >= 1; got {n_clusters!r}")
    c = int(n_clusters)
    if c < 1:
        raise GloamError(f"n_clusters must be an integer >= 1; got {n_clusters!r}")
    reference = np.asarray(reference_labels)
    resampled = np.asarray(resampled_labels)
    if genes_in_resample is not None:
        index = np.asarray(genes_in_resample)
        if index.ndim != 1 or not np.issubdtype(index.dtype, np.integer):
            raise GloamError("genes_in_resample must be a 1-D array of integer row indices")
        if index.size and (index.min() < 0 or index.max() >= reference.shape[0]):
            raise GloamError(f"genes_in_resample has indices outside 0 .. {reference.shape[0] - 1}")
        if np.unique(index).size != index.size:
            raise GloamError("genes_in_resample repeats genes; keep each gene once")
        reference = reference[index]
    if reference.shape != resampled.shape or reference.ndim != 1:
        raise GloamError(
            f"the resample has {resampled.shape} labels for {reference.shape} reference genes; "
            "give one label per resampled gene"
        )
    for name, labels in (("reference_labels", reference), ("resampled_labels", resampled)):
        if labels.size and (labels.min() < -1 or labels.max() >= c):
            raise GloamError(f"{name} must lie in -1 .. {c - 1} (-1 = noise)")
    # Contingency table over (reference, resampled) labels; row and column 0 are noise.
    table = np.bincount(
        (reference.astype(np.intp) + 1) * (c + 1) + (resampled.astype(np.intp) + 1),
        minlength=(c + 1) ** 2,
    ).reshape(c + 1, c + 1)[1:, 1:]
    reference_sizes = np.bincount(reference.astype(np.intp) + 1, minlength=c + 1)[1:]
    resampled_sizes = np.bincount(resampled.astype(np.intp) + 1, minlength=c + 1)[1:]
    union = reference_sizes[:, np.newaxis] + resampled_sizes[np.newaxis, :] - table
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(union > 0, table / union, 0.0)
    return np.where(reference_sizes > 0, ratio.max(axis=1), np.nan)


def align_to_reference(reference_centroids: np.ndarray, centroids: np.ndarray) -> np.ndarray:
    """Match new clusters to reference clusters by centroid distance (Hungarian method).

    The one-to-one matching minimises the summed squared distance between matched centroids
    (:func:`scipy.optimize.linear_sum_assignment`, Kuhn 1955).  Centroids are used rather
    than membership overlap (:func:`gloam.consensus.alignment_permutations`) because a
    resample may hold other genes than the reference.

    Parameters
    ----------
    reference_centroids : ndarray of shape (n_clusters, n_columns)
    centroids : ndarray of shape (n_clusters, n_columns)

    Returns
    -------
    ndarray of shape (n_clusters,), int
        ``perm[l]`` is the new cluster matched to reference cluster ``l``, so
        ``memberships[:, perm]`` and ``centroids[perm]`` are in the reference order.

    Raises
    ------
    GloamError
        If the shapes differ or the centroids are not finite.
    """
    reference = np.asarray(reference_centroids, dtype=np.float64)
    new = np.asarray(centroids, dtype=np.float64)
    if reference.ndim != 2 or reference.shape != new.shape or reference.shape[0] < 1:
        raise GloamError(
            f"centroids {new.shape} and reference centroids {reference.shape} must have the "
            "same shape (n_clusters, n_columns)"
        )
    if not (np.isfinite(reference).all() and np.isfinite(new).all()):
        raise GloamError("centroids must be finite to be aligned")
    rows, columns = linear_sum_assignment(squared_distances(reference, new))
    permutation = np.empty(reference.shape[0], dtype=np.intp)
    permutation[rows] = columns
    return permutation


def recluster_from_centroids(
    X: np.ndarray,
    reference_centroids: np.ndarray,
    m: float,
    *,
    noise_distance: float = math.inf,
    tol: float = RESAMPLE_TOL,
    max_iter: int = RESAMPLE_MAX_ITER,
    acceleration: Acceleration = "squarem",
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Cluster one resample again from the reference centroids, in the reference's order.

    One start per resample, warm-started from the centroids of the partition being judged
    (fuzzy c-means, with the noise class when ``noise_distance`` is finite;
    :func:`gloam.fcm.warm_start_cmeans`), then aligned to the reference clusters by
    :func:`align_to_reference`.  What a resample measures is unchanged by how it is
    iterated: the fixed point of fuzzy c-means reached from the reference centroids, taken
    when no membership of a plain iteration changes by ``tol`` or more.  SQUAREM
    (``acceleration="squarem"``, Varadhan & Roland 2008) reaches that point in fewer
    passes, and closer to it, than plain iteration (``"none"``).  Starts that stop at
    ``max_iter`` are used as they are (no warning), as in a plain run.

    Parameters
    ----------
    X : ndarray of shape (n_sub, n_columns)
        The resampled profiles (z-scored like the clustered data).
    reference_centroids : ndarray of shape (n_clusters, n_columns)
    m : float
        The fuzzifier of the reference partition.
    noise_distance : float, default inf
        ``delta^2`` of the reference's noise class; ``inf`` for none.
    tol, max_iter : see :data:`RESAMPLE_TOL`, :data:`RESAMPLE_MAX_ITER`.
    acceleration : {"squarem", "none"}, default "squarem"

    Returns
    -------
    memberships : ndarray of shape (n_sub, n_clusters)
    noise : ndarray of shape (n_sub,)
        Zeros without a noise class.
    centroids : ndarray of shape (n_clusters, n_columns)
        All three with clusters in the reference order.

    Raises
    ------
    GloamError
        For invalid data, centroids or settings.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        partition = warm_start_cmeans(
            X,
            reference_centroids,
            m,
            noise_distance=noise_distance,
            tol=tol,
            max_iter=max_iter,
            acceleration=acceleration,
        )
    permutation = align_to_reference(reference_centroids, partition.centroids)
    return (
        partition.memberships[:, permutation],
        partition.noise,
        partition.centroids[permutation],
    )


# --------------------------------------------------------------------------------------------
# Summary over resamples
# --------------------------------------------------------------------------------------------


def _percentiles(
    stacked: np.ndarray, count: np.ndarray, levels: tuple[float, ...]
) -> list[np.ndarray]:
    """Percentiles over axis 0 ignoring NaN, by linear interpolation (NumPy's default).

    ``count`` (n, c) is the number of non-NaN values; sorting puts NaN last, so the values
    of each (gene, cluster) are its first ``count`` sorted entries.  Equal to
    ``np.nanpercentile(stacked, level, axis=0)`` without its per-element Python loop.
    """
    ordered = np.sort(stacked, axis=0)
    last = np.maximum(count - 1, 0)
    results = []
    for level in levels:
        position = last * (level / 100.0)
        below = np.floor(position).astype(np.intp)
        above = np.minimum(below + 1, last)
        fraction = position - below
        low = np.take_along_axis(ordered, below[np.newaxis], axis=0)[0]
        high = np.take_along_axis(ordered, above[np.newaxis], axis=0)[0]
        value = low + (high - low) * fraction
        # Exact at the ends of an interval of equal values, like NumPy's lerp.
        value = np.where(fraction >= 0.5, high - (high - low) * (1.0 - fraction), value)
        results.append(np.where(count > 0, value, np.nan))
    return results


def _check_interval(interval: tuple[float, float]) -> tuple[float, float]:
    try:
        low, high = (float(value) for value in interval)
    except (TypeError, ValueError):
        raise GloamError(
            f"interval must be two percentiles (low, high); got {interval!r}"
        ) from None
    if not (0 <= low <= high <= 100):
        raise GloamError(
            f"interval must satisfy 0 <= low <= high <= 100 (percentiles); got {interval!r}"
        )
    return low, high


def resampling_robustness(
    reference_memberships: np.ndarray,
    reference_noise: np.ndarray | None,
    recluster: Callable[[np.random.Generator], Reclustered],
    *,
    n_resamples: int,
    scheme: str,
    rng: np.random.Generator | int | None,
    core_threshold: float = 0.5,
    interval: tuple[float, float] = (5, 95),
) -> Robustness:
    """Cluster resampled data again and summarise cluster-wise and per-gene robustness.

    Parameters
    ----------
    reference_memberships : ndarray of shape (n_genes, n_clusters)
        Memberships of the partition being judged.
    reference_noise : ndarray of shape (n_genes,) or None
        Its noise memberships (None: no noise class).
    recluster : callable
        ``recluster(rng) -> (gene_index, memberships, noise)``: draws one resample with the
        given generator, clusters it and returns the row indices of the genes it holds
        (None for all genes in the reference order), their memberships (n_sub, n_clusters)
        and noise memberships (n_sub,), with clusters already in the reference order (e.g.
        via :func:`align_to_reference`).
    n_resamples : int
        Number of resamples, >= 1.
    scheme : {"replicates", "genes"}
        What ``recluster`` resamples; ``"replicates"`` must return ``gene_index`` None and
        ``"genes"`` an index array.
    rng : numpy.random.Generator, int or None
        Seed or generator, passed on (as one Generator) to every ``recluster`` call.
    core_threshold : float, default 0.5
        Membership at or above which a gene counts as core in a cluster.
    interval : (float, float), default (5, 95)
        Percentiles of the per-gene membership interval.

    Returns
    -------
    Robustness
        With gene resampling, each gene's interval, core frequency and top agreement use
        only the resamples that contain it (NaN if none did).

    Raises
    ------
    GloamError
        For invalid settings, or a ``recluster`` result of the wrong shape.

    Notes
    -----
    Memory: all resampled memberships are kept, ``8 * n_resamples * n_genes * n_clusters``
    bytes, to take the percentiles.

    References
    ----------
    Hennig, C. (2007). Cluster-wise assessment of cluster stability. *Computational
    Statistics & Data Analysis* 52:258-271.
    """
    reference = np.asarray(reference_memberships, dtype=np.float64)
    if reference.ndim != 2 or reference.shape[1] < 1:
        raise GloamError(
            f"reference memberships must have shape (n_genes, n_clusters); got {reference.shape}"
        )
    n_genes, c = reference.shape
    reference_labels = hard_labels(reference, reference_noise)
    if isinstance(n_resamples, bool) or not isinstance(n_resamples, int | np.integer):
        raise GloamError(f"n_resamples must be an integer >= 1; got {n_resamples!r}")
    if n_resamples < 1:
        raise GloamError(f"n_resamples must be an integer >= 1; got {n_resamples!r}")
    if scheme not in SCHEMES:
        raise GloamError(f"scheme must be one of {list(SCHEMES)}; got {scheme!r}")
    if isinstance(core_threshold, bool) or not (
        isinstance(core_threshold, int | float | np.integer | np.floating)
        and math.isfinite(core_threshold)
        and 0 <= core_threshold <= 1
    ):
        raise GloamError(f"core_threshold must be a number in [0, 1]; got {core_threshold!r}")
    levels = _check_interval(interval)
    generator = np.random.default_rng(rng)

    stacked = np.full((int(n_resamples), n_genes, c), np.nan)
    same_top = np.zeros((int(n_resamples), n_genes))
    present = np.zeros((int(n_resamples), n_genes), dtype=bool)
    jaccard = np.empty((int(n_resamples), c))
    for resample in range(int(n_resamples)):  # a loop over resamples; each one is vectorised
        index, memberships, noise = recluster(generator)
        if (index is None) != (scheme == "replicates"):
            raise GloamError(
                f'recluster must return gene indices for scheme "genes" and None for '
                f'"replicates"; got {"None" if index is None else "indices"} for {scheme!r}'
            )
        rows = np.arange(n_genes) if index is None else np.asarray(index)
        memberships = np.asarray(memberships, dtype=np.float64)
        if memberships.shape != (rows.shape[0], c):
            raise GloamError(
                f"recluster returned memberships of shape {memberships.shape}; expected "
                f"{(rows.shape[0], c)} (one row per resampled gene, one column per cluster)"
            )
        labels = hard_labels(memberships, noise)
        jaccard[resample] = cluster_jaccard(
            reference_labels, labels, genes_in_resample=index, n_clusters=c
        )
        stacked[resample, rows] = memberships
        same_top[resample, rows] = labels == reference_labels[rows]
        present[resample, rows] = True

    count = present.sum(axis=0)
    seen = count > 0
    low, high = _percentiles(stacked, np.broadcast_to(count[:, np.newaxis], (n_genes, c)), levels)
    # NaN (gene not in a resample) is never >= the threshold, so absent resamples add 0.
    core_counts = (stacked >= core_threshold).sum(axis=0)
    core = np.divide(
        core_counts,
        count[:, np.newaxis],
        out=np.full((n_genes, c), np.nan),
        where=seen[:, np.newaxis],
    )
    top_agreement = np.divide(same_top.sum(axis=0), count, out=np.full(n_genes, np.nan), where=seen)
    finite = np.isfinite(jaccard)
    n_finite = finite.sum(axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean_jaccard = np.where(finite, jaccard, 0.0).sum(axis=0) / n_finite
    return Robustness(
        jaccard=jaccard,
        mean_jaccard=np.where(n_finite > 0, mean_jaccard, np.nan),
        membership_low=low,
        membership_high=high,
        core_frequency=core,
        top_agreement=top_agreement,
        n_resamples=int(n_resamples),
        scheme=scheme,
    )
