"""The ``gloam`` command: one subcommand per pipeline stage, for use outside Snakemake.

Each subcommand is a pair of functions: ``_add_<name>(subparsers)`` declares its options
and ``_run_<name>(args)`` does the work; :data:`SUBCOMMANDS` lists the declaring functions.
A :class:`~gloam.errors.GloamError` from any subcommand becomes one line on stderr and exit
status 2, and Ctrl-C one line and exit status 130, never a traceback.
"""

from __future__ import annotations

import argparse
import contextlib
import itertools
import math
import sys
import warnings
from collections.abc import Callable, Sequence
from pathlib import Path

from gloam import __version__
from gloam.errors import GloamError, report_and_exit, show_warning

__all__ = [
    "main",
    "build_parser",
    "PREPARE_OUTPUTS",
    "RUN_LOCK",
    "RESULTS_LOCK",
    "INTERRUPTED_EXIT_CODE",
]

#: Exit status after Ctrl-C (128 + SIGINT, the shell's convention).
INTERRUPTED_EXIT_CODE = 130

#: File names written by ``gloam prepare`` inside ``--out-dir``.
PREPARE_OUTPUTS = {
    "h5ad_path": "prepared.h5ad",
    "tsv_path": "prepared.tsv",
    "report_path": "gene_report.tsv",
    "summary_path": "summary.tsv",
}

# Command-line option -> preparation setting (same name with "-" for "_").
_PREPARE_SETTINGS = (
    (
        "--normalisation",
        str,
        "median_ratio | cpm | none (default: median_ratio for counts, none for log)",
    ),
    ("--pseudocount", float, "added before log2 for counts, > 0 (default 1)"),
    ("--max-missing-fraction", float, "drop genes missing in more than this share (0.25)"),
    (
        "--min-expression",
        float,
        "expression floor: CPM for counts (default 1), input units for log data (default off)",
    ),
    ("--min-samples-expressed", int, "samples at or above the floor a gene needs (2; 0 = off)"),
    (
        "--gene-selection",
        str,
        "responsive (test for change over time, the default) | all (no test)",
    ),
    ("--fdr", float, "FDR level of the test for change over time (0.05)"),
    ("--min-log2-range", float, "smallest log2 range of a responsive gene's profile (1)"),
    ("--min-sd", float, "drop genes whose profile SD (log scale, ddof=1) is below this (0)"),
    ("--top-variable", int, "keep only this many most variable genes (default: all)"),
    ("--replicate-summary", str, "mean | median (default mean)"),
    ("--conditions", str, "concatenate | separate (default concatenate)"),
    ("--condition", str, "the condition to prepare with --conditions separate"),
)


# ------------------------------------------------------------------ checks shared by subcommands


def _check_option(option: str, value: object, allowed: bool, rule: str, example: str) -> None:
    """Refuse ``value`` of ``option`` unless ``allowed``; ``rule`` says what is accepted."""
    if not allowed:
        raise GloamError(
            f"{option} {value} is not allowed: it must be {rule}; give e.g. {option} {example}"
        )


def _check_seed(seed: int, example: str) -> None:
    """Refuse a negative ``--seed`` (NumPy's generators take whole numbers >= 0 only)."""
    _check_option("--seed", seed, seed >= 0, "a whole number >= 0", example)


def _check_out_dir(out_dir: Path) -> None:
    """Refuse an ``--out-dir`` that is, or lies inside, an existing file."""
    for path in (out_dir, *out_dir.parents):
        if path.exists():
            if not path.is_dir():
                where = "is a file" if path == out_dir else f"lies inside the file {str(path)!r}"
                raise GloamError(
                    f"--out-dir {str(out_dir)!r} {where}, not a directory; choose a directory "
                    "path (a new or an existing folder)"
                )
            return


# ------------------------------------------------------------------ subcommands


