"""Every gloam figure, drawn with matplotlib on the Agg backend.

Functions take plain arrays and tables (no files) and return a
:class:`matplotlib.figure.Figure`; :func:`save_figure` writes it atomically as PNG
and PDF.  The look is gloam's own: white panels with only the left and bottom
spines, sampled time points marked as a rug under each profile panel so uneven
spacing stays visible, gene lines shaded by membership with the perceptually
uniform ``cividis`` colormap (reversed: firm members dark), and the centroid drawn
on top in one accent colour.
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib.collections import LineCollection  # noqa: E402
from matplotlib.colors import Normalize  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.ticker import MaxNLocator  # noqa: E402

from gloam.errors import GloamError  # noqa: E402
from gloam.io import atomic_output  # noqa: E402

__all__ = [
    "MEMBERSHIP_CMAP",
    "plot_cluster_profiles",
    "plot_validity",
    "plot_fuzzifier_curve",
    "plot_centroid_correlation",
    "save_figure",
]

#: Colormap for memberships: perceptually uniform and readable in greyscale; reversed so
#: that genes firmly in a cluster are dark on the white panel and loose ones fade out.
MEMBERSHIP_CMAP = "cividis_r"
_ACCENT = "#c8553d"
_MUTED = "#6b7280"
_RC = {
    "font.size": 8.5,
    "axes.titlesize": 9,
    "axes.labelsize": 8.5,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.edgecolor": "#4b5563",
    "axes.linewidth": 0.8,
    "xtick.color": "#374151",
    "ytick.color": "#374151",
    "figure.dpi": 110,
    "savefig.dpi": 150,
    "pdf.fonttype": 42,
}

# Readable names and the direction that is better, for the columns a validity table may hold.
_INDEX_LABELS: dict[str, tuple[str, str]] = {
    "objective": ("objective J_m (z-score² units)", "lower is tighter"),
    "partition_coefficient": ("partition coefficient (unitless)", "higher is crisper"),
    "partition_entropy": ("partition entropy (nats)", "lower is crisper"),
    "xie_beni": ("Xie–Beni index (unitless)", "lower is better"),
    "fukuyama_sugeno": ("Fukuyama–Sugeno index (z-score² units)", "lower is better"),
    "min_centroid_distance": (
        "min. centroid distance (squared z-score units)",
        "sharp fall = too many",
    ),
    "mean_stability": ("mean stability (share of starts)", "higher is steadier"),
}


@dataclass(frozen=True)
class _Segment:
    """One condition's stretch of the x axis: x = time - start + base."""

    name: str
    columns: np.ndarray
    start: float
    base: float
    width: float


def _time_segments(
    times: np.ndarray, conditions: Sequence[str] | None
) -> tuple[np.ndarray, list[_Segment]]:
    """Map (condition, time) columns to x positions: one true-time segment per condition."""
    labels = np.array(
        [""] * times.size if conditions is None else [str(c) for c in conditions], dtype=object
    )
    names = list(dict.fromkeys(labels.tolist()))
    spans = [float(np.ptp(times[labels == name])) or 1.0 for name in names]
    gap = 0.12 * max(spans)
    positions = np.empty_like(times)
    segments = []
    base = 0.0
    for name, width in zip(names, spans, strict=True):
        columns = np.flatnonzero(labels == name)
        start = float(times[columns].min())
        positions[columns] = times[columns] - start + base
        segments.append(_Segment(name, columns, start, base, width))
        base += width + gap
    return positions, segments


def _set_time_ticks(axis, segments: list[_Segment]) -> None:
    """Label ticks in true time on every segment (axes sharing x follow)."""
    ticks: list[float] = []
    tick_labels: list[str] = []
    for segment in segments:
        locator = MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10])
        end = segment.start + segment.width
        for value in locator.tick_values(segment.start, end):
            if segment.start - 1e-9 <= value <= end + 1e-9:
                ticks.append(value - segment.start + segment.base)
                tick_labels.append(f"{value:g}")
    axis.set_xticks(ticks, tick_labels)


