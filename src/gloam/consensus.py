"""Consensus over random starts: aligning cluster labels, per-gene stability, cluster order.

Fuzzy c-means labels its clusters arbitrarily, so cluster 2 of one start may be cluster 5 of
another. :func:`align_starts` relabels every start to agree with the best start (lowest
objective); :func:`consensus_partition` then summarises the aligned starts per gene;
:func:`order_clusters_by_peak_time` and :func:`reorder` give the clusters a fixed, meaningful
order, and :func:`cluster_names` the 1-based names users see ("C1", "C2", ...).

References
----------
.. [1] Kuhn, H. W. (1955). The Hungarian method for the assignment problem. *Naval Research
   Logistics Quarterly* 2, 83-97 (solved with :func:`scipy.optimize.linear_sum_assignment`).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
from scipy.optimize import linear_sum_assignment

from gloam.errors import GloamError

if TYPE_CHECKING:
    from gloam.fcm import MultiStartResult

__all__ = [
    "Consensus",
    "alignment_permutations",
    "align_starts",
    "starts_at_optimum",
    "OPTIMUM_RELATIVE_TOLERANCE",
    "OPTIMUM_MIN_AGREEMENT",
    "consensus_partition",
    "order_clusters_by_peak_time",
    "reorder",
    "cluster_names",
    "membership_table",
]


@dataclasses.dataclass(frozen=True)
class Consensus:
    """Per-gene summary of many aligned fuzzy c-means starts.

    Attributes
    ----------
    memberships : ndarray of shape (n_genes, n_clusters)
        Mean membership over the aligned starts, renormalised so each row sums to 1.
    membership_sd : ndarray of shape (n_genes, n_clusters)
        Standard deviation of the membership over the aligned starts (population SD, ddof=0;
        0 with a single start).
    top_cluster : ndarray of shape (n_genes,), int
        0-based column of the largest consensus membership (the first one on exact ties).
    top_membership : ndarray of shape (n_genes,)
        Consensus membership in ``top_cluster``.
    stability : ndarray of shape (n_genes,)
        Share of starts, in [0, 1], whose own top cluster for the gene equals ``top_cluster``.
    centroids : ndarray of shape (n_clusters, n_features)
        Centroids of the best start (lowest objective), in the column order of ``memberships``.
    order : ndarray of shape (n_clusters,), int
        ``order[k]`` is the best start's cluster index shown in column ``k``; ``arange(c)``
        until :func:`reorder` is applied.
    n_starts : int
        Number of starts summarised.
    m : float
        Fuzzifier of the run.
    """

    memberships: np.ndarray
    membership_sd: np.ndarray
    top_cluster: np.ndarray
    top_membership: np.ndarray
    stability: np.ndarray
    centroids: np.ndarray
    order: np.ndarray
    n_starts: int
    m: float

    @property
    def n_clusters(self) -> int:
        """Number of clusters c."""
        return int(self.memberships.shape[1])


def alignment_permutations(memberships: np.ndarray, reference_index: int) -> np.ndarray:
    """Match every start's clusters to the reference start's by membership overlap.

    For start ``s`` the overlap matrix is ``O_s = U_s^T U_ref`` (c x c): entry ``(k, l)`` is
    the summed product of memberships of all genes in cluster ``k`` of start ``s`` and cluster
    ``l`` of the reference. The Hungarian method finds the one-to-one matching with the largest
    total overlap. Overlap is used rather than centroid distance because it compares what the
    user receives (which genes go together) and is unaffected by how far apart centroids lie.

    Parameters
    ----------
    memberships : ndarray of shape (n_starts, n_genes, n_clusters)
        Memberships of every start.
    reference_index : int
        Start the others are aligned to (normally the best start); it keeps its own labels.

    Returns
    -------
    ndarray of shape (n_starts, n_clusters), int
        ``perm[s, l]`` is the cluster of start ``s`` matched to reference cluster ``l``, so
        ``memberships[s][:, perm[s]]`` is start ``s`` in the reference's labels.

    Raises
    ------
    GloamError
        If ``memberships`` is not 3-D or ``reference_index`` is out of range.

    References
    ----------
    Kuhn (1955), Naval Research Logistics Quarterly 2:83; ``scipy.optimize.linear_sum_assignment``.
    """
    U = np.asarray(memberships, dtype=np.float64)
    if U.ndim != 3:
        raise GloamError(
            f"memberships must have shape (n_starts, n_genes, n_clusters); got {U.shape}"
        )
    n_starts, _, c = U.shape
    if not 0 <= reference_index < n_starts:
        raise GloamError(f"reference start {reference_index} is not among the {n_starts} starts")
    # Batched BLAS product; einsum does this contraction about 3x slower.
    overlap = np.matmul(U.transpose(0, 2, 1), U[reference_index])
    permutations = np.empty((n_starts, c), dtype=np.intp)
    for s in range(n_starts):
        rows, columns = linear_sum_assignment(overlap[s], maximize=True)
        permutations[s, columns] = rows
    # The reference matched to itself is the identity except for exactly tied (duplicate)
    # clusters; pin it so the best start's labels are never shuffled.
    permutations[reference_index] = np.arange(c)
    return permutations


def align_starts(result: MultiStartResult) -> MultiStartResult:
    """Relabel every start's clusters to match the best start.

    Parameters
    ----------
    result : MultiStartResult
        All starts of one fuzzy c-means run.

    Returns
    -------
    MultiStartResult
        A copy whose ``memberships`` (n_starts, n_genes, n_clusters) and ``centroids``
        (n_starts, n_clusters, n_features) are permuted per start as given by
        :func:`alignment_permutations` with the best start as reference. Objectives,
        iterations and convergence flags are unchanged (they do not depend on labels).
    """
    permutations = alignment_permutations(result.memberships, result.best_index)
    memberships = np.take_along_axis(result.memberships, permutations[:, None, :], axis=2)
    centroids = np.take_along_axis(result.centroids, permutations[:, :, None], axis=1)
    return dataclasses.replace(result, memberships=memberships, centroids=centroids)


#: A start is at the optimum when its objective is within this relative distance of the best.
#: Starts that reach the same optimum from different seeds differ by less than 1e-7 of the
#: objective at gloam's default tolerance, while a distinct local optimum of the demo data
#: differed by 7e-5 (measured at c = 9); 1e-6 separates the two.
OPTIMUM_RELATIVE_TOLERANCE = 1e-6
#: ... and when, aligned to the best start, at least this share of genes keeps its top
#: cluster (genes tied between two clusters may flip between starts at the same optimum: 4 of
#: 2,224 demo genes did; the distinct optimum above moved 9 % of the genes).
OPTIMUM_MIN_AGREEMENT = 0.99


def starts_at_optimum(
    result: MultiStartResult,
    *,
    relative_tolerance: float = OPTIMUM_RELATIVE_TOLERANCE,
    min_agreement: float = OPTIMUM_MIN_AGREEMENT,
) -> tuple[MultiStartResult, np.ndarray]:
    """Align every start to the best and mark the starts that reached the best optimum.

    A start is at the optimum when ``J_s - J_best <= relative_tolerance * |J_best|`` and, after
    alignment (:func:`align_starts`), its top cluster equals the best start's for at least
    ``min_agreement`` of the genes: the same objective *and* the same hard partition.

    Parameters
    ----------
    result : MultiStartResult
        Every start of one c.

    Returns
    -------
    aligned : MultiStartResult
        ``result`` with every start relabelled to the best start.
    at_optimum : ndarray of shape (n_starts,), bool
        True for the starts at the optimum (always True for the best start).
    """
    aligned = align_starts(result)
    best = float(result.objectives[result.best_index])
    close = result.objectives - best <= relative_tolerance * abs(best)
    top = np.argmax(aligned.memberships, axis=2)
    agreement = (top == top[result.best_index]).mean(axis=1)
    at_optimum = close & (agreement >= min_agreement)
    at_optimum[result.best_index] = True
    return aligned, at_optimum


def _summarise(aligned: np.ndarray, centroids: np.ndarray, m: float) -> Consensus:
    """Consensus of already aligned memberships (n_starts, n_genes, n_clusters)."""
    mean = aligned.mean(axis=0)
    mean /= mean.sum(axis=1, keepdims=True)
    top = np.argmax(mean, axis=1)
    per_start_top = np.argmax(aligned, axis=2)
    return Consensus(
        memberships=mean,
        membership_sd=aligned.std(axis=0),
        top_cluster=top,
        top_membership=np.take_along_axis(mean, top[:, None], axis=1)[:, 0],
        stability=(per_start_top == top[None, :]).mean(axis=0),
        centroids=np.array(centroids, dtype=np.float64),
        order=np.arange(aligned.shape[2]),
        n_starts=int(aligned.shape[0]),
        m=float(m),
    )


def consensus_partition(result: MultiStartResult, *, already_aligned: bool = False) -> Consensus:
    """Summarise all starts of a run per gene after aligning them to the best start.

    The consensus membership is the mean over aligned starts, renormalised to rows summing to
    1 (the mean of partitions already sums to 1; renormalising removes rounding drift). The
    centroids are the best start's, not a mean: the best start is an actual solution of the
    fuzzy c-means equations, whereas a mean of centroids from different local optima need not
    be. Stability is the share of starts whose own top cluster for a gene equals the consensus
    top cluster.

    Parameters
    ----------
    result : MultiStartResult
        All starts of one run, e.g. from :func:`gloam.fcm.fuzzy_cmeans`.
    already_aligned : bool, default False
        True when ``result`` comes from :func:`align_starts`, so a caller that needs the
        aligned starts too aligns them only once.

    Returns
    -------
    Consensus
        Clusters in the best start's order (``order = arange(c)``); apply :func:`reorder` with
        :func:`order_clusters_by_peak_time` for the user-facing order.
    """
    aligned = result if already_aligned else align_starts(result)
    return _summarise(aligned.memberships, aligned.centroids[aligned.best_index], aligned.m)


def order_clusters_by_peak_time(
    centroids: np.ndarray,
    times: np.ndarray,
    conditions: Sequence[str] | None = None,
) -> np.ndarray:
    """Order clusters by when their centroid peaks.

    The columns are first put in time order (within each condition, conditions in order of
    first appearance, so clusters peaking in the first condition come first). Clusters are
    sorted by the position of their centroid's maximum in that order (the earliest position
    when the maximum value repeats). Ties, i.e. clusters peaking at the same column, are broken
    by (1) larger peak height first, (2) earlier position of the centroid's minimum, (3) the
    original cluster index.

    Parameters
    ----------
    centroids : ndarray of shape (n_clusters, n_timepoints)
        Centroids (z-score units), columns as in the prepared data.
    times : ndarray of shape (n_timepoints,)
        Time of each column (any unit; unevenly spaced is fine).
    conditions : sequence of str of length n_timepoints, optional
        Condition of each column when conditions were concatenated.

    Returns
    -------
    ndarray of shape (n_clusters,), int
        Permutation: ``perm[k]`` is the current index of the cluster that becomes number
        ``k`` (0-based; shown to users as ``C{k + 1}``). Pass it to :func:`reorder`.

    Raises
    ------
    GloamError
        If shapes disagree or values are not finite.
    """
    V = np.asarray(centroids, dtype=np.float64)
    t = np.asarray(times, dtype=np.float64)
    if V.ndim != 2 or t.shape != (V.shape[1],):
        raise GloamError(
            f"centroids must be (n_clusters, n_timepoints) and times (n_timepoints,); got "
            f"{V.shape} and {t.shape}"
        )
    if not (np.all(np.isfinite(V)) and np.all(np.isfinite(t))):
        raise GloamError("centroids or time points contain NaN or Inf")
    if conditions is None:
        condition_rank = np.zeros(t.shape, dtype=np.intp)
    else:
        labels = np.asarray(conditions, dtype=object)
        if labels.shape != t.shape:
            raise GloamError(
                f"conditions has {labels.shape[0] if labels.ndim else 0} entries but there are "
                f"{t.shape[0]} time points; give one condition per column"
            )
        _, first, inverse = np.unique(labels.astype(str), return_index=True, return_inverse=True)
        condition_rank = np.argsort(np.argsort(first))[inverse]
    column_order = np.lexsort((np.arange(t.size), t, condition_rank))
    in_time_order = V[:, column_order]
    peak_position = np.argmax(in_time_order, axis=1)
    peak_height = in_time_order.max(axis=1)
    trough_position = np.argmin(in_time_order, axis=1)
    # lexsort sorts by the last key first.
    return np.lexsort((np.arange(V.shape[0]), trough_position, -peak_height, peak_position))


def reorder(consensus: Consensus, permutation: np.ndarray) -> Consensus:
    """Put the clusters of ``consensus`` in a new order.

    Parameters
    ----------
    consensus : Consensus
    permutation : ndarray of shape (n_clusters,), int
        ``permutation[k]`` is the current column that becomes column ``k``, as returned by
        :func:`order_clusters_by_peak_time`.

    Returns
    -------
    Consensus
        Memberships, SDs and centroids permuted, ``top_cluster`` renumbered, ``order``
        composed so that it still refers to the best start's labels. Per-gene stability and
        top membership are unchanged.

    Raises
    ------
    GloamError
        If ``permutation`` is not a permutation of ``0..c-1``.
    """
    perm = np.asarray(permutation)
    c = consensus.n_clusters
    if perm.shape != (c,) or not np.array_equal(np.sort(perm), np.arange(c)):
        raise GloamError(
            f"cluster order {perm.tolist()} is not a permutation of 0..{c - 1}; "
            "use order_clusters_by_peak_time() to make one"
        )
    inverse = np.empty(c, dtype=np.intp)
    inverse[perm] = np.arange(c)
    return dataclasses.replace(
        consensus,
        memberships=consensus.memberships[:, perm],
        membership_sd=consensus.membership_sd[:, perm],
        top_cluster=inverse[consensus.top_cluster],
        centroids=consensus.centroids[perm],
        order=consensus.order[perm],
    )


def cluster_names(n_clusters: int) -> list[str]:
    """User-facing 1-based cluster names: ``["C1", "C2", ..., "C<n>"]``.

    Raises
    ------
    GloamError
        If ``n_clusters`` is not a positive integer.
    """
    if (
        isinstance(n_clusters, bool)
        or not isinstance(n_clusters, int | np.integer)
        or (n_clusters < 1)
    ):
        raise GloamError(f"number of clusters must be a positive integer; got {n_clusters!r}")
    return [f"C{k}" for k in range(1, int(n_clusters) + 1)]


def membership_table(consensus: Consensus, genes: Sequence[str]) -> pd.DataFrame:
    """Per-gene consensus table, indexed by gene.

    Parameters
    ----------
    consensus : Consensus
    genes : sequence of str of length n_genes
        Gene IDs in the row order of the clustered matrix; must be unique.

    Returns
    -------
    pandas.DataFrame
        Index ``gene`` (str); columns ``C1`` ... ``C<c>`` (consensus memberships, rows sum to
        1), ``top_cluster`` (name of the cluster with the largest membership),
        ``top_membership`` (that membership) and ``stability`` (share of starts agreeing on
        the top cluster, in [0, 1]). ``table[cluster_names(c)]`` is what
        :mod:`gloam.genesets` takes.

    Raises
    ------
    GloamError
        If the number of genes differs from the consensus or gene IDs repeat.
    """
    index = pd.Index([str(gene) for gene in genes], name="gene")
    if len(index) != consensus.memberships.shape[0]:
        raise GloamError(
            f"{len(index)} gene IDs given for {consensus.memberships.shape[0]} clustered genes; "
            "pass the IDs of the clustered matrix in its row order"
        )
    if index.has_duplicates:
        duplicated = index[index.duplicated()].unique()[:5].tolist()
        raise GloamError(f"gene IDs repeat (e.g. {duplicated}); each gene must appear once")
    names = cluster_names(consensus.n_clusters)
    table = pd.DataFrame(consensus.memberships, index=index, columns=names)
    table["top_cluster"] = np.asarray(names, dtype=object)[consensus.top_cluster]
    table["top_membership"] = consensus.top_membership
    table["stability"] = consensus.stability
    return table
