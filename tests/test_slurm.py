"""The real workflow through a real SLURM scheduler (single node, brought up by the test).

``tests/slurm_testbed.py`` starts munge, MariaDB, slurmdbd, slurmctld and slurmd on this
machine; Snakemake then runs two small generated datasets with ``--executor slurm`` through the
project's own profile (``config/profiles/slurm``, with the site placeholders filled in for the
test cluster). The independent witness of what happened is SLURM's own accounting database
(``sacct``): every job record, its account, partition, CPUs, memory and the rule that the
executor plugin writes into the job comment. The same datasets also run locally through
``config/profiles/local``; both runs use the same seed, so their memberships must agree.

The SLURM run is interrupted once midway (SIGINT to the controlling Snakemake, as Ctrl-C or
a scheduler's time limit would) and started again, which must resubmit only what is missing.

Skipped, with the reason, when the cluster cannot be built here (not root, no apt, packages
or the executor plugin not installable); a cluster that should come up but does not fails.
"""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import slurm_testbed
import yaml
from cluster_workdirs import local_rules, planned_jobs, write_workdir

REPO = Path(__file__).resolve().parents[1]
SNAKEFILE = REPO / "Snakefile"
SLURM_PROFILE = REPO / "config" / "profiles" / "slurm" / "config.v8+.yaml"
LOCAL_PROFILE = REPO / "config" / "profiles" / "local"
DATASETS = {"alpha": 101, "beta": 202}  # name -> generator seed
CONFIG = {
    "datasets": "datasets.tsv",
    "seed": 7,
    "preparation": {"min_sd": 0.3},
    # Ten scan jobs of a few seconds each (tol=0: every start runs max_iter iterations), two
    # at a time on a 2-CPU node, so the interruption below has a wide window to find one
    # running; with three quick scans per dataset a run once ended between two polls.
    "scan": {"min_clusters": 2, "max_clusters": 6, "n_starts": 40, "tol": 0, "max_iter": 500},
    "genesets": {"thresholds": [0.5]},
}
# The interruption comes once this many jobs have finished and while another one runs: after
# the first stage (prepare for both datasets), during the scans.
INTERRUPT_AFTER_COMPLETED = 4
RUN_TIMEOUT_S = 420

pytestmark = [pytest.mark.slurm, pytest.mark.slow]


# ------------------------------------------------------------------------------ fixtures


@pytest.fixture(scope="module")
def cluster():
    try:
        tb = slurm_testbed.start()
    except slurm_testbed.TestbedUnavailable as reason:
        pytest.skip(str(reason))
    try:
        yield tb
    finally:
        slurm_testbed.stop(tb)
    survivors = {name: p.pid for name, p in tb.procs.items() if p.poll() is None}
    assert not survivors, f"daemons still running after stop(): {survivors}"
    assert not any((tb.root / "pids").glob("*.pid")), "pid files left behind"


@pytest.fixture(scope="module")
def plugin_python(cluster) -> str:
    # After the cluster: importing the plugin asks the controller for its configuration.
    try:
        return str(slurm_testbed.ensure_plugin_venv())
    except slurm_testbed.TestbedUnavailable as reason:
        pytest.skip(str(reason))


def snakemake_args(directory: Path, profile: Path) -> list[str]:
    return [
        "-m", "snakemake", "--snakefile", str(SNAKEFILE), "--directory", str(directory),
        "--configfile", str(directory / "config.yaml"), "--profile", str(profile),
    ]  # fmt: skip


def site_profile(tb: slurm_testbed.Testbed, directory: Path) -> Path:
    """The project's SLURM profile with the test cluster's account and partition added (the
    shipped profile has none: the executor plugin finds the account on a real cluster)."""
    settings = yaml.safe_load(SLURM_PROFILE.read_text(encoding="utf-8"))
    resources = settings["default-resources"]
    assert "slurm_account" not in resources, "the shipped profile must not name an account"
    resources.update(slurm_account=tb.account, slurm_partition=tb.partition)
    profile = directory / "profile"
    profile.mkdir()
    (profile / "config.v8+.yaml").write_text(yaml.safe_dump(settings), encoding="utf-8")
    return profile


@dataclass
class SlurmRun:
    directory: Path
    outputs: list[str]  # stdout+stderr of each Snakemake invocation
    run_ids: list[str]  # the plugin's SLURM run id (the job name) of each invocation
    records: list[list[dict[str, str]]]  # sacct records of each invocation's jobs
    finished_before_interrupt: bool


def _run_id(output: str) -> str:
    match = re.search(r"SLURM run ID: ([0-9a-f-]{36})", output)
    assert match, f"no SLURM run id in Snakemake's output:\n{output[-3000:]}"
    return match.group(1)


def _records_of(tb: slurm_testbed.Testbed, run_id: str) -> list[dict[str, str]]:
    return [r for r in tb.accounting_records() if r["JobName"] == run_id]


def _settled(tb: slurm_testbed.Testbed, run_id: str) -> list[dict[str, str]]:
    """Job records once the database has every job of the run in a final state."""
    deadline = time.monotonic() + 60
    while True:
        records = _records_of(tb, run_id)
        if all(r["State"] not in {"PENDING", "RUNNING", "REQUEUED"} for r in records):
            return records
        if time.monotonic() > deadline:
            return records
        time.sleep(1)


