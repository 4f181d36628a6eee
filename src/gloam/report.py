"""Self-contained HTML report pages: one page per run and one index page over all runs.

A run page is a single HTML file that works offline (no server, no network, no external
script, style sheet or font): the figures are embedded as base64 PNG, the tables travel as
JSON inside the page and are drawn, sorted and filtered by a small inline script, and every
link to a result file is relative to the page. It shows, in this order:

1. the decision: genes kept and dropped with the reasons, m with its check, the structure
   test, c with its reason and every quality flag in plain words;
2. the figures, each with a one-line caption;
3. the tables (clusters, validity, memberships, gene report), sortable and filterable; only
   the first rows that match are drawn, so tables of tens of thousands of genes stay usable;
4. a gene lookup: memberships with their resampling intervals, cluster and profile of one
   gene (also from the address, ``page.html#gene=GENEID``);
5. a methods paragraph written from the run's settings, versions and citations;
6. links to every output file of the run.

Every string from the data is escaped before it enters the HTML (:func:`html.escape`), and
JSON is embedded with ``<``, ``>`` and ``&`` written as ``\\u003c``, ``\\u003e`` and
``\\u0026``, so no gene name can close the script element that carries it (WHATWG HTML,
"script data state"). The inline script writes data into the page only as text nodes.

Numbers on the page are rounded for reading (:data:`DISPLAY_DIGITS` significant digits);
the linked TSV files hold full precision. Cluster colours come from
:func:`gloam.plots.cluster_colours`, so the page matches the figures.

References
----------
.. [1] WHATWG. HTML Living Standard, section 13.2.5.4 "Script data state" and 4.12.1.3
   "Restrictions for contents of script elements".
"""

from __future__ import annotations

import base64
import html
import json
import os
import re
import struct
import urllib.parse
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from importlib import metadata
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from gloam.artifacts import FIGURES, file_meaning
from gloam.errors import QUALITY_FLAGS, GloamError, GloamWarning
from gloam.io import atomic_output

__all__ = [
    "DISPLAY_DIGITS",
    "DEFAULT_PAGE_ROWS",
    "FIGURE_CAPTIONS",
    "REFERENCES",
    "RESEARCH_ONLY_NOTE",
    "RunRecord",
    "read_run",
    "methods_paragraph",
    "cited_references",
    "write_run_page",
    "write_index_page",
]

PathLike = str | os.PathLike[str]

#: Significant digits of numbers shown on a page (the TSV files keep full precision).
DISPLAY_DIGITS = 4
#: Rows of a table drawn at first; "show more" adds as many again.
DEFAULT_PAGE_ROWS = 100

#: The sentence every page carries, in view, near its top.
RESEARCH_ONLY_NOTE = (
    "Clusters are hypotheses for research, not diagnoses: they suggest what to test next, and "
    "no clinical or diagnostic decision should rest on them."
)

#: One-line caption of each figure, by file stem, in the order the page shows them (the
#: figure registry :data:`gloam.artifacts.FIGURES` owns them).
FIGURE_CAPTIONS: dict[str, str] = {name: figure.caption for name, figure in FIGURES.items()}

#: Full references by their in-text form, as in the README's reference list.
REFERENCES: dict[str, str] = {
    "Bezdek 1981": (
        "Bezdek, J. C. (1981). Pattern Recognition with Fuzzy Objective Function Algorithms. "
        "Plenum."
    ),
    "Schwämmle & Jensen 2010": (
        "Schwämmle, V. & Jensen, O. N. (2010). A simple and fast method to determine the "
        "parameters for fuzzy c-means cluster analysis. Bioinformatics 26:2841–2848."
    ),
    "Smyth 2004": (
        "Smyth, G. K. (2004). Linear models and empirical Bayes methods for assessing "
        "differential expression in microarray experiments. Stat Appl Genet Mol Biol 3:3."
    ),
    "Law et al. 2014": (
        "Law, C. W., Chen, Y., Shi, W. & Smyth, G. K. (2014). voom: precision weights unlock "
        "linear model analysis tools for RNA-seq read counts. Genome Biology 15:R29."
    ),
    "Benjamini & Hochberg 1995": (
        "Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery rate. JRSS B "
        "57:289–300."
    ),
    "Anders & Huber 2010": (
        "Anders, S. & Huber, W. (2010). Differential expression analysis for sequence count "
        "data. Genome Biology 11:R106."
    ),
    "Davé 1991": (
        "Davé, R. N. (1991). Characterization and detection of noise in clustering. Pattern "
        "Recognition Letters 12:657–664."
    ),
    "Liu et al. 2008": (
        "Liu, Y., Hayes, D. N., Nobel, A. & Marron, J. S. (2008). Statistical significance of "
        "clustering for high-dimension, low-sample size data. JASA 103:1281–1293."
    ),
    "Hennig 2007": (
        "Hennig, C. (2007). Cluster-wise assessment of cluster stability. Computational "
        "Statistics & Data Analysis 52:258–271."
    ),
    "Kimes et al. 2017": (
        "Kimes, P. K., Liu, Y., Hayes, D. N. & Marron, J. S. (2017). Statistical significance "
        "for hierarchical clustering. Biometrics 73:811–821."
    ),
    "Arthur & Vassilvitskii 2007": (
        "Arthur, D. & Vassilvitskii, S. (2007). k-means++: the advantages of careful seeding. SODA."
    ),
}

_RESULT_KEY = "gloam"
_PREPARE_KEY = "prepare"
_NOISE_COLUMN = "noise"
_NOT_RECORDED = "[not recorded]"

# What each preparation step removed, in plain words; {…} are filled from the settings.
_DROP_MEANINGS = {
    "too_many_missing": "missing in more than {max_missing_fraction} of the samples",
    "missing_in_whole_condition": "no value at all at some condition and time, nothing to fill",
    "low_expression": (
        "expressed at or above {min_expression} in fewer than {min_samples_expressed} samples"
    ),
    "flat": "no variation at all over the time points",
    "not_significant": (
        "no significant change over time (moderated F-test, Benjamini–Hochberg FDR above {fdr})"
    ),
    "small_change": (
        "significant, but the mean profile changes by less than {min_log2_range} log2 units "
        "in every condition"
    ),
    "low_variance_for_level": (
        "(no replicates) profile SD not above that of genes with similar mean expression"
    ),
    "low_variability": "profile SD below {min_sd} (log2)",
    "not_in_top_variable": "outside the {top_variable} most variable genes",
    "kept": "clustered",
}

# ------------------------------------------------------------------ reading a run


@dataclass(frozen=True)
class RunRecord:
    """Everything a run page shows, read from one run folder by :func:`read_run`.

    Attributes
    ----------
    run_dir : Path
        The run folder.
    run_name : str
        Name shown on the page.
    selection, fuzzifier : dict
        ``selection.json`` and ``fuzzifier.json``.
    settings : dict
        The run's settings (config sections ``preparation``, ``fuzzifier``, ``scan``,
        ``selection``, ``genesets``, plus ``seed`` and ``time_unit``); the preparation
        section holds the values the preparation really used when ``gloam.h5ad`` records them.
    selection_method : str or None
        How genes were selected (``moderated_f``, ``no_replicates``, ``none``), if recorded.
    versions : dict of str to str
        Package versions of the run (from ``gloam.h5ad``) or, failing that, of this machine.
    versions_from_run : bool
        Whether ``versions`` were recorded by the run itself.
    columns : DataFrame
        One row per prepared column (index: column name): ``time``, ``condition``.
    tables : dict of str to DataFrame
        The tables found: ``gene_summary``, ``gene_report``, ``validity``, ``clusters``,
        ``centroids`` (index: cluster), ``memberships``, ``robustness`` and ``zscores``
        (index: gene, for the last three).
    figures : dict of str to Path
        Figure stem to the file embedded (PNG, else SVG).
    files : list of Path
        Every output file of the run (hidden files left out), sorted.
    thresholds : tuple of float
        Core-membership thresholds (from the settings or the gene-set file names).
    """

    run_dir: Path
    run_name: str
    selection: dict[str, Any]
    fuzzifier: dict[str, Any]
    settings: dict[str, Any]
    selection_method: str | None
    versions: dict[str, str]
    versions_from_run: bool
    columns: pd.DataFrame
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    figures: dict[str, Path] = field(default_factory=dict)
    files: list[Path] = field(default_factory=list)
    thresholds: tuple[float, ...] = ()

    @property
    def cluster_names(self) -> list[str]:
        """Cluster names in order (``C1`` …), from the centroids or the memberships."""
        if "centroids" in self.tables:
            return [str(name) for name in self.tables["centroids"].index]
        if "memberships" in self.tables:
            return [str(c) for c in self.tables["memberships"].columns if re.fullmatch(r"C\d+", c)]
        return []


def _read_json(path: Path, what: str) -> dict[str, Any]:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as error:
        raise GloamError(
            f"{what} {str(path)!r} cannot be read ({error}); rerun its step"
        ) from error


def _read_tsv(path: Path, *, text_columns: Sequence[str] = ()) -> pd.DataFrame:
    """A gloam table with its text columns read as text (gene ``NA`` stays ``NA``)."""
    try:
        header = pd.read_csv(path, sep="\t", nrows=0).columns.tolist()
        text = [c for c in header if c in text_columns]
        return pd.read_csv(
            path,
            sep="\t",
            dtype={c: str for c in text},
            keep_default_na=False,
            na_values={c: ["", "NaN", "nan", "NA"] for c in header if c not in text},
            float_precision="round_trip",
        )
    except (OSError, ValueError, pd.errors.ParserError) as error:
        raise GloamError(f"table {str(path)!r} cannot be read ({error}); rerun its step") from error


def _read_h5ad_record(path: Path) -> dict[str, Any]:
    """``uns["gloam"]``, ``uns["prepare"]`` and ``obs`` of an ``.h5ad`` file, without ``X``."""
    import h5py

    try:
        from anndata.io import read_elem
    except ImportError:  # anndata < 0.11
        from anndata.experimental import read_elem

    record: dict[str, Any] = {}
    try:
        with h5py.File(path, "r") as stream:
            for key in (_RESULT_KEY, _PREPARE_KEY):
                if f"uns/{key}" in stream:
                    record[key] = read_elem(stream[f"uns/{key}"])
            if "obs" in stream:
                record["obs"] = read_elem(stream["obs"])
    except (OSError, KeyError, ValueError) as error:
        warnings.warn(
            f"{str(path)!r} cannot be read ({error}); the report leaves out what it records",
            GloamWarning,
            stacklevel=3,
        )
    return record


def _plain(value: Any) -> Any:
    """Values read from h5ad (numpy scalars, arrays, bytes) as plain Python values."""
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, np.ndarray):
        return [_plain(v) for v in value.tolist()]
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.generic):
        return value.item()
    return value


