"""Gene sets from consensus memberships: core genes, ranked lists, GMT files, background.

Input everywhere is a memberships table: a :class:`pandas.DataFrame` with one row per clustered
gene (index: gene IDs as text, unique) and one column per cluster (user-facing names such as
``C1``), values in [0, 1]. ``gloam.consensus.membership_table(...)[cluster_names(c)]`` is such a
table.

A gene is a *core gene* of a cluster at threshold ``t`` when its membership in that cluster is
at least ``t``. Memberships of a gene sum to 1, so for ``t > 0.5`` a gene is core in at most one
cluster; for ``t <= 0.5`` it can be core in two (or, for small ``t``, more) clusters, e.g. a gene
with memberships 0.5 and 0.5.

Files written by :func:`write_gene_sets` into ``out_dir`` (``<t>`` formatted with ``%g``, e.g.
``0.7``; ``<C>`` a cluster name):

``<prefix>_<C>_core<t>.txt``
    Core genes of cluster ``<C>`` at threshold ``<t>``, one ID per line, highest membership
    first (ties by gene ID); empty file when no gene passes.
``<prefix>_core<t>.gmt``
    All clusters' core genes at threshold ``<t>`` in GMT format, one line per non-empty set:
    set name ``<prefix>_<C>_core<t>``, a description (cluster, threshold, number of genes), then
    the genes. Empty sets are left out because enrichment tools reject them.
``<prefix>_<C>_ranked.tsv``
    Every clustered gene with its membership in ``<C>``, sorted by membership descending (ties
    by gene ID), for rank-based enrichment; tab-separated with the header line
    ``gene<TAB>membership``.
``background.txt``
    The background for enrichment: every gene that entered the clustering, one per line.
"""

from __future__ import annotations

import os
import re
from collections.abc import Iterable, Sequence
from pathlib import Path

import numpy as np
import pandas as pd

from gloam.errors import GloamError
from gloam.io import write_gmt, write_lines, write_table
from gloam.schema import check_thresholds

__all__ = [
    "check_thresholds",
    "core_genes",
    "ranked_genes",
    "gene_set_name",
    "gene_set_paths",
    "write_gene_sets",
    "BACKGROUND_FILENAME",
    "RANKED_COLUMNS",
]

BACKGROUND_FILENAME = "background.txt"
#: Header of the ranked-list files.
RANKED_COLUMNS = ("gene", "membership")

_SAFE_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")
# Memberships are computed in floating point; allow rounding just outside [0, 1].
_MEMBERSHIP_SLACK = 1e-9


def _check_memberships(memberships: pd.DataFrame) -> pd.DataFrame:
    if not isinstance(memberships, pd.DataFrame) or min(memberships.shape) < 1:
        raise GloamError(
            "memberships must be a table of genes x clusters with at least 1 gene and 1 cluster"
        )
    genes = pd.Index(memberships.index.astype(str))
    if genes.has_duplicates:
        duplicated = genes[genes.duplicated()].unique()[:5].tolist()
        raise GloamError(f"gene IDs repeat in the memberships (e.g. {duplicated}); keep each once")
    for kind, names in (("gene ID", genes), ("cluster name", memberships.columns.astype(str))):
        bad = [name for name in names if not name or any(ch in name for ch in "\t\r\n")]
        if bad:
            raise GloamError(
                f"{kind} {bad[0]!r} is empty or contains a tab or newline; gene-set files "
                "cannot hold it"
            )
    bad_clusters = [name for name in memberships.columns.astype(str) if not _SAFE_NAME.match(name)]
    if bad_clusters:
        raise GloamError(
            f"cluster name {bad_clusters[0]!r} cannot be used in file names; use letters, "
            "digits, '_', '.', '-' (e.g. C1)"
        )
    try:
        values = memberships.to_numpy(dtype=np.float64)
    except (TypeError, ValueError) as error:
        raise GloamError(
            "memberships must be numbers; pass only the cluster columns (C1, C2, ...)"
        ) from error
    if not np.all(np.isfinite(values)):
        raise GloamError("memberships contain NaN or Inf; rerun the consensus step")
    if values.min(initial=0.0) < -_MEMBERSHIP_SLACK or values.max(initial=0.0) > (
        1 + _MEMBERSHIP_SLACK
    ):
        raise GloamError(
            "memberships lie outside [0, 1]; pass membership columns, not other scores"
        )
    return pd.DataFrame(values, index=genes, columns=memberships.columns.astype(str))


