"""Run planning: a config and a datasets table become runs, file paths and resource requests.

The Snakemake workflow (``gloam/workflow/``) and ``gloam run`` are thin drivers over this
module, which needs no Snakemake and is tested without it. A *run* is one dataset under one
set of settings: run id ``<dataset>`` without variants, ``<dataset>.<variant>`` with them, and
``<dataset>.<condition>[.<variant>]`` when conditions are clustered separately. Every result of
a run lives under ``<results_dir>/<run>/``.

Every mistake in the config or the datasets table is a :class:`~gloam.errors.GloamError` with a
one-line message, raised here before any job starts: schema violations (a number must be
finite and inside the range the code can use), folders that are not folders of their own
(``results_dir: ""`` would write into the file system root), files that do not exist, YAML
syntax errors (with the file's line and column).

The workflow's files ship inside the package (:data:`WORKFLOW_DIR`), so an installed gloam
carries the workflow that matches its library.
"""

from __future__ import annotations

import copy
import csv
import functools
import json
import math
import os
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from gloam.artifacts import FIGURES as ARTIFACT_FIGURES
from gloam.artifacts import RUN_FILES, run_targets
from gloam.errors import GloamError

__all__ = [
    "WORKFLOW_DIR",
    "SNAKEFILE",
    "SCHEMA_DIR",
    "PROFILES_DIR",
    "SETTING_SECTIONS",
    "START_SETTINGS",
    "FIGURES",
    "DEMO_DATASET",
    "SHARED_STAGES",
    "RUN_ID_PATTERN",
    "Plan",
    "read_config_file",
    "overlay",
    "add_config_file",
    "validated_config",
    "own_folder",
    "read_datasets",
    "make_plan",
]

#: The workflow inside the installed package: Snakefile, rules, scripts, schemas, report
#: captions, conda environment and profiles.
WORKFLOW_DIR = Path(__file__).parent / "workflow"
SNAKEFILE = WORKFLOW_DIR / "Snakefile"
SCHEMA_DIR = WORKFLOW_DIR / "schemas"
PROFILES_DIR = WORKFLOW_DIR / "profiles"

#: Config sections a settings variant can override.
SETTING_SECTIONS = ("preparation", "fuzzifier", "scan", "selection")

#: The scan settings that change what one c's job computes. The range of c is left out, so
#: widening it runs only the new c and keeps the scans already made.
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
    "acceleration",
)

#: Figures of a run written under ``figures/`` (each as PNG, PDF and SVG); the registry of
#: figures is :data:`gloam.artifacts.FIGURES`.
FIGURES = tuple(name for name, figure in ARTIFACT_FIGURES.items() if figure.folder == "figures")

#: Stages whose files a run takes from another run with the same upstream settings, and the
#: files each one writes into its run folder (``comparison`` is a folder).
SHARED_STAGES = {
    "prepare": tuple(entry.path for entry in RUN_FILES if entry.writer == "prepare"),
    "scan": (),
    "compare": ("comparison",),
}

#: The shape of a run id (``<dataset>[.<condition>][.<variant>]``), for wildcard constraints.
RUN_ID_PATTERN = r"[A-Za-z0-9_-]+(?:\.[A-Za-z0-9_-]+){0,2}"

#: Name of the built-in demo dataset (config ``datasets: null``).
DEMO_DATASET = "cold_leaf"

_NAME_CHARACTERS = frozenset("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789_-")
_DATASET_COLUMNS = ("name", "matrix", "samples", "value_type", "layer", "time_unit")

# Threads of each rule unless the config's resources section sets them. The m check of
# `prepare` clusters shuffled data and gets 2; a run has one scan job per c, so scans side by
# side fill the cores with one thread each.
_THREADS = {"prepare": 2}

