"""Specification of the test for cluster structure (gloam.structure).

Reference: Liu, Y., Hayes, D. N., Nobel, A. & Marron, J. S. (2008). Statistical significance
of clustering for high-dimension, low-sample size data (SigClust). Journal of the American
Statistical Association 103(483):1281-1293.  Reference libraries used only here:
scikit-learn (k-means) and scipy (normal distribution).
"""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest
from scipy.stats import norm
from sklearn.cluster import KMeans

from gloam.errors import GloamError
from gloam.structure import (
    DEFAULT_TEST_CLUSTERS,
    FCI_RESOLUTION,
    PAIR_COLUMNS,
    StructureTest,
    _calibrate_null,
    fuzzy_cluster_index,
    nearest_pair_separation,
    structure_test,
)

# Ten uneven sampling times (hours), as in a typical induction time course.
TIMES = np.array([0.0, 0.5, 1.0, 2.0, 4.0, 6.0, 9.0, 12.0, 24.0, 48.0])


def _zscore(X: np.ndarray) -> np.ndarray:
    # Written here independently of gloam: row mean 0, row SD 1 with ddof=1.
    centred = X - X.mean(axis=1, keepdims=True)
    return centred / centred.std(axis=1, ddof=1, keepdims=True)


def _smooth_covariance(length_scale: float = 4.0) -> np.ndarray:
    # Squared-exponential covariance over the sampling times: smooth temporal correlation.
    gap = TIMES[:, None] - TIMES[None, :]
    return np.exp(-0.5 * (gap / length_scale) ** 2)


def _smooth_gaussian(n: int, seed: int) -> np.ndarray:
    """Genes from ONE multivariate Gaussian with smooth temporal correlation, z-scored."""
    rng = np.random.default_rng(seed)
    draws = rng.multivariate_normal(np.zeros(TIMES.size), _smooth_covariance(), n, method="eigh")
    return _zscore(draws)


def _independent_noise(n: int, seed: int) -> np.ndarray:
    return _zscore(np.random.default_rng(seed).normal(size=(n, TIMES.size)))


def _sigmoid(centre: float, width: float) -> np.ndarray:
    return 1.0 / (1.0 + np.exp(-(TIMES - centre) / width))


# Five distinct smooth response shapes: immediate-early peak, sustained induction, sustained
# repression, delayed peak, late induction.
SHAPES = np.array(
    [
        np.exp(-0.5 * ((TIMES - 1.0) / 0.75) ** 2),
        _sigmoid(4.0, 1.0),
        -_sigmoid(2.0, 1.0),
        np.exp(-0.5 * ((TIMES - 12.0) / 4.0) ** 2),
        _sigmoid(24.0, 4.0),
    ]
)


def _response_shapes(n: int, n_shapes: int, noise: float, seed: int) -> np.ndarray:
    """Equal-sized groups of genes around ``n_shapes`` z-scored shapes, Gaussian noise of SD
    ``noise`` per time point (the shapes have SD 1), z-scored."""
    rng = np.random.default_rng(seed)
    shapes = _zscore(SHAPES[:n_shapes])
    return _zscore(shapes[np.arange(n) % n_shapes] + noise * rng.normal(size=(n, TIMES.size)))


# Evenly spaced times over two full days (every 4 h) for the daily rhythm: the cosine and sine
# profiles are then orthogonal, of equal norm, and orthogonal to the constant profile.
RHYTHM_TIMES = np.arange(0.0, 48.0, 4.0)


def _daily_rhythm(n: int, noise: float, seed: int) -> np.ndarray:
    """One continuous 24-h rhythm of amplitude 1 with phases spread uniformly, z-scored."""
    rng = np.random.default_rng(seed)
    phase = rng.uniform(0.0, 2.0 * np.pi, n)
    profiles = np.cos(2.0 * np.pi * RHYTHM_TIMES[None, :] / 24.0 - phase[:, None])
    return _zscore(profiles + noise * rng.normal(size=profiles.shape))


# --------------------------------------------------------------------------------------------
# The statistic against published values
# --------------------------------------------------------------------------------------------


