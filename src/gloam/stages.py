"""One function per workflow stage, each from files to files.

The Snakemake rule scripts and the command line call these; nothing here knows about
Snakemake.  Every function reads its inputs, calls the library, and writes its outputs
through :func:`gloam.io.atomic_output`, so an interrupted stage leaves no file that looks
finished.

Files between stages
--------------------
``prepared/scan_input.npz`` (:func:`write_scan_input`, read by :func:`read_scan_input`)
    What every scan job and the selection read, in one file (one input per scan job keeps the
    plan of a large grid small): ``zscores`` (n_genes, n_columns), ``genes``, ``columns``,
    ``times``, ``conditions``, ``m``, ``selection_method`` and, with replicates,
    ``replicates`` (n_genes, n_samples; per-sample log values) and ``sample_column``; when
    the run compares conditions, ``comparison_profiles``, ``comparison_flat`` and
    ``comparison_m`` (:class:`ComparisonInput`).
``fuzzifier.json`` (:func:`write_fuzzifier_choice`)
    ``m``, ``method``, ``formula_m``, ``setting``, ``n_clusters_check``, ``n_genes``,
    ``n_columns``, ``check_structure_index``, ``check_passed``; the randomised-data curve goes
    to its own TSV.
``scan/c<c>.npz`` (:func:`run_scan`, read by :func:`read_scan`)
    The partition for one c with its evidence (see :func:`run_scan`).
``structure.json`` (:func:`run_structure`, read by :func:`read_structure`)
    The structure tests of the run's genes and of the comparison's profiles.
``selection.json``, ``validity.tsv``, ``consensus.npz`` (:func:`run_select`)
    The decision on c, the per-c table behind it and the chosen partition in peak-time order
    (:func:`consensus_arrays`).

Logs: every stage logs, through the ``gloam.stages`` logger, what it read (file, genes x
samples), what it kept and why the rest was dropped, what it chose (m, c, the criteria of
each c, the quality flags) and how long the work took; warnings name the c they are about.
Nothing is configured here: :func:`rule_environment` sends a rule's records to its log file
and :func:`gloam.logs.console_logging` sends progress to the terminal.

Seeds: the scan for c draws from ``numpy.random.default_rng([seed, c])`` (the comparison's
clustering at c from ``[seed, 7, c]``), the structure tests from ``[seed, 1]`` and
``[seed, 8]``, and the fuzzifier check from ``default_rng([seed, 0])``, so each job is
reproducible on its own, whatever order a scheduler runs them in.
"""

from __future__ import annotations

import contextlib
import dataclasses
import json
import logging
import os
import platform
import sys
import time
import warnings
from collections.abc import Iterator, Mapping, Sequence
from importlib import metadata
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from gloam.errors import GloamError, GloamWarning, report_and_exit
from gloam.io import (
    atomic_directory,
    atomic_output,
    read_npz_checked,
    write_h5ad,
    write_table,
)
from gloam.logs import PROGRESS as _PROGRESS
from gloam.logs import about, position
from gloam.planning import START_SETTINGS

__all__ = [
    "rule_environment",
    "run_demo",
    "run_prepare",
    "check_genes_for_fuzzifier",
    "check_clusters_fit_genes",
    "clusters_for_fuzzifier_check",
    "write_fuzzifier_choice",
    "ScanInput",
    "ComparisonInput",
    "comparison_input",
    "MIN_COMPARISON_PROFILES",
    "write_scan_input",
    "read_scan_input",
    "run_scan",
    "read_scan",
    "run_structure",
    "read_structure",
    "run_select",
    "consensus_arrays",
    "single_group_arrays",
    "read_consensus",
    "membership_frame",
    "cluster_frame",
    "robustness_frame",
    "export_tables",
    "export_gene_sets",
    "export_h5ad",
    "time_point_categories",
    "export_results",
    "export_core_genes",
    "figure_profiles",
    "figure_validity",
    "figure_fuzzifier",
    "figure_overview",
    "run_comparison",
    "COMPARISON_FILES_WHEN_COMPARED",
    "TRANSITION_COLUMNS",
    "summarise_runs",
    "run_lines",
    "RUN_LINE_COLUMNS",
    "summarise_sensitivity",
    "SENSITIVITY_COLUMNS",
    "RESULT_KEY",
    "VAR_PREFIX",
]

#: Key of gloam's results in ``AnnData.uns`` / ``varm``; prefix of its ``var`` columns.
RESULT_KEY = "gloam"
VAR_PREFIX = "gloam_"
MEMBERSHIPS_VARM_KEY = "gloam_memberships"

PathLike = str | os.PathLike[str]

_log = logging.getLogger(__name__)


# ------------------------------------------------------------------ running one stage


def _size(path: PathLike) -> str:
    """The size of a file, or the number of files in a folder, for the log."""
    target = Path(path)
    if target.is_dir():
        return f"{sum(1 for item in target.rglob('*') if item.is_file())} files"
    if not target.is_file():
        return "missing"
    size = target.stat().st_size
    return f"{size} B" if size < 1024 else f"{size / 1024:.0f} kB"


def _listed(paths: Sequence[PathLike], most: int = 6) -> str:
    names = [str(path) for path in paths]
    shown = ", ".join(names[:most])
    return shown if len(names) <= most else f"{shown} and {len(names) - most} more"


@contextlib.contextmanager
def rule_environment(
    log_path: PathLike,
    threads: int,
    *,
    inputs: Sequence[PathLike] = (),
    outputs: Sequence[PathLike] = (),
) -> Iterator[None]:
    """Log the job to ``log_path`` and cap every thread pool at ``threads``.

    Records of gloam's loggers at INFO and above, and every warning, go to ``log_path``
    (:func:`gloam.logs.log_to_file`); warnings also to stderr. The log opens with gloam's
    version, the thread cap and ``inputs``, and closes with each of ``outputs`` (size, or the
    number of files of a folder) and the job's wall time. A
    :class:`~gloam.errors.GloamError` is logged and shown as one line (``gloam: error: ...``,
    the same in both) and ends the process with status 2; unexpected exceptions are logged
    with their traceback and re-raised.

    BLAS and OpenMP pools are limited with threadpoolctl, gloam's own engine through
    ``GLOAM_NUM_THREADS`` and numba (when loaded) through ``numba.set_num_threads``, so
    jobs running side by side on one node never use more cores than they declared.
    """
    from threadpoolctl import threadpool_limits

    from gloam import __version__
    from gloam.logs import log_to_file

    threads = max(1, int(threads))
    os.environ["GLOAM_NUM_THREADS"] = str(threads)
    if "numba" in sys.modules:
        import numba

        numba.set_num_threads(min(threads, numba.config.NUMBA_NUM_THREADS))
    Path(log_path).parent.mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()
    with log_to_file(log_path), threadpool_limits(limits=threads):
        _log.info(
            "gloam %s, Python %s, %d thread(s)", __version__, platform.python_version(), threads
        )
        if len(inputs):
            _log.info("input: %s", _listed(inputs))
        try:
            yield
        except GloamError as error:
            _log.error("gloam: error: %s", error)
            report_and_exit(error)
        except Exception:
            _log.exception("stopped by an unexpected error")
            raise
        except SystemExit as stop:  # Ctrl-C in a rule script (status 130), or another exit
            if stop.code:
                _log.error("stopped with exit status %s", stop.code)
            raise
        except KeyboardInterrupt:
            _log.error("interrupted")
            raise
        for path in outputs:
            _log.info("wrote %s (%s)", path, _size(path))
        _log.info("done in %.1f s", time.perf_counter() - started)


def _write_json(data: Mapping[str, Any], path: PathLike) -> None:
    with atomic_output(path) as temporary:
        temporary.write_text(json.dumps(data, indent=2, sort_keys=True) + "\n", encoding="utf-8")


def read_json(path: PathLike, what: str) -> dict[str, Any]:
    """A JSON file of a run (``fuzzifier.json``, ``selection.json``, ...); ``what`` names it
    in the one-line error when it cannot be read."""
    try:
        return json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as error:
        raise GloamError(
            f"{what} {str(path)!r} cannot be read ({error}); rerun its step"
        ) from error


def read_table(path: PathLike) -> pd.DataFrame:
    """A tab-separated table of a run, every number read back to the same double (the tables
    are written at full precision); gene IDs stay text."""
    try:
        return pd.read_csv(
            path, sep="\t", float_precision="round_trip", dtype={"gene": str, "cluster": str}
        )
    except (OSError, pd.errors.ParserError, UnicodeDecodeError) as error:
        raise GloamError(f"table {str(path)!r} cannot be read ({error}); rerun its step") from error


def _write_npz(path: PathLike, **arrays: Any) -> None:
    with atomic_output(path) as temporary, open(temporary, "wb") as stream:
        np.savez(stream, **arrays)


def _load_npz(path: PathLike, what: str) -> dict[str, np.ndarray]:
    """Every array of an intermediate ``.npz``; a damaged file is removed so a rerun remakes it
    (:func:`gloam.io.read_npz_checked`)."""
    return read_npz_checked(path, what)


def read_prepared(path: PathLike) -> Any:
    """The prepared matrix ``prepared/prepared.h5ad`` as AnnData (observations = prepared
    columns, variables = genes); a damaged file is one line naming it, and is left in place
    (:func:`gloam.io.read_h5ad_checked`)."""
    from gloam.io import read_h5ad_checked
    from gloam.prepare import PREPARED_REMAKE

    return read_h5ad_checked(path, "prepared matrix", remake=PREPARED_REMAKE)


# ------------------------------------------------------------------ demo and preparation


def run_demo(
    counts: PathLike,
    samples: PathLike,
    truth: PathLike,
    *,
    seed: int,
    n_genes: int,
    n_replicates: int,
    with_mutant: bool = False,
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
        with_mutant=with_mutant,
    )
    n_samples = len(pd.read_csv(samples, sep="\t", usecols=[0]))
    _log.info(
        "demo written: %d genes x %d samples (%d replicate(s) per time point%s; seed %d)",
        n_genes,
        n_samples,
        n_replicates,
        ", with the mutant" if with_mutant else "",
        seed,
        extra=_PROGRESS,
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
) -> Any:
    """Read a matrix and its sample sheet, prepare them and write the four prepared files.

    ``settings`` holds the preparation settings (see :class:`gloam.prepare.PrepareSettings`)
    plus ``layer`` (the ``.h5ad`` layer to read, or None). Returns the
    :class:`gloam.prepare.PreparedData` written, so a caller can go on without reading it
    back. What was read, what was kept (and why the others were dropped) and how genes were
    selected are logged.
    """
    from gloam.io import read_matrix, read_sample_sheet
    from gloam.prepare import prepare_expression, settings_from_mapping, write_prepared

    settings = dict(settings)
    layer = settings.pop("layer", None) or None
    values = read_matrix(matrix, layer=layer)
    sheet = read_sample_sheet(samples)
    _log.info(
        "read %s: %d genes x %d samples%s; sample sheet %s: %d samples",
        matrix,
        values.shape[0],
        values.shape[1],
        f" (layer {layer})" if layer else "",
        samples,
        len(sheet),
    )
    prepared = prepare_expression(values, sheet, settings_from_mapping(settings))
    write_prepared(
        prepared, h5ad_path=h5ad, tsv_path=zscores, report_path=gene_report, summary_path=summary
    )
    _log_preparation(prepared)
    return prepared


