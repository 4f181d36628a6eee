"""Specification of the SQUAREM acceleration of fuzzy c-means (gloam.fcm, gloam._kernels).

External references used here:
- Bezdek (1981), *Pattern Recognition with Fuzzy Objective Function Algorithms*: the
  fixed-point equations of fuzzy c-means (memberships from distances, centroids as
  ``u^m``-weighted means) and the objective ``J_m``;
- Davé (1991), *Pattern Recognition Letters* 12:657-664: the same equations with a noise
  class at squared distance ``delta^2`` from every row, written out in this file;
- Varadhan & Roland (2008), *Scandinavian Journal of Statistics* 35:335-353: SQUAREM keeps
  the fixed points of the map it accelerates, and with the monotonicity safeguard the
  objective never rises;
- scikit-fuzzy's ``cmeans`` run to a tight tolerance (PyPI reference, used only in tests);
- scikit-learn's ``make_blobs`` and ``load_iris`` for data.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import skfuzzy
from numpy.testing import assert_allclose
from sklearn.datasets import load_iris, make_blobs

from gloam import fcm
from gloam.errors import ConvergenceWarning, GloamError
from gloam.fcm import fuzzy_cmeans, objective, random_memberships, warm_start_cmeans

TIGHT = {"tol": 1e-11, "max_iter": 20000}
# Without numba every path iterates plainly: the optimum checks still apply, "fewer passes"
# does not.
needs_kernel = pytest.mark.skipif(fcm._kernels is None, reason="SQUAREM runs in the kernel")


def _slow_data() -> np.ndarray:
    """Overlapping blobs (scikit-learn ``make_blobs``) on which plain fuzzy c-means converges
    slowly (linear convergence with a rate near 1)."""
    X, _ = make_blobs(n_samples=2000, centers=6, n_features=5, cluster_std=2.5, random_state=4)
    return X


def _dave_fixed_point(X, centroids, m, delta2):
    """Memberships, noise memberships and next centroids from Davé's (1991) equations,
    written directly: u_ik = D_ik^(-p) / (sum_j D_ij^(-p) + delta2^(-p)), p = 1 / (m - 1)."""
    D = ((X[:, None, :] - centroids[None, :, :]) ** 2).sum(axis=2)
    p = 1.0 / (m - 1.0)
    weights = D ** (-p)
    noise_weight = 0.0 if np.isinf(delta2) else delta2 ** (-p)
    total = weights.sum(axis=1) + noise_weight
    U = weights / total[:, None]
    noise = noise_weight / total
    W = U**m
    next_centroids = (W.T @ X) / W.sum(axis=0)[:, None]
    J = (W * D).sum() + (noise**m * delta2).sum() if noise_weight else (W * D).sum()
    return U, noise, next_centroids, J


@needs_kernel
@pytest.mark.parametrize("m", [1.3, 2.0])
def test_accelerated_starts_reach_the_optimum_of_plain_iteration(m):
    """Varadhan & Roland (2008): SQUAREM has the fixed points of the plain map.  From the same
    starts, both run to a tight tolerance agree on memberships, centroids and objective, and
    the accelerated run needs fewer membership passes."""
    X = _slow_data()
    starts = random_memberships(4, X.shape[0], 6, rng=np.random.default_rng(1))
    plain = fuzzy_cmeans(X, 6, m, initial_memberships=starts, acceleration="none", **TIGHT)
    fast = fuzzy_cmeans(X, 6, m, initial_memberships=starts, acceleration="squarem", **TIGHT)
    assert plain.converged.all() and fast.converged.all()
    same = np.isclose(plain.objectives, fast.objectives, rtol=1e-9)
    assert same.sum() >= 3  # a different local optimum from the same start is allowed
    for index in np.flatnonzero(same):
        assert_allclose(fast.memberships[index], plain.memberships[index], atol=1e-7)
        assert_allclose(fast.centroids[index], plain.centroids[index], atol=1e-6)
    # The best optimum is the same, and found with fewer passes.
    assert fast.objectives.min() <= plain.objectives.min() * (1 + 1e-12)
    assert fast.n_iter.sum() < plain.n_iter.sum()


def test_accelerated_optimum_equals_scikit_fuzzy_run_to_a_tight_tolerance():
    """Reference: scikit-fuzzy ``cmeans`` from the same memberships (error 1e-12), Fisher's
    iris (scikit-learn), c = 3, m = 2: same memberships within 1e-7."""
    X = load_iris().data
    starts = random_memberships(3, X.shape[0], 3, rng=np.random.default_rng(5))
    ours = fuzzy_cmeans(X, 3, 2.0, initial_memberships=starts, **TIGHT)
    for index in range(3):
        centroids, reference_u, *_ = skfuzzy.cmeans(
            X.T, 3, 2.0, error=1e-12, maxiter=20000, init=starts[index].T.copy()
        )
        assert_allclose(ours.memberships[index], reference_u.T, atol=1e-7)
        assert_allclose(ours.centroids[index], centroids, atol=1e-6)


def test_accelerated_result_is_a_fixed_point_of_bezdeks_equations():
    """Bezdek (1981): at convergence the memberships are those of the centroids and the
    centroids the u^m-weighted means; the reported objective is J_m of the returned pair."""
    X = _slow_data()
    result = fuzzy_cmeans(X, 5, 1.5, n_starts=3, rng=2, **TIGHT)
    for index in range(3):
        part = result.start(index)
        U, _, next_centroids, J = _dave_fixed_point(X, part.centroids, 1.5, np.inf)
        assert_allclose(part.memberships, U, atol=1e-9)
        assert_allclose(next_centroids, part.centroids, atol=1e-7)
        assert part.objective == pytest.approx(J, rel=1e-10)
        assert part.objective == pytest.approx(
            objective(X, part.centroids, part.memberships, 1.5), rel=1e-10
        )


def test_objective_of_accelerated_runs_never_rises_with_more_passes():
    """Varadhan & Roland (2008): with the safeguard the objective is monotone; runs of 1..40
    passes from one start (which also checks that an interrupted cycle leaves a consistent
    state) give non-increasing objectives, each equal to J_m of its returned pair."""
    X = _slow_data()[:600]
    U0 = random_memberships(1, 600, 6, rng=np.random.default_rng(8))[0]
    values = []
    for k in range(1, 41):
        run = fuzzy_cmeans(X, 6, 1.8, initial_memberships=U0, tol=0, max_iter=k)
        part = run.best()
        assert part.objective == pytest.approx(
            objective(X, part.centroids, part.memberships, 1.8), rel=1e-10
        )
        values.append(part.objective)
    assert np.all(np.diff(values) <= 1e-12 * values[0])


@needs_kernel
def test_objective_at_default_tolerance_is_at_least_as_good_as_plain():
    """At the default stopping test (tol 1e-4) the accelerated starts end at or below the
    objective of the plain starts (to 1e-9 relative) on data where plain iteration is slow."""
    X = _slow_data()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        plain = fuzzy_cmeans(X, 8, 1.4, n_starts=6, rng=3, init="kmeans++", acceleration="none")
        fast = fuzzy_cmeans(X, 8, 1.4, n_starts=6, rng=3, init="kmeans++")
    assert fast.objectives.min() <= plain.objectives.min() * (1 + 1e-9)
    assert fast.n_iter.sum() < plain.n_iter.sum()


@pytest.mark.parametrize("delta2", [3.0, 12.0])
def test_noise_class_optimum_is_a_fixed_point_of_daves_equations(delta2):
    """Davé (1991): from given centroids, the accelerated noise clustering converges to a
    point where memberships and noise memberships follow Davé's formula for the centroids
    and the centroids are the u^m-weighted means; the objective is Davé's J."""
    X = _slow_data() / 2.5
    centroids = X[np.random.default_rng(0).choice(X.shape[0], 5, replace=False)]
    result = warm_start_cmeans(X, centroids, 1.6, noise_distance=delta2, **TIGHT)
    assert result.converged
    U, noise, next_centroids, J = _dave_fixed_point(X, result.centroids, 1.6, delta2)
    assert_allclose(result.memberships, U, atol=1e-9)
    assert_allclose(result.noise, noise, atol=1e-9)
    assert_allclose(next_centroids, result.centroids, atol=1e-7)
    assert result.objective == pytest.approx(J, rel=1e-10)
    assert 0.01 < result.noise.mean() < 0.99  # the noise class is really in play