def _sigint_default() -> None:
    """In the child: SIGINT back to its default. A test run started in the background of a
    non-interactive shell inherits SIGINT ignored, and Snakemake would then never see the
    interruption."""
    signal.signal(signal.SIGINT, signal.SIG_DFL)


@pytest.fixture(scope="module")
def slurm_run(cluster, plugin_python, tmp_path_factory) -> SlurmRun:
    tb = cluster
    directory = write_workdir(tmp_path_factory.mktemp("slurm") / "run", DATASETS, CONFIG)
    profile = site_profile(tb, directory)
    command = [
        plugin_python, *snakemake_args(directory, profile),
        # The test cluster is one node with this machine's CPUs; --cores also caps the size of
        # grouped jobs (Snakemake stacks a group's parallel members to fit), which would
        # otherwise ask for more CPUs than the node has and never start.
        "--cores", str(os.cpu_count() or 2),
        # Quicker status polling than the profile's, for seconds-long test jobs.
        "--slurm-init-seconds-before-status-checks", "2",
        "--seconds-between-status-checks", "2",
    ]  # fmt: skip
    env = {k: v for k, v in tb.env.items() if not k.startswith("SNAKEMAKE_")}

    # First invocation: interrupted once some jobs have finished.
    log1 = directory / "snakemake-1.log"
    with open(log1, "w", encoding="utf-8") as out:
        proc = subprocess.Popen(
            command, env=env, stdout=out, stderr=subprocess.STDOUT, preexec_fn=_sigint_default
        )
        try:
            run_id = None
            deadline = time.monotonic() + RUN_TIMEOUT_S
            while proc.poll() is None and time.monotonic() < deadline:
                time.sleep(1)
                if run_id is None:
                    found = re.search(r"SLURM run ID: ([0-9a-f-]{36})", log1.read_text())
                    run_id = found.group(1) if found else None
                    continue
                states = [r["State"] for r in _records_of(tb, run_id)]
                # What each poll saw, for diagnosing a run that ended before its interruption.
                with open(directory / "polls.log", "a", encoding="utf-8") as polls:
                    polls.write(f"{time.monotonic():.1f} {sorted(states)}\n")
                if states.count("COMPLETED") >= INTERRUPT_AFTER_COMPLETED and "RUNNING" in states:
                    proc.send_signal(signal.SIGINT)
                    break
            proc.wait(timeout=180)
        finally:
            if proc.poll() is None:
                proc.kill()
                proc.wait()
    output1 = log1.read_text()
    finished_early = (directory / "results" / "summary.tsv").exists()
    run_id1 = _run_id(output1)
    records1 = _settled(tb, run_id1)

    # Second invocation: the same command, to completion.
    second = subprocess.run(command, env=env, capture_output=True, text=True, timeout=RUN_TIMEOUT_S)
    output2 = second.stdout + second.stderr
    (directory / "snakemake-2.log").write_text(output2, encoding="utf-8")
    assert second.returncode == 0, f"restarted SLURM run failed:\n{output2[-5000:]}"
    run_id2 = _run_id(output2)
    return SlurmRun(
        directory=directory,
        outputs=[output1, output2],
        run_ids=[run_id1, run_id2],
        records=[records1, _settled(tb, run_id2)],
        finished_before_interrupt=finished_early,
    )


@pytest.fixture(scope="module")
def local_run(tmp_path_factory) -> Path:
    directory = write_workdir(tmp_path_factory.mktemp("local") / "run", DATASETS, CONFIG)
    result = subprocess.run(
        [sys.executable, *snakemake_args(directory, LOCAL_PROFILE), "--cores", "2"],
        capture_output=True, text=True, timeout=RUN_TIMEOUT_S,
    )  # fmt: skip
    assert result.returncode == 0, f"local run failed:\n{result.stdout}\n{result.stderr}"
    (directory / "snakemake.log").write_text(result.stdout + result.stderr, encoding="utf-8")
    return directory


# ------------------------------------------------------------------------------ helpers


def declared_resources(output: str) -> dict[tuple[str, str], tuple[int, int]]:
    """(rule, wildcard values joined by '_') -> (threads, mem_mb), from Snakemake's job blocks.

    Only jobs submitted on their own (unindented blocks); members of group jobs are
    indented in the log and share one allocation.
    """
    found = {}
    for block in re.split(r"^(?=rule \w+:$)", output, flags=re.MULTILINE)[1:]:
        rule = block.split(":", 1)[0].removeprefix("rule ")
        block = block.split("\n[", 1)[0]
        wildcards = re.search(r"^    wildcards: (.*)$", block, re.MULTILINE)
        if wildcards is None:  # e.g. the summary: its job comment names no wildcards either
            continue
        values = "_".join(kv.split("=", 1)[1] for kv in wildcards.group(1).split(", "))
        threads = re.search(r"^    threads: (\d+)$", block, re.MULTILINE)
        mem = re.search(r"\bmem_mb=(\d+)", block)
        found[(rule, values)] = (int(threads.group(1)) if threads else 1, int(mem.group(1)))
    return found