def test_index_of_a_gaussian_matches_the_sigclust_two_means_index():
    """Liu et al. (2008): for a Gaussian with covariance eigenvalues lambda the 2-means
    cluster index is 1 - (2/pi) lambda_1 / sum(lambda) (the best split is the hyperplane
    through the mean orthogonal to the first principal axis; E|Z| = sqrt(2/pi)).  With
    m = 1.05 the fuzzy index is nearly crisp.  Tolerance 0.01: over 24 samples of 20,000
    points (3 spectra x 8 seeds) the largest deviation measured was 0.0055, using the
    sample eigenvalues.  The fuzzy optimum can only be lower than the crisp one (crisp
    memberships are feasible, u^m = u), checked against scikit-learn's k-means."""
    rng = np.random.default_rng(11)
    eigenvalues = np.array([4.0, 2.0, 1, 1, 1, 1, 1, 1, 1, 1])
    rotation = np.linalg.qr(rng.normal(size=(10, 10)))[0]
    X = (rng.normal(size=(20_000, 10)) * np.sqrt(eigenvalues)) @ rotation.T + 3.0
    sample_eigenvalues = np.linalg.eigvalsh(np.cov(X, rowvar=False))
    expected = 1.0 - (2.0 / np.pi) * sample_eigenvalues.max() / sample_eigenvalues.sum()

    index = fuzzy_cluster_index(X, 1.05, rng=0)

    assert index == pytest.approx(expected, abs=0.01)
    total = ((X - X.mean(axis=0)) ** 2).sum()
    kmeans_index = KMeans(2, n_init=3, random_state=0).fit(X).inertia_ / total
    assert index <= kmeans_index + 1e-9


def test_index_of_a_circle_tends_to_the_two_means_index_as_m_falls_to_one():
    """A circle of radius r split by a line through its centre: each half's centroid lies
    at 2r/pi, so the 2-means index is 1 - 4/pi^2 (elementary calculus; the 2-means index
    of Liu et al. 2008).  2,000 equally spaced points remove sampling noise.  The fuzzy
    index lies below it and approaches it as m -> 1 (measured gaps 1.6e-4 at m = 1.02 and
    1e-3 at m = 1.05)."""
    angle = 2.0 * np.pi * (np.arange(2000) + 0.5) / 2000
    circle = np.column_stack([np.cos(angle), np.sin(angle)])
    expected = 1.0 - 4.0 / np.pi**2

    near_crisp = fuzzy_cluster_index(circle, 1.02, rng=0)
    fuzzier = fuzzy_cluster_index(circle, 1.05, rng=0)

    assert near_crisp == pytest.approx(expected, abs=5e-4)
    assert fuzzier == pytest.approx(expected, abs=3e-3)
    assert fuzzier < near_crisp <= expected + 1e-6


def _yu_collapse_threshold(X: np.ndarray) -> float:
    # Yu, Cheng & Huang (2004), IEEE Trans. SMC-B 34:634 (from memory): the mean is a stable
    # fixed point of fuzzy c-means when m > 1 / (1 - 2 lambda_max(C_X)), with
    # C_X = (1/n) sum_i (x_i - mean)(x_i - mean)^T / ||x_i - mean||^2.
    centred = X - X.mean(axis=0)
    weights = 1.0 / np.einsum("ij,ij->i", centred, centred)
    leading = np.linalg.eigvalsh((centred * weights[:, None]).T @ centred / X.shape[0]).max()
    return math.inf if leading >= 0.5 else 1.0 / (1.0 - 2.0 * leading)


@pytest.mark.parametrize("m", [1.5, 2.0])
def test_index_equals_two_to_the_one_minus_m_when_fuzzy_cmeans_collapses(m):
    """Both centroids at the mean with memberships 1/2 give J_m = 2 * 2^-m * J_1 (Bezdek's
    objective), so the index is 2^(1-m) once fuzzy c-means finds no split: above the
    collapse point of Yu et al. (2004) for z-scored noise, not below it for smooth data."""
    noise = _independent_noise(600, seed=4)
    smooth = _smooth_gaussian(600, seed=4)
    assert m > _yu_collapse_threshold(noise)
    assert m < _yu_collapse_threshold(smooth)

    assert fuzzy_cluster_index(noise, m, rng=1) == pytest.approx(2.0 ** (1.0 - m), rel=1e-9)
    assert fuzzy_cluster_index(smooth, m, rng=1) < 2.0 ** (1.0 - m) - 0.01


# --------------------------------------------------------------------------------------------
# Null model
# --------------------------------------------------------------------------------------------