def _add_prepare(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "prepare",
        allow_abbrev=False,  # a shortened option name is refused, never guessed
        help="validate, normalise, filter and standardise an expression matrix",
        description=(
            "Turn a genes x samples matrix and a sample sheet into standardised genes x "
            "time-point profiles. Writes prepared.h5ad, prepared.tsv, gene_report.tsv and "
            "summary.tsv into --out-dir (all or nothing)."
        ),
    )
    parser.add_argument(
        "--matrix", required=True, type=Path, help="genes x samples: .tsv/.csv[.gz] or .h5ad"
    )
    parser.add_argument(
        "--samples",
        required=True,
        type=Path,
        help="sample sheet .tsv/.csv: sample, time[, replicate, condition]",
    )
    parser.add_argument(
        "--value-type", required=True, help="counts (raw RNA-seq counts) or log (log-scale values)"
    )
    parser.add_argument("--out-dir", required=True, type=Path, help="directory for the results")
    parser.add_argument("--layer", help="for .h5ad input: read this layer instead of X")
    parser.add_argument(
        "--settings",
        type=Path,
        help="YAML file with a mapping of preparation settings; command-line options win",
    )
    for option, kind, text in _PREPARE_SETTINGS:
        parser.add_argument(option, type=kind, help=text)
    parser.set_defaults(run=_run_prepare)


def _read_settings_file(path: Path) -> dict[str, object]:
    import yaml

    if not path.is_file():
        raise GloamError(f"settings file {str(path)!r} does not exist; check the path")
    try:
        loaded = yaml.safe_load(path.read_text(encoding="utf-8"))
    except yaml.YAMLError as error:
        raise GloamError(f"settings file {str(path)!r} is not valid YAML ({error})") from error
    if loaded is None:
        return {}
    if not isinstance(loaded, dict):
        raise GloamError(
            f"settings file {str(path)!r} must hold a mapping of setting: value, "
            f"not {type(loaded).__name__}"
        )
    return loaded


def _run_prepare(args: argparse.Namespace) -> int:
    from gloam.io import read_matrix, read_sample_sheet
    from gloam.prepare import prepare_expression, settings_from_mapping, write_prepared

    _check_out_dir(args.out_dir)
    mapping = _read_settings_file(args.settings) if args.settings is not None else {}
    mapping["value_type"] = args.value_type
    for option, _kind, _text in _PREPARE_SETTINGS:
        key = option[2:].replace("-", "_")
        value = getattr(args, key)
        if value is not None:
            mapping[key] = value
    settings = settings_from_mapping(mapping)
    matrix = read_matrix(args.matrix, layer=args.layer)
    sheet = read_sample_sheet(args.samples)
    prepared = prepare_expression(matrix, sheet, settings)
    write_prepared(prepared, **{key: args.out_dir / name for key, name in PREPARE_OUTPUTS.items()})
    n_genes, n_columns = prepared.zscores.shape
    print(
        f"gloam: prepared {n_genes} of {matrix.shape[0]} genes x {n_columns} columns "
        f"-> {args.out_dir}"
    )
    return 0


def _add_demo(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "demo",
        allow_abbrev=False,  # a shortened option name is refused, never guessed
        help="write the invented cold-response demo data (counts, sample sheet, truth)",
        description=(
            "Simulate the built-in demo: leaves of an invented alpine herb moved to 4 degC, "
            "sampled at 10 uneven times over 48 h in replicates. Writes counts.tsv, "
            "samples.tsv and truth.tsv (the planted response of every gene) into --out-dir; "
            "an invented mutant line (frl1) with some changed responses is sampled too."
        ),
    )
    parser.add_argument("--out-dir", type=Path, default=Path("demo_data"), help="(demo_data)")
    parser.add_argument("--seed", type=int, default=20261201, help="generator seed (20261201)")
    parser.add_argument("--n-genes", type=int, default=3000, help="number of genes (3000)")
    parser.add_argument("--n-replicates", type=int, default=3, help="replicates per time (3)")
    parser.add_argument(
        "--no-mutant",
        action="store_true",
        help="only the wild type (by default an invented mutant line, frl1, is sampled too)",
    )
    parser.set_defaults(run=_run_demo)


