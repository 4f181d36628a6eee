"""A disk that fills up during `gloam demo`, `gloam prepare` and `gloam cluster`.

The output folder lies on a small tmpfs whose size is chosen, from a reference run's files
and their write order, so that the disk fills while one chosen file is being written.  Every
run must then end with exit status 2 and one ``gloam: error:`` line that names the full disk
and what to do, without a traceback, without a hidden temporary, and with every file that is
left being whole; after the disk is enlarged (``mount -o remount,size=...``, tmpfs(5)) the
same command must finish.  Mounting needs root (or CAP_SYS_ADMIN); elsewhere the tests skip.

Whole files are recognised by their format's end marker: PNG's IEND chunk (PNG
specification, W3C 2003, section 11.2.5), PDF's ``%%EOF`` (ISO 32000-1, 7.5.5), the SVG root
element's closing tag, a readable ``.npz`` (NumPy's format, a ZIP archive) and ``.h5ad``
(anndata), parseable JSON and TSV.  tmpfs allocates whole pages of 4 KiB (tmpfs(5)).
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from gloam.cli import main

pytestmark = pytest.mark.slow  # real subprocess runs on a mounted disk (about 2 minutes)

PAGE = 4096
QUICK = ["--clusters", "2-3", "--n-starts", "2", "--n-resamples", "2"]


def mount_tmpfs(where: Path, size: int) -> None:
    where.mkdir(parents=True, exist_ok=True)
    if shutil.which("mount") is None:
        pytest.skip("no mount command: cannot make a small disk to fill")
    done = subprocess.run(
        ["mount", "-t", "tmpfs", "-o", f"size={size}", "tmpfs", str(where)],
        capture_output=True,
        text=True,
    )
    if done.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here (needs root or CAP_SYS_ADMIN): {done.stderr}")


@pytest.fixture
def small_disk(tmp_path):
    """Mount a tmpfs of the size asked for; unmounted after the test."""
    where = tmp_path / "disk"
    mounted = []

    def make(size: int) -> Path:
        mount_tmpfs(where, size)
        mounted.append(where)
        return where

    yield make
    for path in mounted:
        subprocess.run(["umount", str(path)], check=False)


def enlarge(disk: Path, size: int) -> None:
    subprocess.run(["mount", "-o", f"remount,size={size}", str(disk)], check=True)


def gloam(*arguments: object) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "gloam.cli", *map(str, arguments)],
        capture_output=True,
        text=True,
        timeout=600,
    )


def pages(size: int) -> int:
    return -(-size // PAGE) * PAGE


def disk_size_failing_at(reference: Path, name: str) -> int:
    """A tmpfs size that holds every file written before ``name`` and half of ``name``."""
    files = sorted(
        (p for p in reference.rglob("*") if p.is_file()), key=lambda p: p.stat().st_mtime_ns
    )
    target = reference / name
    before = files[: files.index(target)]
    return sum(pages(p.stat().st_size) for p in before) + target.stat().st_size // 2 // PAGE * PAGE


def is_whole(path: Path) -> bool:
    data = path.read_bytes()
    suffix = path.suffix
    if suffix == ".png":
        return data[-12:-4] == b"\x00\x00\x00\x00IEND"[-8:] or data[-8:-4] == b"IEND"
    if suffix == ".pdf":
        return data.rstrip().endswith(b"%%EOF")
    if suffix == ".svg":
        return data.rstrip().endswith(b"</svg>")
    if suffix == ".json":
        json.loads(data)
        return True
    if suffix in (".tsv", ".txt", ".gmt"):
        if data:
            pd.read_csv(path, sep="\t", header=None, quoting=3, engine="python")
        return True
    if suffix == ".npz":
        from gloam.io import read_npz_checked

        read_npz_checked(path, "file", remove_damaged=False)
        return True
    if suffix == ".h5ad":
        from gloam.io import read_h5ad_checked

        read_h5ad_checked(path, "file", remake="")
        return True
    raise AssertionError(f"no wholeness check for {path}")


def assert_refused_for_full_disk(result: subprocess.CompletedProcess[str], disk: Path) -> None:
    assert result.returncode == 2, result.stderr[-3000:]
    assert "Traceback" not in result.stderr, result.stderr[-3000:]
    errors = [line for line in result.stderr.splitlines() if line.startswith("gloam: error:")]
    assert len(errors) == 1 and result.stderr.splitlines()[-1] == errors[0], result.stderr
    assert "disk is full" in errors[0] and "free space" in errors[0]
    assert f"mounted at {str(disk.resolve())!r}" in errors[0]


def assert_no_temporaries(disk: Path) -> None:
    leftovers = [p.name for p in disk.rglob("*") if ".partial" in p.name]
    assert leftovers == []


@pytest.fixture(scope="module")
def reference(tmp_path_factory) -> dict[str, Path]:
    """Reference outputs of each command on an ordinary disk (also the faulted runs' inputs)."""
    root = tmp_path_factory.mktemp("reference")
    main(["demo", "--out-dir", str(root / "demo"), "--n-genes", "300"])
    main(
        ["prepare", "--matrix", str(root / "demo" / "counts.tsv"), "--samples",
         str(root / "demo" / "samples.tsv"), "--value-type", "counts", "--out-dir",
         str(root / "prepared"), "--gene-selection", "all"]
    )  # fmt: skip
    return {"root": root, "demo": root / "demo", "prepared": root / "prepared"}


@pytest.mark.parametrize("failing", ["counts.tsv", "truth.tsv"])
def test_demo_on_a_full_disk_is_one_line_and_leaves_only_whole_files(
    small_disk, reference, failing
):
    disk = small_disk(disk_size_failing_at(reference["demo"], failing))
    out = disk / "demo"
    result = gloam("demo", "--out-dir", out, "--n-genes", "300")
    assert_refused_for_full_disk(result, disk)
    assert_no_temporaries(disk)
    left = sorted(p.name for p in out.iterdir()) if out.exists() else []
    assert failing not in left
    for name in left:  # what is there is what an uninterrupted run writes, byte for byte
        assert (out / name).read_bytes() == (reference["demo"] / name).read_bytes()
    enlarge(disk, 4 << 20)
    assert gloam("demo", "--out-dir", out, "--n-genes", "300").returncode == 0
    for name in ("counts.tsv", "samples.tsv", "truth.tsv"):
        assert (out / name).read_bytes() == (reference["demo"] / name).read_bytes()


@pytest.mark.parametrize("failing", ["prepared.h5ad", "prepared.tsv", "summary.tsv"])
def test_prepare_on_a_full_disk_writes_nothing(small_disk, reference, failing):
    disk = small_disk(disk_size_failing_at(reference["prepared"], failing))
    out = disk / "prepared"
    command = [
        "prepare", "--matrix", reference["demo"] / "counts.tsv", "--samples",
        reference["demo"] / "samples.tsv", "--value-type", "counts", "--out-dir", out,
        "--gene-selection", "all",
    ]  # fmt: skip
    result = gloam(*command)
    assert_refused_for_full_disk(result, disk)
    assert [p for p in disk.rglob("*") if p.is_file()] == []  # all or nothing
    enlarge(disk, 4 << 20)
    assert gloam(*command).returncode == 0
    for name in ("prepared.tsv", "gene_report.tsv", "summary.tsv"):
        assert (out / name).read_bytes() == (reference["prepared"] / name).read_bytes()
    assert is_whole(out / "prepared.h5ad")


@pytest.mark.parametrize(
    "failing",
    ["scan_input.npz", "gloam.h5ad", "figures/overview.png"],
)
def test_cluster_on_a_full_disk_is_one_line_and_leaves_only_whole_files(
    small_disk, reference, failing
):
    clustered = reference["root"] / "clustered"
    prepared = reference["prepared"] / "prepared.h5ad"
    if not clustered.exists():
        main(["cluster", "--prepared", str(prepared), "--out-dir", str(clustered), *QUICK])
    disk = small_disk(disk_size_failing_at(clustered, failing))
    out = disk / "clustered"
    command = ["cluster", "--prepared", prepared, "--out-dir", out, *QUICK]
    result = gloam(*command)
    assert_refused_for_full_disk(result, disk)
    assert_no_temporaries(disk)
    left = [p for p in out.rglob("*") if p.is_file()]
    assert not (out / failing).exists() and left
    assert all(is_whole(path) for path in left)
    enlarge(disk, 8 << 20)
    rerun = gloam(*command)
    assert rerun.returncode == 0, rerun.stderr[-3000:]
    assert_no_temporaries(disk)
    finished = sorted(str(p.relative_to(out)) for p in out.rglob("*") if p.is_file())
    assert finished == sorted(
        str(p.relative_to(clustered)) for p in clustered.rglob("*") if p.is_file()
    )
    assert all(is_whole(out / name) for name in finished)


def test_write_h5ad_on_a_full_disk_is_one_line_and_leaves_nothing(small_disk, reference):
    """The mechanism the .h5ad writers need: HDF5 builds the file in memory, Python writes it."""
    import anndata

    from gloam.errors import GloamError
    from gloam.io import write_h5ad

    source = reference["prepared"] / "prepared.h5ad"
    disk = small_disk(pages(source.stat().st_size) // 2)
    with pytest.raises(GloamError, match="disk is full") as caught:
        write_h5ad(anndata.read_h5ad(source), disk / "copy.h5ad")
    assert "\n" not in str(caught.value) and str(disk.resolve()) in str(caught.value)
    assert list(disk.iterdir()) == []
    enlarge(disk, 4 << 20)
    write_h5ad(anndata.read_h5ad(source), disk / "copy.h5ad")
    again = anndata.read_h5ad(disk / "copy.h5ad")
    original = anndata.read_h5ad(source)
    assert (again.X == original.X).all() and again.obs.equals(original.obs)
    assert os.path.getsize(disk / "copy.h5ad") > 0
