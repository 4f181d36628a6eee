"""Benchmark of the fuzzy c-means engine's threads, memory and pruning (issue 16).

Prints, on this machine and in one run:

* threads: milliseconds per iteration (all starts) with 1 and 2 threads, alone and
  beside one busy process (a child spinning ``while True: pass``), each the median of
  ``--repeats`` timings, with the load average seen before each block;
* memory: peak resident memory of a fresh process running one multi-start fit,
  against the size of the result arrays (memberships + centroids);
* pruning: on the invented demo data (:mod:`gloam.demo`, log CPM, replicate means,
  z-scores, m from :func:`gloam.fuzzifier.schwaemmle_jensen_m`), c = 5..10 with 20
  k-means++ starts each: iterations and seconds with and without ``prune``, and
  whether the best start is the same bit for bit.

Nothing here asserts a time: the figures are printed for a person to read.

Usage::

    python scripts/bench_engine_contention.py [--quick] [--repeats 3] [--skip-pruning]
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import time
import warnings

import numpy as np

from gloam.errors import ConvergenceWarning
from gloam.fcm import fuzzy_cmeans


def load() -> str:
    return ", ".join(f"{value:.2f}" for value in os.getloadavg())


def per_iteration_ms(X: np.ndarray, c: int, starts: int, iterations: int, threads: int) -> float:
    begin = time.perf_counter()
    fuzzy_cmeans(X, c, 1.6, n_starts=starts, rng=1, tol=0, max_iter=iterations, n_threads=threads)
    return (time.perf_counter() - begin) / iterations * 1e3


def threads_block(quick: bool, repeats: int) -> None:
    n, d, c, starts, iterations = (5000, 12, 12, 8, 20) if quick else (20000, 12, 12, 20, 30)
    X = np.random.default_rng(0).normal(size=(n, d))
    fuzzy_cmeans(X[:500], c, 1.6, n_starts=2, rng=0, tol=0, max_iter=2)  # compile / warm up
    print(
        f"\nthreads: n={n}, d={d}, c={c}, {starts} starts x {iterations} iterations, "
        f"median of {repeats}, {os.cpu_count()} CPU(s)"
    )
    results = {}
    for busy in (False, True):
        child = None
        if busy:
            child = subprocess.Popen([sys.executable, "-c", "while True: pass"])
            time.sleep(0.5)
        print(f"  load average before ({'beside a busy process' if busy else 'alone'}): {load()}")
        try:
            for threads in (1, 2):
                times = [
                    per_iteration_ms(X, c, starts, iterations, threads) for _ in range(repeats)
                ]
                results[busy, threads] = statistics.median(times)
                spread = ", ".join(f"{t:.2f}" for t in times)
                label = f"{threads} thread(s), {'busy neighbour' if busy else 'alone'}"
                print(f"  {label:<32} {results[busy, threads]:8.2f} ms/iteration  ({spread})")
        finally:
            if child is not None:
                child.kill()
                child.wait()
    for busy in (False, True):
        ratio = results[busy, 1] / results[busy, 2]
        print(f"  speed-up of 2 threads over 1 ({'busy' if busy else 'alone'}): {ratio:.2f}x")


def memory_worker(n: int, d: int, c: int, starts: int, iterations: int) -> None:
    X = np.random.default_rng(0).normal(size=(n, d))
    fuzzy_cmeans(X[:500], c, 1.6, n_starts=2, rng=0, tol=0, max_iter=2)  # compile / warm up
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    result = fuzzy_cmeans(X, c, 1.6, n_starts=starts, rng=1, tol=0, max_iter=iterations)
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    arrays = result.memberships.nbytes + result.centroids.nbytes
    print(json.dumps({"before": before, "peak": peak, "result": arrays}))


def memory_block(quick: bool) -> None:
    case = (10000, 24, 30, 20, 3) if quick else (50000, 24, 30, 20, 3)
    worker = subprocess.run(
        [sys.executable, __file__, "--memory-worker", *map(str, case)],
        check=True,
        capture_output=True,
        text=True,
    )
    figures = json.loads(worker.stdout.strip().splitlines()[-1])
    mib = 1024.0**2
    print(f"\nmemory: n={case[0]}, d={case[1]}, c={case[2]}, {case[3]} starts, fresh process")
    print(
        f"  result arrays {figures['result'] / mib:.0f} MiB; peak RSS {figures['peak'] / mib:.0f} "
        f"MiB ({figures['peak'] / figures['result']:.2f}x the result), of which "
        f"{(figures['peak'] - figures['before']) / mib:.0f} MiB during the fit "
        f"({(figures['peak'] - figures['before']) / figures['result']:.2f}x the result); "
        f"{figures['before'] / mib:.0f} MiB before it (interpreter, NumPy, numba, data)"
    )


def demo_profiles(n_genes: int) -> np.ndarray:
    from gloam.demo import simulate_demo
    from gloam.prepare import counts_per_million, log_transform, summarise_replicates, zscore_rows

    data = simulate_demo(n_genes=n_genes)
    logs = log_transform(counts_per_million(data.counts.to_numpy(dtype=float)), 1.0)
    _, group = np.unique(data.samples["time"].to_numpy(dtype=float), return_inverse=True)
    profiles = summarise_replicates(logs, group, int(group.max()) + 1)
    keep = profiles.std(axis=1) > 1e-8
    return zscore_rows(profiles[keep])[0]


def pruning_block(quick: bool) -> None:
    from gloam.fuzzifier import schwaemmle_jensen_m

    n_genes, clusters = (6000, range(5, 8)) if quick else (30000, range(5, 11))
    X = demo_profiles(n_genes)
    m = schwaemmle_jensen_m(*X.shape)
    print(
        f"\npruning: demo data {X.shape[0]} x {X.shape[1]}, m = {m:.3f}, 20 k-means++ starts, "
        f"tol 1e-4, max_iter 500, rng default_rng([1, c]); load average {load()}"
    )
    totals = np.zeros(4)
    for c in clusters:
        runs = {}
        for prune in (False, True):
            begin = time.perf_counter()
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", ConvergenceWarning)
                runs[prune] = fuzzy_cmeans(
                    X,
                    c,
                    m,
                    n_starts=20,
                    rng=np.random.default_rng([1, c]),
                    init="kmeans++",
                    prune=prune,
                )
            runs[prune, "s"] = time.perf_counter() - begin
        plain, pruned = runs[False], runs[True]
        best = plain.best_index
        same = (
            pruned.best_index == best
            and np.array_equal(pruned.memberships[best], plain.memberships[best])
            and np.array_equal(pruned.centroids[best], plain.centroids[best])
            and pruned.objectives[best] == plain.objectives[best]
        )
        full = int((plain.n_iter == 500).sum())
        totals += [plain.n_iter.sum(), pruned.n_iter.sum(), runs[False, "s"], runs[True, "s"]]
        print(
            f"  c={c:2d}: iterations {plain.n_iter.sum():5d} -> {pruned.n_iter.sum():5d}, "
            f"seconds {runs[False, 's']:5.1f} -> {runs[True, 's']:5.1f}, "
            f"{int(pruned.pruned.sum()):2d} pruned, {full:2d} of 20 ran all 500 iterations, "
            f"best start identical: {same}"
        )
    print(
        f"  total: iterations {totals[0]:.0f} -> {totals[1]:.0f}, "
        f"seconds {totals[2]:.1f} -> {totals[3]:.1f}"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="smaller cases, for a smoke run")
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--skip-pruning", action="store_true")
    parser.add_argument("--memory-worker", nargs=5, type=int, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.memory_worker:
        memory_worker(*args.memory_worker)
        return
    print(f"load average (1, 5, 15 min) at start: {load()} on {os.cpu_count()} CPU(s)")
    threads_block(args.quick, args.repeats)
    memory_block(args.quick)
    if not args.skip_pruning:
        pruning_block(args.quick)


if __name__ == "__main__":
    main()