def _log_preparation(prepared: Any) -> None:
    """What the preparation kept and how genes were selected, for the job's log."""
    from gloam.errors import raise_flag

    counts = dict(zip(prepared.summary["reason"], prepared.summary["n_genes"], strict=True))
    dropped = ", ".join(f"{reason} {n}" for reason, n in counts.items() if n and reason != "kept")
    total = sum(counts.values())
    n_columns = prepared.zscores.shape[1]
    conditions = list(dict.fromkeys(prepared.columns["condition"].astype(str)))
    _log.info(
        "kept %d of %d genes (dropped: %s); %d samples used in %d time-point column(s) "
        "(condition(s): %s); gene selection: %s",
        counts["kept"],
        total,
        dropped or "none",
        len(prepared.samples),
        n_columns,
        ", ".join(conditions),
        prepared.selection_method,
        extra=_PROGRESS,
    )
    for note in prepared.selection_notes:
        _log.info("gene selection: %s", note)
    if prepared.selection_method == "no_replicates":
        raise_flag("no_replicates", "genes were selected by the variance rule")


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


def _structure_index_at(curve: pd.DataFrame, m: float) -> float:
    """The shuffled-data structure index at ``m``, interpolated on the curve's grid."""
    ordered = curve.sort_values("m")
    return float(np.interp(m, ordered["m"].to_numpy(), ordered["structure_index"].to_numpy()))