def _merge(base: Mapping[str, Any], override: Mapping[str, Any]) -> dict[str, Any]:
    """``base`` updated by ``override`` section by section; None in ``override`` is ignored."""
    merged = dict(base)
    for key, value in override.items():
        if value is None:
            continue
        if isinstance(value, Mapping) and isinstance(merged.get(key), Mapping):
            merged[key] = _merge(merged[key], value)
        else:
            merged[key] = value
    return merged


def _columns_from_names(names: Sequence[str]) -> pd.DataFrame:
    """Time and condition of prepared columns named ``t<time>`` or ``<condition>_t<time>``."""
    times, conditions = [], []
    for position, name in enumerate(names):
        found = re.fullmatch(r"(?:(.*)_)?t(-?[0-9.]+(?:[eE][-+]?[0-9]+)?)", name)
        times.append(float(found.group(2)) if found else float(position))
        conditions.append(found.group(1) or "" if found else "")
    return pd.DataFrame(
        {"time": times, "condition": conditions}, index=pd.Index(list(names), name="column")
    )


def _installed_versions() -> dict[str, str]:
    versions = {}
    for package in ("gloam", "numpy", "scipy", "pandas", "anndata", "matplotlib", "snakemake"):
        try:
            versions[package] = metadata.version(package)
        except metadata.PackageNotFoundError:
            continue
    return versions


def _thresholds_from_files(files: Sequence[Path]) -> tuple[float, ...]:
    found = set()
    for path in files:
        match = re.search(r"_core([0-9.]+)\.gmt$", path.name)
        if match:
            found.add(float(match.group(1)))
    return tuple(sorted(found))


def read_run(
    run_dir: PathLike, *, run_name: str | None = None, settings: Mapping[str, Any] | None = None
) -> RunRecord:
    """Read everything a run page shows from one run folder.

    Parameters
    ----------
    run_dir : str or PathLike
        A run folder as the workflow writes it (``selection.json`` and ``fuzzifier.json``
        are required; every other file is shown when present).
    run_name : str, optional
        Name shown on the page; the folder's name by default.
    settings : mapping, optional
        The run's settings (config sections ``preparation``, ``fuzzifier``, ``scan``,
        ``selection``, ``genesets``, and ``seed``, ``time_unit``). They override the settings
        recorded in ``gloam.h5ad``; with neither, the methods paragraph marks what is
        missing as "[not recorded]".

    Returns
    -------
    RunRecord

    Raises
    ------
    GloamError
        If the folder or its ``selection.json`` / ``fuzzifier.json`` is missing or unreadable.
    """
    root = Path(run_dir)
    if not root.is_dir():
        raise GloamError(f"run folder {str(root)!r} does not exist; give the folder of one run")
    for name in ("selection.json", "fuzzifier.json"):
        if not (root / name).is_file():
            raise GloamError(
                f"run folder {str(root)!r} has no {name}; run the clustering of this run first"
            )
    selection = _read_json(root / "selection.json", "selection")
    fuzzifier = _read_json(root / "fuzzifier.json", "fuzzifier choice")
    files = sorted(
        path
        for path in root.rglob("*")
        if path.is_file() and not any(part.startswith(".") for part in path.relative_to(root).parts)
    )

    record: dict[str, Any] = {}
    for candidate in (root / "gloam.h5ad", root / "prepared" / "prepared.h5ad"):
        if candidate.is_file():
            record = _read_h5ad_record(candidate)
            if record:
                break
    result = _plain(record.get(_RESULT_KEY, {}))
    prepare = _plain(record.get(_PREPARE_KEY, {}))
    recorded = dict(result.get("settings", {}))
    if "seed" not in recorded and result.get("seed") is not None:
        recorded["seed"] = result["seed"]
    merged = _merge(recorded, settings or {})
    if isinstance(merged.get("figures"), Mapping) and "time_unit" not in merged:
        merged["time_unit"] = merged["figures"].get("time_unit")
    if prepare.get("settings"):
        merged["preparation"] = {**merged.get("preparation", {}), **prepare["settings"]}
    versions = {str(k): str(v) for k, v in result.get("versions", {}).items()}
    versions_from_run = bool(versions)
    if not versions:
        versions = _installed_versions()

    tables: dict[str, pd.DataFrame] = {}
    sources = {
        "gene_summary": ("prepared/summary.tsv", ("reason",)),
        "gene_report": ("prepared/gene_report.tsv", ("gene", "status")),
        "validity": ("validity.tsv", ("failed", "reason", "resampling")),
        "clusters": ("clusters.tsv", ("cluster", "peak_condition", "nearest")),
        "centroids": ("centroids.tsv", ("cluster",)),
        "memberships": ("memberships.tsv", ("gene", "top_class")),
        "robustness": ("robustness.tsv", ("gene",)),
        "zscores": ("prepared/zscores.tsv", ("gene",)),
    }
    for key, (relative, text) in sources.items():
        if (root / relative).is_file():
            tables[key] = _read_tsv(root / relative, text_columns=text)
    for key, index in (("centroids", "cluster"), ("robustness", "gene"), ("zscores", "gene")):
        if key in tables and index in tables[key].columns:
            tables[key] = tables[key].set_index(index)

    obs = record.get("obs")
    if isinstance(obs, pd.DataFrame) and {"time", "condition"} <= set(obs.columns):
        columns = pd.DataFrame(
            {
                "time": obs["time"].to_numpy(dtype=float),
                "condition": obs["condition"].astype(str).to_numpy(),
            },
            index=pd.Index(obs.index.astype(str), name="column"),
        )
    else:
        names = (
            tables["centroids"].columns
            if "centroids" in tables
            else tables["zscores"].columns
            if "zscores" in tables
            else []
        )
        columns = _columns_from_names([str(name) for name in names])

    figures: dict[str, Path] = {}
    for path in files:
        if path.parent in (root / "figures", root / "comparison") and path.suffix in (
            ".png",
            ".svg",
        ):
            if path.suffix == ".png" or path.stem not in figures:
                figures[path.stem] = path
    order = list(FIGURE_CAPTIONS)
    figures = dict(
        sorted(
            figures.items(),
            key=lambda item: (order.index(item[0]) if item[0] in order else 99, item[0]),
        )
    )
    recorded_thresholds = merged.get("genesets", {}).get("thresholds")
    thresholds = (
        tuple(float(t) for t in recorded_thresholds)
        if recorded_thresholds
        else _thresholds_from_files(files)
    )
    return RunRecord(
        run_dir=root,
        run_name=run_name or root.name,
        selection=selection,
        fuzzifier=fuzzifier,
        settings=merged,
        selection_method=prepare.get("selection_method"),
        versions=versions,
        versions_from_run=versions_from_run,
        columns=columns,
        tables=tables,
        figures=figures,
        files=files,
        thresholds=thresholds,
    )


# ------------------------------------------------------------------ words and numbers


def _num(value: Any, digits: int = 3) -> str:
    """A number for reading: integers with thousands separators, others to ``digits``."""
    if value is None:
        return _NOT_RECORDED
    if isinstance(value, bool | np.bool_):
        return "yes" if value else "no"
    if isinstance(value, int | np.integer):
        return f"{int(value):,}"
    number = float(value)
    if not np.isfinite(number):
        return "∞" if number > 0 else ("−∞" if number < 0 else "n/a")
    if number == int(number) and abs(number) < 1e15:
        return f"{int(number):,}"
    return f"{number:.{digits}g}"


def _truthy(value: Any) -> bool:
    """A True/False cell of a table read back (bool, or the text ``True``)."""
    return value is True or value is np.True_ or str(value).strip().lower() == "true"


def _p_value(p: float) -> str:
    if p == 0.0:
        return "p < 1e-300"
    return f"p = {p:.2g}"


def _setting(run: RunRecord, section: str | None, key: str) -> Any:
    source = run.settings if section is None else run.settings.get(section, {})
    return source.get(key) if isinstance(source, Mapping) else None


def _gene_counts(run: RunRecord) -> tuple[int | None, int | None, dict[str, int]]:
    """(input genes, kept genes, genes dropped per reason) from the preparation summary."""
    table = run.tables.get("gene_summary")
    if table is None or not {"reason", "n_genes"} <= set(table.columns):
        memberships = run.tables.get("memberships")
        return None, (len(memberships) if memberships is not None else None), {}
    counts = dict(zip(table["reason"].astype(str), table["n_genes"].astype(int), strict=True))
    kept = counts.pop("kept", None)
    return int(sum(counts.values()) + (kept or 0)), kept, counts


def _drop_meaning(run: RunRecord, reason: str) -> str:
    preparation = run.settings.get("preparation", {})
    values = {
        "max_missing_fraction": _percent(preparation.get("max_missing_fraction")),
        "min_expression": _expression_floor(run),
        "min_samples_expressed": _num(preparation.get("min_samples_expressed")),
        "fdr": _num(preparation.get("fdr")),
        "min_log2_range": _num(preparation.get("min_log2_range")),
        "min_sd": _num(preparation.get("min_sd")),
        "top_variable": _num(preparation.get("top_variable")),
    }
    return _DROP_MEANINGS.get(reason, reason.replace("_", " ")).format(**values)


def _percent(value: Any) -> str:
    return _NOT_RECORDED if value is None else f"{100 * float(value):g} %"


def _expression_floor(run: RunRecord) -> str:
    preparation = run.settings.get("preparation", {})
    floor = preparation.get("min_expression")
    if floor is None:
        return _NOT_RECORDED
    unit = " CPM" if preparation.get("value_type") == "counts" else ""
    return f"{_num(floor)}{unit}"


def cited_references(text: str) -> list[str]:
    """The full references of :data:`REFERENCES` whose in-text form appears in ``text``.

    Parameters
    ----------
    text : str
        Text citing works as ``Author Year`` (e.g. ``Hennig 2007``), as
        :func:`methods_paragraph` writes them.

    Returns
    -------
    list of str
        Full references in alphabetical order of their in-text form.
    """
    return [REFERENCES[key] for key in sorted(REFERENCES) if key in text]


#: The criteria for c (keys of ``selection.json["criteria"]``), in words with their threshold.
_CRITERION_WORDS = {
    "stable_jaccard": "robust (mean resampling Jaccard at least {value})",
    "min_core_genes": "sizeable (at least {value} genes with membership of 0.5 or more)",
    "max_centroid_correlation": "distinct (centroid correlation at most {value})",
    "min_coherence": "coherent (coherence at least {value})",
}


