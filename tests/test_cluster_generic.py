"""The workflow through Snakemake's generic cluster executor, with a stand-in for a scheduler.

A quicker companion of ``tests/test_slurm.py``, which stays the real test. The executor plugin
``snakemake-executor-plugin-cluster-generic`` hands each cluster job's script to a submit
command; here that command is a small program (``SUBMIT`` below) that records what it was asked
for (threads, memory, runtime, the jobs inside the script) and starts the script in the
background, as a scheduler would on a node. Checked: every job went through the submit command,
a run's ``export`` and ``core_genes`` arrive as one grouped submission, each submission asks
for what its rule declares, and the results equal a local run with the same seed.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from cluster_workdirs import local_rules, planned_jobs, write_workdir

pytest.importorskip(
    "snakemake_executor_plugin_cluster_generic",
    reason="snakemake-executor-plugin-cluster-generic is not installed (it is in the test extra)",
)

REPO = Path(__file__).resolve().parents[1]
SNAKEFILE = REPO / "Snakefile"
DATASETS = {"gamma": 303, "delta": 404}  # name -> generator seed
MAX_CLUSTERS = 4
CONFIG = {
    "datasets": "datasets.tsv",
    "seed": 11,
    "preparation": {"min_sd": 0.3},
    "scan": {"min_clusters": 2, "max_clusters": MAX_CLUSTERS, "n_starts": 4},
    "genesets": {"thresholds": [0.5]},
}
RUN_TIMEOUT_S = 600

# The stand-in scheduler: `submit.py --threads T --mem-mb M --runtime R <jobscript>`.
SUBMIT = r"""
import json, subprocess, sys
from pathlib import Path

*options, jobscript = sys.argv[1:]
record = dict(zip((o.lstrip("-") for o in options[::2]), options[1::2]))
record["jobscript"] = Path(jobscript).read_text(encoding="utf-8")
here = Path(__file__).parent
with open(here / "submissions.jsonl", "a", encoding="utf-8") as log:
    log.write(json.dumps(record) + "\n")
with open(here / "jobs.log", "a", encoding="utf-8") as out:
    job = subprocess.Popen(["/bin/sh", jobscript], stdout=out, stderr=out,
                           start_new_session=True)
