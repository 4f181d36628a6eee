# The plan of the workflow (runs, settings, paths, resources) comes from gloam.planning, which
# is tested without Snakemake; this file only hands it to the rules. A run is one dataset under
# one set of settings (run id "<dataset>", "<dataset>.<variant>", with conditions: separate
# "<dataset>.<condition>[.<variant>]"); every result of a run lives under <results_dir>/<run>/.

import inspect
import os
import sys

from snakemake.exceptions import WorkflowError
from snakemake.rules import Rule

from gloam.errors import GloamError
from gloam.artifacts import FIGURES as ARTIFACT_FIGURES
from gloam.artifacts import figure_files
from gloam.planning import RUN_ID_PATTERN, make_plan


# A mistake in the config or the datasets table ends planning with one line that names it
# and says how to fix it, not with Snakemake's error report (stack frames, schema, config).
# Cluster jobs plan again; only the controlling Snakemake checks that every input file exists.
try:
    PLAN = make_plan(config, check_files=getattr(workflow, "is_main_process", True))
except GloamError as error:
    print(f"gloam: error: {error}", file=sys.stderr)
    raise SystemExit(1)

SETTINGS = PLAN.config


# The shape of a run id, not the list of them: an alternation of every run id in every path
# pattern made a large grid's DAG build measurably slower. No part can hold a "/", so paths
# stay unambiguous; get_run() rejects an id that is not a run, naming the runs.
wildcard_constraints:
    run=RUN_ID_PATTERN,
    c=r"\d+",


# ---------------------------------------------------------------- helpers for the rules
#
# Snakemake looks up the signature of every function it calls for a job, per call (two or three
# lookups per function and job, most of the calls a large grid's dry run makes outside the
# DAG itself). Python's inspect.signature returns a function's __signature__ when it has one
# (PEP 362), so the functions below carry theirs, computed once from the function itself.


def per_job(function):
    """Mark ``function`` as called by Snakemake for every job: its signature, stored on it."""
    function.__signature__ = inspect.signature(function)
    return function


def run_path(run, name):
    """Path of file ``name`` inside the results folder of ``run`` (a wildcard pattern too)."""
    return PLAN.path(run, name)


def get_run(wildcards):
    try:
        return PLAN.run(wildcards.run)
    except GloamError as error:
        raise WorkflowError(str(error))


@per_job
def get_dataset_files(wildcards):
    get_run(wildcards)
    return PLAN.dataset_files(wildcards.run)


@per_job
def get_scan_files(wildcards):
    get_run(wildcards)
    return PLAN.scan_files(wildcards.run)


def shared_inputs(stage):
    """The owner's files that a run sharing ``stage`` links into its folder."""

    @per_job
    def inputs(wildcards):
        get_run(wildcards)
        return PLAN.shared_files(wildcards.run, stage)

    return inputs


def figure_outputs(writer):
    """Output files of the figures that rule ``writer`` draws (gloam.artifacts.FIGURES),
    named ``<figure>_<format>``; the PNG goes into Snakemake's report with its caption."""
    outputs = {}
    for name, relative in figure_files(writer).items():
        path = run_path("{run}", relative)
        if name.endswith("_png"):
            figure = ARTIFACT_FIGURES[name[: -len("_png")]]
            path = report(
                path,
                caption=f"../report/{figure.name}.rst",
                category="{run}",
                subcategory=figure.section,
            )
        outputs[name] = path
    return outputs


# Larger c first: a scan's work grows with c, so starting the longest scans first leaves no
# core idle beside one long scan at the end (longest processing time first, Graham 1969).
# The structure tests take about as long as a mid-range scan and the selection waits for
# them, so they start with the largest c. A priority function costs Snakemake planning time
# per job (5 s in the 14,400-scan grid of scripts/bench_dag.py), so plans with more than
# PRIORITY_MAX_SCANS scan jobs, which go to a cluster with many cores, keep constant
# priorities; Snakemake takes a function for priority since 9.x, an older 9 gets constants.
PRIORITY_MAX_SCANS = 2000


@per_job
def scan_priority(wildcards):
    return int(wildcards.c)


@per_job
def structure_priority(wildcards):
    return max(PLAN.cluster_numbers(get_run(wildcards)["run"]))


CALLABLE_PRIORITY = (
    hasattr(Rule, "expand_priority") and PLAN.n_scan_jobs() <= PRIORITY_MAX_SCANS
)
SCAN_PRIORITY = scan_priority if CALLABLE_PRIORITY else 0
STRUCTURE_PRIORITY = structure_priority if CALLABLE_PRIORITY else 0


@per_job
def get_time_unit(wildcards):
    return get_run(wildcards)["time_unit"]


@per_job
def get_final_outputs(wildcards):
    return PLAN.final_outputs()


@per_job
def get_summary_inputs(wildcards):
    return PLAN.summary_inputs()


@per_job
def get_preparation_params(wildcards):
    return PLAN.preparation_settings(get_run(wildcards)["run"])


@per_job
def get_start_settings(wildcards):
    return PLAN.start_settings(get_run(wildcards)["run"])


@per_job
def get_fuzzifier_settings(wildcards):
    return PLAN.fuzzifier_settings(get_run(wildcards)["run"])


@per_job
def get_selection_settings(wildcards):
    return PLAN.selection_settings(get_run(wildcards)["run"])


@per_job
def get_run_settings(wildcards):
    return PLAN.run_settings(get_run(wildcards)["run"])


@per_job
def get_comparison_settings(wildcards):
    return PLAN.comparison_settings(get_run(wildcards)["run"])


@per_job
def get_report_settings(wildcards):
    return PLAN.report_settings(get_run(wildcards)["run"])


@per_job
def get_run_files(wildcards):
    """Every output of the run but its report page, which is made from them."""
    run = get_run(wildcards)["run"]
    page = PLAN.path(run, "report.html")
    return [path for path in PLAN.run_outputs(run) if path != page]


# ---------------------------------------------------------------- resources
#
# Estimates scale with the size of the job's input on disk (gloam.planning.Plan.resource); the
# config's resources section replaces any of them per rule, and they grow with the attempt
# number, so a job resubmitted after running out of memory (--retries) asks for more.


def _input_mb(input):
    """Summed size of a job's input files in MB, the value ``input.size_mb`` gives.

    ``input.size_mb`` starts an asyncio event loop on every call, which was a quarter of the
    dry run of a large grid; a local file needs one stat. A missing file raises
    FileNotFoundError naming it, which Snakemake turns into "<TBD>" until the file exists,
    as it does for ``input.size_mb``. Storage-plugin files and broken symlinks keep
    Snakemake's own code path (and its error message).
    """
    if any(file.is_storage for file in input):
        return input.size_mb
    try:
        return sum(os.path.getsize(file) / 1024 / 1024 for file in input)
    except FileNotFoundError as error:
        if os.path.islink(error.filename):
            return input.size_mb
        raise


def resource(rule_name, key):
    """The ``key`` (mem_mb or runtime) of each job of a rule, for its resources section."""

    @per_job
    def estimate(wildcards, input, attempt):
        return PLAN.resource(
            rule_name,
            key,
            input_mb=_input_mb(input),
            attempt=attempt,
            run=wildcards.get("run"),
            c=wildcards.get("c"),
        )

    return estimate