# Memory (MB) and runtime (minutes) of a rule: a base plus a share per MB of the job's input
# on disk. The scan and select memory have formulas of their own (Plan._estimate).
_LINEAR = {
    ("demo_data", "mem_mb"): (1000, 0),
    ("demo_data", "runtime"): (10, 0),
    ("prepare", "mem_mb"): (1000, 12),
    ("prepare", "runtime"): (10, 0.1),
    ("select", "runtime"): (5, 0.05),
    # The structure tests fit null data of at most 4,000 rows each, so they grow little.
    ("structure", "mem_mb"): (600, 4),
    ("structure", "runtime"): (5, 0.05),
    ("export", "mem_mb"): (800, 6),
    ("export", "runtime"): (3, 0.05),
    ("core_genes", "mem_mb"): (800, 6),
    ("core_genes", "runtime"): (3, 0.05),
    ("summary", "mem_mb"): (500, 2),
    ("summary", "runtime"): (2, 0.02),
    # The comparison reads the prepared matrix and the scan files (which hold its clustering
    # at each c) and tests structure once; 585 MB peak at 30,000 genes when it still
    # clustered (38 MB of input then, 84 MB now).
    ("compare", "mem_mb"): (1000, 8),
    ("compare", "runtime"): (5, 0.1),
    ("report_page", "mem_mb"): (800, 4),
    ("report_page", "runtime"): (3, 0.05),
    ("report_index", "mem_mb"): (500, 1),
    ("report_index", "runtime"): (2, 0.01),
}


# ---------------------------------------------------------------- config


def read_config_file(path: str | os.PathLike[str]) -> dict[str, Any]:
    """Read a YAML config file; an empty file is an empty config (every key at its default).

    Raises
    ------
    GloamError
        If the file is missing or unreadable, is not valid YAML (the message gives the line
        and column), or does not hold a mapping of keys.
    """
    import yaml

    name = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise GloamError(f"config file {name!r} does not exist; check the path") from None
    except (OSError, UnicodeDecodeError) as error:
        raise GloamError(
            f"config file {name!r} cannot be read ({error}); give a readable UTF-8 YAML file"
        ) from None
    try:
        loaded = yaml.safe_load(text)
    except yaml.MarkedYAMLError as error:
        mark = error.problem_mark or error.context_mark
        where = f"line {mark.line + 1}, column {mark.column + 1}: " if mark else ""
        problem = " ".join(str(error.problem or error.context or "").split())
        raise GloamError(
            f"config file {name!r} is not valid YAML: {where}{problem}; correct the syntax there"
        ) from None
    except yaml.YAMLError as error:
        raise GloamError(f"config file {name!r} is not valid YAML ({error})") from None
    if loaded is None:
        return {}
    if not isinstance(loaded, dict):
        raise GloamError(
            f"config file {name!r} holds a {type(loaded).__name__}, not a mapping of keys; "
            "write one 'key: value' per line (an empty file runs the demo)"
        )
    return loaded


def overlay(base: Mapping[str, Any], top: Mapping[str, Any]) -> dict[str, Any]:
    """``base`` with ``top`` merged over it, mapping by mapping (as Snakemake merges configs)."""
    merged = copy.deepcopy(dict(base))
    for key, value in top.items():
        if isinstance(value, Mapping) and isinstance(merged.get(key), Mapping):
            merged[key] = overlay(merged[key], value)
        else:
            merged[key] = copy.deepcopy(value)
    return merged


def add_config_file(config: dict[str, Any], path: str | os.PathLike[str]) -> None:
    """Put the config file ``path``, when it exists, under the values ``config`` holds.

    What Snakemake's ``configfile:`` does, in place, except that an empty file is an empty
    config (every key at its default) and a YAML mistake names its line.
    """
    if os.path.isfile(path):
        merged = overlay(read_config_file(path), config)
        config.clear()
        config.update(merged)


@functools.cache
def _schema(name: str) -> dict[str, Any]:
    """A schema of the workflow, read once (validation only reads it)."""
    import yaml

    return yaml.safe_load((SCHEMA_DIR / name).read_text(encoding="utf-8"))


def _validated(document: dict[str, Any], schema: dict[str, Any], name: str) -> dict[str, Any]:
    """``document`` with the schema's defaults filled in, or a one-line GloamError."""
    from gloam.schema import describe_schema_violation, fill_defaults

    checked = copy.deepcopy(document)
    if fill_defaults(checked, schema) is not None:
        problem = describe_schema_violation(document, schema, name=name)
        raise GloamError(problem or f"{name} does not match its schema")
    return checked


def validated_config(config: Mapping[str, Any]) -> dict[str, Any]:
    """The config with every default filled in, checked against the config schema.

    Also checks what the schema cannot say: the gene-set thresholds must not share file names,
    and no variant may scan a range of c with ``min_clusters > max_clusters``.

    Raises
    ------
    GloamError
        Naming the key, the value and what the key accepts.
    """
    from gloam.schema import check_thresholds

    if not isinstance(config, Mapping):
        raise GloamError(f"config must be a mapping of keys, not {type(config).__name__}")
    schema = _schema("config.schema.yaml")
    checked = _validated(dict(config), schema, "config")
    try:
        check_thresholds(checked["genesets"]["thresholds"])
    except GloamError as error:
        raise GloamError(f"config genesets.thresholds: {error}") from None
    return checked


