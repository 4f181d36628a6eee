"""Real data for benchmarks: the yeast cell-cycle time courses of Spellman et al. (1998).

Debian's package ``r-cran-kohonen`` ships ``data/yeast.rda``: 800 genes of
Saccharomyces cerevisiae in four synchronised time courses (log ratios of two-colour
microarrays): ``alpha`` (alpha-factor arrest, 18 samples, 0-119 min), ``cdc15`` (24
samples, 10-290 min), ``cdc28`` (17 samples, 0-160 min) and ``elu`` (elutriation, 14
samples, 0-390 min), plus each gene's cell-cycle phase class (``M/G1``, ``G1``, ``S``,
``G2``, ``M``, in the order of the cycle).  The sampling time in minutes is the number at
the end of each column name (``alpha7``, ``cdc15_10``).

This script fetches the package with ``apt-get download`` into a cache folder, unpacks it
with ``dpkg-deb -x``, reads ``yeast.rda`` without R through the PyPI package ``rdata``
(imported here when available, else run from a throwaway virtual environment that is
created on first use), and writes, per series, a log-scale matrix (genes x samples,
``gene`` column first, missing values empty) and a sample sheet (sample, time in minutes,
replicate 1, condition = series; no replicates), plus the class table (gene, phase,
phase_index 0-4).

Licence: the Debian copyright file gives every file of the package, the data included,
as GPL-2+ (copyright 2012-2019 Ron Wehrens and Johannes Kruisselbrink); the tables written
here are derived from it, so keep them out of gloam's MIT-licensed tree.

References
----------
Spellman PT, Sherlock G, Zhang MQ, Iyer VR, Anders K, Eisen MB, Brown PO, Botstein D,
Futcher B (1998). Comprehensive identification of cell cycle-regulated genes of the yeast
Saccharomyces cerevisiae by microarray hybridization. Mol Biol Cell 9:3273-3297 (citation
from memory).
Wehrens R, Kruisselbrink J (2018). Flexible self-organizing maps in kohonen 3.0.
J Stat Softw 87(7):1-18 (the package's CITATION file), the package that ships the data.

Usage::

    python scripts/yeast_cell_cycle.py [--out-dir DIR] [--cache-dir DIR] [--rdata-venv DIR]
"""

from __future__ import annotations

import argparse
import re
import shutil
import subprocess
import sys
import textwrap
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

PACKAGE = "r-cran-kohonen"
SERIES = ("alpha", "cdc15", "cdc28", "elu")
#: Phase classes in the order of the cell cycle.
PHASES = ("M/G1", "G1", "S", "G2", "M")
N_PHASES = len(PHASES)
DEFAULT_CACHE = Path.home() / ".cache" / "gloam-bench"
DEFAULT_RDATA_VENV = Path("/tmp/gloam-rdata-venv")

# Run by a Python that has rdata: dump every series and the classes as raw TSV files.
_READER = textwrap.dedent(
    """
    import sys
    import pandas as pd
    import rdata

    rda, out = sys.argv[1], sys.argv[2]
    yeast = rdata.read_rda(rda)["yeast"]
    for name in {series!r}:
        array = yeast[name]
        table = pd.DataFrame(
            array.values,
            index=pd.Index([str(g) for g in array.coords[array.dims[0]].values], name="gene"),
            columns=[str(c) for c in array.coords[array.dims[1]].values],
        )
        table.to_csv(f"{{out}}/raw_{{name}}.tsv", sep="\\t", na_rep="")
    genes = [str(g) for g in yeast["alpha"].coords[yeast["alpha"].dims[0]].values]
    phases = [None if pd.isna(p) else str(p) for p in yeast["class"]]
    pd.DataFrame({{"gene": genes, "phase": phases}}).to_csv(
        f"{{out}}/raw_class.tsv", sep="\\t", index=False, na_rep=""
    )
    """
).format(series=SERIES)


@dataclass(frozen=True)
class YeastData:
    """Files written by :func:`prepare_yeast`."""

    series: dict[str, dict[str, Path]]  # series -> {"matrix": Path, "samples": Path}
    classes: Path
    copyright: str


def _run(command: list[str], cwd: Path | None = None) -> subprocess.CompletedProcess:
    return subprocess.run(command, cwd=cwd, capture_output=True, text=True, check=False)


def fetch_package(cache_dir: Path) -> Path | str:
    """The unpacked package folder, or the reason it could not be had."""
    cache_dir.mkdir(parents=True, exist_ok=True)
    unpacked = cache_dir / PACKAGE
    if not list(unpacked.rglob("yeast.rda")):
        debs = sorted(cache_dir.glob(f"{PACKAGE}_*.deb"))
        if not debs:
            if shutil.which("apt-get") is None:
                return "apt-get is not available (not a Debian-like system)"
            result = _run(["apt-get", "download", PACKAGE], cwd=cache_dir)
            debs = sorted(cache_dir.glob(f"{PACKAGE}_*.deb"))
            if result.returncode != 0 or not debs:
                message = " ".join((result.stderr or result.stdout).split())[-300:]
                return (
                    f"apt-get download {PACKAGE} failed (no network or no package list?): {message}"
                )
        if shutil.which("dpkg-deb") is None:
            return "dpkg-deb is not available"
        result = _run(["dpkg-deb", "-x", str(debs[-1]), str(unpacked)])
        if result.returncode != 0:
            return f"dpkg-deb -x failed: {' '.join(result.stderr.split())[-300:]}"
    return unpacked