print(job.pid)
"""

pytestmark = pytest.mark.slow


def snakemake(directory: Path, *args: str) -> subprocess.CompletedProcess:
    command = [
        sys.executable, "-m", "snakemake", "--snakefile", str(SNAKEFILE),
        "--directory", str(directory), "--configfile", str(directory / "config.yaml"), *args,
    ]  # fmt: skip
    result = subprocess.run(command, capture_output=True, text=True, timeout=RUN_TIMEOUT_S)
    assert result.returncode == 0, f"snakemake {args} failed:\n{result.stdout}\n{result.stderr}"
    return result


@pytest.fixture(scope="module")
def cluster_run(tmp_path_factory) -> tuple[Path, list[dict], str]:
    directory = write_workdir(tmp_path_factory.mktemp("generic") / "run", DATASETS, CONFIG)
    scheduler = directory / "scheduler"
    scheduler.mkdir()
    (scheduler / "submit.py").write_text(SUBMIT, encoding="utf-8")
    submit = (
        f"{sys.executable} {scheduler / 'submit.py'} --threads {{threads}} "
        "--mem_mb {resources.mem_mb} --runtime {resources.runtime}"
    )
    executor = ["--executor", "cluster-generic", "--cluster-generic-submit-cmd", submit]
    plan = snakemake(directory, *executor, "--jobs", "4", "-n").stdout
    snakemake(directory, *executor, "--jobs", "4", "--latency-wait", "10")
    lines = (scheduler / "submissions.jsonl").read_text(encoding="utf-8").splitlines()
    return directory, [json.loads(line) for line in lines], plan


@pytest.fixture(scope="module")
def local_run(tmp_path_factory) -> Path:
    directory = write_workdir(tmp_path_factory.mktemp("local") / "run", DATASETS, CONFIG)
    snakemake(directory, "--cores", "2")
    return directory


def target_jobs(jobscript: str) -> list[tuple[str, str]]:
    """(rule, wildcards) of every job a submitted script runs (its ``--target-jobs``)."""
    match = re.search(r"--target-jobs ((?:'[^']*'\s*)+)", jobscript)
    assert match, f"no --target-jobs in the job script:\n{jobscript}"
    jobs = re.findall(r"'([^':]+):([^']*)'", match.group(1))
    return [(rule, wildcards) for rule, wildcards in jobs]


def test_every_job_is_submitted_once_and_a_runs_finish_is_one_submission(cluster_run):
    _directory, submissions, plan = cluster_run
    submitted = [target_jobs(record["jobscript"]) for record in submissions]
    jobs = [job for batch in submitted for job in batch]
    assert len(jobs) == len(set(jobs)), "a job was submitted twice"
    planned = planned_jobs(plan)
    by_rule = {rule: sum(1 for r, _ in jobs if r == rule) for rule in planned}
    local = local_rules()
    assert by_rule == {rule: 0 if rule in local else n for rule, n in planned.items()}, (
        f"rules {sorted(local)} run on the controller, the rest here"
    )
    expected_scans = len(DATASETS) * (MAX_CLUSTERS - 1)
    assert by_rule["scan"] == expected_scans
    # The two small finishing jobs of a run are one submission (group "finish").
    finishing = [batch for batch in submitted if {r for r, _ in batch} & {"export", "core_genes"}]
    assert len(finishing) == len(DATASETS)
    for batch in finishing:
        assert sorted(r for r, _ in batch) == ["core_genes", "export"]
        assert len({wildcards for _, wildcards in batch}) == 1, "one run per finishing job"


# Threads each rule declares by default and the base of its memory estimate (MB), as
# workflow/rules/*.smk and the README's resources section give them.
DECLARED_THREADS = {
    "prepare": 2,
    "scan": 1,
    "select": 1,
    "structure": 1,
    "summary": 1,
    "compare": 1,
    "report_page": 1,
}
BASE_MEM_MB = {
    "prepare": 1000,
    "scan": 500,
    "select": 500,
    "structure": 600,
    "summary": 500,
    "compare": 1000,
    "report_page": 800,
}


def job_properties(jobscript: str) -> dict:
    """The job's own record that Snakemake writes into the script's header."""
    match = re.search(r"^# properties = (\{.*\})$", jobscript, re.MULTILINE)
    assert match, f"no properties line in the job script:\n{jobscript}"
    return json.loads(match.group(1))


def test_submissions_ask_for_the_threads_and_memory_the_rules_declare(cluster_run):
    _directory, submissions, _plan = cluster_run
    scan_mem = {}
    for record in submissions:
        batch = target_jobs(record["jobscript"])
        if len(batch) > 1:  # the finishing group: its members run one after the other
            assert int(record["threads"]) == 1 and int(record["mem_mb"]) >= 800, record
            continue
        ((rule, wildcards),) = batch
        properties = job_properties(record["jobscript"])
        assert int(record["threads"]) == DECLARED_THREADS[rule] == properties["threads"]
        assert int(record["mem_mb"]) == properties["resources"]["mem_mb"] >= BASE_MEM_MB[rule]
        assert int(record["runtime"]) == properties["resources"]["runtime"] >= 1
        if rule == "scan":
            scan_mem[wildcards] = int(record["mem_mb"])
    # A scan keeps n_starts x genes x c memberships: its memory estimate grows with c.
    for name in DATASETS:
        by_c = [scan_mem[f"run={name},c={c}"] for c in range(2, MAX_CLUSTERS + 1)]
        assert by_c == sorted(by_c), by_c


def test_cluster_results_equal_a_local_run_with_the_same_seed(cluster_run, local_run):
    directory, _submissions, _plan = cluster_run
    for name in DATASETS:
        cluster = pd.read_csv(directory / "results" / name / "memberships.tsv", sep="\t")
        local = pd.read_csv(local_run / "results" / name / "memberships.tsv", sep="\t")
        assert list(cluster.columns) == list(local.columns)
        assert cluster["gene"].tolist() == local["gene"].tolist()
        numeric = cluster.select_dtypes("number").columns
        np.testing.assert_allclose(cluster[numeric], local[numeric], rtol=0, atol=1e-12)
    summary = pd.read_csv(directory / "results" / "summary.tsv", sep="\t")
    assert sorted(summary["run"]) == sorted(DATASETS)
