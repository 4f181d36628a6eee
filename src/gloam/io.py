"""Reading and writing files: matrices, sample sheets, tables, gene lists and GMT.

Readers turn every parse problem into a :class:`~gloam.errors.GloamError` that names
the file, the row or column and the fix.  Gene IDs are always read as text, so IDs
such as ``1-Mar``, ``SEPT2`` or ``0001`` are never turned into dates or numbers.

Every writer goes through :func:`atomic_output` (:func:`atomic_directory` for a folder of
files): the result is written to a temporary file beside the target and renamed into place
only when complete, so an interrupted or failed step never leaves a half-written result that
a later step (or Snakemake) could mistake for a finished one.  A temporary carries the process
ID and host of its writer in its name, so the next write of the same target removes the
leftovers of a killed writer without touching those of a writer still running.

Intermediate ``.npz`` files are read with :func:`read_npz_checked`, which removes a damaged
file so that a rerun of the workflow remakes it.
"""

from __future__ import annotations

import contextlib
import csv
import errno
import glob
import gzip
import io
import itertools
import operator
import os
import re
import shutil
import socket
import tempfile
import time
import warnings
import zipfile
import zlib
from collections.abc import Iterable, Iterator, Mapping, Sequence
from pathlib import Path

import numpy as np
import pandas as pd

from gloam.errors import GloamError

__all__ = [
    "read_matrix",
    "read_sample_sheet",
    "read_npz_checked",
    "atomic_output",
    "atomic_directory",
    "no_space_error",
    "write_h5ad",
    "read_h5ad_checked",
    "write_table",
    "write_lines",
    "write_gmt",
    "read_gmt",
]


def _current_umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


#: This host in a form that can stand in a file name.
_HOST = re.sub(r"[^A-Za-z0-9]", "_", socket.gethostname()) or "host"

#: A temporary whose writer cannot be checked (another host, or a reused process ID) is
#: treated as left behind once it has not been modified for this long (seconds): writers
#: write continuously, and no gloam step writes one file for a day (rule of thumb).
STALE_TEMPORARY_AGE = 24 * 3600.0


def _temporary_affixes(target: Path) -> tuple[str, str]:
    """Prefix and suffix of this process's temporaries for ``target``.

    ``.<name>.pid<pid>@<host>.<random>.partial<suffixes>``: hidden, recognisable as a
    temporary of ``target``, and naming its writer.  The suffixes of ``target`` are kept so
    that writers that look at the extension (``.gz``, ``.h5ad``, ``.png``) behave as for the
    real target.
    """
    return f".{target.name}.pid{os.getpid()}@{_HOST}.", f".partial{''.join(target.suffixes)}"


def _writer_is_gone(name: str, target: Path) -> bool:
    """Whether the temporary ``name`` of ``target`` was left by a writer that has ended."""
    suffix = re.escape("".join(target.suffixes))
    match = re.fullmatch(
        rf"\.{re.escape(target.name)}\.pid(\d+)@([A-Za-z0-9_]+)\.\w+\.partial{suffix}", name
    )
    if match is None:
        # Named by an earlier gloam without its writer: removed as before.
        return True
    pid, host = int(match.group(1)), match.group(2)
    if host != _HOST or pid == os.getpid():
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True
    except PermissionError:  # alive, owned by another user
        return False
    return False


def _remove_stale_temporaries(target: Path) -> None:
    """Remove the temporaries of ``target`` whose writer was killed (SIGKILL, power loss).

    A temporary is stale when its writer's process on this host no longer exists, or when
    it has not been modified for :data:`STALE_TEMPORARY_AGE` seconds.  Temporaries of a
    writer still running (another run sharing the folder) are left alone.
    """
    suffix = "".join(target.suffixes)
    pattern = f".{glob.escape(target.name)}.*.partial{glob.escape(suffix)}"
    now = time.time()
    for candidate in target.parent.glob(pattern):
        try:
            old = now - candidate.lstat().st_mtime > STALE_TEMPORARY_AGE
        except FileNotFoundError:
            continue  # its writer finished or another cleaner was faster
        if old or _writer_is_gone(candidate.name, target):
            if candidate.is_dir() and not candidate.is_symlink():
                shutil.rmtree(candidate, ignore_errors=True)
            else:
                candidate.unlink(missing_ok=True)


#: errno values of a write refused for want of space: a full file system, a used-up quota.
_NO_SPACE_ERRNOS = (errno.ENOSPC, errno.EDQUOT)


def _no_space_reason(error: BaseException) -> str | None:
    """The OS's words for a full disk when ``error`` (or an exception it wraps) is one.

    Some writers do not keep the ``errno``: anndata re-raises an HDF5 write failure as a new
    exception with only the text, in which HDF5 writes ``errno = 28`` and the OS's words.
    """
    seen: set[int] = set()
    current: BaseException | None = error
    while current is not None and id(current) not in seen:
        seen.add(id(current))
        if isinstance(current, OSError) and current.errno in _NO_SPACE_ERRNOS:
            return os.strerror(current.errno)
        text = str(current)
        for number in _NO_SPACE_ERRNOS:
            if os.strerror(number) in text or f"errno = {number}," in text:
                return os.strerror(number)
        current = current.__cause__ or current.__context__
    return None


def _mount_point(path: Path) -> Path:
    """The mount point of the file system that holds ``path`` (or its nearest existing folder)."""
    path = Path(os.path.abspath(path))
    while not path.exists() and path != path.parent:
        path = path.parent
    path = path.resolve()
    while not os.path.ismount(path) and path != path.parent:
        path = path.parent
    return path


