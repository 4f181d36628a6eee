"""Noise clustering: fuzzy c-means with a noise class for genes that fit no response.

Noise clustering (Davé 1991) adds to fuzzy c-means one extra class whose squared distance
to every gene is the same constant ``delta^2`` (the *noise distance*).  A gene that is no
closer to any centroid than ``delta^2`` puts most of its membership in the noise class
instead of being forced into a cluster.  With ``D_ik = ||x_i - v_k||^2`` and ``p = 1/(m-1)``:

* memberships ``u_ik = D_ik^(-p) / (sum_j D_ij^(-p) + (delta^2)^(-p))``;
* noise membership ``u_i0 = 1 - sum_k u_ik = (delta^2)^(-p) / (sum_j D_ij^(-p) + (delta^2)^(-p))``;
* centroids ``v_k = sum_i u_ik^m x_i / sum_i u_ik^m`` (the noise class has none);
* objective ``J = sum_ik u_ik^m D_ik + sum_i u_i0^m delta^2``, which the alternating
  updates never increase.

The membership step is plain fuzzy c-means over ``c + 1`` classes, the last one at distance
``delta^2`` from every gene, so it is computed in the row-minimum-scaled form of
:mod:`gloam.fcm`: with ``a_i = min(min_k D_ik, delta^2)`` every ratio ``D / a_i`` is at least
1, its power ``(D / a_i)^(-p)`` at most 1, and nothing overflows even for m close to 1.  The
row's share of the objective is ``a_i S_i^(1-m)`` with ``S_i`` the row's sum of those
powers (Hathaway & Bezdek 1995).  ``delta^2 = inf`` gives plain fuzzy c-means.

Choice of the noise distance
----------------------------
gloam clusters z-scored profiles (rows mean 0, SD 1 with ddof = 1), so every row has squared
norm ``n_columns - 1``: its squared distance to the flat (all-zero) profile.  The default
``delta^2 = n_columns - 1`` makes the noise prototype the flat profile: a gene is noise when
it is no closer to any response than to a flat line.  Davé's own data-based setting,
``delta^2 = lambda * mean_ik D_ik``, is offered too (:func:`noise_distance`).

References
----------
Davé, R. N. (1991). Characterization and detection of noise in clustering. *Pattern
Recognition Letters* 12(11):657-664.
Hathaway, R. J. & Bezdek, J. C. (1995). Optimization of clustering criteria by
reformulation. *IEEE Transactions on Fuzzy Systems* 3(2):241-245.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from gloam.errors import ConvergenceWarning, GloamError
from gloam.fcm import _check_data as check_engine_data
from gloam.fcm import squared_distances

__all__ = [
    "NoisePartition",
    "NOISE_RULES",
    "noise_distance",
    "noise_cmeans",
    "noise_memberships",
]

# A squared distance at or below this multiple of the squared norms involved is rounding noise
# of the BLAS form ||x||^2 - 2 x.v + ||v||^2: the gene sits on the centroid (as in gloam.fcm).
_COINCIDENCE_RELATIVE = 64 * np.finfo(np.float64).eps


@dataclass(frozen=True)
class NoisePartition:
    """One noise-clustering solution.

    Attributes
    ----------
    centroids : ndarray of shape (n_clusters, n_columns)
        Cluster centres, in the units of ``X`` (z-scores for prepared data).  They are the
        centroids the final memberships were computed from.
    memberships : ndarray of shape (n_genes, n_clusters)
        Cluster memberships in [0, 1].
    noise : ndarray of shape (n_genes,)
        Noise membership in [0, 1]; ``memberships.sum(axis=1) + noise`` is 1 (to rounding).
    noise_distance : float
        ``delta^2``, the squared distance of every gene to the noise class (squared z-score
        units for prepared data); ``inf`` means no noise class.
    objective : float
        ``J = sum_ik u_ik^m D_ik + sum_i u_i0^m delta^2`` for (memberships, centroids).
    n_iter : int
        Centroid-and-membership updates performed.
    converged : bool
        Whether the largest membership change (noise included) fell below ``tol``.
    m : float
        The fuzzifier used.
    """

    centroids: np.ndarray
    memberships: np.ndarray
    noise: np.ndarray
    noise_distance: float
    objective: float
    n_iter: int
    converged: bool
    m: float

    @property
    def n_clusters(self) -> int:
        """Number of clusters c (the noise class not counted)."""
        return int(self.centroids.shape[0])


# --------------------------------------------------------------------------------------------
# Validation (one place; each message names the parameter, the value and the allowed range)
# --------------------------------------------------------------------------------------------


def _check_data(X: np.ndarray) -> np.ndarray:
    # The engine's own check of the data (one place for its messages), one gene allowed.
    return check_engine_data(X, min_rows=1)


def _check_centroids(centroids: np.ndarray, n_columns: int) -> np.ndarray:
    array = np.asarray(centroids, dtype=np.float64)
    if array.ndim != 2 or array.shape[1] != n_columns or array.shape[0] < 1:
        raise GloamError(
            f"centroids must have shape (n_clusters, {n_columns}) with n_clusters >= 1 to match "
            f"X; got {array.shape}"
        )
    if not np.isfinite(array).all():
        raise GloamError("centroids must be finite; give the centroids of a finished clustering")
    return np.array(array)


def _check_m(m: float) -> float:
    if isinstance(m, bool) or not (
        isinstance(m, int | float | np.integer | np.floating) and math.isfinite(m) and m > 1
    ):
        raise GloamError(f"the fuzzifier m must be a finite number > 1; got {m!r}")
    return float(m)


def _check_stopping(tol: float, max_iter: int) -> None:
    """``tol`` a finite number >= 0 and ``max_iter`` an integer >= 1 (neither a bool)."""
    if isinstance(tol, bool) or not (
        isinstance(tol, int | float | np.integer | np.floating) and math.isfinite(tol) and tol >= 0
    ):
        raise GloamError(f"tol must be a finite number >= 0; got {tol!r}")
    if isinstance(max_iter, bool) or not isinstance(max_iter, int | np.integer) or max_iter < 1:
        raise GloamError(f"max_iter must be an integer >= 1; got {max_iter!r}")


def _check_noise_distance(value: float) -> float:
    if isinstance(value, bool) or not (
        isinstance(value, int | float | np.integer | np.floating) and value > 0
    ):
        raise GloamError(
            f"noise_distance must be a number > 0 (inf for no noise class); got {value!r}"
        )
    return float(value)


# --------------------------------------------------------------------------------------------
# Noise distance
# --------------------------------------------------------------------------------------------


def _flat_profile_distance(X: np.ndarray, centroids: np.ndarray | None) -> float:
    return float(np.einsum("ij,ij->i", X, X).mean())


def _dave_distance(X: np.ndarray, centroids: np.ndarray | None) -> float:
    if centroids is None:
        raise GloamError(
            'noise distance rule "dave" needs centroids; pass centroids=... (e.g. those of a '
            "fuzzy c-means run on the same data)"
        )
    return float(squared_distances(X, _check_centroids(centroids, X.shape[1])).mean())


#: Rules for the noise distance, by name (see :func:`noise_distance`).
NOISE_RULES: dict[str, Callable[[np.ndarray, np.ndarray | None], float]] = {
    "flat_profile": _flat_profile_distance,
    "dave": _dave_distance,
}


def noise_distance(
    X: np.ndarray,
    *,
    rule: str = "flat_profile",
    centroids: np.ndarray | None = None,
    scale: float = 1.0,
) -> float:
    """The noise distance ``delta^2`` from the data.

    Parameters
    ----------
    X : ndarray of shape (n_genes, n_columns)
        The data to be clustered, normally z-scored profiles.
    rule : {"flat_profile", "dave"}, default "flat_profile"
        ``"flat_profile"``: the mean squared row norm, i.e. the mean squared distance of the
        genes to the all-zero (flat) profile.  For z-scored rows (mean 0, SD 1 with ddof = 1)
        every row has squared norm ``n_columns - 1``, so this is exactly ``n_columns - 1``
        and the noise prototype is the flat profile; for other data it is still that mean
        squared distance to the zero profile.
        ``"dave"``: the mean squared distance of all genes to all ``centroids``,
        ``mean_ik D_ik`` (Davé 1991).
    centroids : ndarray of shape (n_clusters, n_columns), optional
        Needed by ``rule="dave"``; ignored by ``"flat_profile"``.
    scale : float, default 1.0
        Factor applied to either rule's value (Davé's lambda for ``"dave"``).  Larger
        values make fewer genes noise.

    Returns
    -------
    float
        ``delta^2`` in squared units of ``X`` (squared z-scores for prepared data), > 0.

    Raises
    ------
    GloamError
        For an unknown rule, a missing or mismatched ``centroids``, a ``scale`` that is not a
        finite number > 0, non-finite data, or data whose noise distance is 0 (all rows on
        the flat profile or on the centroids).

    References
    ----------
    Davé, R. N. (1991). *Pattern Recognition Letters* 12:657-664.
    """
    if rule not in NOISE_RULES:
        raise GloamError(f"noise distance rule must be one of {sorted(NOISE_RULES)}; got {rule!r}")
    if isinstance(scale, bool) or not (
        isinstance(scale, int | float | np.integer | np.floating)
        and math.isfinite(scale)
        and scale > 0
    ):
        raise GloamError(f"noise distance scale must be a finite number > 0; got {scale!r}")
    X = _check_data(X)
    value = float(scale) * NOISE_RULES[rule](X, centroids)
    if not value > 0:
        raise GloamError(
            f'noise distance (rule "{rule}") is {value}: every gene lies on the '
            "reference profile; cluster varying, z-scored profiles"
        )
    return value


# --------------------------------------------------------------------------------------------
# Numeric core (assumes validated float64 input)
# --------------------------------------------------------------------------------------------


def _coincidence_floor(X: np.ndarray, centroids: np.ndarray) -> np.ndarray:
    """(n_genes,) squared distance at or below which a gene counts as sitting on a centroid."""
    largest_centroid_norm = np.einsum("kj,kj->k", centroids, centroids).max()
    return _COINCIDENCE_RELATIVE * (np.einsum("ij,ij->i", X, X) + largest_centroid_norm + 1.0)


def _membership_step(
    distances: np.ndarray, delta2: float, m: float, floor: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Memberships from squared distances (n, c) and the noise distance.

    Returns the cluster memberships (n, c), the noise membership (n,), each gene's share of
    the objective (n,) and ``u^m`` of the cluster memberships (n, c), for the centroids.
    """
    closest = distances.min(axis=1)
    on_centroid = closest <= floor
    # a_i = min(min_k D_ik, delta^2): every ratio below is >= 1, its power <= 1.
    nearest = np.where(on_centroid, 1.0, np.minimum(closest, delta2))
    exponent = -1.0 / (m - 1.0)
    with np.errstate(divide="ignore", over="ignore", invalid="ignore", under="ignore"):
        weights = np.power(distances / nearest[:, np.newaxis], exponent)
        noise_weight = np.power(delta2 / nearest, exponent)  # 0 when delta2 is inf
        totals = weights.sum(axis=1) + noise_weight
        memberships = weights / totals[:, np.newaxis]
        noise = noise_weight / totals
        row_objective = nearest * totals ** (1.0 - m)
        # u^(m-1) = J_i / D_ik, so u^m needs no second power (see gloam.fcm).
        powered = memberships * (row_objective[:, np.newaxis] / distances)
    coinciding = np.flatnonzero(on_centroid)
    if coinciding.size:
        # Membership 1 split evenly between the centroids the gene sits on; no noise.
        hits = distances[coinciding] <= floor[coinciding, np.newaxis]
        shares = hits / hits.sum(axis=1, keepdims=True)
        memberships[coinciding] = shares
        noise[coinciding] = 0.0
        powered[coinciding] = shares**m
        row_objective[coinciding] = (powered[coinciding] * distances[coinciding]).sum(axis=1)
    return memberships, noise, row_objective, powered


