"""Every file a run writes: its path, format, writer, reader and meaning (one owner).

The workflow (:mod:`gloam.planning`, the rules), the report pages (:mod:`gloam.report`) and
the tests read the layout of a run folder from here, so a file is named in one place:

- :data:`RUN_FILES` lists every file and folder of ``<results_dir>/<run>/``: the path
  relative to the run folder (``{c}`` for the number of clusters, ``*`` for any text), its
  format, the rule that writes it, the library function that reads it back (if the library
  reads it), whether it is a *target* (the workflow makes sure it exists) and what it holds.
- :data:`FIGURES` lists every figure: the rule that draws it, its folder, the stage function
  in :mod:`gloam.stages` that draws it, and its caption. Each figure is written as PNG, PDF
  and SVG.
- :data:`RESULTS_FILES` lists the files beside the runs (summary, sensitivity, index page).

It also gives a run the files another run made (:func:`link_shared`): settings variants that
differ only downstream (say, in the rule for c) would prepare the same matrix and scan the same
c. :mod:`gloam.planning` gives each such stage one *owner* run, and every other run with the
same upstream settings gets the owner's files as hard links in its own folder: no second
computation, no second copy on disk, and every run folder stays complete.
"""

from __future__ import annotations

import importlib
import os
import re
import shutil
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path

from gloam.errors import GloamError

__all__ = [
    "RunFile",
    "Figure",
    "RUN_FILES",
    "FIGURES",
    "FIGURE_FORMATS",
    "RESULTS_FILES",
    "run_file",
    "run_targets",
    "figure_files",
    "figure_paths",
    "file_meaning",
    "matches",
    "resolve",
    "link_shared",
]


@dataclass(frozen=True)
class RunFile:
    """One file (or folder) of a run folder.

    Attributes
    ----------
    path : str
        Relative to the run folder; ``{c}`` stands for a number of clusters, ``*`` for any
        text without ``/``; a folder ends in ``/``.
    format : str
        ``tsv``, ``json``, ``npz``, ``h5ad``, ``html``, ``txt``, ``gmt``, ``png``, ``pdf``,
        ``svg`` or ``folder``.
    writer : str
        The workflow rule that writes it (the same stage function backs ``gloam cluster``).
    meaning : str
        One line: what it holds (shown in the report's file list).
    reader : str or None
        Dotted name of the library function that reads it back, when the library does.
    target : bool
        Whether a finished run must have it (the workflow's targets); False for
        intermediates and for files inside a folder that is a target.
    """

    path: str
    format: str
    writer: str
    meaning: str
    reader: str | None = None
    target: bool = True

    def pattern(self) -> re.Pattern[str]:
        """The path as a regular expression over paths relative to the run folder."""
        text = re.escape(self.path.rstrip("/"))
        text = text.replace(re.escape("{c}"), r"\d+").replace(re.escape("*"), "[^/]*")
        return re.compile(text + ("(/.*)?" if self.path.endswith("/") else ""))


@dataclass(frozen=True)
class Figure:
    """One figure of a run, written as ``<folder>/<name>.png``, ``.pdf`` and ``.svg``.

    Attributes
    ----------
    name : str
        File stem, and the key of the figure everywhere.
    writer : str
        The workflow rule that draws it.
    folder : str
        ``figures`` (or ``comparison`` for the figure of the comparison's folder, which is
        written with the rest of that folder).
    draw : str
        Dotted name of the stage function that draws it.
    caption : str
        One-line caption (the report page; the README shows the same figure).
    section : str
        Section of Snakemake's report that shows the PNG (caption file
        ``workflow/report/<name>.rst``).
    """

    name: str
    writer: str
    folder: str
    draw: str
    caption: str
    section: str


#: File formats of every figure.
FIGURE_FORMATS = ("png", "pdf", "svg")

_FORMAT_MEANING = {
    "png": "figure, PNG (300 dpi)",
    "pdf": "figure, PDF (fonts embedded)",
    "svg": "figure, SVG (text kept as text)",
}

#: Every figure of a run, in the order the report page shows them.
FIGURES: dict[str, Figure] = {
    figure.name: figure
    for figure in (
        Figure(
            "profiles",
            "core_genes",
            "figures",
            "gloam.stages.figure_profiles",
            "Each cluster's centroid over time with the central 50 % and 90 % of its core "
            "genes, the noise class apart; z-scores above, mean log2 expression below.",
            "4 clusters",
        ),
        Figure(
            "overview",
            "export",
            "figures",
            "gloam.stages.figure_overview",
            "Per cluster: core size, robustness (mean resampling Jaccard against the stable "
            "level), peak time and similarity to the nearest other cluster.",
            "4 clusters",
        ),
        Figure(
            "validity",
            "export",
            "figures",
            "gloam.stages.figure_validity",
            "For every scanned c, the criteria that decide c with their thresholds; the c used "
            "is marked.",
            "3 number of clusters",
        ),
        Figure(
            "fuzzifier",
            "export",
            "figures",
            "gloam.stages.figure_fuzzifier",
            "How crisp clusterings of shuffled data are as m grows, with the m used and the "
            "formula's m marked.",
            "2 fuzzifier",
        ),
        Figure(
            "transitions",
            "compare",
            "comparison",
            "gloam.stages.run_comparison",
            "Conditions compared: where genes move between the shared responses from the "
            "first condition to the second; the solid part of each square is the genes called "
            "changed (interaction FDR at the level and a different response).",
            "6 conditions compared",
        ),
    )
}

