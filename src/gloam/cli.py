"""The ``gloam`` command: one subcommand per pipeline stage, for use outside Snakemake.

Each subcommand is a pair of functions: ``_add_<name>(subparsers)`` declares its options
and ``_run_<name>(args)`` does the work; :data:`SUBCOMMANDS` lists the declaring functions.
A :class:`~gloam.errors.GloamError` from any subcommand becomes one line on stderr and exit
status 2, never a traceback.
"""

from __future__ import annotations

import argparse
import sys
import warnings
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import TextIO

from gloam import __version__
from gloam.errors import GloamError, GloamWarning, report_and_exit

__all__ = ["main", "build_parser", "PREPARE_OUTPUTS"]

#: File names written by ``gloam prepare`` inside ``--out-dir``.
PREPARE_OUTPUTS = {
    "h5ad_path": "prepared.h5ad",
    "tsv_path": "prepared.tsv",
    "report_path": "gene_report.tsv",
    "summary_path": "summary.tsv",
}

# Command-line option -> preparation setting (same name with "-" for "_").
_PREPARE_SETTINGS = (
    ("--normalisation", str, "cpm | median_ratio | none (default: cpm for counts, none for log)"),
    ("--pseudocount", float, "added before log2 for counts, > 0 (default 1)"),
    ("--max-missing-fraction", float, "drop genes missing in more than this share (0.25)"),
    (
        "--min-expression",
        float,
        "expression floor: CPM for counts (default 1), input units for log data (default off)",
    ),
    ("--min-samples-expressed", int, "samples at or above the floor a gene needs (2; 0 = off)"),
    ("--min-sd", float, "drop genes whose profile SD (log scale, ddof=1) is below this (0)"),
    ("--top-variable", int, "keep only this many most variable genes (default: all)"),
    ("--replicate-summary", str, "mean | median (default mean)"),
    ("--conditions", str, "concatenate | separate (default concatenate)"),
    ("--condition", str, "the condition to prepare with --conditions separate"),
)


def _add_prepare(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "prepare",
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


#: One declaring function per subcommand; add a new subcommand by appending here.
SUBCOMMANDS: tuple[Callable[[argparse._SubParsersAction], None], ...] = (_add_prepare,)


def build_parser() -> argparse.ArgumentParser:
    """The ``gloam`` argument parser with every subcommand."""
    parser = argparse.ArgumentParser(
        prog="gloam",
        description="Soft (fuzzy c-means) clustering of gene-expression time courses.",
    )
    parser.add_argument("--version", action="version", version=f"gloam {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for add in SUBCOMMANDS:
        add(subparsers)
    return parser


_default_show_warning = warnings.showwarning


def _show_warning(
    message: Warning | str,
    category: type[Warning],
    filename: str,
    lineno: int,
    file: TextIO | None = None,
    line: str | None = None,
) -> None:
    # The project's own warnings are for the user: one line, no source location.
    if issubclass(category, GloamWarning):
        print(f"gloam: warning: {message}", file=sys.stderr)
    else:
        _default_show_warning(message, category, filename, lineno, file, line)


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``gloam`` console script; returns the exit status.

    User errors (:class:`~gloam.errors.GloamError`) are printed as one line and end the
    process with status 2.
    """
    args = build_parser().parse_args(argv)
    with warnings.catch_warnings():
        warnings.showwarning = _show_warning
        try:
            return int(args.run(args))
        except GloamError as error:
            report_and_exit(error)


if __name__ == "__main__":
    sys.exit(main())
