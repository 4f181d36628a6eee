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
``fast`` extra): BLAS for the two products of each row block,
``r^(-p) = exp(-p ln r)`` with float64-accurate vectorised ``ln``/``exp``, and
the centroid sums accumulated as the memberships are made, so no
(n_starts, n_samples, n_clusters) array is written but the memberships, which
stay cluster-major until the end and are then turned into the result in place.
Threads run whole starts, not parts of one iteration, so they never wait for
each other within a start (a loaded machine cannot make more threads slower than
fewer) and the result does not depend on the number of threads.
Without numba, ``"fast"`` falls back to the float64 element-wise path, so it
keeps its accuracy everywhere.

Plain fuzzy c-means converges linearly, slowly near some optima (Bezdek et al. 1987).
By default the compiled iteration is accelerated by SQUAREM (Varadhan & Roland 2008):
every third membership pass is made at an extrapolation of the centroids, and kept only
if it does not raise the objective, so the fixed points and the stopping test stay those
of plain iteration (``acceleration="none"`` runs it).  :func:`warm_start_cmeans` runs the
same accelerated iteration from given centroids, with or without a noise class.
Starts that trail can be stopped early (``prune``): an Aitken forecast of each
start's final objective against the best current objective (see
:func:`fuzzy_cmeans`).

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
Aitken, A. C. (1926). On Bernoulli's numerical solution of algebraic equations.
*Proceedings of the Royal Society of Edinburgh* 46:289-305.
Varadhan, R. & Roland, C. (2008). Simple and globally convergent methods for accelerating
the convergence of any EM algorithm. *Scandinavian Journal of Statistics* 35(2):335-353.
Bezdek, J. C., Hathaway, R. J., Howard, R. E., Wilson, C. A. & Windham, M. P. (1987).
Local convergence analysis of a grouped variable version of coordinate descent.
*Journal of Optimization Theory and Applications* 54(3):471-477.
"""

from __future__ import annotations

import math
import os
import queue
import warnings
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import TYPE_CHECKING, Literal

import numpy as np
from threadpoolctl import ThreadpoolController

from gloam.errors import ConvergenceWarning, GloamError

if TYPE_CHECKING:
    from gloam.noise import NoisePartition

# The compiled kernel is optional (the ``fast`` extra installs numba).  The private switch
# GLOAM_DISABLE_NUMBA=1 runs the NumPy fallback with numba installed, to test that path.
_kernels = None
if os.environ.get("GLOAM_DISABLE_NUMBA", "") != "1":
    try:
        from gloam import _kernels
    except ImportError:  # pragma: no cover - exercised only without numba
        _kernels = None

__all__ = [
    "ACCELERATIONS",
    "PRUNE_MARGIN",
    "PRUNE_WINDOW",
    "FuzzyPartition",
    "MultiStartResult",
    "fuzzy_cmeans",
    "warm_start_cmeans",
    "predict_memberships",
    "squared_distances",
    "objective",
    "random_memberships",
    "kmeanspp_centroids",
]

Precision = Literal["fast", "float64", "float32"]
Init = Literal["random", "kmeans++"]
Acceleration = Literal["squarem", "none"]

_ELEMENTWISE_DTYPES: dict[str, type[np.floating]] = {
    # Used only when the compiled kernel is not available: "fast" keeps its float64 accuracy.
    "fast": np.float64,
    "float64": np.float64,
    "float32": np.float32,
}
#: Default relative margin of the pruning rule (``fuzzy_cmeans(prune=True)``).
PRUNE_MARGIN = 0.01
#: Default iterations between pruning checks (and between the objectives of the forecast).
PRUNE_WINDOW = 20
# Rows per block of the element-wise part: 2048 rows x 30 clusters x 8 bytes is ~0.5 MB per
# array, so the handful of arrays a block touches stays in a core's L2 cache.
_BLOCK_ROWS = 2048
# A squared distance at or below this multiple of the squared norms involved is rounding
# noise of the BLAS form ||x||^2 - 2 x.v + ||v||^2: the point coincides with the centroid.
_COINCIDENCE_RELATIVE = 64 * np.finfo(np.float64).eps
# The compiled kernel's noise memberships when there is no noise class (never read).
_NO_NOISE = np.empty(0)
#: How iterations are run: ``"squarem"`` (Varadhan & Roland 2008) or ``"none"`` (plain).
ACCELERATIONS = ("squarem", "none")


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
        Whether a stopping test was met (membership change below ``tol``, or the
        objective test ``objective_tol``).
    m : float
        The fuzzifier used.
    pruned : bool
        Whether the start was stopped because it trailed the best start (``prune``).
    """

    centroids: np.ndarray
    memberships: np.ndarray
    objective: float
    n_iter: int
    converged: bool
    m: float
    pruned: bool = False

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
        ``J_m`` of each start (of its last iteration); lower is better.
    n_iter : ndarray of shape (n_starts,), int
    converged : ndarray of shape (n_starts,), bool
        A stopping test was met; never True for a pruned start.
    m : float
    best_index : int
        Index of the start with the lowest objective (first one on ties).
    pruned : ndarray of shape (n_starts,), bool
        Starts stopped because they trailed the best one (``fuzzy_cmeans(prune=True)``);
        their memberships, centroids and objective are those of their last iteration.
        Default (None): no start pruned.  When combining or subsetting results, combine
        or subset this array with the others.
    """

    centroids: np.ndarray
    memberships: np.ndarray
    objectives: np.ndarray
    n_iter: np.ndarray
    converged: np.ndarray
    m: float
    best_index: int
    pruned: np.ndarray | None = None

    def __post_init__(self) -> None:
        if self.pruned is None:
            object.__setattr__(self, "pruned", np.zeros(self.objectives.shape[0], dtype=bool))

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
            pruned=bool(self.pruned[index]),
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


def _check_stopping(
    objective_tol: float, prune: bool, prune_margin: float, prune_window: int, n_threads
) -> None:
    if not (
        isinstance(objective_tol, int | float | np.floating)
        and math.isfinite(objective_tol)
        and 0 <= objective_tol < 1
    ):
        raise GloamError(f"objective_tol must be a number in [0, 1); got {objective_tol!r}")
    if not isinstance(prune, bool | np.bool_):
        raise GloamError(f"prune must be True or False; got {prune!r}")
    if not (
        isinstance(prune_margin, int | float | np.floating)
        and math.isfinite(prune_margin)
        and prune_margin > 0
    ):
        raise GloamError(f"prune_margin must be a finite number > 0; got {prune_margin!r}")
    if (
        isinstance(prune_window, bool)
        or not isinstance(prune_window, int | np.integer)
        or prune_window < 1
    ):
        raise GloamError(f"prune_window must be an integer >= 1; got {prune_window!r}")
    if n_threads is not None and (
        isinstance(n_threads, bool) or not isinstance(n_threads, int | np.integer) or n_threads < 1
    ):
        raise GloamError(f"n_threads must be an integer >= 1 or None; got {n_threads!r}")


def _check_acceleration(acceleration: str) -> None:
    if acceleration not in ACCELERATIONS:
        raise GloamError(f"acceleration must be one of {list(ACCELERATIONS)}; got {acceleration!r}")


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
    s, c, _ = centroids.shape
    n = X.shape[0]
    threads = max(1, n_threads or _default_threads())
    if dtype is None:
        rows = _augmented_rows(X)
        block_rows = _kernel_block_rows(c)
        centroids = np.ascontiguousarray(centroids, dtype=np.float64)
        memberships = np.empty((s, n, c))

        def one_start(index: int) -> None:
            blocked = np.zeros(c * n)
            _kernels.membership_pass(
                rows,
                centroids[index],
                blocked,
                m,
                block_rows,
                _COINCIDENCE_RELATIVE,
                np.empty((c, rows.shape[1])),
                np.inf,
                _NO_NOISE,
            )
            _kernels.from_blocks(blocked, block_rows, memberships[index])

        with _KernelThreads(threads) as pool:
            pool.map(one_start, range(s))
        return memberships
    rows = _augmented_rows(X)
    distances = _distances_cluster_major(rows, centroids)
    memberships = np.empty((s, c, n), dtype=dtype)
    scratch = np.empty((s, n))
    with _BlockRunner(n, c, threads) as runner:
        floor = _coincidence_floor(np.ascontiguousarray(rows[:, -2]), centroids)
        runner.run(range(s), distances, floor, memberships, None, scratch, scratch, m)
    return _sample_major(memberships)


def _kernel_block_rows(n_clusters: int) -> int:
    """Rows per cache block of the compiled kernel.

    A block's handful of (c, rows) float64 scratch arrays stays within a core's L2 cache.
    The layout depends on c only, never on the thread count, so results do not either.
    """
    return max(128, min(1024, 16384 // n_clusters))


class _KernelThreads:
    """Context: a pool of ``n_threads`` threads running whole starts, BLAS on one thread.

    Each task is one start (for a round of iterations, or to the end), so no thread
    waits for another inside a start: on a busy machine a descheduled thread only
    delays its own start while the other threads take the remaining starts.  Idle
    threads block on the pool's queue instead of spinning.  BLAS is limited to one
    thread because the kernel's products are small and run on every thread at once.
    The BLAS libraries are found once per process (a search costs about 0.5 ms),
    after importing the SciPy BLAS that numba's ``np.dot`` calls.
    """

    controller: ThreadpoolController | None = None

    def __init__(self, n_threads: int) -> None:
        self.n_threads = max(1, int(n_threads))
        self.executor: ThreadPoolExecutor | None = None

    def __enter__(self) -> _KernelThreads:
        if _KernelThreads.controller is None:
            import scipy.linalg.cython_blas  # noqa: F401  (loads the BLAS numba binds to)

            _KernelThreads.controller = ThreadpoolController()
        self.blas_limit = _KernelThreads.controller.limit(limits=1, user_api="blas")
        if self.n_threads > 1:
            self.executor = ThreadPoolExecutor(self.n_threads, thread_name_prefix="gloam-fcm")
        return self

    def __exit__(self, *exc: object) -> None:
        if self.executor is not None:
            self.executor.shutdown()
        self.blas_limit.restore_original_limits()

    def map(self, function, items) -> list:
        """``[function(item) for item in items]``, items spread over the threads (first come)."""
        items = list(items)
        if self.executor is None or len(items) < 2:
            return [function(item) for item in items]
        # list() re-raises here any exception raised in a worker.
        return list(self.executor.map(function, items))


@dataclass(frozen=True)
class _PruneRule:
    """When a start counts as trailing (see :func:`fuzzy_cmeans`, ``prune``)."""

    margin: float
    window: int


def _trailing_starts(
    trace: np.ndarray, iteration: int, candidates: np.ndarray, leader: float, rule: _PruneRule
) -> np.ndarray:
    """The ``candidates`` (start indices) whose forecast final objective trails ``leader``.

    ``trace`` (s, max_iter) holds ``J_m`` of iteration t at column t - 1; every
    candidate has run ``iteration`` iterations (t).  With w = ``rule.window`` and the
    decreases over the last three windows ``d1, d2, d3`` (``d3 = J_{t-w} - J_t``), the
    rest of a linearly converging sequence is the geometric series ``d3 q / (1 - q)``
    (Aitken's delta-squared extrapolation); ``q`` is the larger of the two observed
    window ratios ``d2 / d1`` and ``d3 / d2``, so a decrease that slows irregularly gets
    the longer tail.  A start whose decrease is not slowing (a ratio >= 1) gets no
    forecast and is kept; one that no longer decreases (``d3 <= 0``) is forecast at
    ``J_t``.  Returns a boolean mask over ``candidates``.
    """
    w = rule.window
    if iteration - 3 * w < 1 or candidates.size == 0:
        return np.zeros(candidates.size, dtype=bool)
    values = [trace[candidates, iteration - k * w - 1] for k in range(4)]  # J_t, J_{t-w}, ...
    now = values[0]
    d3 = values[1] - values[0]
    d2 = values[2] - values[1]
    d1 = values[3] - values[2]
    forecast = np.full(candidates.size, -np.inf)
    stalled = d3 <= 0
    forecast[stalled] = now[stalled]
    slowing = ~stalled & (d3 < d2) & (d2 < d1)
    q = np.maximum(d2[slowing] / d1[slowing], d3[slowing] / d2[slowing])
    forecast[slowing] = now[slowing] - d3[slowing] * q / (1.0 - q)
    return forecast > leader * (1.0 + rule.margin)


def _leader(trace: np.ndarray, n_iter: np.ndarray, pruned: np.ndarray) -> float:
    """Lowest current objective of the starts not pruned (an upper bound of the best's final)."""
    kept = np.flatnonzero(~pruned & (n_iter > 0))
    return float(trace[kept, n_iter[kept] - 1].min())


def _compiled_fit(
    X: np.ndarray,
    n_clusters: int,
    n_starts: int,
    m: float,
    *,
    init: str,
    generator: np.random.Generator,
    initial: np.ndarray | None,
    tol: float,
    objective_tol: float,
    max_iter: int,
    rule: _PruneRule | None,
    n_threads: int,
    accelerate: bool = False,
):
    """Every start through :func:`gloam._kernels.fcm_advance`, whole starts per thread.

    Memory: one (s, c * n) array holds every start's memberships in the kernel's block
    layout from the first draw to the end, and is turned into the (s, n, c) result in
    place, one start at a time; nothing else is larger than one start.  With
    ``accelerate`` each thread has one start's worth of scratch for the extrapolated
    pass (a start never needs it between two calls).
    """
    n_samples, n_features = X.shape
    c, s = n_clusters, n_starts
    rows = _augmented_rows(X)
    block_rows = _kernel_block_rows(c)
    # Zero pages cost no memory until written; each start's slab is filled below.
    blocked = np.zeros((s, c * n_samples))
    sums = np.empty((s, c, n_features + 2))
    centroids = np.empty((s, c, n_features))
    trace = np.full((s, max_iter), np.nan)
    n_iter = np.zeros(s, dtype=np.int64)
    converged = np.zeros(s, dtype=bool)
    pruned = np.zeros(s, dtype=bool)
    with _KernelThreads(n_threads) as pool:
        if initial is not None:
            for index in range(s):
                _kernels.to_blocks(initial[index], block_rows, blocked[index])
        elif init == "random":
            # The same draws, in the same order, as random_memberships(s, n, c).
            for index in range(s):
                draws = generator.standard_exponential((n_samples, c))
                draws /= draws.sum(axis=1, keepdims=True)
                _kernels.to_blocks(draws, block_rows, blocked[index])
        else:
            seeds = kmeanspp_centroids(X, c, s, rng=generator)
            pool.map(
                lambda index: _kernels.membership_pass(
                    rows,
                    seeds[index],
                    blocked[index],
                    m,
                    block_rows,
                    _COINCIDENCE_RELATIVE,
                    sums[index],
                    np.inf,
                    _NO_NOISE,
                ),
                range(s),
            )
        pool.map(
            lambda index: _kernels.weighted_sums(rows, blocked[index], m, block_rows, sums[index]),
            range(s),
        )
        active = np.arange(s)
        done = 0
        step = rule.window if rule is not None else max_iter
        squarem = _SquaremState(s, c, n_features, n_samples, pool.n_threads, accelerate)
        centroids[:] = 0.0
        while active.size:
            last = min(done + step, max_iter)

            def advance(index: int, first: int = done + 1, last: int = last):
                scratch = squarem.scratch.get()
                try:
                    return _kernels.fcm_advance(
                        rows,
                        sums[index],
                        centroids[index],
                        blocked[index],
                        _NO_NOISE,
                        m,
                        np.inf,
                        tol,
                        objective_tol,
                        first,
                        last,
                        block_rows,
                        _COINCIDENCE_RELATIVE,
                        trace[index],
                        accelerate,
                        squarem.anchor[index],
                        squarem.image[index],
                        scratch[0],
                        _NO_NOISE,
                        scratch[1],
                        squarem.state[index],
                    )
                finally:
                    squarem.scratch.put(scratch)

            for index, (reached, stopped) in zip(active, pool.map(advance, active), strict=True):
                n_iter[index] = reached
                converged[index] = stopped
            done = last
            active = active[~converged[active]]
            if done >= max_iter:
                break
            if rule is not None and active.size:
                trailing = _trailing_starts(
                    trace, done, active, _leader(trace, n_iter, pruned), rule
                )
                pruned[active[trailing]] = True
                active = active[~trailing]
        # In place, start by start: block layout (c * n) -> sample-major (n, c).
        memberships = blocked.reshape(s, n_samples, c)
        pool.map(
            lambda index: _kernels.from_blocks(
                blocked[index].copy(), block_rows, memberships[index]
            ),
            range(s),
        )
    objectives = trace[np.arange(s), n_iter - 1]
    return centroids, memberships, objectives, n_iter, converged, pruned


class _SquaremState:
    """Per-start SQUAREM state and per-thread scratch for :func:`gloam._kernels.fcm_advance`.

    Without acceleration the arrays are empty placeholders (the kernel never reads them).
    """

    def __init__(
        self,
        n_starts: int,
        n_clusters: int,
        n_features: int,
        n_samples: int,
        n_threads: int,
        accelerate: bool,
    ) -> None:
        shape = (n_starts, n_clusters, n_features) if accelerate else (n_starts, 0, 0)
        self.anchor = np.zeros(shape)
        self.image = np.zeros(shape)
        # Steplength bound (starts at 1: the first cycle is plain) and objective of V1.
        self.state = np.tile(np.array([1.0, np.inf]), (n_starts, 1))
        self.scratch: queue.SimpleQueue = queue.SimpleQueue()
        size = n_clusters * n_samples if accelerate else 0
        for _ in range(max(1, n_threads) if accelerate else 1):
            self.scratch.put((np.empty(size), np.empty((n_clusters, n_features + 2))))


def _run_starts(
    X: np.ndarray,
    initial: np.ndarray,
    m: float,
    tol: float,
    max_iter: int,
    dtype: type,
    n_threads: int,
    objective_tol: float = 0.0,
    rule: _PruneRule | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Iterate every start from its initial memberships (s, n, c); no input checks.

    Each start stops on its own as soon as a stopping test is met (or it is pruned);
    the others go on, so every start's result is the one a single-start run from the
    same memberships gives.
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
    trace = np.full((n_starts, max_iter), np.nan)
    n_iter = np.zeros(n_starts, dtype=np.int64)
    converged = np.zeros(n_starts, dtype=bool)
    pruned = np.zeros(n_starts, dtype=bool)
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
            values = row_objective[active].sum(axis=1)
            trace[active, iteration - 1] = values
            n_iter[active] = iteration
            finished = change < tol
            if objective_tol > 0 and iteration > 1:
                previous = trace[active, iteration - 2]
                finished |= previous - values <= objective_tol * values
            converged[active[finished]] = True
            active = active[~finished]
            if rule is not None and iteration % rule.window == 0 and active.size:
                trailing = _trailing_starts(
                    trace, iteration, active, _leader(trace, n_iter, pruned), rule
                )
                pruned[active[trailing]] = True
                active = active[~trailing]
            if active.size == 0:
                break
    del spare, weighted
    objectives = trace[np.arange(n_starts), n_iter - 1]
    return centroids, _sample_major(current), objectives, n_iter, converged, pruned


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
    objective_tol: float = 0.0,
    prune: bool = False,
    prune_margin: float = PRUNE_MARGIN,
    prune_window: int = PRUNE_WINDOW,
    acceleration: Acceleration = "squarem",
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
        iterations is below ``tol``.  ``0`` runs exactly ``max_iter`` iterations
        (unless ``objective_tol`` or ``prune`` stop a start).
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
        ``"fast"``: the compiled kernel (needs numba, the ``fast`` extra) with
        float64-accurate vectorised ``ln``/``exp``; memberships agree with
        ``"float64"`` to about 1e-13.  Without numba ``"fast"`` falls back to
        ``"float64"``.
    n_threads : int, optional
        Threads.  Default: ``GLOAM_NUM_THREADS`` or ``OMP_NUM_THREADS`` when set,
        else the CPUs this process may use.  With ``"fast"`` each thread runs whole
        starts (no thread waits for another inside a start, so a busy machine slows
        a run at most as much as it slows one thread), and the results are the same,
        bit for bit, for every thread count; a single start uses one thread.
    objective_tol : float, default 0.0
        Second stopping test (common practice; 0 turns it off): a start also stops,
        and counts as converged, when its objective fell by at most ``objective_tol``
        times its value in the last iteration, ``J_{t-1} - J_t <= objective_tol J_t``.
        It changes where every start stops, the best one included.
    prune : bool, default False
        Stop starts that cannot catch up with the best one (the *leader*: the lowest
        current objective of the starts not pruned, which can only fall further).
        Every ``prune_window`` iterations w, from iteration 3w on, each running start's
        final objective is forecast by Aitken's delta-squared extrapolation (Aitken
        1926; the forecast of Böhning et al. 1994 and McNicholas et al. 2010 for
        stopping EM) applied to its objectives every w iterations: with the decreases
        over the last three windows ``d1, d2, d3``, the forecast is
        ``J_t - d3 q / (1 - q)`` with ``q = max(d2 / d1, d3 / d2)`` (the slower of the two
        observed rates, the cautious choice).  A start whose forecast is above
        ``(1 + prune_margin)`` times the leader's current objective is pruned; a start
        whose decrease is not slowing (a ratio >= 1) is never pruned, and one that
        stopped decreasing is forecast at ``J_t``.  Pruning only stops starts; it
        changes no number of the starts that go on, so the best start's result is the
        same, bit for bit, as without pruning unless the best start itself trailed by
        more than the margin at a check and was forecast not to catch up (a heuristic
        risk: the forecast assumes linear convergence).  Pruned starts are flagged in
        ``MultiStartResult.pruned``, keep the memberships, centroids and objective of
        their last iteration and are never ``converged``; count them as not at the
        optimum.
    prune_margin : float, default PRUNE_MARGIN
        Relative margin of the pruning rule, ``> 0``.  Far above the tolerance that
        decides whether two starts reached the same optimum (1e-6), so a start still
        heading for the best optimum is kept while its forecast is within the margin.
    prune_window : int, default PRUNE_WINDOW
        Iterations w between pruning checks and between the three objectives of the
        forecast, ``>= 1``.  With ``"fast"`` and several threads the threads meet only
        at these checks.
    acceleration : {"squarem", "none"}, default "squarem"
        ``"squarem"``: the compiled iteration (``precision="fast"``) runs in cycles of
        three membership passes, two plain ones and one at the SQUAREM extrapolation of
        the centroids (Varadhan & Roland 2008, steplength S3), kept only when it does not
        raise the objective; it reaches the same fixed points as plain iteration in far
        fewer passes where plain fuzzy c-means converges slowly (linear convergence,
        Bezdek et al. 1987).  Iterations count membership passes, and the stopping tests
        look only at plain passes, so ``tol`` keeps its meaning.  ``"none"``: plain
        iteration.  The NumPy paths (``"float64"``, ``"float32"``, or ``"fast"`` without
        numba) always iterate plainly.

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
        When a start that was not pruned stops at ``max_iter`` before a stopping test.

    References
    ----------
    Bezdek, J. C. (1981). *Pattern Recognition with Fuzzy Objective Function Algorithms*.
    Aitken, A. C. (1926). On Bernoulli's numerical solution of algebraic equations.
    *Proceedings of the Royal Society of Edinburgh* 46:289-305.
    Böhning, D., Dietz, E., Schaub, R., Schlattmann, P. & Lindsay, B. G. (1994). The
    distribution of the likelihood ratio for mixtures of densities from the one-parameter
    exponential family. *Annals of the Institute of Statistical Mathematics* 46(2):373-388.
    McNicholas, P. D., Murphy, T. B., McDaid, A. F. & Frost, D. (2010). Serial and parallel
    implementations of model-based clustering via parsimonious Gaussian mixture models.
    *Computational Statistics & Data Analysis* 54(3):711-723.
    Varadhan, R. & Roland, C. (2008). Simple and globally convergent methods for
    accelerating the convergence of any EM algorithm. *Scandinavian Journal of Statistics*
    35(2):335-353.
    Bezdek, J. C., Hathaway, R. J., Howard, R. E., Wilson, C. A. & Windham, M. P. (1987).
    Local convergence analysis of a grouped variable version of coordinate descent.
    *Journal of Optimization Theory and Applications* 54(3):471-477.
    """
    X = _check_data(X)
    n_samples = X.shape[0]
    if initial_memberships is not None:
        initial_array = np.asarray(initial_memberships)
        n_starts = 1 if initial_array.ndim == 2 else int(initial_array.shape[0])
    _check_parameters(n_samples, n_clusters, m, tol, max_iter, n_starts, init, precision)
    _check_stopping(objective_tol, prune, prune_margin, prune_window, n_threads)
    _check_acceleration(acceleration)
    m = float(m)
    n_clusters, n_starts, max_iter = int(n_clusters), int(n_starts), int(max_iter)
    compiled = precision == "fast" and _kernels is not None
    dtype = None if compiled else _ELEMENTWISE_DTYPES[precision]
    threads = n_threads or _default_threads()
    rule = _PruneRule(float(prune_margin), int(prune_window)) if prune else None
    generator = np.random.default_rng(rng)
    initial = None
    if initial_memberships is not None:
        initial = _check_initial_memberships(initial_memberships, n_starts, n_samples, n_clusters)
    if compiled:
        centroids, memberships, objectives, n_iter, converged, pruned = _compiled_fit(
            X,
            n_clusters,
            n_starts,
            m,
            init=init,
            generator=generator,
            initial=initial,
            tol=float(tol),
            objective_tol=float(objective_tol),
            max_iter=max_iter,
            rule=rule,
            n_threads=threads,
            accelerate=acceleration == "squarem",
        )
    else:
        if initial is None:
            initial = _INITIALISERS[init](X, n_clusters, n_starts, m, generator, dtype)
        centroids, memberships, objectives, n_iter, converged, pruned = _run_starts(
            X, initial, m, float(tol), max_iter, dtype, threads, float(objective_tol), rule
        )
    del initial
    stopped_early = ~converged & ~pruned
    if (tol > 0 or objective_tol > 0) and stopped_early.any():
        warnings.warn(
            f"{int(stopped_early.sum())} of {n_starts} fuzzy c-means start(s) stopped at "
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
        pruned=pruned,
    )


def warm_start_cmeans(
    X: np.ndarray,
    initial_centroids: np.ndarray,
    m: float,
    *,
    noise_distance: float = math.inf,
    tol: float = 1e-4,
    max_iter: int = 300,
    acceleration: Acceleration = "squarem",
    precision: Precision = "fast",
) -> NoisePartition:
    """Fuzzy c-means, with or without a noise class, from given centroids (one start).

    The same iteration as :func:`gloam.noise.noise_cmeans` (the first memberships are
    those of ``initial_centroids``; then centroids from memberships and memberships from
    centroids until no membership, noise included, changes by ``tol`` or more), run in
    the compiled kernel and, by default, accelerated by SQUAREM (Varadhan & Roland 2008;
    see ``acceleration`` in :func:`fuzzy_cmeans`).  The safeguard compares the noise
    clustering objective ``J = sum_ik u_ik^m D_ik + sum_i u_i0^m delta^2`` (Davé 1991),
    which the plain updates never raise, so the acceleration is valid with the noise
    class as without it.  Use it to refine a consensus or to cluster resampled data
    again from known centroids.

    Parameters
    ----------
    X : ndarray of shape (n_genes, n_columns)
        Data to cluster, usually z-scored profiles.  Must be finite.
    initial_centroids : ndarray of shape (n_clusters, n_columns)
        Starting centroids; ``n_clusters >= 1``.
    m : float
        Fuzzifier, ``m > 1``.
    noise_distance : float, default inf
        ``delta^2`` of the noise class (squared units of ``X``), > 0; ``inf``: none.
    tol : float, default 1e-4
        Threshold on the largest membership change of a plain iteration; 0 runs
        ``max_iter`` iterations.
    max_iter : int, default 300
        Upper bound on iterations (membership passes), >= 1.
    acceleration : {"squarem", "none"}, default "squarem"
    precision : {"fast", "float64", "float32"}, default "fast"
        ``"fast"`` runs the compiled kernel (needs numba); otherwise, or without numba,
        the plain NumPy iteration of :func:`gloam.noise.noise_cmeans` is used (no
        acceleration).

    Returns
    -------
    gloam.noise.NoisePartition
        Centroids (n_clusters, n_columns), memberships (n_genes, n_clusters), noise
        memberships (n_genes,) (zeros without a noise class), the objective, iterations
        and whether ``tol`` was met.

    Raises
    ------
    GloamError
        For invalid data, centroids or parameters.

    Warns
    -----
    ConvergenceWarning
        When ``max_iter`` is reached before the ``tol`` test (``tol > 0``).

    References
    ----------
    Davé, R. N. (1991). Characterization and detection of noise in clustering. *Pattern
    Recognition Letters* 12:657-664.
    Varadhan, R. & Roland, C. (2008). *Scandinavian Journal of Statistics* 35:335-353.
    """
    from gloam import noise as noise_module

    X = _check_data(X, min_rows=1)
    centroids = noise_module._check_centroids(initial_centroids, X.shape[1])
    m = noise_module._check_m(m)
    delta2 = noise_module._check_noise_distance(noise_distance)
    noise_module._check_stopping(tol, max_iter)
    _check_acceleration(acceleration)
    if precision not in _ELEMENTWISE_DTYPES:
        raise GloamError(
            f"precision must be one of {sorted(_ELEMENTWISE_DTYPES)}; got {precision!r}"
        )
    if precision != "fast" or _kernels is None:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ConvergenceWarning)
            partition = noise_module.noise_cmeans(
                X, centroids, m, noise_distance=delta2, tol=tol, max_iter=int(max_iter)
            )
    else:
        partition = _compiled_warm_start(
            X, centroids, m, delta2, float(tol), int(max_iter), acceleration == "squarem"
        )
    if tol > 0 and not partition.converged:
        warnings.warn(
            f"fuzzy c-means from given centroids stopped at max_iter={max_iter} with a "
            f"membership change still above tol={tol}; raise max_iter or tol",
            ConvergenceWarning,
            stacklevel=2,
        )
    return partition


def _compiled_warm_start(
    X: np.ndarray,
    centroids: np.ndarray,
    m: float,
    delta2: float,
    tol: float,
    max_iter: int,
    accelerate: bool,
) -> NoisePartition:
    """One start from ``centroids`` through the compiled kernel; no input checks."""
    from gloam.noise import NoisePartition

    n_samples, n_features = X.shape
    c = centroids.shape[0]
    rows = _augmented_rows(X)
    block_rows = _kernel_block_rows(c)
    blocked = np.zeros(c * n_samples)
    with_noise = delta2 < math.inf
    noise = np.zeros(n_samples) if with_noise else _NO_NOISE
    sums = np.empty((c, n_features + 2))
    centroids = np.ascontiguousarray(centroids, dtype=np.float64).copy()
    trace = np.full(max_iter, np.nan)
    squarem = _SquaremState(1, c, n_features, n_samples, 1, accelerate)
    scratch = squarem.scratch.get()
    with _KernelThreads(1):
        _kernels.membership_pass(
            rows, centroids, blocked, m, block_rows, _COINCIDENCE_RELATIVE, sums, delta2, noise
        )
        n_iter, converged = _kernels.fcm_advance(
            rows,
            sums,
            centroids,
            blocked,
            noise,
            m,
            delta2,
            tol,
            0.0,
            1,
            max_iter,
            block_rows,
            _COINCIDENCE_RELATIVE,
            trace,
            accelerate,
            squarem.anchor[0],
            squarem.image[0],
            scratch[0],
            np.empty(n_samples if accelerate and with_noise else 0),
            scratch[1],
            squarem.state[0],
        )
    memberships = np.empty((n_samples, c))
    _kernels.from_blocks(blocked, block_rows, memberships)
    return NoisePartition(
        centroids=centroids,
        memberships=memberships,
        noise=noise if with_noise else np.zeros(n_samples),
        noise_distance=delta2,
        objective=float(trace[n_iter - 1]),
        n_iter=int(n_iter),
        converged=bool(converged),
        m=m,
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