def _ranked_order(genes: np.ndarray, values: np.ndarray) -> np.ndarray:
    # Membership descending, then gene ID ascending, so reruns write identical files.
    return np.lexsort((genes, -values))


def core_genes(
    memberships: pd.DataFrame, threshold: float, noise: pd.Series | None = None
) -> dict[str, list[str]]:
    """Core genes of every cluster: membership in the cluster >= ``threshold``.

    A gene whose noise membership (``noise``) is larger than each of its cluster memberships
    fits no response and is never a core gene (noise clustering, Davé 1991).

    Parameters
    ----------
    memberships : pandas.DataFrame of shape (n_genes, n_clusters)
        Index gene IDs, columns cluster names, values in [0, 1].
    threshold : float
        In (0, 1]. Above 0.5 a gene is core in at most one cluster; at 0.5 or below it can be
        core in two or more.
    noise : pandas.Series, optional
        Noise membership per gene (index gene IDs, the same genes).

    Returns
    -------
    dict of str to list of str
        For every cluster (in column order, empty clusters included) its core genes, highest
        membership first, ties by gene ID.

    Raises
    ------
    GloamError
        If the threshold is outside (0, 1] or the table is not a valid memberships table.
    """
    (threshold,) = check_thresholds([threshold])
    table = _check_memberships(memberships)
    genes = table.index.to_numpy(dtype=str)
    values = table.to_numpy()
    eligible = np.ones(len(genes), dtype=bool)
    if noise is not None:
        noise_values = noise.reindex(table.index).to_numpy(dtype=np.float64)
        if np.isnan(noise_values).any():
            raise GloamError("noise memberships must be given for every gene of the memberships")
        eligible = noise_values <= values.max(axis=1)
    sets = {}
    for k, cluster in enumerate(table.columns):
        order = _ranked_order(genes, values[:, k])
        keep = order[(values[order, k] >= threshold) & eligible[order]]
        sets[cluster] = genes[keep].tolist()
    return sets


def ranked_genes(memberships: pd.DataFrame) -> dict[str, pd.DataFrame]:
    """For every cluster, all genes ranked by their membership in it.

    Parameters
    ----------
    memberships : pandas.DataFrame of shape (n_genes, n_clusters)
        Index gene IDs, columns cluster names, values in [0, 1].

    Returns
    -------
    dict of str to pandas.DataFrame
        Per cluster a table with columns ``gene`` and ``membership``, sorted by membership
        descending, ties by gene ID.

    Raises
    ------
    GloamError
        If the table is not a valid memberships table.
    """
    table = _check_memberships(memberships)
    genes = table.index.to_numpy(dtype=str)
    ranked = {}
    for cluster in table.columns:
        values = table[cluster].to_numpy()
        order = _ranked_order(genes, values)
        ranked[cluster] = pd.DataFrame({"gene": genes[order], "membership": values[order]})
    return ranked


def _check_prefix(prefix: str) -> str:
    if not isinstance(prefix, str) or not _SAFE_NAME.match(prefix):
        raise GloamError(
            f"gene-set prefix {prefix!r} cannot be used in names and file names; use letters, "
            "digits, '_', '.', '-' (e.g. the dataset name)"
        )
    return prefix


def gene_set_name(prefix: str, cluster: str, threshold: float) -> str:
    """Name of a core set in GMT files and list file names: ``<prefix>_<cluster>_core<t:g>``."""
    return f"{prefix}_{cluster}_core{threshold:g}"


