"""Run planning (gloam.planning) without Snakemake: runs, settings, folders, resources.

The expected values come from the config schema's documented defaults and rules
(``gloam/workflow/schemas/config.schema.yaml``, read here with PyYAML, independent of the
planning code's own loading), from the YAML 1.1 specification for what PyYAML must refuse, and
from POSIX path semantics (``os.path``) for which folders are the root, the home or a parent.
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import pytest
import yaml

from gloam.artifacts import link_shared
from gloam.errors import GloamError
from gloam.planning import (
    DEMO_DATASET,
    SCHEMA_DIR,
    SNAKEFILE,
    START_SETTINGS,
    add_config_file,
    make_plan,
    overlay,
    own_folder,
    read_config_file,
    read_datasets,
)

SCHEMA = yaml.safe_load((SCHEMA_DIR / "config.schema.yaml").read_text(encoding="utf-8"))


def schema_default(section: str, key: str):
    return SCHEMA["$defs"][section]["properties"][key]["default"]


def write_table(directory: Path, rows: list[str], name: str = "datasets.tsv") -> str:
    lines = ["name\tmatrix\tsamples\tvalue_type", *rows]
    (directory / name).write_text("\n".join(lines) + "\n", encoding="utf-8")
    return name


def one_line(error: pytest.ExceptionInfo) -> str:
    message = str(error.value)
    assert "\n" not in message and len(message) < 600, message
    return message


# ------------------------------------------------------------------ the package carries it


def test_the_workflow_ships_inside_the_package():
    assert SNAKEFILE.is_file()
    rules = SNAKEFILE.parent / "rules"
    for name in ("common", "prepare", "scan", "select", "export", "summary"):
        assert (rules / f"{name}.smk").is_file()
    assert (SNAKEFILE.parent / "envs" / "gloam.yaml").is_file()
    assert (SNAKEFILE.parent / "profiles" / "slurm" / "config.v8+.yaml").is_file()


# ------------------------------------------------------------------ defaults and runs


def test_an_empty_config_plans_the_demo_with_the_schema_defaults(tmp_path):
    """The schema says every key has a default and an empty config runs the built-in demo."""
    plan = make_plan({}, cwd=tmp_path)
    assert list(plan.runs) == [DEMO_DATASET]
    run = plan.runs[DEMO_DATASET]
    assert run["scan"]["max_clusters"] == schema_default("scan", "max_clusters")
    assert run["fuzzifier"]["m"] == schema_default("fuzzifier", "m")
    assert run["value_type"] == "counts" and run["layer"] is None
    assert plan.results_dir == SCHEMA["properties"]["results_dir"]["default"]
    # The demo's files are made by the workflow, so they need not exist yet.
    assert plan.dataset_files(DEMO_DATASET)["matrix"] == plan.demo_files["counts"]
    assert plan.path(DEMO_DATASET, "memberships.tsv") == "results/cold_leaf/memberships.tsv"


def test_planning_leaves_the_given_config_unchanged(tmp_path):
    config = {"scan": {"n_starts": 5}}
    make_plan(config, cwd=tmp_path)
    assert config == {"scan": {"n_starts": 5}}


def test_variants_make_one_run_per_dataset_and_variant_with_merged_settings(tmp_path):
    demo = tmp_path / "data"
    demo.mkdir()
    for name in ("a_counts.tsv", "a_samples.tsv", "b_counts.tsv", "b_samples.tsv"):
        (demo / name).write_text("x\n", encoding="utf-8")
    table = write_table(
        tmp_path,
        [
            "a\tdata/a_counts.tsv\tdata/a_samples.tsv\tcounts",
            "b\tdata/b_counts.tsv\tdata/b_samples.tsv\tlog",
        ],
    )
    config = {
        "datasets": table,
        "scan": {"n_starts": 7},
        "variants": {"loose": {"preparation": {"fdr": 0.1}}, "m16": {"fuzzifier": {"m": 1.6}}},
    }
    plan = make_plan(config, cwd=tmp_path)
    assert sorted(plan.runs) == ["a.loose", "a.m16", "b.loose", "b.m16"]
    loose, m16 = plan.runs["a.loose"], plan.runs["b.m16"]
    assert loose["preparation"]["fdr"] == 0.1 and m16["preparation"]["fdr"] == 0.05
    assert m16["fuzzifier"]["m"] == 1.6 and loose["fuzzifier"]["m"] == "auto"
    # A top-level setting that no variant changes reaches every run.
    assert {run["scan"]["n_starts"] for run in plan.runs.values()} == {7}
    assert m16["value_type"] == "log"
    assert plan.start_settings("a.loose") == {key: loose["scan"][key] for key in START_SETTINGS}
    # The summary, the index page and the sensitivity table, then every output of the runs.
    assert len(plan.final_outputs()) == 4 + 4 * len(plan.run_outputs("a.loose"))
    assert plan.final_outputs()[:4] == [
        plan.summary_path(),
        plan.index_path(),
        plan.sensitivity_path(),
        plan.matches_path(),
    ]


def test_separate_conditions_become_runs(tmp_path):
    (tmp_path / "counts.tsv").write_text("x\n", encoding="utf-8")
    sheet = ["sample\ttime\treplicate\tcondition"]
    sheet += [f"s{i}\t{i % 3}\t{i // 3 % 2 + 1}\t{'cold' if i < 6 else 'warm'}" for i in range(12)]
    (tmp_path / "samples.tsv").write_text("\n".join(sheet) + "\n", encoding="utf-8")
    table = write_table(tmp_path, ["leaf\tcounts.tsv\tsamples.tsv\tcounts"])
    config = {"datasets": table, "preparation": {"conditions": "separate"}}
    plan = make_plan(config, cwd=tmp_path)
    assert list(plan.runs) == ["leaf.cold", "leaf.warm"]
    assert plan.preparation_settings("leaf.warm")["condition"] == "warm"


def test_a_fixed_c_outside_the_range_is_scanned_too(tmp_path):
    plan = make_plan(
        {"scan": {"min_clusters": 2, "max_clusters": 4}, "selection": {"n_clusters": 7}},
        cwd=tmp_path,
    )
    assert plan.cluster_numbers(DEMO_DATASET) == [2, 3, 4, 7]
    assert plan.scan_files(DEMO_DATASET)[-1] == "results/cold_leaf/scan/c7.npz"


def test_an_unknown_run_is_refused_naming_the_known_runs(tmp_path):
    plan = make_plan({}, cwd=tmp_path)
    with pytest.raises(GloamError) as error:
        plan.run("cold_leaf.typo")
    assert "known runs: ['cold_leaf']" in one_line(error)


def test_min_clusters_above_max_clusters_in_a_variant_names_the_variant(tmp_path):
    config = {"variants": {"wide": {"scan": {"min_clusters": 9, "max_clusters": 3}}}}
    with pytest.raises(GloamError) as error:
        make_plan(config, cwd=tmp_path)
    assert "variant 'wide'" in one_line(error)


# ------------------------------------------------------------------ values the code cannot use


@pytest.mark.parametrize(
    ("section", "key", "value", "words"),
    [
        # YAML's .nan and .inf load as Python floats; JSON Schema bounds alone let NaN through
        # (every comparison with NaN is false, IEEE 754).
        ("scan", "tol", math.nan, ["scan.tol", "a finite number in [0, 1]"]),
        ("preparation", "pseudocount", math.inf, ["preparation.pseudocount", "(0, 1e+06]"]),
        ("selection", "stable_jaccard", -math.inf, ["selection.stable_jaccard", "(0, 1]"]),
        ("scan", "n_starts", 0, ["scan.n_starts", "a whole number in [1, 100000]"]),
    ],
)
def test_values_outside_the_usable_range_are_refused_with_the_range(
    tmp_path, section, key, value, words
):
    with pytest.raises(GloamError) as error:
        make_plan({section: {key: value}}, cwd=tmp_path)
    message = one_line(error)
    for word in words:
        assert word in message, (word, message)


def test_a_nan_in_a_variant_is_refused_too(tmp_path):
    with pytest.raises(GloamError) as error:
        make_plan({"variants": {"v": {"scan": {"tol": math.nan}}}}, cwd=tmp_path)
    assert "scan.tol" in one_line(error)


# ------------------------------------------------------------------ folders of their own


@pytest.mark.parametrize(
    ("value", "problem"),
    [
        ("", "should be non-empty"),  # the schema's minLength
        ("   ", "is empty"),
        ("/", "file system root"),
        ("~", "home folder"),
        (".", "working directory"),
        ("..", "working directory or one of its parents"),
        ("results/../..", "working directory or one of its parents"),
    ],
)
def test_results_dir_must_be_a_folder_of_its_own(tmp_path, value, problem):
    work = tmp_path / "work"
    work.mkdir()
    with pytest.raises(GloamError) as error:
        make_plan({"results_dir": value}, cwd=work)
    message = one_line(error)
    assert "results_dir" in message and problem in message


def test_the_home_folder_is_refused_by_its_absolute_path_too(tmp_path):
    with pytest.raises(GloamError, match="home folder"):
        own_folder("results_dir", str(Path.home()), cwd=tmp_path)


def test_results_dir_that_is_a_file_or_lies_in_one_is_refused(tmp_path):
    (tmp_path / "taken").write_text("x", encoding="utf-8")
    with pytest.raises(GloamError) as error:
        make_plan({"results_dir": "taken"}, cwd=tmp_path)
    assert "is a file, not a folder" in one_line(error)
    with pytest.raises(GloamError) as error:
        make_plan({"results_dir": "taken/inner"}, cwd=tmp_path)
    assert "lies inside the file" in one_line(error)


def test_demo_out_dir_is_checked_like_results_dir(tmp_path):
    with pytest.raises(GloamError) as error:
        make_plan({"demo": {"out_dir": "/"}}, cwd=tmp_path)
    assert "demo.out_dir" in one_line(error)


def test_a_folder_of_its_own_is_normalised(tmp_path):
    assert own_folder("results_dir", "out//a/./", cwd=tmp_path) == os.path.join("out", "a")
    assert own_folder("results_dir", "~/gloam-results", cwd=tmp_path) == str(
        Path.home() / "gloam-results"
    )


# ------------------------------------------------------------------ config files


def test_an_empty_config_file_is_an_empty_config(tmp_path):
    path = tmp_path / "config.yaml"
    path.write_text("# only a comment\n", encoding="utf-8")
    assert read_config_file(path) == {}


def test_a_yaml_syntax_error_names_the_file_and_line(tmp_path):
    """An unclosed flow sequence is a YAML syntax error (YAML 1.1, section 9.1.2)."""
    path = tmp_path / "config.yaml"
    path.write_text("seed: 3\nscan: {n_starts: [1, 2\nresults_dir: x\n", encoding="utf-8")
    with pytest.raises(GloamError) as error:
        read_config_file(path)
    message = one_line(error)
    assert str(path) in message and "line 3" in message


def test_a_config_file_that_is_not_a_mapping_is_refused(tmp_path):
    path = tmp_path / "config.yaml"
    path.write_text("- a\n- b\n", encoding="utf-8")
    with pytest.raises(GloamError, match="not a mapping"):
        read_config_file(path)


def test_the_config_file_lies_under_the_command_line_values(tmp_path):
    """Snakemake's precedence: the Snakefile's config file, then --configfile and --config."""
    path = tmp_path / "config.yaml"
    path.write_text("seed: 3\nscan: {n_starts: 4, tol: 0.1}\n", encoding="utf-8")
    config = {"scan": {"n_starts": 9}}
    add_config_file(config, path)
    assert config == {"seed": 3, "scan": {"n_starts": 9, "tol": 0.1}}
    add_config_file(config, tmp_path / "absent.yaml")
    assert config == {"seed": 3, "scan": {"n_starts": 9, "tol": 0.1}}
    assert overlay({"a": {"b": 1}}, {"a": 2}) == {"a": 2}


# ------------------------------------------------------------------ datasets table


def test_a_datasets_table_with_comments_and_defaults(tmp_path):
    path = tmp_path / "t.tsv"
    path.write_text(
        "# my datasets\nname\tmatrix\tsamples\none\tm.tsv\ts.tsv\n\n# the end\n", encoding="utf-8"
    )
    table = read_datasets(str(path))
    assert table == {
        "one": {
            "name": "one",
            "matrix": "m.tsv",
            "samples": "s.tsv",
            "value_type": "counts",
            "layer": "",
            "time_unit": "",
        }
    }


@pytest.mark.parametrize(
    ("rows", "words"),
    [
        (["x\ta\tb\tcounts", "x\tc\td\tcounts"], ["'x' twice"]),
        (["x\ta\tb\tcounts\textra"], ["line 2", "5 cells for 4 columns"]),
        ([], ["no rows"]),
        (["bad name\ta\tb\tcounts"], ["row of dataset 'bad name'", "key name"]),
        (["x\ta\tb\tcnt"], ["key value_type", "'counts', 'log'"]),
    ],
)
def test_bad_datasets_tables_are_refused_in_one_line(tmp_path, rows, words):
    write_table(tmp_path, rows)
    with pytest.raises(GloamError) as error:
        read_datasets(str(tmp_path / "datasets.tsv"))
    message = one_line(error)
    for word in words:
        assert word in message, (word, message)


def test_missing_dataset_files_are_named_unless_the_check_is_off(tmp_path):
    table = write_table(tmp_path, ["lost\tdata/lost.tsv\tdata/s.tsv\tcounts"])
    with pytest.raises(GloamError) as error:
        make_plan({"datasets": table}, cwd=tmp_path)
    assert "dataset 'lost': matrix file 'data/lost.tsv'" in one_line(error)
    assert list(make_plan({"datasets": table}, check_files=False, cwd=tmp_path).runs) == ["lost"]


def test_a_missing_datasets_table_is_named(tmp_path):
    with pytest.raises(GloamError, match="missing.tsv"):
        make_plan({"datasets": "missing.tsv"}, cwd=tmp_path)


# ------------------------------------------------------------------ threads and resources


def test_resources_grow_with_the_attempt_and_the_input(tmp_path):
    """A retried job asks for attempt x the first request (common practice with Snakemake's
    --retries), and a larger input never asks for less."""
    plan = make_plan({}, cwd=tmp_path)
    first = plan.resource("prepare", "mem_mb", input_mb=10.0, attempt=1)
    assert plan.resource("prepare", "mem_mb", input_mb=10.0, attempt=3) == 3 * first
    assert plan.resource("prepare", "mem_mb", input_mb=100.0) > first
    small = plan.resource("scan", "mem_mb", input_mb=5.0, run=DEMO_DATASET, c="3")
    assert plan.resource("scan", "mem_mb", input_mb=5.0, run=DEMO_DATASET, c="9") > small
    assert plan.resource("select", "mem_mb", input_mb=5.0, run=DEMO_DATASET) >= 500
    assert plan.resource("summary", "runtime", input_mb=0.0) >= 1


def test_the_config_resources_replace_the_estimates(tmp_path):
    config = {"resources": {"scan": {"threads": 4, "mem_mb": 8000, "runtime": 120}}}
    plan = make_plan(config, cwd=tmp_path)
    assert plan.threads("scan") == 4 and plan.threads("prepare") == 2
    assert plan.resource("scan", "mem_mb", input_mb=1e4, run=DEMO_DATASET, c=5) == 8000
    assert plan.resource("scan", "runtime", input_mb=1.0, attempt=2, run=DEMO_DATASET, c=5) == 240


# ------------------------------------------------------------------ gloam run's guard


def test_gloam_run_refuses_while_a_live_run_holds_the_folder(tmp_path, capsys):
    """A lock naming a live process on this machine (this test's own, per os.kill(pid, 0),
    POSIX) stops a second `gloam run` with one line, before Snakemake starts."""
    import socket

    from gloam.cli import RUN_LOCK, main

    lock = tmp_path / RUN_LOCK
    lock.parent.mkdir(parents=True)
    lock.write_text(f"{os.getpid()} {socket.gethostname()}\n", encoding="utf-8")
    with pytest.raises(SystemExit) as exit_info:
        main(["run", "--", "--directory", str(tmp_path), "--unlock"])
    assert exit_info.value.code == 2
    message = capsys.readouterr().err
    assert message.startswith(f"gloam: error: another gloam run (process {os.getpid()})")
    assert len(message.splitlines()) == 1
    assert lock.is_file(), "the other run's lock is left alone"


def test_a_lock_left_by_a_killed_run_is_taken_over(tmp_path):
    import socket
    import subprocess
    import sys

    from gloam.cli import RUN_LOCK, _acquire_run_lock

    finished = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], text=True,
                              capture_output=True, check=True)  # fmt: skip
    lock = tmp_path / RUN_LOCK
    lock.parent.mkdir(parents=True)
    lock.write_text(f"{finished.stdout.strip()} {socket.gethostname()}\n", encoding="utf-8")
    _acquire_run_lock(lock)
    assert lock.read_text(encoding="utf-8").split()[0] == str(os.getpid())


def test_gloam_run_names_the_installed_profiles(tmp_path):
    from gloam.cli import _packaged_profiles
    from gloam.planning import PROFILES_DIR

    assert _packaged_profiles(["--profile", "slurm", "-n"]) == [
        "--profile",
        str(PROFILES_DIR / "slurm"),
        "-n",
    ]
    own = tmp_path / "mine"
    own.mkdir()
    assert _packaged_profiles(["--profile", str(own)]) == ["--profile", str(own)]


# ------------------------------------------------------------------ shared upstream jobs


def test_variants_share_the_jobs_whose_settings_they_share(tmp_path):
    """Equal upstream settings give equal files, so only the first run computes them."""
    config = {
        "variants": {
            "base": {},
            "strict": {"selection": {"stable_jaccard": 0.8}},
            "more": {"scan": {"n_starts": 9}},
            "sd": {"preparation": {"min_sd": 0.2}},
            "wide": {"scan": {"max_clusters": 12}},
        }
    }
    plan = make_plan(config, cwd=tmp_path)
    base, strict, more, sd, wide = (f"{DEMO_DATASET}.{v}" for v in config["variants"])
    # A selection setting is downstream of the preparation and the scans.
    assert plan.owner(strict, "prepare") == base and plan.owner(strict, "scan") == base
    # The number of starts is read by the scans, not by the preparation.
    assert plan.owner(more, "prepare") == base and plan.owner(more, "scan") == more
    # A preparation setting changes everything after it.
    assert plan.owner(sd, "prepare") == sd and plan.owner(sd, "scan") == sd
    # The range of c is not a scan-job setting: a wider range adds c, it reuses the others.
    assert plan.owner(wide, "scan") == base
    assert plan.scan_files(wide)[0] == plan.path(base, "scan/c2.npz")
    assert plan.scan_files(wide)[-1] == plan.path(base, "scan/c12.npz")
    # Scan jobs: c = 2..10 for base (strict shares them), more and sd, and wide adds 11, 12.
    assert plan.n_scan_jobs() == 3 * 9 + 2
    # The comparison depends on the rule for c, so only identical settings share it.
    assert plan.sharing_runs("compare") == []
    assert plan.sharing_runs("prepare") == [strict, more, wide]
    assert plan.shared_files(strict, "prepare")["gene_report"] == plan.path(
        base, "prepared/gene_report.tsv"
    )
    # Every run still lists its complete folder as its outputs.
    assert plan.path(strict, "prepared/gene_report.tsv") in plan.run_outputs(strict)


def test_without_variants_every_run_owns_its_jobs(tmp_path):
    plan = make_plan({}, cwd=tmp_path)
    assert plan.sharing_runs("prepare") == plan.sharing_runs("scan") == []
    assert plan.owner(DEMO_DATASET, "scan") == DEMO_DATASET
    # No run shares: the producing rules keep the general run-id pattern.
    assert plan.owner_pattern("prepare") == plan.owner_pattern("compare")
    assert plan.run_pattern([]) == "(?!)"


def test_shared_files_are_hard_links_and_folders_are_linked_file_by_file(tmp_path):
    """POSIX link(2): a hard link is the same inode, so it costs no second copy on disk."""
    owner = tmp_path / "owner"
    (owner / "comparison" / "genesets").mkdir(parents=True)
    (owner / "a.tsv").write_text("x\n", encoding="utf-8")
    (owner / "comparison" / "genesets" / "s.gmt").write_text("g\n", encoding="utf-8")
    run = tmp_path / "run"
    link_shared(
        {"a": owner / "a.tsv", "comparison": owner / "comparison"},
        {"a": run / "prepared" / "a.tsv", "comparison": run / "comparison"},
    )
    assert (run / "prepared" / "a.tsv").stat().st_ino == (owner / "a.tsv").stat().st_ino
    linked = run / "comparison" / "genesets" / "s.gmt"
    assert linked.read_text(encoding="utf-8") == "g\n"
    assert linked.stat().st_nlink == 2
    assert not [path for path in run.rglob(".*")]
    with pytest.raises(GloamError, match="does not exist"):
        link_shared({"a": owner / "gone.tsv"}, {"a": run / "gone.tsv"})


def test_the_time_unit_belongs_to_the_dataset(tmp_path):
    (tmp_path / "datasets.tsv").write_text(
        "name\tmatrix\tsamples\ttime_unit\nmin_data\tm.tsv\ts.tsv\tmin\nday_data\tm.tsv\ts.tsv\t\n",
        encoding="utf-8",
    )
    plan = make_plan(
        {"datasets": "datasets.tsv", "figures": {"time_unit": "d"}}, cwd=tmp_path, check_files=False
    )
    assert plan.run_settings("min_data")["time_unit"] == "min"
    # An empty cell falls back to the config's unit (the schema's documented default rule).
    assert plan.run_settings("day_data")["time_unit"] == "d"


def test_planning_needs_neither_numpy_nor_pandas(tmp_path):
    """The controlling Snakemake plans with gloam.planning (and gloam.artifacts): a bare
    controller environment needs only Snakemake and PyYAML (common practice: keep the
    controller light). A fresh interpreter shows what planning imports."""
    import subprocess
    import sys

    code = (
        "import sys; from gloam.planning import make_plan; "
        "make_plan({'genesets': {'thresholds': [0.5, 0.7]}, 'variants': {'a': {}, 'b': {}}}); "
        "print(sorted(m for m in ('numpy', 'pandas', 'scipy', 'anndata') if m in sys.modules))"
    )
    result = subprocess.run(
        [sys.executable, "-c", code], cwd=tmp_path, capture_output=True, text=True, check=True
    )
    assert result.stdout.strip() == "[]"
