"""One function per workflow stage, each from files to files.

The Snakemake rule scripts and the command line call these; nothing here knows about
Snakemake.  Every function reads its inputs, calls the library, and writes its outputs
through :func:`gloam.io.atomic_output`, so an interrupted stage leaves no file that looks
finished.

Files between stages
--------------------
``scan/c<c>.npz`` (:func:`run_scan`)
    Every random start for one c: ``memberships`` (n_starts, n_genes, c), ``centroids``
    (n_starts, c, n_columns), ``objectives``, ``n_iter``, ``converged`` (n_starts,),
    ``m``, ``best_index``, ``seed``, ``genes`` and ``columns`` (the prepared matrix's labels).
``fuzzifier.json`` (:func:`write_fuzzifier_choice`)
    ``m``, ``method``, ``formula_m``, ``setting``, ``n_clusters_check``, ``n_genes``,
    ``n_columns``; the randomised-data curve goes to its own TSV.
``prepared/scan_input.npz`` (:func:`write_scan_input`)
    What every scan job reads, in one file: ``zscores`` (n_genes, n_columns, float64, the
    prepared matrix's values), ``genes``, ``columns`` and ``m`` (the fuzzifier chosen for
    them). One input per scan job instead of two keeps the plan of a large grid small, and
    reading it needs NumPy only.
``selection.json`` (:func:`run_select`)
    ``n_clusters`` (used), ``method`` (``auto`` or ``fixed``), ``recommended``, ``reason``,
    ``scanned``.
``consensus.npz`` (:func:`run_select`)
    For the chosen c, clusters in peak-time order: ``memberships``, ``membership_sd``
    (n_genes, c), ``top_cluster`` (0-based), ``top_membership``, ``stability`` (n_genes,),
    ``centroids`` (c, n_columns), ``order`` (best start's label of each column),
    ``start_top_cluster`` (n_starts, n_genes: each aligned start's top cluster),
    ``cluster_names``, ``genes``, ``columns``, ``m``, ``n_starts``.

Seeds: the scan for c draws from ``numpy.random.default_rng([seed, c])`` and the fuzzifier
check from ``default_rng([seed, 0])``, so each job is reproducible on its own, whatever
order a scheduler runs them in.
"""

from __future__ import annotations

import contextlib
import dataclasses
import json
import os
import platform
import shutil
import sys
import tempfile
import traceback
import warnings
from collections.abc import Iterator, Mapping, Sequence
from importlib import metadata
from pathlib import Path
from typing import Any, TextIO

import numpy as np
import pandas as pd

from gloam.errors import GloamError, GloamWarning, show_warning
from gloam.io import atomic_output, write_table

__all__ = [
    "rule_environment",
    "run_demo",
    "run_prepare",
    "check_genes_for_fuzzifier",
    "check_clusters_fit_genes",
    "clusters_for_fuzzifier_check",
    "write_fuzzifier_choice",
    "write_scan_input",
    "read_scan_input",
    "run_scan",
    "read_scan",
    "run_select",
    "read_consensus",
    "export_tables",
    "export_gene_sets",
    "export_h5ad",
    "export_results",
    "export_core_genes",
    "figure_profiles",
    "figure_validity",
    "figure_fuzzifier",
    "figure_centroid_correlation",
    "summarise_runs",
    "RESULT_KEY",
    "VAR_PREFIX",
]

#: Key of gloam's results in ``AnnData.uns`` / ``varm``; prefix of its ``var`` columns.
RESULT_KEY = "gloam"
VAR_PREFIX = "gloam_"
MEMBERSHIPS_VARM_KEY = "gloam_memberships"

PathLike = str | os.PathLike[str]


# ------------------------------------------------------------------ running one stage


class _Tee:
    """Write to the rule's log and to the original stream (so Snakemake shows errors too)."""

    def __init__(self, *streams: TextIO) -> None:
        self.streams = streams

    def write(self, text: str) -> int:
        for stream in self.streams:
            stream.write(text)
        return len(text)

    def flush(self) -> None:
        for stream in self.streams:
            stream.flush()


