"""Benchmark: the whole workflow on a large demo, with SQUAREM and with plain iteration.

In one run, on the same generated data (the built-in demo at ``--n-genes`` genes, two
conditions, 60 samples, default settings, so resampling robustness is on with 20 resamples
per c), the script runs the installed workflow (``gloam run --cores N``) in a fresh folder
once per engine setting (``scan.acceleration: squarem``, the default, and ``none`` as the
reference), alternating, and prints:

* wall time of the whole run and its ratio to the reference;
* the longest jobs (Snakemake's ``benchmarks/`` records: wall seconds and peak RSS);
* the peak memory of any one job;
* the longest chain of jobs (prepare, the longest scan or structure job, then the longer of
  select -> export/core_genes and compare, then the report page): the wall time the run
  would take with a core for every job, computed from the job records, not measured;
* disk use of the results per run, split into the scan files and the rest;
* the chosen c and m of each setting (they must agree).

Nothing here asserts a time. Usage::

    python scripts/bench_workflow.py [--n-genes 30000] [--cores 2] [--only squarem]
"""

from __future__ import annotations

import argparse
import json
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd
import yaml

SETTINGS = ("squarem", "none")


def run_once(folder: Path, n_genes: int, cores: int, acceleration: str) -> float:
    folder.mkdir(parents=True)
    config = {"demo": {"n_genes": n_genes}, "scan": {"acceleration": acceleration}}
    (folder / "config.yaml").write_text(yaml.safe_dump(config), encoding="utf-8")
    gloam = Path(sys.executable).with_name("gloam")
    started = time.perf_counter()
    subprocess.run(
        [str(gloam), "run", "--cores", str(cores), "--configfile", "config.yaml", "--", "--quiet"],
        cwd=folder,
        check=True,
        stdout=subprocess.DEVNULL,
    )
    return time.perf_counter() - started


def job_table(folder: Path) -> pd.DataFrame:
    rows = []
    for path in sorted((folder / "benchmarks").rglob("*.tsv")):
        record = pd.read_csv(path, sep="\t").iloc[0]
        rows.append(
            {
                "job": path.relative_to(folder / "benchmarks").with_suffix("").as_posix(),
                "seconds": float(record["s"]),
                "max_rss_mb": float(record["max_rss"]),
            }
        )
    return pd.DataFrame(rows)


def longest_chain(jobs: pd.DataFrame) -> float:
    """Seconds of the run's longest chain of dependent jobs (the workflow's DAG for one run:
    prepare -> scans and structure -> select -> export and core_genes, and compare -> report
    page), from the job records."""
    seconds = dict(zip(jobs["job"].str.split("/").str[-1], jobs["seconds"], strict=True))
    scans = max(value for name, value in seconds.items() if name.startswith("scan_c"))
    middle = max(scans, seconds.get("structure", 0.0))
    finish = seconds.get("select", 0.0) + max(
        seconds.get("export", 0.0), seconds.get("core_genes", 0.0)
    )
    return (
        seconds["prepare"]
        + middle
        + max(finish, seconds.get("compare", 0.0))
        + seconds.get("report_page", 0.0)
    )


def disk_mb(path: Path) -> float:
    """Bytes of the files under ``path`` (hard links counted once), in MB."""
    seen, total = set(), 0
    for file in path.rglob("*"):
        if file.is_file():
            stat = file.stat()
            if (stat.st_dev, stat.st_ino) not in seen:
                seen.add((stat.st_dev, stat.st_ino))
                total += stat.st_size
    return total / 1e6


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n-genes", type=int, default=30000)
    parser.add_argument("--cores", type=int, default=2)
    parser.add_argument("--only", choices=SETTINGS, help="run one setting only")
    parser.add_argument("--keep", help="keep the run folders under this folder")
    args = parser.parse_args()
    root = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="gloam-bench-"))
    settings = [args.only] if args.only else list(SETTINGS)
    results = {}
    for setting in settings:
        folder = root / setting
        if folder.exists():
            shutil.rmtree(folder)
        wall = run_once(folder, args.n_genes, args.cores, setting)
        run_dir = folder / "results" / "cold_leaf"
        selection = json.loads((run_dir / "selection.json").read_text(encoding="utf-8"))
        fuzzifier = json.loads((run_dir / "fuzzifier.json").read_text(encoding="utf-8"))
        results[setting] = {
            "wall": wall,
            "jobs": job_table(folder),
            "scan_mb": disk_mb(run_dir / "scan"),
            "run_mb": disk_mb(run_dir),
            "c": selection["n_clusters"],
            "m": fuzzifier["m"],
            "flags": ",".join(selection["flags"]) or "-",
            "kept": len(pd.read_csv(run_dir / "prepared/zscores.tsv", sep="\t", usecols=[0])),
        }
    reference = results.get("none")
    print(f"demo with {args.n_genes} genes, two conditions, 60 samples; --cores {args.cores}")
    print(
        "| setting | wall (s) | ratio to plain | peak job RSS (MB) | run folder (MB) | "
        "scan files (MB) | genes clustered | m | c | flags | job time (s) | longest chain (s) |"
    )
    print("|---|---|---|---|---|---|---|---|---|---|---|---|")
    for setting, record in results.items():
        ratio = f"{record['wall'] / reference['wall']:.2f}" if reference else ""
        print(
            f"| {setting} | {record['wall']:.0f} | {ratio} | "
            f"{record['jobs']['max_rss_mb'].max():.0f} | {record['run_mb']:.0f} | "
            f"{record['scan_mb']:.0f} | {record['kept']} | {record['m']:.3f} | {record['c']} | "
            f"{record['flags']} | {record['jobs']['seconds'].sum():.0f} | "
            f"{longest_chain(record['jobs']):.0f} |"
        )
    for setting, record in results.items():
        jobs = record["jobs"].sort_values("seconds", ascending=False).head(8)
        print(f"\nlongest jobs ({setting}):")
        print(jobs.to_string(index=False, float_format=lambda value: f"{value:.1f}"))
        print(f"sum of job seconds: {record['jobs']['seconds'].sum():.0f}")
    print(f"\nrun folders: {root}")


if __name__ == "__main__":
    main()
