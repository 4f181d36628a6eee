"""Specification of noise clustering (gloam.noise).

External references used here:
- Davé, R. N. (1991). Characterization and detection of noise in clustering. *Pattern
  Recognition Letters* 12:657-664: the membership, centroid and objective equations, the
  constraint that cluster and noise memberships sum to 1, the data-based noise distance
  ``delta^2 = lambda * mean D``, and the purpose of the noise class (outliers go to it);
- Bezdek (1981), *Pattern Recognition with Fuzzy Objective Function Algorithms*: the
  alternating optimisation never increases the objective;
- scikit-fuzzy's ``cmeans`` (PyPI reference implementation, used only in tests) for the
  limit ``delta -> inf`` (plain fuzzy c-means);
- scipy's ``cdist`` (``sqeuclidean``) for squared distances computed independently;
- the definition of the sample SD (ddof = 1): a z-scored row of n values has squared norm
  n - 1.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import skfuzzy
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy.spatial.distance import cdist

from gloam.errors import ConvergenceWarning, GloamError
from gloam.fcm import fuzzy_cmeans, predict_memberships
from gloam.noise import NoisePartition, noise_cmeans, noise_distance, noise_memberships


def _zscored(values: np.ndarray) -> np.ndarray:
    centred = values - values.mean(axis=1, keepdims=True)
    return centred / centred.std(axis=1, ddof=1, keepdims=True)


def _dave_memberships(X, centroids, m, delta2):
    """Davé's (1991) formula evaluated directly, without any rescaling."""
    D = cdist(X, centroids, "sqeuclidean")
    p = 1.0 / (m - 1.0)
    denominator = (D ** (-p)).sum(axis=1) + delta2 ** (-p)
    memberships = D ** (-p) / denominator[:, None]
    return memberships, 1.0 - memberships.sum(axis=1)


def _dave_objective(X, centroids, memberships, noise, m, delta2):
    """J = sum u^m D + sum u0^m delta^2 (Davé 1991)."""
    D = cdist(X, centroids, "sqeuclidean")
    return float((memberships**m * D).sum() + (noise**m * delta2).sum())


# --------------------------------------------------------------------------------------------
# Membership step
# --------------------------------------------------------------------------------------------


@settings(max_examples=60, deadline=None)
@given(
    seed=st.integers(0, 10_000),
    n_genes=st.integers(1, 40),
    n_columns=st.integers(1, 8),
    c=st.integers(1, 6),
    m=st.floats(1.01, 5.0),
    log_delta2=st.floats(-3.0, 6.0),
    infinite=st.booleans(),
    on_centroid=st.booleans(),
)
def test_cluster_and_noise_memberships_sum_to_one_and_lie_in_unit_interval(
    seed, n_genes, n_columns, c, m, log_delta2, infinite, on_centroid
):
    """Davé (1991): u_ik >= 0, u_i0 >= 0 and sum_k u_ik + u_i0 = 1 for every gene."""
    rng = np.random.default_rng(seed)
    X = rng.normal(scale=rng.choice([0.01, 1.0, 100.0]), size=(n_genes, n_columns))
    centroids = rng.normal(size=(c, n_columns))
    if on_centroid:
        X[0] = centroids[-1]
    delta2 = np.inf if infinite else 10.0**log_delta2
    memberships, noise = noise_memberships(X, centroids, m, delta2)
    assert memberships.shape == (n_genes, c) and noise.shape == (n_genes,)
    assert np.isfinite(memberships).all() and np.isfinite(noise).all()
    assert (memberships >= 0).all() and (memberships <= 1).all()
    assert (noise >= 0).all() and (noise <= 1).all()
    assert_allclose(memberships.sum(axis=1) + noise, 1.0, rtol=0, atol=1e-12)


@pytest.mark.parametrize("m", [1.3, 2.0, 3.5])
@pytest.mark.parametrize("delta2", [0.5, 4.0, 50.0])
def test_membership_step_matches_daves_formula_evaluated_directly(m, delta2):
    """Reference: Davé (1991), u_ik = D_ik^-p / (sum_j D_ij^-p + (delta^2)^-p), p = 1/(m-1),
    u_i0 = 1 - sum_k u_ik; distances by scipy cdist; agreement within 1e-12."""
    rng = np.random.default_rng(3)
    X = rng.normal(size=(12, 4))
    centroids = rng.normal(size=(3, 4))
    expected_u, expected_noise = _dave_memberships(X, centroids, m, delta2)
    memberships, noise = noise_memberships(X, centroids, m, delta2)
    assert_allclose(memberships, expected_u, rtol=0, atol=1e-12)
    assert_allclose(noise, expected_noise, rtol=0, atol=1e-12)