@contextlib.contextmanager
def rule_environment(log_path: PathLike, threads: int) -> Iterator[None]:
    """Send stderr (warnings, errors) to ``log_path`` and cap every thread pool at ``threads``.

    BLAS and OpenMP pools are limited with threadpoolctl, gloam's own engine through
    ``GLOAM_NUM_THREADS`` and numba (when loaded) through ``numba.set_num_threads``, so
    jobs running side by side on one node never use more cores than they declared.
    Unexpected exceptions are written to the log with their traceback and re-raised.
    """
    from threadpoolctl import threadpool_limits

    threads = max(1, int(threads))
    os.environ["GLOAM_NUM_THREADS"] = str(threads)
    if "numba" in sys.modules:
        import numba

        numba.set_num_threads(min(threads, numba.config.NUMBA_NUM_THREADS))
    Path(log_path).parent.mkdir(parents=True, exist_ok=True)
    with open(log_path, "w", encoding="utf-8") as log, warnings.catch_warnings():
        warnings.showwarning = show_warning  # gloam's own warnings as one line
        tee = _Tee(log, sys.__stderr__ or log)
        with contextlib.redirect_stderr(tee), threadpool_limits(limits=threads):  # type: ignore[arg-type]
            try:
                yield
            except Exception:
                traceback.print_exc(file=log)
                raise


def _write_json(data: Mapping[str, Any], path: PathLike) -> None:
    with atomic_output(path) as temporary:
        temporary.write_text(json.dumps(data, indent=2, sort_keys=True) + "\n", encoding="utf-8")


def _read_json(path: PathLike, what: str) -> dict[str, Any]:
    try:
        return json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as error:
        raise GloamError(
            f"{what} {str(path)!r} cannot be read ({error}); rerun its step"
        ) from error


def _write_npz(path: PathLike, **arrays: Any) -> None:
    with atomic_output(path) as temporary, open(temporary, "wb") as stream:
        np.savez(stream, **arrays)


def _load_npz(path: PathLike, what: str) -> dict[str, np.ndarray]:
    try:
        with np.load(path, allow_pickle=False) as data:
            return {key: data[key] for key in data.files}
    except (OSError, ValueError) as error:
        raise GloamError(
            f"{what} {str(path)!r} cannot be read ({error}); rerun its step"
        ) from error


def _read_prepared(path: PathLike) -> tuple[pd.DataFrame, pd.DataFrame]:
    from gloam.prepare import read_prepared

    return read_prepared(path)


# ------------------------------------------------------------------ demo and preparation


def run_demo(
    counts: PathLike,
    samples: PathLike,
    truth: PathLike,
    *,
    seed: int,
    n_genes: int,
    n_replicates: int,
) -> None:
    """Write the invented demo experiment (see :mod:`gloam.demo`) to three TSV files."""
    from gloam.demo import write_demo

    write_demo(
        Path(counts).parent,
        counts_path=counts,
        samples_path=samples,
        truth_path=truth,
        seed=seed,
        n_genes=n_genes,
        n_replicates=n_replicates,
    )


def run_prepare(
    matrix: PathLike,
    samples: PathLike,
    settings: Mapping[str, Any],
    *,
    h5ad: PathLike,
    zscores: PathLike,
    gene_report: PathLike,
    summary: PathLike,
) -> pd.DataFrame:
    """Read a matrix and its sample sheet, prepare them and write the four prepared files.

    ``settings`` holds the preparation settings (see :class:`gloam.prepare.PrepareSettings`)
    plus ``layer`` (the ``.h5ad`` layer to read, or None). Returns the z-scores written
    (genes x prepared columns), so a caller can go on without reading them back.
    """
    from gloam.io import read_matrix, read_sample_sheet
    from gloam.prepare import prepare_expression, settings_from_mapping, write_prepared

    settings = dict(settings)
    layer = settings.pop("layer", None) or None
    prepared = prepare_expression(
        read_matrix(matrix, layer=layer),
        read_sample_sheet(samples),
        settings_from_mapping(settings),
    )
    write_prepared(
        prepared, h5ad_path=h5ad, tsv_path=zscores, report_path=gene_report, summary_path=summary
    )
    return prepared.zscores


# ------------------------------------------------------------------ checks against the data size

#: Fewest genes the fuzzifier step works with (its check clusters them into at least 2).
MIN_GENES_FOR_FUZZIFIER = 3

#: Preparation settings that decide how many genes are left, named in messages.
_GENE_FILTERS = "min_expression, min_samples_expressed, min_sd, top_variable, max_missing_fraction"


