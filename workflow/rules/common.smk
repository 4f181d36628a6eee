# Config and datasets validation, the table of runs, path helpers and resource estimates.
#
# A "run" is one dataset under one set of settings: run id "<dataset>" without variants,
# "<dataset>.<variant>" with them, and "<dataset>.<condition>[.<variant>]" when conditions are
# clustered separately. Every result of a run lives under <results_dir>/<run>/.

import copy
import gc
import inspect
import math
import os
import re
import sys
from pathlib import Path

import pandas as pd
import yaml
from snakemake.exceptions import WorkflowError
from snakemake.utils import validate

try:  # how Snakemake's own path helpers spare it a signature lookup per call
    from snakemake.common import overwrite_function_params
except ImportError:  # pragma: no cover - older or newer Snakemake without it
    overwrite_function_params = None

from gloam.errors import GloamError
from gloam.genesets import check_thresholds
from gloam.io import read_sample_sheet
from gloam.schema import describe_schema_violation


# ---------------------------------------------------------------- planning speed
#
# Planning a large grid (200 datasets x 3 variants x 24 c is 17,000 jobs) is Snakemake's own
# per-job work, so this file keeps per-job work small, which is what scripts/bench_dag.py
# measures:
# - Python's cyclic garbage collector rescans the growing job graph every 700 allocations by
#   default; collecting less often cut the dry run of that grid by ~10 % (nothing here relies
#   on prompt collection of reference cycles).
# - Snakemake inspects the signature of every function it calls for a job, once per call;
#   functions marked @job_function carry their parameters, as Snakemake's own path helpers do.
#   Snakemake evaluates every resource of every job through one method of its own (a
#   signature lookup per resource and job: 7 % of the dry run's Python calls on a 50 x 3
#   grid); that method gets its parameters attached the same way, computed from its own
#   signature, so what Snakemake reads is what it would have computed.
gc.set_threshold(50_000, 20, 20)


def job_function(function):
    """Mark ``function`` as called by Snakemake per job (input, params, resources)."""
    if overwrite_function_params is not None:
        overwrite_function_params(function, inspect.signature(function).parameters)
    return function


def _attach_resource_evaluator_params():
    try:
        from snakemake.resources import Resource
    except ImportError:  # pragma: no cover - a Snakemake without it
        return
    evaluate = getattr(Resource, "evaluate", None)
    if overwrite_function_params is None or not inspect.isfunction(evaluate):
        return
    # Snakemake calls it bound to a resource: its parameters without "self".
    parameters = list(inspect.signature(evaluate).parameters.items())[1:]
    overwrite_function_params(evaluate, dict(parameters))


_attach_resource_evaluator_params()


# ---------------------------------------------------------------- config and datasets
#
# A mistake in the config or the datasets table ends planning with one line that names it
# and says how to fix it ("gloam: error: ..."), not with Snakemake's error report (its stack
# frames, and for schema violations the whole schema and config).


def stop(message):
    """End the workflow before any job with one line naming a user's mistake and its fix."""
    print(f"gloam: error: {message}", file=sys.stderr)
    raise SystemExit(1)


SCHEMAS = Path(workflow.basedir) / "workflow" / "schemas"


def validated(data, schema_file, name):
    """Snakemake's schema check (which also fills in defaults), with a one-line message."""
    try:
        validate(data, schema=str(SCHEMAS / schema_file))
    except WorkflowError as error:
        schema = yaml.safe_load((SCHEMAS / schema_file).read_text(encoding="utf-8"))
        records = data.to_dict("records") if isinstance(data, pd.DataFrame) else [data]
        for record in records:
            where = f"{name}, row of dataset {record.get('name')!r}" if len(records) > 1 else name
            problem = describe_schema_violation(record, schema, name=where)
            if problem:
                stop(problem)
        stop(f"{name}: {str(error).strip().splitlines()[0]}")
    return data


validated(config, "config.schema.yaml", "config")
try:  # what the schema cannot say: thresholds that would share file names
    check_thresholds(config["genesets"]["thresholds"])