def test_calibrated_null_reproduces_the_data_moments_after_zscoring():
    """The null's defining property (module docstring, after Liu et al. 2008: a Gaussian
    with the data's covariance, here seen through the same z-scoring): fresh z-scored draws
    from the calibrated Gaussian have the data's column mean and covariance, to the Monte
    Carlo accuracy of the 50,000 calibration rows (measured over 5 seeds: covariance within
    1.4 % relative, mean within 0.017 in z-score units; tolerances 2.5 % and 0.03).  The
    uncalibrated Gaussian (the data's own mean and covariance) misses the covariance by more
    than 10 % because z-scoring flattens the spectrum; that is why the calibration is kept."""
    rng = np.random.default_rng(5)
    trend = 2.0 * np.log1p(TIMES) / np.log1p(48.0)  # a response shared by all genes
    X = _zscore(rng.multivariate_normal(trend, _smooth_covariance(), 2000, method="eigh"))
    data_mean = X.mean(axis=0)
    data_covariance = np.cov(X, rowvar=False, ddof=0)

    mean, root, steps, residual = _calibrate_null(X, np.random.default_rng(0))
    fresh = _zscore(mean + np.random.default_rng(99).standard_normal((200_000, 10)) @ root)

    def mismatch(Z):
        covariance_gap = np.cov(Z, rowvar=False, ddof=0) - data_covariance
        scale = np.linalg.norm(data_covariance)
        return np.linalg.norm(covariance_gap) / scale, np.linalg.norm(Z.mean(axis=0) - data_mean)

    covariance_error, mean_error = mismatch(fresh)
    assert 1 <= steps <= 10 and residual < 3e-3  # the module's calibration tolerance
    assert covariance_error < 0.025
    assert mean_error < 0.03

    values, vectors = np.linalg.eigh(data_covariance)
    plug_in_root = (vectors * np.sqrt(np.clip(values, 0, None))).T
    plug_in = _zscore(
        data_mean + np.random.default_rng(99).standard_normal((200_000, 10)) @ plug_in_root
    )
    assert mismatch(plug_in)[0] > 0.1


# --------------------------------------------------------------------------------------------
# Decisions
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("m", [1.5, 2.0])
@pytest.mark.parametrize("generator", [_smooth_gaussian, _independent_noise])
def test_structureless_genes_are_not_called_structured(generator, m, seed):
    """SigClust's null hypothesis (Liu et al. 2008): data from one Gaussian, here z-scored
    like the data, should not be called clustered at alpha = 0.01."""
    result = structure_test(generator(500, seed=100 + seed), m, rng=seed)
    assert not result.present
    assert result.p_value >= result.alpha
    assert result.p_value_empirical > result.alpha


@pytest.mark.slow
def test_rejection_rate_under_the_smooth_gaussian_null_is_low():
    """Level of the test (Liu et al. 2008): over 20 data sets drawn from the null family the
    Gaussian-fit p-value falls below alpha = 0.01 at most twice (if the true level were
    0.01, three or more would happen with probability 0.001, binomial).  Measured while
    writing: 0 of 100 at m = 1.5 and 0 of 100 at m = 2; the test is conservative, the
    observed z-scores having SD about 0.3 instead of 1 (the null's covariance is estimated
    from the data themselves)."""
    results = [
        structure_test(_smooth_gaussian(600, seed=500 + s), 1.5, n_null=20, rng=s)
        for s in range(12)
    ]
    rejections = sum(r.p_value < 0.01 for r in results)
    # 12 data sets (kept small: every test compares five c); at a true level of 0.01, two or
    # more rejections happen with probability 0.006 (binomial).
    assert rejections <= 1
    assert np.mean([r.z_score for r in results]) > -1.0


@pytest.mark.parametrize(("n_shapes", "noise"), [(4, 0.5), (5, 0.3)])
@pytest.mark.parametrize("m", [1.3, 1.5])
def test_distinct_response_shapes_are_called_structured(n_shapes, noise, m):
    """Clusters around a few distinct shapes are not one Gaussian (Liu et al. 2008 reject
    mixtures of separated Gaussians).  Measured z-scores at these settings: -5 to -9."""
    result = structure_test(_response_shapes(1000, n_shapes, noise, seed=7), m, rng=3)
    assert result.present
    assert result.statistic < result.null_mean
    # Every null index is above the data's at the telling c: the smallest empirical p-value,
    # Bonferroni-corrected for the five c compared.
    n_tested = len(DEFAULT_TEST_CLUSTERS)
    assert result.p_value_empirical == pytest.approx(n_tested / (1 + result.n_null))