def gene_set_paths(
    out_dir: str | os.PathLike[str],
    clusters: Sequence[str],
    thresholds: Iterable[float],
    prefix: str = "gloam",
) -> list[Path]:
    """Paths :func:`write_gene_sets` writes, in the same order (e.g. to declare outputs).

    Parameters
    ----------
    out_dir : path
    clusters : sequence of str
        Cluster names, e.g. ``cluster_names(c)``.
    thresholds : iterable of float
        Core thresholds, each in (0, 1].
    prefix : str, default "gloam"
        Start of every set and file name.

    Returns
    -------
    list of Path
        Per threshold: the list of each cluster, then the GMT; then each cluster's ranked
        list; then ``background.txt``.

    Raises
    ------
    GloamError
        If a threshold or the prefix is invalid.
    """
    out = Path(out_dir)
    prefix = _check_prefix(prefix)
    paths = []
    for threshold in check_thresholds(thresholds):
        paths += [out / f"{gene_set_name(prefix, cluster, threshold)}.txt" for cluster in clusters]
        paths.append(out / f"{prefix}_core{threshold:g}.gmt")
    paths += [out / f"{prefix}_{cluster}_ranked.tsv" for cluster in clusters]
    paths.append(out / BACKGROUND_FILENAME)
    return paths


def _check_background(background_genes: Sequence[str] | None, genes: pd.Index) -> list[str]:
    if background_genes is None:
        return genes.tolist()
    background = pd.Index([str(gene) for gene in background_genes])
    if background.has_duplicates:
        duplicated = background[background.duplicated()].unique()[:5].tolist()
        raise GloamError(f"background genes repeat (e.g. {duplicated}); list each gene once")
    missing = genes.difference(background, sort=False)
    if len(missing):
        raise GloamError(
            f"{len(missing)} clustered gene(s) are missing from the background (e.g. "
            f"{missing[:5].tolist()}); the background must contain every clustered gene"
        )
    return background.tolist()


def write_gene_sets(
    memberships: pd.DataFrame,
    thresholds: Iterable[float],
    out_dir: str | os.PathLike[str],
    background_genes: Sequence[str] | None = None,
    prefix: str = "gloam",
    noise: pd.Series | None = None,
    core_sets: bool = True,
) -> list[Path]:
    """Write core-gene lists, GMT files, ranked lists and the background.

    File names and columns are described in the module docstring. Each file is written
    atomically (:func:`gloam.io.atomic_output`); all inputs are checked before the first file
    is written.

    Parameters
    ----------
    memberships : pandas.DataFrame of shape (n_genes, n_clusters)
        Index gene IDs, columns cluster names (e.g. ``C1``), values in [0, 1].
    thresholds : iterable of float
        Core thresholds, each in (0, 1].
    out_dir : path
        Directory to write into (created if missing).
    background_genes : sequence of str, optional
        Every gene that entered the clustering; must contain all genes of ``memberships``.
        Defaults to the genes of ``memberships``.
    prefix : str, default "gloam"
        Start of every set and file name (letters, digits, ``_ . -``), e.g. the dataset name.
    noise : pandas.Series, optional
        Noise membership per gene; genes whose largest membership is noise are never core.
    core_sets : bool, default True
        False writes every core list and GMT file empty (used when no clusters are
        recommended: a single group is not a cluster).

    Returns
    -------
    list of Path
        The files written, as listed by :func:`gene_set_paths`.

    Raises
    ------
    GloamError
        If a threshold, the prefix, the memberships or the background is invalid.
    """
    thresholds = check_thresholds(thresholds)
    prefix = _check_prefix(prefix)
    table = _check_memberships(memberships)
    background = _check_background(background_genes, table.index)
    clusters = list(table.columns)
    paths = iter(gene_set_paths(out_dir, clusters, thresholds, prefix))
    written = []

    for threshold in thresholds:
        sets = core_genes(table, threshold, noise)
        if not core_sets:
            sets = {cluster: [] for cluster in sets}
        for cluster in clusters:
            path = next(paths)
            write_lines(sets[cluster], path)
            written.append(path)
        gmt = {
            gene_set_name(prefix, cluster, threshold): (
                f"{prefix} cluster {cluster} of {len(clusters)}: {len(genes)} genes with "
                f"membership >= {threshold:g}",
                genes,
            )
            for cluster, genes in sets.items()
            if genes
        }
        path = next(paths)
        write_gmt(gmt, path)
        written.append(path)

    for ranked in ranked_genes(table).values():
        path = next(paths)
        write_table(ranked, path)
        written.append(path)

    path = next(paths)
    write_lines(background, path)
    written.append(path)
    return written
