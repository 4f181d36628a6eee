"""Fuzzy c-means engine: many random starts at once, prediction, objective.

Fuzzy c-means (Bezdek 1981) alternates two closed-form updates for a data
matrix ``X`` of shape (n_samples, n_features), here genes x time points:

* centroids from memberships: ``v_k = sum_i u_ik^m x_i / sum_i u_ik^m``
* memberships from squared distances ``D_ik = ||x_i - v_k||^2``:
  ``u_ik = D_ik^(-1/(m-1)) / sum_j D_ij^(-1/(m-1))``

until the largest membership change is below ``tol``.

Cost per iteration
------------------
The matrix products (``X V^T`` for distances, ``U^m^T X`` for centroids) go
through BLAS.  The element-wise part needs only **one** transcendental
operation per element and iteration, the power ``r_ik^(-p)`` with
``p = 1/(m-1)`` and ``r_ik = D_ik / min_j D_ij``; everything else is
multiplication and division, because, writing ``S_i = sum_j r_ij^(-p)``:

* ``u_ik = r_ik^(-p) / S_i``;
* the row's share of the objective ``J_i = sum_k u_ik^m D_ik`` equals
  ``min_j D_ij * S_i^(1-m)`` (the reformulated objective of Hathaway & Bezdek
  1995), one power per *row*;
* ``u_ik^m = u_ik * u_ik^(m-1) = u_ik * J_i / D_ik``, since
  ``u_ik^(m-1) = (D_ik / min_j D_ij)^(-1) S_i^(1-m)``.

Scaling by the row minimum also keeps ``r^(-p) <= 1``, so reduced precision
(``precision="float32"``) cannot overflow even for m close to 1.  The work is
done in row blocks small enough to stay in cache, spread over a thread pool
(NumPy releases the GIL inside ufuncs).

The default ``precision="fast"`` runs the same algebra, the whole iteration
loop included, in compiled code (:mod:`gloam._kernels`, needs numba, the
``fast`` extra): row blocks of every start in parallel, BLAS for the two
products inside each block, ``r^(-p) = exp(-p ln r)`` with float64-accurate
vectorised ``ln``/``exp``, and the centroid sums accumulated as the memberships
are made, so no (n_starts, n_samples, n_clusters) array is written but the
memberships, which stay cluster-major until the end.
Without numba, ``"fast"`` falls back to the float64 element-wise path, so it
keeps its accuracy everywhere.

Rows that coincide with a centroid (zero distance, up to rounding of the BLAS
form) get membership 1 there, split evenly between coinciding centroids, so no
NaN leaves the engine.

References
----------
Bezdek, J. C. (1981). *Pattern Recognition with Fuzzy Objective Function
Algorithms*. Plenum Press.
Hathaway, R. J. & Bezdek, J. C. (1995). Optimization of clustering criteria by
reformulation. *IEEE Transactions on Fuzzy Systems* 3(2):241-245.
Arthur, D. & Vassilvitskii, S. (2007). k-means++: the advantages of careful
seeding. *Proc. SODA 2007*, 1027-1035.
"""

from __future__ import annotations

import math
import os
import warnings
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Literal

import numpy as np
from threadpoolctl import ThreadpoolController

from gloam.errors import ConvergenceWarning, GloamError

# The compiled kernel is optional (the ``fast`` extra installs numba).  The private switch
# GLOAM_DISABLE_NUMBA=1 runs the NumPy fallback with numba installed, to test that path.
_kernels = None
if os.environ.get("GLOAM_DISABLE_NUMBA", "") != "1":
    try:
        from gloam import _kernels
    except ImportError:  # pragma: no cover - exercised only without numba
        _kernels = None

__all__ = [
    "FuzzyPartition",
    "MultiStartResult",
    "fuzzy_cmeans",
    "predict_memberships",
    "squared_distances",
    "objective",
    "random_memberships",
    "kmeanspp_centroids",
]

Precision = Literal["fast", "float64", "float32"]
Init = Literal["random", "kmeans++"]

_ELEMENTWISE_DTYPES: dict[str, type[np.floating]] = {
    # Used only when the compiled kernel is not available: "fast" keeps its float64 accuracy.
    "fast": np.float64,
    "float64": np.float64,
    "float32": np.float32,
}
# Rows per parallel work unit of the compiled kernel (rounded so every thread gets as many).
_CHUNK_ROWS = 4096
# Rows per block of the element-wise part: 2048 rows x 30 clusters x 8 bytes is ~0.5 MB per
# array, so the handful of arrays a block touches stays in a core's L2 cache.
_BLOCK_ROWS = 2048
# A squared distance at or below this multiple of the squared norms involved is rounding
# noise of the BLAS form ||x||^2 - 2 x.v + ||v||^2: the point coincides with the centroid.
_COINCIDENCE_RELATIVE = 64 * np.finfo(np.float64).eps