def _merged_settings(
    config: Mapping[str, Any], variant: str | None, overrides: Mapping[str, Any]
) -> dict[str, dict[str, Any]]:
    """Top-level settings with one variant's overrides on top, validated like the config."""
    merged = copy.deepcopy(dict(config))
    for section in SETTING_SECTIONS:
        merged[section] = {**config[section], **overrides.get(section, {})}
    merged["variants"] = {}
    where = "config" + (f" variant {variant!r}" if variant else "")
    merged = _validated(merged, _schema("config.schema.yaml"), where)
    scan = merged["scan"]
    if scan["min_clusters"] > scan["max_clusters"]:
        raise GloamError(
            f"scan.min_clusters ({scan['min_clusters']}) is larger than scan.max_clusters "
            f"({scan['max_clusters']})"
            + (f" in variant {variant!r}" if variant else "")
            + "; make min_clusters <= max_clusters"
        )
    return {section: merged[section] for section in SETTING_SECTIONS}


# ---------------------------------------------------------------- folders and tables


def own_folder(
    key: str, value: str, *, example: str = "results", cwd: str | os.PathLike[str] | None = None
) -> str:
    """Check that ``value`` (config key ``key``) names a folder of its own; return its path.

    A folder of its own is neither the file system root, the home folder, the working
    directory nor one of its parents (results there would mix with, or overwrite, other
    files), is not an existing file or inside one, and can be created or written.

    Parameters
    ----------
    key, value : str
        The config key and its value, for the message.
    example : str
        A good value, for the message.
    cwd : path, optional
        The working directory relative paths refer to (default: the current one).

    Returns
    -------
    str
        The normalised path (``~`` expanded), as the workflow writes it in file names.

    Raises
    ------
    GloamError
        Naming the key, the value and what to give instead.
    """
    fix = f"give a folder of its own, e.g. {key}: {example}"
    if not value.strip():
        raise GloamError(f"config key {key} is empty; {fix}")
    text = os.path.normpath(os.path.expanduser(value))
    here = Path(cwd if cwd is not None else os.getcwd()).resolve()
    folder = (here / text).resolve()
    if folder == Path(folder.anchor):
        problem = "is the file system root"
    elif folder == Path.home().resolve():
        problem = "is the home folder"
    elif folder == here or folder in here.parents:
        problem = "is the working directory or one of its parents"
    else:
        problem = ""
    if problem:
        raise GloamError(f"config key {key} {value!r} {problem}; {fix}")
    for path in (folder, *folder.parents):
        if not path.exists():
            continue
        if not path.is_dir():
            where = "is a file" if path == folder else f"lies inside the file {str(path)!r}"
            raise GloamError(f"config key {key} {value!r} {where}, not a folder; {fix}")
        if not os.access(path, os.W_OK | os.X_OK):
            raise GloamError(
                f"config key {key} {value!r}: the folder {str(path)!r} cannot be written by "
                f"this user; {fix} in a place you can write"
            )
        break
    return text


def _demo_files(demo_dir: str) -> dict[str, str]:
    return {name: f"{demo_dir}/{name}.tsv" for name in ("counts", "samples", "truth")}