@needs_kernel
@pytest.mark.parametrize("delta2", [4.0, np.inf])
def test_noise_class_accelerated_and_plain_reach_the_same_optimum(delta2):
    """Varadhan & Roland (2008): same fixed point with and without SQUAREM, noise class
    included, in fewer passes; each plain pass never raises Davé's objective."""
    X = _slow_data() / 2.5
    centroids = X[:6]
    plain = warm_start_cmeans(
        X, centroids, 1.5, noise_distance=delta2, acceleration="none", **TIGHT
    )
    fast = warm_start_cmeans(X, centroids, 1.5, noise_distance=delta2, **TIGHT)
    assert plain.converged and fast.converged
    assert fast.objective == pytest.approx(plain.objective, rel=1e-10)
    assert_allclose(fast.memberships, plain.memberships, atol=1e-7)
    assert_allclose(fast.noise, plain.noise, atol=1e-7)
    assert fast.n_iter < plain.n_iter


def test_without_noise_class_warm_start_equals_scikit_fuzzy_from_the_same_centroids():
    """Reference: scikit-fuzzy ``cmeans`` started from the memberships of the given centroids
    (``cmeans_predict``), run to error 1e-12; iris, c = 3, m = 2."""
    X = load_iris().data
    centroids = X[[0, 60, 120]]
    start, *_ = skfuzzy.cmeans_predict(X.T, centroids, 2.0, error=1e-12, maxiter=1)
    reference_centroids, reference_u, *_ = skfuzzy.cmeans(
        X.T, 3, 2.0, error=1e-12, maxiter=20000, init=start
    )
    ours = warm_start_cmeans(X, centroids, 2.0, **TIGHT)
    assert_allclose(ours.memberships, reference_u.T, atol=1e-7)
    assert_allclose(ours.centroids, reference_centroids, atol=1e-6)
    assert np.all(ours.noise == 0.0)


def test_warm_start_rejects_bad_settings_with_one_clear_error():
    X = np.random.default_rng(0).normal(size=(30, 3))
    with pytest.raises(GloamError, match="acceleration must be one of"):
        warm_start_cmeans(X, X[:2], 2.0, acceleration="fast")
    with pytest.raises(GloamError, match="centroids must have shape"):
        warm_start_cmeans(X, X[:2, :2], 2.0)
    with pytest.raises(GloamError, match="noise_distance must be"):
        warm_start_cmeans(X, X[:2], 2.0, noise_distance=0.0)