#: Every file and folder of a run folder, in the order of the data flow.
RUN_FILES: tuple[RunFile, ...] = (
    RunFile(
        "prepared/prepared.h5ad",
        "h5ad",
        "prepare",
        "prepared data (AnnData: z-scores, log means, input values)",
        reader="gloam.stages.read_prepared",
        target=False,
    ),
    RunFile(
        "prepared/zscores.tsv",
        "tsv",
        "prepare",
        "z-score profile of every clustered gene",
    ),
    RunFile(
        "prepared/gene_report.tsv",
        "tsv",
        "prepare",
        "every input gene: kept or why dropped, test statistics",
        reader="gloam.stages.read_table",
    ),
    RunFile("prepared/summary.tsv", "tsv", "prepare", "genes removed by each preparation step"),
    RunFile(
        "prepared/scan_input.npz",
        "npz",
        "prepare",
        "input of every scan job (with the comparison's profiles)",
        reader="gloam.stages.read_scan_input",
        target=False,
    ),
    RunFile(
        "fuzzifier.json",
        "json",
        "prepare",
        "choice of m and its check on shuffled data",
        reader="gloam.stages.read_json",
    ),
    RunFile(
        "fuzzifier_curve.tsv",
        "tsv",
        "prepare",
        "shuffled-data curve over m",
        reader="gloam.stages.read_table",
    ),
    RunFile(
        "scan/c{c}.npz",
        "npz",
        "scan",
        "partition and evidence for one c (and the comparison's clustering at c)",
        reader="gloam.stages.read_scan",
        target=False,
    ),
    RunFile(
        "structure.json",
        "json",
        "structure",
        "structure tests of the genes and of the comparison's profiles",
        reader="gloam.stages.read_json",
    ),
    RunFile(
        "validity.tsv",
        "tsv",
        "select",
        "criteria and indices for every scanned c",
        reader="gloam.stages.read_table",
    ),
    RunFile(
        "selection.json",
        "json",
        "select",
        "decision on c, structure test, quality flags",
        reader="gloam.stages.read_json",
    ),
    RunFile(
        "consensus.npz",
        "npz",
        "select",
        "chosen partition, clusters in peak-time order",
        reader="gloam.stages.read_consensus",
        target=False,
    ),
    RunFile("memberships.tsv", "tsv", "export", "memberships of every gene (full precision)"),
    RunFile("centroids.tsv", "tsv", "export", "centroid of every cluster (z-score units)"),
    RunFile("clusters.tsv", "tsv", "export", "one row per cluster"),
    RunFile(
        "robustness.tsv",
        "tsv",
        "export",
        "resampling interval and core share of every membership",
    ),
    RunFile(
        "gloam.h5ad",
        "h5ad",
        "export",
        "prepared data with the clustering beside the genes (AnnData)",
    ),
    RunFile("genesets/", "folder", "core_genes", "core gene sets, ranked lists, background"),
    RunFile(
        "genesets/*_core*.gmt",
        "gmt",
        "core_genes",
        "core gene sets (GMT)",
        reader="gloam.io.read_gmt",
        target=False,
    ),
    RunFile(
        "genesets/*_core*.txt",
        "txt",
        "core_genes",
        "core genes of one cluster, one ID per line",
        target=False,
    ),
    RunFile(
        "genesets/*_ranked.tsv",
        "tsv",
        "core_genes",
        "every gene ranked by membership in one cluster",
        target=False,
    ),
    RunFile(
        "genesets/background.txt",
        "txt",
        "core_genes",
        "background for enrichment: every clustered gene",
        target=False,
    ),
    RunFile("comparison/", "folder", "compare", "conditions compared"),
    RunFile(
        "comparison/selection.json",
        "json",
        "compare",
        "conditions compared: whether, how many shared responses",
        reader="gloam.stages.read_json",
        target=False,
    ),
    RunFile(
        "comparison/responses.tsv",
        "tsv",
        "compare",
        "each gene's response in each condition and its change",
        target=False,
    ),
    RunFile(
        "comparison/transitions.tsv",
        "tsv",
        "compare",
        "genes by response in one condition and in the other",
        target=False,
    ),
    RunFile(
        "comparison/centroids.tsv",
        "tsv",
        "compare",
        "shared responses (z-scores over the time points)",
        target=False,
    ),
    RunFile(
        "comparison/validity.tsv",
        "tsv",
        "compare",
        "judged scan that chose the number of shared responses",
        target=False,
    ),
    RunFile(
        "comparison/genesets/",
        "folder",
        "compare",
        "changed genes as gene sets, with their background",
        target=False,
    ),
    RunFile(
        "report.html",
        "html",
        "report_page",
        "the run's report page",
    ),
) + tuple(
    RunFile(
        f"{figure.folder}/{figure.name}.{kind}",
        kind,
        figure.writer,
        _FORMAT_MEANING[kind],
        target=figure.folder == "figures",
    )
    for figure in FIGURES.values()
    for kind in FIGURE_FORMATS
)