def plot_cluster_profiles(
    values: np.ndarray,
    times: np.ndarray,
    memberships: np.ndarray,
    centroids: np.ndarray,
    *,
    conditions: Sequence[str] | None = None,
    core_sizes: Mapping[float, np.ndarray] | None = None,
    cluster_labels: Sequence[str] | None = None,
    time_unit: str = "h",
    value_label: str = "expression (z-score)",
    max_columns: int = 4,
) -> Figure:
    """Temporal profile of every cluster on a true time axis.

    One panel per cluster shows the genes whose largest membership is that cluster,
    each as a line coloured by its membership (lines with higher membership drawn
    on top), the centroid on top of them, and a rug of the sampled time points.
    With several conditions side by side each condition gets its own time segment.

    Parameters
    ----------
    values : ndarray of shape (n_genes, n_timepoints)
        Standardised profiles (z-scores) that were clustered.
    times : ndarray of shape (n_timepoints,)
        Time of each column in ``time_unit``; uneven spacing is drawn as such.
    memberships : ndarray of shape (n_genes, n_clusters)
        Consensus memberships, rows summing to 1.
    centroids : ndarray of shape (n_clusters, n_timepoints)
        Cluster centroids in z-score units.
    conditions : sequence of str of length n_timepoints, optional
        Condition of each column when conditions are concatenated.
    core_sizes : mapping of threshold to ndarray of shape (n_clusters,), optional
        Number of core genes per cluster at each membership threshold (shown in titles).
    cluster_labels : sequence of str, optional
        Panel titles' cluster names (default ``C1``, ``C2``...).
    time_unit : str
        Unit of ``times`` for the axis label.
    value_label : str
        Label of the y axis, with its unit.
    max_columns : int
        Panels per row.

    Returns
    -------
    Figure
    """
    values = np.asarray(values, dtype=float)
    memberships = np.asarray(memberships, dtype=float)
    centroids = np.asarray(centroids, dtype=float)
    times = np.asarray(times, dtype=float)
    n_genes, n_columns = values.shape
    n_clusters = memberships.shape[1]
    if memberships.shape[0] != n_genes or centroids.shape != (n_clusters, n_columns):
        raise GloamError(
            f"profile plot got values {values.shape}, memberships {memberships.shape} and "
            f"centroids {centroids.shape}; expected (n, d), (n, c) and (c, d)"
        )
    if times.shape != (n_columns,):
        raise GloamError(f"profile plot got {times.size} times for {n_columns} columns")
    labels = list(cluster_labels) if cluster_labels else [f"C{k + 1}" for k in range(n_clusters)]
    positions, segments = _time_segments(times, conditions)
    top = memberships.argmax(axis=1)
    top_membership = memberships[np.arange(n_genes), top]
    norm = Normalize(vmin=0.0, vmax=1.0)
    cmap = plt.get_cmap(MEMBERSHIP_CMAP)
    y_limit = float(np.nanmax(np.abs(values))) * 1.05 if n_genes else 1.0

    n_cols = min(max_columns, n_clusters)
    n_rows = int(np.ceil(n_clusters / n_cols))
    with plt.rc_context(_RC):
        figure, axes = plt.subplots(
            n_rows,
            n_cols,
            figsize=(2.9 * n_cols + 0.8, 2.3 * n_rows + 0.5),
            sharex=True,
            sharey=True,
            squeeze=False,
            layout="constrained",
        )
        for k in range(n_clusters):
            axis = axes.flat[k]
            members = np.flatnonzero(top == k)
            members = members[np.argsort(top_membership[members], kind="stable")]
            for segment in segments:
                columns = segment.columns
                xs = positions[columns]
                lines = np.stack(
                    [np.broadcast_to(xs, (members.size, xs.size)), values[members][:, columns]],
                    axis=-1,
                )
                collection = LineCollection(
                    lines,
                    colors=cmap(norm(top_membership[members])),
                    linewidths=0.6,
                    # Big clusters would otherwise turn into a solid band.
                    alpha=float(np.clip(4.0 / np.sqrt(max(members.size, 1)), 0.06, 0.9)),
                    rasterized=True,
                )
                axis.add_collection(collection)
                axis.plot(xs, centroids[k, columns], color="white", linewidth=3.4, zorder=3)
                axis.plot(xs, centroids[k, columns], color=_ACCENT, linewidth=1.8, zorder=4)
                axis.plot(
                    xs,
                    np.full(xs.size, -y_limit),
                    linestyle="none",
                    marker="|",
                    markersize=6,
                    color=_MUTED,
                    clip_on=False,
                    zorder=5,
                )
            title = f"{labels[k]} · {members.size} genes"
            if core_sizes:
                cores = ", ".join(
                    f"≥{threshold:g}: {int(np.asarray(sizes)[k])}"
                    for threshold, sizes in sorted(core_sizes.items())
                )
                title += f"\ncore {cores}"
            axis.set_title(title, loc="left")
            axis.axhline(0.0, color="#d1d5db", linewidth=0.6, zorder=0)
            axis.set_ylim(-y_limit, y_limit)
        for axis in axes.flat[n_clusters:]:
            axis.set_visible(False)
        _set_time_ticks(axes.flat[0], segments)
        axis_last = axes.flat[min(n_clusters, axes.size) - 1]
        axis_last.set_xlim(
            positions.min() - 0.02 * np.ptp(positions), positions.max() + 0.02 * np.ptp(positions)
        )
        for row in range(n_rows):
            axes[row, 0].set_ylabel(value_label)
        for axis in axes.flat[:n_clusters]:
            if len(segments) > 1:
                for segment in segments:
                    axis.text(
                        segment.base + segment.width / 2,
                        y_limit,
                        segment.name,
                        ha="center",
                        va="top",
                        fontsize=7,
                        color=_MUTED,
                    )
        for axis in axes[-1, :]:
            axis.set_xlabel(f"time ({time_unit})")
        for k in range(n_clusters, axes.size):
            # Hidden panels leave the panel above without an x axis label; give it one.
            above = axes.flat[k - n_cols]
            above.set_xlabel(f"time ({time_unit})")
            above.xaxis.set_tick_params(labelbottom=True)
        colourbar = figure.colorbar(
            plt.cm.ScalarMappable(norm=norm, cmap=cmap), ax=axes, shrink=0.6, pad=0.01
        )
        colourbar.set_label("membership in the panel's cluster (0–1)")
    return figure


