"""End-to-end tests of the Snakemake workflow on a small generated dataset.

Every test runs the real workflow (``python -m snakemake`` in a subprocess) in a temporary
directory with a tiny config: 400 demo genes, c from 2 to 6, a handful of starts.  The
main run happens once per module; tests that change things work on a copy of it.
"""

from __future__ import annotations

import contextlib
import json
import os
import re
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import anndata
import numpy as np
import pandas as pd
import pytest
import yaml
from sklearn.metrics import adjusted_rand_score

from gloam.demo import PLANTED_RESPONSES

REPO = Path(__file__).resolve().parents[1]
SNAKEFILE = REPO / "Snakefile"
RUN = "tiny"
N_CLUSTERS = len(PLANTED_RESPONSES)
THRESHOLDS = [0.5, 0.7]

BASE_CONFIG = {
    "datasets": "datasets.tsv",
    "seed": 7,
    # One condition: the comparison of conditions has a test of its own below.
    "demo": {"out_dir": "demo", "n_genes": 400, "seed": 11, "mutant": False},
    "scan": {"min_clusters": 2, "max_clusters": 6, "n_starts": 5, "n_resamples": 5},
    # The planted number of responses, so recovery is judged on the right c; the automatic
    # choice is covered by the validity tests of gloam.validity.
    "selection": {"n_clusters": N_CLUSTERS},
    "genesets": {"thresholds": THRESHOLDS},
}

pytestmark = pytest.mark.slow


def write_workdir(directory: Path, config: dict) -> Path:
    directory.mkdir(parents=True, exist_ok=True)
    (directory / "config.yaml").write_text(yaml.safe_dump(config), encoding="utf-8")
    (directory / "datasets.tsv").write_text(
        f"name\tmatrix\tsamples\tvalue_type\n{RUN}\tdemo/counts.tsv\tdemo/samples.tsv\tcounts\n",
        encoding="utf-8",
    )
    return directory


def snakemake_command(directory: Path, *args: str) -> list[str]:
    return [
        sys.executable,
        "-m",
        "snakemake",
        "--snakefile",
        str(SNAKEFILE),
        "--directory",
        str(directory),
        "--configfile",
        str(directory / "config.yaml"),
        "--cores",
        "2",
        *args,
    ]


def snakemake(directory: Path, *args: str, check: bool = True) -> subprocess.CompletedProcess:
    result = subprocess.run(
        snakemake_command(directory, *args), capture_output=True, text=True, timeout=600
    )
    if check and result.returncode != 0:
        raise AssertionError(f"snakemake {args} failed:\n{result.stdout}\n{result.stderr}")
    return result


def planned_rules(directory: Path) -> dict[str, int]:
    """Rules a dry run would execute, parsed from Snakemake's 'Job stats' table."""
    result = snakemake(directory, "--dry-run", "--quiet", "rules")
    output = result.stdout + result.stderr
    if "Nothing to be done" in output:
        return {}
    table = output.split("Job stats:", 1)[1]
    rows = re.findall(r"^(\w+)\s+(\d+)$", table, flags=re.MULTILINE)
    return {rule: int(count) for rule, count in rows if rule != "total"}


@pytest.fixture(scope="module")
def finished(tmp_path_factory) -> Path:
    directory = write_workdir(tmp_path_factory.mktemp("workflow") / "run", BASE_CONFIG)
    snakemake(directory)
    return directory


def results(directory: Path) -> Path:
    return directory / "results" / RUN


# ------------------------------------------------------------------ outputs of one run


def test_every_declared_output_exists(finished):
    out = results(finished)
    for name in (
        "prepared/prepared.h5ad",
        "prepared/zscores.tsv",
        "prepared/gene_report.tsv",
        "prepared/summary.tsv",
        "prepared/scan_input.npz",
        "fuzzifier.json",
        "fuzzifier_curve.tsv",
        "validity.tsv",
        "selection.json",
        "consensus.npz",
        "memberships.tsv",
        "centroids.tsv",
        "clusters.tsv",
        "robustness.tsv",
        "gloam.h5ad",
    ):
        assert (out / name).stat().st_size > 0, name
    for c in range(2, 7):
        assert (out / "scan" / f"c{c}.npz").is_file()
    assert (finished / "results" / "summary.tsv").is_file()


def test_every_file_of_a_run_is_registered(finished):
    """gloam.artifacts owns the layout of a run folder: a file written without an entry there
    (and so without its meaning, writer and README row) fails here."""
    from gloam.artifacts import matches

    out = results(finished)
    written = [path.relative_to(out).as_posix() for path in out.rglob("*") if path.is_file()]
    assert written
    assert [name for name in written if matches(name) is None] == []


