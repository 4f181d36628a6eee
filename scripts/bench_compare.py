"""Benchmark of the comparison of conditions (gloam.compare) on simulated switching genes.

For each setting and seed, ``gloam.simulate.simulate_switching`` makes two conditions
(``wt``, ``mut``) sampled at the same ten times with replicates, where a known share of the
planted genes changes its response (another planted shape, or none, in ``mut``).  Counts are
normalised as the workflow does by default (median-of-ratios size factors, Anders & Huber
2010; ``log2(x + 1)``) and filtered for expression (at least 1 CPM in at least 2 samples);
log data are used as they are.  Then:

* ``interaction_test`` (moderated F of the condition x time interaction, limma-trend for
  counts, Benjamini-Hochberg FDR at the default 0.05);
* ``shared_responses`` with as many fitted responses as planted shapes (10 starts), which
  calls a gene *changed* when its interaction FDR is at most 0.05 and its top response
  differs between the conditions.

Reported per run: genes tested, truly changed genes, and precision / recall of (a) the
FDR-significant genes and (b) the changed genes, against the simulator's truth.  Recall
counts every truly changed gene of the experiment, also those the expression filter
removed.  On null data (``null=True``: no gene changes) the number and share of
FDR-significant genes are false discoveries; Benjamini-Hochberg keeps the expected share of
false discoveries among discoveries at or below the level, and under a complete null the
chance of any discovery at most 0.05.

Targets (issue 15): precision >= 0.9 and recall >= 0.8 on the easy setting; null false
discoveries at or below the FDR level.

Nothing here asserts a result: the tables are printed for a person to read.

Usage: ``.venv/bin/python scripts/bench_compare.py [--seeds 5] [--genes 2000]``
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np
import pandas as pd

from gloam.compare import interaction_test, shared_responses
from gloam.prepare import counts_per_million, median_of_ratios_size_factors
from gloam.simulate import simulate_switching

#: name -> simulate_switching settings.
SETTINGS: dict[str, dict[str, object]] = {
    "easy counts": {"amplitude_log2": (1.5, 3.0), "n_replicates": 3, "dispersion": 0.1},
    "easy log": {"amplitude_log2": (1.5, 3.0), "n_replicates": 3, "value_type": "log"},
    "harder counts (amp 0.75-1.5)": {
        "amplitude_log2": (0.75, 1.5),
        "n_replicates": 3,
        "dispersion": 0.1,
    },
    "hardest counts (amp 0.75-1.5, 2 reps, disp 0.2)": {
        "amplitude_log2": (0.75, 1.5),
        "n_replicates": 2,
        "dispersion": 0.2,
    },
}
NULL_SETTINGS: dict[str, dict[str, object]] = {
    "null counts": {"n_replicates": 3, "dispersion": 0.1},
    "null log": {"n_replicates": 3, "value_type": "log"},
}
FDR = 0.05
N_RESPONSES = 5


def _prepare(experiment) -> tuple[np.ndarray, pd.Index, np.ndarray, np.ndarray, np.ndarray]:
    """log2 values of the expressed genes, their names and the (condition, time) layout."""
    values = experiment.matrix.to_numpy(dtype=np.float64)
    genes = experiment.matrix.index
    if experiment.value_type == "counts":
        expressed = (counts_per_million(values) >= 1.0).sum(axis=1) >= 2
        values = values[expressed]
        genes = genes[expressed]
        values = np.log2(values / median_of_ratios_size_factors(values) + 1.0)
    samples = experiment.samples
    groups, _ = pd.factorize(samples["condition"] + "@" + samples["time"].astype(str))
    first = samples.groupby(groups).first()
    return (
        values,
        genes,
        groups,
        first["condition"].to_numpy(dtype=object),
        first["time"].to_numpy(dtype=np.float64),
    )


def _ratio(numerator: int, denominator: int) -> float:
    return numerator / denominator if denominator else float("nan")


def run(setting: dict[str, object], seed: int, n_genes: int) -> dict[str, float]:
    experiment = simulate_switching(
        n_genes=n_genes, n_responses=N_RESPONSES, switch_share=0.1, seed=seed, **setting
    )
    values, genes, groups, conditions, times = _prepare(experiment)
    test = interaction_test(
        values,
        groups,
        conditions,
        times,
        genes=genes,
        fdr=FDR,
        trend=experiment.value_type == "counts",
    )
    shared = shared_responses(test, n_clusters=N_RESPONSES, n_starts=10, rng=seed)
    truth = experiment.truth.set_index("gene")["changed"]
    n_true = int(truth.sum())
    tested_truth = truth.loc[genes].to_numpy()
    significant = test.table["significant"].to_numpy()
    changed = shared.table["changed"].to_numpy()
    return {
        "tested": len(genes),
        "true": n_true,
        "significant": int(significant.sum()),
        "prec_sig": _ratio(int((significant & tested_truth).sum()), int(significant.sum())),
        "rec_sig": _ratio(int((significant & tested_truth).sum()), n_true),
        "changed": int(changed.sum()),
        "prec_changed": _ratio(int((changed & tested_truth).sum()), int(changed.sum())),
        "rec_changed": _ratio(int((changed & tested_truth).sum()), n_true),
    }


def run_null(setting: dict[str, object], seed: int, n_genes: int) -> dict[str, float]:
    experiment = simulate_switching(
        n_genes=n_genes, n_responses=N_RESPONSES, null=True, seed=seed, **setting
    )
    values, genes, groups, conditions, times = _prepare(experiment)
    test = interaction_test(
        values,
        groups,
        conditions,
        times,
        genes=genes,
        fdr=FDR,
        trend=experiment.value_type == "counts",
    )
    shared = shared_responses(test, n_clusters=N_RESPONSES, n_starts=10, rng=seed)
    significant = int(test.table["significant"].sum())
    return {
        "tested": len(genes),
        "false_discoveries": significant,
        "share": significant / len(genes),
        "changed": int(shared.table["changed"].sum()),
        "p_below_0.05": float((test.table["p_value"] < 0.05).mean()),
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=5, help="seeds per setting (default 5)")
    parser.add_argument("--genes", type=int, default=2000, help="genes per experiment")
    arguments = parser.parse_args()
    seeds = range(1, arguments.seeds + 1)
    warnings.simplefilter("ignore")  # convergence notes of single starts are not measured here
    pd.set_option("display.width", 140)
    pd.set_option("display.max_columns", 20)
    start = time.perf_counter()

    rows = [
        {"setting": name, "seed": seed, **run(setting, seed, arguments.genes)}
        for name, setting in SETTINGS.items()
        for seed in seeds
    ]
    table = pd.DataFrame(rows)
    print(
        f"Changed genes at FDR {FDR} ({arguments.genes} genes, {N_RESPONSES} responses, "
        "10 % of planted genes switch)"
    )
    print(table.to_string(index=False, float_format=lambda x: f"{x:.3f}"))
    print("\nMean over seeds")
    means = table.drop(columns="seed").groupby("setting", sort=False).mean()
    print(means.to_string(float_format=lambda x: f"{x:.3f}"))

    null_rows = [
        {"setting": name, "seed": seed, **run_null(setting, seed, arguments.genes)}
        for name, setting in NULL_SETTINGS.items()
        for seed in seeds
    ]
    print(f"\nNull data (no gene changes): false discoveries at FDR {FDR}")
    print(pd.DataFrame(null_rows).to_string(index=False, float_format=lambda x: f"{x:.4f}"))
    print(f"\nwall time {time.perf_counter() - start:.1f} s")


if __name__ == "__main__":
    main()