#: Files beside the runs, in ``<results_dir>/``: name -> (writer rule, meaning).
RESULTS_FILES: dict[str, tuple[str, str]] = {
    "summary.tsv": ("summary", "one row per run: m, c, flags, core genes"),
    "sensitivity.tsv": ("summary", "how much each dataset's clusters change across variants"),
    "matches.tsv": ("summary", "clusters of different datasets matched, per pair of runs"),
    "index.html": ("report_index", "report page over every run"),
}


def run_file(path: str) -> RunFile:
    """The registered file with this exact ``path`` (a KeyError names the known ones)."""
    for entry in RUN_FILES:
        if entry.path == path:
            return entry
    raise KeyError(f"{path!r} is not a registered run file; add it to gloam.artifacts.RUN_FILES")


def run_targets() -> list[str]:
    """Paths (relative to the run folder) of every file a finished run must have."""
    return [entry.path.rstrip("/") for entry in RUN_FILES if entry.target]


def figure_files(writer: str) -> dict[str, str]:
    """Output name (``<figure>_<format>``) -> path relative to the run folder, of every
    figure that rule ``writer`` draws into ``figures/``."""
    return {
        f"{figure.name}_{kind}": f"{figure.folder}/{figure.name}.{kind}"
        for figure in FIGURES.values()
        if figure.writer == writer and figure.folder == "figures"
        for kind in FIGURE_FORMATS
    }


def figure_paths(writer: str, outputs: object) -> dict[str, tuple[str, str, str]]:
    """Figure name -> (PNG, PDF, SVG) path, taken from a job's named outputs (attributes
    ``<figure>_<format>``, as :func:`figure_files` names them) for the figures of ``writer``."""
    names = dict.fromkeys(key.rsplit("_", 1)[0] for key in figure_files(writer))
    return {
        name: tuple(str(getattr(outputs, f"{name}_{kind}")) for kind in FIGURE_FORMATS)
        for name in names
    }


def matches(relative: str) -> RunFile | None:
    """The most specific registered file whose path matches ``relative`` (a path relative to
    the run folder, ``/``-separated), or None for a file gloam does not write."""
    found = [entry for entry in RUN_FILES if entry.pattern().fullmatch(relative)]
    # A file inside a registered folder matches the folder too; the file's own entry wins.
    found.sort(key=lambda entry: (entry.format == "folder", -len(entry.path)))
    return found[0] if found else None


def resolve(dotted: str) -> Callable[..., object]:
    """The function a registry entry names (``"gloam.stages.figure_profiles"``)."""
    module, _, name = dotted.rpartition(".")
    return getattr(importlib.import_module(module), name)


def file_meaning(relative: str) -> str:
    """What the run file at ``relative`` holds, in one line ("" when not a gloam file)."""
    entry = matches(relative)
    return entry.meaning if entry is not None else ""


def _link_or_copy(source: Path, target: Path) -> None:
    """Hard-link ``source`` to ``target``; copy where the file system has no hard links."""
    try:
        os.link(source, target)
    except OSError:
        shutil.copy2(source, target)


def _replace_with(source: Path, target: Path) -> None:
    """Make ``target`` the same content as ``source`` (a file or a folder), atomically."""
    temporary = target.with_name(f".{target.name}.{os.getpid()}.sharing")
    if temporary.is_dir():
        shutil.rmtree(temporary)
    else:
        temporary.unlink(missing_ok=True)
    try:
        if source.is_dir():
            shutil.copytree(source, temporary, copy_function=_link_or_copy)
            if target.is_dir():
                shutil.rmtree(target)
        else:
            _link_or_copy(source, temporary)
        os.replace(temporary, target)
    except BaseException:
        if temporary.is_dir():
            shutil.rmtree(temporary, ignore_errors=True)
        else:
            temporary.unlink(missing_ok=True)
        raise


def link_shared(
    sources: Mapping[str, str | os.PathLike[str]], targets: Mapping[str, str | os.PathLike[str]]
) -> None:
    """Give a run the files another run made, as hard links (copies across file systems).

    Parameters
    ----------
    sources, targets : mapping
        Output name -> the owner's file or folder, and -> where the run keeps it. Both
        mappings have the same names.

    Raises
    ------
    GloamError
        If a source is missing (the owner's job has not finished) or the names differ.
    """
    if set(sources) != set(targets):
        raise GloamError(
            f"shared files {sorted(sources)} and their places {sorted(targets)} differ; "
            "this is a bug in the workflow, please report it"
        )
    for name, source in sources.items():
        source_path, target_path = Path(source), Path(targets[name])
        if not source_path.exists():
            raise GloamError(
                f"shared file {str(source_path)!r} does not exist; run the workflow again so "
                "that the run owning it makes it first"
            )
        target_path.parent.mkdir(parents=True, exist_ok=True)
        _replace_with(source_path, target_path)
