"""Readers and writers of gloam.io: matrices, sample sheets, intermediates, atomic writes.

Every expected value below is the value written into the small file built in the test
itself (the outside source is the file's own text), unless a check names another source.
"""

from __future__ import annotations

import gzip
import os
import shutil
import subprocess
import sys
import time
import warnings
import zipfile
from pathlib import Path

import anndata
import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

import gloam.io
from gloam.errors import GloamError
from gloam.io import (
    STALE_TEMPORARY_AGE,
    atomic_directory,
    atomic_output,
    read_matrix,
    read_npz_checked,
    read_sample_sheet,
)


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


# ---------------------------------------------------------------- files that cannot be opened
#
# Source of the error kinds: POSIX errno values EACCES, EISDIR, ENOENT, ENOTDIR and EIO, which
# Python raises as PermissionError, IsADirectoryError, FileNotFoundError, NotADirectoryError
# and plain OSError (Python documentation, "OS exceptions").


@pytest.mark.parametrize("reader", ["matrix", "sheet"])
@pytest.mark.parametrize(
    "error,message",
    [
        (PermissionError(13, "Permission denied"), "permission denied; give your user read"),
        (IsADirectoryError(21, "Is a directory"), "is a folder, not a file"),
        (FileNotFoundError(2, "No such file or directory"), "does not exist; check the path"),
        (NotADirectoryError(20, "Not a directory"), "goes through a file as if it were a folder"),
        (OSError(5, "Input/output error"), r"\(Input/output error\); check the disk"),
    ],
)
def test_an_input_that_cannot_be_opened_gets_the_fix_for_its_os_error(
    tmp_path, monkeypatch, reader, error, message
):
    path = write_text(tmp_path / "m.tsv", "gene\ta\ng1\t1\n" if reader == "matrix" else "")

    def refuse(*args, **kwargs):
        raise error

    monkeypatch.setattr(gloam.io, "open", refuse, raising=False)
    with pytest.raises(GloamError, match=message) as caught:
        read_matrix_or_sheet(reader, path)
    assert "UTF-8" not in str(caught.value) and "\n" not in str(caught.value)


@pytest.mark.skipif(not hasattr(os, "geteuid"), reason="POSIX permissions")
def test_permission_denied_for_an_ordinary_user_is_one_line_without_utf8_advice(tmp_path):
    """A real EACCES: as root through setpriv as user nobody, otherwise with chmod 000."""
    path = write_text(tmp_path / "m.tsv", "gene\ta\ng1\t1\n")
    path.chmod(0)
    code = (
        "from gloam.io import read_matrix\n"
        "from gloam.errors import GloamError\n"
        "try:\n"
        f"    read_matrix({str(path)!r})\n"
        "except GloamError as error:\n"
        "    print(error)\n"
    )
    if os.geteuid() == 0:
        if shutil.which("setpriv") is None:
            pytest.skip("root without setpriv cannot lose read permission")
        command = ["setpriv", "--reuid=65534", "--regid=65534", "--clear-groups"]
    else:
        command = []
    result = subprocess.run(
        [*command, sys.executable, "-c", code], capture_output=True, text=True, check=True
    )
    assert "permission denied" in result.stdout and "UTF-8" not in result.stdout
    assert result.stdout.count("\n") == 1


def test_a_folder_given_as_a_matrix_is_named_as_a_folder(tmp_path):
    (tmp_path / "m.tsv").mkdir()
    with pytest.raises(GloamError, match="is a folder, not a file; give the path of the file"):
        read_matrix(tmp_path / "m.tsv")


def test_a_header_without_rows_is_refused_before_the_table_is_parsed(tmp_path, monkeypatch):
    """The quadratic step (measured with cProfile, pandas 2.3): pandas' empty-table path
    builds one Series per column and filters them with a membership test on a list of all
    column names.  No row means no parsing at all: read_csv must not be reached."""
    header = "gene\t" + "\t".join(f"s{i}" for i in range(100_000)) + "\n\n"
    path = write_text(tmp_path / "wide.tsv", header)

    def parse(*args, **kwargs):
        raise AssertionError("pandas.read_csv was called for a matrix without rows")

    monkeypatch.setattr(gloam.io.pd, "read_csv", parse)
    with pytest.raises(GloamError, match="has a header but no gene rows"):
        read_matrix(path)


