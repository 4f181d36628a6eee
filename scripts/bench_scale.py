"""Benchmark: plain against SQUAREM-accelerated fuzzy c-means on a 30,000-gene demo.

In one run, on the same data (the demo experiment simulated in-process with
:func:`gloam.demo.simulate_demo`, prepared with the default settings, m from
Schwämmle & Jensen 2010), the script prints:

* for c = 5..10: the same k-means++ starts run plainly (``acceleration="none"``) and
  accelerated (``"squarem"``, the default): membership passes and seconds per start,
  starts stopped at ``max_iter``, and the relative objective difference of the best
  start and of the worst start pair;
* for one c: the scan's clustering path (starts, consensus, noise class from the
  consensus, 20 resamples of the replicates, each warm-started from the found
  centroids) with the old engine calls (plain starts, NumPy noise clustering,
  :func:`gloam.noise.noise_cmeans`) and with the new ones
  (:func:`gloam.fcm.warm_start_cmeans`, :func:`gloam.robustness.recluster_from_centroids`).

Ratios are against the plain path measured in the same run; cases are run
alternately (plain, accelerated) and ``--repeats`` times, and the median is printed.
Nothing here asserts a time.

Usage::

    python scripts/bench_scale.py [--n-genes 30000] [--clusters 5 6 7 8 9 10]
        [--scan-c 9] [--repeats 1] [--scan-input prepared/scan_input.npz]
"""

from __future__ import annotations

import argparse
import os
import statistics
import time
import warnings

import numpy as np

from gloam.errors import ConvergenceWarning
from gloam.fcm import fuzzy_cmeans, warm_start_cmeans


def scan_data(n_genes: int, scan_input: str | None):
    """z-scores (n, d), m, per-sample log values (n, s) and the column of each sample."""
    if scan_input:
        from gloam.stages import read_scan_input

        data = read_scan_input(scan_input)
        return data.zscores.to_numpy(), data.m, data.replicates, data.sample_column
    from gloam.demo import simulate_demo
    from gloam.fuzzifier import schwaemmle_jensen_m
    from gloam.prepare import prepare_expression

    demo = simulate_demo(n_genes=n_genes, with_mutant=True)
    prepared = prepare_expression(demo.counts, demo.samples)
    zscores = prepared.zscores
    position = {name: i for i, name in enumerate(zscores.columns.astype(str))}
    column_of = prepared.samples.set_index(prepared.samples["sample"].astype(str))["column"]
    replicates = prepared.replicates.loc[zscores.index]
    sample_column = np.array([position[str(column_of[str(s)])] for s in replicates.columns])
    m = schwaemmle_jensen_m(zscores.shape[0], zscores.shape[1])
    return zscores.to_numpy(), m, replicates.to_numpy(), sample_column


def run_starts(X, c, m, acceleration, seed, n_starts):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        start = time.perf_counter()
        result = fuzzy_cmeans(
            X,
            c,
            m,
            n_starts=n_starts,
            init="kmeans++",
            rng=np.random.default_rng([seed, c]),
            acceleration=acceleration,
        )
    return time.perf_counter() - start, result