def _criterion_clauses(run: RunRecord) -> list[str]:
    """The criteria that decided c, in words, from ``selection.json`` and ``validity.tsv``."""
    criteria = run.selection.get("criteria", {})
    clauses = [
        words.format(value=_num(criteria[key]))
        for key, words in _CRITERION_WORDS.items()
        if key in criteria
    ]
    validity = run.tables.get("validity")
    if validity is not None and "separated" in validity.columns:
        alpha = criteria.get("structure_alpha", run.selection.get("structure", {}).get("alpha"))
        clauses.append(
            "separated from their most similar neighbour (the pair's core genes showing more "
            f"two-cluster structure than one Gaussian at level {_num(alpha)}; Liu et al. 2008, "
            "Kimes et al. 2017)"
        )
    return clauses


def _join_words(parts: Sequence[str]) -> str:
    if len(parts) <= 1:
        return "".join(parts)
    return ", ".join(parts[:-1]) + " and " + parts[-1]


def methods_paragraph(run: RunRecord) -> str:
    """A methods paragraph written from a run's actual settings, results and versions.

    Every number comes from the run: the genes kept (``prepared/summary.tsv``), m and its
    method (``fuzzifier.json``), the structure test, c and how it was chosen
    (``selection.json``), the scanned range, starts and what was resampled
    (``validity.tsv``), the other settings from :attr:`RunRecord.settings`, and the package
    versions. A setting the run did not record is written as "[not recorded]" for the
    reader to fill in. Works are cited as ``Author Year``; :func:`cited_references` lists
    them in full.

    Parameters
    ----------
    run : RunRecord
        A run read by :func:`read_run`.

    Returns
    -------
    str
        One paragraph of plain text (no HTML).

    References
    ----------
    See :data:`REFERENCES` (Bezdek 1981; Schwämmle & Jensen 2010; Smyth 2004; Law et al.
    2014; Benjamini & Hochberg 1995; Anders & Huber 2010; Davé 1991; Liu et al. 2008;
    Hennig 2007; Arthur & Vassilvitskii 2007).
    """
    preparation = run.settings.get("preparation", {})
    sentences: list[str] = []
    version = run.versions.get("gloam", _NOT_RECORDED)
    sentences.append(f"Expression time courses were analysed with gloam {version}.")

    value_type = preparation.get("value_type")
    normalisation = preparation.get("normalisation")
    pseudocount = preparation.get("pseudocount")
    if value_type == "counts":
        scaling = {
            "median_ratio": "median-of-ratios size factors (Anders & Huber 2010)",
            "cpm": "counts per million",
            "none": "no library-size scaling",
        }.get(str(normalisation), f"normalisation {normalisation or _NOT_RECORDED}")
        sentences.append(
            f"Counts were normalised with {scaling} and transformed to log2 with a "
            f"pseudocount of {_num(pseudocount)}."
        )
    elif value_type == "log":
        sentences.append("Values were used on their given log scale.")

    total, kept, _dropped = _gene_counts(run)
    fdr = preparation.get("fdr")
    log2_range = preparation.get("min_log2_range")
    kept_text = (
        f"{_num(kept)} of {_num(total)} genes were kept"
        if kept is not None and total is not None
        else f"{_num(kept)} genes were kept"
    )
    method = run.selection_method
    if method == "moderated_f" or (
        method is None and preparation.get("gene_selection") == "responsive"
    ):
        trend = (
            "; prior variance following a trend in mean expression, Law et al. 2014"
            if value_type == "counts"
            else ""
        )
        sentences.append(
            "Genes changing over time were selected with a moderated F-test of change over "
            f"time within each condition (empirical Bayes, Smyth 2004{trend}) at a "
            f"Benjamini–Hochberg FDR of {_num(fdr)} (Benjamini & Hochberg 1995) and a log2 "
            f"range of the mean profile of at least {_num(log2_range)} in some condition; "
            f"{kept_text}."
        )
    elif method == "no_replicates":
        sentences.append(
            "Without replicates, genes were kept when the log2 range of their profile reached "
            f"{_num(log2_range)} and their profile SD exceeded the median of genes with "
            f"similar mean expression; {kept_text}."
        )
    else:
        sentences.append(f"No test for change over time was applied; {kept_text}.")
    summary = preparation.get("replicate_summary")
    sentences.append(
        f"Replicates were summarised by their {summary or _NOT_RECORDED} at each time point "
        "and every gene's profile was z-scored."
    )

    m = float(run.fuzzifier.get("m", np.nan))
    m_how = {
        "formula": "estimated from the numbers of genes and time points (Schwämmle & Jensen 2010)",
        "randomised": "chosen as the smallest m at which shuffled data show no cluster structure",
        "fixed": "fixed by the analyst",
    }.get(str(run.fuzzifier.get("method")), "chosen as recorded in fuzzifier.json")
    if run.fuzzifier.get("method") != "formula":
        m_how += (
            f" (the estimate of Schwämmle & Jensen 2010 was {_num(run.fuzzifier.get('formula_m'))})"
        )
    check = (
        "found no cluster structure"
        if run.fuzzifier.get("check_passed", True)
        else "still found cluster structure"
    )
    validity = run.tables.get("validity")
    noise_class = _setting(run, "scan", "noise_class")
    if noise_class is None and validity is not None and "noise_distance" in validity:
        noise_class = bool(np.isfinite(validity["noise_distance"]).any())
    noise_text = " with a noise class (Davé 1991)" if noise_class else ""
    sentences.append(
        f"Profiles were clustered by fuzzy c-means (Bezdek 1981){noise_text} with fuzzifier "
        f"m = {m:.3f}, {m_how}; at that m, a check on data shuffled within genes {check}."
    )

    scanned = run.selection.get("scanned", [])
    scan_range = (
        (f"from {min(scanned)} to {max(scanned)}" if len(scanned) > 1 else f"= {_num(scanned[0])}")
        if scanned
        else _NOT_RECORDED
    )
    n_starts = _setting(run, "scan", "n_starts")
    init = _setting(run, "scan", "init")
    seeding = " with k-means++ seeding (Arthur & Vassilvitskii 2007)" if init == "kmeans++" else ""
    resampled = None
    if validity is not None and "resampling" in validity:
        resampled = validity["resampling"].dropna().astype(str).iloc[0] if len(validity) else None
    what = {"replicates": "the replicates of each time point", "genes": "the genes"}.get(
        str(resampled), _NOT_RECORDED
    )
    sentences.append(
        f"For every number of clusters c {scan_range}, {_num(n_starts)} random starts were "
        f"run{seeding}, and the consensus of the starts at the best objective was kept; "
        f"{_num(_setting(run, 'scan', 'n_resamples'))} resamples of {what} gave each "
        "cluster's Jaccard stability (Hennig 2007) and each membership's 5th–95th percentile "
        "interval."
    )

    structure = run.selection.get("structure", {})
    if structure:
        verdict = "found" if structure.get("present") else "did not find"
        sentences.append(
            "A test against one Gaussian with the data's covariance (adapted from SigClust, "
            f"Liu et al. 2008; {_num(structure.get('n_null'))} null data sets) {verdict} "
            f"cluster structure ({_p_value(float(structure.get('p_value', np.nan)))}, level "
            f"{_num(structure.get('alpha'))})."
        )
    c = int(run.selection.get("n_clusters", 0))
    recommended = int(run.selection.get("recommended", 0))
    clauses = _join_words(_criterion_clauses(run))
    rule = f"the largest c whose clusters were all {clauses}"
    if run.selection.get("method") == "fixed":
        sentences.append(
            f"c = {c} was fixed by the analyst; the rule ({rule}) recommended "
            f"{'no clusters' if recommended <= 1 else recommended}."
        )
    elif c > 1:
        sentences.append(f"c = {c} was chosen as {rule}.")
    else:
        sentences.append(
            f"No scanned c gave clusters that were all {clauses}, so no clusters were reported."
        )
    if run.thresholds and c > 1:
        levels = " and ".join(_num(t) for t in run.thresholds)
        sentences.append(
            f"Core genes of a cluster were those with membership of at least {levels} in it, "
            "unless the noise class was their largest membership."
        )
    seed = _setting(run, None, "seed")
    sentences.append(f"All random choices derive from seed {_num(seed)}.")
    names = {"numpy": "NumPy", "scipy": "SciPy", "pandas": "pandas", "anndata": "AnnData"}
    software = [f"{names[k]} {run.versions[k]}" for k in names if k in run.versions]
    if "python" in run.versions:
        software.append(f"Python {run.versions['python']}")
    if software:
        sentences.append(f"Software: gloam {version}, {', '.join(software)}.")
    return " ".join(sentences)


# ------------------------------------------------------------------ HTML building blocks


def _e(value: Any) -> str:
    """Text escaped for HTML content and attribute values (``html.escape`` with quotes)."""
    return html.escape(str(value), quote=True)


def _script_json(data_id: str, payload: str) -> str:
    """A JSON payload in a ``<script type="application/json">`` that no value can close."""
    safe = payload.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")
    return f'<script type="application/json" id="{_e(data_id)}">{safe}</script>'


def _json_column(values: pd.Series) -> tuple[str, str]:
    """(kind, JSON array) of one table column: numbers rounded for display, text as text."""
    if pd.api.types.is_bool_dtype(values):
        return "text", json.dumps(values.map({True: "True", False: "False"}).tolist())
    if pd.api.types.is_integer_dtype(values):
        return "num", "[" + ",".join(values.astype(np.int64).astype(str).tolist()) + "]"
    if pd.api.types.is_float_dtype(values):
        numbers = values.to_numpy(dtype=np.float64)
        finite = np.isfinite(numbers)
        text = np.char.mod(f"%.{DISPLAY_DIGITS}g", np.where(finite, numbers, 0.0))
        text = np.where(finite, text, "null")
        return "num", "[" + ",".join(text.tolist()) + "]"
    strings = values.astype(object).where(values.notna(), "").astype(str)
    return "text", json.dumps(strings.tolist(), ensure_ascii=False)


def _table_json(
    table: pd.DataFrame, links: Mapping[str, Sequence[str | None]] | None = None
) -> str:
    """A table as ``{"columns": [{"name", "kind"}], "data": [column arrays], "n": rows}``."""
    kinds, arrays = [], []
    for name in table.columns:
        kind, array = _json_column(table[name])
        kinds.append({"name": str(name), "kind": kind})
        arrays.append(array)
    parts = [
        '{"columns":' + json.dumps(kinds, ensure_ascii=False),
        '"data":[' + ",".join(arrays) + "]",
        f'"n":{len(table)}',
    ]
    if links:
        parts.append('"links":' + json.dumps(dict(links), ensure_ascii=False))
    return ",".join(parts) + "}"