# ---------------------------------------------------------------- atomic writes


def _finished_process_id() -> int:
    """The ID of a process that has ended (POSIX kill(pid, 0) then fails with ESRCH)."""
    process = subprocess.Popen([sys.executable, "-c", "pass"])
    process.wait()
    return process.pid


def test_temporary_names_its_writer_and_keeps_the_suffix(tmp_path):
    with atomic_output(tmp_path / "prepared.h5ad") as temporary:
        assert temporary.name.startswith(f".prepared.h5ad.pid{os.getpid()}@")
        assert temporary.name.endswith(".partial.h5ad")
        temporary.write_text("whole")
    assert [p.name for p in tmp_path.iterdir()] == ["prepared.h5ad"]


def test_a_killed_writers_temporary_goes_and_a_running_writers_stays(tmp_path):
    host = gloam.io._HOST
    dead = tmp_path / f".table.tsv.pid{_finished_process_id()}@{host}.abc123.partial.tsv"
    sleeper = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        alive = tmp_path / f".table.tsv.pid{sleeper.pid}@{host}.def456.partial.tsv"
        for leftover in (dead, alive):
            leftover.write_text("half")
        with atomic_output(tmp_path / "table.tsv") as temporary:
            temporary.write_text("whole")
        assert sorted(p.name for p in tmp_path.iterdir()) == [alive.name, "table.tsv"]
    finally:
        sleeper.kill()
        sleeper.wait()


def test_another_hosts_temporary_goes_only_when_old(tmp_path):
    fresh = tmp_path / ".t.tsv.pid1@otherhost.aaa111.partial.tsv"
    old = tmp_path / ".t.tsv.pid2@otherhost.bbb222.partial.tsv"
    for leftover in (fresh, old):
        leftover.write_text("half")
    past = time.time() - STALE_TEMPORARY_AGE - 60
    os.utime(old, (past, past))
    with atomic_output(tmp_path / "t.tsv") as temporary:
        temporary.write_text("whole")
    assert sorted(p.name for p in tmp_path.iterdir()) == [fresh.name, "t.tsv"]


def test_atomic_directory_replaces_the_folder_whole_or_not_at_all(tmp_path):
    target = tmp_path / "gene_sets"
    target.mkdir()
    (target / "old.txt").write_text("old")
    with pytest.raises(RuntimeError):
        with atomic_directory(target) as staging:
            (staging / "new.txt").write_text("half")
            raise RuntimeError("interrupted")
    assert [p.name for p in tmp_path.iterdir()] == ["gene_sets"]
    assert [p.name for p in target.iterdir()] == ["old.txt"]
    dead = tmp_path / f".gene_sets.pid{_finished_process_id()}@{gloam.io._HOST}.x1.partial"
    dead.mkdir()
    (dead / "half.txt").write_text("half")
    with atomic_directory(target) as staging:
        (staging / "new.txt").write_text("whole")
    assert [p.name for p in tmp_path.iterdir()] == ["gene_sets"]
    assert [p.name for p in target.iterdir()] == ["new.txt"]


# ---------------------------------------------------------------- damaged intermediates
#
# Source of the damage: the ZIP format (PKWARE APPNOTE 6.3): the central directory sits at
# the end of the archive, so a cut file has none (zipfile.BadZipFile), and every member
# carries a CRC-32 of its data, so a flipped data byte is detected on reading.


def _good_npz(path: Path) -> dict[str, np.ndarray]:
    arrays = {"centroids": np.arange(12.0).reshape(3, 4), "genes": np.array(["a", "b", "c"])}
    np.savez(path, **arrays)
    return arrays


def test_a_whole_npz_is_read_as_written(tmp_path):
    """Reference: numpy.load of the same file."""
    path = tmp_path / "c3.npz"
    written = _good_npz(path)
    read = read_npz_checked(path, "scan file", required=["centroids"])
    assert set(read) == set(written)
    for key, value in written.items():
        np.testing.assert_array_equal(read[key], value)


