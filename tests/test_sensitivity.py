"""How much a dataset's clusters change across settings variants (results/sensitivity.tsv).

Sources: Hungarian matching (Kuhn 1955) checked by relabelling; the adjusted Rand index of
Hubert & Arabie (1985), with scikit-learn's ``adjusted_rand_score`` as the reference.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.metrics import adjusted_rand_score

from gloam.stages import (
    MATCH_COLUMNS,
    SENSITIVITY_COLUMNS,
    summarise_matches,
    summarise_sensitivity,
)


def _consensus(
    path,
    labels: np.ndarray,
    n_clusters: int,
    order: list[int],
    times: np.ndarray | None = None,
) -> None:
    """A consensus file with crisp memberships for ``labels``, clusters listed in ``order``;
    centroids are bumps at different times (sampled at ``times``, default 0..5)."""
    times = np.arange(6.0) if times is None else np.asarray(times, dtype=float)
    genes = np.array([f"g{i}" for i in range(labels.size)])
    memberships = np.zeros((labels.size, n_clusters))
    memberships[np.arange(labels.size), labels] = 0.9
    memberships += 0.1 / n_clusters
    peaks = np.linspace(0.0, 5.0, n_clusters)
    centroids = np.exp(-((times[None, :] - peaks[:, None]) ** 2))
    np.savez(
        path,
        genes=genes,
        memberships=memberships[:, order],
        centroids=centroids[order],
        cluster_names=np.array([f"C{k + 1}" for k in range(n_clusters)]),
        noise=np.zeros(labels.size),
        times=times,
        columns=np.array([f"t{t:g}" for t in times]),
        conditions=np.array(["all"] * times.size),
    )


def test_variants_are_matched_to_the_run_without_a_variant(tmp_path):
    rng = np.random.default_rng(2)
    labels = rng.integers(0, 4, 200)
    moved = labels.copy()
    moved[:20] = (moved[:20] + 1) % 4  # the variant moves 20 genes to another cluster
    _consensus(tmp_path / "a.npz", labels, 4, [0, 1, 2, 3])
    _consensus(tmp_path / "b.npz", moved, 4, [2, 0, 3, 1])  # same clusters, other names
    _consensus(tmp_path / "c.npz", labels, 4, [0, 1, 2, 3])
    runs = [
        {"run": "d.loose", "dataset": "d", "condition": None, "variant": "loose"},
        {"run": "d", "dataset": "d", "condition": None, "variant": None},
        {"run": "other", "dataset": "other", "condition": None, "variant": None},
    ]
    out = tmp_path / "sensitivity.tsv"
    summarise_sensitivity(runs, [tmp_path / "b.npz", tmp_path / "a.npz", tmp_path / "c.npz"], out)
    table = pd.read_csv(out, sep="\t", keep_default_na=False)
    assert list(table.columns) == list(SENSITIVITY_COLUMNS)
    assert len(table) == 1  # "other" has no variant: nothing to compare
    row = table.iloc[0]
    assert (row["reference"], row["run"]) == ("d", "d.loose")
    assert row["n_matched"] == 4 and row["n_unmatched"] == 0
    assert np.isclose(row["min_correlation"], 1.0)
    assert np.isclose(row["ari"], adjusted_rand_score(labels, moved))


def test_no_variants_give_a_header_only_table(tmp_path):
    _consensus(tmp_path / "a.npz", np.arange(30) % 3, 3, [0, 1, 2])
    out = tmp_path / "sensitivity.tsv"
    runs = [{"run": "d", "dataset": "d", "condition": None, "variant": None}]
    summarise_sensitivity(runs, [tmp_path / "a.npz"], out)
    assert out.read_text(encoding="utf-8").strip().split("\t") == list(SENSITIVITY_COLUMNS)


def test_clusters_of_different_datasets_are_matched_on_their_shared_times(tmp_path):
    """Two datasets with the same responses, one sampled at other times and with its clusters
    named in another order: matching pairs each cluster with its own response (Kuhn 1955),
    with correlation near 1 on the shared time range, and the ARI of the partitions is
    scikit-learn's adjusted_rand_score of the labels on the shared genes."""
    rng = np.random.default_rng(5)
    labels = rng.integers(0, 3, 150)
    moved = labels.copy()
    moved[:15] = (moved[:15] + 1) % 3
    _consensus(tmp_path / "a.npz", labels, 3, [0, 1, 2])
    _consensus(tmp_path / "b.npz", moved, 3, [2, 0, 1], times=np.linspace(0, 5, 11))
    _consensus(tmp_path / "a2.npz", labels, 3, [0, 1, 2])
    runs = [
        {"run": "alpha", "dataset": "alpha", "condition": None, "variant": None},
        {"run": "beta", "dataset": "beta", "condition": None, "variant": None},
        {"run": "alpha.v", "dataset": "alpha", "condition": None, "variant": "v"},
    ]
    out = tmp_path / "matches.tsv"
    summarise_matches(runs, [tmp_path / n for n in ("a.npz", "b.npz", "a2.npz")], out)
    table = pd.read_csv(out, sep="\t", keep_default_na=False)
    assert list(table.columns) == list(MATCH_COLUMNS)
    # Only alpha and beta share the settings (no variant); alpha.v has no other dataset.
    assert set(zip(table["run_a"], table["run_b"], strict=True)) == {("alpha", "beta")}
    assert len(table) == 3
    # beta lists the responses in the order [2, 0, 1]: its C1 is alpha's C3, and so on.
    pairs = dict(zip(table["cluster_a"], table["cluster_b"], strict=True))
    assert pairs == {"C1": "C2", "C2": "C3", "C3": "C1"}
    # Linear interpolation of a bump sampled once per unit time loses a little of its shape.
    assert (table["correlation"] > 0.95).all()
    assert np.allclose(table["ari"], adjusted_rand_score(labels, moved))
    assert (table["n_shared_genes"] == 150).all()


def test_one_dataset_gives_a_header_only_match_table(tmp_path):
    _consensus(tmp_path / "a.npz", np.arange(30) % 3, 3, [0, 1, 2])
    out = tmp_path / "matches.tsv"
    runs = [{"run": "d", "dataset": "d", "condition": None, "variant": None}]
    summarise_matches(runs, [tmp_path / "a.npz"], out)
    assert out.read_text(encoding="utf-8").strip().split("\t") == list(MATCH_COLUMNS)