def test_m_close_to_one_does_not_overflow_and_gives_nearly_crisp_memberships():
    """For m -> 1 Davé's memberships become crisp: 1 for the nearest class (noise included)."""
    rng = np.random.default_rng(8)
    X = rng.normal(scale=1e3, size=(200, 5))
    centroids = rng.normal(scale=1e3, size=(4, 5))
    delta2 = float(np.median(cdist(X, centroids, "sqeuclidean")))
    memberships, noise = noise_memberships(X, centroids, 1.001, delta2)
    assert np.isfinite(memberships).all() and np.isfinite(noise).all()
    D = cdist(X, centroids, "sqeuclidean")
    nearest_is_noise = delta2 < D.min(axis=1)
    classes = np.column_stack([memberships, noise])
    expected = np.where(nearest_is_noise, 4, D.argmin(axis=1))
    assert_allclose(classes.sum(axis=1), 1.0, rtol=0, atol=1e-12)
    # Both kinds of gene occur, so the check covers the noise class too.
    assert 0 < nearest_is_noise.sum() < 200
    np.testing.assert_array_equal(classes.argmax(axis=1), expected)


def test_gene_on_a_centroid_gets_membership_one_there_and_no_nan():
    """Davé's formula has D^-p = inf at D = 0; the limit is membership 1 in that cluster and
    0 elsewhere and in the noise class. Two coinciding centroids share it evenly."""
    rng = np.random.default_rng(4)
    centroids = rng.normal(size=(3, 5))
    X = np.vstack([centroids[1], rng.normal(size=(4, 5))])
    memberships, noise = noise_memberships(X, centroids, 2.0, 1.0)
    assert_allclose(memberships[0], [0.0, 1.0, 0.0], rtol=0, atol=0)
    assert noise[0] == 0.0
    twin = np.vstack([centroids[0], centroids[0], centroids[2]])
    memberships, noise = noise_memberships(X[:1] * 0 + centroids[0], twin, 2.0, 1.0)
    assert_allclose(memberships[0], [0.5, 0.5, 0.0], rtol=0, atol=0)
    assert noise[0] == 0.0
    # Every gene equal to the only centroid: the iteration itself stays finite.
    same = np.tile(centroids[0], (6, 1))
    partition = noise_cmeans(same, centroids[:1], 1.5, noise_distance=2.0)
    assert np.isfinite(partition.memberships).all() and np.isfinite(partition.centroids).all()
    assert_allclose(partition.memberships, 1.0, rtol=0, atol=0)
    assert_allclose(partition.noise, 0.0, rtol=0, atol=0)
    assert partition.objective == pytest.approx(0.0, abs=1e-20)


# --------------------------------------------------------------------------------------------
# The iteration
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("m", [1.4, 2.0])
def test_infinite_noise_distance_is_plain_fuzzy_cmeans(m):
    """delta^2 = inf removes the noise class (Davé 1991), leaving fuzzy c-means. References:
    gloam.fcm.fuzzy_cmeans and scikit-fuzzy ``cmeans`` from the memberships of the same
    starting centroids, same number of iterations; agreement within 1e-10."""
    rng = np.random.default_rng(11)
    X = rng.normal(size=(150, 5))
    start = X[[0, 50, 100]]
    iterations = 30
    ours = noise_cmeans(X, start, m, noise_distance=np.inf, tol=0, max_iter=iterations)
    initial = predict_memberships(X, start, m)
    engine = fuzzy_cmeans(
        X, 3, m, initial_memberships=initial, tol=0, max_iter=iterations, precision="float64"
    )
    reference_v, reference_u, *_ = skfuzzy.cmeans(
        X.T, 3, m, error=0, maxiter=iterations, init=initial.T.copy()
    )
    assert ours.n_iter == iterations
    assert_allclose(ours.noise, 0.0, rtol=0, atol=0)
    assert_allclose(ours.memberships, engine.memberships[0], rtol=0, atol=1e-10)
    assert_allclose(ours.centroids, engine.centroids[0], rtol=0, atol=1e-10)
    assert ours.objective == pytest.approx(engine.objectives[0], rel=1e-10)
    assert_allclose(ours.memberships, reference_u.T, rtol=0, atol=1e-10)
    assert_allclose(ours.centroids, reference_v, rtol=0, atol=1e-10)


