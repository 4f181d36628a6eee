"""The comparison's clustering runs in the scan jobs and the structure tests in a job of their
own (issue 16: no single long job after the scans). Checked here, stage by stage:

* the comparison's observations in the scan input are every changing gene-condition mean
  profile, z-scored with ddof = 1 (checked against ``scipy.stats.zscore``), with m from the
  formula of Schwaemmle & Jensen (2010) written out here;
* a scan file holds the comparison's clustering at its c, and the comparison reads it;
* the structure tests read from ``structure.json`` give the same selection and comparison as
  tests run inline, and a file made for other data is refused with one line.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import scipy.stats

from gloam import stages
from gloam.errors import GloamError
from gloam.simulate import simulate_experiment

SCANNED = (2, 3, 4)
SCAN_SETTINGS = {
    "n_starts": 4,
    "tol": 1e-4,
    "max_iter": 300,
    "init": "kmeans++",
    "precision": "fast",
    "min_starts_at_optimum": 1,
    "max_starts": 8,
    "noise_class": True,
    "n_resamples": 4,
    "acceleration": "squarem",
}
SELECTION = {"structure_n_null": 10}
FDR, MIN_LOG2_RANGE = 0.05, 1.0


@pytest.fixture(scope="module")
def run(tmp_path_factory) -> dict:
    """prepare -> scan input with the comparison -> scans -> structure job, for two
    conditions with replicates (simulated by gloam.simulate, counts)."""
    root = tmp_path_factory.mktemp("two_conditions")
    data = simulate_experiment(
        n_genes=300, n_responses=3, flat_share=0.3, n_replicates=3, n_conditions=2, seed=11
    ).write(root / "data")
    files = {name: root / name for name in ("prepared.h5ad", "gene_report.tsv")}
    prepared = stages.run_prepare(
        data["matrix"],
        data["samples"],
        {"value_type": "counts"},
        h5ad=files["prepared.h5ad"],
        zscores=root / "zscores.tsv",
        gene_report=files["gene_report.tsv"],
        summary=root / "summary.tsv",
    )
    comparison = stages.comparison_input(prepared, FDR, MIN_LOG2_RANGE)
    assert comparison is not None, "two conditions with replicates are compared"
    scan_input = root / "scan_input.npz"
    stages.write_scan_input(
        prepared.zscores,
        2.0,
        scan_input,
        columns=prepared.columns,
        replicates=prepared.replicates,
        samples=prepared.samples,
        comparison=comparison,
    )
    scans = [root / f"c{c}.npz" for c in SCANNED]
    for c, path in zip(SCANNED, scans, strict=True):
        stages.run_scan(scan_input, c, SCAN_SETTINGS, 5, path)
    structure = root / "structure.json"
    stages.run_structure(scan_input, SELECTION, 5, structure)
    return {
        "root": root,
        "prepared": prepared,
        "comparison": comparison,
        "scan_input": scan_input,
        "scans": scans,
        "structure": structure,
        **files,
    }


def test_comparison_profiles_are_the_changing_condition_profiles_zscored(run):
    """Rows = each gene's mean log2 profile per condition (gene-major), minus the flat ones,
    z-scored per row with ddof = 1 (scipy.stats.zscore); m from Schwaemmle & Jensen (2010),
    1 + (1418/N + 22.05) D^-2 + (12.33/N + 0.243) D^(-0.0406 ln N - 0.1134)."""
    prepared = run["prepared"]
    comparison = stages.read_scan_input(run["scan_input"]).comparison
    assert comparison is not None
    columns = prepared.columns.loc[prepared.log_means.columns]
    conditions = list(dict.fromkeys(columns["condition"]))
    assert comparison.flat.shape == (len(prepared.log_means), len(conditions))
    per_condition = []
    for name in conditions:
        own = columns[columns["condition"] == name].sort_values("time")
        per_condition.append(prepared.log_means.loc[:, own.index].to_numpy())
    cube = np.stack(per_condition, axis=1)  # genes x conditions x times
    n_times = cube.shape[2]
    kept = cube.reshape(-1, n_times)[~comparison.flat.ravel()]
    np.testing.assert_allclose(
        comparison.profiles, scipy.stats.zscore(kept, axis=1, ddof=1), rtol=0, atol=1e-12
    )
    n, d = kept.shape
    formula = (
        1 + (1418 / n + 22.05) * d**-2 + (12.33 / n + 0.243) * d ** (-0.0406 * math.log(n) - 0.1134)
    )
    assert comparison.m == pytest.approx(formula, rel=1e-12)
    # Flat: a log2 range under the limit in that condition (gloam's gene-selection rule).
    spread = np.ptp(cube, axis=2)
    assert (comparison.flat[spread < MIN_LOG2_RANGE]).all()


def test_every_scan_file_holds_the_comparisons_clustering_at_its_c(run):
    n_profiles = run["comparison"].profiles.shape[0]
    for c, path in zip(SCANNED, run["scans"], strict=True):
        data = np.load(path)
        metrics = json.loads(str(data["comparison_metrics"]))
        assert metrics["n_clusters"] == c
        assert metrics["m"] == run["comparison"].m
        assert int(data["comparison_n_profiles"]) == n_profiles
        assert data["comparison_centroids"].shape == (c, run["comparison"].profiles.shape[1])
        # The run's own partition is in the same file, on the run's genes.
        assert data["memberships"].shape == (len(run["prepared"].zscores), c)


def test_structure_file_equals_the_tests_run_inline(run):
    """The structure job's file and the test run inside the selection use the same draws."""
    data = stages.read_scan_input(run["scan_input"])
    options = {**stages._SELECTION_DEFAULTS, **SELECTION}
    for which, X, m in (
        ("clusters", data.zscores.to_numpy(), data.m),
        ("comparison", data.comparison.profiles, data.comparison.m),
    ):
        from_file = stages.read_structure(run["structure"], which, X, m, options, 5)
        inline = stages.read_structure(None, which, X, m, options, 5)
        assert from_file == inline