def plot_validity(table: pd.DataFrame, chosen: int) -> Figure:
    """Validity indices against the number of clusters, with the chosen number marked.

    Parameters
    ----------
    table : DataFrame
        One row per number of clusters: column ``n_clusters`` plus any of the index
        columns objective, partition_coefficient, partition_entropy, xie_beni,
        fukuyama_sugeno, min_centroid_distance, mean_stability (one panel each; other
        columns are ignored).
    chosen : int
        The number of clusters used downstream.

    Returns
    -------
    Figure
    """
    if "n_clusters" not in table.columns or table.empty:
        raise GloamError("validity plot needs a non-empty table with an n_clusters column")
    table = table.sort_values("n_clusters")
    columns = [column for column in _INDEX_LABELS if column in table.columns]
    if not columns:
        raise GloamError(
            f"validity table has none of the index columns {list(_INDEX_LABELS)}; "
            "build it with gloam.validity.validity_table"
        )
    n_cols = min(3, len(columns))
    n_rows = int(np.ceil(len(columns) / n_cols))
    c_values = table["n_clusters"].to_numpy()
    with plt.rc_context(_RC):
        figure, axes = plt.subplots(
            n_rows,
            n_cols,
            figsize=(3.1 * n_cols, 2.3 * n_rows + 0.3),
            sharex=True,
            squeeze=False,
            layout="constrained",
        )
        for axis, column in zip(axes.flat, columns, strict=False):
            label, direction = _INDEX_LABELS[column]
            y = table[column].to_numpy(dtype=float)
            axis.axvspan(chosen - 0.4, chosen + 0.4, color="#fde68a", alpha=0.6, zorder=0)
            axis.plot(c_values, y, color="#1f2937", linewidth=1.2, marker="o", markersize=3.5)
            hit = c_values == chosen
            axis.plot(
                c_values[hit],
                y[hit],
                linestyle="none",
                marker="o",
                markersize=6.5,
                color=_ACCENT,
                zorder=4,
            )
            axis.set_ylabel(label)
            if direction:
                axis.set_title(direction, loc="right", fontsize=7.5, color=_MUTED)
            axis.xaxis.set_major_locator(MaxNLocator(integer=True))
        for axis in axes.flat[len(columns) :]:
            axis.set_visible(False)
        for axis in axes.flat[: len(columns)]:
            axis.set_xlabel("number of clusters c")
            axis.xaxis.set_tick_params(labelbottom=True)
        figure.suptitle(
            f"Cluster validity over c (chosen c = {chosen}, shaded)",
            x=0.01,
            ha="left",
            fontsize=9.5,
        )
    return figure