def test_large_noise_distance_approaches_fuzzy_cmeans():
    """The noise term (delta^2)^-p vanishes as delta -> inf (Davé 1991): at m = 2 and
    delta^2 = 1e12 the noise membership is below 1e-9 and the memberships are within 1e-8
    of scikit-fuzzy ``cmeans`` from the same start."""
    rng = np.random.default_rng(12)
    X = rng.normal(size=(120, 4))
    start = X[[0, 40, 80, 119]]
    initial = predict_memberships(X, start, 2.0)
    ours = noise_cmeans(X, start, 2.0, noise_distance=1e12, tol=0, max_iter=20)
    _, reference_u, *_ = skfuzzy.cmeans(X.T, 4, 2.0, error=0, maxiter=20, init=initial.T.copy())
    assert ours.noise.max() < 1e-9
    assert_allclose(ours.memberships, reference_u.T, rtol=0, atol=1e-8)


@pytest.mark.parametrize(("m", "delta2"), [(1.3, 3.0), (2.0, 8.0), (2.0, 1.0), (3.0, 20.0)])
def test_objective_never_increases_over_iterations(m, delta2):
    """Alternating optimisation of Davé's objective (each step minimises J in one block of
    variables, Bezdek 1981; Davé 1991) gives a non-increasing J. Each run of k iterations
    from the same start is the k-th iterate; the reported J equals Davé's J recomputed
    from the returned memberships and centroids (scipy cdist)."""
    rng = np.random.default_rng(5)
    X = rng.normal(size=(80, 3))
    X[:5] += 12.0  # a far group that the noise class can take
    start = rng.normal(size=(3, 3))
    objectives = []
    for k in range(1, 26):
        part = noise_cmeans(X, start, m, noise_distance=delta2, tol=0, max_iter=k)
        direct = _dave_objective(X, part.centroids, part.memberships, part.noise, m, delta2)
        assert part.objective == pytest.approx(direct, rel=1e-10)
        objectives.append(part.objective)
    steps = np.diff(objectives)
    assert (steps <= 1e-12 * objectives[0]).all()
    assert objectives[-1] < objectives[0]


def test_converged_partition_is_a_fixed_point_of_daves_equations():
    """At convergence the memberships are Davé's formula for the returned centroids and the
    centroids are sum u^m x / sum u^m for the returned memberships (Davé 1991)."""
    rng = np.random.default_rng(6)
    X = rng.normal(size=(90, 4))
    m, delta2 = 1.8, 3.0
    part = noise_cmeans(X, X[:3], m, noise_distance=delta2, tol=1e-12, max_iter=5000)
    assert part.converged
    expected_u, expected_noise = _dave_memberships(X, part.centroids, m, delta2)
    assert_allclose(part.memberships, expected_u, rtol=0, atol=1e-12)
    assert_allclose(part.noise, expected_noise, rtol=0, atol=1e-12)
    weights = part.memberships**m
    assert_allclose(
        part.centroids, (weights.T @ X) / weights.sum(axis=0)[:, None], rtol=0, atol=1e-9
    )


def test_outlier_goes_to_the_noise_class_and_cluster_points_do_not():
    """Davé (1991): points far from every prototype take the noise class, points of the
    clusters keep little noise membership. Noise distance by Davé's rule lambda * mean D
    with lambda = 1."""
    rng = np.random.default_rng(7)
    centres = np.array([[0.0, 0.0], [10.0, 0.0], [0.0, 10.0]])
    X = np.vstack([centre + rng.normal(scale=0.5, size=(40, 2)) for centre in centres])
    X = np.vstack([X, [[60.0, 60.0]]])
    delta2 = noise_distance(X, rule="dave", centroids=centres, scale=1.0)
    part = noise_cmeans(X, centres + 1.0, 2.0, noise_distance=delta2)
    assert part.converged
    outlier_noise, outlier_u = part.noise[-1], part.memberships[-1]
    assert outlier_noise > 0.9
    assert outlier_noise > outlier_u.max()
    assert part.noise[:-1].max() < 0.1
    # The outlier does not drag a centroid: they stay at the group means (within 0.2).
    assert np.abs(part.centroids - centres).max() < 0.2