def check_genes_for_fuzzifier(n_genes: int) -> None:
    """Refuse a prepared matrix with too few genes to choose the fuzzifier m for."""
    if n_genes < MIN_GENES_FOR_FUZZIFIER:
        raise GloamError(
            f"choosing the fuzzifier m needs at least {MIN_GENES_FOR_FUZZIFIER} genes, but only "
            f"{n_genes} gene(s) were left after preparation; keep more genes by relaxing the "
            f"preparation filters ({_GENE_FILTERS})"
        )


def check_clusters_fit_genes(n_clusters: int, n_genes: int) -> None:
    """Refuse a number of clusters c that is not below the number of genes."""
    if n_clusters >= n_genes:
        raise GloamError(
            f"c = {n_clusters} needs more than {n_clusters} genes, but the prepared matrix has "
            f"{n_genes} gene(s); scan fewer clusters (scan.max_clusters or selection.n_clusters "
            "in the config, --clusters or --n-clusters of gloam cluster) or keep more genes "
            "(relax the preparation filters such as top_variable and min_sd)"
        )


def clusters_for_fuzzifier_check(requested: int, n_genes: int) -> int:
    """c for the randomised-data check of m: ``requested``, or ``n_genes - 1`` when that is
    smaller (fuzzy c-means needs fewer clusters than genes), with a warning saying so."""
    usable = n_genes - 1
    if requested <= usable:
        return requested
    warnings.warn(
        f"fuzzifier.n_clusters_check = {requested} was lowered to {usable} for the "
        f"randomised-data check of m, because the check needs fewer clusters than genes and "
        f"the prepared matrix has {n_genes}; set n_clusters_check to at most {usable} to "
        "choose the value yourself",
        GloamWarning,
        stacklevel=2,
    )
    return usable


# ------------------------------------------------------------------ fuzzifier and scan


def write_fuzzifier_choice(
    zscores: pd.DataFrame,
    settings: Mapping[str, Any],
    seed: int,
    out_json: PathLike,
    out_curve: PathLike,
) -> float:
    """Choose the fuzzifier m for z-scores (genes x prepared columns); write the choice and
    its curve, and return m.

    ``settings``: ``m`` (``"auto"``, ``"randomised"`` or a number > 1) and
    ``n_clusters_check``. The curve TSV has the columns of
    :data:`gloam.fuzzifier.CURVE_COLUMNS`.

    Fewer than 3 genes are refused before anything is written
    (:func:`check_genes_for_fuzzifier`); ``n_clusters_check`` is lowered below the number
    of genes with a warning (:func:`clusters_for_fuzzifier_check`).
    """
    from gloam.fuzzifier import choose_fuzzifier

    n_genes = int(zscores.shape[0])
    check_genes_for_fuzzifier(n_genes)
    choice = choose_fuzzifier(
        zscores.to_numpy(),
        settings["m"],
        n_clusters_check=clusters_for_fuzzifier_check(int(settings["n_clusters_check"]), n_genes),
        rng=np.random.default_rng([int(seed), 0]),
    )
    write_table(choice.curve, out_curve)
    _write_json(
        {
            "m": float(choice.m),
            "method": choice.method,
            "formula_m": float(choice.formula_m),
            "setting": settings["m"],
            "n_clusters_check": int(choice.n_clusters_check),
            "n_genes": int(zscores.shape[0]),
            "n_columns": int(zscores.shape[1]),
        },
        out_json,
    )
    return float(choice.m)


def write_scan_input(zscores: pd.DataFrame, m: float, out_npz: PathLike) -> None:
    """Write what a scan job reads: the z-scores (genes x prepared columns) and the m chosen
    for them (layout in the module notes)."""
    _write_npz(
        out_npz,
        zscores=zscores.to_numpy(dtype=np.float64),
        genes=zscores.index.to_numpy(dtype=str),
        columns=zscores.columns.to_numpy(dtype=str),
        m=np.float64(m),
    )


