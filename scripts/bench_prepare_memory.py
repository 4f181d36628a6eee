"""Peak memory of preparing a large counts matrix (target: 60,000 x 100 within 2 GiB).

Writes an invented counts matrix (negative-binomial counts, 2 conditions x 25 time points x
2 replicates by default) and its sample sheet to a temporary folder, then runs in fresh
processes:

* ``baseline``: imports what the preparation imports (numpy, pandas, anndata, gloam) and
  stops, which is the reference measured in the same run;
* ``prepare``: reads both files, prepares the matrix and writes all four results, the
  same work as ``gloam prepare``.

It prints each process's peak resident set size (``resource.getrusage``, ``ru_maxrss``),
the increase over the baseline, and ratios to the input size (the float64 matrix in memory
and the TSV on disk).  A benchmark, not a test: it reports, it asserts nothing.

Usage: ``python scripts/bench_prepare_memory.py [--genes 60000] [--samples 100]``
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

LIMIT_BYTES = 2 * 1024**3


def peak_rss_bytes() -> int:
    # Linux reports ru_maxrss in KiB.
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def write_inputs(directory: Path, n_genes: int, n_samples: int, seed: int) -> None:
    import numpy as np
    import pandas as pd

    n_replicates, n_conditions = 2, 2
    n_times = max(3, n_samples // (n_replicates * n_conditions))
    rows = [
        (f"{condition}_t{t}_r{r}", float(t), str(r), condition)
        for condition in ("control", "treated")[:n_conditions]
        for t in range(n_times)
        for r in range(n_replicates)
    ][:n_samples]
    sheet = pd.DataFrame(rows, columns=["sample", "time", "replicate", "condition"])
    rng = np.random.default_rng(seed)
    means = rng.lognormal(mean=3.0, sigma=2.0, size=(n_genes, 1))
    response = rng.normal(0.0, 0.5, size=(n_genes, 1)) * np.sin(sheet["time"].to_numpy() / 4)
    mu = means * np.exp(response)
    dispersion = 0.1
    counts = rng.negative_binomial(1 / dispersion, 1 / (1 + mu * dispersion)).astype(np.int32)
    matrix_path = directory / "counts.tsv"
    table = pd.DataFrame(
        counts,
        index=pd.Index([f"gene{i:05d}" for i in range(n_genes)], name="gene"),
        columns=sheet["sample"],
    )
    table.to_csv(matrix_path, sep="\t")
    sheet_path = directory / "samples.tsv"
    sheet.to_csv(sheet_path, sep="\t", index=False)


def child(mode: str, matrix_path: Path, sheet_path: Path, out_dir: Path) -> None:
    import anndata  # noqa: F401  (the baseline must import what prepare imports)

    from gloam.io import read_matrix, read_sample_sheet
    from gloam.prepare import PrepareSettings, prepare_expression, write_prepared

    started = time.perf_counter()
    n_kept = 0
    if mode == "prepare":
        matrix = read_matrix(matrix_path)
        sheet = read_sample_sheet(sheet_path)
        prepared = prepare_expression(matrix, sheet, PrepareSettings(value_type="counts"))
        write_prepared(
            prepared,
            h5ad_path=out_dir / "prepared.h5ad",
            tsv_path=out_dir / "prepared.tsv",
            report_path=out_dir / "gene_report.tsv",
            summary_path=out_dir / "summary.tsv",
        )
        n_kept = prepared.zscores.shape[0]
    seconds = time.perf_counter() - started
    print(json.dumps({"peak_rss": peak_rss_bytes(), "seconds": seconds, "n_kept": n_kept}))


def run(arguments: list[str]) -> subprocess.CompletedProcess[str]:
    # Fresh processes from a parent that imported nothing heavy: Linux carries a process's
    # peak RSS over exec, so a big parent would inflate every child's figure.
    return subprocess.run(
        [sys.executable, __file__, *arguments], capture_output=True, text=True, check=False
    )


def run_child(mode: str, matrix_path: Path, sheet_path: Path, out_dir: Path) -> dict:
    result = run(["--child", mode, str(matrix_path), str(sheet_path), str(out_dir)])
    if result.returncode != 0:
        raise SystemExit(f"{mode} run failed:\n{result.stderr}")
    return json.loads(result.stdout.strip().splitlines()[-1])


def mib(n_bytes: float) -> str:
    return f"{n_bytes / 1024**2:8.1f} MiB"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--genes", type=int, default=60_000)
    parser.add_argument("--samples", type=int, default=100)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--child", nargs=4, metavar=("MODE", "MATRIX", "SHEET", "OUT"))
    parser.add_argument("--write-inputs", type=Path, metavar="DIR", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.write_inputs:
        write_inputs(args.write_inputs, args.genes, args.samples, args.seed)
        return
    if args.child:
        mode, matrix, sheet, out = args.child
        child(mode, Path(matrix), Path(sheet), Path(out))
        return

    with tempfile.TemporaryDirectory(prefix="gloam-bench-") as folder:
        directory = Path(folder)
        started = time.perf_counter()
        written = run(
            ["--write-inputs", folder, "--genes", str(args.genes), "--samples", str(args.samples)]
            + ["--seed", str(args.seed)]
        )
        if written.returncode != 0:
            raise SystemExit(f"writing the inputs failed:\n{written.stderr}")
        matrix_path, sheet_path = directory / "counts.tsv", directory / "samples.tsv"
        print(
            f"wrote {args.genes} x {args.samples} counts in {time.perf_counter() - started:.1f} s"
        )
        on_disk = matrix_path.stat().st_size
        baseline = run_child("baseline", matrix_path, sheet_path, directory / "out")
        prepared = run_child("prepare", matrix_path, sheet_path, directory / "out")

    in_memory = args.genes * args.samples * 8  # the float64 matrix the reader returns
    increase = prepared["peak_rss"] - baseline["peak_rss"]
    print(f"input matrix, float64 in memory : {mib(in_memory)}")
    print(f"input matrix, TSV on disk       : {mib(on_disk)}")
    print(f"peak RSS, imports only (baseline): {mib(baseline['peak_rss'])}")
    print(
        f"peak RSS, read+prepare+write    : {mib(prepared['peak_rss'])} "
        f"in {prepared['seconds']:.1f} s, {prepared['n_kept']} genes kept"
    )
    print(f"increase over baseline          : {mib(increase)}")
    print(f"increase / float64 input size   : {increase / in_memory:8.2f} x")
    print(f"peak RSS / 2 GiB target         : {prepared['peak_rss'] / LIMIT_BYTES:8.2f}")
    verdict = "within" if prepared["peak_rss"] <= LIMIT_BYTES else "ABOVE"
    print(f"peak is {verdict} the 2 GiB target")


if __name__ == "__main__":
    main()