def _centroid_step(X: np.ndarray, powered: np.ndarray, previous: np.ndarray) -> np.ndarray:
    """Centroids ``sum_i u_ik^m x_i / sum_i u_ik^m``; a cluster with no weight keeps its place."""
    weights = powered.sum(axis=0)
    sums = powered.T @ X
    has_weight = weights > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(has_weight[:, np.newaxis], sums / weights[:, np.newaxis], previous)


def _run(
    X: np.ndarray, centroids: np.ndarray, m: float, delta2: float, tol: float, max_iter: int
) -> NoisePartition:
    """Alternate the two steps from ``centroids`` (c, d); no input checks."""
    memberships, noise, row_objective, powered = _membership_step(
        squared_distances(X, centroids), delta2, m, _coincidence_floor(X, centroids)
    )
    converged = False
    n_iter = 0
    while n_iter < max_iter and not converged:
        n_iter += 1
        centroids = _centroid_step(X, powered, centroids)
        new_memberships, new_noise, row_objective, powered = _membership_step(
            squared_distances(X, centroids), delta2, m, _coincidence_floor(X, centroids)
        )
        change = max(
            float(np.abs(new_memberships - memberships).max()),
            float(np.abs(new_noise - noise).max()),
        )
        memberships, noise = new_memberships, new_noise
        converged = change < tol
    return NoisePartition(
        centroids=centroids,
        memberships=memberships,
        noise=noise,
        noise_distance=delta2,
        objective=float(row_objective.sum()),
        n_iter=n_iter,
        converged=converged,
        m=m,
    )


