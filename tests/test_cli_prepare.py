"""``gloam prepare`` run as a real process: results on success, one line and exit 2 on error.

The inputs are small files written in each test; expected numbers come from NumPy applied
directly to the same values (outside the package's code path).
"""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

RESULT_FILES = ["prepared.h5ad", "prepared.tsv", "gene_report.tsv", "summary.tsv"]
SAMPLES = [f"s{t}_{r}" for t in (0, 2, 6) for r in (1, 2)]
TIMES = [t for t in (0, 2, 6) for _ in (1, 2)]


def run_gloam(*arguments: object) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "gloam.cli", *map(str, arguments)],
        capture_output=True,
        text=True,
        timeout=120,
    )


def write_inputs(directory: Path, *, n_genes: int = 20) -> tuple[Path, Path, pd.DataFrame]:
    rng = np.random.default_rng(11)
    counts = pd.DataFrame(
        rng.poisson(rng.uniform(30, 300, size=(n_genes, 1)), size=(n_genes, 6)),
        index=pd.Index([f"{i:04d}" for i in range(n_genes - 1)] + ["1-Mar"], name="gene"),
        columns=SAMPLES,
    )
    matrix = directory / "counts.tsv"
    counts.to_csv(matrix, sep="\t")
    sheet = directory / "samples.tsv"
    pd.DataFrame({"sample": SAMPLES, "time": TIMES}).to_csv(sheet, sep="\t", index=False)
    return matrix, sheet, counts


def test_prepare_writes_the_four_result_files(tmp_path):
    matrix, sheet, counts = write_inputs(tmp_path)
    out = tmp_path / "out"
    result = run_gloam(
        "prepare", "--matrix", matrix, "--samples", sheet, "--value-type", "counts",
        "--out-dir", out, "--min-samples-expressed", "0",
        "--normalisation", "cpm", "--gene-selection", "all",
    )  # fmt: skip
    assert result.returncode == 0, result.stderr
    assert sorted(path.name for path in out.iterdir()) == sorted(RESULT_FILES)
    table = pd.read_csv(out / "prepared.tsv", sep="\t", dtype={"gene": str}).set_index("gene")
    assert table.columns.tolist() == ["t0", "t2", "t6"]
    assert "1-Mar" in table.index and "0001" in table.index
    # Direct NumPy: mean of log2(CPM + 1) over the two replicates, then z-score (ddof=1).
    values = counts.to_numpy(dtype=float)
    log_cpm = np.log2(values / values.sum(axis=0) * 1e6 + 1)
    means = log_cpm.reshape(len(counts), 3, 2).mean(axis=2)
    z = (means - means.mean(axis=1, keepdims=True)) / means.std(axis=1, ddof=1, keepdims=True)
    expected = pd.DataFrame(z, index=counts.index).loc[table.index]
    assert_allclose(table.to_numpy(), expected.to_numpy(), rtol=1e-5, atol=1e-6)
    summary = pd.read_csv(out / "summary.tsv", sep="\t")
    assert summary["n_genes"].sum() == len(counts)


def test_settings_file_is_read_and_options_override_it(tmp_path):
    matrix, sheet, _ = write_inputs(tmp_path)
    settings = tmp_path / "prepare.yaml"
    settings.write_text("top_variable: 3\nmin_samples_expressed: 0\n", encoding="utf-8")
    out = tmp_path / "out"
    result = run_gloam(
        "prepare", "--matrix", matrix, "--samples", sheet, "--value-type", "counts",
        "--out-dir", out, "--settings", settings, "--top-variable", "5",
        "--gene-selection", "all",
    )  # fmt: skip
    assert result.returncode == 0, result.stderr
    report = pd.read_csv(out / "gene_report.tsv", sep="\t")
    assert (report["status"] == "kept").sum() == 5


def test_unlisted_samples_and_fractional_counts_are_one_line_warnings(tmp_path):
    matrix, sheet, counts = write_inputs(tmp_path)
    (counts + 0.5).assign(extra=1).to_csv(matrix, sep="\t")
    result = run_gloam(
        "prepare", "--matrix", matrix, "--samples", sheet, "--value-type", "counts",
        "--out-dir", tmp_path / "out", "--gene-selection", "all",
    )  # fmt: skip
    assert result.returncode == 0, result.stderr
    lines = result.stderr.strip().splitlines()
    assert any(line.startswith("gloam: warning: 1 matrix column(s)") for line in lines)
    assert any("non-integer values" in line for line in lines)
    assert all(line.startswith("gloam: warning:") for line in lines)


def _bad_matrix(text: str):
    def change(matrix: Path, sheet: Path) -> list[str]:
        matrix.write_text(text, encoding="utf-8")
        return []

    return change