def test_scan_input_is_the_prepared_matrix_with_the_chosen_m(finished):
    """What the scan jobs read equals the prepared matrix (prepared.h5ad, genes x columns) and
    fuzzifier.json's m, and the scans used that m."""
    prepared = anndata.read_h5ad(results(finished) / "prepared/prepared.h5ad")
    chosen = json.loads((results(finished) / "fuzzifier.json").read_text(encoding="utf-8"))
    with np.load(results(finished) / "prepared/scan_input.npz") as scan_input:
        assert scan_input["genes"].tolist() == prepared.var_names.tolist()
        assert scan_input["columns"].tolist() == prepared.obs_names.tolist()
        np.testing.assert_array_equal(scan_input["zscores"], np.asarray(prepared.X).T)
        assert float(scan_input["m"]) == chosen["m"]
    with np.load(results(finished) / "scan" / "c4.npz") as scan:
        assert float(scan["m"]) == chosen["m"]


def test_scan_files_hold_the_partition_and_its_evidence(finished):
    n_genes = len(pd.read_csv(results(finished) / "prepared/zscores.tsv", sep="\t"))
    with np.load(results(finished) / "scan" / "c4.npz") as scan:
        assert scan["memberships"].shape == (n_genes, 4)
        assert scan["centroids"].shape == (4, 10)
        np.testing.assert_allclose(scan["memberships"].sum(axis=1) + scan["noise"], 1.0)
        assert scan["jaccard"].shape == (BASE_CONFIG["scan"]["n_resamples"], 4)
        metrics = json.loads(str(scan["metrics"]))
    assert 1 <= metrics["n_at_optimum"] <= metrics["n_starts"]
    assert metrics["n_starts"] >= BASE_CONFIG["scan"]["n_starts"]
    assert metrics["resampling"] == "replicates"


def test_membership_rows_sum_to_one(finished):
    table = pd.read_csv(results(finished) / "memberships.tsv", sep="\t")
    clusters = [f"C{k}" for k in range(1, N_CLUSTERS + 1)]
    assert list(table.columns) == [
        "gene",
        *clusters,
        "noise",
        "top_class",
        "top_membership",
        "resampled_top_share",
        "start_agreement",
        "mean_log2",
        "log2_range",
        "peak_time",
    ]
    # Written at full precision (shortest round trip), so the sum holds to rounding.
    classes = [*clusters, "noise"]
    np.testing.assert_allclose(table[classes].sum(axis=1), 1.0, atol=1e-12)
    assert (table[classes].to_numpy() >= 0).all()
    np.testing.assert_allclose(table["top_membership"], table[classes].max(axis=1), rtol=1e-15)
    assert (table["top_class"] == table[classes].idxmax(axis=1)).all()
    assert table["start_agreement"].between(0, 1).all()
    assert table["resampled_top_share"].between(0, 1).all()


def test_memberships_carry_each_genes_expression_level_range_and_peak(finished):
    """The effect sizes beside the memberships are the prepared replicate means (layer
    log_mean of prepared.h5ad, read here with anndata): their mean, max - min, and the time
    of the maximum."""
    table = pd.read_csv(results(finished) / "memberships.tsv", sep="\t", dtype={"gene": str})
    prepared = anndata.read_h5ad(results(finished) / "prepared/prepared.h5ad")
    means = pd.DataFrame(prepared.layers["log_mean"].T, index=prepared.var_names)
    means = means.loc[table["gene"]].to_numpy()
    times = prepared.obs["time"].to_numpy(dtype=float)
    np.testing.assert_allclose(table["mean_log2"], means.mean(axis=1), rtol=1e-12)
    np.testing.assert_allclose(table["log2_range"], means.max(axis=1) - means.min(axis=1))
    np.testing.assert_array_equal(table["peak_time"], times[means.argmax(axis=1)])


def test_tables_read_back_exactly_what_the_consensus_holds(finished):
    """Full precision: memberships.tsv equals consensus.npz bit for bit (Python's float repr
    round-trips every double; pandas reads it back exactly with float_precision="round_trip")."""
    table = pd.read_csv(
        results(finished) / "memberships.tsv",
        sep="\t",
        dtype={"gene": str},
        float_precision="round_trip",
    )
    with np.load(results(finished) / "consensus.npz") as consensus:
        np.testing.assert_array_equal(
            table[[f"C{k}" for k in range(1, N_CLUSTERS + 1)]].to_numpy(),
            consensus["memberships"],
        )


def test_centroids_are_cluster_by_time_point(finished):
    centroids = pd.read_csv(results(finished) / "centroids.tsv", sep="\t", index_col="cluster")
    zscores = pd.read_csv(results(finished) / "prepared/zscores.tsv", sep="\t", index_col="gene")
    assert list(centroids.index) == [f"C{k}" for k in range(1, N_CLUSTERS + 1)]
    assert list(centroids.columns) == list(zscores.columns)


def test_validity_table_covers_the_scan_and_marks_the_used_c(finished):
    table = pd.read_csv(results(finished) / "validity.tsv", sep="\t")
    assert table["n_clusters"].tolist() == [2, 3, 4, 5, 6]
    assert table.loc[table["used"], "n_clusters"].tolist() == [N_CLUSTERS]
    assert table["recommended"].sum() <= 1
    for column in ("robust", "sizeable", "distinct", "structure", "passes", "reason", "failed"):
        assert column in table.columns
    selection = json.loads((results(finished) / "selection.json").read_text(encoding="utf-8"))
    assert selection["method"] == "fixed" and selection["n_clusters"] == N_CLUSTERS
    assert {"p_value", "present", "statistic"} <= set(selection["structure"])
    assert isinstance(selection["flags"], list)


