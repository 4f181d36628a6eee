"""Readers of gloam.io: matrices and sample sheets.

Every expected value below is the value written into the small file built in the test
itself (the outside source is the file's own text), unless a check names another source.
"""

from __future__ import annotations

import gzip
from pathlib import Path

import anndata
import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from gloam.errors import GloamError
from gloam.io import read_matrix, read_sample_sheet


def write_text(path: Path, text: str) -> Path:
    if path.suffix == ".gz":
        with gzip.open(path, "wt", encoding="utf-8") as stream:
            stream.write(text)
    else:
        path.write_text(text, encoding="utf-8")
    return path


# Gene IDs spreadsheet programs and type-guessing readers are known to mangle
# (dates, numbers with leading zeros, scientific notation, the string "NA").
TRICKY_IDS = ["1-Mar", "SEPT2", "0001", "1E5", "NA", "2310009E13", "MARCH1"]


@pytest.mark.parametrize("name,separator", [("m.tsv", "\t"), ("m.csv", ","), ("m.tsv.gz", "\t")])
def test_gene_ids_that_look_like_dates_or_numbers_stay_text(tmp_path, name, separator):
    lines = [separator.join(["gene", "a", "b"])]
    lines += [separator.join([gene, str(i), str(2 * i)]) for i, gene in enumerate(TRICKY_IDS)]
    matrix = read_matrix(write_text(tmp_path / name, "\n".join(lines) + "\n"))
    assert matrix.index.tolist() == TRICKY_IDS
    assert all(isinstance(gene, str) for gene in matrix.index)
    assert matrix.columns.tolist() == ["a", "b"]
    assert_allclose(matrix["b"].to_numpy(), 2 * np.arange(len(TRICKY_IDS)), rtol=0, atol=0)


def test_missing_value_markers_become_nan_but_only_in_value_columns(tmp_path):
    path = write_text(tmp_path / "m.tsv", "gene\ta\tb\tc\nNA\t1\tNA\t\nx\tnan\t2\t3\n")
    matrix = read_matrix(path)
    assert matrix.index.tolist() == ["NA", "x"]
    assert np.isnan(matrix.loc["NA", "b"]) and np.isnan(matrix.loc["NA", "c"])
    assert np.isnan(matrix.loc["x", "a"])
    assert matrix.loc["x", "c"] == 3.0


def test_surrounding_whitespace_is_removed_from_names(tmp_path):
    path = write_text(tmp_path / "m.tsv", "gene\t a \tb\n g1 \t1\t2\n")
    matrix = read_matrix(path)
    assert matrix.index.tolist() == ["g1"]
    assert matrix.columns.tolist() == ["a", "b"]


def test_h5ad_matrix_is_transposed_to_genes_by_samples_and_layer_is_chosen(tmp_path):
    """AnnData bulk convention (anndata documentation): obs = samples, var = genes."""
    counts = np.arange(6, dtype=float).reshape(2, 3)  # 2 samples x 3 genes
    data = anndata.AnnData(
        X=counts,
        obs=pd.DataFrame(index=["s1", "s2"]),
        var=pd.DataFrame(index=["0001", "1-Mar", "g3"]),
        layers={"raw": counts * 10},
    )
    path = tmp_path / "m.h5ad"
    data.write_h5ad(path)
    matrix = read_matrix(path)
    assert matrix.index.tolist() == ["0001", "1-Mar", "g3"]
    assert matrix.columns.tolist() == ["s1", "s2"]
    assert_allclose(matrix.to_numpy(), counts.T, rtol=0, atol=0)
    assert_allclose(read_matrix(path, layer="raw").to_numpy(), counts.T * 10, rtol=0, atol=0)
    with pytest.raises(GloamError, match="no layer 'norm'.*available layers: \\['raw'\\]"):
        read_matrix(path, layer="norm")