def _table_block(
    data_id: str,
    table: pd.DataFrame,
    *,
    caption: str,
    page_rows: int,
    links: Mapping[str, Sequence[str | None]] | None = None,
    source: str | None = None,
) -> str:
    """A sortable, filterable table: its JSON and the container the script fills."""
    link = f' <a href="{_e(source)}">full table</a>' if source else ""
    return (
        f'<div class="table-block">'
        f'<p class="table-caption">{_e(caption)}{link}</p>'
        '<p class="print-only note">Printed: the first 25 rows as sorted on screen; the '
        "linked file holds the whole table.</p>"
        f'<div class="gtable" data-source="{_e(data_id)}" data-page="{int(page_rows)}">'
        f'<noscript><p class="note">This table needs JavaScript; the file is linked '
        f"above.</p></noscript></div>"
        f"{_script_json(data_id, _table_json(table, links))}</div>"
    )


def _relative_href(target: Path, page: Path) -> str:
    relative = os.path.relpath(target.resolve(), page.resolve().parent)
    return "/".join(urllib.parse.quote(part) for part in Path(relative).parts)


def _png_size(data: bytes) -> tuple[int, int, float | None]:
    """Width and height (pixels) and resolution (dpi, if recorded) of a PNG file."""
    if data[:8] != b"\x89PNG\r\n\x1a\n" or data[12:16] != b"IHDR":
        raise GloamError("figure is not a PNG file; rerun the figure step")
    width, height = struct.unpack(">II", data[16:24])
    dpi = None
    position = data.find(b"pHYs")
    if position > 0:
        x_per_unit, _y, unit = struct.unpack(">IIB", data[position + 4 : position + 13])
        if unit == 1:
            dpi = x_per_unit * 0.0254
    return width, height, dpi


def _figure_html(stem: str, path: Path, page: Path, scale: float) -> str:
    data = path.read_bytes()
    if path.suffix == ".png":
        width, _height, dpi = _png_size(data)
        css_width = round(width / (dpi or 96.0) * 96.0 * scale)
        mime = "image/png"
    else:
        css_width, mime = 720, "image/svg+xml"
    encoded = base64.b64encode(data).decode("ascii")
    caption = FIGURE_CAPTIONS.get(stem, f"Figure {stem}.")
    siblings = [
        f'<a href="{_e(_relative_href(other, page))}">{_e(other.suffix[1:].upper())}</a>'
        for other in sorted(path.parent.glob(f"{_glob_escape(stem)}.*"))
        if other.suffix in (".png", ".pdf", ".svg")
    ]
    return (
        f'<figure id="figure-{_e(stem)}">'
        f'<img src="data:{mime};base64,{encoded}" alt="{_e(stem)} figure: {_e(caption)}" '
        f'style="width:{css_width}px">'
        f"<figcaption><b>{_e(stem.capitalize())}.</b> {_e(caption)} "
        f'<span class="files">{" · ".join(siblings)}</span></figcaption></figure>'
    )


def _glob_escape(text: str) -> str:
    """``text`` with glob wildcards escaped (figure stems are matched literally)."""
    return re.sub(r"([*?\[])", r"[\1]", text)


def _chip(name: str, colour: str) -> str:
    return f'<span class="chip" style="--c:{_e(colour)}">{_e(name)}</span>'


def _palette(names: Sequence[str]) -> dict[str, dict[str, Any]]:
    """Colour and dash of every cluster name (as in the figures), and of the noise class."""
    from gloam.plots import NOISE_COLOUR, cluster_styles

    styles = {
        name: {"colour": style["color"], "dashed": style["linestyle"] != "-"}
        for name, style in zip(names, cluster_styles(len(names)), strict=True)
    }
    styles[_NOISE_COLUMN] = {"colour": NOISE_COLOUR, "dashed": False}
    return styles


# ------------------------------------------------------------------ the run page sections


def _decision_section(run: RunRecord, palette: Mapping[str, Mapping[str, Any]]) -> str:
    out = ['<section id="decision"><h2>1 · The decision</h2>']
    total, kept, dropped = _gene_counts(run)
    out.append("<h3>Genes</h3>")
    if total is not None:
        rows = "".join(
            f"<tr><td><code>{_e(reason)}</code></td><td class='n'>{_num(count)}</td>"
            f"<td>{_e(_drop_meaning(run, reason))}</td></tr>"
            for reason, count in dropped.items()
            if count > 0
        )
        unused = [reason for reason, count in dropped.items() if count == 0]
        out.append(
            f"<p><b>{_num(kept)}</b> of {_num(total)} input genes were kept for clustering; "
            f"{_num(total - (kept or 0))} were dropped.</p>"
            "<table class='plain'><thead><tr><th>step</th><th>genes</th><th>why</th></tr>"
            f"</thead><tbody>{rows}<tr class='kept'><td><code>kept</code></td>"
            f"<td class='n'>{_num(kept)}</td><td>clustered</td></tr></tbody></table>"
        )
        if unused:
            out.append(f"<p class='note'>No gene was removed by: {_e(', '.join(unused))}.</p>")
    else:
        out.append("<p class='note'>The preparation summary (prepared/summary.tsv) is missing.</p>")
    memberships = run.tables.get("memberships")
    if memberships is not None and "top_class" in memberships:
        n_noise = int((memberships["top_class"] == _NOISE_COLUMN).sum())
        out.append(
            f"<p>Of the {_num(len(memberships))} clustered genes, <b>{_num(n_noise)}</b> fit no "
            "cluster better than a flat profile (noise class largest); they are never core "
            "genes.</p>"
        )

    fz = run.fuzzifier
    out.append("<h3>Fuzzifier m</h3>")
    method = str(fz.get("method"))
    how = {
        "formula": (
            f"from the estimate of Schwämmle &amp; Jensen (2010) for {_num(fz.get('n_genes'))} "
            f"genes and {_num(fz.get('n_columns'))} time points"
        ),
        "randomised": "the smallest m at which shuffled data show no cluster structure",
        "fixed": "fixed in the config",
    }.get(method, _e(method))
    formula = f" (the formula gives {_num(fz.get('formula_m'), 4)})" if method != "formula" else ""
    passed = bool(fz.get("check_passed", True))
    verdict = (
        "<span class='ok'>passed</span>: shuffled data show no clusters at this m"
        if passed
        else "<span class='bad'>failed</span>: shuffled data still cluster at this m"
    )
    out.append(
        f"<p><b>m = {_num(fz.get('m'), 4)}</b>, {how}{formula}. Check on data shuffled within "
        f"each gene (c = {_num(fz.get('n_clusters_check'))}): structure index "
        f"{_num(fz.get('check_structure_index'), 2)}, {verdict}.</p>"
    )

    selection = run.selection
    structure = selection.get("structure", {})
    out.append("<h3>Is there any cluster structure?</h3>")
    if structure:
        present = bool(structure.get("present"))
        word = "<span class='ok'>Yes</span>" if present else "<span class='bad'>No</span>"
        out.append(
            f"<p>{word}. The fuzzy cluster index of the data, {_num(structure.get('statistic'))}"
            f" (at c = {_num(structure.get('n_clusters'))}), against "
            f"{_num(structure.get('null_mean'))} ± {_num(structure.get('null_sd'), 2)} for "
            f"{_num(structure.get('n_null'))} Gaussian data sets with the same covariance: "
            f"z = {_num(structure.get('z_score'))}, "
            f"{_p_value(float(structure.get('p_value', np.nan)))} (level "
            f"{_num(structure.get('alpha'))}).</p>"
        )
    c = int(selection.get("n_clusters", 0))
    out.append("<h3>Number of clusters c</h3>")
    chosen = "chosen by the rule" if selection.get("method") == "auto" else "fixed in the config"
    scanned = selection.get("scanned", [])
    scan_text = f"{min(scanned)}–{max(scanned)}" if scanned else "none"
    out.append(
        f"<p><b>c = {c}</b> ({chosen}; the rule recommends {_num(selection.get('recommended'))}"
        f"; scanned c = {_e(scan_text)}): {_e(selection.get('reason', ''))}.</p>"
    )
    validity = run.tables.get("validity")
    if validity is not None and {"n_clusters", "passes", "reason"} <= set(validity.columns):
        rows = []
        for row in validity.sort_values("n_clusters").itertuples(index=False):
            used = _truthy(getattr(row, "used", False))
            mark = (
                "<span class='ok'>passes</span>"
                if _truthy(row.passes)
                else "<span class='bad'>fails</span>"
            )
            why = re.sub(r"^fails:\s*", "", str(row.reason))
            rows.append(
                f"<tr{' class=used' if used else ''}><td class='n'>{int(row.n_clusters)}</td>"
                f"<td>{mark}{' <b>· used</b>' if used else ''}</td><td>{_e(why)}</td></tr>"
            )
        out.append(
            "<table class='plain decision'><thead><tr><th>c</th><th>verdict</th><th>why</th></tr>"
            f"</thead><tbody>{''.join(rows)}</tbody></table>"
        )
    clusters = run.tables.get("clusters")
    if clusters is not None and c > 1:
        unit = _e(run.settings.get("time_unit") or "")
        items = []
        for row in clusters.itertuples(index=False):
            colour = palette.get(str(row.cluster), palette[_NOISE_COLUMN])["colour"]
            items.append(
                f"<li>{_chip(str(row.cluster), colour)} {_num(row.n_top)} genes, "
                f"{_num(row.n_core)} core · Jaccard {_num(row.jaccard, 2)} · coherence "
                f"{_num(row.coherence, 2)} · peaks at {_num(row.peak_time)} {unit}</li>"
            )
        out.append(f"<ul class='clusters'>{''.join(items)}</ul>")

    out.append("<h3>Quality flags</h3>")
    flags = list(selection.get("flags", []))
    details = selection.get("flag_details", {})
    if flags:
        items = "".join(
            f"<li><code>{_e(name)}</code>: {_e(QUALITY_FLAGS.get(name, ''))}. "
            f"<span class='detail'>Detail: {_e(details.get(name, 'none recorded'))}.</span></li>"
            for name in flags
        )
        out.append(f"<ul class='flags'>{items}</ul>")
    else:
        out.append("<p class='ok-line'>No quality flag was raised for this run.</p>")
    out.append("</section>")
    return "".join(out)


def _figures_section(run: RunRecord, page: Path, scale: float) -> str:
    out = ['<section id="figures"><h2>2 · Figures</h2>']
    if not run.figures:
        out.append("<p class='note'>No figure was found in figures/.</p>")
    for stem, path in run.figures.items():
        out.append(_figure_html(stem, path, page, scale))
    out.append("</section>")
    return "".join(out)