def _bad_sheet(text: str):
    def change(matrix: Path, sheet: Path) -> list[str]:
        sheet.write_text(text, encoding="utf-8")
        return []

    return change


def _options(*options: str):
    def change(matrix: Path, sheet: Path) -> list[str]:
        return list(options)

    return change


def _missing_matrix(matrix: Path, sheet: Path) -> list[str]:
    matrix.unlink()
    return []


HEADER = "gene\t" + "\t".join(SAMPLES) + "\n"
SHEET = "sample\ttime\n" + "".join(f"{s}\t{t}\n" for s, t in zip(SAMPLES, TIMES, strict=True))

BAD_INPUTS = {
    "missing file": (_missing_matrix, "matrix file .* does not exist"),
    "duplicate genes": (
        _bad_matrix(HEADER + "g1\t1\t2\t3\t4\t5\t6\n" * 2),
        "duplicate gene IDs: 'g1' \\(2x\\)",
    ),
    "non-numeric cell": (
        _bad_matrix(HEADER + "g1\t1\t2\t3\tx\t5\t6\n"),
        "value 'x' for gene 'g1' in sample 's2_2' is not a number",
    ),
    "infinite value": (
        _bad_matrix(HEADER + "g1\t1\t2\t3\tinf\t5\t6\ng2\t1\t2\t3\t4\t5\t6\n"),
        "infinite values \\(gene 'g1' in sample 's2_2'\\)",
    ),
    "negative count": (
        _bad_matrix(HEADER + "g1\t1\t2\t3\t-4\t5\t6\ng2\t1\t2\t3\t4\t5\t6\n"),
        "negative values \\(gene 'g1' in sample 's2_2'\\)",
    ),
    "empty matrix": (_bad_matrix(HEADER), "no gene rows; the matrix is empty"),
    "non-numeric time": (
        _bad_sheet(SHEET.replace("s6_1\t6", "s6_1\t6h")),
        "time '6h' of sample 's6_1' is not a finite number",
    ),
    "two time points": (
        _bad_sheet(SHEET.replace("\t6\n", "\t2\n")),
        "cover 2 distinct time point\\(s\\)",
    ),
    "bad sheet columns": (_bad_sheet("name\thour\ns0_1\t0\n"), "lacks the column\\(s\\)"),
    "sheet sample not in matrix": (
        _bad_sheet(SHEET + "s9_1\t9\n"),
        "not columns of the matrix: \\['s9_1'\\]",
    ),
    "unknown option value": (_options("--normalisation", "tmm"), "normalisation='tmm'"),
    "unknown value type": (_options("--value-type", "tpm"), "value_type='tpm'"),
    "out-of-range setting": (
        _options("--max-missing-fraction", "1.5"),
        "max_missing_fraction=1.5 is not allowed",
    ),
}


@pytest.mark.parametrize("case", list(BAD_INPUTS))
def test_bad_input_exits_2_with_one_line_and_no_result_files(tmp_path, case):
    change, message = BAD_INPUTS[case]
    matrix, sheet, _ = write_inputs(tmp_path)
    extra = change(matrix, sheet)
    out = tmp_path / "out"
    result = run_gloam(
        "prepare", "--matrix", matrix, "--samples", sheet, "--value-type", "counts",
        "--out-dir", out, *extra,
    )  # fmt: skip
    assert result.returncode == 2
    assert "Traceback" not in result.stderr
    errors = [line for line in result.stderr.splitlines() if line.startswith("gloam: error:")]
    assert len(errors) == 1, result.stderr
    assert re.search(message, errors[0]), errors[0]
    assert not out.exists() or list(out.iterdir()) == []


def test_unknown_key_in_settings_file_is_named(tmp_path):
    matrix, sheet, _ = write_inputs(tmp_path)
    settings = tmp_path / "prepare.yaml"
    settings.write_text("min_cpm: 1\n", encoding="utf-8")
    result = run_gloam(
        "prepare", "--matrix", matrix, "--samples", sheet, "--value-type", "counts",
        "--out-dir", tmp_path / "out", "--settings", settings,
    )  # fmt: skip
    assert result.returncode == 2
    assert "unknown preparation setting(s) ['min_cpm']" in result.stderr
    assert "Traceback" not in result.stderr


def test_console_script_is_installed_and_shows_prepare():
    script = Path(sys.executable).with_name("gloam")
    if not script.exists():
        pytest.skip("gloam console script not installed beside this interpreter")
    result = subprocess.run([script, "--help"], capture_output=True, text=True, timeout=60)
    assert result.returncode == 0
    assert "prepare" in result.stdout