def read_datasets(path: str) -> dict[str, dict[str, str]]:
    """Read the datasets table (tab-separated, ``#`` starts a comment line) and check it.

    Returns
    -------
    dict
        Dataset name -> row with keys ``name``, ``matrix``, ``samples``, ``value_type``,
        ``layer`` and ``time_unit`` (defaults filled in), in the table's order.

    Raises
    ------
    GloamError
        If the table is missing, has no ``name`` column or no rows, names a dataset twice,
        has a row with more cells than columns, or a row breaks the datasets schema.
    """
    where = f"datasets table {path!r}"
    try:
        with open(path, encoding="utf-8-sig", newline="") as handle:
            lines = [
                (number, line)
                for number, line in enumerate(handle, start=1)
                if line.strip() and not line.lstrip().startswith("#")
            ]
    except FileNotFoundError:
        raise GloamError(
            f"{where} (config key 'datasets') does not exist; create it with columns name, "
            "matrix, samples, value_type or point the key at your table"
        ) from None
    except (OSError, UnicodeDecodeError) as error:
        raise GloamError(f"{where} cannot be read ({error}); give a UTF-8 text table") from None
    rows = list(csv.reader([line for _, line in lines], delimiter="\t"))
    header = [column.strip() for column in rows[0]] if rows else []
    if "name" not in header:
        raise GloamError(
            f"{where} has no 'name' column (found {header}); it needs tab-separated columns "
            "name, matrix, samples, value_type"
        )
    if len(rows) < 2:
        raise GloamError(f"{where} has no rows; add one row per dataset")
    schema = _schema("datasets.schema.yaml")
    table: dict[str, dict[str, str]] = {}
    for (number, _), cells in zip(lines[1:], rows[1:], strict=True):
        if len(cells) > len(header):
            raise GloamError(
                f"{where}, line {number}: {len(cells)} cells for {len(header)} columns; "
                "separate columns with one tab and leave no tab inside a cell"
            )
        record = {column: cell.strip() for column, cell in zip(header, cells, strict=False)}
        name = record.get("name", "")
        if name in table:
            raise GloamError(
                f"{where} names dataset {name!r} twice; give every row a name of its own"
            )
        row_name = f"{where}, row of dataset {name!r}"
        table[name] = _validated(record, schema, row_name)
    return table


def _conditions(dataset: Mapping[str, str], base: Path) -> list[str | None]:
    """Conditions of a dataset, read from its sample sheet when planning."""
    from gloam.io import read_sample_sheet

    name, path = dataset["name"], dataset["samples"]
    if not (base / path).is_file():
        raise GloamError(
            f"dataset {name!r}: preparation.conditions is 'separate', which needs the sample "
            f"sheet {path!r} to exist before the workflow starts (conditions become runs); "
            "create it or use conditions: concatenate"
        )
    try:
        sheet = read_sample_sheet(base / path)
    except GloamError as error:
        raise GloamError(f"dataset {name!r}: {error}") from None
    if "condition" not in sheet.columns:
        return [None]
    names = [str(value) for value in dict.fromkeys(sheet["condition"])]
    bad = [value for value in names if not value or not set(value) <= _NAME_CHARACTERS]
    if bad:
        raise GloamError(
            f"dataset {name!r}: condition names {bad} in {path!r} cannot be part of a run id "
            "with conditions: separate; use letters, digits, '_' and '-' only"
        )
    return names


# ---------------------------------------------------------------- the plan


def _output_name(relative: str) -> str:
    """Snakemake output name of a run file: ``prepared/zscores.tsv`` -> ``zscores``."""
    return Path(relative).name.split(".")[0]