def _tables_section(run: RunRecord, page: Path, page_rows: int) -> str:
    out = ['<section id="tables"><h2>3 · Tables</h2>']
    out.append(
        "<p class='note'>Click a column header to sort; type in the box to filter (text "
        "matches anywhere; <code>&gt;0.7</code>, <code>&lt;=0.05</code> or <code>=C3</code> "
        "compare within the chosen column). Numbers are rounded to "
        f"{DISPLAY_DIGITS} significant digits; the linked files hold full precision.</p>"
    )
    specs = (
        ("clusters", "clusters.tsv", "Clusters: one row per cluster."),
        ("validity", "validity.tsv", "Validity: the criteria and indices of every scanned c."),
        ("memberships", "memberships.tsv", "Memberships of every clustered gene."),
        (
            "gene_report",
            "prepared/gene_report.tsv",
            "Gene report: every input gene, kept or the step that dropped it.",
        ),
    )
    found = False
    for key, relative, caption in specs:
        table = run.tables.get(key)
        if table is None:
            continue
        found = True
        out.append(f'<h3 id="table-{_e(key)}">{_e(relative)}</h3>')
        out.append(
            _table_block(
                f"data-{key}",
                table,
                caption=caption,
                page_rows=page_rows,
                source=_relative_href(run.run_dir / relative, page),
            )
        )
    if not found:
        out.append("<p class='note'>No table was found.</p>")
    out.append("</section>")
    return "".join(out)


def _profile_axis(run: RunRecord) -> dict[str, Any]:
    """Positions (0..1) of the prepared columns on the lookup's time axis, with tick labels.

    Conditions sit side by side; within each, times are placed as on the figures' axis
    (:func:`gloam.plots.time_axis_transform`, compressed when sampling is uneven).
    """
    from gloam.plots import choose_time_scale, time_axis_transform

    columns = run.columns
    if columns.empty:
        return {"x": [], "labels": [], "segments": [], "scale": "linear"}
    times = columns["time"].to_numpy(dtype=float)
    conditions = columns["condition"].astype(str).to_numpy()
    scale = choose_time_scale(times)
    mapped = time_axis_transform(times, scale)
    names = list(dict.fromkeys(conditions.tolist()))
    gap = 0.12
    x = np.zeros(times.size)
    segments = []
    for index, name in enumerate(names):
        inside = conditions == name
        low, high = mapped[inside].min(), mapped[inside].max()
        span = high - low
        local = (mapped[inside] - low) / span if span > 0 else np.full(inside.sum(), 0.5)
        x[inside] = index * (1.0 + gap) + local
        segments.append([index * (1.0 + gap), index * (1.0 + gap) + 1.0, name])
    width = len(names) * (1.0 + gap) - gap
    labels = [f"{t:g}" for t in times]
    return {
        "x": (x / width).round(5).tolist(),
        "labels": labels,
        "segments": [[a / width, b / width, n] for a, b, n in segments] if len(names) > 1 else [],
        "scale": scale,
    }


def _lookup_section(run: RunRecord, palette: Mapping[str, Mapping[str, Any]]) -> str:
    out = ['<section id="lookup"><h2>4 · Gene lookup</h2>']
    memberships = run.tables.get("memberships")
    if memberships is None:
        out.append("<p class='note'>memberships.tsv is missing: no lookup.</p></section>")
        return "".join(out)
    genes = memberships["gene"].astype(str)
    names = run.cluster_names
    payload: dict[str, str] = {}
    robustness = run.tables.get("robustness")
    if robustness is not None:
        aligned = robustness.reindex(genes)
        payload["intervals"] = _table_json(aligned.reset_index(drop=True))
    zscores = run.tables.get("zscores")
    if zscores is not None:
        aligned = zscores.reindex(genes)
        payload["profiles"] = _table_json(aligned.reset_index(drop=True))
    centroids = run.tables.get("centroids")
    axis = _profile_axis(run)
    meta = {
        "clusters": names,
        "palette": palette,
        "columns": [str(c) for c in run.columns.index],
        "axis": axis,
        "time_unit": run.settings.get("time_unit") or "",
        "centroids": (
            {str(k): np.round(v, 4).tolist() for k, v in centroids.iterrows()}
            if centroids is not None
            else {}
        ),
        "reasons": {reason: _drop_meaning(run, reason) for reason in _DROP_MEANINGS},
        "thresholds": list(run.thresholds),
    }
    body = ",".join(f'"{key}":{value}' for key, value in payload.items())
    lookup_json = json.dumps(meta, ensure_ascii=False)[:-1] + ("," + body if body else "") + "}"
    example = (
        str(genes.iloc[int(np.argmax(memberships["top_membership"].to_numpy()))])
        if len(genes)
        else ""
    )
    out.append(
        "<p>Type a gene ID (as in the input matrix) to see its memberships with their "
        "resampling intervals (5th–95th percentile), its cluster and its profile. The page "
        f"address can carry a gene: <code>#gene={_e(urllib.parse.quote(example))}</code>.</p>"
        '<div class="lookup-bar"><label for="gene-input">Gene</label> '
        '<input id="gene-input" type="search" autocomplete="off" spellcheck="false" '
        f'placeholder="e.g. {_e(example)}"></div>'
        '<div id="gene-result" aria-live="polite"></div>'
        "<noscript><p class='note'>The lookup needs JavaScript.</p></noscript>"
    )
    out.append(_script_json("data-lookup", lookup_json))
    out.append("</section>")
    return "".join(out)


def _methods_section(run: RunRecord) -> str:
    text = methods_paragraph(run)
    references = "".join(f"<li>{_e(reference)}</li>" for reference in cited_references(text))
    note = (
        ""
        if run.versions_from_run
        else "<p class='note'>The run recorded no package versions; those named are the ones "
        "installed where this page was written.</p>"
    )
    return (
        '<section id="methods"><h2>5 · Methods</h2>'
        "<p class='note'>Written from this run's settings and results, for you to adapt.</p>"
        f'<p class="methods" id="methods-text">{_e(text)}</p>{note}'
        f"<h3>References</h3><ol class='refs'>{references}</ol></section>"
    )


def _file_meaning(relative: str) -> str:
    """What a run file holds, from the registry of run files (gloam.artifacts)."""
    return file_meaning(relative)


_FILE_GROUPS = (
    ("Results", re.compile(r"[^/]+\.(tsv|json|h5ad)")),
    ("Gene sets", re.compile(r"genesets/.*")),
    ("Figures", re.compile(r"figures/.*")),
    ("Conditions compared", re.compile(r"comparison/.*")),
    ("Preparation", re.compile(r"prepared/.*")),
    ("Intermediate files", re.compile(r".*")),
)


def _natural_key(text: str) -> list[Any]:
    """Sort key that orders ``c2`` before ``c10``."""
    return [int(part) if part.isdigit() else part for part in re.split(r"(\d+)", text)]


def _files_section(run: RunRecord, page: Path) -> str:
    out = ['<section id="files"><h2>6 · Output files</h2>']
    page_resolved = page.resolve()
    groups: dict[str, list[Path]] = {name: [] for name, _pattern in _FILE_GROUPS}
    for path in run.files:
        if path.resolve() == page_resolved:
            continue
        relative = path.relative_to(run.run_dir).as_posix()
        group = next(name for name, pattern in _FILE_GROUPS if pattern.fullmatch(relative))
        groups[group].append(path)
    rows = []
    for group, paths in groups.items():
        if not paths:
            continue
        rows.append(f"<tr class='group'><th colspan='3'>{_e(group)}</th></tr>")
        for path in sorted(paths, key=lambda p: _natural_key(p.as_posix())):
            relative = path.relative_to(run.run_dir).as_posix()
            rows.append(
                f'<tr><td><a href="{_e(_relative_href(path, page))}">{_e(relative)}</a></td>'
                f"<td class='n'>{_e(_size(path.stat().st_size))}</td>"
                f"<td>{_e(_file_meaning(relative))}</td></tr>"
            )
    out.append(
        "<p class='note'>Links are relative to this page: keep the page in place beside the "
        "run's files (or move them together).</p>"
        "<table class='plain files'><thead><tr><th>file</th><th>size</th><th>content</th></tr>"
        f"</thead><tbody>{''.join(rows)}</tbody></table></section>"
    )
    return "".join(out)


def _size(n_bytes: int) -> str:
    for unit in ("B", "kB", "MB", "GB"):
        if n_bytes < 1000 or unit == "GB":
            return f"{n_bytes:.0f} {unit}" if unit == "B" else f"{n_bytes:.1f} {unit}"
        n_bytes /= 1000  # type: ignore[assignment]
    return ""


def _page(title: str, header: str, nav: Sequence[tuple[str, str]], body: str) -> str:
    links = "".join(f'<a href="#{_e(anchor)}">{_e(label)}</a>' for anchor, label in nav)
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        '<meta name="generator" content="gloam">'
        f"<title>{_e(title)}</title><style>{_CSS}</style></head><body>"
        f'<header class="top"><div class="wrap">{header}'
        f'<nav>{links}</nav></div></header><main class="wrap">'
        f'<p class="caution" role="note"><b>For research use.</b> {_e(RESEARCH_ONLY_NOTE)}</p>'
        f"{body}</main>"
        '<footer class="wrap"><p>Written by gloam. Works offline: everything it shows is in '
        "this file; the links point to the run's own files.</p></footer>"
        f"<script>{_SCRIPT}</script></body></html>\n"
    )


def write_run_page(
    run_dir: PathLike,
    out_html: PathLike,
    *,
    run_name: str | None = None,
    settings: Mapping[str, Any] | None = None,
    page_rows: int = DEFAULT_PAGE_ROWS,
    figure_scale: float = 1.25,
) -> Path:
    """Write one self-contained HTML page for one run, from the files in its folder.

    The page works offline and is one file: figures are embedded (base64 PNG, SVG when no
    PNG exists), tables are embedded as JSON and drawn by an inline script, and links to the
    run's files are relative to ``out_html`` (so keep the page where it was written, relative
    to the run folder). Sections, in order: the decision, figures, tables, gene lookup
    (``out_html#gene=GENEID`` opens it on a gene), methods paragraph, output files.

    Parameters
    ----------
    run_dir : str or PathLike
        The run folder (see :func:`read_run`).
    out_html : str or PathLike
        The page to write (parent folders are created). Written atomically.
    run_name : str, optional
        Name shown on the page; the folder's name by default.
    settings : mapping, optional
        The run's settings; they override those recorded in ``gloam.h5ad`` (see
        :func:`read_run`).
    page_rows : int
        Rows of each table drawn at first (>= 1); the rest on request.
    figure_scale : float
        On-screen size of the figures relative to their print size (> 0).

    Returns
    -------
    Path
        ``out_html``.

    Raises
    ------
    GloamError
        If the run folder is incomplete (see :func:`read_run`) or an option is out of range.
    """
    if int(page_rows) < 1:
        raise GloamError(f"page_rows must be at least 1; got {page_rows!r}")
    if not float(figure_scale) > 0:
        raise GloamError(f"figure_scale must be positive; got {figure_scale!r}")
    page = Path(out_html)
    run = read_run(run_dir, run_name=run_name, settings=settings)
    palette = _palette(run.cluster_names)
    c = int(run.selection.get("n_clusters", 0))
    flags = run.selection.get("flags", [])
    memberships = run.tables.get("memberships")
    n_genes = _num(len(memberships)) if memberships is not None else "?"
    flag_text = f"quality flags: {', '.join(flags)}" if flags else "no quality flags"
    header = (
        f'<p class="kicker">gloam run report</p><h1>{_e(run.run_name)}</h1>'
        f'<p class="facts">c = {c} · m = {_num(run.fuzzifier.get("m"), 4)} · '
        f"{n_genes} genes clustered · {_e(flag_text)}</p>"
    )
    body = "".join(
        [
            _decision_section(run, palette),
            _figures_section(run, page, float(figure_scale)),
            _tables_section(run, page, int(page_rows)),
            _lookup_section(run, palette),
            _methods_section(run),
            _files_section(run, page),
        ]
    )
    nav = [
        ("decision", "Decision"),
        ("figures", "Figures"),
        ("tables", "Tables"),
        ("lookup", "Gene lookup"),
        ("methods", "Methods"),
        ("files", "Files"),
    ]
    text = _page(f"gloam · {run.run_name}", header, nav, body)
    page.parent.mkdir(parents=True, exist_ok=True)
    with atomic_output(page) as temporary:
        Path(temporary).write_text(text, encoding="utf-8")
    return page