def read_scan_input(path: PathLike) -> tuple[pd.DataFrame, float]:
    """The z-scores (index ``gene``, one column per prepared column) and m of a scan input."""
    data = _load_npz(path, "scan input")
    missing = {"zscores", "genes", "columns", "m"} - set(data)
    if missing:
        raise GloamError(
            f"scan input {str(path)!r} lacks {sorted(missing)}; it was not written by gloam's "
            "preparation step: rerun that step"
        )
    zscores = pd.DataFrame(
        data["zscores"],
        index=pd.Index(data["genes"], name="gene"),
        columns=pd.Index(data["columns"], name="column"),
    )
    return zscores, float(data["m"])


def run_scan(
    scan_input: PathLike,
    n_clusters: int,
    settings: Mapping[str, Any],
    seed: int,
    out_npz: PathLike,
) -> None:
    """Run every random start of fuzzy c-means for one c; keep all starts in ``out_npz``.

    ``scan_input`` is the file of :func:`write_scan_input` (z-scores and m). ``settings``:
    ``n_starts``, ``tol``, ``max_iter``, ``init``, ``precision`` (the scan section of the
    config; other keys are ignored). A c not below the number of genes is refused with a
    message saying how to fix it (:func:`check_clusters_fit_genes`).
    """
    from gloam.fcm import fuzzy_cmeans

    zscores, m = read_scan_input(scan_input)
    check_clusters_fit_genes(int(n_clusters), len(zscores))
    result = fuzzy_cmeans(
        zscores.to_numpy(),
        int(n_clusters),
        m,
        n_starts=int(settings["n_starts"]),
        tol=float(settings["tol"]),
        max_iter=int(settings["max_iter"]),
        init=settings["init"],
        precision=settings["precision"],
        rng=np.random.default_rng([int(seed), int(n_clusters)]),
        n_threads=int(os.environ.get("GLOAM_NUM_THREADS", "0")) or None,
    )
    _write_npz(
        out_npz,
        memberships=result.memberships,
        centroids=result.centroids,
        objectives=result.objectives,
        n_iter=result.n_iter,
        converged=result.converged,
        m=np.float64(result.m),
        best_index=np.int64(result.best_index),
        seed=np.int64(seed),
        genes=zscores.index.to_numpy(dtype=str),
        columns=zscores.columns.to_numpy(dtype=str),
    )


def read_scan(path: PathLike, genes: pd.Index | None = None):
    """Read a scan file back as a :class:`gloam.fcm.MultiStartResult`.

    When ``genes`` is given, check that the scan was made on exactly these genes.
    """
    from gloam.fcm import MultiStartResult

    data = _load_npz(path, "scan file")
    if genes is not None and not np.array_equal(data["genes"], np.asarray(genes, dtype=str)):
        raise GloamError(
            f"scan file {str(path)!r} was made on other genes than the prepared matrix; "
            "delete it and rerun the scan"
        )
    return MultiStartResult(
        centroids=data["centroids"],
        memberships=data["memberships"],
        objectives=data["objectives"],
        n_iter=data["n_iter"],
        converged=data["converged"],
        m=float(data["m"]),
        best_index=int(data["best_index"]),
    )


# ------------------------------------------------------------------ selection and consensus