def test_gmt_files_are_valid_and_within_the_background(finished):
    """GMT: one set per line, tab-separated name, description, genes (Broad GSEA file-format
    documentation, from memory); every gene must be in the background."""
    genesets = results(finished) / "genesets"
    background = (genesets / "background.txt").read_text().split()
    memberships = pd.read_csv(results(finished) / "memberships.tsv", sep="\t", dtype={"gene": str})
    for threshold in THRESHOLDS:
        lines = (genesets / f"{RUN}_core{threshold:g}.gmt").read_text().splitlines()
        assert lines, threshold
        names = []
        for line in lines:
            fields = line.split("\t")
            assert len(fields) >= 3 and all(fields), line[:80]
            names.append(fields[0])
            assert set(fields[2:]) <= set(background)
            cluster = fields[0].split("_")[-2]
            # A gene whose largest membership is noise is never core (noise clustering).
            eligible = memberships["top_class"] != "noise"
            core = memberships.loc[(memberships[cluster] >= threshold) & eligible, "gene"]
            assert sorted(fields[2:]) == sorted(core)
        assert len(names) == len(set(names))


def test_background_contains_every_clustered_gene(finished):
    background = (results(finished) / "genesets" / "background.txt").read_text().split()
    memberships = pd.read_csv(results(finished) / "memberships.tsv", sep="\t", dtype={"gene": str})
    assert set(memberships["gene"]) <= set(background)
    assert len(background) == len(set(background))


def test_ranked_lists_are_sorted_two_column_tables(finished):
    for k in range(1, N_CLUSTERS + 1):
        ranked = pd.read_csv(results(finished) / "genesets" / f"{RUN}_C{k}_ranked.tsv", sep="\t")
        assert list(ranked.columns) == ["gene", "membership"]
        assert ranked["membership"].is_monotonic_decreasing


def test_figures_exist_as_png_pdf_and_svg(finished):
    for name in ("profiles", "validity", "fuzzifier", "overview"):
        png = (results(finished) / "figures" / f"{name}.png").read_bytes()
        pdf = (results(finished) / "figures" / f"{name}.pdf").read_bytes()
        svg = (results(finished) / "figures" / f"{name}.svg").read_text(encoding="utf-8")
        assert png.startswith(b"\x89PNG") and len(png) > 5000, name
        assert pdf.startswith(b"%PDF") and len(pdf) > 2000, name
        assert "<svg" in svg and "<text" in svg, name


def test_h5ad_holds_prepared_data_and_results(finished):
    data = anndata.read_h5ad(results(finished) / "gloam.h5ad")
    memberships = pd.read_csv(
        results(finished) / "memberships.tsv", sep="\t", dtype={"gene": str}, index_col="gene"
    )
    assert list(data.var_names) == list(memberships.index)
    assert data.n_obs == 10  # ten time points of the demo
    np.testing.assert_allclose(
        data.varm["gloam_memberships"], memberships[[f"C{k}" for k in range(1, 6)]], atol=1e-6
    )
    assert (data.var["gloam_top_class"].astype(str) == memberships["top_class"]).all()
    np.testing.assert_allclose(data.var["gloam_noise"], memberships["noise"], atol=1e-15)
    np.testing.assert_allclose(
        data.var["gloam_start_agreement"], memberships["start_agreement"], atol=1e-15
    )
    uns = data.uns["gloam"]
    assert uns["centroids"].shape == (N_CLUSTERS, 10)
    assert uns["n_clusters"] == N_CLUSTERS and uns["seed"] == BASE_CONFIG["seed"]
    assert uns["m"] > 1
    assert {"numpy", "anndata", "gloam"} <= set(uns["versions"])


def test_planted_responses_are_recovered(finished):
    """Core genes with a planted response land in one cluster per response: adjusted Rand
    index >= 0.9 against the truth (sklearn.metrics.adjusted_rand_score as reference)."""
    truth = pd.read_csv(finished / "demo" / "truth.tsv", sep="\t", index_col="gene")
    memberships = pd.read_csv(
        results(finished) / "memberships.tsv", sep="\t", dtype={"gene": str}, index_col="gene"
    )
    response = truth.loc[memberships.index, "response"]
    planted = response.isin(PLANTED_RESPONSES)
    for threshold in THRESHOLDS:
        core = (
            planted
            & (memberships["top_membership"] >= threshold)
            & (memberships["top_class"] != "noise")
        )
        assert core.sum() >= 0.7 * planted.sum(), threshold
        score = adjusted_rand_score(response[core], memberships.loc[core, "top_class"])
        assert score >= 0.9, (threshold, score)


def test_clusters_are_numbered_by_peak_time(finished):
    centroids = pd.read_csv(results(finished) / "centroids.tsv", sep="\t", index_col="cluster")
    columns = anndata.read_h5ad(results(finished) / "prepared/prepared.h5ad").obs
    times = columns.loc[centroids.columns, "time"].to_numpy(dtype=float)
    peaks = times[np.argmax(centroids.to_numpy(), axis=1)]
    assert np.all(np.diff(peaks) >= 0), peaks