@dataclass(frozen=True)
class Plan:
    """Every run of a workflow, with its settings, file paths and resource requests.

    Attributes
    ----------
    config : dict
        The validated config, every default filled in.
    datasets : dict
        Dataset name -> datasets-table row (``name``, ``matrix``, ``samples``,
        ``value_type``, ``layer``, ``time_unit``).
    runs : dict
        Run id -> run: ``run``, ``dataset``, ``condition`` and ``variant`` (None when not
        used), ``value_type``, ``layer`` (None for X), ``time_unit`` (the dataset's, else
        the config's ``figures.time_unit``) and the merged settings sections
        ``preparation``, ``fuzzifier``, ``scan`` and ``selection``.
    results_dir : str
        Folder of every result.
    demo_files : dict
        ``counts``, ``samples``, ``truth`` -> path of the demo files the workflow makes.
    """

    config: dict[str, Any]
    datasets: dict[str, dict[str, str]]
    runs: dict[str, dict[str, Any]]
    results_dir: str
    demo_files: dict[str, str]

    # ------------------------------------------------------------ runs and paths

    def run(self, run: str) -> dict[str, Any]:
        """The run with id ``run``; a GloamError naming the known runs if there is none."""
        try:
            return self.runs[run]
        except KeyError:
            raise GloamError(
                f"unknown run {run!r} in a requested path; a run is <dataset>, or "
                "<dataset>.<variant> with config 'variants' (plus .<condition> with "
                f"conditions: separate); known runs: {sorted(self.runs)}"
            ) from None

    def path(self, run: str, name: str) -> str:
        """Path of file ``name`` inside the results folder of ``run`` (any wildcard text)."""
        return f"{self.results_dir}/{run}/{name}"

    def dataset_files(self, run: str) -> dict[str, str]:
        """``matrix`` and ``samples`` of the dataset of ``run``."""
        dataset = self.datasets[self.run(run)["dataset"]]
        return {"matrix": dataset["matrix"], "samples": dataset["samples"]}

    def cluster_numbers(self, run: str) -> list[int]:
        """Every c scanned for ``run``: the configured range plus a fixed c."""
        settings = self.run(run)
        scan = settings["scan"]
        numbers = set(range(scan["min_clusters"], scan["max_clusters"] + 1))
        fixed = settings["selection"]["n_clusters"]
        if fixed != "auto":
            numbers.add(int(fixed))
        return sorted(numbers)

    def n_scan_jobs(self) -> int:
        """Scan jobs of the plan: one per scan owner and c (a run scanning a wider range than
        its owner adds the owner's missing c)."""
        return len(
            {(self.owner(run, "scan"), c) for run in self.runs for c in self.cluster_numbers(run)}
        )

    def scan_files(self, run: str) -> list[str]:
        """The scan files a run's selection reads: its scan owner's, one per scanned c."""
        owner = self.owner(run, "scan")
        return [self.path(owner, f"scan/c{c}.npz") for c in self.cluster_numbers(run)]

    # ------------------------------------------------------------ shared upstream jobs

    def upstream_key(self, run: str, stage: str) -> str:
        """Every setting the files of ``stage`` (prepare, scan or compare) depend on, as text.

        Runs with equal keys would compute the same files, so only the first of them (its
        *owner*, :meth:`owner`) computes them and the others take them from it.
        """
        settings = self.run(run)
        parts: dict[str, Any] = {
            "dataset": settings["dataset"],
            "condition": settings["condition"],
            "value_type": settings["value_type"],
            "layer": settings["layer"],
            "preparation": settings["preparation"],
            "fuzzifier": settings["fuzzifier"],
        }
        if stage in ("scan", "compare"):
            parts["scan"] = self.start_settings(run)
        if stage == "compare":
            parts["selection"] = settings["selection"]
            parts["cluster_numbers"] = self.cluster_numbers(run)
        elif stage not in SHARED_STAGES:
            raise KeyError(f"no shared stage {stage!r}")
        return json.dumps(parts, sort_keys=True, default=str)

    @functools.cached_property
    def _owners(self) -> dict[tuple[str, str], str]:
        owners: dict[tuple[str, str], str] = {}
        for stage in SHARED_STAGES:
            first: dict[str, str] = {}
            for run in self.runs:
                owners[run, stage] = first.setdefault(self.upstream_key(run, stage), run)
        return owners

    def owner(self, run: str, stage: str) -> str:
        """The run whose job makes the ``stage`` files of ``run`` (``run`` itself, or the
        first run in the plan with the same upstream settings)."""
        self.run(run)
        return self._owners[run, stage]

    def sharing_runs(self, stage: str) -> list[str]:
        """Runs that take their ``stage`` files from another run."""
        return [run for run in self.runs if self._owners[run, stage] != run]

    def run_pattern(self, runs: Sequence[str]) -> str:
        """A wildcard constraint matching exactly ``runs`` (nothing when empty)."""
        if not runs:
            return "(?!)"
        return "|".join(re.escape(run) for run in runs)

    def owner_pattern(self, stage: str) -> str:
        """A wildcard constraint for the job that computes ``stage``: every run id when no
        run shares (a long alternation slows a large grid's planning), else the owners."""
        if not self.sharing_runs(stage):
            return RUN_ID_PATTERN
        return self.run_pattern([run for run in self.runs if self.owner(run, stage) == run])

    def shared_outputs(self, stage: str) -> dict[str, str]:
        """Output name -> path pattern (wildcard ``{run}``) of the files a run shares."""
        return {_output_name(name): self.path("{run}", name) for name in SHARED_STAGES[stage]}

    def shared_files(self, run: str, stage: str) -> dict[str, str]:
        """Output name -> the owner's file, for the job that links them into ``run``."""
        owner = self.owner(run, stage)
        return {_output_name(name): self.path(owner, name) for name in SHARED_STAGES[stage]}

    def run_outputs(self, run: str) -> list[str]:
        """Every file a finished run leaves behind.

        All of them are targets: Snakemake remakes a missing output only when it is asked
        for, so a deleted file that no rule reads is made again only if listed.
        """
        names = run_targets()
        return [self.path(run, name) for name in names]

    def summary_path(self) -> str:
        return f"{self.results_dir}/summary.tsv"

    def sensitivity_path(self) -> str:
        """How much each dataset's clusters change across its settings variants."""
        return f"{self.results_dir}/sensitivity.tsv"

    def matches_path(self) -> str:
        """Clusters of different datasets matched (runs under the same settings)."""
        return f"{self.results_dir}/matches.tsv"

    def index_path(self) -> str:
        """The report page over every run."""
        return f"{self.results_dir}/index.html"

    def report_pages(self) -> dict[str, str]:
        """Run id -> its report page."""
        return {run: self.path(run, "report.html") for run in self.runs}

    def comparison_settings(self, run: str) -> dict[str, Any]:
        """What the comparison of a run's conditions reads: its scan (start settings and the
        scanned c), selection criteria, FDR level and smallest log2 range, and a prefix."""
        settings = self.run(run)
        return {
            "scan": self.start_settings(run),
            "selection": settings["selection"],
            "cluster_numbers": self.cluster_numbers(run),
            "fdr": settings["preparation"]["fdr"],
            "min_log2_range": settings["preparation"]["min_log2_range"],
            "prefix": self.owner(run, "compare"),
        }

    def report_settings(self, run: str) -> dict[str, Any]:
        """The run's recorded settings plus the gene-set thresholds, for its report page."""
        return {
            **self.run_settings(run),
            "genesets": {"thresholds": list(self.config["genesets"]["thresholds"])},
        }

    def final_outputs(self) -> list[str]:
        """The summary table, the index page and every output of every run."""
        files = [
            self.summary_path(),
            self.index_path(),
            self.sensitivity_path(),
            self.matches_path(),
        ]
        for run in self.runs:
            files += self.run_outputs(run)
        return files

    def summary_inputs(self) -> dict[str, list[str]]:
        return {
            key: [self.path(run, name) for run in self.runs]
            for key, name in (
                ("fuzzifier", "fuzzifier.json"),
                ("selection", "selection.json"),
                ("consensus", "consensus.npz"),
            )
        }

    def summary_runs(self) -> list[dict[str, Any]]:
        """What the summary table says about each run."""
        keys = ("run", "dataset", "condition", "variant")
        return [{key: settings[key] for key in keys} for settings in self.runs.values()]

    # ------------------------------------------------------------ settings of a job

    def preparation_settings(self, run: str) -> dict[str, Any]:
        settings = self.run(run)
        return {
            **settings["preparation"],
            "value_type": settings["value_type"],
            "condition": settings["condition"],
            "layer": settings["layer"],
        }

    def start_settings(self, run: str) -> dict[str, Any]:
        scan = self.run(run)["scan"]
        return {key: scan[key] for key in START_SETTINGS}

    def fuzzifier_settings(self, run: str) -> dict[str, Any]:
        return self.run(run)["fuzzifier"]

    def selection_settings(self, run: str) -> dict[str, Any]:
        return self.run(run)["selection"]

    def run_settings(self, run: str) -> dict[str, Any]:
        """Everything recorded in gloam.h5ad about how a run was made."""
        settings = self.run(run)
        return {
            **{key: settings[key] for key in ("run", "dataset", "condition", "variant")},
            "seed": self.config["seed"],
            "time_unit": settings["time_unit"],
            **{section: settings[section] for section in SETTING_SECTIONS},
        }

    # ------------------------------------------------------------ threads and resources

    def _override(self, rule: str, key: str) -> int | None:
        return self.config["resources"].get(rule, {}).get(key)

    def threads(self, rule: str) -> int:
        """Threads of ``rule``: the config's resources section, else the rule's default."""
        return self._override(rule, "threads") or _THREADS.get(rule, 1)

    def _estimate(self, rule: str, key: str, input_mb: float, run: str | None, c: int | None):
        if (rule, key) in _LINEAR:
            base, per_mb = _LINEAR[rule, key]
            return base + per_mb * input_mb
        if rule == "scan":
            # All starts are kept: memberships of n_starts x n_genes x c beside the data. A
            # scan's memory grew by up to 0.32 MB per MB of input (scan_input.npz) and per
            # start x c (measured: 20,000 genes with 15-character IDs, 3 to 24 columns); 0.5
            # leaves room for shorter IDs, which make the input smaller for the same genes.
            work = input_mb * self.run(run)["scan"]["n_starts"] * int(c)
            if key == "mem_mb":
                return 500 + input_mb * 6 + work / 2
            return 10 + work / 600
        if (rule, key) == ("select", "mem_mb"):
            # Scan files are read one at a time and grow with c: the largest one, its
            # aligned copy and the consensus are in memory at once.
            numbers = self.cluster_numbers(run)
            return 500 + 4 * input_mb * max(numbers) / sum(numbers)
        raise KeyError(f"no {key} estimate for rule {rule!r}")

    def resource(
        self,
        rule: str,
        key: str,
        *,
        input_mb: float,
        attempt: int = 1,
        run: str | None = None,
        c: int | str | None = None,
    ) -> int:
        """``mem_mb`` (MB) or ``runtime`` (minutes) of one job of ``rule``.

        Parameters
        ----------
        input_mb : float
            Summed size of the job's input files in MB.
        attempt : int
            Snakemake's attempt number: a job resubmitted after running out of memory or
            time (``--retries``) asks for this multiple of the first request.
        run, c : optional
            The job's wildcards (scan and select estimates depend on the run's settings).

        Returns
        -------
        int
            The config's ``resources`` value for the rule when set, else the estimate from
            the input size, rounded up; times ``attempt``.
        """
        chosen = self._override(rule, key)
        value = chosen or math.ceil(self._estimate(rule, key, input_mb, run, c))
        return int(attempt) * int(value)