def run_select(
    prepared: PathLike,
    scan_files: Sequence[PathLike],
    settings: Mapping[str, Any],
    *,
    out_validity: PathLike,
    out_selection: PathLike,
    out_consensus: PathLike,
) -> None:
    """Validity indices for every scanned c, the c used, and the consensus for that c.

    ``settings["n_clusters"]`` is ``"auto"`` (use the recommendation of
    :func:`gloam.validity.recommend_n_clusters`) or an integer (use it).  The validity TSV
    has the columns of :func:`gloam.validity.validity_table` (with ``mean_stability``) and,
    from :func:`gloam.validity.recommendation_reasons`, ``distance_ratio``, ``eligible``,
    ``recommended`` and ``reason``, plus ``used`` (True for the c used downstream).  The
    consensus file is described in the module notes.

    Scan files are read one at a time, so memory holds one c's starts, not the whole scan;
    the chosen c is therefore read and aligned a second time for its consensus.
    """
    from gloam.consensus import consensus_partition
    from gloam.validity import recommendation_reasons, validity_table

    zscores, columns = _read_prepared(prepared)
    file_of: dict[int, PathLike] = {}
    best, stability = {}, {}
    for path in scan_files:
        result = read_scan(path, zscores.index)
        c = result.n_clusters
        file_of[c] = path
        # Copies: a view of the best start would keep every start of this c in memory.
        partition = result.best()
        best[c] = dataclasses.replace(
            partition,
            memberships=partition.memberships.copy(),
            centroids=partition.centroids.copy(),
        )
        stability[c] = float(consensus_partition(result).stability.mean())
    table = validity_table(zscores.to_numpy(), best, stability=stability)
    reasons = recommendation_reasons(table).rename(columns={"chosen": "recommended"})
    table = table.merge(reasons, on="n_clusters", how="left")
    recommended = int(table.loc[table["recommended"], "n_clusters"].iloc[0])
    fixed = settings.get("n_clusters", "auto")
    if fixed == "auto":
        used, method, reason = (
            recommended,
            "auto",
            str(table.loc[table["recommended"], "reason"].iloc[0]),
        )
    else:
        used, method, reason = int(fixed), "fixed", "fixed in the config (selection.n_clusters)"
        if used not in file_of:
            raise GloamError(
                f"selection.n_clusters = {used} was not scanned (scanned: {sorted(file_of)}); "
                "include it in the scan range"
            )
    consensus = _consensus_arrays(read_scan(file_of[used], zscores.index), zscores, columns)
    table["used"] = table["n_clusters"] == used
    write_table(table, out_validity)
    _write_json(
        {
            "n_clusters": used,
            "method": method,
            "recommended": recommended,
            "reason": reason,
            "scanned": sorted(int(c) for c in file_of),
        },
        out_selection,
    )
    _write_npz(out_consensus, **consensus)


def _consensus_arrays(
    result: Any, zscores: pd.DataFrame, columns: pd.DataFrame
) -> dict[str, np.ndarray]:
    """The arrays of ``consensus.npz`` for one c's starts, clusters in peak-time order."""
    from gloam.consensus import (
        align_starts,
        cluster_names,
        consensus_partition,
        order_clusters_by_peak_time,
        reorder,
    )

    c = result.n_clusters
    aligned = align_starts(result)
    consensus = consensus_partition(aligned, already_aligned=True)
    conditions = columns["condition"].astype(str).tolist()
    several = len(set(conditions)) > 1
    permutation = order_clusters_by_peak_time(
        consensus.centroids, columns["time"].to_numpy(), conditions if several else None
    )
    consensus = reorder(consensus, permutation)
    # Each start's top cluster in the final numbering: aligned label -> column position.
    position = np.empty(c, dtype=np.intp)
    position[consensus.order] = np.arange(c)
    start_top = position[np.argmax(aligned.memberships, axis=2)].astype(np.int16)
    return {
        "memberships": consensus.memberships,
        "membership_sd": consensus.membership_sd,
        "top_cluster": consensus.top_cluster,
        "top_membership": consensus.top_membership,
        "stability": consensus.stability,
        "centroids": consensus.centroids,
        "order": consensus.order,
        "start_top_cluster": start_top,
        "cluster_names": np.asarray(cluster_names(c), dtype=str),
        "genes": zscores.index.to_numpy(dtype=str),
        "columns": zscores.columns.to_numpy(dtype=str),
        "m": np.float64(consensus.m),
        "n_starts": np.int64(consensus.n_starts),
    }


def read_consensus(path: PathLike) -> dict[str, np.ndarray]:
    """Arrays of a consensus file written by :func:`run_select` (see the module notes)."""
    return _load_npz(path, "consensus file")


# ------------------------------------------------------------------ exports


def export_tables(
    consensus_npz: PathLike, out_memberships: PathLike, out_centroids: PathLike
) -> None:
    """Write ``memberships.tsv`` and ``centroids.tsv``.

    ``memberships.tsv``: ``gene``, one column per cluster (``C1``... consensus memberships,
    each row sums to 1), ``top_cluster``, ``top_membership``, ``stability``.
    ``centroids.tsv``: ``cluster``, then one column per prepared column (time point, named
    as in the prepared matrix), z-score units.
    """
    from gloam.consensus import Consensus, membership_table

    data = read_consensus(consensus_npz)
    consensus = Consensus(
        memberships=data["memberships"],
        membership_sd=data["membership_sd"],
        top_cluster=data["top_cluster"],
        top_membership=data["top_membership"],
        stability=data["stability"],
        centroids=data["centroids"],
        order=data["order"],
        n_starts=int(data["n_starts"]),
        m=float(data["m"]),
    )
    table = membership_table(consensus, data["genes"].tolist())
    write_table(table.reset_index(), out_memberships)
    centroids = pd.DataFrame(
        data["centroids"],
        index=pd.Index(data["cluster_names"].tolist(), name="cluster"),
        columns=data["columns"].tolist(),
    )
    write_table(centroids, out_centroids, index=True)