def test_sensitivity_table_is_written_with_its_columns(finished):
    from gloam.stages import SENSITIVITY_COLUMNS

    text = (finished / "results" / "sensitivity.tsv").read_text(encoding="utf-8")
    # One run, no variants: the header alone.
    assert text.strip().split("\t") == list(SENSITIVITY_COLUMNS)


def test_summary_has_one_row_per_run(finished):
    summary = pd.read_csv(finished / "results" / "summary.tsv", sep="\t")
    assert summary["run"].tolist() == [RUN]
    row = summary.iloc[0]
    memberships = pd.read_csv(results(finished) / "memberships.tsv", sep="\t")
    assert row["n_genes_clustered"] == len(memberships)
    assert row["n_clusters"] == N_CLUSTERS
    np.testing.assert_allclose(
        row["mean_start_agreement"], memberships["start_agreement"].mean(), rtol=1e-12
    )
    assert row["n_noise"] == int((memberships["top_class"] == "noise").sum())
    for threshold in THRESHOLDS:
        clusters = memberships[[f"C{k}" for k in range(1, 6)]]
        core = (clusters >= threshold).any(axis=1) & (memberships["top_class"] != "noise")
        assert row[f"core_genes_{threshold:g}"] == int(core.sum())


def test_report_pages_are_written_and_linked(finished):
    page = results(finished) / "report.html"
    index = finished / "results" / "index.html"
    assert page.stat().st_size > 100_000 and index.is_file()
    assert f"{RUN}/report.html" in index.read_text(encoding="utf-8")  # the link, made relative
    # One condition: the comparison says why nothing was compared, and nothing else.
    comparison = results(finished) / "comparison"
    record = json.loads((comparison / "selection.json").read_text(encoding="utf-8"))
    assert record["compared"] is False and "one condition" in record["reason"]
    # (Snakemake marks a finished directory output with a hidden timestamp file.)
    files = sorted(path.name for path in comparison.iterdir() if not path.name.startswith("."))
    assert files == ["selection.json"]


def test_report_builds(finished):
    snakemake(finished, "--report", "report.html")
    html = (finished / "report.html").read_text(encoding="utf-8", errors="replace")
    assert len(html) > 100_000
    assert "profiles.png" in html


def test_nothing_left_to_do_after_a_run(finished):
    assert planned_rules(finished) == {}


# ------------------------------------------------------------------ reruns


def copy_with_setting(finished: Path, tmp_path: Path, section: str, key: str, value) -> Path:
    """A copy of the finished run whose config has ``section.key`` set to ``value``."""
    copy = tmp_path / "copy"
    shutil.copytree(finished, copy, symlinks=True)
    config = yaml.safe_load((copy / "config.yaml").read_text())
    config[section][key] = value
    (copy / "config.yaml").write_text(yaml.safe_dump(config))
    return copy


@pytest.mark.parametrize(
    ("deleted", "rule"),
    [
        ("figures/validity.pdf", "export"),
        ("centroids.tsv", "export"),
        ("figures/profiles.png", "core_genes"),
        ("prepared/gene_report.tsv", "prepare"),
    ],
)
def test_a_deleted_output_is_made_again(finished, tmp_path, deleted, rule):
    copy = tmp_path / "copy"
    shutil.copytree(finished, copy, symlinks=True)
    (copy / "results" / RUN / deleted).unlink()
    assert planned_rules(copy).get(rule) == 1
    snakemake(copy)
    assert (copy / "results" / RUN / deleted).is_file()


def test_changing_thresholds_reruns_only_the_core_gene_rule(finished, tmp_path):
    copy = copy_with_setting(finished, tmp_path, "genesets", "thresholds", [0.6, 0.8])
    planned = planned_rules(copy)
    assert planned.get("core_genes") == 1
    assert set(planned) <= {"core_genes", "summary", "report_page", "report_index", "all"}
    snakemake(copy)
    assert (copy / "results" / RUN / "genesets" / f"{RUN}_core0.8.gmt").is_file()
    assert not (copy / "results" / RUN / "genesets" / f"{RUN}_core0.7.gmt").exists()


def test_changing_the_number_of_starts_reruns_the_scan_not_the_preparation(finished, tmp_path):
    planned = planned_rules(copy_with_setting(finished, tmp_path, "scan", "n_starts", 6))
    assert planned.get("scan") == 5
    assert "prepare" not in planned and "demo_data" not in planned


def test_widening_the_scan_range_runs_only_the_new_cluster_numbers(finished, tmp_path):
    planned = planned_rules(copy_with_setting(finished, tmp_path, "scan", "max_clusters", 7))
    assert planned.get("scan") == 1
    assert "prepare" not in planned
    assert planned.get("select") == 1