@dataclass(frozen=True)
class FuzzyPartition:
    """One fuzzy c-means solution.

    Attributes
    ----------
    centroids : ndarray of shape (n_clusters, n_features)
        Cluster centres, in the units of ``X`` (z-scores for prepared data).
    memberships : ndarray of shape (n_samples, n_clusters)
        Memberships in [0, 1]; each row sums to 1.  They are the optimal
        memberships for ``centroids``.
    objective : float
        ``J_m = sum_ik u_ik^m ||x_i - v_k||^2`` for this (memberships, centroids) pair.
    n_iter : int
        Centroid-and-membership updates performed.
    converged : bool
        Whether the largest membership change fell below ``tol``.
    m : float
        The fuzzifier used.
    """

    centroids: np.ndarray
    memberships: np.ndarray
    objective: float
    n_iter: int
    converged: bool
    m: float

    @property
    def n_clusters(self) -> int:
        return int(self.centroids.shape[0])


@dataclass(frozen=True)
class MultiStartResult:
    """Every start of a multi-start fuzzy c-means run.

    Attributes
    ----------
    centroids : ndarray of shape (n_starts, n_clusters, n_features)
    memberships : ndarray of shape (n_starts, n_samples, n_clusters)
    objectives : ndarray of shape (n_starts,)
        ``J_m`` of each start; lower is better.
    n_iter : ndarray of shape (n_starts,), int
    converged : ndarray of shape (n_starts,), bool
    m : float
    best_index : int
        Index of the start with the lowest objective (first one on ties).
    """

    centroids: np.ndarray
    memberships: np.ndarray
    objectives: np.ndarray
    n_iter: np.ndarray
    converged: np.ndarray
    m: float
    best_index: int

    @property
    def n_starts(self) -> int:
        return int(self.objectives.shape[0])

    @property
    def n_clusters(self) -> int:
        return int(self.centroids.shape[1])

    def start(self, index: int) -> FuzzyPartition:
        """The solution of start ``index``."""
        return FuzzyPartition(
            centroids=self.centroids[index],
            memberships=self.memberships[index],
            objective=float(self.objectives[index]),
            n_iter=int(self.n_iter[index]),
            converged=bool(self.converged[index]),
            m=self.m,
        )

    def best(self) -> FuzzyPartition:
        """The solution with the lowest objective."""
        return self.start(self.best_index)


# --------------------------------------------------------------------------------------------
# Validation (one place; each message names the parameter, the value and the allowed range)
# --------------------------------------------------------------------------------------------


def _check_data(X: np.ndarray, min_rows: int = 3) -> np.ndarray:
    """``X`` as a contiguous float64 (n_genes, n_columns) array, or one GloamError line.

    ``min_rows`` is 3 for fuzzy c-means (c >= 2 needs more genes); noise clustering, which
    also allows c = 1, asks for 1.
    """
    array = np.asarray(X)
    if array.ndim != 2:
        raise GloamError(
            f"X must be a 2-D array of shape (n_genes, n_timepoints); got {array.ndim} dimension(s)"
        )
    if array.shape[0] < min_rows or array.shape[1] < 1:
        raise GloamError(
            f"X has shape {array.shape}; clustering needs at least {min_rows} row(s) (genes) "
            "and 1 column"
        )
    if not np.issubdtype(array.dtype, np.number):
        raise GloamError(f"X must be numeric; got dtype {array.dtype}")
    array = np.ascontiguousarray(array, dtype=np.float64)
    if not np.isfinite(array).all():
        bad_rows = np.flatnonzero(~np.isfinite(array).all(axis=1))
        raise GloamError(
            f"X contains NaN or Inf in {bad_rows.size} row(s) (first: row {bad_rows[0]}); "
            "fill or drop missing values before clustering"
        )
    return array


