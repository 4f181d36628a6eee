"""Reading and writing files: matrices, sample sheets, tables, gene lists and GMT.

Every writer goes through :func:`atomic_output`: the result is written to a
temporary file beside the target and renamed into place only when complete, so
an interrupted or failed step never leaves a half-written result that a later
step (or Snakemake) could mistake for a finished one.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterable, Iterator, Mapping, Sequence
from pathlib import Path

import pandas as pd

from gloam.errors import GloamError

__all__ = [
    "atomic_output",
    "write_table",
    "write_lines",
    "write_gmt",
    "read_gmt",
]


@contextlib.contextmanager
def atomic_output(path: str | os.PathLike[str]) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it to ``path`` on success.

    On any exception the temporary file is removed and ``path`` is left untouched.
    The suffix of ``path`` is kept on the temporary name, so writers that look at
    the extension (``.gz``, ``.h5ad``, ``.png``) behave as for the real target.
    """
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    suffix = "".join(target.suffixes)
    handle, temporary_name = tempfile.mkstemp(
        prefix=f".{target.name}.", suffix=f".partial{suffix}", dir=target.parent
    )
    os.close(handle)
    temporary = Path(temporary_name)
    try:
        yield temporary
        os.replace(temporary, target)
    finally:
        if temporary.exists():
            temporary.unlink()


def write_table(table: pd.DataFrame, path: str | os.PathLike[str], *, index: bool = False) -> None:
    """Write ``table`` as tab-separated text (gzipped when ``path`` ends in ``.gz``)."""
    with atomic_output(path) as temporary:
        table.to_csv(temporary, sep="\t", index=index, float_format="%.6g")


def write_lines(lines: Iterable[str], path: str | os.PathLike[str]) -> None:
    """Write one item per line (e.g. a gene list for an enrichment tool)."""
    with atomic_output(path) as temporary:
        with open(temporary, "w", encoding="utf-8") as stream:
            for line in lines:
                stream.write(f"{line}\n")


def write_gmt(
    gene_sets: Mapping[str, tuple[str, Sequence[str]]], path: str | os.PathLike[str]
) -> None:
    """Write gene sets in the GMT format: ``name<TAB>description<TAB>gene1<TAB>gene2...``.

    Parameters
    ----------
    gene_sets : mapping of set name to (description, genes)
        Names and descriptions must not contain tabs or newlines.
    """
    for name, (description, _genes) in gene_sets.items():
        for text in (name, description):
            if any(character in text for character in "\t\r\n"):
                raise GloamError(
                    f"gene-set name or description {text!r} contains a tab or newline; "
                    "GMT fields cannot hold them"
                )
    with atomic_output(path) as temporary:
        with open(temporary, "w", encoding="utf-8") as stream:
            for name, (description, genes) in gene_sets.items():
                stream.write("\t".join([name, description, *genes]) + "\n")


def read_gmt(path: str | os.PathLike[str]) -> dict[str, tuple[str, list[str]]]:
    """Read a GMT file written by :func:`write_gmt` (or any GMT file)."""
    gene_sets: dict[str, tuple[str, list[str]]] = {}
    with open(path, encoding="utf-8") as stream:
        for line_number, line in enumerate(stream, start=1):
            fields = line.rstrip("\n").split("\t")
            if len(fields) < 2:
                raise GloamError(
                    f"{path}: line {line_number} has fewer than 2 tab-separated fields; "
                    "a GMT line is name, description, genes..."
                )
            gene_sets[fields[0]] = (fields[1], [gene for gene in fields[2:] if gene])
    return gene_sets