@pytest.mark.parametrize(
    "name,text,message",
    [
        (
            "m.tsv",
            "gene\ta\tb\ng1\t1\t2\ng2\t3\t4\ng1\t5\t6\n",
            "duplicate gene IDs: 'g1' \\(2x\\)",
        ),
        ("m.tsv", "gene\ta\ta\ng1\t1\t2\n", "duplicate sample names in the header: 'a'"),
        ("m.tsv", "gene\ta\tb\ng1\t1\t2\ng2\t3\tlow\n", "'low' for gene 'g2' in sample 'b'"),
        ("m.csv", 'gene,a,b\ng1,1,2\ng2,"1,5",4\n', "'1,5' for gene 'g2' in sample 'a'"),
        ("m.tsv", "gene\ta\tb\n", "no gene rows; the matrix is empty"),
        ("m.tsv", "gene\n g1\n", "no sample columns"),
        ("m.tsv", "", "is empty"),
        ("m.tsv", "gene\ta\tb\ng1\t1\t2\t3\t4\n", "could not be parsed"),
        ("m.tsv", "gene\ta\tb\n\t1\t2\n", "empty gene ID"),
        ("m.xlsx", "gene\ta\n", "unknown extension"),
    ],
)
def test_bad_matrix_files_give_one_clear_message(tmp_path, name, text, message):
    path = write_text(tmp_path / name, text)
    with pytest.raises(GloamError, match=message):
        read_matrix(path)


def test_missing_matrix_file_is_named(tmp_path):
    with pytest.raises(GloamError, match="matrix file .*nope.tsv' does not exist"):
        read_matrix(tmp_path / "nope.tsv")


def test_layer_for_a_text_matrix_is_refused(tmp_path):
    path = write_text(tmp_path / "m.tsv", "gene\ta\ng1\t1\n")
    with pytest.raises(GloamError, match="layers exist only in .h5ad"):
        read_matrix(path, layer="counts")


def test_sample_sheet_columns_are_typed_and_ordered(tmp_path):
    path = write_text(
        tmp_path / "s.csv",
        "Condition, Sample ,time,replicate,batch\nctl,a,0,1,x\nctl,b,2.5,1,y\nheat,c,24,2,x\n",
    )
    sheet = read_sample_sheet(path)
    assert sheet.columns.tolist() == ["sample", "time", "replicate", "condition"]
    assert sheet["sample"].tolist() == ["a", "b", "c"]
    assert_allclose(sheet["time"].to_numpy(), [0.0, 2.5, 24.0], rtol=0, atol=0)
    assert sheet["replicate"].tolist() == ["1", "1", "2"]
    assert sheet["condition"].tolist() == ["ctl", "ctl", "heat"]


@pytest.mark.parametrize(
    "text,message",
    [
        ("sample\tage\na\t1\n", "lacks the column\\(s\\) \\['time'\\]"),
        ("sample\ttime\ttime\na\t1\t2\n", "column 'time' more than once"),
        ("sample\ttime\na\t0\nb\t2h\n", "time '2h' of sample 'b' is not a finite number"),
        ("sample\ttime\na\tinf\n", "time 'inf' of sample 'a'"),
        ("sample\ttime\na\t0\na\t1\n", "lists samples more than once: 'a'"),
        ("sample\ttime\n", "has no rows"),
        ("sample\ttime\tcondition\na\t0\t\n", "sample 'a' has an empty condition"),
        ("sample\ttime\treplicate\na\t0\t1\nb\t0\t1\n", "samples \\['a', 'b'\\] share the same"),
    ],
)
def test_bad_sample_sheets_give_one_clear_message(tmp_path, text, message):
    path = write_text(tmp_path / "s.tsv", text)
    with pytest.raises(GloamError, match=message):
        read_sample_sheet(path)


def test_missing_sample_sheet_is_named(tmp_path):
    with pytest.raises(GloamError, match="sample sheet file .*sheet.tsv' does not exist"):
        read_sample_sheet(tmp_path / "sheet.tsv")