def test_shapes_are_still_found_among_some_structureless_genes():
    """10 % of the genes replaced by z-scored noise: the shapes are still detected
    (measured z about -7)."""
    X = _response_shapes(1000, 4, 0.3, seed=8)
    X[::10] = _independent_noise(100, seed=9)
    assert structure_test(X, 1.5, rng=4).present


def test_shapes_among_half_structureless_genes_are_called_structured():
    """Half of the genes a smooth Gaussian: the index at c = 2 alone could not see the four
    shapes (measured z between +2.3 and -2.0); the index at c up to 6 does."""
    X = _response_shapes(1000, 4, 0.3, seed=8)
    X[::2] = _smooth_gaussian(500, seed=9)
    assert structure_test(X, 1.5, rng=4).present


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_noise_free_daily_rhythm_is_exactly_the_null(seed):
    """A rhythm with uniformly spread phase and no noise is the image under z-scoring of an
    isotropic Gaussian in the (cos, sin) plane: a Gaussian's angle there is uniform and
    z-scoring keeps only the angle.  So it IS the null and must not be called structured,
    although SigClust without z-scoring rejects a circle (2-means index 1 - 4/pi^2 = 0.595
    against 1 - 1/pi = 0.682 for a 2-D Gaussian, Liu et al. 2008 index)."""
    result = structure_test(_daily_rhythm(1000, 0.0, seed=seed), 1.5, rng=seed)
    assert not result.present


# --------------------------------------------------------------------------------------------
# Result, reproducibility, errors
# --------------------------------------------------------------------------------------------


def test_result_fields_follow_their_definitions():
    """p_value is the normal CDF at the z-score (scipy.stats.norm); the empirical p-value is
    a count over n_null + 1; the data are subsampled to max_genes rows."""
    X = _smooth_gaussian(900, seed=21)
    result = structure_test(X, 1.5, n_null=20, max_genes=300, rng=2)

    assert result.n_genes_used == 300
    assert result.n_null == 20
    n_tested = len(DEFAULT_TEST_CLUSTERS)
    # Bonferroni over the c compared (the statistic and z-score are those of the best c).
    assert result.p_value == pytest.approx(min(1.0, n_tested * norm.cdf(result.z_score)), rel=1e-12)
    expected_z = (result.statistic - result.null_mean) / max(result.null_sd, FCI_RESOLUTION)
    assert result.z_score == pytest.approx(expected_z, rel=1e-12)
    if result.p_value_empirical < 1:
        count = result.p_value_empirical * (result.n_null + 1) / n_tested
        assert count == pytest.approx(round(count)) and 1 <= round(count) <= result.n_null + 1
    assert result.n_clusters in DEFAULT_TEST_CLUSTERS
    assert 0 < result.statistic <= result.n_clusters ** (1.0 - 1.5) + 1e-12


def test_to_dict_is_json_safe_and_complete():
    result = structure_test(_smooth_gaussian(200, seed=22), 2.0, n_null=10, rng=0)
    as_dict = result.to_dict()
    assert set(as_dict) == {field.name for field in dataclasses.fields(StructureTest)}
    assert json.loads(json.dumps(as_dict)) == as_dict
    assert type(as_dict["present"]) is bool
    assert type(as_dict["n_null"]) is int and type(as_dict["n_genes_used"]) is int
    assert all(type(as_dict[k]) is float for k in ("statistic", "null_sd", "p_value", "m"))


def test_same_seed_gives_the_same_result():
    X = _smooth_gaussian(700, seed=23)
    first = structure_test(X, 1.5, n_null=12, max_genes=400, rng=5)
    again = structure_test(X, 1.5, n_null=12, max_genes=400, rng=np.random.default_rng(5))
    other = structure_test(X, 1.5, n_null=12, max_genes=400, rng=6)
    assert first == again
    assert other.null_mean != first.null_mean
    assert fuzzy_cluster_index(X, 1.5, rng=1) == fuzzy_cluster_index(X, 1.5, rng=1)


_GOOD = _smooth_gaussian(50, seed=30)


