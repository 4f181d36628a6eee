"""Benchmark of gloam's fuzzy c-means engine against two reference implementations.

Every implementation starts from the same memberships and runs exactly the same
number of iterations on the same synthetic data (n genes x d time points drawn
around c invented profiles), gloam with plain steps (``acceleration="none"``: SQUAREM,
the default, takes another path to the same fixed point, measured by
``scripts/bench_scale.py``); the script prints milliseconds per iteration, the
ratios, the largest differences between the results (exit status 1 when one
is above its allowed value), the BLAS and thread count and the machine's load
average, and the time, CPU time and peak memory of a large multi-start run.

References measured in the same run:

* scikit-fuzzy ``cmeans`` (``error=0``, so it runs every iteration), in this
  environment;
* the ``fuzzy-c-means`` package, which pins ``numpy<2``: it is installed into a
  throwaway virtual environment of its own, and arrays go there and back as
  ``.npy`` files.  Its ``FCM`` draws its own start, so the worker subclasses it
  to start from the given memberships (``error`` cannot be below 1e-9; the
  worker reports how many iterations ran).

Nothing here asserts a time: the figures are printed for a person to read.

Usage::

    python scripts/bench_fcm.py [--quick] [--skip-fuzzy-c-means] [--skip-big]
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import subprocess
import sys
import tempfile
import textwrap
import time
from pathlib import Path

import numpy as np

from gloam.fcm import fuzzy_cmeans, random_memberships

_WORKER = textwrap.dedent(
    """
    import json, sys, time
    import numpy as np
    from fcmeans import FCM

    folder = sys.argv[1]
    X = np.load(folder + "/X.npy")
    U0 = np.load(folder + "/U0.npy")
    settings = json.load(open(folder + "/settings.json"))
    iterations = []

    class GivenStart(FCM):
        def _init_u(self, X):
            self.u = U0.copy()

        def _update_u(self, X):
            iterations.append(1)
            super()._update_u(X)

    model = GivenStart(
        n_clusters=settings["c"], m=settings["m"], max_iter=settings["iterations"], error=1e-9
    )
    begin = time.perf_counter()
    model.fit(X)
    seconds = time.perf_counter() - begin
    np.save(folder + "/fcm_u.npy", model.u)
    np.save(folder + "/fcm_centers.npy", model._centers)
    json.dump({"seconds": seconds, "iterations": len(iterations)},
              open(folder + "/fcm_timing.json", "w"))
    """
)


def synthetic_profiles(
    n_genes: int, n_timepoints: int, n_clusters: int, rng: np.random.Generator
) -> np.ndarray:
    """Invented z-scored time courses: noisy copies of ``n_clusters`` random smooth profiles."""
    times = np.linspace(0.0, 1.0, n_timepoints)
    phases = rng.uniform(0.0, 2.0 * np.pi, n_clusters)
    widths = rng.uniform(0.5, 2.0, n_clusters)
    profiles = np.sin(2.0 * np.pi * times[np.newaxis, :] / widths[:, np.newaxis] + phases[:, None])
    labels = rng.integers(n_clusters, size=n_genes)
    X = profiles[labels] + rng.normal(scale=0.6, size=(n_genes, n_timepoints))
    X -= X.mean(axis=1, keepdims=True)
    X /= X.std(axis=1, keepdims=True)
    return X


def timed(function, repeats: int = 1):
    """(result, best wall-clock seconds) over ``repeats`` calls."""
    best = np.inf
    result = None
    for _ in range(repeats):
        begin = time.perf_counter()
        result = function()
        best = min(best, time.perf_counter() - begin)
    return result, best


def run_fuzzy_c_means_package(X: np.ndarray, U0: np.ndarray, m: float, iterations: int):
    """Install ``fuzzy-c-means`` in a throwaway venv and run it there from ``U0``."""
    with tempfile.TemporaryDirectory(prefix="gloam-bench-") as folder:
        venv = Path(folder) / "venv"
        print("  installing fuzzy-c-means into a throwaway virtual environment ...", flush=True)
        subprocess.run([sys.executable, "-m", "venv", str(venv)], check=True)
        python = str(venv / "bin" / "python")
        subprocess.run(
            [python, "-m", "pip", "install", "-q", "fuzzy-c-means"],
            check=True,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        np.save(f"{folder}/X.npy", X)
        np.save(f"{folder}/U0.npy", U0)
        settings = {"c": int(U0.shape[1]), "m": m, "iterations": iterations}
        Path(folder, "settings.json").write_text(json.dumps(settings))
        Path(folder, "worker.py").write_text(_WORKER)
        subprocess.run([python, f"{folder}/worker.py", folder], check=True)
        timing = json.loads(Path(folder, "fcm_timing.json").read_text())
        return (
            np.load(f"{folder}/fcm_u.npy"),
            np.load(f"{folder}/fcm_centers.npy"),
            timing["seconds"],
            timing["iterations"],
        )


def big_case(n_genes: int, n_timepoints: int, n_clusters: int, n_starts: int, iterations: int):
    """Time one multi-start run of the default path; meant to run in a fresh process."""
    rng = np.random.default_rng(11)
    X = synthetic_profiles(n_genes, n_timepoints, n_clusters, rng)
    fuzzy_cmeans(X[:2000], n_clusters, 1.6, tol=0, max_iter=2, rng=0)  # compile / warm up
    begin = time.perf_counter()
    cpu_begin = time.process_time()
    result = fuzzy_cmeans(X, n_clusters, 1.6, n_starts=n_starts, tol=0, max_iter=iterations, rng=1)
    seconds = time.perf_counter() - begin
    cpu_seconds = time.process_time() - cpu_begin
    peak_kib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # KiB on Linux
    print(
        json.dumps(
            {
                "seconds": seconds,
                "cpu_seconds": cpu_seconds,
                "peak_rss_mib": peak_kib / 1024,
                "n_iter": int(result.n_iter.max()),
                "best_objective": float(result.objectives.min()),
            }
        )
    )


def primitive_ms(X: np.ndarray, U0: np.ndarray, m: float, repeats: int = 5) -> float:
    """The limit: the two BLAS products and one power per membership entry, one thread.

    Per iteration the engine must at least form ``[X, |x|^2, 1] [-2V, 1, |v|^2]^T``
    (distances), ``(u^m)^T [X, 1]`` (centroid sums) and one power per entry; each is
    timed alone here (best of ``repeats``), BLAS limited to one thread.
    """
    from threadpoolctl import threadpool_limits

    n, d = X.shape
    c = U0.shape[1]
    rows = np.hstack([X, np.einsum("ij,ij->i", X, X)[:, None], np.ones((n, 1))])
    weights = np.hstack([-2.0 * X[:c], np.ones((c, 1)), np.ones((c, 1))])
    with_ones = np.hstack([X, np.ones((n, 1))])
    ratio = 1.0 + np.random.default_rng(0).random((n, c))
    out = np.empty((n, c))
    with threadpool_limits(1, user_api="blas"):
        _, distances = timed(lambda: rows @ weights.T, repeats)
        _, sums = timed(lambda: U0.T @ with_ones, repeats)
        _, power = timed(lambda: np.power(ratio, -1.0 / (m - 1.0), out=out), repeats)
    return (distances + sums + power) * 1e3


def environment_report() -> None:
    from threadpoolctl import threadpool_info

    from gloam import fcm

    print(f"python {platform.python_version()}, numpy {np.__version__}, {platform.machine()}")
    if hasattr(os, "getloadavg"):
        # Other work on the machine slows the multi-threaded runs most: print it with the figures.
        load = ", ".join(f"{value:.2f}" for value in os.getloadavg())
        print(f"  load average (1, 5, 15 min): {load} on {os.cpu_count()} CPU(s)")
    for pool in threadpool_info():
        print(
            f"  {pool['user_api']}: {pool['internal_api']} {pool.get('version')} "
            f"({pool.get('architecture', '?')}), {pool['num_threads']} thread(s)"
        )
    if fcm._kernels is not None:
        import numba

        print(f"  numba {numba.__version__}: {numba.config.NUMBA_NUM_THREADS} thread(s) available")
    else:
        print(
            "  numba not in use (missing or GLOAM_DISABLE_NUMBA=1): "
            "precision='fast' runs the float64 NumPy path"
        )
    print(f"  gloam threads: {fcm._default_threads()} (GLOAM_NUM_THREADS / OMP_NUM_THREADS / CPUs)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="smaller data, for a smoke run")
    parser.add_argument("--skip-fuzzy-c-means", action="store_true")
    parser.add_argument("--skip-big", action="store_true", help="skip the multi-start case")
    parser.add_argument("--big-case-worker", nargs=5, type=int, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.big_case_worker:
        big_case(*args.big_case_worker)
        return

    n, d, c, m, iterations = (4000, 12, 12, 1.6, 30) if args.quick else (20000, 12, 12, 1.6, 100)
    big = (10000, 24, 30, 4, 30) if args.quick else (50000, 24, 30, 20, 100)
    environment_report()
    rng = np.random.default_rng(2024)
    X = synthetic_profiles(n, d, c, rng)
    U0 = random_memberships(1, n, c, rng=rng)[0]
    print(
        f"\ncase: n={n} genes, d={d} time points, c={c}, m={m}, {iterations} iterations, same start"
    )

    def gloam_run(precision: str):
        # Plain steps: every path then takes the same iterations from the same start, as
        # the references do (SQUAREM, the default, would take a different trajectory).
        return fuzzy_cmeans(
            X,
            c,
            m,
            initial_memberships=U0,
            tol=0,
            max_iter=iterations,
            precision=precision,
            acceleration="none",
        )

    gloam_run("fast")  # compile the kernel (cached on disk) before timing
    rows = []
    results = {}
    for precision in ("fast", "float32", "float64"):
        result, seconds = timed(lambda p=precision: gloam_run(p), repeats=3)
        results[precision] = result
        rows.append((f"gloam precision={precision!r}", seconds / iterations * 1e3))

    import skfuzzy

    (sk_centroids, sk_u, *_), sk_seconds = timed(
        lambda: skfuzzy.cmeans(X.T, c, m, error=0, maxiter=iterations, init=U0.T.copy()),
        repeats=3,
    )
    rows.append(("scikit-fuzzy cmeans", sk_seconds / iterations * 1e3))

    exact = results["float64"]
    fast = results["fast"]
    # (label, left, right, allowed largest absolute difference): the agreement targets.
    differences = [
        ("gloam float64 vs scikit-fuzzy: memberships", exact.memberships[0], sk_u.T, 1e-10),
        ("gloam float64 vs scikit-fuzzy: centroids", exact.centroids[0], sk_centroids, 1e-10),
        ("gloam fast vs gloam float64: memberships", fast.memberships, exact.memberships, 1e-6),
        ("gloam fast vs gloam float64: centroids", fast.centroids, exact.centroids, 1e-6),
        (
            "gloam float32 vs float64: memberships",
            results["float32"].memberships,
            exact.memberships,
            1e-6,
        ),
    ]
    if not args.skip_fuzzy_c_means:
        fcm_u, fcm_centers, fcm_seconds, fcm_iterations = run_fuzzy_c_means_package(
            X, U0, m, iterations
        )
        rows.append(
            (f"fuzzy-c-means FCM ({fcm_iterations} iterations)", fcm_seconds / fcm_iterations * 1e3)
        )
        # Looser: the package stops by its own rule (error >= 1e-9), possibly a little early.
        differences.append(
            ("fuzzy-c-means vs gloam float64: memberships", fcm_u, exact.memberships[0], 1e-8)
        )
        differences.append(
            ("fuzzy-c-means vs gloam float64: centroids", fcm_centers, exact.centroids[0], 1e-8)
        )

    print("\nagreement (largest absolute difference, allowed):")
    disagreements = 0
    for label, left, right, allowed in differences:
        largest = float(np.abs(left - right).max())
        verdict = "ok" if largest <= allowed else "TOO LARGE"
        disagreements += largest > allowed
        print(f"  {label:<52} {largest:.2e}  (<= {allowed:.0e}: {verdict})")

    print("\nms per iteration (best of 3; fuzzy-c-means: one run):")
    per_iteration = dict(rows)
    for label, ms in rows:
        print(f"  {label:<52} {ms:8.3f}")
    fast_ms = per_iteration["gloam precision='fast'"]
    print("\nratios (reference / gloam default 'fast'):")
    for label, ms in rows:
        if not label.startswith("gloam precision='fast'"):
            print(f"  {label:<52} {ms / fast_ms:6.1f}x")

    # The limit on one thread, against the engine on one thread (one start: one thread).
    _, one_thread = timed(
        lambda: fuzzy_cmeans(
            X,
            c,
            m,
            initial_memberships=U0,
            tol=0,
            max_iter=iterations,
            n_threads=1,
            acceleration="none",
        ),
        repeats=3,
    )
    limit_ms = primitive_ms(X, U0, m)
    print(
        f"\nlimit (two BLAS products + one np.power per entry, 1 thread): {limit_ms:.3f} ms; "
        f"gloam 'fast' on 1 thread {one_thread / iterations * 1e3:.3f} ms: "
        f"{one_thread / iterations * 1e3 / limit_ms:.2f}x the limit"
    )

    if not args.skip_big:
        n_big, d_big, c_big, s_big, it_big = big
        print(
            f"\nmulti-start case: n={n_big}, d={d_big}, c={c_big}, {s_big} starts x {it_big} "
            "iterations, default path, fresh process"
        )
        worker = subprocess.run(
            [sys.executable, __file__, "--big-case-worker", *map(str, big)],
            check=True,
            capture_output=True,
            text=True,
            env=os.environ.copy(),
        )
        figures = json.loads(worker.stdout.strip().splitlines()[-1])
        print(
            f"  {figures['seconds']:.2f} s ({figures['cpu_seconds']:.1f} s of CPU time: "
            f"{figures['cpu_seconds'] / figures['seconds']:.2f} cores busy on average), "
            f"peak RSS {figures['peak_rss_mib']:.0f} MiB (whole process), "
            f"{figures['n_iter']} iterations"
        )
    if disagreements:
        sys.exit(f"{disagreements} agreement check(s) above the allowed difference")


if __name__ == "__main__":
    main()
