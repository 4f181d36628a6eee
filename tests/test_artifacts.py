"""The registries of run files, figures and validity indices, and what must follow them.

A new file, figure or index is added in one place; these tests fail when a place that must
follow it was forgotten: the README's outputs and validity sections, the figure's caption for
Snakemake's report, the README's image of it, its drawing function, a file's reader.
(Every file a finished workflow run leaves must match the registry: tests/test_workflow.py.)
The expected paths come from the README, the documentation users read, not from the code.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from gloam.artifacts import (
    FIGURES,
    RUN_FILES,
    file_meaning,
    matches,
    resolve,
    run_file,
    run_targets,
)
from gloam.planning import WORKFLOW_DIR
from gloam.validity import INDICES, VALIDITY_COLUMNS, index_values

REPO = Path(__file__).resolve().parents[1]
README = (REPO / "README.md").read_text(encoding="utf-8")


def readme_section(title: str) -> str:
    start = README.index(title)
    following = re.search(r"\n##+ ", README[start + len(title) :])
    return README[start : start + len(title) + (following.start() if following else 10**9)]


def test_every_target_file_is_documented_in_the_readme_outputs():
    outputs = readme_section("## Outputs")
    documented = set(re.findall(r"`([^`]+)`", outputs))
    folders = {entry.path.rstrip("/") for entry in RUN_FILES if entry.format == "folder"}
    for path in run_targets():
        if path.startswith("figures/"):
            # The README documents the figures as one row, `figures/*.png`, `*.pdf`, `*.svg`.
            assert "figures/*.png" in documented
            continue
        if path in folders:
            # A folder is documented by the files inside it.
            assert any(entry.startswith(f"{path}/") for entry in documented), path
            continue
        assert path in documented, path


def test_every_figure_has_its_drawing_caption_and_readme_image():
    for name, figure in FIGURES.items():
        assert callable(resolve(figure.draw)), figure.draw
        assert figure.caption.strip().endswith("."), name
        assert (WORKFLOW_DIR / "report" / f"{name}.rst").is_file(), name
        assert f"docs/figures/{name}.png" in README, name
        assert (REPO / "docs" / "figures" / f"{name}.png").is_file(), name
        # Each figure is a registered run file in all three formats.
        for kind in ("png", "pdf", "svg"):
            assert run_file(f"{figure.folder}/{name}.{kind}").writer == figure.writer


def test_every_reader_exists():
    for entry in RUN_FILES:
        if entry.reader is not None:
            assert callable(resolve(entry.reader)), (entry.path, entry.reader)


def test_files_inside_a_registered_folder_get_their_own_meaning():
    assert matches("genesets/cold_leaf_C2_core0.7.txt").path == "genesets/*_core*.txt"
    assert matches("genesets/background.txt").path == "genesets/background.txt"
    assert matches("comparison/genesets/x_changed.gmt").path == "comparison/genesets/"
    assert matches("scan/c12.npz").path == "scan/c{c}.npz"
    assert matches("scan/cX.npz") is None
    assert file_meaning("notes.txt") == ""
    with pytest.raises(KeyError, match="RUN_FILES"):
        run_file("unknown.tsv")


def test_every_validity_index_is_documented_and_in_the_table_columns():
    section = readme_section("### The validity table")
    for name, index in INDICES.items():
        assert f"`{name}`" in section, name
        assert index.better in ("larger", "smaller")
        assert index.reference.split()[0] in README, index.reference
        assert name in VALIDITY_COLUMNS


def test_index_values_follow_the_published_formulas_on_a_small_example():
    """Bezdek (1981) PC and PE, Xie & Beni (1991) and the smallest squared centroid distance,
    computed by hand-written formulas here on a two-cluster example."""
    X = np.array([[0.0, 0.0], [0.0, 1.0], [4.0, 4.0], [4.0, 5.0]])
    V = np.array([[0.0, 0.5], [4.0, 4.5]])
    U = np.array([[0.9, 0.1], [0.8, 0.2], [0.1, 0.9], [0.3, 0.7]])
    m = 2.0
    values = index_values(X, V, U, m)
    assert list(values) == list(INDICES)
    assert values["partition_coefficient"] == pytest.approx((U**2).sum() / 4)
    assert values["partition_entropy"] == pytest.approx(-(U * np.log(U)).sum() / 4)
    d2 = ((X[:, None, :] - V[None, :, :]) ** 2).sum(axis=2)
    separation = ((V[0] - V[1]) ** 2).sum()
    assert values["min_centroid_distance"] == pytest.approx(separation)
    assert values["xie_beni"] == pytest.approx((U**m * d2).sum() / (4 * separation))
    mean = X.mean(axis=0)
    spread = ((V - mean) ** 2).sum(axis=1)
    assert values["fukuyama_sugeno"] == pytest.approx((U**m * (d2 - spread[None, :])).sum())