def plot_fuzzifier_curve(
    curve: pd.DataFrame, m: float, *, formula_m: float | None = None, method: str = ""
) -> Figure:
    """How crisp clusterings of randomised data are, as a function of the fuzzifier m.

    Parameters
    ----------
    curve : DataFrame
        Columns ``m``, ``mean_max_membership``, ``uniform_level`` and optionally
        ``min_centroid_distance``, one row per fuzzifier value tried on randomised data.
        May be empty (fuzzifier fixed without a check): the figure then only states m.
    m : float
        The fuzzifier used.
    formula_m : float, optional
        The value from the published formula, marked for comparison.
    method : str
        How m was chosen (``formula``, ``fixed``, ``randomised``), shown in the title.

    Returns
    -------
    Figure
    """
    has_distance = "min_centroid_distance" in curve.columns and not curve.empty
    with plt.rc_context(_RC):
        figure, axes = plt.subplots(
            1,
            2 if has_distance else 1,
            figsize=(7.0 if has_distance else 3.8, 2.9),
            squeeze=False,
            layout="constrained",
        )
        axis = axes[0, 0]
        if curve.empty:
            axis.text(
                0.5,
                0.5,
                f"m = {m:.3g} ({method or 'fixed'}); no randomised-data curve",
                ha="center",
                va="center",
                transform=axis.transAxes,
            )
            axis.set_xlabel("fuzzifier m (unitless)")
            axis.set_ylabel("mean largest membership (0–1)")
        else:
            curve = curve.sort_values("m")
            axis.plot(
                curve["m"],
                curve["mean_max_membership"],
                color="#1f2937",
                marker="o",
                markersize=3.5,
                linewidth=1.2,
                label="randomised data",
            )
            if "uniform_level" in curve.columns:
                axis.plot(
                    curve["m"],
                    curve["uniform_level"],
                    color=_MUTED,
                    linestyle=":",
                    linewidth=1.2,
                    label="no structure (1/c)",
                )
            axis.set_xlabel("fuzzifier m (unitless)")
            axis.set_ylabel("mean largest membership (0–1)")
            if has_distance:
                right = axes[0, 1]
                right.plot(
                    curve["m"],
                    curve["min_centroid_distance"],
                    color="#1f2937",
                    marker="o",
                    markersize=3.5,
                    linewidth=1.2,
                )
                right.set_xlabel("fuzzifier m (unitless)")
                right.set_ylabel("min. centroid distance (squared z-score units)")
            for target in axes.flat:
                target.axvline(m, color=_ACCENT, linewidth=1.6, label=f"used m = {m:.3g}")
                if formula_m is not None and not np.isclose(formula_m, m):
                    target.axvline(
                        formula_m,
                        color="#2563eb",
                        linewidth=1.0,
                        linestyle="--",
                        label=f"formula m = {formula_m:.3g}",
                    )
            axis.legend(frameon=False, fontsize=7)
        figure.suptitle(
            f"Fuzzifier ({method})" if method else "Fuzzifier", x=0.01, ha="left", fontsize=9.5
        )
    return figure


def plot_centroid_correlation(
    centroids: np.ndarray, cluster_labels: Sequence[str] | None = None
) -> Figure:
    """Pearson correlation between every pair of centroids as an annotated heatmap.

    Parameters
    ----------
    centroids : ndarray of shape (n_clusters, n_timepoints)
    cluster_labels : sequence of str, optional

    Returns
    -------
    Figure
    """
    centroids = np.asarray(centroids, dtype=float)
    n_clusters = centroids.shape[0]
    labels = list(cluster_labels) if cluster_labels else [f"C{k + 1}" for k in range(n_clusters)]
    with np.errstate(invalid="ignore", divide="ignore"):
        correlation = np.corrcoef(centroids) if n_clusters > 1 else np.ones((1, 1))
    # A floor on the size keeps the colour-bar label readable for small c.
    size = max(3.4, 1.2 + 0.42 * n_clusters)
    with plt.rc_context(_RC):
        figure, axis = plt.subplots(figsize=(size + 1.6, size), layout="constrained")
        image = axis.imshow(correlation, cmap="PuOr_r", vmin=-1.0, vmax=1.0)
        axis.set_xticks(np.arange(n_clusters), labels, rotation=90)
        axis.set_yticks(np.arange(n_clusters), labels)
        axis.spines[:].set_visible(False)
        if n_clusters <= 16:
            for (i, j), value in np.ndenumerate(correlation):
                axis.text(
                    j,
                    i,
                    f"{value:.2f}",
                    ha="center",
                    va="center",
                    fontsize=6.5,
                    color="white" if abs(value) > 0.6 else "#111827",
                )
        colourbar = figure.colorbar(image, ax=axis, shrink=0.8)
        colourbar.set_label("Pearson r between centroids (−1 to 1)")
        axis.set_title("Centroid-to-centroid correlation", loc="left")
        axis.set_xlabel("cluster")
        axis.set_ylabel("cluster")
    return figure


def save_figure(figure: Figure, *paths: str | os.PathLike[str]) -> None:
    """Write ``figure`` to every path (format from the suffix, e.g. PNG and PDF) atomically."""
    try:
        for path in paths:
            with atomic_output(path) as temporary:
                figure.savefig(temporary, format=os.fspath(path).rsplit(".", 1)[-1])
    finally:
        plt.close(figure)