#: Shuffled-data structure index at the m used from which ``fuzzifier_check_failed`` is
#: raised: twice :data:`gloam.fuzzifier.STRUCTURELESS_INDEX` (gloam's convention).
FUZZIFIER_FLAG_INDEX = 0.1


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
    :data:`gloam.fuzzifier.CURVE_COLUMNS`. The JSON also records ``check_structure_index``
    (the shuffled-data structure index at the m used) and ``check_passed`` (below
    :data:`FUZZIFIER_FLAG_INDEX`); a failed check raises the quality flag
    ``fuzzifier_check_failed``.

    Fewer than 3 genes are refused before anything is written
    (:func:`check_genes_for_fuzzifier`); ``n_clusters_check`` is lowered below the number
    of genes with a warning (:func:`clusters_for_fuzzifier_check`).
    """
    from gloam.errors import raise_flag
    from gloam.fuzzifier import STRUCTURELESS_INDEX, choose_fuzzifier

    n_genes = int(zscores.shape[0])
    check_genes_for_fuzzifier(n_genes)
    choice = choose_fuzzifier(
        zscores.to_numpy(),
        settings["m"],
        n_clusters_check=clusters_for_fuzzifier_check(int(settings["n_clusters_check"]), n_genes),
        rng=np.random.default_rng([int(seed), 0]),
    )
    index = _structure_index_at(choice.curve, choice.m)
    # Flag only a clear failure: the index at m near the formula's estimate falls steeply, and
    # values just above STRUCTURELESS_INDEX (0.05-0.09) were seen on most well-clustered
    # simulated sets of the recovery benchmark, where the flag would say nothing.
    passed = bool(index < FUZZIFIER_FLAG_INDEX)
    if not passed:
        raise_flag(
            "fuzzifier_check_failed",
            f"structure index {index:.3f} of shuffled data at m = {choice.m:.3f} (flagged from "
            f"{FUZZIFIER_FLAG_INDEX}; structureless below {STRUCTURELESS_INDEX})",
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
            "check_structure_index": index,
            "check_passed": passed,
        },
        out_json,
    )
    _log.info(
        "fuzzifier m = %.3f (setting %r, method %s; the formula gives %.3f for %d genes x %d "
        "columns); shuffled-data check at c = %d: structure index %.3f at m, %s (flagged from "
        "%g)",
        choice.m,
        settings["m"],
        choice.method,
        choice.formula_m,
        n_genes,
        zscores.shape[1],
        choice.n_clusters_check,
        index,
        "passed" if passed else "FAILED",
        FUZZIFIER_FLAG_INDEX,
        extra=_PROGRESS,
    )
    return float(choice.m)


@dataclasses.dataclass(frozen=True)
class ScanInput:
    """What every scan job and the selection read (``prepared/scan_input.npz``).

    Attributes
    ----------
    zscores : DataFrame of shape (n_genes, n_columns)
        Index ``gene``, one column per prepared column.
    m : float
        Fuzzifier chosen for these data.
    times : ndarray of shape (n_columns,)
        Time of each column (the sample sheet's unit).
    conditions : ndarray of shape (n_columns,), str
        Condition of each column.
    replicates : ndarray of shape (n_genes, n_samples) or None
        Per-sample log values (for resampling replicates).
    sample_column : ndarray of shape (n_samples,), int, or None
        Column each sample belongs to.
    selection_method : str
        How genes were selected (``moderated_f``, ``no_replicates`` or ``none``).
    comparison : ComparisonInput or None
        The changing gene-condition profiles that the scan jobs also cluster for the
        comparison of conditions (None: the run does not compare them).
    """

    zscores: pd.DataFrame
    m: float
    times: np.ndarray
    conditions: np.ndarray
    replicates: np.ndarray | None
    sample_column: np.ndarray | None
    selection_method: str
    comparison: ComparisonInput | None = None


def write_scan_input(
    zscores: pd.DataFrame,
    m: float,
    out_npz: PathLike,
    *,
    columns: pd.DataFrame | None = None,
    replicates: pd.DataFrame | None = None,
    samples: pd.DataFrame | None = None,
    selection_method: str = "none",
    comparison: ComparisonInput | None = None,
) -> None:
    """Write what a scan job reads (see :class:`ScanInput`).

    ``columns`` is the prepared column table (``time``, ``condition``; without it the
    columns are taken as times 0, 1, ... of one condition). ``replicates`` (genes x samples)
    with ``samples`` (a ``sample`` and a ``column`` per sample, as in
    :attr:`gloam.prepare.PreparedData.samples`) enables resampling of replicates.
    ``comparison`` (:func:`comparison_input`) makes every scan job cluster the changing
    gene-condition profiles at its c too, for the comparison of conditions.
    """
    names = zscores.columns.astype(str)
    if columns is None:
        times = np.arange(len(names), dtype=np.float64)
        conditions = np.full(len(names), "all")
    else:
        times = columns.loc[names, "time"].to_numpy(dtype=np.float64)
        conditions = columns.loc[names, "condition"].to_numpy(dtype=str)
    arrays: dict[str, Any] = {
        "zscores": zscores.to_numpy(dtype=np.float64),
        "genes": zscores.index.to_numpy(dtype=str),
        "columns": names.to_numpy(dtype=str),
        "m": np.float64(m),
        "times": times,
        "conditions": conditions,
        "selection_method": np.str_(selection_method),
    }
    if replicates is not None and samples is not None:
        position = {name: i for i, name in enumerate(names)}
        order = samples.set_index(samples["sample"].astype(str))["column"].astype(str)
        arrays["replicates"] = replicates.loc[zscores.index].to_numpy(dtype=np.float64)
        arrays["sample_column"] = np.array(
            [position[order[str(sample)]] for sample in replicates.columns], dtype=np.int64
        )
    if comparison is not None:
        arrays["comparison_profiles"] = comparison.profiles
        arrays["comparison_flat"] = comparison.flat
        arrays["comparison_m"] = np.float64(comparison.m)
    _write_npz(out_npz, **arrays)
    _log.info(
        "scan input: %d genes x %d columns, m = %.3f; resampling %s",
        zscores.shape[0],
        len(names),
        m,
        f"of replicates possible ({arrays['replicates'].shape[1]} samples kept)"
        if "replicates" in arrays
        else "of genes only (no per-sample values)",
    )


def read_scan_input(path: PathLike) -> ScanInput:
    """Read a scan input written by :func:`write_scan_input`."""
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
    n_columns = zscores.shape[1]
    return ScanInput(
        zscores=zscores,
        m=float(data["m"]),
        times=data.get("times", np.arange(n_columns, dtype=np.float64)),
        conditions=data.get("conditions", np.full(n_columns, "all")),
        replicates=data.get("replicates"),
        sample_column=data.get("sample_column"),
        selection_method=str(data.get("selection_method", "none")),
        comparison=ComparisonInput(
            profiles=data["comparison_profiles"],
            flat=data["comparison_flat"],
            m=float(data["comparison_m"]),
        )
        if "comparison_profiles" in data
        else None,
    )


#: Scan settings passed on to :func:`gloam.partition.solve_partition`: the start settings of
#: the plan (:data:`gloam.planning.START_SETTINGS`), one list for both.
SCAN_SETTINGS = START_SETTINGS
_SCAN_DEFAULTS = {
    "min_starts_at_optimum": 3,
    "max_starts": 100,
    "noise_class": True,
    "n_resamples": 20,
    "acceleration": "squarem",
}


def _solve_at(
    X: np.ndarray,
    c: int,
    m: float,
    options: Mapping[str, Any],
    *,
    rng: np.random.Generator,
    replicates: np.ndarray | None = None,
    sample_column: np.ndarray | None = None,
) -> Any:
    """:func:`gloam.partition.solve_partition` at ``c`` with the scan ``options``
    (:data:`SCAN_SETTINGS`) and the job's thread cap; shared by every scan over c."""
    from gloam.partition import solve_partition

    return solve_partition(
        X,
        c,
        m,
        rng=rng,
        n_starts=int(options["n_starts"]),
        tol=float(options["tol"]),
        max_iter=int(options["max_iter"]),
        init=options["init"],
        precision=options["precision"],
        n_threads=int(os.environ.get("GLOAM_NUM_THREADS", "0")) or None,
        min_starts_at_optimum=int(options["min_starts_at_optimum"]),
        max_starts=int(options["max_starts"]),
        noise_class=bool(options["noise_class"]),
        n_resamples=int(options["n_resamples"]),
        acceleration=str(options["acceleration"]),
        replicates=replicates,
        sample_column=sample_column,
    )


#: Streams of the structure tests: the run's genes and the comparison's profiles.
_STRUCTURE_STREAM = {"clusters": 1, "comparison": 8}


def _structure_test_of(
    X: np.ndarray, m: float, options: Mapping[str, Any], seed: int, which: str
) -> Any:
    """The structure test (:func:`gloam.structure.structure_test`) of the run's genes
    (``which="clusters"``, ``default_rng([seed, 1])``) or of the comparison's gene-condition
    profiles (``"comparison"``, ``default_rng([seed, 8])``) under the selection ``options``."""
    from gloam.structure import structure_test

    return structure_test(
        X,
        m,
        n_null=int(options["structure_n_null"]),
        alpha=float(options["structure_alpha"]),
        rng=np.random.default_rng([int(seed), _STRUCTURE_STREAM[which]]),
    )


def run_structure(
    scan_input: PathLike, settings: Mapping[str, Any], seed: int, out_json: PathLike
) -> None:
    """The structure tests of a run, in a job of their own beside the scans.

    They need only the scan input and the selection ``settings`` (``structure_n_null``,
    ``structure_alpha``), so the selection and the comparison, which wait for every scan,
    do not run them after the scans. ``out_json`` holds ``clusters`` (the test of the run's
    genes) and ``comparison`` (of the changing gene-condition profiles, or null), each the
    fields of :class:`gloam.structure.StructureTest`; :func:`read_structure` reads it.
    """
    options = {**_SELECTION_DEFAULTS, **settings}
    data = read_scan_input(scan_input)
    started = time.perf_counter()
    record: dict[str, Any] = {
        "clusters": _structure_test_of(
            data.zscores.to_numpy(), data.m, options, seed, "clusters"
        ).to_dict(),
        "comparison": None,
    }
    if data.comparison is not None:
        record["comparison"] = _structure_test_of(
            data.comparison.profiles, data.comparison.m, options, seed, "comparison"
        ).to_dict()
    _write_json(record, out_json)
    for which, result in record.items():
        if result is not None:
            _log.info(
                "structure test (%s): %d rows, m = %.3f: p = %.3g at level %g, %s",
                which,
                result["n_genes_used"],
                result["m"],
                result["p_value"],
                result["alpha"],
                "structure present" if result["present"] else "no structure",
            )
    _log.info("structure tests: %.1f s", time.perf_counter() - started)


def read_structure(
    path: PathLike | None,
    which: str,
    X: np.ndarray,
    m: float,
    options: Mapping[str, Any],
    seed: int,
) -> Any:
    """The structure test ``which`` (``clusters`` or ``comparison``) from a file of
    :func:`run_structure`, checked against ``m`` and the ``options``; without a file
    (``path`` None: the command line, tests) it is run here, with the same draws."""
    from gloam.structure import StructureTest

    if path is None:
        return _structure_test_of(X, m, options, seed, which)
    record = read_json(path, "structure tests").get(which)
    wanted = (float(m), int(options["structure_n_null"]), float(options["structure_alpha"]))
    if record is None or (record["m"], record["n_null"], record["alpha"]) != wanted:
        raise GloamError(
            f"structure tests {str(path)!r} were made for other data or settings than this "
            f"{'comparison' if which == 'comparison' else 'selection'}: delete the file and run "
            "again"
        )
    return StructureTest(**record)


def _judgement(structure: Any, table: pd.DataFrame, options: Mapping[str, Any]) -> pd.DataFrame:
    """Every scanned c judged with the selection ``options`` (the keys of
    :data:`_SELECTION_DEFAULTS`); shared by a run's selection and the comparison."""
    from gloam.validity import judge_n_clusters

    return judge_n_clusters(
        table,
        structure_present=structure.present,
        stable_jaccard=float(options["stable_jaccard"]),
        min_core_genes=int(options["min_core_genes"]),
        max_centroid_correlation=float(options["max_centroid_correlation"]),
        min_coherence=float(options["min_coherence"]),
        separation_alpha=float(options["structure_alpha"]),
    )


def run_scan(
    scan_input: PathLike,
    n_clusters: int,
    settings: Mapping[str, Any],
    seed: int,
    out_npz: PathLike,
) -> None:
    """Cluster the scan input into ``n_clusters`` and write the partition with its evidence.

    ``settings`` is the scan section of the config (keys :data:`SCAN_SETTINGS`; the last four
    default to 3, 100, True and 20). The work is :func:`gloam.partition.solve_partition`;
    the file holds ``centroids`` (c, n_columns), ``memberships`` (n_genes, c), ``noise``,
    ``start_agreement``, ``top_agreement`` (n_genes,), ``membership_low``,
    ``membership_high``, ``core_frequency`` (n_genes, c), ``jaccard`` (n_resamples, c),
    ``noise_distance``, ``m``, ``seed``, ``genes``, ``columns`` and ``metrics`` (a JSON
    string: one row of the validity table). When the scan input holds the comparison's
    profiles, the file also holds their clustering at c (``comparison_metrics``,
    ``comparison_centroids``; :func:`_comparison_at`), so the comparison's scan runs in the
    scan jobs side by side, not c after c in one job. A c not below the number of genes is
    refused with a message saying how to fix it (:func:`check_clusters_fit_genes`).
    """

    data = read_scan_input(scan_input)
    c = int(n_clusters)
    n_genes = len(data.zscores)
    _log.info(
        "read %s: %d genes x %d columns, m = %.3f",
        scan_input,
        n_genes,
        data.zscores.shape[1],
        data.m,
    )
    check_clusters_fit_genes(c, n_genes)
    options = {**_SCAN_DEFAULTS, **{k: settings[k] for k in SCAN_SETTINGS if k in settings}}
    started = time.perf_counter()
    with about(f"c = {c}"):
        partition = _solve_at(
            data.zscores.to_numpy(),
            c,
            data.m,
            options,
            rng=np.random.default_rng([int(seed), c]),
            replicates=data.replicates,
            sample_column=data.sample_column,
        )
    seconds = time.perf_counter() - started
    metrics = dict(partition.metrics)
    metrics["few_starts_at_optimum"] = metrics["n_at_optimum"] < int(
        options["min_starts_at_optimum"]
    )
    if metrics["few_starts_at_optimum"]:
        warnings.warn(
            f"c = {c}: only {metrics['n_at_optimum']} of {metrics['n_starts']} starts reached "
            "the best objective; the consensus rests on them (raise scan.max_starts)",
            GloamWarning,
            stacklevel=2,
        )
    comparison = _comparison_at(data.comparison, c, options, seed)
    empty = np.full_like(partition.memberships, np.nan)
    _write_npz(
        out_npz,
        **comparison,
        centroids=partition.centroids,
        memberships=partition.memberships,
        noise=partition.noise,
        noise_distance=np.float64(partition.noise_distance),
        start_agreement=partition.start_agreement,
        membership_low=_or(partition.membership_low, empty),
        membership_high=_or(partition.membership_high, empty),
        core_frequency=_or(partition.core_frequency, empty),
        top_agreement=_or(partition.top_agreement, np.full(n_genes, np.nan)),
        jaccard=_or(partition.jaccard, np.full((0, c), np.nan)),
        m=np.float64(data.m),
        seed=np.int64(seed),
        genes=data.zscores.index.to_numpy(dtype=str),
        columns=data.zscores.columns.to_numpy(dtype=str),
        metrics=np.str_(json.dumps(metrics)),
    )
    n_resamples = 0 if partition.jaccard is None else int(partition.jaccard.shape[0])
    _log.info(
        "scan c = %d%s: %d starts, %d at the best objective %.6g, %d not converged within "
        "%d iterations; %d resamples (%s); %.1f s",
        c,
        position(),
        metrics["n_starts"],
        metrics["n_at_optimum"],
        metrics["objective"],
        metrics["n_not_converged"],
        int(options["max_iter"]),
        n_resamples,
        metrics["resampling"],
        seconds,
        extra=_PROGRESS,
    )
    _log.info(
        "c = %d: smallest cluster %d core genes, smallest mean Jaccard %.2f, largest centroid "
        "correlation %.2f, smallest coherence %.2f, nearest-pair p %.2g, %d noise genes",
        c,
        metrics["min_core_genes"],
        metrics["min_jaccard"],
        metrics["max_centroid_correlation"],
        metrics["min_coherence"],
        metrics["max_pair_p_value"],
        metrics["n_noise"],
    )


def _comparison_at(
    comparison: ComparisonInput | None, c: int, options: Mapping[str, Any], seed: int
) -> dict[str, Any]:
    """The comparison's clustering of the changing gene-condition profiles at ``c``, for the
    scan file: ``comparison_metrics`` (JSON, as a scan's ``metrics``) and
    ``comparison_centroids`` (c, n_times); nothing when the run does not compare or ``c`` is
    not below the number of profiles. Genes are resampled for robustness (one profile per
    gene and condition has no replicates of its own); the draws come from
    ``default_rng([seed, 7, c])``."""
    if comparison is None or c >= comparison.profiles.shape[0]:
        return {}
    started = time.perf_counter()
    with about(f"comparison c = {c}"):
        partition = _solve_at(
            comparison.profiles,
            c,
            comparison.m,
            options,
            rng=np.random.default_rng([int(seed), 7, c]),
        )
    _log.info(
        "comparison c = %d: %d gene-condition profiles, m = %.3f: %d starts, %d at the best "
        "objective; %.1f s",
        c,
        comparison.profiles.shape[0],
        comparison.m,
        partition.metrics["n_starts"],
        partition.metrics["n_at_optimum"],
        time.perf_counter() - started,
    )
    return {
        "comparison_metrics": np.str_(json.dumps(partition.metrics)),
        "comparison_centroids": partition.centroids,
        "comparison_n_profiles": np.int64(comparison.profiles.shape[0]),
    }


def _or(value: np.ndarray | None, default: np.ndarray) -> np.ndarray:
    return default if value is None else value


def read_scan(path: PathLike, genes: pd.Index | None = None) -> dict[str, Any]:
    """Arrays of a scan file (see :func:`run_scan`), ``metrics`` parsed into a dict.

    When ``genes`` is given, check that the scan was made on exactly these genes.
    """
    data = _load_npz(path, "scan file")
    if "metrics" not in data:
        raise GloamError(
            f"scan file {str(path)!r} was written by an older gloam; delete it and rerun the scan"
        )
    if genes is not None and not np.array_equal(data["genes"], np.asarray(genes, dtype=str)):
        raise GloamError(
            f"scan file {str(path)!r} was made on other genes than the prepared matrix; "
            "delete it and rerun the scan"
        )
    data["metrics"] = json.loads(str(data["metrics"]))
    return data


# ------------------------------------------------------------------ selection and consensus

_SELECTION_DEFAULTS = {
    "n_clusters": "auto",
    "stable_jaccard": 0.75,
    "min_core_genes": 10,
    "max_centroid_correlation": 0.85,
    "min_coherence": 0.5,
    "structure_alpha": 0.01,
    "structure_n_null": 30,
}
#: Share of noise genes above which the run is flagged ``mostly_noise``.
MOSTLY_NOISE_SHARE = 0.5


def run_select(
    scan_input: PathLike,
    fuzzifier_json: PathLike,
    scan_files: Sequence[PathLike],
    settings: Mapping[str, Any],
    seed: int,
    *,
    out_validity: PathLike,
    out_selection: PathLike,
    out_consensus: PathLike,
    structure_json: PathLike | None = None,
) -> None:
    """Test for structure, judge every scanned c, choose c and write its consensus.

    ``settings`` is the selection section of the config: ``n_clusters`` (``"auto"`` or an
    integer), ``stable_jaccard``, ``min_core_genes``, ``max_centroid_correlation``,
    ``min_coherence``, ``structure_alpha``, ``structure_n_null``. The structure test
    (:func:`gloam.structure.structure_test`, ``default_rng([seed, 1])``) is read from
    ``structure_json`` (:func:`run_structure`), or run here without it.

    Writes ``validity.tsv`` (the per-c metrics of every scan file, judged by
    :func:`gloam.validity.judge_n_clusters`, plus ``used``), ``selection.json``
    (``n_clusters``, ``method``, ``recommended``, ``reason``, ``scanned``, ``structure``,
    ``criteria``, ``flags``, ``flag_details``) and ``consensus.npz``
    (:func:`consensus_arrays`). Every quality flag is also a one-line warning in the log.
    """
    from gloam.errors import QUALITY_FLAGS, raise_flag
    from gloam.validity import recommended_n_clusters

    options = {**_SELECTION_DEFAULTS, **settings}
    data = read_scan_input(scan_input)
    fuzzifier = read_json(fuzzifier_json, "fuzzifier choice")
    file_of: dict[int, PathLike] = {}
    rows = []
    for path in scan_files:
        metrics = read_scan(path, data.zscores.index)["metrics"]
        file_of[int(metrics["n_clusters"])] = path
        rows.append(metrics)
    table = pd.DataFrame(rows)
    _log.info(
        "read %s: %d genes x %d columns, m = %.3f (%s); %d scan file(s), c = %s",
        scan_input,
        len(data.zscores),
        data.zscores.shape[1],
        data.m,
        fuzzifier.get("method", "?"),
        len(file_of),
        ", ".join(str(c) for c in sorted(file_of)),
    )
    structure = read_structure(
        structure_json, "clusters", data.zscores.to_numpy(), data.m, options, seed
    )
    judged = _judgement(structure, table, options)
    _log_judgement(structure, judged, options)
    recommended = recommended_n_clusters(judged)
    if recommended > 1:
        reason = str(judged.loc[judged["recommended"], "reason"].iloc[0])
    elif not structure.present:
        reason = (
            f"no evidence of cluster structure (p = {structure.p_value:.3g} against one Gaussian "
            f"with the data's covariance, level {structure.alpha:g}): no clusters are recommended"
        )
    else:
        reason = (
            "no scanned c gave clusters that are all robust, sizeable, distinct, coherent and "
            "separated: no clusters are recommended"
        )
    fixed = options["n_clusters"]
    if fixed == "auto":
        used, method = recommended, "auto"
    else:
        used, method = int(fixed), "fixed"
        reason = f"fixed in the config (selection.n_clusters); the rule recommends {recommended}"
        if used not in file_of:
            raise GloamError(
                f"selection.n_clusters = {used} was not scanned (scanned: {sorted(file_of)}); "
                "include it in the scan range"
            )
    details: dict[str, str] = {}

    def flag(name: str, detail: str) -> None:
        details[name] = detail
        raise_flag(name, detail)

    if data.selection_method == "no_replicates":
        flag("no_replicates", "genes were selected by the variance rule")
    if not fuzzifier.get("check_passed", True):
        flag(
            "fuzzifier_check_failed",
            f"shuffled-data structure index {fuzzifier.get('check_structure_index', 0):.3f} "
            f"at m = {data.m:.3f}",
        )
    if not structure.present:
        flag("no_structure", f"p = {structure.p_value:.3g} (level {structure.alpha:g})")
    elif recommended == 1:
        flag("no_robust_c", f"scanned c = {sorted(file_of)}; see the failed column of validity")
    if recommended > 1 and recommended == max(file_of):
        flag("c_at_scan_edge", f"recommended c = {recommended} is the largest scanned")
    if used > 1:
        row = judged.loc[judged["n_clusters"] == used].iloc[0]
        if bool(row["few_starts_at_optimum"]):
            flag(
                "few_starts_at_optimum",
                f"c = {used}: {int(row['n_at_optimum'])} of {int(row['n_starts'])} starts",
            )
        if not bool(row["robust"]):
            flag("unstable_clusters", f"c = {used}: smallest mean Jaccard {row['min_jaccard']:.2f}")
        if not bool(row["sizeable"]):
            flag(
                "near_empty_clusters",
                f"c = {used}: smallest cluster has {int(row['min_core_genes'])} core genes",
            )
        if not bool(row["coherent"]):
            flag(
                "incoherent_clusters",
                f"c = {used}: smallest coherence {row['min_coherence']:.2f}",
            )
        if not bool(row["distinct"]):
            flag(
                "similar_centroids",
                f"c = {used}: centroid correlation {row['max_centroid_correlation']:.2f}",
            )
        if not bool(row["separated"]):
            flag(
                "unseparated_clusters",
                f"c = {used}: nearest-pair p = {row['max_pair_p_value']:.2g}",
            )
        with about(f"c = {used}"):
            consensus = consensus_arrays(read_scan(file_of[used], data.zscores.index), data)
    else:
        consensus = single_group_arrays(data)
    n_noise = int((consensus["top_class"] < 0).sum())
    if n_noise > MOSTLY_NOISE_SHARE * len(data.zscores):
        flag("mostly_noise", f"c = {used}: {n_noise} of {len(data.zscores)} genes")
    judged["used"] = judged["n_clusters"] == used
    write_table(judged, out_validity)
    _write_json(
        {
            "n_clusters": used,
            "method": method,
            "recommended": recommended,
            "reason": reason,
            "scanned": sorted(int(c) for c in file_of),
            "structure": structure.to_dict(),
            "criteria": {
                key: options[key]
                for key in (
                    "stable_jaccard",
                    "min_core_genes",
                    "max_centroid_correlation",
                    "min_coherence",
                    "structure_alpha",
                )
            },
            "flags": [name for name in QUALITY_FLAGS if name in details],
            "flag_details": details,
        },
        out_selection,
    )
    _write_npz(out_consensus, **consensus)
    _log.info(
        "chosen c = %d (%s; recommended %d): %s; %d noise genes; flags: %s",
        used,
        method,
        recommended,
        reason,
        n_noise,
        ", ".join(details) or "none",
        extra=_PROGRESS,
    )


def _log_judgement(structure: Any, judged: pd.DataFrame, options: Mapping[str, Any]) -> None:
    """The structure test, the criteria and the verdict on every scanned c, for the log."""
    _log.info(
        "structure test: p = %.3g at level %g, structure %s",
        structure.p_value,
        structure.alpha,
        "present" if structure.present else "absent",
    )
    _log.info(
        "criteria: smallest mean Jaccard >= %g, smallest cluster >= %d core genes, centroid "
        "correlation <= %g, coherence >= %g, nearest-pair p < %g",
        options["stable_jaccard"],
        int(options["min_core_genes"]),
        options["max_centroid_correlation"],
        options["min_coherence"],
        options["structure_alpha"],
    )
    for row in judged.to_dict("records"):
        _log.info(
            "c = %d: %s (Jaccard %.2f, core genes %d, correlation %.2f, coherence %.2f, "
            "pair p %.2g)",
            row["n_clusters"],
            "passes" if row["passes"] else f"fails {row['failed']}",
            row["min_jaccard"],
            row["min_core_genes"],
            row["max_centroid_correlation"],
            row["min_coherence"],
            row["max_pair_p_value"],
        )


def _peak_order(centroids: np.ndarray, data: ScanInput) -> np.ndarray:
    from gloam.consensus import order_clusters_by_peak_time

    conditions = data.conditions.astype(str).tolist()
    several = len(set(conditions)) > 1
    return order_clusters_by_peak_time(
        centroids, np.asarray(data.times, dtype=np.float64), conditions if several else None
    )


def consensus_arrays(scan: Mapping[str, Any], data: ScanInput) -> dict[str, np.ndarray]:
    """The arrays of ``consensus.npz`` for the chosen c, clusters in peak-time order.

    ``memberships`` (n_genes, c) and ``noise`` (n_genes,) sum to 1 per gene; ``top_class``
    (n_genes,) is the 0-based cluster of the largest membership, or -1 where the noise
    membership is the largest; ``top_membership`` is that largest membership;
    ``start_agreement`` and ``top_agreement`` (n_genes,); ``membership_low``,
    ``membership_high`` and ``core_frequency`` (n_genes, c); ``jaccard``
    (n_resamples, c); ``centroids`` (c, n_columns); ``cluster_names``; ``genes``;
    ``columns``; ``times``; ``conditions``; ``m``; ``noise_distance``; ``metrics``.
    """
    from gloam.consensus import cluster_names

    order = _peak_order(scan["centroids"], data)
    memberships = scan["memberships"][:, order]
    noise = scan["noise"]
    return _consensus_record(
        data,
        centroids=scan["centroids"][order],
        memberships=memberships,
        noise=noise,
        start_agreement=scan["start_agreement"],
        membership_low=scan["membership_low"][:, order],
        membership_high=scan["membership_high"][:, order],
        core_frequency=scan["core_frequency"][:, order],
        top_agreement=scan["top_agreement"],
        jaccard=scan["jaccard"][:, order],
        noise_distance=float(scan["noise_distance"]),
        names=cluster_names(memberships.shape[1]),
        metrics=scan["metrics"],
    )


def single_group_arrays(data: ScanInput) -> dict[str, np.ndarray]:
    """The consensus record when no clusters are used (c = 1): every gene in one group.

    Its centroid is the mean profile; memberships are 1 and noise 0, so the figures show the
    spread of all genes around their mean. No core sets are written for it.
    """
    X = data.zscores.to_numpy()
    n_genes = X.shape[0]
    nan = np.full((n_genes, 1), np.nan)
    return _consensus_record(
        data,
        centroids=X.mean(axis=0, keepdims=True),
        memberships=np.ones((n_genes, 1)),
        noise=np.zeros(n_genes),
        start_agreement=np.ones(n_genes),
        membership_low=nan,
        membership_high=nan,
        core_frequency=nan,
        top_agreement=np.full(n_genes, np.nan),
        jaccard=np.full((0, 1), np.nan),
        noise_distance=float("inf"),
        names=["C1"],
        metrics={"n_clusters": 1},
    )


def _consensus_record(data: ScanInput, **parts: Any) -> dict[str, np.ndarray]:
    memberships, noise = parts["memberships"], parts["noise"]
    largest = memberships.max(axis=1)
    top_class = np.where(noise > largest, -1, memberships.argmax(axis=1)).astype(np.int64)
    return {
        "memberships": memberships,
        "noise": noise,
        "top_class": top_class,
        "top_membership": np.maximum(largest, noise),
        "start_agreement": parts["start_agreement"],
        "membership_low": parts["membership_low"],
        "membership_high": parts["membership_high"],
        "core_frequency": parts["core_frequency"],
        "top_agreement": parts["top_agreement"],
        "jaccard": parts["jaccard"],
        "centroids": parts["centroids"],
        "cluster_names": np.asarray(parts["names"], dtype=str),
        "genes": data.zscores.index.to_numpy(dtype=str),
        "columns": data.zscores.columns.to_numpy(dtype=str),
        "times": np.asarray(data.times, dtype=np.float64),
        "conditions": np.asarray(data.conditions, dtype=str),
        "m": np.float64(data.m),
        "noise_distance": np.float64(parts["noise_distance"]),
        "metrics": np.str_(json.dumps(parts["metrics"])),
    }


def read_consensus(path: PathLike) -> dict[str, np.ndarray]:
    """Arrays of a consensus file written by :func:`run_select` (see :func:`consensus_arrays`)."""
    data = _load_npz(path, "consensus file")
    if "noise" not in data:
        raise GloamError(
            f"consensus file {str(path)!r} was written by an older gloam; rerun the select step"
        )
    return data


# ------------------------------------------------------------------ exports

#: Columns of ``memberships.tsv`` after the cluster and noise columns.
MEMBERSHIP_EXTRA_COLUMNS = ("top_class", "top_membership", "resampled_top_share", "start_agreement")


def membership_frame(consensus: Mapping[str, np.ndarray]) -> pd.DataFrame:
    """``memberships.tsv`` as a table indexed by gene (full precision)."""
    names = consensus["cluster_names"].tolist()
    table = pd.DataFrame(
        consensus["memberships"],
        index=pd.Index(consensus["genes"].astype(str), name="gene"),
        columns=names,
    )
    table["noise"] = consensus["noise"]
    labels = np.asarray([*names, "noise"], dtype=object)
    table["top_class"] = labels[consensus["top_class"]]  # -1 picks "noise"
    table["top_membership"] = consensus["top_membership"]
    table["resampled_top_share"] = consensus["top_agreement"]
    table["start_agreement"] = consensus["start_agreement"]
    return table


def expression_frame(prepared_data: Any, genes: Sequence[str]) -> pd.DataFrame:
    """Mean expression, range and peak time of each gene, per condition, for the tables.

    Parameters
    ----------
    prepared_data : anndata.AnnData
        The prepared matrix (:func:`read_prepared`): layer ``log_mean`` (time-point columns x
        genes, the replicate means on the log scale: log2 of normalised counts, or the
        matrix's own log scale) and ``obs`` columns ``time`` and ``condition``.
    genes : sequence of str
        The genes of the table, in its order (all must be in the prepared matrix).

    Returns
    -------
    pandas.DataFrame
        Indexed by gene. With one condition: ``mean_log2`` (mean over the time points),
        ``log2_range`` (max - min of the profile) and ``peak_time`` (time of the maximum, the
        first on ties; unit of the sample sheet). With several conditions the same three per
        condition ``<c>``: ``mean_log2_<c>``, ``log2_range_<c>``, ``peak_time_<c>``.
    """
    from gloam.prepare import LOG_MEAN_LAYER

    positions = prepared_data.var_names.get_indexer(pd.Index(genes).astype(str))
    if (positions < 0).any():
        raise GloamError(
            "the consensus names genes that the prepared matrix does not hold; rerun the run "
            "from its preparation"
        )
    values = np.asarray(prepared_data.layers[LOG_MEAN_LAYER], dtype=np.float64).T[positions]
    times = prepared_data.obs["time"].to_numpy(dtype=np.float64)
    conditions = prepared_data.obs["condition"].astype(str).to_numpy()
    names = list(dict.fromkeys(conditions))
    columns: dict[str, np.ndarray] = {}
    for name in names:
        inside = conditions == name
        block, block_times = values[:, inside], times[inside]
        suffix = f"_{name}" if len(names) > 1 else ""
        columns[f"mean_log2{suffix}"] = block.mean(axis=1)
        columns[f"log2_range{suffix}"] = np.ptp(block, axis=1)
        columns[f"peak_time{suffix}"] = block_times[np.argmax(block, axis=1)]
    return pd.DataFrame(columns, index=pd.Index(list(genes), name="gene"))


def cluster_frame(consensus: Mapping[str, np.ndarray]) -> pd.DataFrame:
    """``clusters.tsv``: one row per cluster (see the README's output table)."""
    from gloam.partition import CORE_LEVEL_FOR_CRITERIA, centroid_correlation
    from gloam.validity import STABLE_JACCARD

    names = consensus["cluster_names"].tolist()
    c = len(names)
    top = consensus["top_class"]
    core = (top >= 0) & (consensus["top_membership"] >= CORE_LEVEL_FOR_CRITERIA)
    jaccard = consensus["jaccard"]
    mean_jaccard = np.nanmean(jaccard, axis=0) if jaccard.shape[0] else np.full(c, np.nan)
    centroids = consensus["centroids"]
    peak = np.argmax(centroids, axis=1)
    correlation = centroid_correlation(centroids)
    np.fill_diagonal(correlation, -np.inf)
    nearest = np.argmax(correlation, axis=1) if c > 1 else np.zeros(c, dtype=int)
    return pd.DataFrame(
        {
            "cluster": names,
            "n_top": np.bincount(top[top >= 0], minlength=c),
            "n_core": np.bincount(top[core], minlength=c),
            "jaccard": mean_jaccard,
            "stable": mean_jaccard >= STABLE_JACCARD,
            "coherence": np.einsum("kj,kj->k", centroids, centroids)
            / max(len(consensus["columns"]) - 1, 1),
            "peak_time": consensus["times"][peak],
            "peak_condition": consensus["conditions"][peak],
            "nearest": [names[j] if c > 1 else "" for j in nearest],
            "nearest_correlation": [
                float(correlation[k, j]) if c > 1 else np.nan for k, j in enumerate(nearest)
            ],
        }
    )


def robustness_frame(consensus: Mapping[str, np.ndarray]) -> pd.DataFrame:
    """``robustness.tsv``: per gene and cluster the resampling interval and core share."""
    names = consensus["cluster_names"].tolist()
    parts = {}
    for k, name in enumerate(names):
        parts[f"{name}_low"] = consensus["membership_low"][:, k]
        parts[f"{name}_high"] = consensus["membership_high"][:, k]
        parts[f"{name}_core_share"] = consensus["core_frequency"][:, k]
    return pd.DataFrame(parts, index=pd.Index(consensus["genes"].astype(str), name="gene"))


def export_tables(
    consensus_npz: PathLike,
    *,
    out_memberships: PathLike,
    out_centroids: PathLike,
    out_clusters: PathLike,
    out_robustness: PathLike,
    prepared: PathLike | None = None,
) -> None:
    """Write ``memberships.tsv``, ``centroids.tsv``, ``clusters.tsv`` and ``robustness.tsv``.

    Values are written at full precision (:func:`gloam.io.write_table`). Columns are listed
    in the README's output table. With ``prepared`` (the prepared matrix), the memberships
    carry each gene's mean expression, range and peak time beside them
    (:func:`expression_frame`).
    """
    data = read_consensus(consensus_npz)
    names = data["cluster_names"].tolist()
    sizes = np.bincount(data["top_class"] + 1, minlength=len(names) + 1)  # noise (-1) first
    _log.info(
        "read %s: %d genes x %d cluster(s); genes by largest membership: %s, noise %d",
        consensus_npz,
        len(data["genes"]),
        len(names),
        ", ".join(f"{name} {n}" for name, n in zip(names, sizes[1:], strict=True)),
        sizes[0],
    )
    memberships = membership_frame(data)
    if prepared is not None:
        genes = memberships.index.tolist()
        memberships = memberships.join(expression_frame(read_prepared(prepared), genes))
    write_table(memberships.reset_index(), out_memberships)
    centroids = pd.DataFrame(
        data["centroids"],
        index=pd.Index(data["cluster_names"].tolist(), name="cluster"),
        columns=data["columns"].tolist(),
    )
    write_table(centroids, out_centroids, index=True)
    write_table(cluster_frame(data), out_clusters)
    write_table(robustness_frame(data).reset_index(), out_robustness)


def export_gene_sets(
    consensus_npz: PathLike, thresholds: Sequence[float], out_dir: PathLike, prefix: str = "gloam"
) -> None:
    """Write every gene-set file (see :mod:`gloam.genesets`) into ``out_dir`` at once.

    Built from the full-precision consensus, never from a rounded table. A gene whose largest
    membership is the noise class is never a core gene. With no clusters (c = 1) only the
    background and empty GMT files are written. The files are written into a hidden folder
    beside ``out_dir`` that replaces it only when complete, so an interrupted export never
    leaves a partial set of lists.
    """
    from gloam.genesets import write_gene_sets

    data = read_consensus(consensus_npz)
    genes = data["genes"].astype(str)
    memberships = pd.DataFrame(
        data["memberships"], index=genes, columns=data["cluster_names"].tolist()
    )
    noise = pd.Series(data["noise"], index=genes)
    with atomic_directory(out_dir) as staging:
        write_gene_sets(
            memberships,
            thresholds,
            staging,
            background_genes=genes.tolist(),
            prefix=prefix,
            noise=noise,
            core_sets=memberships.shape[1] > 1,
        )
    _log_core_genes(memberships, noise, thresholds)


def _log_core_genes(
    memberships: pd.DataFrame, noise: pd.Series, thresholds: Sequence[float]
) -> None:
    """How many genes are core at each threshold, per cluster, for the log."""
    from gloam.genesets import core_genes

    n_genes = len(memberships)
    if memberships.shape[1] < 2:
        _log.info(
            "no clusters (c = 1): empty core-gene lists; background of %d genes",
            n_genes,
            extra=_PROGRESS,
        )
        return
    for threshold in thresholds:
        sets = core_genes(memberships, threshold, noise)
        union = len(set().union(*sets.values()))
        _log.info(
            "core genes at membership >= %g: %d of %d genes (%s)",
            threshold,
            union,
            n_genes,
            ", ".join(f"{name} {len(members)}" for name, members in sets.items()),
            extra=_PROGRESS,
        )


def _versions() -> dict[str, str]:
    versions = {"python": platform.python_version()}
    for package in ("gloam", "numpy", "scipy", "pandas", "anndata", "matplotlib", "snakemake"):
        try:
            versions[package] = metadata.version(package)
        except metadata.PackageNotFoundError:
            continue
    return versions


def time_point_categories(times: np.ndarray, unit: str) -> pd.Categorical:
    """Time labels such as ``"0.5 h"`` as an ordered categorical, in time order.

    Plotting and grouping tools then keep time order instead of sorting labels as text
    (``"12 h"`` before ``"2 h"``). Repeated times (several conditions) share a category.
    """
    labels = [f"{np.format_float_positional(t, trim='-')} {unit}" for t in times]
    order = sorted(set(zip(times.tolist(), labels, strict=True)))
    return pd.Categorical(labels, categories=[label for _, label in order], ordered=True)


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
        ``gloam_top_class`` (cluster name or ``noise``), ``gloam_top_membership``,
        ``gloam_noise``, ``gloam_resampled_top_share``, ``gloam_start_agreement`` and
        ``gloam_membership_<cluster>`` per cluster.
    ``obs["time_point"]``
        The time of each column as an ordered categorical (``"0.5 h"``, ...), in time order.
    ``varm["gloam_memberships"]``
        Memberships, n_genes x n_clusters (columns in ``uns["gloam"]["clusters"]``).
    ``varm["gloam_membership_low"]``, ``varm["gloam_membership_high"]``
        Resampling interval of each membership (5th and 95th percentile).
    ``uns["gloam"]``
        ``centroids`` (n_clusters x n_columns, z-score units), ``clusters``, ``columns``,
        ``n_clusters``, ``m``, ``seed``, ``noise_distance``, ``fuzzifier`` and ``selection``
        (the JSON records, with the structure test and the quality flags), ``settings``
        (the run's settings) and ``versions`` (packages).
    """

    data = read_prepared(prepared)
    consensus = read_consensus(consensus_npz)
    genes = consensus["genes"]
    if not np.array_equal(np.asarray(data.var_names, dtype=str), genes):
        raise GloamError(
            f"consensus file {str(consensus_npz)!r} does not match the genes of {str(prepared)!r}; "
            "rerun the clustering"
        )
    table = membership_frame(consensus)
    names = consensus["cluster_names"].tolist()
    data.var[f"{VAR_PREFIX}top_class"] = pd.Categorical(
        table["top_class"].to_numpy(), categories=[*names, "noise"]
    )
    for column in ("top_membership", "noise", "resampled_top_share", "start_agreement"):
        data.var[f"{VAR_PREFIX}{column}"] = table[column].to_numpy()
    for k, name in enumerate(names):
        data.var[f"{VAR_PREFIX}membership_{name}"] = consensus["memberships"][:, k]
    data.obs["time_point"] = time_point_categories(
        data.obs["time"].to_numpy(dtype=float), str(settings.get("time_unit", "h"))
    )
    data.varm[MEMBERSHIPS_VARM_KEY] = consensus["memberships"]
    data.varm[f"{MEMBERSHIPS_VARM_KEY[:-1]}_low"] = consensus["membership_low"]
    data.varm[f"{MEMBERSHIPS_VARM_KEY[:-1]}_high"] = consensus["membership_high"]
    data.uns[RESULT_KEY] = _h5ad_safe(
        {
            "centroids": consensus["centroids"],
            "clusters": names,
            "columns": consensus["columns"].tolist(),
            "n_clusters": len(names),
            "m": float(consensus["m"]),
            "noise_distance": float(consensus["noise_distance"]),
            "seed": settings.get("seed"),
            "fuzzifier": read_json(fuzzifier_json, "fuzzifier choice"),
            "selection": read_json(selection_json, "selection"),
            "settings": dict(settings),
            "versions": _versions(),
        }
    )
    write_h5ad(data, out_h5ad)


# ------------------------------------------------------------------ figures

FigurePaths = tuple[PathLike, ...]  # (PNG, PDF, SVG)

# Every figure stage has the same signature, ``figure_<name>(files, settings, paths)``:
# ``files`` maps run-file paths of the registry (gloam.artifacts.RUN_FILES, e.g.
# "consensus.npz") to where they are, ``settings`` holds ``time_unit`` and, for figures that
# show core genes, ``core_threshold``; ``paths`` is (PNG, PDF, SVG). The registry of figures
# (gloam.artifacts.FIGURES) names each figure's stage, and :func:`draw_figures` draws all of a
# rule's figures, so a new figure needs no change to the export stages or the rules.


def figure_profiles(
    files: Mapping[str, PathLike], settings: Mapping[str, Any], paths: FigurePaths
) -> None:
    """Per-cluster temporal profiles (see :func:`gloam.plots.plot_cluster_profiles`), with
    bands over the core genes at ``settings["core_threshold"]``."""
    from gloam.plots import plot_cluster_profiles, save_figure

    consensus = read_consensus(files["consensus.npz"])
    prepared_data = read_prepared(files["prepared/prepared.h5ad"])
    log_means = np.asarray(prepared_data.layers["log_mean"], dtype=np.float64).T
    zscores = np.asarray(prepared_data.X, dtype=np.float64).T
    conditions = consensus["conditions"].astype(str).tolist()
    jaccard = consensus["jaccard"]
    figure = plot_cluster_profiles(
        zscores,
        consensus["times"],
        consensus["memberships"],
        consensus["centroids"],
        noise=consensus["noise"] if consensus["noise"].any() else None,
        log_means=log_means,
        conditions=conditions if len(set(conditions)) > 1 else None,
        core_threshold=float(settings["core_threshold"]),
        cluster_labels=consensus["cluster_names"].tolist(),
        time_unit=str(settings["time_unit"]),
        jaccard=np.nanmean(jaccard, axis=0) if jaccard.shape[0] else None,
    )
    save_figure(figure, *paths)


def figure_validity(
    files: Mapping[str, PathLike], settings: Mapping[str, Any], paths: FigurePaths
) -> None:
    """The criteria that decide c, for every scanned c, with the c used marked."""
    from gloam.plots import plot_validity, save_figure

    table = read_table(files["validity.tsv"])
    selection = read_json(files["selection.json"], "selection")
    criteria = selection.get("criteria", {})
    figure = plot_validity(
        table,
        int(selection["n_clusters"]),
        stable_jaccard=float(criteria.get("stable_jaccard", 0.75)),
        min_core_size=int(criteria.get("min_core_genes", 10)),
        max_corr=float(criteria.get("max_centroid_correlation", 0.9)),
    )
    save_figure(figure, *paths)


def figure_fuzzifier(
    files: Mapping[str, PathLike], settings: Mapping[str, Any], paths: FigurePaths
) -> None:
    """The randomised-data curve with the m used (and the formula's m) marked."""
    from gloam.plots import plot_fuzzifier_curve, save_figure

    choice = read_json(files["fuzzifier.json"], "fuzzifier choice")
    curve = read_table(files["fuzzifier_curve.tsv"])
    figure = plot_fuzzifier_curve(
        curve, float(choice["m"]), formula_m=float(choice["formula_m"]), method=choice["method"]
    )
    save_figure(figure, *paths)


def figure_overview(
    files: Mapping[str, PathLike], settings: Mapping[str, Any], paths: FigurePaths
) -> None:
    """Cluster overview: shape, sizes, robustness, peak time and similarity."""
    from gloam.partition import CORE_LEVEL_FOR_CRITERIA
    from gloam.plots import plot_cluster_overview, save_figure

    consensus = read_consensus(files["consensus.npz"])
    criteria = read_json(files["selection.json"], "selection").get("criteria", {})
    conditions = consensus["conditions"].astype(str).tolist()
    figure = plot_cluster_overview(
        cluster_frame(consensus),
        consensus["centroids"],
        cluster_labels=consensus["cluster_names"].tolist(),
        times=consensus["times"],
        conditions=conditions if len(set(conditions)) > 1 else None,
        time_unit=str(settings["time_unit"]),
        core_threshold=CORE_LEVEL_FOR_CRITERIA,
        stable_jaccard=float(criteria.get("stable_jaccard", 0.75)),
        max_corr=float(criteria.get("max_centroid_correlation", 0.9)),
    )
    save_figure(figure, *paths)


def draw_figures(
    writer: str,
    files: Mapping[str, PathLike],
    settings: Mapping[str, Any],
    figures: Mapping[str, FigurePaths],
) -> None:
    """Draw every figure that rule ``writer`` owns in the registry (gloam.artifacts.FIGURES).

    Parameters
    ----------
    writer : str
        The rule (``export`` or ``core_genes``).
    files, settings
        As for each figure stage (see above).
    figures : mapping
        Figure name -> (PNG, PDF, SVG) paths; exactly the figures the registry gives
        ``writer`` in ``figures/``.
    """
    from gloam.artifacts import FIGURES, resolve

    owned = {
        name
        for name, figure in FIGURES.items()
        if figure.writer == writer and figure.folder == "figures"
    }
    if set(figures) != owned:
        raise ValueError(
            f"rule {writer!r} draws the figures {sorted(owned)} (gloam.artifacts.FIGURES), "
            f"but paths were given for {sorted(figures)}"
        )
    for name in sorted(figures):
        resolve(FIGURES[name].draw)(files, settings, figures[name])


# ------------------------------------------------------------------ the two export stages


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
    clusters: PathLike,
    robustness: PathLike,
    h5ad: PathLike,
    figures: Mapping[str, FigurePaths],
) -> None:
    """Everything of a run that does not depend on the core-gene thresholds.

    The tables (:func:`export_tables`), ``gloam.h5ad`` (:func:`export_h5ad`) and the figures
    the registry gives the rule ``export`` (validity, fuzzifier, cluster overview), each as
    PNG, PDF and SVG at ``figures[name]``.
    """
    export_tables(
        consensus_npz,
        prepared=prepared,
        out_memberships=memberships,
        out_centroids=centroids,
        out_clusters=clusters,
        out_robustness=robustness,
    )
    export_h5ad(prepared, consensus_npz, fuzzifier_json, selection_json, settings, h5ad)
    files = {
        "prepared/prepared.h5ad": prepared,
        "consensus.npz": consensus_npz,
        "fuzzifier.json": fuzzifier_json,
        "fuzzifier_curve.tsv": fuzzifier_curve,
        "selection.json": selection_json,
        "validity.tsv": validity_tsv,
    }
    draw_figures("export", files, {"time_unit": str(settings.get("time_unit", "h"))}, figures)
    _log.info(
        "exported the tables, %s and the figures %s",
        Path(h5ad).name,
        ", ".join(sorted(figures)),
        extra=_PROGRESS,
    )


def export_core_genes(
    prepared: PathLike,
    consensus_npz: PathLike,
    thresholds: Sequence[float],
    time_unit: str,
    *,
    genesets: PathLike,
    figures: Mapping[str, FigurePaths],
    prefix: str = "gloam",
) -> None:
    """Everything of a run that depends on the core-gene thresholds.

    The gene-set folder (:func:`export_gene_sets`) and the figures the registry gives the
    rule ``core_genes`` (the cluster profiles, whose bands show the core genes at the largest
    threshold).
    """
    export_gene_sets(consensus_npz, thresholds, genesets, prefix=prefix)
    files = {"prepared/prepared.h5ad": prepared, "consensus.npz": consensus_npz}
    settings = {"time_unit": time_unit, "core_threshold": max(thresholds)}
    draw_figures("core_genes", files, settings, figures)
    _log.info(
        "exported the gene sets to %s and the figures %s (core genes at %g)",
        genesets,
        ", ".join(sorted(figures)),
        max(thresholds),
    )


# ------------------------------------------------------------------ summary across runs


def summarise_runs(
    runs: Sequence[Mapping[str, Any]],
    fuzzifier_files: Sequence[PathLike],
    selection_files: Sequence[PathLike],
    consensus_files: Sequence[PathLike],
    thresholds: Sequence[float],
    out_tsv: PathLike,
) -> None:
    """One row per run: what went in, which m and c were used, how robust and core it is.

    Columns: ``run``, ``dataset``, ``condition``, ``variant`` (empty when not used),
    ``n_genes_clustered``, ``n_noise`` (genes whose largest membership is noise), ``m``,
    ``m_method``, ``n_clusters``, ``n_clusters_method``, ``recommended_n_clusters``,
    ``structure_p_value``, ``min_jaccard`` (smallest mean resampling Jaccard of a cluster at
    the c used), ``mean_start_agreement``, ``flags`` (quality flags, comma-separated), and
    per threshold ``t``: ``core_genes_<t>`` (genes core in some cluster) and
    ``core_sizes_<t>`` (``C1=…;C2=…``). Each run also gets one line in the log with m, c
    and its flags (:func:`run_lines`).
    """
    if not len(runs) == len(fuzzifier_files) == len(selection_files) == len(consensus_files):
        raise GloamError("summary needs one fuzzifier, selection and consensus file per run")
    rows = []
    for run, fuzzifier, selection, consensus_npz in zip(
        runs, fuzzifier_files, selection_files, consensus_files, strict=True
    ):
        choice = read_json(fuzzifier, "fuzzifier choice")
        chosen = read_json(selection, "selection")
        consensus = read_consensus(consensus_npz)
        memberships = consensus["memberships"]
        names = consensus["cluster_names"].tolist()
        eligible = consensus["top_class"] >= 0
        jaccard = consensus["jaccard"]
        flags = ",".join(chosen.get("flags", []))
        row: dict[str, Any] = {
            "run": run["run"],
            "dataset": run["dataset"],
            "condition": run.get("condition") or "",
            "variant": run.get("variant") or "",
            "n_genes_clustered": int(memberships.shape[0]),
            "n_noise": int((~eligible).sum()),
            "m": float(choice["m"]),
            "m_method": choice["method"],
            "n_clusters": int(chosen["n_clusters"]),
            "n_clusters_method": chosen["method"],
            "recommended_n_clusters": int(chosen["recommended"]),
            "structure_p_value": float(chosen.get("structure", {}).get("p_value", np.nan)),
            "min_jaccard": float(np.nanmin(np.nanmean(jaccard, axis=0)))
            if jaccard.shape[0]
            else np.nan,
            "mean_start_agreement": float(consensus["start_agreement"].mean()),
            "flags": flags,
        }
        for threshold in thresholds:
            core = (memberships >= threshold) & eligible[:, None]
            if len(names) == 1:
                core[:] = False
            row[f"core_genes_{threshold:g}"] = int(core.any(axis=1).sum())
            row[f"core_sizes_{threshold:g}"] = ";".join(
                f"{name}={int(size)}" for name, size in zip(names, core.sum(axis=0), strict=True)
            )
        rows.append(row)
    write_table(pd.DataFrame(rows), out_tsv)
    for row in rows:
        _log.info("%s", _run_line(row), extra=_PROGRESS)


#: Columns of ``summary.tsv`` that :func:`run_lines` reads.
RUN_LINE_COLUMNS = (
    "run",
    "n_genes_clustered",
    "n_noise",
    "m",
    "m_method",
    "n_clusters",
    "n_clusters_method",
    "recommended_n_clusters",
    "flags",
)


def _run_line(row: Mapping[str, Any]) -> str:
    flags = str(row["flags"]).replace(",", ", ")
    return (
        f"run {row['run']}: m = {float(row['m']):.3f} ({row['m_method']}), "
        f"c = {int(row['n_clusters'])} ({row['n_clusters_method']}, recommended "
        f"{int(row['recommended_n_clusters'])}), {int(row['n_genes_clustered'])} genes of which "
        f"{int(row['n_noise'])} noise, flags: {flags or 'none'}"
    )


def run_lines(summary_tsv: PathLike) -> list[str]:
    """One line per run of ``summary.tsv`` (:func:`summarise_runs`): its m, c and quality flags.

    For the end of a workflow run, e.g. ``run demo: m = 1.162 (formula), c = 4 (auto,
    recommended 4), 300 genes of which 12 noise, flags: none`` (no ``gloam:`` prefix).
    Reads the file only; an empty summary gives no line.

    Raises
    ------
    GloamError
        If the file cannot be read or lacks a column of :data:`RUN_LINE_COLUMNS`.
    """
    try:
        table = pd.read_csv(summary_tsv, sep="\t", dtype=str, keep_default_na=False)
    except (OSError, pd.errors.ParserError, pd.errors.EmptyDataError) as error:
        raise GloamError(
            f"run summary {str(summary_tsv)!r} cannot be read ({error}); rerun the workflow"
        ) from error
    missing = [name for name in RUN_LINE_COLUMNS if name not in table.columns]
    if missing:
        raise GloamError(
            f"run summary {str(summary_tsv)!r} lacks the column(s) {missing}; it was not "
            "written by this gloam: rerun the workflow's summary step"
        )
    return [_run_line(row) for row in table.to_dict("records")]


#: Columns of ``sensitivity.tsv`` (then those of :func:`gloam.compare.sensitivity_summary`).
SENSITIVITY_KEYS = ("dataset", "condition", "reference", "run")
SENSITIVITY_COLUMNS = (
    *SENSITIVITY_KEYS,
    "n_clusters",
    "n_clusters_reference",
    "n_matched",
    "n_unmatched",
    "mean_correlation",
    "min_correlation",
    "mean_jaccard",
    "min_jaccard",
    "ari",
    "n_shared_genes",
)


def _clustered_run(consensus: Mapping[str, np.ndarray]) -> Any:
    """A run's consensus as :class:`gloam.compare.ClusteredRun` (times of its columns too)."""
    from gloam.compare import ClusteredRun

    genes = consensus["genes"].astype(str)
    return ClusteredRun(
        centroids=consensus["centroids"],
        memberships=pd.DataFrame(
            consensus["memberships"], index=genes, columns=consensus["cluster_names"].tolist()
        ),
        times=np.asarray(consensus["times"], dtype=np.float64) if "times" in consensus else None,
        noise=pd.Series(consensus["noise"], index=genes),
    )


#: Columns of ``results/matches.tsv``: clusters of different datasets matched.
MATCH_COLUMNS = (
    "variant",
    "condition",
    "run_a",
    "run_b",
    "cluster_a",
    "cluster_b",
    "correlation",
    "jaccard",
    "n_core_a",
    "n_core_b",
    "n_core_both",
    "ari",
    "n_shared_genes",
)


def summarise_matches(
    runs: Sequence[Mapping[str, Any]], consensus_files: Sequence[PathLike], out_tsv: PathLike
) -> None:
    """Clusters of different datasets matched, for every pair run under the same settings.

    Runs of two datasets with the same settings variant and condition are matched with
    :func:`gloam.compare.match_clusters`: clusters paired one-to-one by centroid correlation
    (Hungarian method, ``scipy.optimize.linear_sum_assignment``), on the shared time points
    when the datasets were sampled at different times (centroids interpolated in time, see
    :func:`gloam.compare.centroid_correlation`), with the core-gene Jaccard of each pair and the
    adjusted Rand index of the whole partitions on the genes both clustered. Runs whose
    columns are several conditions side by side are matched only when their columns are the
    same. One row per cluster pair (and per cluster left without a partner);
    :data:`MATCH_COLUMNS`. With one dataset the file holds the header alone.
    """
    from gloam.compare import match_clusters

    groups: dict[tuple[str, str], list[tuple[str, str, Any, tuple[str, ...]]]] = {}
    for run, path in zip(runs, consensus_files, strict=True):
        key = (str(run.get("variant") or ""), str(run.get("condition") or ""))
        consensus = read_consensus(path)
        # Several conditions side by side: matched only to runs with the same columns.
        several = len(set(consensus["conditions"].astype(str).tolist())) > 1
        columns = tuple(consensus["columns"].astype(str).tolist()) if several else ()
        groups.setdefault(key, []).append(
            (str(run["dataset"]), str(run["run"]), _clustered_run(consensus), columns)
        )
    tables = []
    for (variant, condition), members in groups.items():
        for index, (dataset_a, run_a, clustered_a, side_a) in enumerate(members):
            for dataset_b, run_b, clustered_b, side_b in members[index + 1 :]:
                if dataset_a == dataset_b:
                    continue
                if side_a != side_b:
                    _log.info(
                        "matches: %s and %s not matched: their columns are several conditions "
                        "that differ",
                        run_a,
                        run_b,
                    )
                    continue
                same_columns = bool(side_a)
                try:
                    match = match_clusters(
                        clustered_a.centroids,
                        clustered_b.centroids,
                        clustered_a.memberships,
                        clustered_b.memberships,
                        times_a=None if same_columns else clustered_a.times,
                        times_b=None if same_columns else clustered_b.times,
                        noise_a=clustered_a.noise,
                        noise_b=clustered_b.noise,
                    )
                except GloamError as error:
                    _log.info("matches: %s and %s not matched: %s", run_a, run_b, error)
                    continue
                keys = {"variant": variant, "condition": condition, "run_a": run_a, "run_b": run_b}
                table = match.table.assign(**keys)
                table["ari"] = match.ari
                table["n_shared_genes"] = match.n_shared_genes
                tables.append(table)
                _log.info(
                    "matches: %s and %s: %d cluster pair(s), ARI %.2f on %d shared genes",
                    run_a,
                    run_b,
                    int(match.table["correlation"].notna().sum()),
                    match.ari,
                    match.n_shared_genes,
                )
    result = (
        pd.concat(tables, ignore_index=True)[list(MATCH_COLUMNS)]
        if tables
        else pd.DataFrame(columns=list(MATCH_COLUMNS))
    )
    write_table(result, out_tsv)
    if not tables:
        _log.info("matches: fewer than two datasets under the same settings; header only")


def summarise_sensitivity(
    runs: Sequence[Mapping[str, Any]], consensus_files: Sequence[PathLike], out_tsv: PathLike
) -> None:
    """How much the clusters of one dataset change across its settings variants.

    Runs of the same dataset (and condition) are matched to its reference run, the one
    without a variant (else the first), with :func:`gloam.compare.sensitivity_summary`:
    clusters paired by centroid correlation (Hungarian method), the core-gene Jaccard of each
    pair and the adjusted Rand index of the whole partitions on shared genes. One row per
    other run; :data:`SENSITIVITY_COLUMNS`. Datasets run under one setting only give no row
    (the file then holds the header alone).
    """
    from gloam.compare import sensitivity_summary

    groups: dict[tuple[str, str], list[tuple[Mapping[str, Any], PathLike]]] = {}
    for run, path in zip(runs, consensus_files, strict=True):
        key = (str(run["dataset"]), str(run.get("condition") or ""))
        groups.setdefault(key, []).append((run, path))
    tables = []
    for (dataset, condition), members in groups.items():
        if len(members) < 2:
            continue
        clustered = {str(run["run"]): _clustered_run(read_consensus(path)) for run, path in members}
        reference = next(
            (str(run["run"]) for run, _ in members if not run.get("variant")),
            str(members[0][0]["run"]),
        )
        table = sensitivity_summary(clustered, reference=reference).reset_index()
        table.insert(0, "reference", reference)
        table.insert(0, "condition", condition)
        table.insert(0, "dataset", dataset)
        tables.append(table)
    result = (
        pd.concat(tables, ignore_index=True)
        if tables
        else pd.DataFrame(columns=list(SENSITIVITY_COLUMNS))
    )
    write_table(result, out_tsv)
    if tables:
        _log.info(
            "sensitivity: %d run(s) matched to the reference run of their dataset (%d dataset(s) "
            "with settings variants)",
            len(result),
            len(tables),
        )
    else:
        _log.info("sensitivity: no dataset was run under more than one setting; header only")


# ------------------------------------------------------------------ conditions compared

#: What the folder of a comparison holds when the conditions were compared (otherwise only
#: ``selection.json``; see :func:`run_comparison`).
COMPARISON_FILES_WHEN_COMPARED = (
    "selection.json",
    "responses.tsv",
    "transitions.tsv",
    "centroids.tsv",
    "validity.tsv",
    "genesets",
    "transitions.png",
    "transitions.pdf",
    "transitions.svg",
)
#: Columns of ``transitions.tsv``.
TRANSITION_COLUMNS = (
    "condition_a",
    "response_a",
    "condition_b",
    "response_b",
    "n_genes",
    "n_changed",
)


def _condition_test(prepared: PathLike, gene_report: PathLike, fdr: float) -> tuple[Any, str]:
    """The interaction test of the prepared genes (from the preparation's gene report) and
    their per-condition effect sizes; or None and the reason there is nothing to compare."""
    from gloam.prepare import LOG_MEAN_LAYER

    data = read_prepared(prepared)
    report = pd.read_csv(gene_report, sep="\t", dtype={"gene": str}, float_precision="round_trip")
    return _condition_test_of(
        np.asarray(data.var_names, dtype=str),
        np.asarray(data.layers[LOG_MEAN_LAYER], dtype=np.float64).T,
        data.obs["condition"].astype(str).to_numpy(),
        data.obs["time"].to_numpy(dtype=np.float64),
        report,
        fdr,
    )


def _condition_test_of(
    genes: np.ndarray,
    log_means: np.ndarray,
    conditions: np.ndarray,
    times: np.ndarray,
    gene_report: pd.DataFrame,
    fdr: float,
) -> tuple[Any, str]:
    """:func:`_condition_test` on data in memory: ``log_means`` (n_genes, n_columns), the
    condition and time of each column, and the preparation's gene report (column ``gene``)."""
    from gloam.compare import InteractionTest, condition_profiles

    genes = pd.Index(genes, name="gene")
    names = list(dict.fromkeys(conditions))
    if len(names) < 2:
        return None, f"the run holds one condition ({names[0]}): nothing to compare"
    report = gene_report.set_index("gene")
    if "interaction_fdr" not in report.columns:
        return None, (
            "no condition x time interaction test: it needs replicates in every condition and "
            "the same time points in each"
        )
    report = report.reindex(genes)
    profiles = condition_profiles(log_means, conditions, times, genes=genes)
    adjusted = report["interaction_fdr"].to_numpy(dtype=float)
    table = pd.DataFrame(
        {
            "fdr": adjusted,
            "significant": adjusted <= fdr,
            "effect_log2": report["interaction_effect_log2"].to_numpy(dtype=float),
            **{
                f"time_fdr_{c}": report[f"time_fdr_{c}"].to_numpy(dtype=float)
                for c in profiles.conditions
            },
        },
        index=genes,
    )
    extra = [
        name
        for name in report.columns
        if name.startswith(("mean_log2_", "log2_range_", "peak_time_"))
    ]
    test = InteractionTest(
        table=table, profiles=profiles, fdr_level=fdr, df_prior=float("nan"), notes=[]
    )
    return (test, report[extra]), ""


@dataclasses.dataclass(frozen=True)
class ComparisonInput:
    """The observations the comparison clusters: changing gene-condition profiles.

    Attributes
    ----------
    profiles : ndarray of shape (n_profiles, n_times)
        Every gene's mean log2 profile in each condition where it changes (gene-major, then
        condition order), z-scored on its own.
    flat : ndarray of shape (n_genes, n_conditions), bool
        Profiles left out (:func:`gloam.compare.flat_profiles`).
    m : float
        Fuzzifier for ``profiles`` (Schwaemmle & Jensen 2010, from their size).
    """

    profiles: np.ndarray
    flat: np.ndarray
    m: float


#: Fewest changing gene-condition profiles the comparison clusters.
MIN_COMPARISON_PROFILES = 10


def _comparison_input_of(test: Any, fdr: float, min_log2_range: float) -> ComparisonInput:
    """The changing profiles of an interaction test's condition profiles, and their m."""
    from gloam.compare import flat_profiles
    from gloam.fuzzifier import schwaemmle_jensen_m
    from gloam.prepare import zscore_rows

    cube = test.profiles.values
    n_times = cube.shape[2]
    flat = flat_profiles(test.profiles, test.table, min_log2_range, fdr)
    changing, _, _ = zscore_rows(cube.reshape(-1, n_times)[~flat.ravel()])
    n_rows = changing.shape[0]
    m = schwaemmle_jensen_m(n_rows, n_times) if n_rows >= MIN_COMPARISON_PROFILES else 2.0
    return ComparisonInput(profiles=changing, flat=flat, m=float(m))


def comparison_input(prepared: Any, fdr: float, min_log2_range: float) -> ComparisonInput | None:
    """What the scan jobs cluster for the comparison of conditions at each c, from a
    :class:`gloam.prepare.PreparedData` in memory; None when the run cannot compare (one
    condition, no interaction test, or fewer than :data:`MIN_COMPARISON_PROFILES` changing
    profiles: the comparison job then says why)."""
    found, _ = _condition_test_of(
        prepared.log_means.index.to_numpy(dtype=str),
        prepared.log_means.to_numpy(dtype=np.float64),
        prepared.columns.loc[prepared.log_means.columns, "condition"].astype(str).to_numpy(),
        prepared.columns.loc[prepared.log_means.columns, "time"].to_numpy(dtype=np.float64),
        prepared.gene_report,
        fdr,
    )
    if found is None:
        return None
    result = _comparison_input_of(found[0], fdr, min_log2_range)
    if result.profiles.shape[0] < MIN_COMPARISON_PROFILES:
        return None
    return result


def run_comparison(
    prepared: PathLike,
    gene_report: PathLike,
    scans: Sequence[PathLike],
    scan_settings: Mapping[str, Any],
    selection_settings: Mapping[str, Any],
    cluster_numbers: Sequence[int],
    seed: int,
    *,
    fdr: float,
    min_log2_range: float,
    prefix: str,
    structure_json: PathLike | None = None,
    out_dir: PathLike,
) -> None:
    """Compare the conditions of a run: shared responses, transitions and changed genes.

    Every gene's mean profile in each condition, z-scored on its own, is one observation
    (profiles that do not change in a condition are ``flat`` there: log2 range below
    ``min_log2_range`` or change over time not significant at ``fdr``). The shared responses
    are chosen as a run's clusters are: the changing gene-condition profiles are clustered at
    every c of ``cluster_numbers`` (:func:`gloam.partition.solve_partition`, genes resampled
    for robustness, m from Schwaemmle & Jensen 2010 for their size; the run's scan jobs do
    this, and ``scans`` are their files, :func:`run_scan`), tested for structure
    and judged by :func:`gloam.validity.judge_n_clusters`; the largest c that passes is
    used. Every gene-condition then gets memberships against those centroids
    (:func:`gloam.compare.shared_responses`), and a gene has *changed* when its condition x
    time interaction FDR (from the preparation) is at most ``fdr`` and its top response
    differs between conditions (Gelman & Stern 2006: a difference is tested directly).

    Writes the folder ``out_dir`` whole or not at all. ``selection.json`` is always there:
    ``compared`` (bool), ``reason`` and, when compared, ``n_clusters``, ``m``,
    ``conditions``, ``n_profiles_changing``, ``n_profiles_flat``, ``fdr``,
    ``min_log2_range``, ``structure``, ``status_counts`` and ``notes``. When the conditions
    were compared: ``responses.tsv`` (``gene``, ``status``, ``changed``,
    ``interaction_fdr``, ``interaction_effect_log2``, per condition ``<c>``:
    ``response_<c>``, ``membership_<c>``, ``<c>_C1`` ... ``<c>_noise``, ``mean_log2_<c>``,
    ``log2_range_<c>``, ``peak_time_<c>``), ``transitions.tsv`` (:data:`TRANSITION_COLUMNS`,
    the first condition against each other one), ``centroids.tsv`` (shared responses x time
    points, z-scores), ``validity.tsv`` (the judged scan), ``genesets/`` (a GMT of the
    changed genes, one list per set, ``background.txt``: every gene compared) and the
    transitions figure of the first pair, ``transitions.png``/``.pdf``/``.svg``. A run with
    one condition, without replicates or without shared responses gets ``selection.json``
    alone, with the reason.
    """
    with atomic_directory(out_dir) as staging:
        record = _compare_into(
            staging,
            prepared,
            gene_report,
            scans,
            scan_settings,
            selection_settings,
            cluster_numbers,
            seed,
            fdr=fdr,
            min_log2_range=min_log2_range,
            prefix=prefix,
            structure_json=structure_json,
        )
        _write_json(record, staging / "selection.json")
    if record["compared"]:
        counts = record["status_counts"]
        _log.info(
            "conditions compared (%s): %d shared responses (m = %.3f): %s; genes by status: %s",
            ", ".join(record["conditions"]),
            record["n_clusters"],
            record["m"],
            record["reason"],
            ", ".join(f"{k} {v}" for k, v in counts.items()),
            extra=_PROGRESS,
        )
    else:
        _log.info("conditions not compared: %s", record["reason"], extra=_PROGRESS)


def _comparison_scans(
    scans: Sequence[PathLike], n_profiles: int, m: float
) -> dict[int, tuple[dict[str, Any], np.ndarray]]:
    """c -> (metrics, centroids) of the comparison's clustering in each scan file
    (:func:`_comparison_at`); a file made on other profiles (their number or m differ from
    the preparation's) is refused with the fix."""
    found = {}
    for path in scans:
        data = _load_npz(path, "scan file")
        if "comparison_metrics" not in data:
            continue
        metrics = json.loads(str(data["comparison_metrics"]))
        if int(data["comparison_n_profiles"]) != n_profiles or float(metrics["m"]) != m:
            raise GloamError(
                f"scan file {str(path)!r} clustered {int(data['comparison_n_profiles'])} "
                f"gene-condition profiles at m = {float(metrics['m']):.3f}, the preparation "
                f"gives {n_profiles} at m = {m:.3f}: delete the run's scan folder and run again"
            )
        found[int(metrics["n_clusters"])] = (metrics, data["comparison_centroids"])
    return found


def _compare_into(
    out: Path,
    prepared: PathLike,
    gene_report: PathLike,
    scans: Sequence[PathLike],
    scan_settings: Mapping[str, Any],
    selection_settings: Mapping[str, Any],
    cluster_numbers: Sequence[int],
    seed: int,
    *,
    fdr: float,
    min_log2_range: float,
    prefix: str,
    structure_json: PathLike | None = None,
) -> dict[str, Any]:
    """The work of :func:`run_comparison`; returns the ``selection.json`` record."""
    from gloam.compare import (
        changed_gene_sets,
        plot_transitions,
        shared_responses,
        transition_table,
    )
    from gloam.consensus import order_clusters_by_peak_time
    from gloam.io import write_gmt, write_lines
    from gloam.plots import save_figure
    from gloam.validity import recommended_n_clusters

    selection = {**_SELECTION_DEFAULTS, **selection_settings}
    scan = {**_SCAN_DEFAULTS, **scan_settings}
    found, why_not = _condition_test(prepared, gene_report, fdr)
    if found is None:
        return {"compared": False, "reason": why_not}
    test, effects = found
    profiles = test.profiles
    cube = profiles.values
    observations = _comparison_input_of(test, fdr, min_log2_range)
    changing, flat, m = observations.profiles, observations.flat, observations.m
    n_rows = changing.shape[0]
    numbers = sorted(int(c) for c in cluster_numbers if 2 <= int(c) < n_rows)
    if n_rows < MIN_COMPARISON_PROFILES or not numbers:
        return {
            "compared": False,
            "reason": f"only {n_rows} gene-condition profiles change over time (at least "
            f"{MIN_COMPARISON_PROFILES} and more than the smallest scanned c are needed)",
        }
    _log.info(
        "read %s: %d genes in %d conditions (%s); %d of %d gene-condition profiles change over "
        "time; m = %.3f for them (Schwaemmle & Jensen 2010); c = %s",
        prepared,
        cube.shape[0],
        len(profiles.conditions),
        ", ".join(profiles.conditions),
        n_rows,
        int(flat.size),
        m,
        ", ".join(str(c) for c in numbers),
    )
    found_at = _comparison_scans(scans, n_rows, m)
    missing = [c for c in numbers if c not in found_at]
    if missing:
        raise GloamError(
            f"no scan file holds the comparison's clustering at c = {missing}; the scan files "
            "were made before this preparation: delete the run's scan folder and run again"
        )
    rows = [found_at[c][0] for c in numbers]
    centroids_at = {c: found_at[c][1] for c in numbers}
    structure = read_structure(structure_json, "comparison", changing, m, selection, seed)
    judged = _judgement(structure, pd.DataFrame(rows), selection)
    _log_judgement(structure, judged, selection)
    chosen = recommended_n_clusters(judged)
    judged["used"] = judged["n_clusters"] == chosen
    write_table(judged, out / "validity.tsv")
    if chosen < 2:
        return {
            "compared": False,
            "reason": "the changing gene-condition profiles show no shared responses that pass "
            f"the criteria (structure p = {structure.p_value:.3g}); see validity.tsv",
            "structure": structure.to_dict(),
        }
    reason = str(judged.loc[judged["recommended"], "reason"].iloc[0])
    centroids = centroids_at[chosen]
    centroids = centroids[order_clusters_by_peak_time(centroids, profiles.times, None)]
    shared = shared_responses(
        test,
        centroids=centroids,
        m=m,
        noise="flat_profile" if bool(scan["noise_class"]) else "none",
        min_log2_range=min_log2_range,
        fdr=fdr,
    )
    responses = shared.table.copy()
    responses.insert(2, "interaction_effect_log2", test.table["effect_log2"])
    responses = responses.join(effects)
    responses.index.name = "gene"
    first = profiles.conditions[0]
    transitions = []
    gene_sets: dict[str, tuple[str, list[str]]] = {}
    background: list[str] = []
    for other in profiles.conditions[1:]:
        everything = transition_table(shared, first, other)
        changed = transition_table(shared, first, other, changed_only=True)
        long = everything.stack().rename("n_genes").reset_index()
        long.columns = ["response_a", "response_b", "n_genes"]
        long["n_changed"] = changed.stack().to_numpy()
        long.insert(0, "condition_a", first)
        long.insert(2, "condition_b", other)
        transitions.append(long[list(TRANSITION_COLUMNS)])
        sets, background = changed_gene_sets(shared, first, other, prefix=prefix)
        gene_sets.update(sets)
        if other == profiles.conditions[1]:
            drawing = plot_transitions(
                everything, changed, centroids=shared.centroids, times=shared.times, fdr=fdr
            )
            save_figure(drawing, *(out / f"transitions.{kind}" for kind in ("png", "pdf", "svg")))
    write_table(responses.reset_index(), out / "responses.tsv")
    write_table(pd.concat(transitions, ignore_index=True), out / "transitions.tsv")
    centroid_table = pd.DataFrame(
        shared.centroids,
        index=pd.Index(shared.clusters, name="cluster"),
        columns=[f"t{np.format_float_positional(t, trim='-')}" for t in shared.times],
    )
    write_table(centroid_table, out / "centroids.tsv", index=True)
    sets_dir = out / "genesets"
    sets_dir.mkdir()
    write_gmt(gene_sets, sets_dir / f"{prefix}_changed.gmt")
    for name, (_, genes) in gene_sets.items():
        write_lines(genes, sets_dir / f"{name}.txt")
    write_lines(background, sets_dir / "background.txt")
    counts = responses["status"].value_counts()
    return {
        "compared": True,
        "reason": reason,
        "n_clusters": chosen,
        "m": m,
        "conditions": list(profiles.conditions),
        "n_profiles_changing": n_rows,
        "n_profiles_flat": int(flat.sum()),
        "fdr": fdr,
        "min_log2_range": min_log2_range,
        "structure": structure.to_dict(),
        "status_counts": {str(k): int(v) for k, v in counts.items()},
        "notes": list(shared.notes),
    }
