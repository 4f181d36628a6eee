"""How much a dataset's clusters change across settings variants (results/sensitivity.tsv).

Sources: Hungarian matching (Kuhn 1955) checked by relabelling; the adjusted Rand index of
Hubert & Arabie (1985), with scikit-learn's ``adjusted_rand_score`` as the reference.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.metrics import adjusted_rand_score

from gloam.stages import SENSITIVITY_COLUMNS, summarise_sensitivity


def _consensus(path, labels: np.ndarray, n_clusters: int, order: list[int]) -> None:
    """A consensus file with crisp memberships for ``labels``, clusters listed in ``order``."""
    genes = np.array([f"g{i}" for i in range(labels.size)])
    memberships = np.zeros((labels.size, n_clusters))
    memberships[np.arange(labels.size), labels] = 0.9
    memberships += 0.1 / n_clusters
    centroids = np.eye(n_clusters, 6) * 3 + np.arange(6) * 0.01
    np.savez(
        path,
        genes=genes,
        memberships=memberships[:, order],
        centroids=centroids[order],
        cluster_names=np.array([f"C{k + 1}" for k in range(n_clusters)]),
        noise=np.zeros(labels.size),
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