@pytest.mark.parametrize(
    ("X", "kwargs", "message"),
    [
        (_GOOD[0], {}, "2-D array"),
        (_GOOD[:9], {}, "at least 10 genes"),
        (_GOOD[:, :2], {}, "3 time point"),
        (np.where(np.eye(50, 10, dtype=bool), np.nan, _GOOD), {}, "NaN or Inf"),
        (_GOOD.astype(str), {}, "real numbers"),
        (_GOOD * 2.0, {}, "z-scored"),
        (_GOOD + 0.5, {}, "z-scored"),
        (np.tile(_GOOD[:1], (20, 1)), {}, "same profile"),
        (_GOOD, {"m": 1.0}, "fuzzifier m"),
        (_GOOD, {"m": float("nan")}, "fuzzifier m"),
        (_GOOD, {"n_null": 9}, "n_null"),
        (_GOOD, {"n_null": 20.0}, "n_null"),
        (_GOOD, {"alpha": 0.0}, "alpha"),
        (_GOOD, {"alpha": 1.0}, "alpha"),
        (_GOOD, {"max_genes": 5}, "max_genes"),
        (_GOOD, {"n_starts": 0}, "n_starts"),
        (_GOOD, {"n_starts": True}, "n_starts"),
    ],
)
def test_bad_input_raises_a_one_line_gloam_error(X, kwargs, message):
    arguments = {"m": 1.5, **kwargs}
    with pytest.raises(GloamError, match=message) as caught:
        structure_test(X, **arguments)
    assert "\n" not in str(caught.value)


def test_index_rejects_bad_input():
    with pytest.raises(GloamError, match="fuzzifier m"):
        fuzzy_cluster_index(_GOOD, 0.5)
    with pytest.raises(GloamError, match="at least 10 genes"):
        fuzzy_cluster_index(_GOOD[:5], 1.5)


# --------------------------------------------------------------------------------------------
# Nearest-pair separation (SigClust on each merge; Kimes et al. 2017, Biometrics 73:811)
# --------------------------------------------------------------------------------------------


def _fcm_partition(X: np.ndarray, c: int, m: float = 1.5):
    from gloam.fcm import fuzzy_cmeans

    result = fuzzy_cmeans(X, c, m, n_starts=5, rng=0)
    best = result.best_index
    return result.memberships[best], result.centroids[best]


def test_a_cut_through_one_jittered_response_is_not_separated():
    # One sustained rise whose midpoint varies continuously between genes (a timing jitter):
    # fuzzy c-means at c = 2 cuts it into "earlier" and "later", but the two halves pooled
    # look like one Gaussian cloud, so the cut is not significant (Liu et al. 2008 null).
    rng = np.random.default_rng(4)
    midpoint = rng.normal(6.0, 1.0, 400)
    profiles = 1.0 / (1.0 + np.exp(-(TIMES[None, :] - midpoint[:, None]) / 1.5))
    X = _zscore(profiles + 0.05 * rng.normal(size=profiles.shape))
    U, V = _fcm_partition(X, 2)
    pairs = nearest_pair_separation(X, U, None, V, 1.5, n_null=20, rng=1)
    assert len(pairs) == 1
    assert pairs["p_value"].iloc[0] > 0.01


def test_two_distinct_responses_are_separated():
    X = _response_shapes(400, 2, 0.3, seed=5)
    U, V = _fcm_partition(X, 2)
    pairs = nearest_pair_separation(X, U, None, V, 1.5, n_null=20, rng=1)
    assert list(pairs.columns) == list(PAIR_COLUMNS)
    assert pairs["p_value"].iloc[0] < 1e-4
    assert pairs["n_genes"].iloc[0] <= 400


def test_each_cluster_is_paired_with_its_most_correlated_neighbour():
    X = _response_shapes(500, 5, 0.3, seed=6)
    U, V = _fcm_partition(X, 5)
    pairs = nearest_pair_separation(X, U, None, V, 1.5, n_null=10, rng=1)
    correlation = np.corrcoef(V)
    np.fill_diagonal(correlation, -np.inf)
    expected = {tuple(sorted((k, int(correlation[k].argmax())))) for k in range(5)}
    assert set(zip(pairs["cluster"], pairs["nearest"], strict=True)) == expected
    assert (pairs["p_value"] < 1e-4).all()