def _run_demo(args: argparse.Namespace) -> int:
    from gloam.demo import write_demo

    _check_out_dir(args.out_dir)
    _check_seed(args.seed, "20261201")
    paths = write_demo(
        args.out_dir,
        seed=args.seed,
        n_genes=args.n_genes,
        n_replicates=args.n_replicates,
        with_mutant=not args.no_mutant,
    )
    print(f"gloam: demo written: {', '.join(str(path) for path in paths)}")
    return 0


def _cluster_range(text: str) -> list[int]:
    low, _, high = text.partition("-")
    try:
        numbers = list(range(int(low), int(high or low) + 1))
    except ValueError:
        numbers = []
    if not numbers or numbers[0] < 2:
        raise GloamError(
            f"--clusters {text!r} is not a range of cluster numbers; write e.g. 2-10 or 5 "
            "(each at least 2)"
        )
    return numbers


def _add_cluster(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "cluster",
        allow_abbrev=False,  # a shortened option name is refused, never guessed
        help="cluster a prepared matrix: fuzzifier, scan over c, selection, consensus, exports",
        description=(
            "Run every clustering stage on one prepared.h5ad (from `gloam prepare`) in this "
            "process, writing the same files as the workflow's results/<run>/ folder into "
            "--out-dir. For many datasets or a cluster use the workflow (`gloam run`)."
        ),
    )
    parser.add_argument("--prepared", required=True, type=Path, help="prepared.h5ad")
    parser.add_argument("--out-dir", required=True, type=Path, help="directory for the results")
    parser.add_argument("--clusters", default="2-10", help="range of c to scan (2-10)")
    parser.add_argument(
        "--n-clusters",
        default="auto",
        help="c to use: auto (the largest c that passes every criterion) or a number",
    )
    parser.add_argument("--m", default="auto", help="fuzzifier: auto | randomised | number > 1")
    parser.add_argument("--n-starts", type=int, default=20, help="random starts per c (20)")
    parser.add_argument("--tol", type=float, default=1e-4, help="convergence tolerance (1e-4)")
    parser.add_argument("--max-iter", type=int, default=500, help="iteration cap (500)")
    parser.add_argument(
        "--n-resamples", type=int, default=20, help="resamples per c for robustness (20)"
    )
    parser.add_argument("--seed", type=int, default=1, help="seed of every random choice (1)")
    parser.add_argument(
        "--thresholds", default="0.5,0.7", help="core membership thresholds, comma-separated"
    )
    parser.add_argument("--time-unit", default="h", help="unit of the time axis (h)")
    parser.set_defaults(run=_run_cluster)


#: c of the randomised-data check of m in ``gloam cluster`` (fewer when the genes are fewer).
_CLUSTERS_FOR_M_CHECK = 6


def _fixed_n_clusters(text: str) -> str | int:
    """``--n-clusters``: ``"auto"`` or a whole number >= 2."""
    if text == "auto":
        return text
    try:
        number = int(text)
    except ValueError:
        number = 0
    _check_option(
        "--n-clusters", repr(text), number >= 2, "auto or a whole number >= 2", "auto or 5"
    )
    return number


def _fuzzifier_setting(text: str) -> str | float:
    """``--m``: ``"auto"``, ``"randomised"`` or a finite number > 1."""
    if text in ("auto", "randomised"):
        return text
    try:
        number = float(text)
    except ValueError:
        number = math.nan
    _check_option(
        "--m",
        repr(text),
        math.isfinite(number) and number > 1,
        "auto, randomised or a number > 1",
        "auto or 1.5",
    )
    return number


def _threshold_list(text: str) -> list[float]:
    """``--thresholds``: comma-separated core membership thresholds, each in (0, 1]."""
    from gloam.schema import check_thresholds

    try:
        thresholds = [float(value) for value in text.split(",") if value.strip()]
    except ValueError:
        raise GloamError(
            f"--thresholds {text!r} is not allowed: it must be comma-separated numbers in "
            "(0, 1]; give e.g. --thresholds 0.5,0.7"
        ) from None
    return list(check_thresholds(thresholds))