#: Columns of the index table shown first (the rest of summary.tsv follows).
_INDEX_FIRST_COLUMNS = (
    "run",
    "n_clusters",
    "recommended_n_clusters",
    "m",
    "flags",
    "n_genes_clustered",
    "n_noise",
    "min_jaccard",
    "structure_p_value",
)


def write_index_page(
    run_pages: Mapping[str, PathLike],
    summary_tsv: PathLike,
    out_html: PathLike,
    *,
    title: str = "gloam runs",
) -> Path:
    """Write one index page over all runs: the rows of ``summary.tsv`` with links to each run.

    The table can be sorted and filtered like the tables of a run page. Links (to each run
    page and to ``summary.tsv``) are relative to ``out_html``.

    Parameters
    ----------
    run_pages : mapping of str to str or PathLike
        Run name (as in the ``run`` column of the summary) to its page. Runs of the summary
        without a page are listed without a link.
    summary_tsv : str or PathLike
        The summary over runs (:func:`gloam.stages.summarise_runs`).
    out_html : str or PathLike
        The page to write (parent folders are created). Written atomically.
    title : str
        Title of the page.

    Returns
    -------
    Path
        ``out_html``.

    Raises
    ------
    GloamError
        If the summary cannot be read or has no ``run`` column, or a page is named for a
        run the summary does not list.
    """
    page = Path(out_html)
    summary = _read_tsv(
        Path(summary_tsv),
        text_columns=(
            "run",
            "dataset",
            "condition",
            "variant",
            "flags",
            "m_method",
            "n_clusters_method",
        ),
    )
    if "run" not in summary.columns:
        raise GloamError(
            f"summary {str(summary_tsv)!r} has no 'run' column; rerun the summary step"
        )
    unknown = sorted(set(run_pages) - set(summary["run"].astype(str)))
    if unknown:
        raise GloamError(
            f"run pages given for runs not in {str(summary_tsv)!r}: {', '.join(unknown)}; "
            "give pages only for the runs of the summary"
        )
    for column in summary.columns:
        if column.startswith("core_sizes_") or column in ("condition", "variant", "flags"):
            summary[column] = summary[column].fillna("").astype(str)
    first = [column for column in _INDEX_FIRST_COLUMNS if column in summary.columns]
    core = [column for column in summary.columns if column.startswith("core_genes_")]
    summary = summary[[*first, *core, *(c for c in summary.columns if c not in {*first, *core})]]
    hrefs = {name: _relative_href(Path(path), page) for name, path in run_pages.items()}
    links = {"run": [hrefs.get(name) for name in summary["run"].astype(str)]}
    flagged = int((summary.get("flags", pd.Series(dtype=str)).fillna("") != "").sum())
    missing = [name for name in summary["run"].astype(str) if name not in hrefs]
    body = [
        '<section id="runs"><h2>Runs</h2>',
        f"<p>{_num(len(summary))} run{'s' if len(summary) != 1 else ''}; "
        f"{_num(flagged)} with quality flags. Click a run to open its page.</p>",
    ]
    if missing:
        body.append(f"<p class='note'>No page for: {_e(', '.join(missing))}.</p>")
    body.append(
        _table_block(
            "data-summary",
            summary,
            caption="One row per run (summary.tsv).",
            page_rows=DEFAULT_PAGE_ROWS,
            links=links,
            source=_relative_href(Path(summary_tsv), page),
        )
    )
    body.append(
        "<h3>Columns</h3><p class='note'>m and c used and how they were chosen; "
        "<code>recommended_n_clusters</code> (1 = no clusters the data support); "
        "<code>structure_p_value</code> (test against one Gaussian); <code>min_jaccard</code> "
        "(least robust cluster); <code>flags</code> (quality flags); "
        "<code>core_genes_&lt;t&gt;</code> and <code>core_sizes_&lt;t&gt;</code> (core genes "
        "at threshold t).</p></section>"
    )
    header = f'<p class="kicker">gloam</p><h1>{_e(title)}</h1>'
    text = _page(title, header, [("runs", "Runs")], "".join(body))
    page.parent.mkdir(parents=True, exist_ok=True)
    with atomic_output(page) as temporary:
        Path(temporary).write_text(text, encoding="utf-8")
    return page


# ------------------------------------------------------------------ style and script

_CSS = """
:root{--ink:#1f2328;--muted:#5d6570;--rule:#d9dde3;--soft:#f4f5f7;--accent:#2f4a6d;
--ok:#1b6e3a;--bad:#a4281c;font-family:system-ui,-apple-system,"Segoe UI",Roboto,
"Helvetica Neue",Arial,sans-serif;color:var(--ink);line-height:1.5}
*{box-sizing:border-box}body{margin:0;background:#fff;font-size:15px}
.wrap{max-width:1120px;margin:0 auto;padding:0 22px}
header.top{background:var(--accent);color:#fff;padding:14px 0 0;margin-bottom:18px}
header.top h1{margin:0 0 2px;font-size:26px;font-weight:650;word-break:break-all}
.kicker{margin:0;text-transform:uppercase;letter-spacing:.08em;font-size:12px;opacity:.8}
.facts{margin:0 0 10px;opacity:.92}
nav{display:flex;flex-wrap:wrap;gap:2px 18px;padding:6px 0 8px;border-top:1px solid #ffffff33}
nav a{color:#fff;text-decoration:none;font-size:14px;opacity:.9}nav a:hover{opacity:1;
text-decoration:underline}
h2{font-size:21px;margin:34px 0 8px;padding-bottom:4px;border-bottom:2px solid var(--accent);
color:var(--accent)}h3{font-size:16px;margin:20px 0 6px}
.caution{border-left:4px solid #b7791f;background:#fdf6e9;padding:8px 12px;margin:0 0 8px}
.note{color:var(--muted);font-size:13.5px}.ok{color:var(--ok);font-weight:600}
.bad{color:var(--bad);font-weight:600}.ok-line{color:var(--ok)}
code{font-family:ui-monospace,SFMono-Regular,Menlo,Consolas,monospace;font-size:.9em;
background:var(--soft);padding:0 3px;border-radius:3px}
table{border-collapse:collapse;font-size:13.5px}
table.plain{margin:6px 0 10px}table.decision td:nth-child(2){white-space:nowrap}
table.plain th,table.plain td{padding:3px 10px 3px 0;
text-align:left;vertical-align:top;border-bottom:1px solid var(--rule)}
td.n,th.n{text-align:right;font-variant-numeric:tabular-nums}
tr.used td{background:#eef3f9;font-weight:600}tr.kept td{font-weight:600}
.chip{display:inline-block;min-width:2.4em;padding:0 6px;border-radius:3px;color:#fff;
background:var(--c);font-weight:600;font-size:12.5px;text-align:center;
-webkit-print-color-adjust:exact;print-color-adjust:exact}
ul.clusters{list-style:none;padding:0;margin:8px 0}ul.clusters li{margin:3px 0}
ul.flags li{margin:4px 0}.detail{color:var(--muted)}
figure{margin:18px 0 26px;break-inside:avoid}figure img{max-width:100%;height:auto;
display:block;border:1px solid var(--rule)}
figcaption{font-size:13.5px;color:var(--ink);margin-top:6px;max-width:820px}
figcaption .files a,.table-caption a{margin-left:4px;font-size:12.5px}
.table-block{margin:4px 0 18px}.table-caption{margin:2px 0 6px;font-size:13.5px}
.gtools{display:flex;flex-wrap:wrap;align-items:center;gap:6px 10px;margin-bottom:6px;
font-size:13.5px}
.gtools input,.gtools select,.lookup-bar input{font:inherit;padding:4px 8px;
border:1px solid #b9c0c9;border-radius:4px}
.gtools input{width:240px}.gcount{color:var(--muted)}
.gscroll{max-height:440px;overflow:auto;border:1px solid var(--rule)}
.gscroll table{width:100%}
.gscroll th{position:sticky;top:0;background:var(--soft);z-index:1;text-align:left;
padding:0;border-bottom:1px solid #c4cad2;white-space:nowrap}
.gscroll th button{all:unset;cursor:pointer;display:block;padding:5px 8px;font-weight:600}
.gscroll th button:focus-visible{outline:2px solid var(--accent)}
.gscroll th[aria-sort=ascending] button::after{content:" \\25B2";font-size:10px}
.gscroll th[aria-sort=descending] button::after{content:" \\25BC";font-size:10px}
.gscroll td{padding:3px 8px;border-bottom:1px solid #eceef1;white-space:nowrap}
.gscroll td.num{text-align:right;font-variant-numeric:tabular-nums}
.gscroll tbody tr:nth-child(even) td{background:#fafbfc}
button.more{font:inherit;font-size:13px;margin-top:6px;padding:3px 10px;cursor:pointer;
border:1px solid #b9c0c9;border-radius:4px;background:#fff}
.lookup-bar{display:flex;align-items:center;gap:10px;margin:8px 0}
.lookup-bar input{width:300px;font-size:15px}
#gene-result{min-height:40px}.gene-card{border:1px solid var(--rule);border-radius:6px;
padding:10px 14px;margin:6px 0;display:flex;flex-wrap:wrap;gap:6px 28px}
.gene-card h3{margin:0 0 4px;width:100%;word-break:break-all}
.gene-card .col{flex:1 1 360px;min-width:300px}
table.mship td{padding:2px 8px 2px 0;border-bottom:1px solid #eceef1;white-space:nowrap}
.bar{position:relative;width:150px;height:12px;background:var(--soft);border-radius:2px}
.bar span{position:absolute;top:0;bottom:0;left:0;border-radius:2px;
-webkit-print-color-adjust:exact;print-color-adjust:exact}
.bar i{position:absolute;top:5px;height:2px;background:var(--ink)}
.suggest a{margin-right:10px}
p.methods{background:var(--soft);padding:12px 14px;border-radius:6px;max-width:900px}
ol.refs{font-size:13.5px;max-width:900px}
table.files td{font-size:13px}
table.files tr.group th{padding-top:12px;color:var(--accent)}table.files a{word-break:break-all}
.print-only{display:none}
footer{color:var(--muted);font-size:12.5px;margin-top:40px;padding-bottom:30px}
@media print{header.top{background:none;color:var(--ink);border-bottom:2px solid var(--ink)}
nav,.gtools,button.more,.lookup-bar,noscript{display:none}
.gscroll{max-height:none;overflow:visible}.gscroll th{position:static}
.gscroll table{font-size:8pt}.gscroll tbody tr:nth-child(n+26){display:none}
.print-only{display:block}
body{font-size:11pt}h2{break-after:avoid}a{color:inherit}}
"""

