"""Readers of gloam.io: matrices and sample sheets.

Every expected value below is the value written into the small file built in the test
itself (the outside source is the file's own text), unless a check names another source.
"""

from __future__ import annotations

import gzip
import warnings
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
        (
            "m.tsv",
            "gene\ta\tb\ng1\t1\t2\t3\t4\n",
            "line 2 \\(gene 'g1'\\) has 5 fields but the header has 3",
        ),
        ("m.tsv", "gene\ta\tb\n\t1\t2\n", "empty gene ID"),
        ("m.xlsx", "gene\ta\n", "unknown extension"),
    ],
)
def test_bad_matrix_files_give_one_clear_message(tmp_path, name, text, message):
    path = write_text(tmp_path / name, text)
    with pytest.raises(GloamError, match=message):
        read_matrix(path)


# A table long enough that cutting its gzip in half leaves whole lines to decompress.
LONG_MATRIX = "gene\ta\tb\n" + "".join(f"g{i}\t{i}\t{2 * i}\n" for i in range(2000))
LONG_SHEET = "sample\ttime\n" + "".join(f"s{i}\t{i}\n" for i in range(2000))


def read_matrix_or_sheet(reader: str, path: Path) -> object:
    return read_matrix(path) if reader == "matrix" else read_sample_sheet(path)


def cut_in_half(whole: bytes) -> bytes:
    return whole[: len(whole) // 2]  # a download cut short: EOFError


def spoil_checksum(whole: bytes) -> bytes:
    # RFC 1952: the last 8 bytes are CRC-32 then length; gzip raises BadGzipFile (OSError).
    return whole[:-8] + bytes([whole[-8] ^ 0xFF]) + whole[-7:]


def spoil_block_type(whole: bytes) -> bytes:
    # RFC 1951: 0xFF as the first deflate byte (after the 10-byte gzip header) sets the
    # reserved block type 11, which zlib refuses with zlib.error.
    return whole[:10] + b"\xff" + whole[11:]


@pytest.mark.parametrize("reader,text", [("matrix", LONG_MATRIX), ("sheet", LONG_SHEET)])
@pytest.mark.parametrize(
    "damage,cause",
    [
        (cut_in_half, "Compressed file ended"),
        (spoil_checksum, "CRC check failed"),
        (spoil_block_type, "invalid block type"),
    ],
)
def test_damaged_gzip_is_named_with_the_gzip_fix(tmp_path, reader, text, damage, cause):
    path = tmp_path / "table.tsv.gz"
    path.write_bytes(damage(gzip.compress(text.encode("utf-8"))))
    with pytest.raises(GloamError, match="is a damaged or incomplete gzip file") as caught:
        read_matrix_or_sheet(reader, path)
    message = str(caught.value)
    assert cause in message
    assert "gzip -t" in message and "download it again or compress it again" in message
    assert "one value per" not in message  # not the advice for a badly laid out table


def test_plain_text_named_gz_is_told_apart_from_a_damaged_gzip(tmp_path):
    path = tmp_path / "m.tsv.gz"
    path.write_text("gene\ta\ng1\t1\n", encoding="utf-8")
    with pytest.raises(GloamError, match="is not gzip-compressed although its name ends in .gz"):
        read_matrix(path)


@pytest.mark.parametrize(
    "name,text,found",
    [
        ("m.tsv", "gene\ta\tb\tc\ng1\t1\t2\t3\ng2\t4\t5\ng3\t6\n", "line 3 \\(gene 'g2'\\) has 3"),
        ("m.tsv.gz", "gene\ta\tb\tc\ng1\t1\t2\t3\ng2\t4\t5\n", "line 3 \\(gene 'g2'\\) has 3"),
        ("m.tsv", "gene\ta\tb\tc\ng1\t1\t2\t3\t4\ng2\t4\t5\t6\n", "line 2 \\(gene 'g1'\\) has 5"),
        # The quoted comma is part of a value, so the row has 3 fields, not 4.
        ("m.csv", 'gene,a,b,c\ng1,1,2,3\n"g,2","1,5",4\n', "line 3 \\(gene 'g,2'\\) has 3"),
    ],
)
def test_rows_with_fewer_or_more_fields_than_the_header_are_refused(tmp_path, name, text, found):
    path = write_text(tmp_path / name, text)
    with pytest.raises(GloamError, match=f"{found} fields but the header has 4") as caught:
        read_matrix(path)
    assert "exactly one value per sample" in str(caught.value)


def test_a_sample_sheet_row_with_a_missing_field_is_refused(tmp_path):
    text = "sample\ttime\treplicate\ns1\t0\t1\ns2\t2\ns3\t4\t1\n"
    path = write_text(tmp_path / "samples.tsv", text)
    with pytest.raises(
        GloamError, match="line 3 \\(starting 's2'\\) has 2 fields but the header has 3"
    ):
        read_sample_sheet(path)
    # An empty cell of an optional column is not a short row.
    sheet = read_sample_sheet(write_text(tmp_path / "ok.tsv", "sample\ttime\treplicate\ns1\t0\t\n"))
    assert sheet["sample"].tolist() == ["s1"]


def test_empty_cells_are_missing_values_not_short_rows(tmp_path):
    text = 'gene,a,b,c\r\ng1,,2,3\r\n\r\n"g,2","1",5,\r\n'
    matrix = read_matrix(write_text(tmp_path / "m.csv", text))
    assert matrix.index.tolist() == ["g1", "g,2"]
    assert np.isnan(matrix.loc["g1", "a"]) and np.isnan(matrix.loc["g,2", "c"])
    assert_allclose(matrix.loc["g,2", ["a", "b"]].to_numpy(), [1.0, 5.0], rtol=0, atol=0)


def test_duplicate_gene_ids_in_h5ad_give_our_error_without_anndata_warning(tmp_path):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # anndata warns about the duplicates we build here
        data = anndata.AnnData(
            X=np.ones((2, 3)),
            obs=pd.DataFrame(index=["s1", "s2"]),
            var=pd.DataFrame(index=["g1", "g2", "g1"]),
        )
        path = tmp_path / "m.h5ad"
        data.write_h5ad(path)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        with pytest.raises(GloamError, match="duplicate gene IDs: 'g1' \\(2x\\)"):
            read_matrix(path)
    assert not [str(warning.message) for warning in caught if "not unique" in str(warning.message)]


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
