"""Core genes, ranked lists, GMT files and the background.

Sources: the row-sum constraint of a fuzzy c-partition (memberships of a gene sum to 1; Bezdek
1981, "Pattern Recognition with Fuzzy Objective Function Algorithms"), which bounds in how many
sets a gene can be core; the GMT layout of the GSEA documentation (Broad Institute: one set per
line, tab-separated name, description, genes; from memory).
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from gloam.errors import GloamError
from gloam.genesets import (
    check_thresholds,
    core_genes,
    gene_set_paths,
    ranked_genes,
    write_gene_sets,
)
from gloam.io import read_gmt


def _memberships(seed: int, n: int = 60, c: int = 4) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    logits = 3.0 * rng.normal(size=(n, c))
    U = np.exp(logits - logits.max(axis=1, keepdims=True))
    U /= U.sum(axis=1, keepdims=True)
    genes = [f"AT{seed % 10}G{10 * i:05d}" for i in range(n)]
    return pd.DataFrame(U, index=genes, columns=[f"C{k + 1}" for k in range(c)])


# --- thresholds --------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "thresholds",
    [
        [0.0],
        [-0.2],
        [1.5],
        [float("nan")],
        ["0.7"],
        [],
        [0.7, 0.7],
        "0.7",
        [True],
        [0.7, 0.70000001],
    ],
)
def test_invalid_thresholds_raise_one_gloam_error(thresholds):
    with pytest.raises(GloamError, match="threshold"):
        check_thresholds(thresholds)


def test_valid_thresholds_keep_their_order_and_one_is_allowed():
    assert check_thresholds([0.7, 0.5, 1]) == (0.7, 0.5, 1.0)


# --- core genes --------------------------------------------------------------------------------


@settings(max_examples=50, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), threshold=st.floats(0.5000001, 1.0))
def test_above_one_half_a_gene_is_core_in_at_most_one_cluster(seed, threshold):
    """Bezdek (1981): memberships sum to 1, so two memberships cannot both exceed 0.5."""
    sets = core_genes(_memberships(seed), threshold)
    genes = [gene for members in sets.values() for gene in members]
    assert len(genes) == len(set(genes))


def test_at_one_half_a_gene_split_evenly_is_core_in_both_clusters():
    """Bezdek (1981) row-sum constraint: u = (0.5, 0.5) passes a 0.5 threshold twice."""
    table = pd.DataFrame({"C1": [0.5, 0.9], "C2": [0.5, 0.1]}, index=["g1", "g2"])
    assert core_genes(table, 0.5) == {"C1": ["g2", "g1"], "C2": ["g1"]}
    assert core_genes(table, 0.51) == {"C1": ["g2"], "C2": []}


@pytest.mark.parametrize("threshold", [0.3, 0.6, 0.9])
def test_core_genes_are_exactly_those_at_or_above_the_threshold(threshold):
    table = _memberships(3)
    sets = core_genes(table, threshold)
    for cluster in table.columns:
        expected = set(table.index[table[cluster] >= threshold])
        assert set(sets[cluster]) == expected
        values = table.loc[sets[cluster], cluster].to_numpy()
        assert np.all(np.diff(values) <= 0)


def test_ranked_lists_hold_every_gene_sorted_with_ties_by_gene_id():
    table = pd.DataFrame(
        {"C1": [0.2, 0.8, 0.2, 0.6], "C2": [0.8, 0.2, 0.8, 0.4]}, index=["gB", "gA", "gA2", "gC"]
    )
    ranked = ranked_genes(table)
    assert ranked["C1"]["gene"].tolist() == ["gA", "gC", "gA2", "gB"]
    assert ranked["C2"]["gene"].tolist() == ["gA2", "gB", "gC", "gA"]
    assert list(ranked["C1"].columns) == ["gene", "membership"]


@pytest.mark.parametrize(
    "table",
    [
        pd.DataFrame({"C1": [0.5, np.nan], "C2": [0.5, 0.5]}, index=["a", "b"]),
        pd.DataFrame({"C1": [0.5, 0.5], "C2": [0.5, 0.5]}, index=["a", "a"]),
        pd.DataFrame({"C1": [1.5, 0.5], "C2": [-0.5, 0.5]}, index=["a", "b"]),
        pd.DataFrame({"C1": [0.5, 0.5], "top": ["C1", "C1"]}, index=["a", "b"]),
        pd.DataFrame({"C/1": [1.0]}, index=["a"]),
        pd.DataFrame({"C1": [1.0]}, index=["a\tb"]),
        pd.DataFrame({"C1": []}),
    ],
)
def test_bad_membership_tables_raise_one_gloam_error(table):
    with pytest.raises(GloamError):
        core_genes(table, 0.5)


# --- files ------------------------------------------------------------------------------------


def test_written_files_match_the_manifest_and_the_documented_layout(tmp_path):
    table = _memberships(7)
    background = [*table.index, "AT9G99990"]  # a clustered gene set plus one more gene
    manifest = write_gene_sets(table, [0.7, 0.5], tmp_path, background, prefix="leaf")
    assert manifest == gene_set_paths(tmp_path, list(table.columns), [0.7, 0.5], prefix="leaf")
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(p.name for p in manifest)

    for threshold in (0.7, 0.5):
        sets = core_genes(table, threshold)
        for cluster, genes in sets.items():
            lines = (tmp_path / f"leaf_{cluster}_core{threshold:g}.txt").read_text().splitlines()
            assert lines == genes

    assert (tmp_path / "background.txt").read_text().splitlines() == background
    ranked = pd.read_csv(tmp_path / "leaf_C2_ranked.tsv", sep="\t", dtype={"gene": str})
    assert list(ranked.columns) == ["gene", "membership"]
    assert sorted(ranked["gene"]) == sorted(table.index)
    assert np.all(np.diff(ranked["membership"].to_numpy()) <= 0)
    np.testing.assert_allclose(ranked["membership"], table.loc[ranked["gene"], "C2"], rtol=1e-5)


def test_gmt_lines_are_valid(tmp_path):
    """GSEA documentation (Broad Institute, from memory): each GMT line is tab-separated
    name, description, then one gene per field; names unique within the file."""
    table = _memberships(11, n=200, c=5)
    write_gene_sets(table, [0.6], tmp_path, prefix="root")
    gmt_path = tmp_path / "root_core0.6.gmt"
    lines = gmt_path.read_text().splitlines()
    names = []
    for line in lines:
        fields = line.split("\t")
        assert len(fields) >= 3
        name, description, genes = fields[0], fields[1], fields[2:]
        assert re.fullmatch(r"root_C[1-5]_core0\.6", name)
        assert all(genes) and len(genes) == len(set(genes))
        assert set(genes) <= set(table.index)
        assert f": {len(genes)} genes with membership >= 0.6" in description
        names.append(name)
    assert len(names) == len(set(names))
    sets = core_genes(table, 0.6)
    assert {name: genes for name, (_, genes) in read_gmt(gmt_path).items()} == {
        f"root_{cluster}_core0.6": genes for cluster, genes in sets.items() if genes
    }


def test_empty_sets_get_an_empty_list_and_no_gmt_line(tmp_path):
    table = pd.DataFrame({"C1": [0.9, 0.8], "C2": [0.1, 0.2]}, index=["g1", "g2"])
    write_gene_sets(table, [0.7], tmp_path)
    assert (tmp_path / "gloam_C2_core0.7.txt").read_text() == ""
    assert list(read_gmt(tmp_path / "gloam_core0.7.gmt")) == ["gloam_C1_core0.7"]


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"background_genes": ["g1"]}, "missing from the background"),
        ({"background_genes": ["g1", "g2", "g2"]}, "repeat"),
        ({"thresholds": [0.7, 0.0]}, "threshold"),
        ({"prefix": "my set"}, "prefix"),
    ],
)
def test_bad_input_writes_nothing(tmp_path, kwargs, match):
    table = pd.DataFrame({"C1": [0.9, 0.8], "C2": [0.1, 0.2]}, index=["g1", "g2"])
    arguments = {"thresholds": [0.7], "background_genes": None, "prefix": "gloam", **kwargs}
    with pytest.raises(GloamError, match=match):
        write_gene_sets(table, out_dir=tmp_path / "sets", **arguments)
    assert not (tmp_path / "sets").exists()