def test_flat_profile_noise_distance_marks_a_response_unlike_any_centroid():
    """z-scored rows of n values have squared norm n - 1 (sample SD definition), so the
    default noise distance is n - 1. A peak profile, orthogonal to both ramp responses, is
    farther from each ramp centroid than from a flat line and its top class is noise."""
    rng = np.random.default_rng(9)
    n = 7
    ramp = np.linspace(-1.0, 1.0, n)
    rising = _zscored(ramp + rng.normal(scale=0.15, size=(50, n)))
    falling = _zscored(-ramp + rng.normal(scale=0.15, size=(50, n)))
    peak = _zscored((1.0 - ramp**2)[None, :])
    X = np.vstack([rising, falling, peak])
    delta2 = noise_distance(X)
    assert delta2 == pytest.approx(n - 1, rel=1e-12)
    part = noise_cmeans(X, X[[0, 50]], 1.5, noise_distance=delta2)
    assert part.noise[-1] > part.memberships[-1].max()
    assert np.median(part.noise[:-1]) < 0.05
    np.testing.assert_array_equal(part.memberships[:50].argmax(axis=1), 0)
    np.testing.assert_array_equal(part.memberships[50:100].argmax(axis=1), 1)


def test_one_cluster_with_noise_class():
    """c = 1 is allowed: one cluster plus the noise class (Davé 1991 treats c >= 1).
    The far group takes the noise class; the centroid is the u^m-weighted mean."""
    rng = np.random.default_rng(10)
    X = np.vstack([rng.normal(size=(60, 3)), rng.normal(size=(6, 3)) + 25.0])
    part = noise_cmeans(X, X[:1], 2.0, noise_distance=9.0, tol=1e-10, max_iter=2000)
    assert isinstance(part, NoisePartition) and part.n_clusters == 1
    assert part.memberships.shape == (66, 1)
    assert_allclose(part.memberships[:, 0] + part.noise, 1.0, rtol=0, atol=1e-12)
    assert (part.noise[60:] > 0.9).all()
    assert np.median(part.noise[:60]) < 0.3
    weights = part.memberships[:, 0] ** 2.0
    assert_allclose(part.centroids[0], weights @ X / weights.sum(), rtol=0, atol=1e-8)


def test_dave_rule_is_lambda_times_mean_squared_distance():
    """Davé (1991): delta^2 = lambda * sum_ik D_ik / (n c); distances by scipy cdist."""
    rng = np.random.default_rng(13)
    X = rng.normal(size=(30, 4))
    centroids = rng.normal(size=(3, 4))
    expected = 0.7 * cdist(X, centroids, "sqeuclidean").mean()
    assert noise_distance(X, rule="dave", centroids=centroids, scale=0.7) == pytest.approx(
        expected, rel=1e-12
    )
    # The flat-profile rule on data that are not z-scored: mean squared distance to zero.
    assert noise_distance(X, scale=2.0) == pytest.approx(2.0 * (X**2).sum(axis=1).mean())


def test_not_converging_warns_with_the_callers_location():
    X = np.random.default_rng(14).normal(size=(50, 3))
    with pytest.warns(ConvergenceWarning, match="max_iter=1") as record:
        part = noise_cmeans(X, X[:3], 2.0, noise_distance=2.0, tol=1e-12, max_iter=1)
    assert not part.converged and part.n_iter == 1
    assert record[0].filename == __file__
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        noise_cmeans(X, X[:3], 2.0, noise_distance=2.0, tol=0, max_iter=3)


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda X: noise_cmeans(X, X[:2], 1.0, noise_distance=1.0), "fuzzifier m"),
        (lambda X: noise_cmeans(X, X[:2], 2.0, noise_distance=0.0), "noise_distance"),
        (lambda X: noise_cmeans(X, X[:2], 2.0, noise_distance=float("nan")), "noise_distance"),
        (lambda X: noise_cmeans(X, X[:2, :2], 2.0, noise_distance=1.0), "centroids"),
        (lambda X: noise_cmeans(X, X[:0], 2.0, noise_distance=1.0), "centroids"),
        (lambda X: noise_cmeans(X, X[:2], 2.0, noise_distance=1.0, max_iter=0), "max_iter"),
        (lambda X: noise_cmeans(X, X[:2], 2.0, noise_distance=1.0, tol=-1), "tol"),
        (lambda X: noise_cmeans(X[:, :, None], X[:2], 2.0, noise_distance=1.0), "2-D"),
        (lambda X: noise_distance(X, rule="median"), "rule"),
        (lambda X: noise_distance(X, rule="dave"), "needs centroids"),
        (lambda X: noise_distance(X, scale=0), "scale"),
        (lambda X: noise_distance(np.zeros_like(X)), "reference profile"),
        (lambda X: noise_memberships(np.where(X > 1, np.nan, X), X[:2], 2.0, 1.0), "NaN"),
    ],
)
def test_user_mistakes_raise_one_line_gloam_errors(call, message):
    X = np.random.default_rng(15).normal(size=(20, 3))
    with pytest.raises(GloamError, match=message) as error:
        call(X)
    assert "\n" not in str(error.value)