def _target_of(name: str | os.PathLike[str]) -> Path:
    """The final name a writer's temporary (see :func:`_temporary_affixes`) stands for."""
    path = Path(name)
    match = re.fullmatch(r"\.(.+?)\.pid\d+@[A-Za-z0-9_]+\.\w+\.partial.*", path.name)
    return path.with_name(match.group(1)) if match else path


def _named_file(error: BaseException) -> str | None:
    """The file an OS error (or HDF5's text, ``filename = '...'``) names, if any."""
    for current in (error, error.__cause__, error.__context__):
        if isinstance(current, OSError) and isinstance(current.filename, str):
            return current.filename
        if current is not None:
            match = re.search(r"filename = '([^']+)'", str(current))
            if match:
                return match.group(1)
    return None


def no_space_error(
    error: BaseException, path: str | os.PathLike[str] | None = None
) -> GloamError | None:
    """The one-line message for a write that failed because the disk is full, else None.

    Parameters
    ----------
    error : BaseException
        What the write raised; the exceptions it wraps are looked through.
    path : path-like, optional
        The file being written.  The message names the file the error itself names, else
        the folder of ``path`` (a writer may have several files of that folder open).

    Returns
    -------
    GloamError or None
        Naming the file, the file system (its mount point) and what to do; None when
        ``error`` is not a full disk or a used-up quota.
    """
    reason = _no_space_reason(error)
    if reason is None:
        return None
    named = _named_file(error)
    if named is not None:
        path, what = named, "writing"
    elif path is not None:
        # A writer that does not say which file (pandas, HDF5 through anndata) may be
        # writing any of several files at once: name their folder.
        path, what = Path(path).parent, "writing into"
    where = "" if path is None else f" while {what} {str(_target_of(path))!r}"
    disk = _mount_point(Path(path) if path is not None else Path.cwd())
    quota = "quota" in reason.lower()
    problem = "your disk quota is used up" if quota else "the disk is full"
    room = "free space in your quota" if quota else "free space on it"
    return GloamError(
        f"{problem} ({reason}){where}, on the file system mounted at {str(disk)!r}; nothing "
        f"half-written was kept: {room} (or write the results to another disk) and run the "
        "same command again"
    )


def _raise_if_no_space(error: Exception, target: Path) -> None:
    """Turn a write failure for want of space into its one-line GloamError (else do nothing)."""
    if isinstance(error, GloamError):
        return
    problem = no_space_error(error, target)
    if problem is not None:
        raise problem from error