def _check_cluster_run_options(args: argparse.Namespace) -> None:
    """Refuse a bad ``--n-starts``, ``--tol``, ``--max-iter``, ``--seed`` or ``--time-unit``."""
    _check_option("--n-starts", args.n_starts, args.n_starts >= 1, "at least 1", "20")
    _check_option(
        "--tol",
        args.tol,
        math.isfinite(args.tol) and args.tol >= 0,
        "a finite number >= 0 (0 runs exactly --max-iter iterations)",
        "1e-4",
    )
    _check_option("--max-iter", args.max_iter, args.max_iter >= 1, "at least 1", "500")
    _check_option("--n-resamples", args.n_resamples, args.n_resamples >= 2, "at least 2", "20")
    _check_seed(args.seed, "1")
    _check_option(
        "--time-unit",
        repr(args.time_unit),
        bool(args.time_unit.strip()),
        "the unit of the time column, not empty",
        "h",
    )


def _run_cluster(args: argparse.Namespace) -> int:
    from gloam import logs, stages
    from gloam.artifacts import FIGURES
    from gloam.prepare import read_prepared, read_prepared_replicates

    # Every option is checked before anything is written, so a mistake leaves no files and
    # does not surface after minutes of work.
    _check_out_dir(args.out_dir)
    numbers = _cluster_range(args.clusters)
    fixed = _fixed_n_clusters(args.n_clusters)
    if fixed != "auto":
        numbers = sorted({*numbers, fixed})
    m = _fuzzifier_setting(args.m)
    thresholds = _threshold_list(args.thresholds)
    _check_cluster_run_options(args)
    zscores, columns = read_prepared(args.prepared)
    replicates, samples = read_prepared_replicates(args.prepared)
    n_genes = len(zscores)
    stages.check_genes_for_fuzzifier(n_genes)
    stages.check_clusters_fit_genes(max(numbers), n_genes)
    out = args.out_dir
    # Progress (one line per c as it finishes) and warnings on the terminal.
    with logs.console_logging(verbose=False):
        fuzzifier = {"m": m, "n_clusters_check": min(_CLUSTERS_FOR_M_CHECK, n_genes - 1)}
        chosen_m = stages.write_fuzzifier_choice(
            zscores, fuzzifier, args.seed, out / "fuzzifier.json", out / "fuzzifier_curve.tsv"
        )
        stages.write_scan_input(
            zscores,
            chosen_m,
            out / "scan_input.npz",
            columns=columns,
            replicates=replicates,
            samples=samples,
        )
        scan_settings = {
            "n_starts": args.n_starts,
            "tol": args.tol,
            "max_iter": args.max_iter,
            "init": "kmeans++",
            "precision": "fast",
            "n_resamples": args.n_resamples,
        }
        scans = [out / "scan" / f"c{c}.npz" for c in numbers]
        for index, (c, path) in enumerate(zip(numbers, scans, strict=True), start=1):
            with logs.progress(index, len(numbers)):
                stages.run_scan(out / "scan_input.npz", c, scan_settings, args.seed, path)
        stages.run_select(
            out / "scan_input.npz",
            out / "fuzzifier.json",
            scans,
            {"n_clusters": fixed},
            args.seed,
            out_validity=out / "validity.tsv",
            out_selection=out / "selection.json",
            out_consensus=out / "consensus.npz",
        )
        figures = out / "figures"

        def figures_drawn_by(writer: str) -> list[str]:
            return [
                name
                for name, figure in FIGURES.items()
                if figure.folder == "figures" and figure.writer == writer
            ]

        def figure(name: str) -> tuple[Path, Path, Path]:
            return tuple(figures / f"{name}.{suffix}" for suffix in ("png", "pdf", "svg"))

        stages.export_results(
            args.prepared,
            out / "consensus.npz",
            out / "fuzzifier.json",
            out / "fuzzifier_curve.tsv",
            out / "selection.json",
            out / "validity.tsv",
            {
                "seed": args.seed,
                "time_unit": args.time_unit,
                "fuzzifier": {"m": m},
                "scan": scan_settings,
            },
            memberships=out / "memberships.tsv",
            centroids=out / "centroids.tsv",
            clusters=out / "clusters.tsv",
            robustness=out / "robustness.tsv",
            h5ad=out / "gloam.h5ad",
            figures={name: figure(name) for name in figures_drawn_by("export")},
        )
        stages.export_core_genes(
            args.prepared,
            out / "consensus.npz",
            thresholds,
            args.time_unit,
            genesets=out / "genesets",
            figures={name: figure(name) for name in figures_drawn_by("core_genes")},
        )
    print(f"gloam: clustered -> {out}")
    return 0