def _check_parameters(
    n_samples: int,
    n_clusters: int,
    m: float,
    tol: float,
    max_iter: int,
    n_starts: int,
    init: str,
    precision: str,
) -> None:
    if isinstance(n_clusters, bool) or not isinstance(n_clusters, int | np.integer):
        raise GloamError(f"n_clusters must be an integer; got {n_clusters!r}")
    if not 2 <= n_clusters < n_samples:
        raise GloamError(
            f"n_clusters must satisfy 2 <= n_clusters < n_genes ({n_samples}); got {n_clusters}"
        )
    if not (isinstance(m, int | float | np.floating) and math.isfinite(m) and m > 1):
        raise GloamError(f"the fuzzifier m must be a finite number > 1; got {m!r}")
    if not (isinstance(tol, int | float | np.floating) and math.isfinite(tol) and tol >= 0):
        raise GloamError(f"tol must be a finite number >= 0; got {tol!r}")
    if isinstance(max_iter, bool) or not isinstance(max_iter, int | np.integer) or max_iter < 1:
        raise GloamError(f"max_iter must be an integer >= 1; got {max_iter!r}")
    if isinstance(n_starts, bool) or not isinstance(n_starts, int | np.integer) or n_starts < 1:
        raise GloamError(f"n_starts must be an integer >= 1; got {n_starts!r}")
    if init not in _INITIALISERS:
        raise GloamError(f"init must be one of {sorted(_INITIALISERS)}; got {init!r}")
    if precision not in _ELEMENTWISE_DTYPES:
        raise GloamError(
            f"precision must be one of {sorted(_ELEMENTWISE_DTYPES)}; got {precision!r}"
        )


def _check_initial_memberships(
    initial: np.ndarray, n_starts: int, n_samples: int, n_clusters: int
) -> np.ndarray:
    array = np.asarray(initial, dtype=np.float64)
    if array.ndim == 2:
        array = array[np.newaxis]
    expected = (n_starts, n_samples, n_clusters)
    if array.shape != expected:
        raise GloamError(
            f"initial_memberships must have shape {expected[1:]} or {expected}; got {array.shape}"
        )
    if not np.isfinite(array).all() or (array < 0).any():
        raise GloamError("initial_memberships must be finite and non-negative")
    row_sums = array.sum(axis=2)
    if not np.allclose(row_sums, 1.0, rtol=0, atol=1e-8):
        raise GloamError("each row of initial_memberships must sum to 1 (within 1e-8)")
    return np.ascontiguousarray(array)


# --------------------------------------------------------------------------------------------
# Initialisation
# --------------------------------------------------------------------------------------------


def random_memberships(
    n_starts: int, n_samples: int, n_clusters: int, *, rng: np.random.Generator
) -> np.ndarray:
    """Random memberships, rows uniform on the probability simplex.

    Each row is drawn from a flat Dirichlet distribution (normalised standard
    exponentials), the usual random start for fuzzy c-means.

    Returns
    -------
    ndarray of shape (n_starts, n_samples, n_clusters)
    """
    draws = rng.standard_exponential((n_starts, n_samples, n_clusters))
    draws /= draws.sum(axis=2, keepdims=True)
    return draws


def kmeanspp_centroids(
    X: np.ndarray, n_clusters: int, n_starts: int, *, rng: np.random.Generator
) -> np.ndarray:
    """k-means++ seeding (Arthur & Vassilvitskii 2007) for many starts at once.

    The first centre of each start is a uniformly chosen row; each further centre
    is a row drawn with probability proportional to its squared distance to the
    nearest centre chosen so far.  When every remaining distance is zero
    (duplicate rows), the draw is uniform.

    Returns
    -------
    ndarray of shape (n_starts, n_clusters, n_features)
    """
    n_samples = X.shape[0]
    squared_norms = np.einsum("ij,ij->i", X, X)
    chosen = np.empty((n_starts, n_clusters), dtype=np.intp)
    chosen[:, 0] = rng.integers(n_samples, size=n_starts)
    nearest = np.full((n_starts, n_samples), np.inf)
    for k in range(1, n_clusters):
        latest = X[chosen[:, k - 1]]  # (n_starts, n_features)
        distances = (
            squared_norms[np.newaxis, :]
            - 2.0 * latest @ X.T
            + np.einsum("ij,ij->i", latest, latest)[:, np.newaxis]
        )
        np.maximum(distances, 0.0, out=distances)
        np.minimum(nearest, distances, out=nearest)
        weights = nearest.copy()
        totals = weights.sum(axis=1)
        flat = totals <= 0
        weights[flat] = 1.0
        cumulative = np.cumsum(weights, axis=1)
        targets = rng.random(n_starts) * cumulative[:, -1]
        picks = (cumulative < targets[:, np.newaxis]).sum(axis=1)
        chosen[:, k] = np.minimum(picks, n_samples - 1)
    return X[chosen]


def _random_init(X, n_clusters, n_starts, m, rng, dtype):
    return random_memberships(n_starts, X.shape[0], n_clusters, rng=rng)


def _kmeanspp_init(X, n_clusters, n_starts, m, rng, dtype):
    centroids = kmeanspp_centroids(X, n_clusters, n_starts, rng=rng)
    return _memberships_for_centroids(X, centroids, m, dtype)


_INITIALISERS = {"random": _random_init, "kmeans++": _kmeanspp_init}