def _read_memberships(path: PathLike) -> pd.DataFrame:
    table = pd.read_csv(path, sep="\t", dtype={"gene": str}, keep_default_na=False)
    return table.set_index("gene")


def _cluster_columns(table: pd.DataFrame) -> list[str]:
    return [c for c in table.columns if c not in ("top_cluster", "top_membership", "stability")]


def export_gene_sets(
    memberships_tsv: PathLike, thresholds: Sequence[float], out_dir: PathLike, prefix: str = "gloam"
) -> None:
    """Write every gene-set file (see :mod:`gloam.genesets`) into ``out_dir`` at once.

    The files are written into a hidden folder beside ``out_dir`` that replaces it only when
    complete, so an interrupted export never leaves a partial set of lists.
    """
    from gloam.genesets import write_gene_sets

    table = _read_memberships(memberships_tsv)
    target = Path(out_dir)
    target.parent.mkdir(parents=True, exist_ok=True)
    staging = Path(
        tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".partial", dir=target.parent)
    )
    try:
        write_gene_sets(
            table[_cluster_columns(table)],
            thresholds,
            staging,
            background_genes=table.index.tolist(),
            prefix=prefix,
        )
        staging.chmod(0o755)
        if target.exists():
            shutil.rmtree(target)
        os.replace(staging, target)
    finally:
        if staging.exists():
            shutil.rmtree(staging)


def _versions() -> dict[str, str]:
    versions = {"python": platform.python_version()}
    for package in ("gloam", "numpy", "scipy", "pandas", "anndata", "matplotlib", "snakemake"):
        try:
            versions[package] = metadata.version(package)
        except metadata.PackageNotFoundError:
            continue
    return versions


def _h5ad_safe(value: Any) -> Any:
    """Nested settings as h5ad can store them: None dropped, tuples as lists."""
    if isinstance(value, Mapping):
        return {str(k): _h5ad_safe(v) for k, v in value.items() if v is not None}
    if isinstance(value, list | tuple):
        return [_h5ad_safe(v) for v in value]
    return value


def export_h5ad(
    prepared: PathLike,
    consensus_npz: PathLike,
    fuzzifier_json: PathLike,
    selection_json: PathLike,
    settings: Mapping[str, Any],
    out_h5ad: PathLike,
) -> None:
    """Write ``gloam.h5ad``: the prepared data with the clustering beside the genes.

    Bulk orientation (observations = prepared time-point columns, variables = genes), as
    written by the preparation step, plus:

    ``var``
        ``gloam_top_cluster``, ``gloam_top_membership``, ``gloam_stability`` and
        ``gloam_membership_<cluster>`` per cluster.
    ``varm["gloam_memberships"]``
        Consensus memberships, n_genes x n_clusters (columns in ``uns["gloam"]["clusters"]``).
    ``uns["gloam"]``
        ``centroids`` (n_clusters x n_columns, z-score units), ``clusters``, ``columns``,
        ``n_clusters``, ``m``, ``seed``, ``n_starts``, ``fuzzifier`` and ``selection``
        (the JSON records), ``settings`` (the run's settings) and ``versions`` (packages).
    """
    import anndata

    data = anndata.read_h5ad(prepared)
    consensus = read_consensus(consensus_npz)
    genes = consensus["genes"]
    if not np.array_equal(np.asarray(data.var_names, dtype=str), genes):
        raise GloamError(
            f"consensus file {str(consensus_npz)!r} does not match the genes of {str(prepared)!r}; "
            "rerun the clustering"
        )
    names = consensus["cluster_names"].tolist()
    memberships = consensus["memberships"]
    data.var[f"{VAR_PREFIX}top_cluster"] = pd.Categorical(
        np.asarray(names, dtype=object)[consensus["top_cluster"]], categories=names
    )
    data.var[f"{VAR_PREFIX}top_membership"] = consensus["top_membership"]
    data.var[f"{VAR_PREFIX}stability"] = consensus["stability"]
    for k, name in enumerate(names):
        data.var[f"{VAR_PREFIX}membership_{name}"] = memberships[:, k]
    data.varm[MEMBERSHIPS_VARM_KEY] = memberships
    data.uns[RESULT_KEY] = _h5ad_safe(
        {
            "centroids": consensus["centroids"],
            "clusters": names,
            "columns": consensus["columns"].tolist(),
            "n_clusters": len(names),
            "m": float(consensus["m"]),
            "n_starts": int(consensus["n_starts"]),
            "seed": settings.get("seed"),
            "fuzzifier": _read_json(fuzzifier_json, "fuzzifier choice"),
            "selection": _read_json(selection_json, "selection"),
            "settings": dict(settings),
            "versions": _versions(),
        }
    )
    with atomic_output(out_h5ad) as temporary:
        data.write_h5ad(temporary)