def make_plan(
    config: Mapping[str, Any],
    *,
    check_files: bool = True,
    cwd: str | os.PathLike[str] | None = None,
) -> Plan:
    """Plan every run of a workflow from its config (before any job starts).

    Parameters
    ----------
    config : mapping
        The config as loaded from YAML (defaults are filled in here, not in place).
    check_files : bool
        Check that every dataset's matrix and sample sheet exists (the demo files excepted,
        which the workflow makes). Cluster jobs that plan again can skip it.
    cwd : path, optional
        The working directory relative paths refer to (default: the current one).

    Raises
    ------
    GloamError
        For any mistake in the config or the datasets table, in one line.
    """
    checked = validated_config(config)
    results_dir = own_folder("results_dir", checked["results_dir"], cwd=cwd)
    demo_dir = own_folder("demo.out_dir", checked["demo"]["out_dir"], example="demo_data", cwd=cwd)
    demo_files = _demo_files(demo_dir)
    if checked["datasets"] is None:
        datasets = {
            DEMO_DATASET: {
                "name": DEMO_DATASET,
                "matrix": demo_files["counts"],
                "samples": demo_files["samples"],
                "value_type": "counts",
                "layer": "",
                "time_unit": "",
            }
        }
    else:
        table = checked["datasets"]
        if cwd is not None and not os.path.isabs(table):
            table = os.path.join(cwd, table)
        datasets = read_datasets(table)
    base = Path(cwd) if cwd is not None else Path()
    if check_files:
        made_here = {os.path.normpath(path) for path in demo_files.values()}
        for dataset in datasets.values():
            for column in ("matrix", "samples"):
                file = dataset[column]
                if os.path.normpath(file) not in made_here and not (base / file).is_file():
                    raise GloamError(
                        f"dataset {dataset['name']!r}: {column} file {file!r} (datasets table "
                        f"{checked['datasets']!r}, column {column}) does not exist; correct the "
                        "path (relative to the working directory) or create the file"
                    )
    variants = checked["variants"] or {None: {}}
    settings_of = {
        variant: _merged_settings(checked, variant, overrides)
        for variant, overrides in variants.items()
    }
    runs: dict[str, dict[str, Any]] = {}
    for dataset in datasets.values():
        conditions: dict[str, Sequence[str | None]] = {}
        for variant, settings in settings_of.items():
            separate = settings["preparation"]["conditions"] == "separate"
            if separate and "list" not in conditions:
                conditions["list"] = _conditions(dataset, base)
            for condition in conditions["list"] if separate else [None]:
                run = ".".join(part for part in (dataset["name"], condition, variant) if part)
                runs[run] = {
                    "run": run,
                    "dataset": dataset["name"],
                    "condition": condition,
                    "variant": variant,
                    "value_type": dataset["value_type"],
                    "layer": dataset["layer"] or None,
                    "time_unit": dataset.get("time_unit") or checked["figures"]["time_unit"],
                    **settings,
                }
    return Plan(
        config=checked,
        datasets=datasets,
        runs=runs,
        results_dir=results_dir,
        demo_files=demo_files,
    )