@contextlib.contextmanager
def atomic_output(path: str | os.PathLike[str]) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it to ``path`` on success.

    On any exception the temporary file is removed and ``path`` is left untouched.  The
    temporary is named ``.<name>.pid<pid>@<host>.<random>.partial<suffixes>`` (see
    :func:`_temporary_affixes`); before writing, leftovers of a killed writer of the same
    target are removed, and temporaries of a writer still running are kept.

    Raises
    ------
    GloamError
        When the write fails because the disk is full or the quota used up (see
        :func:`no_space_error`); every other exception passes unchanged.
    """
    target = Path(path)
    temporary: Path | None = None
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        _remove_stale_temporaries(target)
        prefix, suffix = _temporary_affixes(target)
        handle, temporary_name = tempfile.mkstemp(prefix=prefix, suffix=suffix, dir=target.parent)
        os.close(handle)
        temporary = Path(temporary_name)
        yield temporary
        # mkstemp creates 0600; give the result the mode an ordinary new file would have.
        os.chmod(temporary, 0o666 & ~_current_umask())
        os.replace(temporary, target)
    except Exception as error:
        _raise_if_no_space(error, target)
        raise
    finally:
        if temporary is not None and temporary.exists():
            temporary.unlink()


@contextlib.contextmanager
def atomic_directory(path: str | os.PathLike[str]) -> Iterator[Path]:
    """Yield an empty temporary folder beside ``path``; it replaces ``path`` on success.

    The folder counterpart of :func:`atomic_output` (same naming, same removal of a killed
    writer's leftovers, same message for a full disk): on any exception the temporary folder
    is removed and ``path`` is left untouched; on success an existing ``path`` is removed and
    the folder renamed.
    """
    target = Path(path)
    staging: Path | None = None
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        _remove_stale_temporaries(target)
        prefix, suffix = _temporary_affixes(target)
        staging = Path(tempfile.mkdtemp(prefix=prefix, suffix=suffix, dir=target.parent))
        yield staging
        # mkdtemp creates 0700; give the folder the mode an ordinary new folder would have.
        os.chmod(staging, 0o777 & ~_current_umask())
        if target.is_dir() and not target.is_symlink():
            shutil.rmtree(target)
        os.replace(staging, target)
    except Exception as error:
        _raise_if_no_space(error, target)
        raise
    finally:
        if staging is not None and staging.exists():
            shutil.rmtree(staging, ignore_errors=True)


def write_h5ad(data, path: str | os.PathLike[str]) -> None:  # data: anndata.AnnData
    """Write ``data`` to ``path`` as ``.h5ad``, whole or not at all, even on a full disk.

    The HDF5 file is built in memory and then written with ordinary file I/O through
    :func:`atomic_output`.  Written by HDF5 itself, a full disk surfaces inside the HDF5
    library, while it releases objects, where Python cannot catch it; the process then
    crashes (measured: a segmentation fault with h5py 3.16) and leaves its temporary behind.
    Here it is an ordinary ``OSError``, reported by :func:`atomic_output` in one line.

    Parameters
    ----------
    data : anndata.AnnData
        As :meth:`anndata.AnnData.write_h5ad` does, text columns of ``obs`` and ``var`` are
        turned into categoricals in place before writing.
    path : path-like
        The ``.h5ad`` file to write (replaced if it exists).

    Raises
    ------
    GloamError
        When the disk is full or the quota used up (nothing is left behind).
    """
    import h5py

    try:
        from anndata.io import write_elem
    except ImportError:  # anndata < 0.11
        from anndata.experimental import write_elem

    data.strings_to_categoricals()
    if data.raw is not None:
        data.strings_to_categoricals(data.raw.var)
    with h5py.File(f"{Path(path).name}.image", "w", driver="core", backing_store=False) as file:
        write_elem(file, "/", data)  # anndata's own encoding of the whole object
        if data.raw is None:
            del file["raw"]  # an empty raw is left out, as AnnData.write_h5ad leaves it out
        file.flush()
        image = file.id.get_file_image()
    with atomic_output(path) as temporary, open(temporary, "wb") as stream:
        stream.write(image)


def write_table(table: pd.DataFrame, path: str | os.PathLike[str], *, index: bool = False) -> None:
    """Write ``table`` as tab-separated text (gzipped when ``path`` ends in ``.gz``).

    Floats are written in their shortest round-trip form (Python's ``repr``), so a value read
    back is exactly the value written: a membership of 0.6999996 never becomes 0.7.
    """
    with atomic_output(path) as temporary:
        table.to_csv(temporary, sep="\t", index=index)


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
    """Read a GMT file written by :func:`write_gmt` (or any GMT file).

    Raises
    ------
    GloamError
        A file that cannot be opened (with the fix for the kind of error), is not UTF-8, or
        has a line with fewer than 2 fields.
    """
    path = Path(path)
    _require_file(path, "gene-set")
    lines = _read_text(path, "gene-set").split("\n")
    if lines[-1] == "":
        lines.pop()
    gene_sets: dict[str, tuple[str, list[str]]] = {}
    for line_number, line in enumerate(lines, start=1):
        fields = line.split("\t")
        if len(fields) < 2:
            raise GloamError(
                f"{path}: line {line_number} has fewer than 2 tab-separated fields; "
                "a GMT line is name, description, genes..."
            )
        gene_sets[fields[0]] = (fields[1], [gene for gene in fields[2:] if gene])
    return gene_sets


# Cells that mean "no value" in a matrix.  Applied to the value columns only, so a gene
# called "NA" (or "NULL") keeps its name.
_MISSING_MARKERS = ["", "NA", "NaN", "nan", "N/A", "n/a", "null", "NULL", "-"]

_TEXT_SUFFIXES = {".tsv": "\t", ".txt": "\t", ".tab": "\t", ".csv": ","}

SAMPLE_SHEET_COLUMNS = ("sample", "time", "replicate", "condition")


def _access_error(path: Path, what: str, error: OSError) -> GloamError:
    """The one message for a file that cannot be opened, with the fix for the kind of error."""
    name = str(path)
    if isinstance(error, FileNotFoundError):
        return GloamError(f"{what} file {name!r} does not exist; check the path")
    if isinstance(error, IsADirectoryError):
        return GloamError(
            f"{what} path {name!r} is a folder, not a file; give the path of the file itself"
        )
    if isinstance(error, NotADirectoryError):
        return GloamError(
            f"{what} path {name!r} goes through a file as if it were a folder; check the path"
        )
    if isinstance(error, PermissionError):
        return GloamError(
            f"{what} file {name!r} cannot be read: permission denied; give your user read "
            "permission on the file (and search permission on its folders), e.g. ask its "
            "owner to run chmod a+r on it, or copy it to a folder of your own"
        )
    reason = error.strerror or str(error)
    return GloamError(
        f"{what} file {name!r} cannot be read ({reason}); check the disk or network share it "
        "is on, or copy the file again"
    )


def _require_file(path: Path, what: str) -> None:
    """Refuse a path that is not a readable regular file, with the fix for each case."""
    try:
        if not path.exists():
            raise FileNotFoundError(path)
        if path.is_dir():
            raise IsADirectoryError(path)
        if not path.is_file():
            raise GloamError(
                f"{what} path {str(path)!r} is not a regular file (a device, pipe or socket); "
                "give the path of a file"
            )
        # Opening (not only looking) is what reveals a permission the user lacks.
        with open(path, "rb"):
            pass
    except OSError as error:
        raise _access_error(path, what, error) from error


def _text_separator(path: Path, what: str) -> str:
    """Column separator from the file name (``.gz`` is looked through)."""
    suffixes = [suffix.lower() for suffix in path.suffixes]
    if suffixes and suffixes[-1] == ".gz":
        suffixes = suffixes[:-1]
    if suffixes and suffixes[-1] in _TEXT_SUFFIXES:
        return _TEXT_SUFFIXES[suffixes[-1]]
    raise GloamError(
        f"{what} file {str(path)!r} has an unknown extension; use .tsv, .txt, .csv "
        "(optionally .gz)" + (" or .h5ad" if what == "matrix" else "")
    )


# What gzip and zlib raise for a damaged, truncated or mislabelled ``.gz`` file:
# BadGzipFile (an OSError) for a wrong magic number, CRC or length, EOFError for a file
# cut short, zlib.error for corrupt compressed data.
_GZIP_ERRORS = (gzip.BadGzipFile, EOFError, zlib.error)
_GZIP_MAGIC = b"\x1f\x8b"


def _is_gzipped_name(path: Path) -> bool:
    return path.suffix.lower() == ".gz"


def _damaged_gzip_error(path: Path, what: str, error: Exception) -> GloamError:
    """The one message for a ``.gz`` file that cannot be decompressed."""
    with open(path, "rb") as stream:
        magic = stream.read(len(_GZIP_MAGIC))
    if magic != _GZIP_MAGIC:
        return GloamError(
            f"{what} file {str(path)!r} is not gzip-compressed although its name ends in "
            ".gz; compress it with gzip or remove .gz from its name"
        )
    return GloamError(
        f"{what} file {str(path)!r} is a damaged or incomplete gzip file ({error}); "
        f"check it with 'gzip -t {path}', then download it again or compress it again from "
        "the original"
    )


def _read_text(path: Path, what: str) -> str:
    """The whole text of a table file, decompressed when its name ends in ``.gz``.

    Line ends are normalised to ``\\n`` and a UTF-8 byte-order mark is removed.

    Raises
    ------
    GloamError
        A damaged or incomplete gzip file, a file that is not UTF-8, or a file that cannot
        be opened (permission denied, a folder, missing; each with its own fix).
    """
    try:
        if _is_gzipped_name(path):
            with gzip.open(path, "rt", encoding="utf-8-sig") as stream:
                return stream.read()
        with open(path, encoding="utf-8-sig") as stream:
            return stream.read()
    except _GZIP_ERRORS as error:
        raise _damaged_gzip_error(path, what, error) from error
    except UnicodeDecodeError as error:
        raise GloamError(
            f"{what} file {str(path)!r} cannot be read as text ({error}); "
            "give an uncompressed or gzipped UTF-8 table"
        ) from error
    except OSError as error:
        raise _access_error(path, what, error) from error


def _read_header(text: str, separator: str, path: Path, what: str) -> list[str]:
    """Fields of the first line of ``text``, surrounding spaces removed."""
    first_line = text.partition("\n")[0]
    try:
        header = next(csv.reader([first_line], delimiter=separator), None)
    except csv.Error as error:
        raise GloamError(
            f"{what} file {str(path)!r}: the header line cannot be read ({error}); "
            f"write the column names on the first line, separated by "
            f"{_separator_name(separator)}"
        ) from error
    if not header or not any(field.strip() for field in header):
        raise GloamError(f"{what} file {str(path)!r} is empty; it needs a header line")
    return [field.strip() for field in header]


def _separator_name(separator: str) -> str:
    return "tabs" if separator == "\t" else "commas"


def _quoted_field_pattern(separator: str) -> str:
    """Regular expression of a whole quoted field (``"..."``, ``""`` inside escapes a quote)."""
    escaped = re.escape(separator)
    return f'(?:^|(?<={escaped}))"(?:[^"]|"")*"(?={escaped}|$)'


def _check_field_counts(
    text: str, separator: str, n_fields: int, path: Path, what: str = "matrix"
) -> None:
    """Refuse data lines with more or fewer fields than the header (ragged rows).

    pandas pads a short row with empty cells, which would then read as missing values, so
    the separators of every line are counted first, in one pass.  In lines with
    a quote character, whole quoted fields (which may hold separators) are removed before
    counting; blank lines are skipped, as pandas skips them.

    Raises
    ------
    GloamError
        Naming the first ragged line (line number and gene), the fields found and expected.
    """
    lines = text.split("\n")[1:]
    # str.count per line (C) rather than pandas' regular-expression count: 20 times faster.
    separators = np.fromiter(
        map(operator.methodcaller("count", separator), lines), np.int64, len(lines)
    )
    if '"' in text:
        quoted = np.flatnonzero(np.fromiter(('"' in line for line in lines), bool, len(lines)))
        unquoted = pd.Series([lines[index] for index in quoted], dtype=object).str.replace(
            _quoted_field_pattern(separator), "", regex=True
        )
        separators[quoted] = unquoted.str.count(re.escape(separator)).to_numpy()
    suspects = np.flatnonzero(separators != n_fields - 1)
    blank = np.array(
        [separators[index] == 0 and not lines[index].strip() for index in suspects], dtype=bool
    )
    ragged = suspects[~blank]
    if ragged.size == 0:
        return
    first = int(ragged[0])
    fields = next(csv.reader([lines[first]], delimiter=separator))
    if what == "matrix":
        row, fix = (
            f"gene {fields[0].strip()!r}",
            "give every row its gene ID and exactly one value per sample",
        )
        empty = "leave a cell empty or write NA for a missing value"
    else:
        row, fix = f"starting {fields[0].strip()!r}", "give every row one value per column"
        empty = "leave a cell of an optional column empty if it does not apply"
    raise GloamError(
        f"{what} file {str(path)!r}: line {first + 2} ({row}) has {len(fields)} fields but "
        f"the header has {n_fields} ({ragged.size} such line(s)); {fix}, separated by "
        f"{_separator_name(separator)} ({empty})"
    )


def _name_duplicates(names: Sequence[str], limit: int = 5) -> str:
    counts = pd.Series(list(names)).value_counts()
    duplicated = counts[counts > 1]
    shown = ", ".join(f"{name!r} ({count}x)" for name, count in duplicated.head(limit).items())
    more = f" and {len(duplicated) - limit} more" if len(duplicated) > limit else ""
    return f"{shown}{more}"


def read_matrix(path: str | os.PathLike[str], *, layer: str | None = None) -> pd.DataFrame:
    """Read an expression matrix as a genes x samples table of floats.

    Parameters
    ----------
    path : path-like
        ``.tsv``/``.txt``/``.tab`` (tab-separated) or ``.csv`` (comma-separated), each
        optionally gzipped (``.gz``): first column gene IDs, header line of sample names.
        Or ``.h5ad`` (AnnData, bulk convention: observations = samples, variables = genes).
        Empty cells and ``NA``, ``NaN``, ``N/A``, ``null``, ``-`` are read as missing (NaN).
    layer : str, optional
        For ``.h5ad`` only: read this entry of ``layers`` instead of ``X``.

    Returns
    -------
    DataFrame of shape (n_genes, n_samples)
        float64 values; index = gene IDs as ``str`` (never parsed as dates or numbers,
        surrounding whitespace removed), named ``gene``; columns = sample names (``str``).

    Raises
    ------
    GloamError
        Missing file, unknown extension, unreadable file, damaged or incomplete ``.gz`` file,
        empty matrix, duplicate or empty gene IDs or sample names, a cell that is not a
        number (gene and sample named), ragged rows (a row with more or fewer fields than
        the header; line and gene named), ``layer`` given for a text file or not present in
        the ``.h5ad``.
    """
    path = Path(path)
    _require_file(path, "matrix")
    if path.suffix.lower() == ".h5ad":
        matrix = _read_h5ad_matrix(path, layer)
    else:
        if layer is not None:
            raise GloamError(
                f"layer={layer!r} was given but {str(path)!r} is a text table; layers exist "
                "only in .h5ad files, so remove the layer setting"
            )
        matrix = _read_text_matrix(path)
    _check_matrix_labels(matrix, path)
    return matrix


def _read_text_matrix(path: Path) -> pd.DataFrame:
    separator = _text_separator(path, "matrix")
    text = _read_text(path, "matrix")
    header = _read_header(text, separator, path, "matrix")
    samples = header[1:]
    if not samples:
        raise GloamError(
            f"matrix file {str(path)!r} has no sample columns (header {header!r}); expected "
            f"gene IDs in the first column and one column per sample, separated by "
            f"{_separator_name(separator)}"
        )
    if any(not name for name in samples):
        position = samples.index("") + 2
        raise GloamError(
            f"matrix file {str(path)!r}: column {position} has an empty sample name in the "
            "header; give every sample column a name"
        )
    if len(set(samples)) != len(samples):
        raise GloamError(
            f"matrix file {str(path)!r} has duplicate sample names in the header: "
            f"{_name_duplicates(samples)}; make every sample name unique"
        )
    if not text.partition("\n")[2].strip():
        # Before any per-column work: pandas' empty-table path is quadratic in the columns.
        raise GloamError(
            f"matrix file {str(path)!r} has a header but no gene rows; the matrix is empty"
        )
    _check_field_counts(text, separator, len(header), path)
    n_lines = text.count("\n")  # at least the number of gene rows
    if n_lines <= _WIDE_MAX_ROWS and len(samples) > n_lines * _WIDE_RATIO:
        genes, values, problem = _parse_wide(text, separator, len(header), path)
    else:
        genes, values, problem = _parse_tall(text, separator, len(header), path)
    if problem is not None:
        gene, sample, token, count = problem
        raise GloamError(
            f"matrix file {str(path)!r}: value {token!r} for gene {genes[gene].strip()!r} in "
            f"sample {samples[sample]!r} is not a number ({count} such cells in that sample); "
            "use numbers, or leave the cell empty / NA for a missing value"
        )
    return pd.DataFrame(
        values,
        index=pd.Index([gene.strip() for gene in genes], dtype=object, name="gene"),
        columns=pd.Index(samples, dtype=object),
    )


#: A matrix of at most :data:`_WIDE_MAX_ROWS` lines with more than :data:`_WIDE_RATIO`
#: samples per line is read by columns (:func:`_parse_wide`).  pandas spends ~80 us on every
#: column it makes (measured, pandas 2.3), 20 times the parsing itself for 5 genes x 40,000
#: samples; reading by columns costs about twice as much per cell, so it pays up to ~200
#: genes (measured: 100 x 40,000 took 1.8 s instead of 3.8 s, 200 x 40,000 the same).
_WIDE_RATIO = 4
_WIDE_MAX_ROWS = 128

#: Cells of a wide matrix held as text at once (~60 bytes each as Python strings).
_WIDE_BLOCK_CELLS = 1 << 20

# (gene row, sample column, cell text, cells in that sample that are not numbers)
_Problem = tuple[int, int, str, int]


def _not_numbers(column: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Values of a column pandas left as text, and where a cell is not a number."""
    numbers = pd.to_numeric(column, errors="coerce").to_numpy(dtype=np.float64)
    return numbers, np.isnan(numbers) & column.notna().to_numpy()


def _parse_failure(path: Path, error: Exception) -> GloamError:
    return GloamError(
        f"matrix file {str(path)!r} could not be parsed ({' '.join(str(error).split())}); "
        "check that every row has a gene ID and one value per sample"
    )


def _parse_tall(
    text: str, separator: str, n_fields: int, path: Path
) -> tuple[list[str], np.ndarray, _Problem | None]:
    """Gene IDs, values (genes x samples) and the first cell that is not a number, by rows."""
    # Positional column labels keep pandas from renaming duplicates or reinterpreting the
    # header; gene IDs are read as text and never NA-converted or date-parsed.
    names = list(range(n_fields))
    try:
        table = pd.read_csv(
            io.StringIO(text),
            sep=separator,
            header=None,
            skiprows=1,
            names=names,
            index_col=0,
            dtype={0: str},
            keep_default_na=False,
            na_values={column: _MISSING_MARKERS for column in names[1:]},
            low_memory=False,
        )
    except (pd.errors.ParserError, ValueError) as error:
        raise _parse_failure(path, error) from error
    genes = [str(gene) for gene in table.index]
    values = np.empty(table.shape, dtype=np.float64)
    problem = None
    for position, (name, kind) in enumerate(table.dtypes.items()):
        if pd.api.types.is_numeric_dtype(kind):
            values[:, position] = table[name].to_numpy(dtype=np.float64)
            continue
        values[:, position], bad = _not_numbers(table[name])
        if bad.any() and problem is None:
            first = int(np.argmax(bad))
            problem = (first, position, str(table[name].iloc[first]), int(bad.sum()))
    return genes, values, problem


def _parse_wide(
    text: str, separator: str, n_fields: int, path: Path
) -> tuple[list[str], np.ndarray, _Problem | None]:
    """:func:`_parse_tall` for a matrix with many more samples than genes, in linear time.

    Rows are split by the csv module (C; the same quoting rules as pandas), a block of rows
    at a time; each block is written out transposed (one line per sample) and parsed by
    pandas, which then makes one column per gene instead of one per sample.  Numbers and
    missing-value markers are therefore read exactly as :func:`_parse_tall` reads them.
    """
    reader = csv.reader(io.StringIO(text.partition("\n")[2]), delimiter=separator)
    per_block = max(1, min(n_fields - 1, _WIDE_BLOCK_CELLS // (n_fields - 1)))
    genes: list[str] = []
    blocks: list[np.ndarray] = []
    bad_cells: list[tuple[int, int, str]] = []  # (sample, gene, text) of cells not numbers
    bad_counts = np.zeros(n_fields - 1, dtype=np.int64)
    try:
        while rows := [
            row
            for row in itertools.islice(reader, per_block)
            if len(row) > 1 or (row and row[0].strip())  # blank lines are skipped, as pandas does
        ]:
            if any(len(row) != n_fields for row in rows):
                raise ValueError(f"a row does not have {n_fields} fields")
            columns = zip(*rows, strict=True)
            first = len(genes)
            genes.extend(next(columns))
            transposed = io.StringIO()
            csv.writer(transposed, delimiter=separator, lineterminator="\n").writerows(columns)
            transposed.seek(0)
            table = pd.read_csv(
                transposed,
                sep=separator,
                header=None,
                keep_default_na=False,
                na_values=_MISSING_MARKERS,
                low_memory=False,
            )
            block = np.empty((len(rows), n_fields - 1), dtype=np.float64)
            for offset, (name, kind) in enumerate(table.dtypes.items()):
                if pd.api.types.is_numeric_dtype(kind):
                    block[offset] = table[name].to_numpy(dtype=np.float64)
                    continue
                block[offset], bad = _not_numbers(table[name])
                where = np.flatnonzero(bad)
                if where.size:
                    bad_counts[where] += 1
                    sample = int(where[0])
                    bad_cells.append((sample, first + offset, str(table[name].iloc[sample])))
            blocks.append(block)
    except (csv.Error, pd.errors.ParserError, ValueError) as error:
        raise _parse_failure(path, error) from error
    values = np.concatenate(blocks) if blocks else np.empty((0, n_fields - 1))
    problem = None
    if bad_cells:
        # The first sample with a cell that is not a number, and its first such gene, as
        # _parse_tall reports them: that sample is the earliest of some gene's, so it is here.
        sample, gene, token = min(bad_cells)
        problem = (gene, sample, token, int(bad_counts[sample]))
    return genes, values, problem


def _read_h5ad_matrix(path: Path, layer: str | None) -> pd.DataFrame:
    import scipy.sparse

    with warnings.catch_warnings():
        # Duplicate gene IDs and sample names are reported by _check_matrix_labels,
        # as one GloamError; anndata's own warning about them would only add noise.
        warnings.filterwarnings(
            "ignore",
            message=r"(Variable|Observation) names are not unique",
            category=UserWarning,
        )
        data = read_h5ad_checked(
            path,
            "matrix file",
            remake="check that it was written by anndata, or write it again from its source",
        )
    if layer is None:
        values = data.X
        if values is None:
            raise GloamError(
                f"matrix file {str(path)!r} has no X matrix; set a layer "
                f"(available: {sorted(data.layers.keys()) or 'none'})"
            )
    else:
        if layer not in data.layers:
            raise GloamError(
                f"matrix file {str(path)!r} has no layer {layer!r}; available layers: "
                f"{sorted(data.layers.keys()) or 'none'} (leave layer unset to use X)"
            )
        values = data.layers[layer]
    if scipy.sparse.issparse(values):
        values = values.toarray()
    values = np.asarray(values)
    real = np.issubdtype(values.dtype, np.number) and not np.iscomplexobj(values)
    if not real:
        raise GloamError(
            f"matrix file {str(path)!r}: {'X' if layer is None else f'layer {layer!r}'} holds "
            f"{values.dtype} values, not real numbers; store counts or log values as numbers"
        )
    # Bulk convention in the file (obs = samples, var = genes); in memory genes x samples.
    return pd.DataFrame(
        values.T.astype(np.float64),
        index=pd.Index([str(gene).strip() for gene in data.var_names], dtype=object, name="gene"),
        columns=pd.Index([str(sample).strip() for sample in data.obs_names], dtype=object),
    )


def _check_matrix_labels(matrix: pd.DataFrame, path: Path) -> None:
    if matrix.shape[0] == 0 or matrix.shape[1] == 0:
        raise GloamError(
            f"matrix file {str(path)!r} is empty ({matrix.shape[0]} genes x "
            f"{matrix.shape[1]} samples); it needs at least one gene and one sample"
        )
    genes = matrix.index
    empty = np.flatnonzero(genes == "")
    if empty.size:
        raise GloamError(
            f"matrix file {str(path)!r}: gene row {int(empty[0]) + 1} has an empty gene ID "
            f"({empty.size} such rows); give every row a gene ID"
        )
    if genes.has_duplicates:
        raise GloamError(
            f"matrix file {str(path)!r} has duplicate gene IDs: {_name_duplicates(genes)}; "
            "make gene IDs unique (e.g. sum or drop duplicated rows before running gloam)"
        )
    if matrix.columns.has_duplicates:
        raise GloamError(
            f"matrix file {str(path)!r} has duplicate sample names: "
            f"{_name_duplicates(matrix.columns)}; make every sample name unique"
        )


def read_sample_sheet(path: str | os.PathLike[str]) -> pd.DataFrame:
    """Read the sample sheet: which sample was taken at which time, replicate and condition.

    Parameters
    ----------
    path : path-like
        ``.tsv``/``.txt``/``.tab`` or ``.csv`` (optionally ``.gz``) with a header line.
        Required columns ``sample`` and ``time`` (a number; its unit is given once in the
        config); optional ``replicate`` and ``condition``.  Header names are matched
        without regard to case or surrounding spaces; other columns are ignored.

    Returns
    -------
    DataFrame of shape (n_samples, 2 to 4)
        Columns ``sample`` (str), ``time`` (float64) and, when present, ``replicate`` (str)
        and ``condition`` (str), in that order; one row per sample, in file order.

    Raises
    ------
    GloamError
        Missing file, unknown extension, damaged or incomplete ``.gz`` file, missing
        ``sample``/``time`` column, a column named twice, a row with more or fewer fields
        than the header, no rows, empty or duplicate sample
        names, a time that is not a finite number (sample named), an empty condition, or
        the same replicate named twice for one condition and time.
    """
    path = Path(path)
    _require_file(path, "sample sheet")
    separator = _text_separator(path, "sample sheet")
    text = _read_text(path, "sample sheet")
    header = [name.lower() for name in _read_header(text, separator, path, "sample sheet")]
    for column in SAMPLE_SHEET_COLUMNS:
        if header.count(column) > 1:
            raise GloamError(
                f"sample sheet {str(path)!r} has the column {column!r} more than once; keep one"
            )
    missing = [column for column in ("sample", "time") if column not in header]
    if missing:
        raise GloamError(
            f"sample sheet {str(path)!r} lacks the column(s) {missing} (found {header}); "
            "it needs columns sample and time, optionally replicate and condition, "
            f"separated by {_separator_name(separator)}"
        )
    _check_field_counts(text, separator, len(header), path, "sample sheet")
    try:
        table = pd.read_csv(
            io.StringIO(text),
            sep=separator,
            header=None,
            skiprows=1,
            names=header,
            dtype=str,
            keep_default_na=False,
        )
    except (pd.errors.ParserError, ValueError) as error:
        raise GloamError(
            f"sample sheet {str(path)!r} could not be parsed ({' '.join(str(error).split())}); "
            "check that every row has one value per column"
        ) from error
    columns = [column for column in SAMPLE_SHEET_COLUMNS if column in header]
    table = table[columns].apply(lambda column: column.str.strip())
    if table.empty:
        raise GloamError(f"sample sheet {str(path)!r} has no rows; add one row per sample")
    empty = np.flatnonzero(table["sample"].to_numpy() == "")
    if empty.size:
        raise GloamError(
            f"sample sheet {str(path)!r}: row {int(empty[0]) + 1} has an empty sample name; "
            "name every sample as in the matrix header"
        )
    if table["sample"].duplicated().any():
        raise GloamError(
            f"sample sheet {str(path)!r} lists samples more than once: "
            f"{_name_duplicates(table['sample'])}; list each sample once"
        )
    times = pd.to_numeric(table["time"], errors="coerce")
    bad = times.isna() | ~np.isfinite(times.to_numpy(dtype=float, na_value=np.nan))
    if bad.any():
        row = int(np.argmax(bad.to_numpy()))
        raise GloamError(
            f"sample sheet {str(path)!r}: time {table['time'].iloc[row]!r} of sample "
            f"{table['sample'].iloc[row]!r} is not a finite number; write times as plain "
            "numbers (e.g. 0, 2.5, 24) and give their unit once in the config"
        )
    table["time"] = times.astype(np.float64)
    if "condition" in table:
        empty = np.flatnonzero(table["condition"].to_numpy() == "")
        if empty.size:
            raise GloamError(
                f"sample sheet {str(path)!r}: sample {table['sample'].iloc[empty[0]]!r} has "
                "an empty condition; fill the condition column for every sample or drop it"
            )
    if "replicate" in table:
        keys = [column for column in ("condition", "time", "replicate") if column in table]
        clash = table.duplicated(keys, keep=False)
        if clash.any():
            names = table.loc[clash, "sample"].head(5).tolist()
            raise GloamError(
                f"sample sheet {str(path)!r}: samples {names} share the same "
                f"{'/'.join(keys)}; give each replicate of a time point its own label"
            )
    return table.reset_index(drop=True)


# What numpy and zipfile raise for a truncated or corrupt .npz: BadZipFile for a cut or
# overwritten archive or a CRC mismatch, EOFError for an empty file, ValueError for a member
# that is not an array (or a file that is not an archive at all), zlib.error for corrupt
# compressed data, OSError for a member that cannot be read, KeyError for a missing array.
_NPZ_DAMAGE = (zipfile.BadZipFile, EOFError, ValueError, OSError, KeyError, zlib.error)
_ACCESS_ERRORS = (FileNotFoundError, IsADirectoryError, NotADirectoryError, PermissionError)


def read_npz_checked(
    path: str | os.PathLike[str],
    what: str,
    *,
    remove_damaged: bool = True,
    required: Iterable[str] = (),
) -> dict[str, np.ndarray]:
    """Read every array of an intermediate ``.npz``; remove it when it is damaged.

    A truncated or corrupt intermediate (a full disk, a killed copy) would otherwise fail
    every rerun the same way until deleted by hand; removed, it is simply remade by the
    step that writes it when the run is started again.

    Parameters
    ----------
    path : path-like
        An ``.npz`` written by :func:`numpy.savez` (or ``savez_compressed``).
    what : str
        What the file is, for the message (e.g. ``"scan file"``).
    remove_damaged : bool
        Remove a damaged file (default True).
    required : iterable of str
        Array names the file must hold; a missing one counts as damage.

    Returns
    -------
    dict of str to ndarray
        Every array of the file, loaded into memory, by name.

    Raises
    ------
    GloamError
        One line: the file is missing or cannot be opened (nothing removed), or it is
        damaged (named, with whether it was removed and that the run should be started
        again).
    """
    path = Path(path)
    try:
        loaded = np.load(path, allow_pickle=False)
        if not isinstance(loaded, np.lib.npyio.NpzFile):
            raise ValueError("a single array, not an .npz archive")
        with loaded as data:
            arrays = {key: data[key] for key in data.files}
        missing = [key for key in required if key not in arrays]
        if missing:
            raise KeyError(f"no array {missing[0]!r}")
    except _ACCESS_ERRORS as error:
        if isinstance(error, FileNotFoundError):
            raise GloamError(
                f"{what} {str(path)!r} does not exist; start the run again so that its step "
                "writes it"
            ) from error
        raise _access_error(path, what, error) from error
    except _NPZ_DAMAGE as error:
        if isinstance(error, ValueError) and "allow_pickle" in str(error) and _is_zip(path):
            raise  # a whole archive holding object arrays: a writer's bug, not damage
        cause = " ".join(str(error).split()) or type(error).__name__
        if not remove_damaged:
            raise GloamError(
                f"{what} {str(path)!r} is damaged or incomplete ({cause}); delete it and "
                "start the run again to remake it"
            ) from error
        try:
            path.unlink(missing_ok=True)
        except OSError as removal:
            raise GloamError(
                f"{what} {str(path)!r} is damaged or incomplete ({cause}) and could not be "
                f"removed ({removal.strerror or removal}); delete it and start the run again"
            ) from error
        raise GloamError(
            f"{what} {str(path)!r} was damaged or incomplete ({cause}) and has been removed; "
            "start the run again to remake it"
        ) from error
    return arrays


def _is_zip(path: Path) -> bool:
    try:
        with zipfile.ZipFile(path) as archive:
            return archive.testzip() is None
    except (OSError, zipfile.BadZipFile):
        return False


#: The format signature at the start of every HDF5 file (and so of every ``.h5ad``).
_HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"


def _short_cause(error: BaseException, limit: int = 200) -> str:
    """``error`` as one line of at most ``limit`` characters (HDF5's messages are long)."""
    text = " ".join(str(error).split()) or type(error).__name__
    return text if len(text) <= limit else f"{text[: limit - 3]}..."


def read_h5ad_checked(path: str | os.PathLike[str], what: str, *, remake: str):  # -> AnnData
    """Read a whole ``.h5ad`` file; a damaged or truncated one becomes one line.

    Unlike :func:`read_npz_checked` the file is never removed or changed: an ``.h5ad`` may
    be the user's own file, which only its owner can make again.

    Parameters
    ----------
    path : path-like
        An AnnData ``.h5ad`` file.
    what : str
        What the file is, for the message (e.g. ``"prepared matrix"``).
    remake : str
        How to make the file again, ending the message (e.g. ``"delete it and run gloam
        prepare again"``).

    Returns
    -------
    anndata.AnnData
        The whole file, in memory.

    Raises
    ------
    GloamError
        One line: the file is missing or cannot be opened (with the fix for the kind of
        error), or it is not an HDF5 file, or it is damaged or incomplete (with ``remake``).
    """
    import anndata

    path = Path(path)
    _require_file(path, what)
    try:
        return anndata.read_h5ad(path)
    except MemoryError:
        raise
    except Exception as error:  # h5py and anndata raise many unrelated types for a bad file
        if _access_error_in(error):
            raise _access_error(path, what, _access_error_in(error)) from error
        try:
            with open(path, "rb") as stream:
                start = stream.read(len(_HDF5_SIGNATURE))
        except OSError as access:
            raise _access_error(path, what, access) from error
        if path.stat().st_size < 512 and start != _HDF5_SIGNATURE:
            # The signature may also stand at 512, 1024, ... after a user block.
            kind = "empty" if not start else "not an HDF5 file"
            raise GloamError(
                f"{what} {str(path)!r} cannot be read as .h5ad: the file is {kind}; {remake}"
            ) from error
        raise GloamError(
            f"{what} {str(path)!r} cannot be read as .h5ad: the file is damaged or incomplete "
            f"({_short_cause(error)}); {remake}"
        ) from error


def _access_error_in(error: BaseException) -> OSError | None:
    """A permission or missing-file error behind ``error``, if that is what it is."""
    current: BaseException | None = error
    while current is not None:
        if isinstance(current, _ACCESS_ERRORS):
            return current
        current = current.__cause__
    return None