def rule_of(comment: str) -> tuple[str, str] | None:
    """(rule, wildcard values) from the plugin's job comment ``rule_<r>_wildcards_<v>``."""
    match = re.fullmatch(r"rule_(\w+?)_wildcards_(.+)", comment)
    return (match.group(1), match.group(2)) if match else None


def read_memberships(path: Path) -> pd.DataFrame:
    return pd.read_csv(path, sep="\t", dtype={"gene": str}).set_index("gene")


# ------------------------------------------------------------------------------ tests


def test_every_rule_ran_as_a_job_of_the_scheduler(slurm_run, cluster):
    """SLURM's accounting database (sacct, an independent record) holds a completed job for
    every rule of the workflow, charged to the profile's account and partition."""
    records = slurm_run.records[0] + slurm_run.records[1]
    assert records, "sacct has no job of either Snakemake invocation"
    completed = [r for r in records if r["State"] == "COMPLETED"]
    # Rules marked `localrule: True` (all, demo data, summary) run on the controller.
    rules = set(planned_jobs(slurm_run.outputs[0])) - local_rules()
    missing = {
        rule
        for rule in rules
        if not any(re.search(rf"(^rule_|_){rule}(_|$)", r["Comment"]) for r in completed)
    }
    assert not missing, f"rules with no completed SLURM job: {sorted(missing)}"
    assert {r["Account"] for r in records} == {cluster.account}
    assert {r["Partition"] for r in records} == {cluster.partition}
    assert all(r["ExitCode"] == "0:0" for r in completed)


def test_jobs_request_the_threads_and_memory_their_rules_declare(slurm_run):
    """Each single-rule job's SLURM allocation (sacct AllocCPUS, ReqMem) equals the threads
    and mem_mb that Snakemake computed for it, so per-rule estimates reach the scheduler."""
    declared = {}
    for output in slurm_run.outputs:
        declared.update(declared_resources(output))
    checked = []
    for record in slurm_run.records[0] + slurm_run.records[1]:
        key = rule_of(record["Comment"])
        if key is None or record["State"] != "COMPLETED":
            continue
        threads, mem_mb = declared[key]
        assert int(record["AllocCPUS"]) == threads, (key, record)
        assert record["ReqMem"] == f"{mem_mb}M", (key, record)
        checked.append(threads)
    assert len(checked) >= len(DATASETS) * 2  # at least prepare and a scan each
    assert max(checked) > 1, "no multi-threaded job: the CPU check compared only 1 with 1"


def test_restart_after_interruption_resubmits_only_missing_jobs(slurm_run):
    """After SIGINT to the controlling Snakemake while jobs run, a second start submits no job
    whose rule and wildcards already completed in the first (per sacct), resubmits the jobs
    the interruption cancelled, and finishes the rest."""
    first, second = slurm_run.records
    assert not slurm_run.finished_before_interrupt, "run ended before it could be interrupted"
    done_first = {rule_of(r["Comment"]) for r in first if r["State"] == "COMPLETED"} - {None}
    assert len(done_first) >= 2
    submitted_second = {rule_of(r["Comment"]) for r in second} - {None}
    assert second, "the restart submitted nothing"
    assert not done_first & submitted_second, f"resubmitted: {done_first & submitted_second}"
    # Jobs the interruption cancelled while they ran are submitted again.
    cancelled = {rule_of(r["Comment"]) for r in first if r["State"].startswith("CANCELLED")}
    cancelled -= {None}
    assert cancelled, "the interruption cancelled no running job"
    assert cancelled <= submitted_second, f"not resubmitted: {cancelled - submitted_second}"
    # Together the two invocations cover every single-rule job of the workflow exactly once
    # among completed ones.
    completed = [rule_of(r["Comment"]) for r in first + second if r["State"] == "COMPLETED"]
    completed = [k for k in completed if k is not None]
    assert len(completed) == len(set(completed))


def test_slurm_results_equal_a_local_run_with_the_same_seed(slurm_run, local_run):
    """Memberships and the summary table from the SLURM run equal those of a local run of
    the same config (same seed, same code), to float formatting precision."""
    for name in DATASETS:
        on_slurm = read_memberships(slurm_run.directory / "results" / name / "memberships.tsv")
        local = read_memberships(local_run / "results" / name / "memberships.tsv")
        assert list(on_slurm.index) == list(local.index)
        assert list(on_slurm.columns) == list(local.columns)
        numeric = local.select_dtypes("number").columns
        np.testing.assert_allclose(
            on_slurm[numeric].to_numpy(), local[numeric].to_numpy(), rtol=0, atol=1e-9
        )
        assert (on_slurm["top_class"] == local["top_class"]).all()
    summary_slurm = pd.read_csv(slurm_run.directory / "results" / "summary.tsv", sep="\t")
    summary_local = pd.read_csv(local_run / "results" / "summary.tsv", sep="\t")
    pd.testing.assert_frame_equal(summary_slurm, summary_local)
