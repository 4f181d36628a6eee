"""Shared by the cluster tests (test_slurm.py, test_cluster_generic.py): a work directory
with small generated datasets, and the job counts of Snakemake's plan."""

from __future__ import annotations

import re
from pathlib import Path

import yaml

from gloam.demo import write_demo


def write_workdir(directory: Path, datasets: dict[str, int], config: dict) -> Path:
    """Datasets (name -> generator seed) of 300 genes, their table and ``config.yaml``."""
    directory.mkdir(parents=True)
    rows = ["name\tmatrix\tsamples\tvalue_type"]
    for name, seed in datasets.items():
        write_demo(directory / "data" / name, seed=seed, n_genes=300, n_replicates=2)
        rows.append(f"{name}\tdata/{name}/counts.tsv\tdata/{name}/samples.tsv\tcounts")
    (directory / "datasets.tsv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    (directory / "config.yaml").write_text(yaml.safe_dump(config), encoding="utf-8")
    return directory


def planned_jobs(output: str) -> dict[str, int]:
    """Rule -> job count from Snakemake's 'Job stats' table."""
    table = output.split("Job stats:", 1)[1].split("total", 1)[0]
    return {rule: int(n) for rule, n in re.findall(r"^(\w+)\s+(\d+)$", table, re.MULTILINE)}


WORKFLOW = Path(__file__).resolve().parents[1] / "src" / "gloam" / "workflow"


def local_rules() -> set[str]:
    """Rules the workflow runs on the controller (``localrule: True``), read from its files."""
    rules = set()
    for path in [WORKFLOW / "Snakefile", *sorted((WORKFLOW / "rules").glob("*.smk"))]:
        text = path.read_text(encoding="utf-8")
        for match in re.finditer(r"^rule (\w+):\n((?:[ \t]+.*\n|\n)*)", text, re.MULTILINE):
            if re.search(r"^\s+localrule:\s*True", match.group(2), re.MULTILINE):
                rules.add(match.group(1))
    return rules
