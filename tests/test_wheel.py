"""The installed wheel carries the workflow: `gloam run` from an empty folder, no clone.

The wheel is built with pip (``pip wheel --no-deps``, PEP 517 with build isolation) and
installed, not editable, into a fresh virtual environment. Its dependencies come from the
test's own environment through a ``.pth`` line (Python's ``site`` module adds such a folder to
the path, after the environment's own site-packages), so the installed gloam comes first and no
package index is needed for them.
"""

from __future__ import annotations

import os
import subprocess
import sys
import sysconfig
from pathlib import Path

import pytest
import yaml

pytestmark = pytest.mark.slow

REPO = Path(__file__).resolve().parents[1]

CONFIG = {
    "demo": {"n_genes": 200},
    "scan": {"min_clusters": 2, "max_clusters": 3, "n_starts": 3, "n_resamples": 2},
    "selection": {"structure_n_null": 10},
    "fuzzifier": {"n_clusters_check": 2},
}


def run(command: list[str], **kwargs) -> subprocess.CompletedProcess:
    result = subprocess.run(command, capture_output=True, text=True, timeout=900, **kwargs)
    assert result.returncode == 0, f"{command}\n{result.stdout}\n{result.stderr}"
    return result


@pytest.fixture(scope="module")
def installed(tmp_path_factory) -> Path:
    """A fresh venv with the gloam wheel built from this checkout; returns its bin folder."""
    root = tmp_path_factory.mktemp("wheel")
    run([sys.executable, "-m", "pip", "wheel", "--no-deps", "-q", "-w", str(root), str(REPO)])
    (wheel,) = root.glob("gloam-*.whl")
    venv = root / "venv"
    run([sys.executable, "-m", "venv", str(venv)])
    python = venv / "bin" / "python"
    purelib = run([str(python), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"])
    dependencies = sysconfig.get_paths()["purelib"]
    Path(purelib.stdout.strip(), "test_dependencies.pth").write_text(dependencies + "\n")
    run([str(python), "-m", "pip", "install", "--no-deps", "--no-index", "-q", str(wheel)])
    return venv / "bin"


def test_the_installed_gloam_is_the_wheel_not_the_checkout(installed):
    where = run([str(installed / "python"), "-c", "import gloam; print(gloam.__file__)"])
    location = Path(where.stdout.strip())
    assert installed.parent in location.parents
    assert (location.parent / "workflow" / "Snakefile").is_file()
    assert (location.parent / "workflow" / "scripts" / "rule_scan.py").is_file()


def test_gloam_run_runs_the_demo_from_an_empty_folder(installed, tmp_path):
    empty = tmp_path / "empty"
    empty.mkdir()
    config = tmp_path / "small.yaml"
    config.write_text(yaml.safe_dump(CONFIG), encoding="utf-8")
    environment = {key: value for key, value in os.environ.items() if key != "PYTHONPATH"}
    result = run(
        [str(installed / "gloam"), "run", "--cores", "2", "--configfile", str(config)],
        cwd=empty,
        env=environment,
    )
    output = result.stdout + result.stderr
    # The workflow Snakemake ran is the one inside the installed package.
    assert f"Snakefile: {installed.parent}" in output, output[-3000:]
    memberships = empty / "results" / "cold_leaf" / "memberships.tsv"
    assert memberships.stat().st_size > 0
    assert (empty / "results" / "summary.tsv").is_file()
    assert (empty / "demo_data" / "counts.tsv").is_file()