def test_selection_and_comparison_are_the_same_with_and_without_the_structure_file(run):
    root = run["root"]
    outputs = {}
    for label, structure in (("file", run["structure"]), ("inline", None)):
        folder = root / label
        folder.mkdir()
        fuzzifier = folder / "fuzzifier.json"
        fuzzifier.write_text(json.dumps({"m": 2.0, "check_passed": True}), encoding="utf-8")
        stages.run_select(
            run["scan_input"],
            fuzzifier,
            run["scans"],
            SELECTION,
            5,
            out_validity=folder / "validity.tsv",
            out_selection=folder / "selection.json",
            out_consensus=folder / "consensus.npz",
            structure_json=structure,
        )
        stages.run_comparison(
            run["prepared.h5ad"],
            run["gene_report.tsv"],
            run["scans"],
            SCAN_SETTINGS,
            SELECTION,
            SCANNED,
            5,
            fdr=FDR,
            min_log2_range=MIN_LOG2_RANGE,
            prefix="sim",
            out_dir=folder / "comparison",
            structure_json=structure,
        )
        record = json.loads((folder / "comparison" / "selection.json").read_text())
        outputs[label] = (
            json.loads((folder / "selection.json").read_text()),
            pd.read_csv(folder / "comparison" / "validity.tsv", sep="\t"),
            record,
        )
    assert outputs["file"][0] == outputs["inline"][0]
    pd.testing.assert_frame_equal(outputs["file"][1], outputs["inline"][1])
    assert outputs["file"][2] == outputs["inline"][2]
    assert outputs["file"][2]["compared"], outputs["file"][2]["reason"]


def test_structure_file_for_other_settings_is_refused_with_the_fix(run):
    data = stages.read_scan_input(run["scan_input"])
    options = {**stages._SELECTION_DEFAULTS, "structure_n_null": 11}
    with pytest.raises(GloamError, match="delete the file and run again"):
        stages.read_structure(
            run["structure"], "clusters", data.zscores.to_numpy(), data.m, options, 5
        )


def test_scan_files_of_other_profiles_are_refused_with_the_fix(run):
    with pytest.raises(GloamError, match="delete the run's scan folder"):
        stages._comparison_scans(run["scans"], run["comparison"].profiles.shape[0] + 1, 1.5)


def test_the_prepared_layer_gives_the_same_observations_as_the_preparation_in_memory(run):
    """The comparison job rebuilds the observations from prepared.h5ad; they must equal what
    the preparation put into the scan input, or the scan files would not fit."""
    found, _ = stages._condition_test(run["prepared.h5ad"], run["gene_report.tsv"], FDR)
    rebuilt = stages._comparison_input_of(found[0], FDR, MIN_LOG2_RANGE)
    np.testing.assert_array_equal(rebuilt.profiles, run["comparison"].profiles)
    np.testing.assert_array_equal(rebuilt.flat, run["comparison"].flat)
    assert rebuilt.m == run["comparison"].m
