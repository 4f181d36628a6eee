"""``gloam cluster`` (and the out-dir and seed checks of ``prepare`` and ``demo``) in process:
a bad option or too small a matrix is one line and exit 2, and nothing is written.

The prepared matrices are made once per module with ``gloam demo`` and ``gloam prepare``;
``--top-variable`` keeps 3 or 2 genes for the cases about the matrix size.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from gloam import stages
from gloam.cli import main
from gloam.errors import GloamError, GloamWarning

QUICK = ["--clusters", "2-3", "--n-starts", "2"]


def _prepare(demo: Path, out_dir: Path, *options: str) -> Path:
    main(
        [
            "prepare", "--matrix", str(demo / "counts.tsv"), "--samples",
            str(demo / "samples.tsv"), "--value-type", "counts", "--out-dir", str(out_dir),
            *options,
        ]
    )  # fmt: skip
    return out_dir / "prepared.h5ad"


@pytest.fixture(scope="module")
def prepared(tmp_path_factory) -> dict[str, Path]:
    """Prepared matrices of the 300-gene demo: all genes, the 3 and the 2 most variable."""
    root = tmp_path_factory.mktemp("prepared")
    main(["demo", "--out-dir", str(root / "demo"), "--n-genes", "300"])
    return {
        "all": _prepare(root / "demo", root / "all", "--gene-selection", "all"),
        "3 genes": _prepare(root / "demo", root / "three", "--top-variable", "3"),
        "2 genes": _prepare(root / "demo", root / "two", "--top-variable", "2"),
    }


def _refused(arguments: list[str], capsys) -> str:
    """Run ``gloam`` expecting exit 2; return the one error line."""
    with pytest.raises(SystemExit) as stop:
        main(arguments)
    assert stop.value.code == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("gloam: error: "), lines
    return lines[0]


def _files_under(directory: Path) -> list[Path]:
    return [path for path in directory.rglob("*") if path.is_file()] if directory.exists() else []


def _cluster(prepared_h5ad: Path, out_dir: Path, *options: str) -> list[str]:
    return ["cluster", "--prepared", str(prepared_h5ad), "--out-dir", str(out_dir), *options]


BAD_CLUSTER_OPTIONS = {
    "no random start": (["--n-starts", "0"], ["--n-starts 0", "at least 1", "--n-starts 20"]),
    "negative tol": (["--tol", "-1"], ["--tol -1", "finite number >= 0", "--tol 1e-4"]),
    "tol not finite": (["--tol", "nan"], ["--tol nan", "finite number >= 0"]),
    "no iteration": (["--max-iter", "0"], ["--max-iter 0", "at least 1", "--max-iter 500"]),
    "one cluster": (["--n-clusters", "1"], ["--n-clusters '1'", ">= 2", "auto or 5"]),
    "n-clusters not a number": (["--n-clusters", "five"], ["--n-clusters 'five'", ">= 2"]),
    "clusters below 2": (["--clusters", "1-3"], ["--clusters '1-3'", "2-10"]),
    "clusters reversed": (["--clusters", "3-2"], ["--clusters '3-2'", "2-10"]),
    "m not above 1": (["--m", "0.5"], ["--m '0.5'", "number > 1", "--m auto"]),
    "m not a number": (["--m", "big"], ["--m 'big'", "randomised"]),
    "threshold above 1": (["--thresholds", "0.5,1.5"], ["1.5 is outside (0, 1]", "0.7"]),
    "threshold not a number": (["--thresholds", "0.5,x"], ["--thresholds '0.5,x'", "0.5,0.7"]),
    "empty time unit": (["--time-unit", ""], ["--time-unit ''", "not empty", "--time-unit h"]),
    "negative seed": (["--seed", "-1"], ["--seed -1", "whole number >= 0", "--seed 1"]),
}


@pytest.mark.parametrize("case", list(BAD_CLUSTER_OPTIONS))
def test_bad_cluster_option_is_refused_before_any_file_is_written(prepared, tmp_path, capsys, case):
    options, words = BAD_CLUSTER_OPTIONS[case]
    out = tmp_path / "out"
    # The bad option comes last, so it overrides the quick defaults where both name it.
    message = _refused(_cluster(prepared["all"], out, *QUICK, *options), capsys)
    for word in words:
        assert word in message
    assert _files_under(out) == []


@pytest.mark.parametrize(
    ("options", "c"),
    [(["--clusters", "2-3"], 3), (["--clusters", "2", "--n-clusters", "5"], 5)],
    ids=["scanned range", "fixed c"],
)
def test_c_not_below_the_number_of_genes_says_how_to_fix_it(prepared, tmp_path, capsys, options, c):
    out = tmp_path / "out"
    message = _refused(_cluster(prepared["3 genes"], out, "--n-starts", "2", *options), capsys)
    assert f"c = {c} needs more than {c} genes" in message
    assert "the prepared matrix has 3 gene(s)" in message
    for fix in ("scan.max_clusters", "--clusters", "--n-clusters", "top_variable", "min_sd"):
        assert fix in message
    assert _files_under(out) == []


def test_too_few_genes_for_the_fuzzifier_says_how_to_fix_it(prepared, tmp_path, capsys):
    out = tmp_path / "out"
    message = _refused(_cluster(prepared["2 genes"], out, *QUICK), capsys)
    assert "needs at least 3 genes" in message
    assert "only 2 gene(s) were left after preparation" in message
    assert "relaxing the preparation filters" in message and "top_variable" in message
    assert _files_under(out) == []


def _subcommand(name: str, prepared: dict[str, Path], out_dir: Path) -> list[str]:
    demo = prepared["all"].parent.parent / "demo"
    return {
        "prepare": [
            "prepare", "--matrix", str(demo / "counts.tsv"), "--samples",
            str(demo / "samples.tsv"), "--value-type", "counts", "--out-dir", str(out_dir),
        ],
        "cluster": _cluster(prepared["all"], out_dir, *QUICK),
        "demo": ["demo", "--out-dir", str(out_dir), "--n-genes", "300"],
    }[name]  # fmt: skip


@pytest.mark.parametrize("name", ["prepare", "cluster", "demo"])
def test_out_dir_that_is_a_file_is_refused(prepared, tmp_path, capsys, name):
    existing = tmp_path / "results"
    existing.write_text("keep me\n", encoding="utf-8")
    message = _refused(_subcommand(name, prepared, existing), capsys)
    assert "is a file, not a directory" in message and "choose a directory path" in message
    assert existing.read_text(encoding="utf-8") == "keep me\n"
    assert [path.name for path in tmp_path.iterdir()] == ["results"]


def test_out_dir_inside_a_file_is_refused(prepared, tmp_path, capsys):
    existing = tmp_path / "results"
    existing.write_text("keep me\n", encoding="utf-8")
    message = _refused(_subcommand("cluster", prepared, existing / "run1"), capsys)
    assert f"lies inside the file {str(existing)!r}" in message
    assert [path.name for path in tmp_path.iterdir()] == ["results"]


def test_demo_refuses_a_negative_seed(tmp_path, capsys):
    out = tmp_path / "demo"
    message = _refused(["demo", "--out-dir", str(out), "--seed", "-1"], capsys)
    assert "--seed -1" in message and "whole number >= 0" in message
    assert _files_under(out) == []


def test_quick_cluster_run_writes_its_results(prepared, tmp_path, capsys):
    out = tmp_path / "out"
    assert main(_cluster(prepared["all"], out, *QUICK)) == 0
    assert "n_clusters_check" not in capsys.readouterr().err
    for name in ("fuzzifier.json", "scan/c2.npz", "scan/c3.npz", "memberships.tsv", "gloam.h5ad"):
        assert (out / name).is_file(), name
    choice = json.loads((out / "fuzzifier.json").read_text(encoding="utf-8"))
    assert choice["n_clusters_check"] == 6 and choice["n_genes"] == 300


# ------------------------------------------------------------------ the stages behind the workflow


def _zscores(n_genes: int) -> pd.DataFrame:
    values = np.random.default_rng(3).normal(size=(n_genes, 6))
    return pd.DataFrame(values, index=pd.Index([f"g{i}" for i in range(n_genes)], name="gene"))


def test_scan_stage_refuses_c_not_below_the_number_of_genes(tmp_path):
    scan_input = tmp_path / "scan_input.npz"
    stages.write_scan_input(_zscores(3), 1.5, scan_input)
    settings = {"n_starts": 2, "tol": 1e-4, "max_iter": 50, "init": "kmeans++", "precision": "fast"}
    with pytest.raises(GloamError, match=r"c = 3 needs more than 3 genes.*scan.max_clusters"):
        stages.run_scan(scan_input, 3, settings, 1, tmp_path / "scan" / "c3.npz")
    assert not (tmp_path / "scan").exists()


def test_fuzzifier_stage_refuses_fewer_than_3_genes(tmp_path):
    with pytest.raises(GloamError, match=r"at least 3 genes, but only 2 gene\(s\) were left"):
        stages.write_fuzzifier_choice(
            _zscores(2), {"m": "auto", "n_clusters_check": 6}, 1,
            tmp_path / "fuzzifier.json", tmp_path / "curve.tsv",
        )  # fmt: skip
    assert list(tmp_path.iterdir()) == []


def test_fuzzifier_stage_warns_when_it_lowers_n_clusters_check(tmp_path):
    with pytest.warns(GloamWarning, match=r"n_clusters_check = 500 was lowered to 9 .* has 10"):
        m = stages.write_fuzzifier_choice(
            _zscores(10), {"m": "auto", "n_clusters_check": 500}, 1,
            tmp_path / "fuzzifier.json", tmp_path / "curve.tsv",
        )  # fmt: skip
    assert math.isfinite(m) and m > 1
    choice = json.loads((tmp_path / "fuzzifier.json").read_text(encoding="utf-8"))
    assert choice["n_clusters_check"] == 9


def test_a_shortened_option_name_is_refused_not_guessed(prepared, tmp_path, capsys):
    out = tmp_path / "out"
    with pytest.raises(SystemExit) as stop:
        main(
            [
                "cluster",
                "--prepared",
                str(prepared["all"]),
                "--out-dir",
                str(out),
                "--cluster",
                "2-3",
            ]
        )
    assert stop.value.code == 2
    assert "unrecognized arguments: --cluster 2-3" in capsys.readouterr().err
    assert _files_under(out) == []


def test_rule_logs_show_gloam_warnings_as_one_line(tmp_path, capsys):
    """Inside a workflow job, gloam's own warnings reach the rule's log as one WARNING record
    (and the terminal as one line, as in the command line); other warnings also name their
    category."""
    import warnings

    log = tmp_path / "logs" / "prepare.log"
    with stages.rule_environment(log, 1), warnings.catch_warnings():
        warnings.simplefilter("always")
        warnings.warn("n_clusters_check was lowered to 9", GloamWarning, stacklevel=1)
        warnings.warn("a library's own note", UserWarning, stacklevel=1)
    warned = [line for line in log.read_text(encoding="utf-8").splitlines() if " WARNING " in line]
    assert warned[0].endswith(" WARNING py.warnings: n_clusters_check was lowered to 9")
    assert " WARNING py.warnings: UserWarning: a library's own note (" in warned[1]
    terminal = capsys.readouterr().err.splitlines()
    assert terminal[0] == "gloam: warning: n_clusters_check was lowered to 9"


def test_a_prepared_file_that_is_not_h5ad_says_which_file_to_give(tmp_path, capsys):
    not_h5ad = tmp_path / "prepared.tsv"
    not_h5ad.write_text("gene\tt0\ng1\t0.5\n", encoding="utf-8")
    out = tmp_path / "out"
    line = _refused(_cluster(not_h5ad, out, *QUICK), capsys)
    assert "cannot be read as .h5ad" in line and "prepared.h5ad that gloam prepare" in line
    assert _files_under(out) == []