# --------------------------------------------------------------------------------------------
# Numeric core (assumes validated, contiguous float64 input)
# --------------------------------------------------------------------------------------------


def squared_distances(X: np.ndarray, centroids: np.ndarray) -> np.ndarray:
    """Squared Euclidean distances through BLAS: ``||x||^2 - 2 x.v + ||v||^2``, clipped at 0.

    Parameters
    ----------
    X : ndarray of shape (n_samples, n_features)
    centroids : ndarray of shape (n_clusters, n_features) or (n_starts, n_clusters, n_features)

    Returns
    -------
    ndarray of shape (n_samples, n_clusters) or (n_starts, n_samples, n_clusters)
    """
    X = np.asarray(X, dtype=np.float64)
    centroids = np.asarray(centroids, dtype=np.float64)
    stacked = centroids[np.newaxis] if centroids.ndim == 2 else centroids
    distances = np.matmul(X, stacked.transpose(0, 2, 1))
    distances *= -2.0
    distances += np.einsum("ij,ij->i", X, X)[np.newaxis, :, np.newaxis]
    distances += np.einsum("skj,skj->sk", stacked, stacked)[:, np.newaxis, :]
    np.maximum(distances, 0.0, out=distances)
    return distances[0] if centroids.ndim == 2 else distances


def _augmented_rows(X: np.ndarray) -> np.ndarray:
    """``[X, ||x||^2, 1]`` of shape (n, d + 2): one product with it gives squared distances."""
    return np.hstack([X, np.einsum("ij,ij->i", X, X)[:, np.newaxis], np.ones((X.shape[0], 1))])


def _augmented_centroids(centroids: np.ndarray) -> np.ndarray:
    """``[-2 V, 1, ||v||^2]`` of shape (s, c, d + 2), the partner of :func:`_augmented_rows`."""
    s, c, _ = centroids.shape
    return np.concatenate(
        [
            -2.0 * centroids,
            np.ones((s, c, 1)),
            np.einsum("skj,skj->sk", centroids, centroids)[:, :, np.newaxis],
        ],
        axis=2,
    )


def _distances_cluster_major(
    rows: np.ndarray, centroids: np.ndarray, out: np.ndarray | None = None
) -> np.ndarray:
    """Squared distances (s, c, n) from augmented rows (n, d+2) and centroids (s, c, d)."""
    out = np.matmul(_augmented_centroids(centroids), rows.T, out=out)
    np.maximum(out, 0.0, out=out)
    return out


def _coincidence_floor(squared_norms: np.ndarray, centroids: np.ndarray) -> np.ndarray:
    """(s, n) squared distance at or below which row i counts as sitting on a centroid."""
    largest_centroid_norm = np.einsum("skj,skj->sk", centroids, centroids).max(axis=1)
    return _COINCIDENCE_RELATIVE * (
        squared_norms[np.newaxis, :] + largest_centroid_norm[:, np.newaxis] + 1.0
    )


def _update_block(
    distances: np.ndarray,
    floor: np.ndarray,
    memberships: np.ndarray,
    previous: np.ndarray | None,
    row_objective: np.ndarray,
    row_change: np.ndarray,
    m: float,
) -> None:
    """Membership update for one block of rows of one start, in place.

    Arrays are cluster-major, shape (c, rows), so that every reduction over
    clusters is an element-wise operation across rows.  On entry ``distances``
    holds squared distances (float64).  On exit ``memberships`` holds the new
    memberships, ``distances`` holds ``u^m`` (float64, ready for the centroid
    product), ``row_objective`` (rows,) each row's share ``J_i`` of the objective
    and, when ``previous`` is given, ``row_change`` each row's largest absolute
    membership change (``previous`` is overwritten with scratch values).
    """
    dtype = memberships.dtype.type
    nearest = distances.min(axis=0)
    on_centroid = nearest <= floor
    coinciding = np.flatnonzero(on_centroid)
    if coinciding.size:
        coinciding_distances = distances[:, coinciding]
        nearest[coinciding] = 1.0
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        # r = D / min_j D lies in [1, inf), so r^(-p) lies in (0, 1]: no overflow at any m.
        np.multiply(distances, (1.0 / nearest).astype(dtype), out=memberships, casting="same_kind")
        np.power(memberships, dtype(-1.0 / (m - 1.0)), out=memberships)
        totals = memberships.sum(axis=0)
        memberships *= dtype(1.0) / totals
        np.multiply(nearest, totals.astype(np.float64) ** (1.0 - m), out=row_objective)
        # u^m = u * J_i / D (see the module docstring), over the distances no longer needed.
        np.divide(row_objective, distances, out=distances)
        np.multiply(distances, memberships, out=distances)
    if coinciding.size:
        hits = coinciding_distances <= floor[coinciding]
        shares = hits / hits.sum(axis=0)
        memberships[:, coinciding] = shares
        powered = shares**m
        distances[:, coinciding] = powered
        row_objective[coinciding] = (powered * coinciding_distances).sum(axis=0)
    if previous is not None:
        np.subtract(previous, memberships, out=previous)
        np.abs(previous, out=previous)
        np.max(previous, axis=0, out=row_change)