# ------------------------------------------------------------------ figures


def _core_sizes(memberships: pd.DataFrame, thresholds: Sequence[float]) -> dict[float, np.ndarray]:
    from gloam.genesets import core_genes

    sizes = {}
    for threshold in thresholds:
        sets = core_genes(memberships, float(threshold))
        sizes[float(threshold)] = np.array([len(sets[c]) for c in memberships.columns])
    return sizes


def figure_profiles(
    prepared: PathLike,
    memberships_tsv: PathLike,
    centroids_tsv: PathLike,
    thresholds: Sequence[float],
    time_unit: str,
    out_png: PathLike,
    out_pdf: PathLike,
) -> None:
    """Per-cluster temporal profiles (see :func:`gloam.plots.plot_cluster_profiles`)."""
    from gloam.plots import plot_cluster_profiles, save_figure

    zscores, columns = _read_prepared(prepared)
    table = _read_memberships(memberships_tsv)
    clusters = _cluster_columns(table)
    memberships = table.loc[zscores.index, clusters]
    centroids = pd.read_csv(centroids_tsv, sep="\t", index_col="cluster")
    conditions = columns["condition"].astype(str).tolist()
    figure = plot_cluster_profiles(
        zscores.to_numpy(),
        columns["time"].to_numpy(),
        memberships.to_numpy(),
        centroids.loc[clusters, zscores.columns].to_numpy(),
        conditions=conditions if len(set(conditions)) > 1 else None,
        core_sizes=_core_sizes(memberships, thresholds),
        cluster_labels=clusters,
        time_unit=time_unit,
    )
    save_figure(figure, out_png, out_pdf)


def figure_validity(
    validity_tsv: PathLike, selection_json: PathLike, out_png: PathLike, out_pdf: PathLike
) -> None:
    """Validity indices against c with the c used marked."""
    from gloam.plots import plot_validity, save_figure

    table = pd.read_csv(validity_tsv, sep="\t")
    chosen = int(_read_json(selection_json, "selection")["n_clusters"])
    save_figure(plot_validity(table, chosen), out_png, out_pdf)


def figure_fuzzifier(
    fuzzifier_json: PathLike, curve_tsv: PathLike, out_png: PathLike, out_pdf: PathLike
) -> None:
    """The randomised-data curve with the m used (and the formula's m) marked."""
    from gloam.plots import plot_fuzzifier_curve, save_figure

    choice = _read_json(fuzzifier_json, "fuzzifier choice")
    curve = pd.read_csv(curve_tsv, sep="\t")
    figure = plot_fuzzifier_curve(
        curve, float(choice["m"]), formula_m=float(choice["formula_m"]), method=choice["method"]
    )
    save_figure(figure, out_png, out_pdf)


def figure_centroid_correlation(
    centroids_tsv: PathLike, out_png: PathLike, out_pdf: PathLike
) -> None:
    """Centroid-to-centroid Pearson correlation heatmap."""
    from gloam.plots import plot_centroid_correlation, save_figure

    centroids = pd.read_csv(centroids_tsv, sep="\t", index_col="cluster")
    figure = plot_centroid_correlation(centroids.to_numpy(), centroids.index.astype(str).tolist())
    save_figure(figure, out_png, out_pdf)


# ------------------------------------------------------------------ the two export stages

FigurePaths = tuple[PathLike, PathLike]  # (PNG, PDF)