def _cut(data: bytes, path: Path) -> bytes:
    return data[: len(data) // 2]


def _flip_data_byte(data: bytes, path: Path) -> bytes:
    with zipfile.ZipFile(path) as archive:
        info = archive.getinfo("centroids.npy")
    # Local header: 30 bytes + name + extra; the data follow (stored, not compressed).
    start = info.header_offset + 30 + len(info.filename.encode()) + len(info.extra)
    position = start + info.file_size - 1
    return data[:position] + bytes([data[position] ^ 0xFF]) + data[position + 1 :]


@pytest.mark.parametrize(
    "damage",
    [_cut, lambda data, path: b"", lambda data, path: b"not an archive\n", _flip_data_byte],
    ids=["cut", "empty", "text", "flipped_byte"],
)
def test_a_damaged_npz_is_removed_and_named_in_one_line(tmp_path, damage):
    path = tmp_path / "scan" / "c5.npz"
    path.parent.mkdir()
    _good_npz(path)
    path.write_bytes(damage(path.read_bytes(), path))
    with pytest.raises(GloamError) as caught:
        read_npz_checked(path, "scan file")
    message = str(caught.value)
    assert f"scan file {str(path)!r}" in message and "has been removed" in message
    assert "start the run again" in message and "\n" not in message
    assert not path.exists()


def test_an_npz_without_a_required_array_is_damaged(tmp_path):
    path = tmp_path / "consensus.npz"
    _good_npz(path)
    with pytest.raises(GloamError, match="no array 'memberships'.*has been removed"):
        read_npz_checked(path, "consensus file", required=["centroids", "memberships"])
    assert not path.exists()


def test_a_damaged_npz_is_kept_when_asked_and_a_missing_one_is_not_called_damaged(tmp_path):
    path = tmp_path / "c2.npz"
    path.write_bytes(b"PK\x03\x04 cut short")
    with pytest.raises(GloamError, match="damaged or incomplete .*; delete it and start"):
        read_npz_checked(path, "scan file", remove_damaged=False)
    assert path.exists()
    with pytest.raises(GloamError, match="does not exist; start the run again"):
        read_npz_checked(tmp_path / "c9.npz", "scan file")


# ---------------------------------------------------------------- damaged .h5ad, full disk


@pytest.mark.parametrize(
    "damage,kind",
    [
        (lambda whole: whole[: len(whole) // 2], "damaged or incomplete"),  # a copy cut short
        (lambda whole: b"", "empty"),
        (lambda whole: b"gene\tt0\ng1\t0.5\n", "not an HDF5 file"),
        # HDF5 file format specification 3.0, II.A: the superblock starts with an 8-byte
        # signature; zeroing it makes the file unrecognisable as HDF5.
        (lambda whole: bytes(8) + whole[8:], "damaged or incomplete"),
    ],
)
def test_a_damaged_h5ad_is_named_in_one_line_and_kept(tmp_path, damage, kind):
    from gloam.io import read_h5ad_checked

    path = tmp_path / "prepared.h5ad"
    anndata.AnnData(np.arange(6.0).reshape(2, 3)).write_h5ad(path)
    path.write_bytes(damage(path.read_bytes()))
    before = path.read_bytes()
    with pytest.raises(GloamError) as caught:
        read_h5ad_checked(path, "prepared matrix", remake="run gloam prepare again")
    message = str(caught.value)
    assert message.startswith(f"prepared matrix {str(path)!r} cannot be read as .h5ad")
    assert kind in message and message.endswith("run gloam prepare again")
    assert "\n" not in message
    assert path.read_bytes() == before, "a user's file is never removed or changed"


def test_a_whole_h5ad_is_read_as_written(tmp_path):
    from gloam.io import read_h5ad_checked, write_h5ad

    data = anndata.AnnData(
        np.arange(6.0).reshape(2, 3),
        obs=pd.DataFrame({"condition": ["a", "b"]}, index=["s1", "s2"]),
    )
    write_h5ad(data, tmp_path / "x.h5ad")
    again = read_h5ad_checked(tmp_path / "x.h5ad", "file", remake="")
    assert_allclose(again.X, data.X, rtol=0)
    assert again.obs["condition"].tolist() == ["a", "b"]
    # anndata's own reader (the reference) sees the same object
    reference = anndata.read_h5ad(tmp_path / "x.h5ad")
    assert reference.obs.equals(again.obs) and reference.raw is None


def test_a_full_disk_inside_a_writer_is_one_line_and_leaves_nothing(tmp_path):
    """ENOSPC (POSIX write(2)) raised inside an atomic write; as HDF5 words it via anndata too."""
    import errno as errno_codes

    for raised in (
        OSError(errno_codes.ENOSPC, os.strerror(errno_codes.ENOSPC)),
        OSError("Can't write data (file write failed: errno = 28, error message = 'x')"),
    ):
        with pytest.raises(GloamError, match="disk is full") as caught:
            with atomic_output(tmp_path / "out" / "table.tsv") as temporary:
                temporary.write_text("half")
                raise raised
        assert "run the same command again" in str(caught.value)
        assert list((tmp_path / "out").iterdir()) == []
    with pytest.raises(OSError, match="Input/output"):  # other OS errors pass unchanged
        with atomic_output(tmp_path / "out" / "table.tsv"):
            raise OSError(errno_codes.EIO, "Input/output error")


# ---------------------------------------------------------------- wide matrices


@pytest.mark.parametrize("separator,suffix", [("\t", ".tsv"), (",", ".csv")])
def test_a_wide_matrix_reads_as_pandas_reads_it_by_rows(tmp_path, monkeypatch, separator, suffix):
    """The reader by columns (many samples, few genes) against pandas.read_csv of the same
    text (the reference), with quoted cells, missing-value markers and a gene named NA."""
    rng = np.random.default_rng(3)
    n_samples = 400
    values = rng.normal(size=(3, n_samples)).round(6).astype(object)
    values[0, 5], values[1, 7], values[2, 9] = "", "NA", '"1.5"'
    genes = ["NA", '"g,1"' if separator == "," else "g\\t1", "0001"]
    text = separator.join(["gene", *[f"s{i}" for i in range(n_samples)]]) + "\n"
    text += "".join(
        separator.join([gene, *map(str, row)]) + "\n"
        for gene, row in zip(genes, values, strict=True)
    )
    path = write_text(tmp_path / f"wide{suffix}", text)
    monkeypatch.setattr(gloam.io, "_parse_tall", _not_by_rows)
    matrix = read_matrix(path)
    monkeypatch.undo()
    expected = pd.read_csv(
        path, sep=separator, index_col=0, dtype={"gene": str}, keep_default_na=False,
        na_values={f"s{i}": ["", "NA"] for i in range(n_samples)},
    )  # fmt: skip
    assert matrix.index.tolist() == expected.index.tolist()
    assert_allclose(matrix.to_numpy(), expected.to_numpy(dtype=float), rtol=0)


def _not_by_rows(*args, **kwargs):
    raise AssertionError("a wide matrix was read by rows")


def test_a_wide_matrix_names_the_first_cell_that_is_not_a_number(tmp_path, monkeypatch):
    n_samples = 300
    rows = [["1"] * n_samples for _ in range(3)]
    rows[2][4], rows[1][4], rows[0][9] = "low", "high", "x"
    text = "gene\t" + "\t".join(f"s{i}" for i in range(n_samples)) + "\n"
    text += "".join(f"g{k}\t" + "\t".join(row) + "\n" for k, row in enumerate(rows))
    path = write_text(tmp_path / "wide.tsv", text)
    monkeypatch.setattr(gloam.io, "_parse_tall", _not_by_rows)
    with pytest.raises(GloamError, match="value 'high' for gene 'g1' in sample 's4' .*2 such"):
        read_matrix(path)
    monkeypatch.undo()  # the same cell is named when the matrix is read by rows
    monkeypatch.setattr(gloam.io, "_WIDE_MAX_ROWS", 0)
    with pytest.raises(GloamError, match="value 'high' for gene 'g1' in sample 's4' .*2 such"):
        read_matrix(path)