def rdata_python(venv: Path) -> str | None:
    """A Python that can import rdata: this one, else ``venv`` (created on first use)."""
    try:
        import rdata  # noqa: F401
    except ImportError:
        pass
    else:
        return sys.executable
    python = venv / "bin" / "python"
    if python.exists() and _run([str(python), "-c", "import rdata"]).returncode == 0:
        return str(python)
    print(f"installing rdata into the throwaway venv {venv} ...", file=sys.stderr)
    for command in (
        [sys.executable, "-m", "venv", str(venv)],
        [str(python), "-m", "pip", "install", "--quiet", "rdata"],
    ):
        if _run(command).returncode != 0:
            return None
    return str(python)


def minutes(column: str, series: str) -> float:
    """Sampling time in minutes from a column name such as ``alpha7`` or ``cdc15_10``."""
    match = re.fullmatch(rf"{re.escape(series)}_?(\d+(?:\.\d+)?)", column)
    if match is None:
        raise ValueError(f"column {column!r} of series {series!r} has no time in its name")
    return float(match.group(1))


def prepare_yeast(
    out_dir: Path,
    *,
    cache_dir: Path = DEFAULT_CACHE,
    rdata_venv: Path = DEFAULT_RDATA_VENV,
) -> YeastData | str:
    """Write the four series and the class table into ``out_dir``; or say why not.

    Returns
    -------
    YeastData, or str
        The files written, or a one-line reason the data could not be prepared (no apt,
        no network, rdata not installable).
    """
    unpacked = fetch_package(cache_dir)
    if isinstance(unpacked, str):
        return unpacked
    rda = next(unpacked.rglob("yeast.rda"), None)
    if rda is None:
        return f"{PACKAGE} has no yeast.rda"
    copyright_file = next(unpacked.rglob("copyright"), None)
    copyright_text = copyright_file.read_text(encoding="utf-8") if copyright_file else ""
    python = rdata_python(rdata_venv)
    if python is None:
        return "the PyPI package rdata could not be installed (no network?)"
    out_dir.mkdir(parents=True, exist_ok=True)
    raw_dir = out_dir / "raw"
    raw_dir.mkdir(exist_ok=True)
    result = _run([python, "-c", _READER, str(rda), str(raw_dir)])
    if result.returncode != 0:
        return f"reading yeast.rda failed: {' '.join(result.stderr.split())[-300:]}"

    written: dict[str, dict[str, Path]] = {}
    for series in SERIES:
        raw = pd.read_csv(raw_dir / f"raw_{series}.tsv", sep="\t", dtype={"gene": str})
        raw = raw.set_index("gene")
        times = [minutes(column, series) for column in raw.columns]
        samples = pd.DataFrame(
            {"sample": raw.columns, "time": times, "replicate": 1, "condition": series}
        )
        paths = {
            "matrix": out_dir / f"yeast_{series}_matrix.tsv",
            "samples": out_dir / f"yeast_{series}_samples.tsv",
        }
        raw.to_csv(paths["matrix"], sep="\t", na_rep="")
        samples.to_csv(paths["samples"], sep="\t", index=False)
        written[series] = paths
    classes = pd.read_csv(raw_dir / "raw_class.tsv", sep="\t", dtype=str, keep_default_na=False)
    classes = classes[classes["phase"].isin(PHASES)].copy()
    classes["phase_index"] = classes["phase"].map({p: i for i, p in enumerate(PHASES)})
    classes_path = out_dir / "yeast_classes.tsv"
    classes.to_csv(classes_path, sep="\t", index=False)
    (out_dir / "copyright").write_text(copyright_text, encoding="utf-8")
    return YeastData(series=written, classes=classes_path, copyright=copyright_text)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0], allow_abbrev=False)
    parser.add_argument("--out-dir", type=Path, default=Path("yeast_data"))
    parser.add_argument("--cache-dir", type=Path, default=DEFAULT_CACHE)
    parser.add_argument("--rdata-venv", type=Path, default=DEFAULT_RDATA_VENV)
    args = parser.parse_args(argv)
    prepared = prepare_yeast(args.out_dir, cache_dir=args.cache_dir, rdata_venv=args.rdata_venv)
    if isinstance(prepared, str):
        print(f"yeast cell cycle: skipped: {prepared}")
        return 0
    for series, paths in prepared.series.items():
        matrix = pd.read_csv(paths["matrix"], sep="\t", index_col="gene")
        samples = pd.read_csv(paths["samples"], sep="\t")
        print(
            f"{series}: {matrix.shape[0]} genes x {matrix.shape[1]} samples, "
            f"{samples['time'].min():g}-{samples['time'].max():g} min, "
            f"{matrix.isna().to_numpy().mean():.1%} missing -> {paths['matrix']}"
        )
    classes = pd.read_csv(prepared.classes, sep="\t")
    counts = classes["phase"].value_counts().reindex(PHASES).to_dict()
    print(f"classes: {len(classes)} genes {counts} -> {prepared.classes}")
    licence = re.findall(r"^License:\s*(.+)$", prepared.copyright, flags=re.MULTILINE)
    print(f"licence of the package files (Debian copyright): {sorted(set(licence))}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
