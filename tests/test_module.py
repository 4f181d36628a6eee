"""gloam used as a Snakemake module from another workflow in a temporary folder.

A host workflow declares ``module gloam: snakefile: ...; config: config`` and
``use rule * from gloam as gloam_*`` (Snakemake's documented module syntax, "Modularization"
in the Snakemake manual), adds a rule of its own that reads gloam's summary, and records
Python's GC thresholds and the attributes of Snakemake's ``Resource.evaluate`` before and after
loading gloam: a module must leave the host's process as it found it.
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

from gloam.planning import SNAKEFILE

pytestmark = pytest.mark.slow

HOST = """\
import gc

from snakemake.resources import Resource

BEFORE = (gc.get_threshold(), sorted(vars(Resource.evaluate)))


configfile: "config.yaml"


module gloam:
    snakefile:
        {snakefile!r}
    config:
        config


use rule * from gloam as gloam_*


rule host_all:
    input:
        "host/state.txt",
        rules.gloam_all.input,
    default_target: True


rule host_state:
    input:
        summary=f"{{config['results_dir']}}/summary.tsv",
    output:
        "host/state.txt",
    run:
        after = (gc.get_threshold(), sorted(vars(Resource.evaluate)))
        with open(output[0], "w") as handle:
            handle.write(repr((BEFORE, after)))
"""

# Small enough for a real run in well under a minute of CPU time.
CONFIG = {
    "results_dir": "gloam_results",
    "demo": {"out_dir": "gloam_demo", "n_genes": 200},
    "scan": {"min_clusters": 2, "max_clusters": 3, "n_starts": 3, "n_resamples": 2},
    "selection": {"structure_n_null": 10},
    "fuzzifier": {"n_clusters_check": 2},
}


def host_folder(directory: Path) -> Path:
    directory.mkdir(parents=True, exist_ok=True)
    (directory / "Snakefile").write_text(HOST.format(snakefile=str(SNAKEFILE)), encoding="utf-8")
    (directory / "config.yaml").write_text(yaml.safe_dump(CONFIG), encoding="utf-8")
    return directory


def snakemake(directory: Path, *args: str) -> subprocess.CompletedProcess:
    result = subprocess.run(
        [sys.executable, "-m", "snakemake", "--cores", "2", *args],
        cwd=directory,
        capture_output=True,
        text=True,
        timeout=900,
    )
    assert result.returncode == 0, result.stdout + result.stderr
    return result


def test_a_host_workflow_plans_gloam_as_a_module(tmp_path):
    """Paths inside the module (schemas, scripts, captions) resolve from gloam's own rule
    files, not from the host's folder."""
    directory = host_folder(tmp_path / "host")
    output = snakemake(directory, "--dry-run").stdout
    assert "gloam_results/cold_leaf/scan/c3.npz" in output
    for rule in ("gloam_prepare", "gloam_scan", "gloam_summary", "host_state"):
        assert f"rule {rule}:" in output, rule
    assert not (directory / "gloam_results").exists()


def test_a_host_workflow_runs_gloam_and_keeps_its_process_unchanged(tmp_path):
    directory = host_folder(tmp_path / "host")
    snakemake(directory)
    assert (directory / "gloam_results" / "cold_leaf" / "memberships.tsv").stat().st_size > 0
    assert (directory / "gloam_results" / "summary.tsv").is_file()
    before, after = ast.literal_eval((directory / "host" / "state.txt").read_text())
    assert after == before, "loading gloam changed the GC thresholds or patched Snakemake"
    # Everything gloam writes stays in the folders its config names (and Snakemake's own).
    made = {path.name for path in directory.iterdir()}
    assert made <= {"Snakefile", "config.yaml", "host", "gloam_results", "gloam_demo"} | {
        "logs",
        "benchmarks",
        ".snakemake",
    }