def _default_threads() -> int:
    configured = os.environ.get("GLOAM_NUM_THREADS") or os.environ.get("OMP_NUM_THREADS")
    if configured and configured.isdigit() and int(configured) > 0:
        return int(configured)
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1


def _block_slices(n_samples: int, n_clusters: int) -> list[slice]:
    rows = max(256, (32768 // max(n_clusters, 1)))
    return [slice(start, min(start + rows, n_samples)) for start in range(0, n_samples, rows)]


class _BlockRunner:
    """Runs :func:`_update_block` over (start, row block) pairs on a thread pool."""

    def __init__(self, n_samples: int, n_clusters: int, n_threads: int) -> None:
        self.slices = _block_slices(n_samples, n_clusters)
        self.n_threads = max(1, n_threads)
        self.executor = ThreadPoolExecutor(self.n_threads) if self.n_threads > 1 else None

    def __enter__(self) -> _BlockRunner:
        return self

    def __exit__(self, *exc: object) -> None:
        if self.executor is not None:
            self.executor.shutdown()

    def run(self, starts, distances, floor, memberships, previous, row_objective, row_change, m):
        def task(pair: tuple[int, slice]) -> None:
            start, rows = pair
            _update_block(
                distances[start, :, rows],
                floor[start, rows],
                memberships[start, :, rows],
                None if previous is None else previous[start, :, rows],
                row_objective[start, rows],
                row_change[start, rows],
                m,
            )

        pairs = [(start, rows) for start in starts for rows in self.slices]
        if self.executor is None or len(pairs) == 1:
            for pair in pairs:
                task(pair)
        else:
            # list() re-raises here any exception raised in a worker.
            list(self.executor.map(task, pairs))


def _sample_major(cluster_major: np.ndarray) -> np.ndarray:
    """(s, c, n) -> contiguous float64 (s, n, c), rows renormalised to sum to 1."""
    memberships = np.ascontiguousarray(cluster_major.transpose(0, 2, 1), dtype=np.float64)
    memberships /= memberships.sum(axis=2, keepdims=True)
    return memberships


def _memberships_for_centroids(
    X: np.ndarray,
    centroids: np.ndarray,
    m: float,
    dtype: type | None,
    n_threads: int | None = None,
) -> np.ndarray:
    """Optimal memberships for stacked centroids (s, c, d); returns (s, n, c) float64.

    ``dtype`` None means the compiled kernel.
    """
    if dtype is None:
        # One iteration is the membership update alone: the centroids stay as given.
        s, c, _ = centroids.shape
        threads = max(1, n_threads or _default_threads())
        with _KernelThreads(threads):
            memberships, *_ = _compiled_run(
                X,
                np.array(centroids, dtype=np.float64),
                np.zeros((s, c * X.shape[0])),
                m,
                0.0,
                1,
                threads,
            )
        return memberships
    s, c, _ = centroids.shape
    n = X.shape[0]
    rows = _augmented_rows(X)
    distances = _distances_cluster_major(rows, centroids)
    memberships = np.empty((s, c, n), dtype=dtype)
    scratch = np.empty((s, n))
    with _BlockRunner(n, c, n_threads or _default_threads()) as runner:
        floor = _coincidence_floor(np.ascontiguousarray(rows[:, -2]), centroids)
        runner.run(range(s), distances, floor, memberships, None, scratch, scratch, m)
    return _sample_major(memberships)


def _kernel_layout(n_samples: int, n_clusters: int, n_threads: int) -> tuple[int, int]:
    """(rows per parallel unit, rows per cache block) for the compiled kernel."""
    per_thread = -(-n_samples // (n_threads * _CHUNK_ROWS))
    n_chunks = n_threads * per_thread
    chunk_rows = -(-n_samples // n_chunks)
    # A block's handful of (c, rows) float64 scratch arrays stays within a core's L2 cache.
    block_rows = max(128, min(1024, 16384 // n_clusters))
    return chunk_rows, block_rows


class _KernelThreads:
    """Context: numba on ``n_threads`` threads and BLAS on one (the kernel is the parallel part).

    The BLAS libraries are found once per process (a search costs about 0.5 ms),
    after importing the SciPy BLAS that numba's ``np.dot`` calls.
    """

    controller: ThreadpoolController | None = None

    def __init__(self, n_threads: int) -> None:
        self.n_threads = n_threads

    def __enter__(self) -> _KernelThreads:
        if _KernelThreads.controller is None:
            import scipy.linalg.cython_blas  # noqa: F401  (loads the BLAS numba binds to)

            _KernelThreads.controller = ThreadpoolController()
        self.previous = _kernels.set_threads(self.n_threads)
        self.blas_limit = _KernelThreads.controller.limit(limits=1, user_api="blas")
        return self

    def __exit__(self, *exc: object) -> None:
        self.blas_limit.restore_original_limits()
        _kernels.set_threads(self.previous)


def _kernel_blocks(memberships: np.ndarray, n_threads: int) -> np.ndarray:
    """(s, n, c) memberships -> new (s, c * n) array in the kernel's block layout.

    Call inside :class:`_KernelThreads`.
    """
    n_starts, n_samples, n_clusters = memberships.shape
    chunk_rows, block_rows = _kernel_layout(n_samples, n_clusters, n_threads)
    blocked = np.empty((n_starts, n_clusters * n_samples))
    _kernels.to_blocks(
        np.ascontiguousarray(memberships, dtype=np.float64), chunk_rows, block_rows, blocked
    )
    return blocked


def _compiled_run(
    X: np.ndarray,
    centroids: np.ndarray,
    blocked: np.ndarray,
    m: float,
    tol: float,
    max_iter: int,
    n_threads: int,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """:func:`_run_starts` through :func:`gloam._kernels.fcm_run` (same iterates and stopping).

    ``centroids`` (s, c, d) holds the first centroids and is updated in place to
    those the final memberships were computed from; ``blocked`` (s, c * n), from
    :func:`_kernel_blocks` with the same ``n_threads``, holds the initial
    memberships and is overwritten.  Returns the final memberships (s, n, c),
    objectives, iterations and convergence per start.  Call inside
    :class:`_KernelThreads`.
    """
    n_starts, n_clusters, _ = centroids.shape
    n_samples = X.shape[0]
    chunk_rows, block_rows = _kernel_layout(n_samples, n_clusters, n_threads)
    objectives = np.empty(n_starts)
    n_iter = np.zeros(n_starts, dtype=np.int64)
    converged = np.zeros(n_starts, dtype=bool)
    memberships = np.empty((n_starts, n_samples, n_clusters))
    _kernels.fcm_run(
        _augmented_rows(X),
        centroids,
        blocked,
        m,
        tol,
        max_iter,
        _COINCIDENCE_RELATIVE,
        chunk_rows,
        block_rows,
        objectives,
        n_iter,
        converged,
    )
    _kernels.from_blocks(blocked, chunk_rows, block_rows, memberships)
    return memberships, objectives, n_iter, converged


def _initial_centroids(X: np.ndarray, initial: np.ndarray, m: float) -> np.ndarray:
    """Centroids (s, c, d) from memberships (s, n, c), one start at a time.

    Only one start's ``u^m`` (through the kernel's power, as accurate as
    ``np.power`` to about 1e-15) exists at a time, so the first centroids cost
    (n, c) of memory, not another (s, n, c) array.  Call inside
    :class:`_KernelThreads`.
    """
    data_with_ones = np.hstack([X, np.ones((X.shape[0], 1))])
    n_features = X.shape[1]
    centroids = np.empty((initial.shape[0], initial.shape[2], n_features))
    powered = np.empty(initial.shape[1:])
    for start, memberships in enumerate(initial):
        _kernels.powers(
            np.ascontiguousarray(memberships, dtype=np.float64).reshape(-1), m, powered.reshape(-1)
        )
        sums = powered.T @ data_with_ones
        centroids[start] = sums[:, :n_features] / sums[:, n_features:]
    return centroids


def _run_starts(
    X: np.ndarray,
    initial: np.ndarray,
    m: float,
    tol: float,
    max_iter: int,
    dtype: type,
    n_threads: int,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Iterate every start from its initial memberships (s, n, c); no input checks.

    Each start stops on its own as soon as its largest membership change is below
    ``tol``; the others go on, so every start's result is the one a single-start
    run from the same memberships gives.
    """
    n_starts, n_samples, n_clusters = initial.shape
    n_features = X.shape[1]
    rows = _augmented_rows(X)
    squared_norms = np.ascontiguousarray(rows[:, n_features])
    data_with_ones = rows[:, [*range(n_features), n_features + 1]]  # [X, 1]

    # Cluster-major working arrays (s, c, n); see _update_block.
    current = np.ascontiguousarray(initial.transpose(0, 2, 1), dtype=dtype)
    spare = np.empty_like(current)
    weighted = np.power(current, m, dtype=np.float64)  # u^m; reused for the distances
    row_objective = np.empty((n_starts, n_samples))
    row_change = np.empty((n_starts, n_samples))
    floor = np.zeros((n_starts, n_samples))
    centroids = np.empty((n_starts, n_clusters, n_features))
    objectives = np.full(n_starts, np.inf)
    n_iter = np.zeros(n_starts, dtype=np.int64)
    converged = np.zeros(n_starts, dtype=bool)
    active = np.arange(n_starts)

    with _BlockRunner(n_samples, n_clusters, n_threads) as runner:
        for iteration in range(1, max_iter + 1):
            every = active.size == n_starts
            selected = slice(None) if every else active
            # Centroids from u^m: one product gives the weighted sums and the weights.
            sums = np.matmul(weighted[selected], data_with_ones)
            centroids[selected] = sums[:, :, :n_features] / sums[:, :, n_features:]
            if every:
                _distances_cluster_major(rows, centroids, out=weighted)
            else:
                weighted[active] = _distances_cluster_major(rows, centroids[active])
            floor[selected] = _coincidence_floor(squared_norms, centroids[selected])
            # New memberships go to `spare`; `current` becomes scratch for the change.
            runner.run(active, weighted, floor, spare, current, row_objective, row_change, m)
            current, spare = spare, current
            if not every:
                # Finished starts keep their result in the other buffer: copy it back.
                finished_starts = np.setdiff1d(np.arange(n_starts), active)
                current[finished_starts] = spare[finished_starts]
            change = row_change[active].max(axis=1)
            objectives[active] = row_objective[active].sum(axis=1)
            n_iter[active] = iteration
            finished = change < tol
            converged[active[finished]] = True
            active = active[~finished]
            if active.size == 0:
                break
    del spare, weighted
    return centroids, _sample_major(current), objectives, n_iter, converged


# --------------------------------------------------------------------------------------------
# Public functions
# --------------------------------------------------------------------------------------------


def fuzzy_cmeans(
    X: np.ndarray,
    n_clusters: int,
    m: float = 2.0,
    *,
    n_starts: int = 1,
    tol: float = 1e-4,
    max_iter: int = 500,
    init: Init = "random",
    rng: int | np.random.Generator | None = None,
    initial_memberships: np.ndarray | None = None,
    precision: Precision = "fast",
    n_threads: int | None = None,
) -> MultiStartResult:
    """Fuzzy c-means from many starts at once; returns every start and the best.

    Parameters
    ----------
    X : ndarray of shape (n_genes, n_timepoints)
        Data to cluster, usually z-scored profiles.  Must be finite.
    n_clusters : int
        Number of clusters c, ``2 <= c < n_genes``.
    m : float, default 2.0
        Fuzzifier, ``m > 1``; m near 1 gives nearly crisp memberships.
    n_starts : int, default 1
        Random starts, all iterated together.
    tol : float, default 1e-4
        Stop a start when the largest absolute membership change between two
        iterations is below ``tol``.  ``0`` runs exactly ``max_iter`` iterations.
    max_iter : int, default 500
        Upper bound on iterations (centroid update + membership update).
    init : {"random", "kmeans++"}, default "random"
        Random memberships (flat Dirichlet rows) or k-means++ seeding of the
        centroids (Arthur & Vassilvitskii 2007) followed by their memberships.
    rng : int, numpy.random.Generator or None
        Seed or generator; the only source of randomness.
    initial_memberships : ndarray of shape (n_genes, c) or (n_starts, n_genes, c), optional
        Start from these memberships instead of ``init`` (rows summing to 1).
    precision : {"fast", "float64", "float32"}, default "fast"
        How the membership update is computed; matrix products, sums and
        results are float64 in every case.  ``"float64"``: NumPy element-wise
        float64 (the reference path).  ``"float32"``: NumPy with a float32
        element-wise part; memberships agree with float64 to about 1e-6.
        ``"fast"``: one compiled kernel per iteration (needs numba, the
        ``fast`` extra) with float64-accurate vectorised ``ln``/``exp``;
        memberships agree with ``"float64"`` to about 1e-13.  Without numba
        ``"fast"`` falls back to ``"float64"``.
    n_threads : int, optional
        Threads for the membership update.  Default: ``GLOAM_NUM_THREADS`` or
        ``OMP_NUM_THREADS`` when set, else the CPUs this process may use.

    Returns
    -------
    MultiStartResult

    Raises
    ------
    GloamError
        For an invalid parameter or non-finite data.

    Warns
    -----
    ConvergenceWarning
        When a start stops at ``max_iter`` before reaching ``tol``.

    References
    ----------
    Bezdek, J. C. (1981). *Pattern Recognition with Fuzzy Objective Function Algorithms*.
    """
    X = _check_data(X)
    n_samples = X.shape[0]
    if initial_memberships is not None:
        initial_array = np.asarray(initial_memberships)
        n_starts = 1 if initial_array.ndim == 2 else int(initial_array.shape[0])
    _check_parameters(n_samples, n_clusters, m, tol, max_iter, n_starts, init, precision)
    m = float(m)
    compiled = precision == "fast" and _kernels is not None
    dtype = None if compiled else _ELEMENTWISE_DTYPES[precision]
    threads = n_threads or _default_threads()
    generator = np.random.default_rng(rng)
    if initial_memberships is None:
        initial = _INITIALISERS[init](X, int(n_clusters), int(n_starts), m, generator, dtype)
    else:
        initial = _check_initial_memberships(initial_memberships, n_starts, n_samples, n_clusters)
    if compiled:
        with _KernelThreads(threads):
            centroids = _initial_centroids(X, initial, m)
            # Rebinding `initial` lets an array made here go before the iterations start.
            initial = _kernel_blocks(initial, threads)
            memberships, objectives, n_iter, converged = _compiled_run(
                X, centroids, initial, m, float(tol), int(max_iter), threads
            )
        del initial
    else:
        centroids, memberships, objectives, n_iter, converged = _run_starts(
            X, initial, m, float(tol), int(max_iter), dtype, threads
        )
    if tol > 0 and not converged.all():
        warnings.warn(
            f"{int((~converged).sum())} of {n_starts} fuzzy c-means start(s) stopped at "
            f"max_iter={max_iter} with a membership change still above tol={tol}; "
            "raise max_iter or tol",
            ConvergenceWarning,
            stacklevel=2,
        )
    return MultiStartResult(
        centroids=centroids,
        memberships=memberships,
        objectives=objectives,
        n_iter=n_iter,
        converged=converged,
        m=m,
        best_index=int(np.argmin(objectives)),
    )


def predict_memberships(
    X: np.ndarray, centroids: np.ndarray, m: float, *, precision: Precision = "float64"
) -> np.ndarray:
    """Memberships of new rows in existing clusters (the membership update alone).

    Use it to place genes that were filtered out before clustering, or another
    experiment's genes, on the clusters found.

    Parameters
    ----------
    X : ndarray of shape (n_genes, n_timepoints)
        Rows prepared the same way as the clustered data (same columns, z-scored).
    centroids : ndarray of shape (n_clusters, n_timepoints)
    m : float
        The fuzzifier the centroids were found with.

    Returns
    -------
    ndarray of shape (n_genes, n_clusters)
        Rows sum to 1.
    """
    X = np.asarray(X, dtype=np.float64)
    if X.ndim != 2 or not np.isfinite(X).all():
        raise GloamError("X must be a finite 2-D array of shape (n_genes, n_timepoints)")
    centroids = np.asarray(centroids, dtype=np.float64)
    if centroids.ndim != 2 or centroids.shape[1] != X.shape[1] or centroids.shape[0] < 1:
        raise GloamError(
            f"centroids must have shape (n_clusters, {X.shape[1]}) to match X; "
            f"got {centroids.shape}"
        )
    if not np.isfinite(centroids).all():
        raise GloamError("centroids must be finite")
    if not (math.isfinite(m) and m > 1):
        raise GloamError(f"the fuzzifier m must be a finite number > 1; got {m!r}")
    if precision not in _ELEMENTWISE_DTYPES:
        raise GloamError(
            f"precision must be one of {sorted(_ELEMENTWISE_DTYPES)}; got {precision!r}"
        )
    dtype = None if precision == "fast" and _kernels is not None else _ELEMENTWISE_DTYPES[precision]
    stacked = _memberships_for_centroids(
        np.ascontiguousarray(X), centroids[np.newaxis], float(m), dtype
    )
    return stacked[0]


def objective(X: np.ndarray, centroids: np.ndarray, memberships: np.ndarray, m: float) -> float:
    """The fuzzy c-means objective ``J_m = sum_ik u_ik^m ||x_i - v_k||^2`` (Bezdek 1981).

    Parameters
    ----------
    X : ndarray of shape (n_genes, n_timepoints)
    centroids : ndarray of shape (n_clusters, n_timepoints)
    memberships : ndarray of shape (n_genes, n_clusters)
    m : float
    """
    distances = squared_distances(X, centroids)
    return float(np.sum(np.asarray(memberships, dtype=np.float64) ** m * distances))