def scan_path(X, c, m, replicates, sample_column, *, new: bool, seed: int, n_resamples: int):
    """Seconds of starts, noise class and resampling at one c, old or new engine calls."""
    from gloam.consensus import consensus_partition, starts_at_optimum
    from gloam.noise import noise_cmeans, noise_distance
    from gloam.robustness import (
        RESAMPLE_MAX_ITER,
        RESAMPLE_TOL,
        align_to_reference,
        recluster_from_centroids,
        resample_replicates,
        resampling_robustness,
        zscore_rows,
    )

    times = {}
    start = time.perf_counter()
    seconds, result = run_starts(X, c, m, "squarem" if new else "none", seed, 20)
    aligned, at_optimum = starts_at_optimum(result)
    consensus = consensus_partition(aligned, already_aligned=True)
    times["starts"] = time.perf_counter() - start
    delta = noise_distance(X)
    start = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        if new:
            final = warm_start_cmeans(X, consensus.centroids, m, noise_distance=delta)
        else:
            final = noise_cmeans(X, consensus.centroids, m, noise_distance=delta)
    times["noise class"] = time.perf_counter() - start
    group = np.asarray(sample_column, dtype=np.intp)

    def recluster(generator):
        Z = zscore_rows(resample_replicates(replicates, group, rng=generator))
        if new:
            memberships, noise, _ = recluster_from_centroids(
                Z, final.centroids, m, noise_distance=delta
            )
            return None, memberships, noise
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ConvergenceWarning)
            part = noise_cmeans(
                Z,
                final.centroids,
                m,
                noise_distance=delta,
                tol=RESAMPLE_TOL,
                max_iter=RESAMPLE_MAX_ITER,
            )
        permutation = align_to_reference(final.centroids, part.centroids)
        return None, part.memberships[:, permutation], part.noise

    start = time.perf_counter()
    robustness = resampling_robustness(
        final.memberships,
        final.noise,
        recluster,
        n_resamples=n_resamples,
        scheme="replicates",
        rng=np.random.default_rng(seed),
    )
    times["resampling"] = time.perf_counter() - start
    times["total"] = sum(times.values())
    return times, final.objective, int(at_optimum.sum()), robustness.mean_jaccard


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n-genes", type=int, default=30000)
    parser.add_argument("--clusters", type=int, nargs="+", default=[5, 6, 7, 8, 9, 10])
    parser.add_argument("--scan-c", type=int, default=9)
    parser.add_argument("--n-starts", type=int, default=20)
    parser.add_argument("--n-resamples", type=int, default=20)
    parser.add_argument("--repeats", type=int, default=1)
    parser.add_argument("--scan-input", help="a workflow scan_input.npz instead of the demo")
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args()

    start = time.perf_counter()
    X, m, replicates, sample_column = scan_data(args.n_genes, args.scan_input)
    X = np.ascontiguousarray(X, dtype=np.float64)
    print(
        f"data: {X.shape[0]} genes x {X.shape[1]} columns, m = {m:.4f}, "
        f"{replicates.shape[1]} samples; built in {time.perf_counter() - start:.1f} s; "
        f"threads: {os.environ.get('GLOAM_NUM_THREADS', 'all')}, "
        f"load average {os.getloadavg()[0]:.2f}"
    )
    run_starts(X[:2000], 3, m, "squarem", 0, 2)  # compile/load the kernel outside the timings
    print(
        f"\nstarts per c: {args.n_starts} k-means++ starts, tol 1e-4, max_iter 500; "
        f"median of {args.repeats} alternating repeat(s)"
    )
    header = (
        f"{'c':>3} {'passes/start':>13} {'ratio':>6} {'s/start':>15} {'ratio':>6} "
        f"{'at max_iter':>11} {'best dJ/J':>10} {'worst dJ/J':>10}"
    )
    print(header)
    print(f"{'':>3} {'plain  squarem':>13} {'':>6} {'plain  squarem':>15}")
    for c in args.clusters:
        seconds = {"none": [], "squarem": []}
        results = {}
        for _ in range(args.repeats):
            for acceleration in ("none", "squarem"):
                elapsed, results[acceleration] = run_starts(
                    X, c, m, acceleration, args.seed, args.n_starts
                )
                seconds[acceleration].append(elapsed)
        plain, fast = results["none"], results["squarem"]
        per_start = {k: statistics.median(v) / args.n_starts for k, v in seconds.items()}
        best = (fast.objectives.min() - plain.objectives.min()) / plain.objectives.min()
        worst = ((fast.objectives - plain.objectives) / plain.objectives).max()
        at_max = f"{int((plain.n_iter == 500).sum())} / {int((fast.n_iter == 500).sum())}"
        print(
            f"{c:>3} {plain.n_iter.mean():>6.0f} {fast.n_iter.mean():>6.0f} "
            f"{fast.n_iter.mean() / plain.n_iter.mean():>6.2f} "
            f"{per_start['none']:>7.3f} {per_start['squarem']:>7.3f} "
            f"{per_start['squarem'] / per_start['none']:>6.2f} {at_max:>11} "
            f"{best:>10.1e} {worst:>10.1e}"
        )
    print(
        f"\nscan path at c = {args.scan_c}: 20 starts + consensus, noise class, "
        f"{args.n_resamples} replicate resamples (median of {args.repeats})"
    )
    timings = {"old": [], "new": []}
    outcome = {}
    for _ in range(args.repeats):
        for label in ("old", "new"):
            times, objective, n_at_optimum, jaccard = scan_path(
                X,
                args.scan_c,
                m,
                replicates,
                sample_column,
                new=label == "new",
                seed=args.seed,
                n_resamples=args.n_resamples,
            )
            timings[label].append(times)
            outcome[label] = (objective, n_at_optimum, jaccard)
    print(f"{'step':>12} {'old s':>8} {'new s':>8} {'ratio':>6}")
    for step in ("starts", "noise class", "resampling", "total"):
        old = statistics.median(t[step] for t in timings["old"])
        new = statistics.median(t[step] for t in timings["new"])
        print(f"{step:>12} {old:>8.2f} {new:>8.2f} {new / old:>6.2f}")
    (old_j, old_n, old_jac), (new_j, new_n, new_jac) = outcome["old"], outcome["new"]
    print(
        f"noise-class objective old {old_j:.6f}, new {new_j:.6f} "
        f"(new - old) / old = {(new_j - old_j) / old_j:.1e}; starts at optimum "
        f"{old_n} / {new_n}"
    )
    print(
        "mean Jaccard per cluster, old: "
        + " ".join(f"{v:.3f}" for v in np.sort(old_jac))
        + "\n                          new: "
        + " ".join(f"{v:.3f}" for v in np.sort(new_jac))
    )


if __name__ == "__main__":
    main()