def export_results(
    prepared: PathLike,
    consensus_npz: PathLike,
    fuzzifier_json: PathLike,
    fuzzifier_curve: PathLike,
    selection_json: PathLike,
    validity_tsv: PathLike,
    settings: Mapping[str, Any],
    *,
    memberships: PathLike,
    centroids: PathLike,
    h5ad: PathLike,
    validity_figure: FigurePaths,
    fuzzifier_figure: FigurePaths,
    correlation_figure: FigurePaths,
) -> None:
    """Everything of a run that does not depend on the core-gene thresholds.

    The tables (:func:`export_tables`), ``gloam.h5ad`` (:func:`export_h5ad`) and the
    validity, fuzzifier and centroid-correlation figures, each as PNG and PDF.
    """
    export_tables(consensus_npz, memberships, centroids)
    export_h5ad(prepared, consensus_npz, fuzzifier_json, selection_json, settings, h5ad)
    figure_validity(validity_tsv, selection_json, *validity_figure)
    figure_fuzzifier(fuzzifier_json, fuzzifier_curve, *fuzzifier_figure)
    figure_centroid_correlation(centroids, *correlation_figure)


def export_core_genes(
    prepared: PathLike,
    memberships_tsv: PathLike,
    centroids_tsv: PathLike,
    thresholds: Sequence[float],
    time_unit: str,
    *,
    genesets: PathLike,
    profiles_figure: FigurePaths,
    prefix: str = "gloam",
) -> None:
    """Everything of a run that depends on the core-gene thresholds.

    The gene-set folder (:func:`export_gene_sets`) and the cluster-profile figure, whose
    panels give the core-gene counts (:func:`figure_profiles`).
    """
    export_gene_sets(memberships_tsv, thresholds, genesets, prefix=prefix)
    figure_profiles(
        prepared, memberships_tsv, centroids_tsv, thresholds, time_unit, *profiles_figure
    )


# ------------------------------------------------------------------ summary across runs


def summarise_runs(
    runs: Sequence[Mapping[str, Any]],
    fuzzifier_files: Sequence[PathLike],
    selection_files: Sequence[PathLike],
    membership_files: Sequence[PathLike],
    thresholds: Sequence[float],
    out_tsv: PathLike,
) -> None:
    """One row per run: what went in, which m and c were used, how stable and core it is.

    Columns: ``run``, ``dataset``, ``condition``, ``variant`` (empty when not used),
    ``n_genes_clustered``, ``m``, ``m_method``, ``n_clusters``, ``n_clusters_method``,
    ``recommended_n_clusters``, ``mean_stability`` (mean over genes of the share of starts
    agreeing on the top cluster), and per threshold ``t``: ``core_genes_<t>`` (genes core in
    some cluster) and ``core_sizes_<t>`` (``C1=…;C2=…``).
    """
    if not len(runs) == len(fuzzifier_files) == len(selection_files) == len(membership_files):
        raise GloamError("summary needs one fuzzifier, selection and memberships file per run")
    rows = []
    for run, fuzzifier, selection, memberships_tsv in zip(
        runs, fuzzifier_files, selection_files, membership_files, strict=True
    ):
        choice = _read_json(fuzzifier, "fuzzifier choice")
        chosen = _read_json(selection, "selection")
        table = _read_memberships(memberships_tsv)
        memberships = table[_cluster_columns(table)]
        row: dict[str, Any] = {
            "run": run["run"],
            "dataset": run["dataset"],
            "condition": run.get("condition") or "",
            "variant": run.get("variant") or "",
            "n_genes_clustered": int(len(table)),
            "m": float(choice["m"]),
            "m_method": choice["method"],
            "n_clusters": int(chosen["n_clusters"]),
            "n_clusters_method": chosen["method"],
            "recommended_n_clusters": int(chosen["recommended"]),
            "mean_stability": float(table["stability"].mean()),
        }
        for threshold, sizes in _core_sizes(memberships, thresholds).items():
            core = (memberships.to_numpy() >= threshold).any(axis=1)
            row[f"core_genes_{threshold:g}"] = int(core.sum())
            row[f"core_sizes_{threshold:g}"] = ";".join(
                f"{name}={int(size)}" for name, size in zip(memberships.columns, sizes, strict=True)
            )
        rows.append(row)
    write_table(pd.DataFrame(rows), out_tsv)
