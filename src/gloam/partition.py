"""The partition for one number of clusters c, and the evidence that judges it.

For one c, :func:`solve_partition` runs the whole chain that a scan job owns:

1. Random starts of fuzzy c-means (Bezdek 1981), in batches until at least
   ``min_starts_at_optimum`` starts reach the best objective or ``max_starts`` are spent.
   A start is *at the optimum* when its objective is within a relative
   :data:`OPTIMUM_RELATIVE_TOLERANCE` of the best and, once aligned to the best start, it
   gives at least :data:`OPTIMUM_MIN_AGREEMENT` of the genes the same top cluster
   (:func:`gloam.consensus.starts_at_optimum`).
2. The consensus of the starts at the optimum only (failed starts never dilute it).
3. The noise class (Davé 1991; :mod:`gloam.noise`): noise clustering warm-started from the
   consensus centroids, so genes that fit no response get a noise membership instead of being
   forced into a cluster.
4. Robustness by resampling (Hennig 2007; :mod:`gloam.robustness`): the replicates of every
   time point drawn again (or the genes, without replicates), the profiles summarised and
   z-scored again, and clustered again from the found centroids.
5. The per-c metrics a validity table holds: the classical indices of the fuzzy c-means
   consensus and the criteria :func:`gloam.validity.judge_n_clusters` uses.

References
----------
Bezdek, J. C. (1981). *Pattern Recognition with Fuzzy Objective Function Algorithms*. Plenum.
Davé, R. N. (1991). Characterization and detection of noise in clustering. *Pattern
Recognition Letters* 12:657-664.
Hennig, C. (2007). Cluster-wise assessment of cluster stability. *Computational Statistics &
Data Analysis* 52:258-271.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np

from gloam.errors import ConvergenceWarning, GloamError

__all__ = [
    "CORE_LEVEL_FOR_CRITERIA",
    "SEPARATION_N_NULL",
    "PartitionAtC",
    "solve_partition",
    "centroid_correlation",
    "centroid_coherence",
]

#: Membership a gene needs in its top cluster to count towards that cluster's size in the
#: criteria for c (a gene at 0.5 or more belongs to no other cluster more).
CORE_LEVEL_FOR_CRITERIA = 0.5
#: Null data sets of each nearest-pair separation test (as the workflow's structure test).
SEPARATION_N_NULL = 30


@dataclass(frozen=True)
class PartitionAtC:
    """The partition used for one c, with its evidence.

    Attributes
    ----------
    centroids : ndarray of shape (c, n_columns)
        Cluster centres (z-score units) of the final partition (with the noise class when on).
    memberships : ndarray of shape (n_genes, c)
        Cluster memberships; with the noise class, ``memberships.sum(1) + noise == 1``.
    noise : ndarray of shape (n_genes,)
        Noise membership (zeros without the noise class).
    noise_distance : float
        Squared distance of the noise prototype (``inf`` without the noise class).
    start_agreement : ndarray of shape (n_genes,)
        Share of *all* random starts whose own top cluster for the gene equals the consensus
        top cluster: a diagnostic of the optimiser, not of the data.
    membership_low, membership_high, core_frequency : ndarray of shape (n_genes, c) or None
        Resampling interval (5th and 95th percentile) of each membership and the share of
        resamples in which the gene is core (membership >= 0.5) in the cluster.
    top_agreement : ndarray of shape (n_genes,) or None
        Share of resamples whose top class for the gene (noise included) equals this one's.
    jaccard : ndarray of shape (n_resamples, c) or None
        Hennig's Jaccard of each cluster in each resample.
    metrics : dict
        One row of the validity table (see :func:`solve_partition`).
    """

    centroids: np.ndarray
    memberships: np.ndarray
    noise: np.ndarray
    noise_distance: float
    start_agreement: np.ndarray
    membership_low: np.ndarray | None
    membership_high: np.ndarray | None
    core_frequency: np.ndarray | None
    top_agreement: np.ndarray | None
    jaccard: np.ndarray | None
    metrics: dict[str, Any]


def centroid_correlation(centroids: np.ndarray) -> np.ndarray:
    """Pearson correlation between centroid profiles, shape (c, c); NaN for a flat centroid."""
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.atleast_2d(np.corrcoef(centroids))


def centroid_coherence(X: np.ndarray, centroids: np.ndarray) -> np.ndarray:
    """How much each cluster's genes agree: squared centroid norm over the mean squared gene norm.

    For z-scored genes (all of squared norm n_columns - 1) the squared norm of a mean of genes
    equals the mean of their pairwise cosine similarities, i.e. their mean Pearson correlation
    (diagonal terms aside). A cluster of genes with one shared response scores near 1; a
    cluster gathered from genes that point every way has a centroid near the flat profile and
    scores near 0.

    Parameters
    ----------
    X : ndarray of shape (n_genes, n_columns)
    centroids : ndarray of shape (c, n_columns)

    Returns
    -------
    ndarray of shape (c,)
    """
    scale = float(np.mean(np.einsum("ij,ij->i", X, X)))
    return np.einsum("kj,kj->k", centroids, centroids) / scale


def _max_offdiagonal(matrix: np.ndarray) -> float:
    if matrix.shape[0] < 2:
        return float("nan")
    values = matrix[~np.eye(matrix.shape[0], dtype=bool)]
    values = values[np.isfinite(values)]
    return float(values.max()) if values.size else float("nan")


def _run_until_optimum(
    X: np.ndarray,
    n_clusters: int,
    m: float,
    *,
    n_starts: int,
    min_starts_at_optimum: int,
    max_starts: int,
    rng: np.random.Generator,
    engine: dict[str, Any],
):
    """Batches of ``n_starts`` random starts until enough reach the optimum (or the cap)."""
    from gloam.consensus import starts_at_optimum
    from gloam.fcm import MultiStartResult, fuzzy_cmeans

    batches = []
    total = 0
    while True:
        batch = min(n_starts, max_starts - total) if batches else n_starts
        with warnings.catch_warnings():
            # Non-converged starts are counted in the metrics instead of one warning per batch.
            warnings.simplefilter("ignore", ConvergenceWarning)
            batches.append(fuzzy_cmeans(X, n_clusters, m, n_starts=batch, rng=rng, **engine))
        total += batch
        if len(batches) == 1:
            result = batches[0]
        else:
            objectives = np.concatenate([b.objectives for b in batches])
            result = MultiStartResult(
                centroids=np.concatenate([b.centroids for b in batches]),
                memberships=np.concatenate([b.memberships for b in batches]),
                objectives=objectives,
                n_iter=np.concatenate([b.n_iter for b in batches]),
                converged=np.concatenate([b.converged for b in batches]),
                m=float(m),
                best_index=int(np.argmin(objectives)),
            )
        aligned, at_optimum = starts_at_optimum(result)
        if int(at_optimum.sum()) >= min_starts_at_optimum or total >= max_starts:
            return result, aligned, at_optimum


def solve_partition(
    X: np.ndarray,
    n_clusters: int,
    m: float,
    *,
    rng: np.random.Generator,
    n_starts: int = 20,
    tol: float = 1e-4,
    max_iter: int = 500,
    init: str = "kmeans++",
    precision: str = "fast",
    n_threads: int | None = None,
    min_starts_at_optimum: int = 3,
    max_starts: int = 100,
    noise_class: bool = True,
    n_resamples: int = 20,
    replicates: np.ndarray | None = None,
    sample_column: np.ndarray | None = None,
    separation_n_null: int = SEPARATION_N_NULL,
    acceleration: str = "squarem",
) -> PartitionAtC:
    """Cluster ``X`` into ``n_clusters`` and gather the evidence for judging that c.

    Parameters
    ----------
    X : ndarray of shape (n_genes, n_columns)
        z-scored profiles (rows mean 0, SD 1 with ddof = 1).
    n_clusters : int
        c, at least 2 and below the number of genes.
    m : float
        Fuzzifier, > 1.
    rng : numpy.random.Generator
        The only source of randomness (starts and resamples).
    n_starts, tol, max_iter, init, precision, n_threads
        Passed to :func:`gloam.fcm.fuzzy_cmeans` (``n_starts`` per batch).
    min_starts_at_optimum, max_starts : int
        Batches of ``n_starts`` starts are added until this many starts reach the optimum, or
        until ``max_starts`` starts have run.
    noise_class : bool
        Add the noise class (:mod:`gloam.noise`, flat-profile noise distance).
    n_resamples : int
        Resamples for robustness; 0 skips robustness.
    replicates : ndarray of shape (n_genes, n_samples), optional
        Per-sample log values of the same genes; with ``sample_column`` and at least one
        column having two or more samples, resampling draws replicates again. Otherwise
        genes are resampled.
    sample_column : ndarray of shape (n_samples,), int, optional
        Column of ``X`` each sample belongs to.
    separation_n_null : int
        Null data sets of the test of each cluster against its nearest neighbour
        (:func:`gloam.structure.nearest_pair_separation`); 0 skips it.
    acceleration : {"squarem", "none"}
        How the starts, the noise clustering and the resamples iterate
        (:func:`gloam.fcm.fuzzy_cmeans`): SQUAREM extrapolation of the centroids (Varadhan &
        Roland 2008) with a monotone objective, or plain fuzzy c-means steps.

    Returns
    -------
    PartitionAtC
        ``metrics`` has the keys ``n_clusters``, ``m``, ``objective``, every index of
        :data:`gloam.validity.INDICES` (of the fuzzy c-means consensus),
        ``max_centroid_correlation``,
        ``n_starts``, ``n_at_optimum``, ``n_not_converged``, ``mean_start_agreement``,
        ``min_jaccard``, ``mean_jaccard``, ``min_core_genes``, ``n_noise``, ``noise_distance``
        ``resampling`` (``replicates``, ``genes`` or ``none``) and ``max_pair_p_value`` (the
        largest p-value of the nearest-pair tests, Bonferroni-corrected for the number of
        pairs tested; NaN when none was tested).
    """
    from gloam.consensus import consensus_partition
    from gloam.fcm import FuzzyPartition
    from gloam.validity import index_values

    X = np.ascontiguousarray(X, dtype=np.float64)
    if min_starts_at_optimum > max_starts:
        raise GloamError(
            f"scan.min_starts_at_optimum ({min_starts_at_optimum}) is larger than "
            f"scan.max_starts ({max_starts}); make it at most max_starts"
        )
    engine = {
        "tol": tol,
        "max_iter": max_iter,
        "init": init,
        "precision": precision,
        "n_threads": n_threads,
        "acceleration": acceleration,
    }
    result, aligned, at_optimum = _run_until_optimum(
        X,
        n_clusters,
        m,
        n_starts=n_starts,
        min_starts_at_optimum=min_starts_at_optimum,
        max_starts=max(max_starts, n_starts),
        rng=rng,
        engine=engine,
    )
    # Start agreement (over every start) is the old per-gene "stability": an optimiser check.
    every_start = consensus_partition(aligned, already_aligned=True)
    optimum = consensus_partition(_subset(aligned, at_optimum), already_aligned=True)
    fcm_partition = FuzzyPartition(
        centroids=optimum.centroids,
        memberships=optimum.memberships,
        objective=float(result.objectives[result.best_index]),
        n_iter=int(result.n_iter[result.best_index]),
        converged=bool(result.converged[result.best_index]),
        m=float(m),
    )
    centroids, memberships, noise, delta = _final_partition(
        X, optimum.centroids, optimum.memberships, m, noise_class, acceleration
    )
    robustness = None
    scheme = "none"
    if n_resamples > 0:
        robustness, scheme = _robustness(
            X,
            centroids,
            memberships,
            noise,
            m,
            delta,
            n_resamples=n_resamples,
            replicates=replicates,
            sample_column=sample_column,
            rng=rng,
            acceleration=acceleration,
        )
    max_pair_p_value = float("nan")
    if separation_n_null > 0:
        from gloam.structure import nearest_pair_separation

        pairs = nearest_pair_separation(
            X,
            memberships,
            noise,
            centroids,
            m,
            core_level=CORE_LEVEL_FOR_CRITERIA,
            n_null=separation_n_null,
            rng=rng,
        )
        tested = pairs["p_value"].dropna().to_numpy(dtype=float)
        if tested.size:
            max_pair_p_value = float(min(1.0, tested.max() * tested.size))
    top_is_noise = noise > memberships.max(axis=1)
    top = memberships.argmax(axis=1)
    core = (~top_is_noise) & (memberships.max(axis=1) >= CORE_LEVEL_FOR_CRITERIA)
    core_sizes = np.bincount(top[core], minlength=n_clusters)
    jaccard_means = (
        np.nanmean(robustness.jaccard, axis=0)
        if robustness is not None
        else np.full(n_clusters, np.nan)
    )
    metrics: dict[str, Any] = {
        "n_clusters": int(n_clusters),
        "m": float(m),
        "objective": float(fcm_partition.objective),
        **index_values(X, fcm_partition.centroids, fcm_partition.memberships, m),
        "max_centroid_correlation": _max_offdiagonal(centroid_correlation(centroids)),
        "min_coherence": float(centroid_coherence(X, centroids).min()),
        "n_starts": int(result.n_starts),
        "n_at_optimum": int(at_optimum.sum()),
        "n_not_converged": int((~result.converged).sum()),
        "mean_start_agreement": float(every_start.stability.mean()),
        "min_jaccard": float(np.nanmin(jaccard_means))
        if np.isfinite(jaccard_means).any()
        else float("nan"),
        "mean_jaccard": float(np.nanmean(jaccard_means))
        if np.isfinite(jaccard_means).any()
        else float("nan"),
        "min_core_genes": int(core_sizes.min()),
        "n_noise": int(top_is_noise.sum()),
        "noise_distance": float(delta),
        "resampling": scheme,
        "max_pair_p_value": max_pair_p_value,
    }
    return PartitionAtC(
        centroids=centroids,
        memberships=memberships,
        noise=noise,
        noise_distance=float(delta),
        start_agreement=every_start.stability,
        membership_low=None if robustness is None else robustness.membership_low,
        membership_high=None if robustness is None else robustness.membership_high,
        core_frequency=None if robustness is None else robustness.core_frequency,
        top_agreement=None if robustness is None else robustness.top_agreement,
        jaccard=None if robustness is None else robustness.jaccard,
        metrics=metrics,
    )


def _subset(result, mask: np.ndarray):
    """The starts of ``result`` selected by ``mask``; the best start is always among them."""
    import dataclasses

    indices = np.flatnonzero(mask)
    objectives = result.objectives[indices]
    return dataclasses.replace(
        result,
        centroids=result.centroids[indices],
        memberships=result.memberships[indices],
        objectives=objectives,
        n_iter=result.n_iter[indices],
        converged=result.converged[indices],
        best_index=int(np.argmin(objectives)),
    )


def _final_partition(
    X: np.ndarray,
    centroids: np.ndarray,
    memberships: np.ndarray,
    m: float,
    noise_class: bool,
    acceleration: str = "squarem",
) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """Noise clustering from the consensus centroids, or the consensus itself without it."""
    if not noise_class:
        return centroids, memberships, np.zeros(X.shape[0]), float("inf")
    from gloam.fcm import warm_start_cmeans
    from gloam.noise import noise_distance

    delta = noise_distance(X, rule="flat_profile")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        partition = warm_start_cmeans(
            X, centroids, m, noise_distance=delta, acceleration=acceleration
        )
    return partition.centroids, partition.memberships, partition.noise, float(delta)


def _robustness(
    X: np.ndarray,
    centroids: np.ndarray,
    memberships: np.ndarray,
    noise: np.ndarray,
    m: float,
    delta: float,
    *,
    n_resamples: int,
    replicates: np.ndarray | None,
    sample_column: np.ndarray | None,
    rng: np.random.Generator,
    acceleration: str = "squarem",
):
    from gloam.robustness import (
        bootstrap_genes,
        recluster_from_centroids,
        resample_replicates,
        resampling_robustness,
        zscore_rows,
    )

    has_replicates = (
        replicates is not None
        and sample_column is not None
        and np.bincount(np.asarray(sample_column, dtype=np.intp)).max() >= 2
    )
    if has_replicates:
        group = np.asarray(sample_column, dtype=np.intp)

        def recluster(generator: np.random.Generator):
            profiles = resample_replicates(replicates, group, rng=generator)
            resampled, resampled_noise, _ = recluster_from_centroids(
                zscore_rows(profiles), centroids, m, noise_distance=delta, acceleration=acceleration
            )
            return None, resampled, resampled_noise

        scheme = "replicates"
    else:

        def recluster(generator: np.random.Generator):
            index = bootstrap_genes(X.shape[0], rng=generator)
            resampled, resampled_noise, _ = recluster_from_centroids(
                X[index], centroids, m, noise_distance=delta, acceleration=acceleration
            )
            return index, resampled, resampled_noise

        scheme = "genes"
    robustness = resampling_robustness(
        memberships,
        noise,
        recluster,
        n_resamples=n_resamples,
        scheme=scheme,
        rng=rng,
        core_threshold=CORE_LEVEL_FOR_CRITERIA,
    )
    return robustness, scheme