except GloamError as error:
    stop(f"config genesets.thresholds: {error}")

RESULTS = config["results_dir"].rstrip("/")
DEMO_DIR = config["demo"]["out_dir"].rstrip("/")
# The demo data the workflow writes itself (rule demo_data) when a dataset points at it.
DEMO_FILES = {name: f"{DEMO_DIR}/{name}.tsv" for name in ("counts", "samples", "truth")}
NAME_PATTERN = re.compile(r"^[A-Za-z0-9_-]+$")
SETTING_SECTIONS = ("preparation", "fuzzifier", "scan", "selection")


def _read_datasets(path):
    if not Path(path).is_file():
        stop(
            f"datasets table {path!r} (config key 'datasets') does not exist; create it with "
            "columns name, matrix, samples, value_type or point the key at your table"
        )
    table = pd.read_csv(path, sep="\t", dtype=str, keep_default_na=False, comment="#")
    table.columns = [column.strip() for column in table.columns]
    if "name" not in table.columns:
        stop(
            f"datasets table {path!r} has no 'name' column (found {list(table.columns)}); it "
            "needs tab-separated columns name, matrix, samples, value_type"
        )
    if table.empty:
        stop(f"datasets table {path!r} has no rows; add one row per dataset")
    table = table.apply(lambda column: column.str.strip())
    duplicated = table["name"][table["name"].duplicated()].tolist()
    if duplicated:
        stop(
            f"datasets table {path!r} names datasets twice: {duplicated}; give every row a "
            "name of its own"
        )
    return table.set_index("name", drop=False)


def _check_dataset_files(table, path):
    """Every matrix and sample sheet exists, except the demo files the workflow makes."""
    made_here = {os.path.normpath(file) for file in DEMO_FILES.values()}
    for _, row in table.iterrows():
        for column in ("matrix", "samples"):
            file = row[column]
            if os.path.normpath(file) not in made_here and not Path(file).is_file():
                stop(
                    f"dataset {row['name']!r}: {column} file {file!r} (datasets table {path!r}, "
                    f"column {column}) does not exist; correct the path (relative to the "
                    "working directory) or create the file"
                )


DATASETS = _read_datasets(config["datasets"])
validated(DATASETS, "datasets.schema.yaml", f"datasets table {config['datasets']!r}")
# Checked by the controlling Snakemake only: each cluster job parses this file again, and 14,400
# jobs each looking up every dataset's files would load a shared file system for nothing.
if getattr(workflow, "is_main_process", True):
    _check_dataset_files(DATASETS, config["datasets"])


def _merged_settings(variant, overrides):
    """Top-level settings with one variant's overrides on top, validated like the config."""
    merged = copy.deepcopy(config)
    for section in SETTING_SECTIONS:
        merged[section] = {**config[section], **overrides.get(section, {})}
    merged["variants"] = {}
    validated(merged, "config.schema.yaml", f"config variant {variant!r}")
    return {section: merged[section] for section in SETTING_SECTIONS}


def _conditions(dataset):
    """Conditions of a dataset, read from its sample sheet when the workflow starts."""
    path = DATASETS.loc[dataset, "samples"]
    if not Path(path).is_file():
        stop(
            f"dataset {dataset!r}: preparation.conditions is 'separate', which needs the sample "
            f"sheet {path!r} to exist before the workflow starts (conditions become runs); "
            "create it or use conditions: concatenate"
        )
    try:
        sheet = read_sample_sheet(path)
    except GloamError as error:
        stop(f"dataset {dataset!r}: {error}")
    if "condition" not in sheet.columns:
        return [None]
    names = list(dict.fromkeys(sheet["condition"]))
    bad = [name for name in names if not NAME_PATTERN.match(name)]
    if bad:
        stop(
            f"dataset {dataset!r}: condition names {bad} in {path!r} cannot be part of a run id "
            "with conditions: separate; use letters, digits, '_' and '-' only"
        )
    return names


