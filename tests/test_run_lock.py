"""`gloam run` refuses a second run that would write into the results folder of a live one.

Two runs from different working folders have separate Snakemake state (each folder's
``.snakemake``), so Snakemake's own lock does not see the other run; sharing a results folder
they would remove each other's temporaries and finished files.  The wrapper therefore also
holds a lock file inside the results folder.  A lock that names a live process is respected
and one whose process has ended is taken over: liveness is POSIX ``kill(pid, 0)`` (it fails
with ESRCH only for a process that does not exist), the usual PID-file practice ("common
practice").  How Snakemake merges configs (``--config`` over the config file, the last
``--configfile`` instead of an earlier one) is from Snakemake's command-line documentation.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from gloam.cli import RESULTS_LOCK, RUN_LOCK, _results_folder

pytestmark = pytest.mark.skipif(not hasattr(os, "killpg"), reason="POSIX process groups")

# A workflow that only waits (stands in for a long first run) or ends at once: the lock
# belongs to the wrapper, not to what Snakemake runs.
WAITING = 'rule wait:\n    localrule: True\n    shell: "sleep 120"\n'
QUICK = 'rule done:\n    localrule: True\n    shell: "true"\n'


def gloam_run(folder: Path, snakefile: Path, **options: object) -> subprocess.Popen[str]:
    return subprocess.Popen(
        [sys.executable, "-m", "gloam.cli", "run", "--snakefile", str(snakefile), "--cores", "1"],
        cwd=folder,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        **options,
    )


def working_folder(root: Path, name: str, results_dir: str) -> Path:
    folder = root / name
    (folder / "config").mkdir(parents=True)
    (folder / "config" / "config.yaml").write_text(f"results_dir: {results_dir}\n")
    return folder


def wait_for(path: Path, process: subprocess.Popen[str], seconds: float = 90.0) -> None:
    deadline = time.monotonic() + seconds
    while not path.exists():
        if process.poll() is not None:
            raise AssertionError(f"the first run ended early: {process.communicate()}")
        if time.monotonic() > deadline:
            raise AssertionError(f"{path} did not appear")
        time.sleep(0.1)


@pytest.mark.slow
def test_a_second_run_from_another_folder_is_refused_while_the_first_uses_the_results(tmp_path):
    shared = tmp_path / "shared"
    waiting, quick = tmp_path / "waiting.smk", tmp_path / "quick.smk"
    waiting.write_text(WAITING)
    quick.write_text(QUICK)
    # The same folder, spelled relative in one config and absolute in the other.
    first_folder = working_folder(tmp_path, "first", "../shared")
    second_folder = working_folder(tmp_path, "second", str(shared))

    first = gloam_run(first_folder, waiting, start_new_session=True)
    try:
        wait_for(shared / RESULTS_LOCK, first)
        second = gloam_run(second_folder, quick)
        _, error = second.communicate(timeout=120)
        assert second.returncode == 2, error
        assert len(error.splitlines()) == 1, error
        assert error.startswith(f"gloam: error: another gloam run (process {first.pid}, ")
        assert str(shared.resolve()) in error and "its own results_dir" in error
        assert f"started in {str(first_folder)!r}" in error
        # Refused before Snakemake started, and its own folder lock given back.
        assert not (second_folder / ".snakemake").exists() or not any(
            (second_folder / ".snakemake").iterdir()
        )
        assert (shared / RESULTS_LOCK).read_text().split()[0] == str(first.pid)
    finally:
        if first.poll() is None:
            os.kill(first.pid, signal.SIGINT)  # Ctrl-C: gloam stops Snakemake and its job
        first.communicate(timeout=120)
    assert first.returncode == 130
    assert not (shared / RESULTS_LOCK).exists() and not (first_folder / RUN_LOCK).exists()

    # With the first run gone, the second folder may use the results folder.
    after = gloam_run(second_folder, quick)
    _, error = after.communicate(timeout=120)
    assert after.returncode == 0, error
    assert not (shared / RESULTS_LOCK).exists() and not (second_folder / RUN_LOCK).exists()


def test_a_results_lock_left_by_a_killed_run_is_taken_over(tmp_path):
    import socket

    ended = subprocess.Popen([sys.executable, "-c", "pass"])
    ended.wait()
    shared = working_folder(tmp_path, "first", "../shared").parent / "shared"
    shared.mkdir()
    (shared / RESULTS_LOCK).write_text(f"{ended.pid} {socket.gethostname()}\n/elsewhere\n")
    folder = tmp_path / "first"
    snakefile = tmp_path / "quick.smk"
    snakefile.write_text(QUICK)
    run = gloam_run(folder, snakefile)
    _, error = run.communicate(timeout=120)
    assert run.returncode == 0, error
    assert not (shared / RESULTS_LOCK).exists()


def test_the_results_folder_is_the_one_snakemake_will_write_into(tmp_path):
    folder = working_folder(tmp_path, "work", "out")
    config = folder / "config" / "config.yaml"
    other = tmp_path / "other.yaml"
    other.write_text("results_dir: from_other\n")
    assert _results_folder(config, [], folder) == folder / "out"
    assert _results_folder(None, [], folder) == folder / "results"  # the schema's default
    # --config wins over the config file; the last --configfile replaces the first.
    assert _results_folder(config, ["--config", "seed=3", "results_dir=/tmp/x"], folder) == (
        Path("/tmp/x").resolve()
    )
    assert _results_folder(config, ["--configfile", str(other)], folder) == (folder / "from_other")
    # A config mistake is left to the workflow's planning, which stops before any job.
    assert _results_folder(config, ["--config", "results_dir=/"], folder) is None
    config.write_text("results_dir: out\nscan: {tol: .nan}\n")
    assert _results_folder(config, [], folder) is None