def test_interrupted_run_leaves_no_partial_outputs_and_rerun_completes(tmp_path):
    """SIGKILL the whole Snakemake process group while scan jobs are running."""
    config = {
        **BASE_CONFIG,
        # tol=0 makes every start run exactly max_iter iterations: scans take seconds.
        "scan": {"min_clusters": 2, "max_clusters": 6, "n_starts": 40, "tol": 0, "max_iter": 400},
    }
    directory = write_workdir(tmp_path / "run", config)
    process = subprocess.Popen(
        snakemake_command(directory),
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        start_new_session=True,
    )
    scan_dir = directory / "results" / RUN / "scan"
    logs = directory / "logs" / RUN
    deadline = time.monotonic() + 180
    try:
        while time.monotonic() < deadline:
            started = list(logs.glob("scan_c*.log")) if logs.is_dir() else []
            if started and process.poll() is None:
                time.sleep(1.0)  # let the scan jobs get into their iterations
                break
            assert process.poll() is None, "workflow ended before a scan started"
            time.sleep(0.2)
        else:
            pytest.fail("no scan job started within 180 s")
    finally:
        with contextlib.suppress(ProcessLookupError):
            os.killpg(process.pid, signal.SIGKILL)
        process.wait()

    # Whatever carries an output name is complete; half-written data only under hidden
    # temporary names, which no rule declares.
    finished = [path for path in scan_dir.glob("c*.npz")] if scan_dir.is_dir() else []
    assert len(finished) < 5, "the kill came too late to interrupt anything"
    for path in finished:
        with np.load(path) as scan:
            assert json.loads(str(scan["metrics"]))["n_starts"] >= 40
    for path in (directory / "results").rglob("*"):
        if path.is_file() and not path.name.startswith("."):
            assert ".partial" not in path.name

    # A killed Snakemake leaves its lock (by design); removing it is the documented first step.
    # A job killed after its file was renamed into place but before Snakemake recorded it as
    # finished is flagged incomplete, never trusted: the documented restart recomputes it.
    snakemake(directory, "--unlock")
    result = snakemake(directory, "--rerun-incomplete", check=False)
    assert result.returncode == 0, result.stdout + result.stderr
    assert (directory / "results" / RUN / "memberships.tsv").is_file()
    assert planned_rules(directory) == {}


# ------------------------------------------------------------------ config handling