def _build_runs():
    variants = config["variants"] or {None: {}}
    settings_of = {
        variant: _merged_settings(variant, overrides) for variant, overrides in variants.items()
    }
    runs = {}
    for dataset, row in DATASETS.iterrows():
        for variant, settings in settings_of.items():
            scan = settings["scan"]
            if scan["min_clusters"] > scan["max_clusters"]:
                stop(
                    f"scan.min_clusters ({scan['min_clusters']}) is larger than "
                    f"scan.max_clusters ({scan['max_clusters']})"
                    + (f" in variant {variant!r}" if variant else "")
                    + "; make min_clusters <= max_clusters"
                )
            separate = settings["preparation"]["conditions"] == "separate"
            for condition in _conditions(dataset) if separate else [None]:
                run = ".".join(part for part in (dataset, condition, variant) if part)
                runs[run] = {
                    "run": run,
                    "dataset": dataset,
                    "condition": condition,
                    "variant": variant,
                    "value_type": row["value_type"],
                    "layer": row["layer"] or None,
                    **settings,
                }
    return runs


RUNS = _build_runs()


# The shape of a run id, not the list of them: an alternation of every run id is embedded in
# every path pattern and made a large grid's DAG build measurably slower. No part can hold a
# "/", so paths stay unambiguous; get_run() rejects an id that is not a run, naming the runs.
wildcard_constraints:
    run=r"[A-Za-z0-9_-]+(?:\.[A-Za-z0-9_-]+){0,2}",
    c=r"\d+",


# ---------------------------------------------------------------- path helpers


def run_path(run, name):
    """Path of file ``name`` inside the results folder of ``run``."""
    return f"{RESULTS}/{run}/{name}"


def get_run(wildcards):
    try:
        return RUNS[wildcards.run]
    except KeyError:
        raise WorkflowError(
            f"unknown run {wildcards.run!r} in a requested path; a run is <dataset>, or "
            "<dataset>.<variant> with config 'variants' (plus .<condition> with conditions: "
            f"separate); known runs: {sorted(RUNS)}"
        )


@job_function
def get_dataset_files(wildcards):
    dataset = DATASETS.loc[get_run(wildcards)["dataset"]]
    return {"matrix": dataset["matrix"], "samples": dataset["samples"]}


def cluster_numbers(run):
    """Every c scanned for ``run`` (a RUNS entry): the configured range plus a fixed c."""
    scan = run["scan"]
    numbers = set(range(scan["min_clusters"], scan["max_clusters"] + 1))
    fixed = run["selection"]["n_clusters"]
    if fixed != "auto":
        numbers.add(int(fixed))
    return sorted(numbers)


@job_function
def get_scan_files(wildcards):
    run = get_run(wildcards)
    return [run_path(run["run"], f"scan/c{c}.npz") for c in cluster_numbers(run)]


FIGURES = ("profiles", "validity", "fuzzifier", "overview")


def run_outputs(run):
    """Every file a finished run leaves behind.

    All of them are targets: Snakemake reruns a job for a missing output only when that
    output is asked for, so a deleted file that no rule reads is made again only if listed.
    """
    files = [
        run_path(run, name)
        for name in (
            "prepared/zscores.tsv",
            "prepared/gene_report.tsv",
            "prepared/summary.tsv",
            "fuzzifier.json",
            "fuzzifier_curve.tsv",
            "memberships.tsv",
            "centroids.tsv",
            "clusters.tsv",
            "robustness.tsv",
            "validity.tsv",
            "selection.json",
            "gloam.h5ad",
            "genesets",
        )
    ]
    files += [
        run_path(run, f"figures/{figure}.{suffix}")
        for figure in FIGURES
        for suffix in ("png", "pdf", "svg")
    ]
    return files


def get_final_outputs(wildcards=None):
    files = [f"{RESULTS}/summary.tsv"]
    for run in RUNS:
        files += run_outputs(run)
    return files


