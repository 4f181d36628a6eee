"""Specification of the fuzzifier choice (gloam.fuzzifier).

Reference: Schwämmle, V. & Jensen, O. N. (2010). A simple and fast method to determine the
parameters for fuzzy c-means cluster analysis. Bioinformatics 26(22):2841-2848.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from sklearn.datasets import make_blobs

from gloam.errors import GloamError
from gloam.fuzzifier import (
    CURVE_COLUMNS,
    STRUCTURELESS_INDEX,
    choose_fuzzifier,
    randomised_structure_curve,
    schwaemmle_jensen_m,
    shuffle_within_genes,
)


def _published_formula(N: float, D: float) -> float:
    # Schwämmle & Jensen (2010), the fitted expression for m(N, D), typed here from memory
    # independently of the implementation.
    return (
        1
        + (1418 / N + 22.05) * D ** (-2)
        + (12.33 / N + 0.243) * D ** (-0.0406 * math.log(N) - 0.1134)
    )


@pytest.mark.parametrize(("n", "d"), [(500, 4), (2000, 10), (20000, 12), (60000, 24), (5000, 6)])
def test_estimate_follows_the_published_formula(n, d):
    assert schwaemmle_jensen_m(n, d) == pytest.approx(_published_formula(n, d), rel=1e-12)


def test_estimate_falls_towards_one_as_profiles_get_longer():
    values = [schwaemmle_jensen_m(5000, d) for d in (3, 6, 12, 24, 48)]
    assert all(v > 1 for v in values)
    assert np.all(np.diff(values) < 0)


def _zscored_noise(n: int, d: int, seed: int) -> np.ndarray:
    X = np.random.default_rng(seed).normal(size=(n, d))
    return (X - X.mean(axis=1, keepdims=True)) / X.std(axis=1, keepdims=True)


def test_shuffled_data_has_no_structure_at_the_estimate_but_does_near_one():
    """The behaviour the estimate rests on (Schwämmle & Jensen 2010): at the estimated m,
    fuzzy c-means finds no clusters in data without structure (every membership near 1/c,
    centroids collapsed together); at m close to 1 it still imposes crisp clusters."""
    X = _zscored_noise(2000, 10, seed=3)
    estimate = schwaemmle_jensen_m(*X.shape)
    curve = randomised_structure_curve(
        X, [1.05, estimate, estimate + 0.1], 6, rng=np.random.default_rng(0)
    )
    near_one, at_estimate, above = curve.itertuples(index=False)
    assert near_one.structure_index > 0.5
    assert near_one.min_centroid_distance > 1.0
    assert at_estimate.structure_index < STRUCTURELESS_INDEX
    assert above.structure_index < at_estimate.structure_index + 1e-9
    assert list(curve.columns) == CURVE_COLUMNS


def test_shuffling_keeps_each_genes_values():
    X = _zscored_noise(50, 7, seed=1)
    shuffled = shuffle_within_genes(X, rng=np.random.default_rng(2))
    np.testing.assert_array_equal(np.sort(shuffled, axis=1), np.sort(X, axis=1))
    assert not np.array_equal(shuffled, X)


def test_choice_modes():
    X, _ = make_blobs(n_samples=600, centers=4, n_features=8, random_state=1)
    auto = choose_fuzzifier(X, "auto", rng=0, n_starts=2)
    assert auto.method == "formula"
    assert auto.m == pytest.approx(schwaemmle_jensen_m(600, 8))
    fixed = choose_fuzzifier(X, 1.7, rng=0, n_starts=2)
    assert (fixed.method, fixed.m) == ("fixed", 1.7)
    assert 1.7 in set(fixed.curve["m"])
    randomised = choose_fuzzifier(X, "randomised", rng=0, n_starts=2)
    below = randomised.curve.loc[randomised.curve["m"] < randomised.m, "structure_index"]
    assert (below >= STRUCTURELESS_INDEX).all()


@pytest.mark.parametrize("setting", ["two", 1.0, 0.5, float("inf"), True])
def test_bad_setting_is_one_clear_error(setting):
    with pytest.raises(GloamError, match="fuzzifier must be 'auto', 'randomised' or a number"):
        choose_fuzzifier(np.zeros((10, 3)) + np.arange(3), setting)


def test_bad_sizes_are_rejected():
    with pytest.raises(GloamError, match="n_genes"):
        schwaemmle_jensen_m(1, 5)
    with pytest.raises(GloamError, match="n_timepoints"):
        schwaemmle_jensen_m(100, 0)