# --------------------------------------------------------------------------------------------
# Public functions
# --------------------------------------------------------------------------------------------


def noise_cmeans(
    X: np.ndarray,
    initial_centroids: np.ndarray,
    m: float,
    *,
    noise_distance: float,
    tol: float = 1e-4,
    max_iter: int = 300,
) -> NoisePartition:
    """Noise clustering (fuzzy c-means with a noise class), warm-started from centroids.

    The first memberships are those of ``initial_centroids``; each iteration then updates
    the centroids from the memberships and the memberships from the centroids, until the
    largest absolute change of any membership (noise included) is below ``tol``.

    Parameters
    ----------
    X : ndarray of shape (n_genes, n_columns)
        Data to cluster, usually z-scored profiles.  Must be finite.
    initial_centroids : ndarray of shape (n_clusters, n_columns)
        Starting centroids, e.g. the consensus of a fuzzy c-means run; ``n_clusters >= 1``
        (one cluster plus the noise class is allowed).
    m : float
        Fuzzifier, ``m > 1``.
    noise_distance : float
        ``delta^2`` (squared units of ``X``), > 0, e.g. from :func:`noise_distance`;
        ``inf`` gives plain fuzzy c-means (noise membership 0).
    tol : float, default 1e-4
        Convergence threshold on the largest membership change; 0 runs ``max_iter``
        iterations exactly (and never warns).
    max_iter : int, default 300
        Upper bound on iterations, >= 1.

    Returns
    -------
    NoisePartition

    Raises
    ------
    GloamError
        For invalid data, centroids or parameters.

    Warns
    -----
    ConvergenceWarning
        When ``max_iter`` is reached with a membership change still >= ``tol`` (``tol > 0``).

    References
    ----------
    Davé, R. N. (1991). Characterization and detection of noise in clustering. *Pattern
    Recognition Letters* 12:657-664.
    """
    X = _check_data(X)
    centroids = _check_centroids(initial_centroids, X.shape[1])
    m = _check_m(m)
    delta2 = _check_noise_distance(noise_distance)
    _check_stopping(tol, max_iter)
    partition = _run(X, centroids, m, delta2, float(tol), int(max_iter))
    if tol > 0 and not partition.converged:
        warnings.warn(
            f"noise clustering stopped at max_iter={max_iter} with a membership change still "
            f"above tol={tol}; raise max_iter or tol",
            ConvergenceWarning,
            stacklevel=2,
        )
    return partition