@job_function
def get_summary_inputs(wildcards):
    return {
        "fuzzifier": [run_path(run, "fuzzifier.json") for run in RUNS],
        "selection": [run_path(run, "selection.json") for run in RUNS],
        "consensus": [run_path(run, "consensus.npz") for run in RUNS],
    }


# ---------------------------------------------------------------- parameters for scripts


@job_function
def get_preparation_params(wildcards):
    run = get_run(wildcards)
    return {
        **run["preparation"],
        "value_type": run["value_type"],
        "condition": run["condition"],
        "layer": run["layer"],
    }


# The scan settings that change what one c's job computes. The range of c is left out, so
# widening it runs only the new c and keeps the scans already made.
START_SETTINGS = (
    "n_starts",
    "tol",
    "max_iter",
    "init",
    "precision",
    "min_starts_at_optimum",
    "max_starts",
    "noise_class",
    "n_resamples",
)


@job_function
def get_start_settings(wildcards):
    scan = get_run(wildcards)["scan"]
    return {key: scan[key] for key in START_SETTINGS}


@job_function
def get_fuzzifier_settings(wildcards):
    return get_run(wildcards)["fuzzifier"]


@job_function
def get_selection_settings(wildcards):
    return get_run(wildcards)["selection"]


@job_function
def get_run_settings(wildcards):
    """Everything recorded in gloam.h5ad about how a run was made."""
    run = get_run(wildcards)
    return {
        "run": run["run"],
        "dataset": run["dataset"],
        "condition": run["condition"],
        "variant": run["variant"],
        "seed": config["seed"],
        "time_unit": config["figures"]["time_unit"],
        **{section: run[section] for section in SETTING_SECTIONS},
    }


# ---------------------------------------------------------------- threads and resources
#
# Estimates scale with the size of the rule's input on disk (MB); the resources section of
# the config replaces any of them per rule. Memory grows with the attempt number, so a job
# resubmitted after running out of memory (--retries) asks for more.


def _override(rule, key):
    return config["resources"].get(rule, {}).get(key)


def get_threads(rule, default):
    return _override(rule, "threads") or default


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


def _estimate(rule, key, value):
    chosen = _override(rule, key)
    return int(chosen) if chosen else int(math.ceil(value))


def mem_mb_for(rule, base_mb, mb_per_input_mb):
    @job_function
    def mem_mb(wildcards, input, attempt):
        size = _input_mb(input)
        return attempt * _estimate(rule, "mem_mb", base_mb + mb_per_input_mb * size)

    return mem_mb


def runtime_for(rule, base_min, min_per_input_mb):
    @job_function
    def runtime(wildcards, input, attempt):
        size = _input_mb(input)
        return attempt * _estimate(rule, "runtime", base_min + min_per_input_mb * size)

    return runtime


@job_function
def scan_mem_mb(wildcards, input, attempt):
    # All starts are kept: memberships of n_starts x n_genes x c beside the data. A scan's
    # memory grew by up to 0.32 MB per MB of input (scan_input.npz) and per start x c
    # (measured: 20,000 genes with 15-character IDs, 3 to 24 columns); 0.5 leaves room for
    # shorter IDs, which make the input smaller for the same genes.
    scan = get_run(wildcards)["scan"]
    c = int(wildcards.c)
    work = _input_mb(input) * (6 + scan["n_starts"] * c / 2)
    return attempt * _estimate("scan", "mem_mb", 500 + work)


@job_function
def select_mem_mb(wildcards, input, attempt):
    # Scan files are read one at a time and their size grows with c: the largest one, its
    # aligned copy and the consensus are in memory at once.
    numbers = cluster_numbers(get_run(wildcards))
    largest = _input_mb(input) * max(numbers) / sum(numbers)
    return attempt * _estimate("select", "mem_mb", 500 + 4 * largest)


@job_function
def scan_runtime(wildcards, input, attempt):
    scan = get_run(wildcards)["scan"]
    c = int(wildcards.c)
    work = _input_mb(input) * scan["n_starts"] * c / 600
    return attempt * _estimate("scan", "runtime", 10 + work)