def _add_run(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "run",
        allow_abbrev=False,  # a shortened option name is refused, never guessed
        help="run the Snakemake workflow (the demo unless the config says otherwise)",
        description=(
            "Run the gloam Snakemake workflow that ships with this gloam, from any folder: "
            "`gloam run --cores 2` runs the demo, or the config/config.yaml of the folder when "
            "there is one. Arguments after `--` go to Snakemake (e.g. -- --dry-run, -- --profile "
            "slurm: `local` and `slurm` name the profiles installed with gloam). Refused while "
            "another `gloam run` is active in the folder."
        ),
    )
    parser.add_argument(
        "--snakefile",
        type=Path,
        help="another workflow to run (default: the one installed with gloam)",
    )
    parser.add_argument(
        "--configfile",
        type=Path,
        help="config file (default: config/config.yaml of the working folder, if any)",
    )
    parser.add_argument("--cores", default="all", help="cores to use (all)")
    parser.add_argument("snakemake_args", nargs=argparse.REMAINDER, help="passed to Snakemake")
    parser.set_defaults(run=_run_workflow)


#: Lock file of an active ``gloam run``, inside Snakemake's folder of the working directory.
RUN_LOCK = Path(".snakemake") / "gloam-run.lock"

#: Lock file of an active ``gloam run`` inside the results folder it writes into (hidden, so
#: that no listing of results shows it; removed when the run ends).
RESULTS_LOCK = ".gloam-run.lock"

#: Snakemake options that run no job and touch no lock, so they may run beside an active run.
_READ_ONLY_OPTIONS = frozenset(
    {
        *("-n", "--dry-run", "--dryrun", "--lint", "--list-rules", "--report"),
        *("--dag", "--rulegraph", "--summary", "-S", "--detailed-summary", "-D"),
    }
)


def _option_value(arguments: Sequence[str], *names: str) -> str | None:
    """The value of the last of ``names`` in ``arguments`` (``--name value`` or ``--name=v``)."""
    found = None
    for index, argument in enumerate(arguments):
        for name in names:
            if argument == name and index + 1 < len(arguments):
                found = arguments[index + 1]
            elif argument.startswith(f"{name}="):
                found = argument.split("=", 1)[1]
    return found


def _process_alive(pid: int) -> bool:
    import os

    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # another user's process
        return True
    return True