# The page's only script: tables (sort, filter, render the first rows) and the gene lookup.
# Data enter the document only through textContent and attribute setters, never innerHTML.
_SCRIPT = r"""
(function () {
  "use strict";
  var SVGNS = "http://www.w3.org/2000/svg";
  var INK = "#1f2328", MUTED = "#5d6570";
  function readJSON(id) {
    var node = document.getElementById(id);
    return node ? JSON.parse(node.textContent) : null;
  }
  function set(node, attrs) {
    Object.keys(attrs || {}).forEach(function (k) { node.setAttribute(k, attrs[k]); });
    return node;
  }
  function el(tag, attrs, text) {
    var node = set(document.createElement(tag), attrs);
    if (text !== undefined && text !== null) { node.textContent = String(text); }
    return node;
  }
  function svg(tag, attrs, text) {
    var node = set(document.createElementNS(SVGNS, tag), attrs);
    if (text !== undefined) { node.textContent = String(text); }
    return node;
  }
  function words(node, text) { node.appendChild(document.createTextNode(text)); }
  function show(v) {
    if (v === null || v === undefined) { return ""; }
    if (typeof v !== "number" || v === 0 || !isFinite(v)) { return String(v); }
    var a = Math.abs(v);
    return a >= 1e-3 && a < 1e7 ? String(Number(v.toPrecision(4))) : v.toExponential(2);
  }
  function fmt(v) { return v === null || v === undefined || isNaN(v) ? "n/a" : v.toFixed(3); }
  function percent(v) { return Math.round(100 * v) + " %"; }
  var LOOKUP = readJSON("data-lookup");
  var PALETTE = LOOKUP ? LOOKUP.palette : {};
  var CLUSTER_COLUMNS = { cluster: 1, top_class: 1, nearest: 1 };

  function chip(name) {
    var node = el("span", { "class": "chip" }, name);
    node.style.setProperty("--c", PALETTE[name] ? PALETTE[name].colour : "#8a9099");
    return node;
  }

  // ---------------------------------------------------------------- tables
  function Table(root) {
    var spec = readJSON(root.getAttribute("data-source"));
    var page = parseInt(root.getAttribute("data-page"), 10) || 100;
    var n = spec.n, cols = spec.columns, data = spec.data, links = spec.links || {};
    var text = data.map(function (column) { return column.map(show); });
    var rowText = null;
    var state = { sort: -1, dir: 1, limit: page, rows: [] };
    var tools = el("div", { "class": "gtools" });
    var input = el("input", { type: "search", placeholder: "filter rows",
      "aria-label": "filter rows" });
    var select = el("select", { "aria-label": "column to filter" });
    select.appendChild(el("option", { value: "-1" }, "any column"));
    cols.forEach(function (c, j) {
      select.appendChild(el("option", { value: String(j) }, c.name));
    });
    var count = el("span", { "class": "gcount", "aria-live": "polite" });
    tools.appendChild(input); tools.appendChild(select); tools.appendChild(count);
    var scroll = el("div", { "class": "gscroll" });
    var table = el("table"), thead = el("thead"), tbody = el("tbody"), head = el("tr");
    cols.forEach(function (c, j) {
      var th = el("th", { scope: "col" });
      var button = el("button", { type: "button", title: "sort by " + c.name }, c.name);
      button.addEventListener("click", function () { sortBy(j); });
      th.appendChild(button); head.appendChild(th);
    });
    thead.appendChild(head); table.appendChild(thead); table.appendChild(tbody);
    scroll.appendChild(table);
    var more = el("button", { type: "button", "class": "more" }, "show more rows");
    more.addEventListener("click", function () { state.limit += page; render(); });
    root.textContent = "";
    root.appendChild(tools); root.appendChild(scroll); root.appendChild(more);

    function compare(op, v, num) {
      if (op === "<") { return v < num; }
      if (op === ">") { return v > num; }
      return op === "<=" ? v <= num : v >= num;
    }
    function matcher(query, column) {
      var q = query.trim();
      if (!q) { return null; }
      var cmp = /^(<=|>=|<|>|=)\s*(.+)$/.exec(q);
      if (cmp && column >= 0) {
        var op = cmp[1], raw = cmp[2].trim(), num = Number(raw), values = data[column];
        var numeric = cols[column].kind === "num" && !isNaN(num);
        return function (i) {
          var v = values[i];
          if (op === "=") { return numeric ? v === num : show(v) === raw; }
          return numeric && v !== null && compare(op, v, num);
        };
      }
      var needle = q.toLowerCase();
      if (column >= 0) {
        var colText = text[column];
        return function (i) { return colText[i].toLowerCase().indexOf(needle) >= 0; };
      }
      if (rowText === null) {
        rowText = new Array(n);
        for (var i = 0; i < n; i++) {
          var parts = [];
          for (var j = 0; j < cols.length; j++) { parts.push(text[j][i]); }
          rowText[i] = parts.join("\u0001").toLowerCase();
        }
      }
      return function (i) { return rowText[i].indexOf(needle) >= 0; };
    }
    function empty(v) { return v === null || v === ""; }
    function compute() {
      var test = matcher(input.value, parseInt(select.value, 10));
      var rows = [];
      for (var i = 0; i < n; i++) { if (!test || test(i)) { rows.push(i); } }
      if (state.sort >= 0) {
        var values = data[state.sort], numeric = cols[state.sort].kind === "num";
        var dir = state.dir;
        rows.sort(function (a, b) {
          var x = values[a], y = values[b];
          if (empty(x)) { return empty(y) ? a - b : 1; }
          if (empty(y)) { return -1; }
          var order = numeric ? x - y
            : String(x).localeCompare(String(y), undefined, { numeric: true });
          return order !== 0 ? dir * order : a - b;
        });
      }
      state.rows = rows;
    }
    function cell(j, i) {
      var v = data[j][i], name = cols[j].name, td = el("td");
      if (cols[j].kind === "num") { td.className = "num"; }
      var href = links[name] ? links[name][i] : null;
      if (href) {
        td.appendChild(el("a", { href: href }, show(v)));
      } else if (CLUSTER_COLUMNS[name] && v && PALETTE[v]) {
        td.appendChild(chip(v));
      } else if (name === "gene" && LOOKUP) {
        td.appendChild(el("a", { href: "#gene=" + encodeURIComponent(show(v)) }, show(v)));
      } else {
        td.textContent = show(v);
      }
      return td;
    }
    function render() {
      var rows = state.rows, shown = Math.min(state.limit, rows.length);
      var fragment = document.createDocumentFragment();
      for (var r = 0; r < shown; r++) {
        var tr = el("tr");
        for (var j = 0; j < cols.length; j++) { tr.appendChild(cell(j, rows[r])); }
        fragment.appendChild(tr);
      }
      tbody.textContent = "";
      tbody.appendChild(fragment);
      count.textContent = "showing " + shown + " of " + rows.length + " matching rows (" +
        n + " in all)";
      more.style.display = shown < rows.length ? "" : "none";
      Array.prototype.forEach.call(head.children, function (th, j) {
        if (j !== state.sort) { th.removeAttribute("aria-sort"); return; }
        th.setAttribute("aria-sort", state.dir > 0 ? "ascending" : "descending");
      });
    }
    function sortBy(j) {
      if (state.sort === j) { state.dir = -state.dir; } else { state.sort = j; state.dir = 1; }
      compute(); render();
    }
    function refilter() { state.limit = page; compute(); render(); }
    input.addEventListener("input", refilter);
    select.addEventListener("change", refilter);
    compute(); render();
  }
  Array.prototype.forEach.call(document.querySelectorAll(".gtable"), Table);

  // ---------------------------------------------------------------- gene lookup
  if (!LOOKUP) { return; }
  var M = readJSON("data-memberships");
  var REPORT = readJSON("data-gene_report");
  function columnIndex(spec, name) {
    if (!spec) { return -1; }
    for (var j = 0; j < spec.columns.length; j++) {
      if (spec.columns[j].name === name) { return j; }
    }
    return -1;
  }
  function indexGenes(spec) {
    var exact = {}, lower = {}, j = columnIndex(spec, "gene");
    if (j < 0) { return null; }
    spec.data[j].forEach(function (g, i) {
      exact[g] = i;
      var key = String(g).toLowerCase();
      if (!(key in lower)) { lower[key] = i; }
    });
    return { exact: exact, lower: lower, genes: spec.data[j] };
  }
  var MI = indexGenes(M), RI = indexGenes(REPORT);
  function value(spec, name, i) {
    var j = columnIndex(spec, name);
    return j < 0 ? null : spec.data[j][i];
  }
  function has(object, key) { return Object.prototype.hasOwnProperty.call(object, key); }
  function find(index, query) {
    if (!index) { return -1; }
    if (has(index.exact, query)) { return index.exact[query]; }
    var key = query.toLowerCase();
    return has(index.lower, key) ? index.lower[key] : -1;
  }
  var input = document.getElementById("gene-input");
  var result = document.getElementById("gene-result");

  function profileSVG(i, top) {
    var P = LOOKUP.profiles, axis = LOOKUP.axis;
    if (!P || !axis.x.length) { return null; }
    var z = P.data.map(function (column) { return column[i]; });
    var centroid = LOOKUP.centroids[top] || null;
    var style = PALETTE[top] || { colour: "#7a7a7a", dashed: false };
    var W = 520, H = 246, L = 44, R = 14, T = 30, B = 46, mid = T + (H - T - B) / 2;
    var all = z.concat(centroid || []).filter(function (v) { return v !== null; });
    var lim = Math.max(1.5, Math.ceil(Math.max.apply(null, all.map(Math.abs)) * 2) / 2);
    function X(p) { return L + p * (W - L - R); }
    function Y(v) { return T + (lim - v) / (2 * lim) * (H - T - B); }
    var root = svg("svg", { viewBox: "0 0 " + W + " " + H, width: W, height: H,
      role: "img", "class": "profile",
      "aria-label": "profile of the gene and the centroid of " + top });
    function add(tag, attrs, text) { return root.appendChild(svg(tag, attrs, text)); }
    function label(x, y, text, extra) {
      var attrs = { x: x, y: y, "text-anchor": "middle", "font-size": 11, fill: INK };
      Object.keys(extra || {}).forEach(function (k) { attrs[k] = extra[k]; });
      return add("text", attrs, text);
    }
    add("rect", { x: L, y: T, width: W - L - R, height: H - T - B, fill: "#fbfbfc",
      stroke: "#d9dde3" });
    for (var t = -Math.floor(lim); t <= Math.floor(lim); t++) {
      add("line", { x1: L, x2: W - R, y1: Y(t), y2: Y(t),
        stroke: t === 0 ? "#9aa1aa" : "#eceef1" });
      label(L - 6, Y(t) + 4, String(t), { "text-anchor": "end", fill: MUTED });
    }
    var last = -1e9;
    axis.x.forEach(function (p, k) {
      add("line", { x1: X(p), x2: X(p), y1: H - B, y2: H - B + 4, stroke: MUTED });
      if (X(p) - last >= 26) { label(X(p), H - B + 16, axis.labels[k]); last = X(p); }
    });
    axis.segments.forEach(function (s) {
      label(X((s[0] + s[1]) / 2), H - 6, s[2], { "font-weight": 600 });
    });
    if (!axis.segments.length) {
      var unit = LOOKUP.time_unit ? " (" + LOOKUP.time_unit + ")" : "";
      var scale = axis.scale === "linear" ? "" : ", " + axis.scale + " scale";
      label((L + W - R) / 2, H - 8, "time" + unit + scale, { fill: MUTED });
    }
    label(12, mid, "z-score", { fill: MUTED, transform: "rotate(-90 12 " + mid + ")" });
    function path(values, stroke, width, dash) {
      var d = "", pen = "M";
      values.forEach(function (v, k) {
        if (v === null) { pen = "M"; return; }
        d += pen + X(axis.x[k]).toFixed(1) + " " + Y(v).toFixed(1) + " ";
        pen = "L";
      });
      var attrs = { d: d, fill: "none", stroke: stroke, "stroke-width": width,
        "stroke-linejoin": "round" };
      if (dash) { attrs["stroke-dasharray"] = "6 4"; }
      add("path", attrs);
    }
    if (centroid) { path(centroid, style.colour, 3.2, style.dashed); }
    path(z, INK, 1.6, false);
    z.forEach(function (v, k) {
      if (v !== null) { add("circle", { cx: X(axis.x[k]), cy: Y(v), r: 2.6, fill: INK }); }
    });
    add("line", { x1: L, x2: L + 18, y1: 12, y2: 12, stroke: INK, "stroke-width": 1.6 });
    label(L + 22, 16, "this gene", { "text-anchor": "start" });
    if (centroid) {
      var key = { x1: L + 92, x2: L + 110, y1: 12, y2: 12, stroke: style.colour,
        "stroke-width": 3.2 };
      if (style.dashed) { key["stroke-dasharray"] = "6 4"; }
      add("line", key);
      label(L + 114, 16, "centroid of " + top, { "text-anchor": "start" });
    }
    return root;
  }

  function membershipTable(i) {
    var I = LOOKUP.intervals, table = el("table", { "class": "mship" });
    var head = el("tr"), thead = el("thead"), body = el("tbody");
    ["class", "membership", "", "resampling interval", "core in resamples"].forEach(
      function (h) { head.appendChild(el("th", null, h)); });
    thead.appendChild(head); table.appendChild(thead);
    LOOKUP.clusters.concat(["noise"]).forEach(function (name) {
      var m = value(M, name, i);
      if (m === null && name === "noise") { return; }
      var lo = I ? value(I, name + "_low", i) : null, hi = I ? value(I, name + "_high", i) : null;
      var core = I ? value(I, name + "_core_share", i) : null;
      var tr = el("tr", { "data-class": name });
      tr.appendChild(el("td")).appendChild(chip(name));
      tr.appendChild(el("td", { "class": "num membership" }, fmt(m)));
      var bar = el("div", { "class": "bar", title: name + " " + fmt(m) });
      var fill = bar.appendChild(el("span"));
      fill.style.width = (100 * (m || 0)).toFixed(1) + "%";
      fill.style.background = (PALETTE[name] || {}).colour || "#8a9099";
      if (lo !== null && hi !== null) {
        var whisker = bar.appendChild(el("i"));
        whisker.style.left = (100 * lo).toFixed(1) + "%";
        whisker.style.width = Math.max(0.8, 100 * (hi - lo)).toFixed(1) + "%";
      }
      tr.appendChild(el("td")).appendChild(bar);
      var interval = lo !== null && hi !== null ? fmt(lo) + " – " + fmt(hi) : "";
      tr.appendChild(el("td", { "class": "interval" }, interval));
      tr.appendChild(el("td", { "class": "num" }, core !== null ? percent(core) : ""));
      body.appendChild(tr);
    });
    table.appendChild(body);
    return table;
  }

  function nearestCluster(i) {
    var best = -1, nearest = null;
    LOOKUP.clusters.forEach(function (name) {
      var m = value(M, name, i);
      if (m !== null && m > best) { best = m; nearest = name; }
    });
    return nearest;
  }

  function showGene(i) {
    var gene = show(value(M, "gene", i)), top = show(value(M, "top_class", i));
    var card = el("div", { "class": "gene-card", "data-gene": gene, "data-top-class": top });
    card.appendChild(el("h3", null, gene));
    var left = card.appendChild(el("div", { "class": "col" }));
    var line = left.appendChild(el("p", { "class": "gene-cluster" }));
    var nearest = top;
    if (top === "noise") {
      nearest = nearestCluster(i);
      words(line, "Top class: ");
      line.appendChild(chip("noise"));
      words(line, " — no closer to any cluster's response than to a flat profile, so never " +
        "a core gene. Nearest cluster: ");
      if (nearest) { line.appendChild(chip(nearest)); }
    } else {
      words(line, "Cluster: ");
      line.appendChild(chip(top));
      words(line, " with membership " + fmt(value(M, "top_membership", i)));
    }
    var share = value(M, "resampled_top_share", i), starts = value(M, "start_agreement", i);
    var facts = [];
    if (share !== null) { facts.push("same top class in " + percent(share) + " of resamples"); }
    if (starts !== null) {
      facts.push(percent(starts) + " of random starts agree on the top cluster");
    }
    if (LOOKUP.thresholds.length && top !== "noise") {
      var tm = value(M, "top_membership", i);
      var core = LOOKUP.thresholds.filter(function (t) { return tm >= t; });
      facts.push(core.length ? "core gene at threshold " + core.join(" and ")
        : "not a core gene at " + LOOKUP.thresholds.join(" or "));
    }
    if (facts.length) { left.appendChild(el("p", { "class": "note" }, facts.join("; ") + ".")); }
    left.appendChild(membershipTable(i));
    var picture = nearest ? profileSVG(i, nearest) : null;
    if (picture) { card.appendChild(el("div", { "class": "col" })).appendChild(picture); }
    result.textContent = "";
    result.appendChild(card);
    if (window.history && window.history.replaceState) {
      window.history.replaceState(null, "", "#gene=" + encodeURIComponent(gene));
    }
  }

  function showDropped(r) {
    var gene = show(value(REPORT, "gene", r)), status = show(value(REPORT, "status", r));
    var card = el("div", { "class": "gene-card", "data-gene": gene, "data-status": status });
    card.appendChild(el("h3", null, gene));
    var text = status === "kept"
      ? "Kept by the preparation but not in the memberships table."
      : "Not clustered: dropped at step \u201c" + status + "\u201d (" +
        (LOOKUP.reasons[status] || status) + ").";
    card.appendChild(el("p", { "class": "gene-status" }, text));
    var numbers = [];
    [["response_fdr", "FDR"], ["response_p_value", "p"], ["log2_range", "log2 range"],
      ["mean_log", "mean log2"]].forEach(function (pair) {
      var v = value(REPORT, pair[0], r);
      if (v !== null) { numbers.push(pair[1] + " " + show(v)); }
    });
    if (numbers.length) { card.appendChild(el("p", { "class": "note" }, numbers.join(" · "))); }
    result.textContent = "";
    result.appendChild(card);
  }

  function suggest(query) {
    var needle = query.toLowerCase(), hits = [], pool = MI ? MI.genes : [];
    for (var k = 0; k < pool.length && hits.length < 12; k++) {
      if (String(pool[k]).toLowerCase().indexOf(needle) >= 0) { hits.push(pool[k]); }
    }
    var p = el("p", { "class": "suggest" });
    if (!hits.length) {
      p.textContent = "No gene matches \u201c" + query + "\u201d.";
    } else {
      words(p, "No gene is exactly \u201c" + query + "\u201d. Clustered genes containing it: ");
      hits.forEach(function (g) {
        p.appendChild(el("a", { href: "#gene=" + encodeURIComponent(g) }, g));
      });
    }
    result.textContent = "";
    result.appendChild(p);
  }

  function lookup(query) {
    query = query.trim();
    if (!query) { result.textContent = ""; return; }
    var i = find(MI, query);
    if (i >= 0) { showGene(i); return; }
    var r = find(RI, query);
    if (r >= 0) { showDropped(r); return; }
    suggest(query);
  }
  function fromAddress() {
    var pattern = /(?:^|&)gene=([^&]*)/;
    var match = pattern.exec(window.location.hash.replace(/^#/, "")) ||
      pattern.exec(window.location.search.replace(/^\?/, ""));
    if (!match) { return false; }
    var gene = match[1].replace(/\+/g, " ");
    try { gene = decodeURIComponent(gene); } catch (error) { /* keep it as written */ }
    input.value = gene;
    lookup(gene);
    return true;
  }
  var timer = null;
  input.addEventListener("input", function () {
    clearTimeout(timer);
    timer = setTimeout(function () { lookup(input.value); }, 120);
  });
  function openFromAddress() {
    if (fromAddress()) { document.getElementById("lookup").scrollIntoView(); }
  }
  window.addEventListener("hashchange", openFromAddress);
  openFromAddress();
})();
"""