def noise_memberships(
    X: np.ndarray, centroids: np.ndarray, m: float, noise_distance: float
) -> tuple[np.ndarray, np.ndarray]:
    """Cluster and noise memberships of genes for given centroids (the membership step alone).

    Use it to place genes that were not clustered on clusters found with a noise class.

    Parameters
    ----------
    X : ndarray of shape (n_genes, n_columns)
        Rows prepared like the clustered data (same columns, z-scored).
    centroids : ndarray of shape (n_clusters, n_columns)
    m : float
        The fuzzifier the centroids were found with, > 1.
    noise_distance : float
        ``delta^2`` the centroids were found with, > 0 (``inf``: no noise class).

    Returns
    -------
    memberships : ndarray of shape (n_genes, n_clusters)
    noise : ndarray of shape (n_genes,)
        ``memberships.sum(axis=1) + noise`` is 1 (to rounding).

    Raises
    ------
    GloamError
        For invalid data, centroids or parameters.

    References
    ----------
    Davé, R. N. (1991). *Pattern Recognition Letters* 12:657-664.
    """
    X = _check_data(X)
    centroids = _check_centroids(centroids, X.shape[1])
    m = _check_m(m)
    delta2 = _check_noise_distance(noise_distance)
    memberships, noise, _, _ = _membership_step(
        squared_distances(X, centroids), delta2, m, _coincidence_floor(X, centroids)
    )
    return memberships, noise
