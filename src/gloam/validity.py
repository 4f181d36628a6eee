"""Validity indices for fuzzy partitions and the rule that recommends a number of clusters.

Every index takes plain arrays, oriented as the engine uses them:

- ``X`` : ndarray of shape (n_genes, n_timepoints), the clustered values (z-scores);
- ``V`` : ndarray of shape (n_clusters, n_timepoints), the centroids;
- ``U`` : ndarray of shape (n_genes, n_clusters), memberships whose rows sum to 1.

:func:`validity_table` evaluates all indices for one partition per number of clusters. The
indices are diagnostics; the number of clusters is chosen by :func:`judge_n_clusters`, which
judges each c on its own merits (structure present, clusters robust under resampling, sizeable
and distinct) and recommends the largest c that passes, so that widening the scanned range can
change the answer only when a larger c itself passes.

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
.. [5] Hennig, C. (2007). Cluster-wise assessment of cluster stability. *Computational
   Statistics & Data Analysis* 52, 258-271.
.. [6] Liu, Y., Hayes, D. N., Nobel, A. and Marron, J. S. (2008). Statistical significance of
   clustering for high-dimension, low-sample size data. *JASA* 103, 1281-1293.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
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
    "ValidityIndex",
    "INDICES",
    "index_values",
    "validity_table",
    "judge_n_clusters",
    "recommended_n_clusters",
    "CRITERIA",
    "SEPARATION_ALPHA",
    "VALIDITY_COLUMNS",
    "STABLE_JACCARD",
    "MIN_CORE_GENES",
    "MAX_CENTROID_CORRELATION",
    "MIN_COHERENCE",
]


#: The criteria every cluster of a c must meet, in the order they are reported.
CRITERIA = ("structure", "robust", "sizeable", "distinct", "coherent", "separated")
#: Mean resampling Jaccard at or above which a cluster counts as stable (Hennig 2007 calls
#: clusters with values of 0.75 or more stable; the level is from memory of that paper).
STABLE_JACCARD = 0.75
#: Fewest genes a cluster must hold as its top class with membership >= 0.5 (gloam's
#: convention: fewer genes make no useful list for enrichment).
MIN_CORE_GENES = 10
#: Largest Pearson correlation two centroids may have and still count as distinct responses
#: (gloam's convention).
MAX_CENTROID_CORRELATION = 0.85
#: Smallest coherence (mean correlation between a cluster's gene profiles, measured as the
#: squared centroid norm; :func:`gloam.partition.centroid_coherence`) of a cluster that is a
#: shared response rather than genes gathered near the flat profile (gloam's convention).
MIN_COHERENCE = 0.5
#: Level of the nearest-pair separation tests (Bonferroni-corrected over the pairs of one c),
#: the same as the structure test's default level.
SEPARATION_ALPHA = 0.01


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


@dataclass(frozen=True)
class ValidityIndex:
    """One validity index of a partition, computed for every scanned c.

    Attributes
    ----------
    name : str
        Column of the validity table (and key of the scan's ``metrics``).
    compute : callable
        ``compute(X, V, U, m) -> float`` on the data (genes x time points, z-scores), the
        centroids (c x time points), the memberships (genes x c) and the fuzzifier.
    better : str
        ``larger`` or ``smaller``: which values mean a better partition.
    unit : str
        Unit of the value, for tables and axes.
    reference : str
        The publication that defines it.
    """

    name: str
    compute: Callable[[np.ndarray, np.ndarray, np.ndarray, float], float]
    better: str
    unit: str
    reference: str


#: The validity indices of every scanned c, in table order. They are diagnostics shown in
#: the validity table; the number of clusters is decided by :data:`CRITERIA`. Adding one
#: here adds its column to the validity tables of runs and scans (test: tests/test_artifacts.py
#: checks that the README documents every index).
INDICES: dict[str, ValidityIndex] = {
    index.name: index
    for index in (
        ValidityIndex(
            "partition_coefficient",
            lambda X, V, U, m: partition_coefficient(U),
            "larger",
            "unitless, 1/c to 1",
            "Bezdek 1981",
        ),
        ValidityIndex(
            "partition_entropy",
            lambda X, V, U, m: partition_entropy(U),
            "smaller",
            "nats, 0 to ln c",
            "Bezdek 1981",
        ),
        ValidityIndex("xie_beni", xie_beni, "smaller", "unitless", "Xie & Beni 1991"),
        ValidityIndex(
            "fukuyama_sugeno",
            fukuyama_sugeno,
            "smaller",
            "squared z-score units",
            "Fukuyama & Sugeno 1989",
        ),
        ValidityIndex(
            "min_centroid_distance",
            lambda X, V, U, m: min_centroid_distance(V),
            "larger",
            "squared z-score units",
            "Schwämmle & Jensen 2010",
        ),
    )
}


#: Columns of :func:`validity_table`, in order (``mean_stability`` only when stability is given).
VALIDITY_COLUMNS = ("n_clusters", "m", "objective", *INDICES)


def index_values(X: np.ndarray, V: np.ndarray, U: np.ndarray, m: float) -> dict[str, float]:
    """Every index of :data:`INDICES` for one partition.

    Parameters
    ----------
    X : ndarray of shape (n_genes, n_timepoints)
    V : ndarray of shape (n_clusters, n_timepoints)
    U : ndarray of shape (n_genes, n_clusters)
    m : float
        Fuzzifier of the partition (> 1).

    Returns
    -------
    dict
        Index name -> value, in the order of :data:`INDICES`.
    """
    return {name: float(index.compute(X, V, U, m)) for name, index in INDICES.items()}


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
            **index_values(X, V, U, m),
        }
        if stability is not None:
            row["mean_stability"] = float(stability[c])
        rows.append(row)
    return pd.DataFrame(rows)


def judge_n_clusters(
    table: pd.DataFrame,
    *,
    structure_present: bool,
    stable_jaccard: float = STABLE_JACCARD,
    min_core_genes: int = MIN_CORE_GENES,
    max_centroid_correlation: float = MAX_CENTROID_CORRELATION,
    min_coherence: float = MIN_COHERENCE,
    separation_alpha: float = SEPARATION_ALPHA,
) -> pd.DataFrame:
    """Judge every scanned c on its own merits and recommend one.

    A c *passes* when all of :data:`CRITERIA` hold:

    ``structure``
        The selected genes show more cluster structure than one Gaussian with the same
        covariance (the same verdict for every c; :mod:`gloam.structure`, after Liu et al. 2008).
    ``robust``
        Every cluster's mean Jaccard under resampling is at least ``stable_jaccard``
        (Hennig 2007).
    ``sizeable``
        Every cluster is the top class, with membership >= 0.5, of at least ``min_core_genes``
        genes.
    ``distinct``
        No two centroids correlate above ``max_centroid_correlation``.
    ``coherent``
        Every cluster's genes share a response: its coherence (mean correlation between the
        profiles of its genes, :func:`gloam.partition.centroid_coherence`) is at least
        ``min_coherence``. Without it, genes that fit no response can gather into a robust
        cluster around the flat profile.
    ``separated``
        Every cluster is split from its most similar neighbour: the pooled core genes of the
        two show more two-cluster structure than one Gaussian (``max_pair_p_value`` below
        ``separation_alpha``; :func:`gloam.structure.nearest_pair_separation`, after Liu et
        al. 2008 and Kimes et al. 2017). Without it, one response whose genes vary
        continuously (a timing jitter) can be cut in two robust, distinct-looking halves.
        A NaN p-value (not tested) does not fail it; a table without the column is read as
        not tested.

    The recommendation is the **largest c that passes**; when none passes (or there is no
    structure) it is 1, meaning "no clusters the data support". The judgement of each c reads
    only that c's own row, so adding larger c to the scan can change the recommendation only
    when one of them passes, and adding smaller c never changes it unless they pass and no
    larger c does.

    Parameters
    ----------
    table : pandas.DataFrame
        One row per c with ``n_clusters``, ``min_jaccard``, ``min_core_genes`` and
        ``max_centroid_correlation`` and ``min_coherence`` (see
        :func:`gloam.partition.solve_partition`).
    structure_present : bool
        Verdict of the structure test.
    stable_jaccard, min_core_genes, max_centroid_correlation, min_coherence, separation_alpha
        Thresholds of the criteria.

    Returns
    -------
    pandas.DataFrame
        ``table`` sorted by c with the columns ``structure``, ``robust``, ``sizeable``,
        ``distinct``, ``coherent``, ``passes`` (bool), ``failed`` (the failed criteria,
        comma-separated, empty when none), ``recommended`` (True for at most one row) and
        ``reason`` (one sentence in plain words).

    Raises
    ------
    GloamError
        If the table lacks a column, is empty or repeats a c, or a threshold is out of range.
    """
    needed = {
        "n_clusters",
        "min_jaccard",
        "min_core_genes",
        "max_centroid_correlation",
        "min_coherence",
    }
    missing = needed - set(table.columns)
    if missing:
        raise GloamError(
            f"validity table lacks column(s) {sorted(missing)}; build it from the scan files"
        )
    if len(table) == 0:
        raise GloamError("validity table is empty; scan at least one number of clusters")
    if table["n_clusters"].duplicated().any():
        raise GloamError("validity table has the same n_clusters twice; keep one row per c")
    if not 0 < stable_jaccard <= 1:
        raise GloamError(f"stable_jaccard must be in (0, 1]; got {stable_jaccard}")
    if min_core_genes < 1:
        raise GloamError(f"min_core_genes must be at least 1; got {min_core_genes}")
    if not -1 <= max_centroid_correlation <= 1:
        raise GloamError(
            f"max_centroid_correlation must be in [-1, 1]; got {max_centroid_correlation}"
        )
    judged = table.sort_values("n_clusters", kind="stable").reset_index(drop=True).copy()
    jaccard = judged["min_jaccard"].to_numpy(dtype=float)
    core = judged["min_core_genes"].to_numpy(dtype=float)
    correlation = judged["max_centroid_correlation"].to_numpy(dtype=float)
    judged["structure"] = bool(structure_present)
    judged["robust"] = np.nan_to_num(jaccard, nan=-1.0) >= stable_jaccard
    judged["sizeable"] = core >= min_core_genes
    # A single flat centroid has no correlation (NaN): nothing to be confused with.
    judged["distinct"] = ~(correlation > max_centroid_correlation)
    coherence = judged["min_coherence"].to_numpy(dtype=float)
    judged["coherent"] = np.nan_to_num(coherence, nan=-1.0) >= min_coherence
    if "max_pair_p_value" not in judged.columns:
        judged["max_pair_p_value"] = np.nan
    pair_p = judged["max_pair_p_value"].to_numpy(dtype=float)
    judged["separated"] = ~(pair_p >= separation_alpha)
    passed = judged[list(CRITERIA)].to_numpy(dtype=bool)
    judged["passes"] = passed.all(axis=1)
    judged["failed"] = [
        ",".join(name for name, ok in zip(CRITERIA, row, strict=True) if not ok) for row in passed
    ]
    recommended = recommended_n_clusters(judged)
    judged["recommended"] = judged["n_clusters"] == recommended
    reasons = []
    for i, row in judged.iterrows():
        c = int(row["n_clusters"])
        if not structure_present:
            reasons.append(
                "no evidence of cluster structure: the genes look like one Gaussian cloud, so "
                "any split into clusters would be arbitrary"
            )
            continue
        problems = []
        if not row["robust"]:
            problems.append(
                f"a cluster dissolves under resampling (smallest mean Jaccard "
                f"{_below(jaccard[i])} < {stable_jaccard:g})"
            )
        if not row["sizeable"]:
            problems.append(f"a cluster has only {int(core[i])} core genes (< {min_core_genes})")
        if not row["distinct"]:
            problems.append(
                f"two centroids are nearly the same response (r = {correlation[i]:.2f} > "
                f"{max_centroid_correlation:g})"
            )
        if not row["coherent"]:
            problems.append(
                f"a cluster's genes barely agree (coherence {_below(coherence[i])} < "
                f"{min_coherence:g}): it gathers genes near the flat profile"
            )
        if not row["separated"]:
            problems.append(
                f"a cluster and its nearest neighbour look like one cut response (p = "
                f"{pair_p[i]:.2g} >= {separation_alpha:g} against one Gaussian)"
            )
        if problems:
            reasons.append("fails: " + "; ".join(problems))
        elif c == recommended:
            reasons.append(
                "largest c whose clusters are all robust under resampling, sizeable, distinct, "
                "coherent and separated from their nearest neighbour"
            )
        else:
            reasons.append(f"passes every criterion, but the larger c = {recommended} passes too")
    judged["reason"] = reasons
    return judged


def _below(value: float) -> str:
    """A value that failed a ``>=`` threshold, rounded down to 2 decimals so that it never
    reads as the threshold itself (0.4999 shows as 0.49, not 0.50)."""
    return f"{math.floor(value * 100) / 100:.2f}" if np.isfinite(value) else "n/a"


def recommended_n_clusters(judged: pd.DataFrame) -> int:
    """The largest c with ``passes`` True in a table from :func:`judge_n_clusters`, else 1."""
    passing = judged.loc[judged["passes"].astype(bool), "n_clusters"]
    return int(passing.max()) if len(passing) else 1