def test_lint_reports_nothing(tmp_path):
    result = subprocess.run(
        [sys.executable, "-m", "snakemake", "--lint", "--snakefile", str(SNAKEFILE)],
        cwd=REPO,
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert result.returncode == 0, result.stdout + result.stderr
    assert "Lints for" not in result.stdout + result.stderr


@pytest.mark.parametrize(
    ("change", "expected"),
    [
        ({"scann": {"n_starts": 3}}, "scann"),
        ({"scan": {"n_starts": 0}}, "n_starts"),
        ({"scan": {"min_clusters": 5, "max_clusters": 3}}, "min_clusters"),
        ({"fuzzifier": {"m": 0.5}}, "0.5"),
        ({"variants": {"bad": {"scan": {"init": "everywhere"}}}}, "bad"),
        # Both would be written as ..._core0.7 files.
        ({"genesets": {"thresholds": [0.7, 0.70000001]}}, "genesets.thresholds"),
        ({"bogus": 1}, "'bogus' was unexpected"),
        ({"datasets": "missing.tsv"}, "missing.tsv"),
        # Every path a user gives must be a folder of its own: "" and "/" would put results
        # into the file system root, "~" into the home folder.
        ({"results_dir": ""}, "results_dir"),
        ({"results_dir": "/"}, "file system root"),
        ({"results_dir": "~"}, "home folder"),
        ({"demo": {"out_dir": ".."}, "results_dir": "r"}, "demo.out_dir"),
        # YAML's .nan and .inf: refused at planning with the range the code can use.
        ({"scan": {"tol": float("nan")}}, "a finite number in [0, 1]"),
        ({"preparation": {"pseudocount": float("inf")}}, "preparation.pseudocount"),
    ],
)
def test_bad_config_fails_with_a_clear_message(tmp_path, change, expected):
    config = {**BASE_CONFIG, **change}
    directory = write_workdir(tmp_path / "run", config)
    result = snakemake(directory, "--dry-run", check=False)
    assert result.returncode != 0
    message = result.stdout + result.stderr
    (line,) = [line for line in message.splitlines() if line.startswith("gloam: error:")]
    assert expected in line
    # One line, no stack frames, no schema or config dump.
    assert "Traceback" not in message and 'File "' not in message
    assert len(message.splitlines()) <= 3, message
    assert written_by_the_workflow(directory) == set(), "a refused config wrote files"


def written_by_the_workflow(directory: Path) -> set[str]:
    """Files and folders in ``directory`` besides the test's inputs and Snakemake's own."""
    inputs = {"config.yaml", "datasets.tsv", "config", "demo", ".snakemake"}
    return {path.name for path in directory.iterdir()} - inputs


def test_results_dir_that_is_a_file_is_one_line(tmp_path):
    directory = write_workdir(tmp_path / "run", {**BASE_CONFIG, "results_dir": "taken"})
    (directory / "taken").write_text("not a folder\n", encoding="utf-8")
    result = snakemake(directory, "--dry-run", check=False)
    message = result.stdout + result.stderr
    assert result.returncode != 0
    (line,) = [line for line in message.splitlines() if line.startswith("gloam: error:")]
    assert "results_dir 'taken' is a file, not a folder" in line
    assert "Traceback" not in message and "NotADirectoryError" not in message
    assert (directory / "taken").read_text(encoding="utf-8") == "not a folder\n"


def clone_like(directory: Path, config_text: str) -> Path:
    """A working folder with config/config.yaml, as in a clone, and a tiny datasets table."""
    write_workdir(directory, BASE_CONFIG)
    (directory / "config.yaml").unlink()
    (directory / "config").mkdir()
    (directory / "config" / "config.yaml").write_text(config_text, encoding="utf-8")
    return directory


def dry_run_in(directory: Path, *args: str) -> subprocess.CompletedProcess:
    command = [sys.executable, "-m", "snakemake", "--snakefile", str(SNAKEFILE), "-n", *args]
    return subprocess.run(command, cwd=directory, capture_output=True, text=True, timeout=600)


def test_an_empty_config_file_plans_the_demo(tmp_path):
    """The schema: every key has a default, so an empty config file runs the built-in demo."""
    directory = clone_like(tmp_path / "run", "# nothing set\n")
    result = dry_run_in(directory, "--cores", "1")
    assert result.returncode == 0, result.stdout + result.stderr
    assert "results/cold_leaf/scan/c10.npz" in result.stdout
    assert "demo_data/counts.tsv" in result.stdout


def test_a_yaml_syntax_error_names_the_file_and_line(tmp_path):
    directory = clone_like(tmp_path / "run", "seed: 3\nscan: {n_starts: [1, 2\n")
    result = dry_run_in(directory, "--cores", "1")
    message = result.stdout + result.stderr
    assert result.returncode != 0
    (line,) = [line for line in message.splitlines() if line.startswith("gloam: error:")]
    assert "'config/config.yaml'" in line and "line 3" in line
    assert "Traceback" not in message
    assert written_by_the_workflow(directory) == set()

    from gloam.cli import main

    with pytest.raises(SystemExit) as exit_info:
        main(["run", "--configfile", str(directory / "config" / "config.yaml"), "--", "-n"])
    assert exit_info.value.code == 2


def test_a_dataset_whose_files_do_not_exist_is_named_before_any_job(tmp_path):
    directory = write_workdir(tmp_path / "run", BASE_CONFIG)
    (directory / "datasets.tsv").write_text(
        "name\tmatrix\tsamples\tvalue_type\nlost\tdata/lost_counts.tsv\tdemo/samples.tsv\tcounts\n",
        encoding="utf-8",
    )
    result = snakemake(directory, "--dry-run", check=False)
    assert result.returncode != 0
    message = result.stdout + result.stderr
    assert "gloam: error: dataset 'lost': matrix file 'data/lost_counts.tsv'" in message
    assert "does not exist" in message and 'File "' not in message


def test_user_error_inside_a_rule_is_one_line_and_leaves_no_outputs(tmp_path):
    config = {**BASE_CONFIG, "preparation": {"min_expression": 10**9}}
    directory = write_workdir(tmp_path / "run", config)
    result = snakemake(directory, check=False)
    assert result.returncode != 0
    assert "gloam: error:" in result.stdout + result.stderr
    log = (directory / "logs" / RUN / "prepare.log").read_text()
    assert "gloam: error:" in log and "Traceback" not in log
    assert not (directory / "results" / RUN / "prepared").exists() or not any(
        path for path in (directory / "results" / RUN / "prepared").iterdir()
    )


def test_variants_make_one_run_per_dataset_and_variant(tmp_path):
    config = {
        **BASE_CONFIG,
        "variants": {"loose": {"preparation": {"min_sd": 0.1}}, "m16": {"fuzzifier": {"m": 1.6}}},
    }
    directory = write_workdir(tmp_path / "run", config)
    result = snakemake(directory, "--dry-run")
    output = result.stdout + result.stderr
    assert f"results/{RUN}.loose/scan/c2.npz" in output
    assert f"results/{RUN}.m16/fuzzifier.json" in output
    assert f"results/{RUN}/" not in output
    assert planned_rules(directory)["scan"] == 2 * 5


def test_variants_share_upstream_jobs_and_keep_complete_folders(finished, tmp_path):
    """A variant that changes only the rule for c reuses the preparation and the scans of
    the run it shares them with (hard links, POSIX link(2): the same inode)."""
    config = {
        **BASE_CONFIG,
        "variants": {"base": {}, "strict": {"selection": {"stable_jaccard": 0.9}}},
    }
    directory = write_workdir(tmp_path / "run", config)
    shutil.copytree(finished / "demo", directory / "demo")
    assert planned_rules(directory)["prepare"] == 1
    assert planned_rules(directory)["scan"] == 5
    snakemake(directory)
    base, strict = (directory / "results" / f"{RUN}.{name}" for name in ("base", "strict"))
    for name in ("prepared/prepared.h5ad", "prepared/gene_report.tsv", "fuzzifier.json"):
        assert (strict / name).stat().st_ino == (base / name).stat().st_ino, name
    assert not (strict / "scan").exists()
    for name in ("memberships.tsv", "report.html", "genesets/background.txt"):
        assert (strict / name).is_file() and (strict / name).stat().st_ino != (
            base / name
        ).stat().st_ino
    assert json.loads((strict / "selection.json").read_text())["criteria"]["stable_jaccard"] == 0.9
    assert planned_rules(directory) == {}


def test_scan_files_can_be_removed_once_read(finished, tmp_path):
    """keep_scan_files: false marks the scans temporary (Snakemake's temp()): the run
    finishes with every output and without its scan files."""
    config = {
        **BASE_CONFIG,
        "keep_scan_files": False,
        "scan": {**BASE_CONFIG["scan"], "min_clusters": 2, "max_clusters": 3},
        "selection": {"n_clusters": 3},
    }
    directory = write_workdir(tmp_path / "run", config)
    shutil.copytree(finished / "demo", directory / "demo")
    snakemake(directory)
    out = results(directory)
    assert not any((out / "scan").glob("*.npz"))
    assert (out / "consensus.npz").is_file() and (out / "report.html").is_file()
    assert planned_rules(directory) == {}


def test_separate_conditions_become_runs(tmp_path):
    directory = write_workdir(
        tmp_path / "run", {**BASE_CONFIG, "preparation": {"conditions": "separate"}}
    )
    demo = directory / "demo"
    demo.mkdir()
    sheet = pd.DataFrame(
        {
            "sample": [f"s{i}" for i in range(12)],
            "time": [0, 1, 2] * 4,
            "replicate": [1, 1, 1, 2, 2, 2] * 2,
            "condition": ["cold"] * 6 + ["warm"] * 6,
        }
    )
    sheet.to_csv(demo / "samples.tsv", sep="\t", index=False)
    output = snakemake(directory, "--dry-run").stdout
    assert f"results/{RUN}.cold/prepared/prepared.h5ad" in output
    assert f"results/{RUN}.warm/prepared/prepared.h5ad" in output


# ------------------------------------------------------------------ command line


def test_gloam_cluster_matches_the_workflow(finished, tmp_path):
    """`gloam cluster` on the workflow's prepared matrix, with the same settings and seed,
    gives the workflow's memberships (the same stage functions, run in one process)."""
    from gloam.cli import main

    out = tmp_path / "cli"
    argv = ["cluster", "--prepared", str(results(finished) / "prepared/prepared.h5ad")]
    argv += ["--out-dir", str(out), "--clusters", "2-6", "--n-clusters", str(N_CLUSTERS)]
    argv += ["--n-starts", "5", "--seed", str(BASE_CONFIG["seed"]), "--thresholds", "0.5,0.7"]
    argv += ["--n-resamples", str(BASE_CONFIG["scan"]["n_resamples"])]
    assert main(argv) == 0
    ours = pd.read_csv(out / "memberships.tsv", sep="\t")
    workflow = pd.read_csv(results(finished) / "memberships.tsv", sep="\t")
    pd.testing.assert_frame_equal(ours, workflow)
    assert (out / "genesets" / "gloam_core0.7.gmt").is_file()
    assert (out / "figures" / "profiles.png").stat().st_size > 0


def test_gloam_cluster_checks_thresholds_before_clustering(finished, tmp_path, capsys):
    from gloam.cli import main

    out = tmp_path / "cli"
    argv = ["cluster", "--prepared", str(results(finished) / "prepared/prepared.h5ad")]
    with pytest.raises(SystemExit) as exit_info:
        main([*argv, "--out-dir", str(out), "--thresholds", "0.5,0.5"])
    assert exit_info.value.code == 2
    assert "given twice" in capsys.readouterr().err
    assert not out.exists(), "nothing is written when the thresholds are wrong"


def test_gloam_run_drives_snakemake(finished, capsys):
    from gloam.cli import main

    argv = ["run", "--snakefile", str(SNAKEFILE), "--configfile", str(finished / "config.yaml")]
    assert main([*argv, "--cores", "1", "--", "--directory", str(finished), "--dry-run"]) == 0
    with pytest.raises(SystemExit) as exit_info:
        main(["run", "--snakefile", str(finished / "missing.smk")])
    assert exit_info.value.code == 2
    assert "not found" in capsys.readouterr().err


def test_gloam_run_refuses_a_second_run_and_stops_on_ctrl_c_in_one_line(tmp_path):
    """While `gloam run` works, `gloam run -- --unlock` in the same folder is refused (the
    README's restart steps would break the active run's lock); Ctrl-C (SIGINT to the
    foreground process group, as a terminal sends it) ends the run with one line and exit
    status 130 (128 + SIGINT, the shell's convention), without a traceback."""
    config = {
        **BASE_CONFIG,
        # tol=0 makes every start run exactly max_iter iterations: scans take seconds.
        "scan": {"min_clusters": 2, "max_clusters": 6, "n_starts": 40, "tol": 0, "max_iter": 400},
    }
    directory = write_workdir(tmp_path / "run", config)
    gloam = [sys.executable, "-m", "gloam.cli", "run", "--cores", "2"]
    gloam += ["--configfile", str(directory / "config.yaml")]
    process = subprocess.Popen(
        [*gloam, "--", "--directory", str(directory)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        start_new_session=True,
    )
    logs = directory / "logs" / RUN
    deadline = time.monotonic() + 180
    try:
        while not (logs.is_dir() and list(logs.glob("scan_c*.log"))):
            assert process.poll() is None, process.communicate()
            assert time.monotonic() < deadline, "no scan job started within 180 s"
            time.sleep(0.2)
        second = subprocess.run(
            [*gloam, "--", "--directory", str(directory), "--unlock"],
            capture_output=True,
            text=True,
            timeout=120,
        )
        assert second.returncode == 2
        assert second.stderr.startswith("gloam: error: another gloam run (process ")
        assert len(second.stderr.splitlines()) == 1, second.stderr
        os.killpg(process.pid, signal.SIGINT)
        stdout, stderr = process.communicate(timeout=300)
    finally:
        with contextlib.suppress(ProcessLookupError):
            os.killpg(process.pid, signal.SIGKILL)
    assert process.returncode == 130, stderr
    assert "Traceback" not in stdout + stderr and "KeyboardInterrupt" not in stdout + stderr
    assert stderr.splitlines()[-1] == (
        "gloam: interrupted: Snakemake stopped its jobs; finished results are kept, and the "
        "same command continues the run"
    )
    assert stderr.count("gloam: interrupted") == 1
    assert not (directory / ".snakemake" / "gloam-run.lock").exists()


# ------------------------------------------------------------------ default settings, no structure


def test_structureless_data_with_default_settings_get_the_no_structure_verdict(tmp_path):
    """Genes drawn from one Gaussian with smooth temporal covariance change over time but form
    no clusters (gloam.simulate, kind "gaussian"). With every setting at its default (the config
    names only the datasets), the run must say so: c = 1, flag no_structure, and no core sets."""
    from gloam.simulate import simulate_experiment

    directory = tmp_path / "run"
    files = simulate_experiment(kind="gaussian", n_genes=800, flat_share=0.3, seed=2).write(
        directory / "data"
    )
    (directory / "config.yaml").write_text(
        yaml.safe_dump({"datasets": "datasets.tsv", "seed": 3}), encoding="utf-8"
    )
    (directory / "datasets.tsv").write_text(
        f"name\tmatrix\tsamples\tvalue_type\ncloud\t{files['matrix']}\t{files['samples']}\tcounts\n",
        encoding="utf-8",
    )
    snakemake(directory)
    out = directory / "results" / "cloud"
    selection = json.loads((out / "selection.json").read_text(encoding="utf-8"))
    assert selection["structure"]["present"] is False
    assert selection["recommended"] == 1 and selection["n_clusters"] == 1
    assert "no_structure" in selection["flags"]
    summary = pd.read_csv(directory / "results" / "summary.tsv", sep="\t")
    assert "no_structure" in summary.loc[0, "flags"]
    gmt = (out / "genesets" / "cloud_core0.7.gmt").read_text(encoding="utf-8")
    assert gmt.strip() == ""
    log = (directory / "logs" / "cloud" / "select.log").read_text(encoding="utf-8")
    assert "quality flag no_structure" in log


def test_two_conditions_are_compared_end_to_end(tmp_path):
    """The demo with its invented mutant line: genes whose planted response switches
    (truth ``switched``) are found as changed (precision and recall against the truth;
    Gelman & Stern 2006 for testing the difference itself), the transition table sums to the
    genes compared, and the changed-gene GMT lies within its background."""
    config = {
        **BASE_CONFIG,
        "demo": {"out_dir": "demo", "n_genes": 600, "seed": 11, "mutant": True},
        "selection": {},
    }
    directory = write_workdir(tmp_path / "run", config)
    snakemake(directory)
    comparison = results(directory) / "comparison"
    record = json.loads((comparison / "selection.json").read_text(encoding="utf-8"))
    assert record["compared"] is True, record["reason"]
    assert record["conditions"] == ["cold", "frl1"]
    responses = pd.read_csv(comparison / "responses.tsv", sep="\t", dtype={"gene": str})
    truth = pd.read_csv(directory / "demo" / "truth.tsv", sep="\t", index_col="gene")
    switched = truth.loc[responses["gene"], "switched"].to_numpy(dtype=bool)
    changed = responses["changed"].to_numpy(dtype=bool)
    assert (changed & switched).sum() >= 0.8 * changed.sum()
    assert (changed & switched).sum() >= 0.6 * switched.sum()
    transitions = pd.read_csv(comparison / "transitions.tsv", sep="\t")
    assert transitions["n_genes"].sum() == len(responses)
    assert transitions["n_changed"].sum() == changed.sum()
    background = set((comparison / "genesets" / "background.txt").read_text().split())
    for line in (comparison / "genesets" / f"{RUN}_changed.gmt").read_text().splitlines():
        assert set(line.split("\t")[2:]) <= background
    for kind in ("png", "pdf", "svg"):
        assert (comparison / f"transitions.{kind}").stat().st_size > 0
