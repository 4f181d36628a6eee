"""Validity indices for fuzzy partitions and the rule that recommends a number of clusters.

Every index takes plain arrays, oriented as the engine uses them:

- ``X`` : ndarray of shape (n_genes, n_timepoints), the clustered values (z-scores);
- ``V`` : ndarray of shape (n_clusters, n_timepoints), the centroids;
- ``U`` : ndarray of shape (n_genes, n_clusters), memberships whose rows sum to 1.

:func:`validity_table` evaluates all indices for one partition per number of clusters and
:func:`recommend_n_clusters` applies the documented rule to that table;
:func:`recommendation_reasons` shows, for each number of clusters, why it was or was not chosen.

References
----------
.. [1] Bezdek, J. C. (1981). *Pattern Recognition with Fuzzy Objective Function Algorithms*.
   Plenum Press, New York.
.. [2] Xie, X. L. and Beni, G. (1991). A validity measure for fuzzy clustering. *IEEE
   Transactions on Pattern Analysis and Machine Intelligence* 13(8), 841-847.
.. [3] Fukuyama, Y. and Sugeno, M. (1989). A new method of choosing the number of clusters for
   the fuzzy c-means method. *Proceedings of the 5th Fuzzy Systems Symposium*, 247-250.
.. [4] Schwämmle, V. and Jensen, O. N. (2010). A simple and fast method to determine the
   parameters for fuzzy c-means cluster analysis. *Bioinformatics* 26(22), 2841-2848.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from gloam.errors import GloamError
from gloam.fcm import squared_distances

if TYPE_CHECKING:
    from gloam.fcm import FuzzyPartition

__all__ = [
    "partition_coefficient",
    "partition_entropy",
    "xie_beni",
    "fukuyama_sugeno",
    "min_centroid_distance",
    "validity_table",
    "recommendation_reasons",
    "recommend_n_clusters",
    "VALIDITY_COLUMNS",
    "DEFAULT_COLLAPSE_RATIO",
]

#: Columns of :func:`validity_table`, in order (``mean_stability`` only when stability is given).
VALIDITY_COLUMNS = (
    "n_clusters",
    "m",
    "objective",
    "partition_coefficient",
    "partition_entropy",
    "xie_beni",
    "fukuyama_sugeno",
    "min_centroid_distance",
)

#: A step c -> c' whose minimum centroid distance falls below this share of its previous value
#: (at least halves) is a candidate collapse; see :func:`recommend_n_clusters`.
DEFAULT_COLLAPSE_RATIO = 0.5
#: A candidate step only counts when the distance before it is still at least this share of
#: the largest distance seen at smaller c (its centroids had not already collapsed).
UNCOLLAPSED_SHARE = 0.1


def _as_memberships(U: np.ndarray) -> np.ndarray:
    U = np.asarray(U, dtype=np.float64)
    if U.ndim != 2 or U.shape[0] < 1 or U.shape[1] < 2:
        raise GloamError(
            f"memberships must be a 2-D array of shape (n_genes, n_clusters) with at least "
            f"2 clusters; got shape {U.shape}"
        )
    if not np.all(np.isfinite(U)):
        raise GloamError("memberships contain NaN or Inf; rerun the clustering step")
    return U


def _check_partition(
    X: np.ndarray, V: np.ndarray, U: np.ndarray, m: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    X = np.asarray(X, dtype=np.float64)
    V = np.asarray(V, dtype=np.float64)
    U = _as_memberships(U)
    if X.ndim != 2 or V.ndim != 2:
        raise GloamError(
            f"data and centroids must be 2-D (genes x time points, clusters x time points); "
            f"got shapes {X.shape} and {V.shape}"
        )
    if X.shape[1] != V.shape[1] or U.shape != (X.shape[0], V.shape[0]):
        raise GloamError(
            f"shapes do not fit together: data {X.shape}, centroids {V.shape}, memberships "
            f"{U.shape}; expected memberships of shape (n_genes, n_clusters) = "
            f"({X.shape[0]}, {V.shape[0]})"
        )
    if not (np.all(np.isfinite(X)) and np.all(np.isfinite(V))):
        raise GloamError("data or centroids contain NaN or Inf; rerun the preparation step")
    if not (np.isfinite(m) and m > 1):
        raise GloamError(f"fuzzifier m must be a finite number > 1; got {m!r}")
    return X, V, U


def partition_coefficient(U: np.ndarray) -> float:
    """Bezdek's partition coefficient, the mean squared membership.

    .. math:: PC = \\frac{1}{n} \\sum_{j=1}^{n} \\sum_{i=1}^{c} u_{ji}^2

    Parameters
    ----------
    U : ndarray of shape (n_genes, n_clusters)
        Memberships; rows sum to 1.

    Returns
    -------
    float
        In ``[1/c, 1]``: 1 for a crisp partition, ``1/c`` when every membership equals ``1/c``.
        Larger means a crisper partition.

    Raises
    ------
    GloamError
        If ``U`` is not 2-D with at least two clusters or holds NaN/Inf.

    References
    ----------
    Bezdek (1981), *Pattern Recognition with Fuzzy Objective Function Algorithms*.
    """
    U = _as_memberships(U)
    return float(np.einsum("ij,ij->", U, U) / U.shape[0])


def partition_entropy(U: np.ndarray) -> float:
    """Bezdek's partition entropy (natural logarithm, with ``0 log 0 = 0``).

    .. math:: PE = -\\frac{1}{n} \\sum_{j=1}^{n} \\sum_{i=1}^{c} u_{ji} \\ln u_{ji}

    Parameters
    ----------
    U : ndarray of shape (n_genes, n_clusters)
        Memberships; rows sum to 1.

    Returns
    -------
    float
        In ``[0, ln c]`` (nats): 0 for a crisp partition, ``ln c`` for uniform memberships.
        Smaller means a crisper partition.

    Raises
    ------
    GloamError
        If ``U`` is not 2-D with at least two clusters or holds NaN/Inf.

    References
    ----------
    Bezdek (1981), *Pattern Recognition with Fuzzy Objective Function Algorithms*.
    """
    U = _as_memberships(U)
    positive = U > 0
    # log only where u > 0: the limit u log u -> 0 gives the 0 log 0 = 0 convention.
    logs = np.log(U, out=np.zeros_like(U), where=positive)
    return float(-np.einsum("ij,ij->", U, logs) / U.shape[0])


def min_centroid_distance(V: np.ndarray) -> float:
    """Smallest squared Euclidean distance between two distinct centroids.

    Parameters
    ----------
    V : ndarray of shape (n_clusters, n_timepoints)
        Centroids (z-score units).

    Returns
    -------
    float
        ``min_{i != k} ||v_i - v_k||^2`` in squared z-score units; 0 when two centroids
        coincide.

    Raises
    ------
    GloamError
        If ``V`` is not 2-D with at least two rows or holds NaN/Inf.

    References
    ----------
    Schwämmle and Jensen (2010), Bioinformatics 26:2841, use this quantity as a criterion for
    the number of clusters.
    """
    V = np.asarray(V, dtype=np.float64)
    if V.ndim != 2 or V.shape[0] < 2:
        raise GloamError(
            f"centroids must be a 2-D array of shape (n_clusters, n_timepoints) with at least "
            f"2 clusters; got shape {V.shape}"
        )
    if not np.all(np.isfinite(V)):
        raise GloamError("centroids contain NaN or Inf; rerun the clustering step")
    # Exact differences: c is small, and the BLAS form loses precision for near-equal centroids.
    differences = V[:, None, :] - V[None, :, :]
    d2 = np.einsum("ikd,ikd->ik", differences, differences)
    upper = np.triu_indices(V.shape[0], k=1)
    return float(d2[upper].min())


def xie_beni(X: np.ndarray, V: np.ndarray, U: np.ndarray, m: float) -> float:
    """Xie–Beni index: fuzzy compactness over separation.

    .. math:: XB = \\frac{\\sum_{j=1}^{n} \\sum_{i=1}^{c} u_{ji}^m \\lVert x_j - v_i\\rVert^2}
                        {n \\, \\min_{i \\ne k} \\lVert v_i - v_k \\rVert^2}

    Xie and Beni (1991) wrote the index with ``u^2``, i.e. for ``m = 2``; with the fuzzifier as
    exponent it is the usual generalisation and equals the paper's value at ``m = 2``.

    Parameters
    ----------
    X : ndarray of shape (n_genes, n_timepoints)
    V : ndarray of shape (n_clusters, n_timepoints)
    U : ndarray of shape (n_genes, n_clusters)
    m : float
        Fuzzifier used for the partition (> 1).

    Returns
    -------
    float
        Non-negative, dimensionless; smaller is better. ``inf`` when two centroids coincide.

    Raises
    ------
    GloamError
        If shapes do not fit, values are not finite or ``m <= 1``.

    References
    ----------
    Xie and Beni (1991), IEEE TPAMI 13(8):841-847.
    """
    X, V, U = _check_partition(X, V, U, m)
    compactness = float(np.einsum("ij,ij->", U**m, squared_distances(X, V)))
    separation = min_centroid_distance(V)
    if separation == 0.0:
        return float("inf")
    return compactness / (X.shape[0] * separation)


def fukuyama_sugeno(X: np.ndarray, V: np.ndarray, U: np.ndarray, m: float) -> float:
    """Fukuyama–Sugeno index: compactness minus separation from the grand mean.

    .. math:: FS = \\sum_{j=1}^{n} \\sum_{i=1}^{c} u_{ji}^m
                   \\left(\\lVert x_j - v_i\\rVert^2 - \\lVert v_i - \\bar{x}\\rVert^2\\right)

    with :math:`\\bar{x}` the mean of all rows of ``X``.

    Parameters
    ----------
    X : ndarray of shape (n_genes, n_timepoints)
    V : ndarray of shape (n_clusters, n_timepoints)
    U : ndarray of shape (n_genes, n_clusters)
    m : float
        Fuzzifier used for the partition (> 1).

    Returns
    -------
    float
        In squared z-score units summed over genes; smaller (more negative) is better.

    Raises
    ------
    GloamError
        If shapes do not fit, values are not finite or ``m <= 1``.

    References
    ----------
    Fukuyama and Sugeno (1989), Proc. 5th Fuzzy Systems Symposium, 247-250.
    """
    X, V, U = _check_partition(X, V, U, m)
    weights = U**m
    grand_mean = X.mean(axis=0)
    spread = V - grand_mean
    compactness = np.einsum("ij,ij->", weights, squared_distances(X, V))
    separation = weights.sum(axis=0) @ np.einsum("id,id->i", spread, spread)
    return float(compactness - separation)


def validity_table(
    X: np.ndarray,
    partitions: Mapping[int, FuzzyPartition],
    stability: Mapping[int, float] | None = None,
) -> pd.DataFrame:
    """All validity indices for one partition per number of clusters.

    Parameters
    ----------
    X : ndarray of shape (n_genes, n_timepoints)
        The clustered data (z-scores).
    partitions : mapping of int to FuzzyPartition
        For each number of clusters c, the partition to judge (normally the best start).
    stability : mapping of int to float, optional
        For each c, the mean per-gene stability across starts (see
        :func:`gloam.consensus.consensus_partition`); must cover the same c as ``partitions``.

    Returns
    -------
    pandas.DataFrame
        One row per c, sorted by c, with columns (see :data:`VALIDITY_COLUMNS`):

        ``n_clusters``
            c.
        ``m``
            Fuzzifier of the partition.
        ``objective``
            Fuzzy c-means objective J_m (squared z-score units); falls with c by construction.
        ``partition_coefficient``
            Bezdek's PC in [1/c, 1]; larger is crisper.
        ``partition_entropy``
            Bezdek's PE in [0, ln c] nats; smaller is crisper.
        ``xie_beni``
            Xie–Beni index; smaller is better.
        ``fukuyama_sugeno``
            Fukuyama–Sugeno index; smaller is better.
        ``min_centroid_distance``
            Smallest squared distance between two centroids (squared z-score units).
        ``mean_stability``
            Only when ``stability`` is given: mean share of starts agreeing on each gene's top
            cluster, in [0, 1].

    Raises
    ------
    GloamError
        If ``partitions`` is empty, a key disagrees with the partition's number of clusters,
        or ``stability`` does not cover the same c.

    References
    ----------
    See the module references (Bezdek 1981; Xie and Beni 1991; Fukuyama and Sugeno 1989;
    Schwämmle and Jensen 2010).
    """
    if not partitions:
        raise GloamError("no partitions given to judge; scan at least one number of clusters")
    if stability is not None and set(stability) != set(partitions):
        raise GloamError(
            f"stability is given for c = {sorted(stability)} but partitions for c = "
            f"{sorted(partitions)}; give both for the same numbers of clusters"
        )
    rows = []
    for c in sorted(partitions):
        partition = partitions[c]
        V, U, m = partition.centroids, partition.memberships, float(partition.m)
        if V.shape[0] != c:
            raise GloamError(
                f"the partition stored under c = {c} has {V.shape[0]} clusters; "
                "key each partition by its own number of clusters"
            )
        row = {
            "n_clusters": int(c),
            "m": m,
            "objective": float(partition.objective),
            "partition_coefficient": partition_coefficient(U),
            "partition_entropy": partition_entropy(U),
            "xie_beni": xie_beni(X, V, U, m),
            "fukuyama_sugeno": fukuyama_sugeno(X, V, U, m),
            "min_centroid_distance": min_centroid_distance(V),
        }
        if stability is not None:
            row["mean_stability"] = float(stability[c])
        rows.append(row)
    return pd.DataFrame(rows)


def _check_table(table: pd.DataFrame, collapse_ratio: float) -> pd.DataFrame:
    missing = {"n_clusters", "xie_beni", "min_centroid_distance"} - set(table.columns)
    if missing:
        raise GloamError(
            f"validity table lacks column(s) {sorted(missing)}; build it with validity_table()"
        )
    if len(table) == 0:
        raise GloamError("validity table is empty; scan at least one number of clusters")
    if table["n_clusters"].duplicated().any():
        raise GloamError("validity table has the same n_clusters twice; keep one row per c")
    if not 0 < collapse_ratio < 1:
        raise GloamError(
            f"collapse_ratio must be between 0 and 1 (exclusive); got {collapse_ratio}"
        )
    return table.sort_values("n_clusters", kind="stable").reset_index(drop=True)


def recommendation_reasons(
    table: pd.DataFrame, *, collapse_ratio: float = DEFAULT_COLLAPSE_RATIO
) -> pd.DataFrame:
    """Apply the rule of :func:`recommend_n_clusters` and explain it for every c.

    Parameters
    ----------
    table : pandas.DataFrame
        Output of :func:`validity_table` (needs ``n_clusters``, ``xie_beni``,
        ``min_centroid_distance``).
    collapse_ratio : float, default 0.5
        See :func:`recommend_n_clusters`.

    Returns
    -------
    pandas.DataFrame
        One row per c, sorted by c, with columns:

        ``n_clusters``
            c.
        ``distance_ratio``
            ``min_centroid_distance`` at this c divided by its value at the previous scanned c
            (NaN for the smallest c, or when the previous value is 0).
        ``eligible``
            True for the c before the collapse (every c when there is no collapse).
        ``chosen``
            True for exactly one row, the recommended c.
        ``reason``
            One sentence in plain words.

    Raises
    ------
    GloamError
        If the table lacks the needed columns, is empty, repeats a c, or ``collapse_ratio`` is
        outside (0, 1).
    """
    table = _check_table(table, collapse_ratio)
    c = table["n_clusters"].to_numpy(dtype=int)
    distance = table["min_centroid_distance"].to_numpy(dtype=float)
    xb = table["xie_beni"].to_numpy(dtype=float)

    ratio = np.full(len(c), np.nan)
    previous = distance[:-1]
    ratio[1:] = np.divide(
        distance[1:], previous, out=np.full(len(c) - 1, np.nan), where=previous > 0
    )
    # The collapse is the sharpest fall among steps that (a) at least halve the distance and
    # (b) start from centroids still apart (not already collapsed at a smaller c). NaN
    # compares False, so a step from an already-zero distance is never the collapse.
    running_max = np.maximum.accumulate(np.where(np.isfinite(distance), distance, 0.0))
    started_apart = np.zeros(len(c), dtype=bool)
    started_apart[1:] = previous >= UNCOLLAPSED_SHARE * running_max[:-1]
    candidate = (ratio < collapse_ratio) & started_apart
    collapse = int(np.argmin(np.where(candidate, ratio, np.inf))) if candidate.any() else None

    if collapse is not None:
        eligible = np.arange(len(c)) < collapse
        chosen_index = collapse - 1
    else:
        eligible = np.ones(len(c), dtype=bool)
        # argmin returns the first of equal values and c is sorted: ties go to the smaller c.
        score = np.where(np.isnan(xb), np.inf, xb)
        chosen_index = int(np.argmin(score))
    chosen = np.zeros(len(c), dtype=bool)
    chosen[chosen_index] = True

    reasons = []
    for i in range(len(c)):
        if collapse is None:
            if chosen[i]:
                reasons.append(
                    "smallest Xie–Beni index; the minimum centroid distance never collapsed in "
                    "the scanned range, so consider scanning larger numbers of clusters"
                )
            else:
                reasons.append(
                    f"Xie–Beni index {xb[i]:.4g} is larger than {xb[chosen_index]:.4g} at "
                    f"c = {c[chosen_index]}"
                )
        elif chosen[i]:
            reasons.append(
                "largest number of clusters before the minimum centroid distance collapsed: "
                "all its centroids are still well apart"
            )
        elif i == collapse:
            reasons.append(
                f"the minimum centroid distance fell to {ratio[i]:.3g} of its value at "
                f"c = {c[i - 1]}, the sharpest fall in the scan: two centroids now share one "
                "group"
            )
        elif eligible[i]:
            reasons.append(
                f"fewer clusters than c = {c[chosen_index]}, whose centroids are still well apart"
            )
        else:
            reasons.append(
                f"beyond the collapse of the minimum centroid distance at c = {c[collapse]}"
            )
    return pd.DataFrame(
        {
            "n_clusters": c,
            "distance_ratio": ratio,
            "eligible": eligible,
            "chosen": chosen,
            "reason": reasons,
        }
    )


def recommend_n_clusters(
    table: pd.DataFrame, *, collapse_ratio: float = DEFAULT_COLLAPSE_RATIO
) -> int:
    """Recommend a number of clusters from a validity table.

    The rule, applied to the rows sorted by c:

    1. For each scanned c after the first, divide its minimum centroid distance by the value at
       the previous scanned c. While every new cluster captures a real group, the closest pair
       of centroids stays apart; once c exceeds the number of groups the data support, the new
       centroid lands on top of an existing group (or coincides with another centroid) and the
       distance falls sharply. Candidate steps are those whose ratio is below
       ``collapse_ratio`` (default 0.5: the distance at least halves) and whose previous
       distance is still at least :data:`UNCOLLAPSED_SHARE` (0.1) of the largest distance at
       smaller c, so that steps among centroids that had already collapsed (tiny distances
       whose ratios are noise) are never taken. The *collapse* is the candidate with the
       smallest ratio (the sharpest fall; the first one on ties). Both numbers are gloam's
       conventions (checked on scikit-learn blobs and on the demo data), not published
       constants.
    2. If there is a collapse, recommend the scanned c just before it: the largest number of
       clusters whose centroids are all still well apart.
    3. If the distance never collapses in the scanned range, recommend the c with the smallest
       Xie–Beni index; equal values go to the smaller c and NaN never wins.
       :func:`recommendation_reasons` then suggests scanning larger c.

    The rule only reads ``n_clusters``, ``min_centroid_distance`` and ``xie_beni``; it is
    deterministic and does not depend on the row order of ``table``. The use of the minimum
    centroid distance follows Schwämmle and Jensen (2010); the Xie–Beni index follows Xie and
    Beni (1991). Use :func:`recommendation_reasons` for a per-c explanation.

    Parameters
    ----------
    table : pandas.DataFrame
        Output of :func:`validity_table` (needs ``n_clusters``, ``xie_beni``,
        ``min_centroid_distance``).
    collapse_ratio : float, default 0.5
        Ratio in (0, 1) below which a fall of the minimum centroid distance from one scanned c
        to the next is a candidate collapse.

    Returns
    -------
    int
        The recommended number of clusters (one of ``table["n_clusters"]``).

    Raises
    ------
    GloamError
        If the table lacks the needed columns, is empty, repeats a c, or ``collapse_ratio`` is
        outside (0, 1).

    References
    ----------
    Schwämmle and Jensen (2010), Bioinformatics 26:2841; Xie and Beni (1991), IEEE TPAMI 13:841.
    """
    reasons = recommendation_reasons(table, collapse_ratio=collapse_ratio)
    return int(reasons.loc[reasons["chosen"], "n_clusters"].iloc[0])