def _acquire_run_lock(lock: Path, *, scope: str = "in this folder", fix: str = "") -> None:
    """Create ``lock`` for this process; refuse if a live ``gloam run`` holds it.

    A lock left by a run that was killed (its process is gone) is taken over. A lock from
    another machine cannot be checked, so it is respected. The lock holds ``<pid> <host>`` on
    its first line and the holder's working folder on the second.

    Parameters
    ----------
    lock : Path
        The lock file.
    scope : str
        Where the other run is active, for the message (``"in this folder"``).
    fix : str
        A further way out for the message (e.g. ``"give this run its own results_dir"``).
    """
    import os
    import socket

    host = socket.gethostname()
    try:
        lock.parent.mkdir(parents=True, exist_ok=True)
        for _ in range(2):
            try:
                descriptor = os.open(lock, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
            except FileExistsError:
                _refuse_if_held(lock, host, scope, fix)
                lock.unlink(missing_ok=True)  # left by a run that was killed
                continue
            with os.fdopen(descriptor, "w", encoding="utf-8") as handle:
                handle.write(f"{os.getpid()} {host}\n{Path.cwd()}\n")
            return
    except OSError as error:
        from gloam.io import no_space_error

        raise no_space_error(error, lock) or GloamError(
            f"cannot create the run lock {str(lock)!r} ({error.strerror or error}); make its "
            "folder writable for your user, or run from another folder"
        ) from error
    raise GloamError(f"cannot take the run lock {str(lock)!r}; delete it and start again")


def _refuse_if_held(lock: Path, host: str, scope: str, fix: str) -> None:
    """Refuse with one line when ``lock`` names a live process (or one on another machine)."""
    try:
        first, _, folder = lock.read_text(encoding="utf-8").partition("\n")
        pid_text, _, lock_host = first.strip().partition(" ")
        pid = int(pid_text)
    except (OSError, ValueError):
        return
    if pid > 0 and (lock_host != host or _process_alive(pid)):
        where = "" if lock_host == host else f" on {lock_host}"
        started = f", started in {folder.strip()!r}" if folder.strip() else ""
        raise GloamError(
            f"another gloam run (process {pid}{where}{started}) is active {scope}; wait for it "
            f"to end or stop it (Ctrl-C) before starting, unlocking or rerunning{fix}; if no "
            f"run is active, delete {str(lock)!r}"
        )


def _hold_run_lock(locks: contextlib.ExitStack, lock: Path, scope: str, fix: str) -> None:
    """Take ``lock`` (see :func:`_acquire_run_lock`) until ``locks`` closes."""
    _acquire_run_lock(lock, scope=scope, fix=fix)
    locks.callback(lock.unlink, missing_ok=True)


def _option_values(arguments: Sequence[str], *names: str) -> list[str] | None:
    """The values of the last of ``names`` in ``arguments``, an option taking one or more
    values (``--name v1 v2`` up to the next option, or ``--name=v``); None if absent."""
    found = None
    for index, argument in enumerate(arguments):
        if argument in names:
            found = list(itertools.takewhile(lambda value: not value.startswith("-"),
                                             arguments[index + 1 :]))  # fmt: skip
        elif any(argument.startswith(f"{name}=") for name in names if name.startswith("--")):
            found = [argument.split("=", 1)[1]]
    return found


def _results_folder(
    configfile: Path | None, arguments: Sequence[str], directory: Path
) -> Path | None:
    """The results folder the workflow will write into, as Snakemake will see the config.

    The config is the config file (or the last ``--configfile`` among ``arguments``, which
    Snakemake uses instead) with a ``--config results_dir=...`` on top; a relative folder is
    relative to ``directory``. None when the config has a mistake: the workflow's planning
    then refuses it with its own message before any job starts, so no result is written.
    """
    from gloam import planning

    try:
        files = _option_values(arguments, "--configfile", "--configfiles")
        config: dict[str, object] = {}
        for file in files if files is not None else [configfile] if configfile else []:
            config = planning.overlay(config, planning.read_config_file(file))
        for entry in _option_values(arguments, "--config", "-C") or []:
            key, equals, value = entry.partition("=")
            if key == "results_dir" and equals:
                config["results_dir"] = value
        value = planning.validated_config(config)["results_dir"]
        return (directory / planning.own_folder("results_dir", value, cwd=directory)).resolve()
    except GloamError:
        return None


def _run_snakemake(command: list[str]) -> int:
    """Run Snakemake in its own process group; Ctrl-C stops it cleanly, without a traceback.

    SIGINT, SIGTERM and SIGHUP sent to ``gloam run`` go to Snakemake and its local jobs once,
    as the terminal would send them; Snakemake then stops its jobs and leaves finished
    results in place. Returns Snakemake's exit status, or 130 after an interruption.
    """
    import os
    import signal
    import subprocess

    process = subprocess.Popen(command, process_group=0)
    received: list[int] = []

    def forward(number: int, _frame: object) -> None:
        received.append(number)
        try:
            os.killpg(process.pid, number)
        except ProcessLookupError:
            pass

    numbers = (signal.SIGINT, signal.SIGTERM, signal.SIGHUP)
    previous = {number: signal.signal(number, forward) for number in numbers}
    try:
        status = process.wait()
    finally:
        for number, handler in previous.items():
            signal.signal(number, handler)
    if received:
        print(
            "gloam: interrupted: Snakemake stopped its jobs; finished results are kept, and "
            "the same command continues the run",
            file=sys.stderr,
        )
        return 130
    return status


def _packaged_profiles(arguments: list[str]) -> list[str]:
    """``--profile local`` or ``--profile slurm``: the profiles installed with gloam, unless
    the folder holds a profile of that name."""
    from gloam.planning import PROFILES_DIR

    result = list(arguments)
    for index, argument in enumerate(result[:-1]):
        name = result[index + 1]
        if argument == "--profile" and not Path(name).exists() and (PROFILES_DIR / name).is_dir():
            result[index + 1] = str(PROFILES_DIR / name)
    return result


def _run_workflow(args: argparse.Namespace) -> int:
    from gloam import planning

    snakefile = args.snakefile if args.snakefile is not None else planning.SNAKEFILE
    if not snakefile.is_file():
        raise GloamError(
            f"workflow {str(snakefile)!r} not found; give --snakefile path/to/Snakefile, or "
            "leave it out to run the workflow installed with gloam"
        )
    extra = list(args.snakemake_args)
    extra = _packaged_profiles(extra[1:] if extra[:1] == ["--"] else extra)
    directory = Path(_option_value(extra, "--directory", "-d") or ".")
    configfile = args.configfile
    if configfile is None and (directory / "config" / "config.yaml").is_file():
        configfile = directory / "config" / "config.yaml"
    command = [sys.executable, "-m", "snakemake", "--snakefile", str(snakefile)]
    command += ["--cores", str(args.cores)]
    # Read here, so that a YAML mistake names its line and an empty file runs the defaults
    # (Snakemake refuses an empty config file).
    if configfile is not None and planning.read_config_file(configfile):
        command += ["--configfile", str(configfile.resolve())]
    command += extra
    if not _READ_ONLY_OPTIONS.isdisjoint(extra):
        return _run_snakemake(command)
    results = _results_folder(configfile, extra, directory)
    with contextlib.ExitStack() as locks:
        # One lock in the working folder (Snakemake's own state lives there), one in the
        # results folder: two runs from different folders must not share results either.
        _hold_run_lock(locks, directory / RUN_LOCK, "in this folder", "")
        if results is not None:
            _hold_run_lock(
                locks,
                results / RESULTS_LOCK,
                f"with the results folder {str(results)!r}",
                ", or give this run its own results_dir",
            )
        status = _run_snakemake(command)
    if status == 0 and results is not None:
        _print_run_lines(results / "summary.tsv")
    return status


def _print_run_lines(summary: Path) -> None:
    """One line per run of the finished workflow: its m, c and quality flags."""
    from gloam.stages import run_lines

    if summary.is_file():
        for line in run_lines(summary):
            print(f"gloam: {line}", file=sys.stderr)


#: One declaring function per subcommand; add a new subcommand by appending here.
SUBCOMMANDS: tuple[Callable[[argparse._SubParsersAction], None], ...] = (
    _add_prepare,
    _add_demo,
    _add_cluster,
    _add_run,
)


def build_parser() -> argparse.ArgumentParser:
    """The ``gloam`` argument parser with every subcommand."""
    parser = argparse.ArgumentParser(
        prog="gloam",
        allow_abbrev=False,
        description="Soft (fuzzy c-means) clustering of gene-expression time courses.",
    )
    parser.add_argument("--version", action="version", version=f"gloam {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for add in SUBCOMMANDS:
        add(subparsers)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``gloam`` console script; returns the exit status.

    User errors (:class:`~gloam.errors.GloamError`) and a full disk are printed as one line
    and end the process with status 2; Ctrl-C ends it with one line and status 130 (128 + SIGINT).
    """
    args = build_parser().parse_args(argv)
    with warnings.catch_warnings():
        warnings.showwarning = show_warning
        try:
            return int(args.run(args))
        except GloamError as error:
            report_and_exit(error)
        except Exception as error:
            from gloam.io import no_space_error

            # A full disk anywhere (a log, a cache, a writer outside gloam.io): one line too.
            problem = no_space_error(error)
            if problem is None:
                raise
            report_and_exit(problem)
        except KeyboardInterrupt:
            print("gloam: interrupted (Ctrl-C)", file=sys.stderr)
            raise SystemExit(INTERRUPTED_EXIT_CODE) from None


if __name__ == "__main__":
    sys.exit(main())
