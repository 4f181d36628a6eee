"""Every gloam figure, drawn with matplotlib's object API (no pyplot state).

Functions take plain arrays and tables (no files) and return a
:class:`matplotlib.figure.Figure`; :func:`save_figure` writes it atomically as PNG
(300 dpi), PDF (TrueType fonts embedded) and SVG (text kept as text), byte-reproducibly.

The look is gloam's own, sized for print: every figure is one journal column
(:data:`SINGLE_COLUMN_MM`) or two (:data:`DOUBLE_COLUMN_MM`) wide with all text at 7 pt or
more. Clusters keep one colour in every figure (:func:`cluster_colours`, drawn from the
colour-blind-safe set of Okabe and Ito); the noise class is grey (:data:`NOISE_COLOUR`).
A cluster's profile is summarised, not drawn gene by gene: its centroid line over quantile
bands of its core genes on a time axis that is compressed when the sampling is uneven
(:func:`time_axis_transform`), with every sampled time marked on the axis.

References
----------
.. [1] Okabe, M. and Ito, K. (2008). Color Universal Design (CUD): how to make figures and
   presentations that are friendly to colorblind people. J*Fly, https://jfly.uni-koeln.de/color/.
.. [2] Wong, B. (2011). Points of view: Color blindness. *Nature Methods* 8, 441.
.. [3] Hennig, C. (2007). Cluster-wise assessment of cluster stability. *Computational
   Statistics & Data Analysis* 52, 258-271.
"""

from __future__ import annotations

import os
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import matplotlib
import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import to_hex, to_rgb
from matplotlib.figure import Figure
from matplotlib.layout_engine import PlaceHolderLayoutEngine
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import FixedLocator, MaxNLocator, NullFormatter

from gloam.errors import GloamError, GloamWarning
from gloam.io import atomic_output

__all__ = [
    "SINGLE_COLUMN_MM",
    "DOUBLE_COLUMN_MM",
    "MIN_FONT_PT",
    "PNG_DPI",
    "CLUSTER_PALETTE",
    "NOISE_COLOUR",
    "BAND_QUANTILES",
    "TIME_SCALES",
    "UNEVEN_GAP_RATIO",
    "cluster_colours",
    "cluster_styles",
    "choose_time_scale",
    "time_axis_transform",
    "plot_cluster_profiles",
    "plot_cluster_overview",
    "plot_validity",
    "plot_fuzzifier_curve",
    "save_figure",
]

#: Width of a single-column figure (mm); common practice for two-column journals.
SINGLE_COLUMN_MM = 85.0
#: Width of a double-column (full-width) figure (mm); common practice for two-column journals.
DOUBLE_COLUMN_MM = 180.0
#: Smallest font size used anywhere (pt at print size); common practice for journal figures.
MIN_FONT_PT = 7.0
#: Resolution of PNG files (dots per inch).
PNG_DPI = 300
#: Tallest figure drawn without a warning (mm): about a journal page's text block.
_MAX_HEIGHT_MM = 240.0
_MM_PER_INCH = 25.4

#: Cluster colours in order: the Okabe & Ito (2008) colour-blind-safe set without its black
#: (kept for text and axes) and yellow (too faint on white), reordered so that neighbouring
#: clusters differ most. Cluster k gets ``CLUSTER_PALETTE[k % 6]``; beyond six clusters the
#: colours repeat with another line style and marker (:func:`cluster_styles`).
CLUSTER_PALETTE: tuple[str, ...] = (
    "#0072B2",  # blue
    "#D55E00",  # vermillion
    "#009E73",  # bluish green
    "#CC79A7",  # reddish purple
    "#E69F00",  # orange
    "#56B4E9",  # sky blue
)
#: Neutral grey of the noise class (genes close to no centroid).
NOISE_COLOUR = "#7A7A7A"
#: Quantiles of the two bands: central 90 % (outer) and central 50 % (inner).
BAND_QUANTILES = (0.05, 0.25, 0.75, 0.95)
#: Accepted values of ``time_scale``.
TIME_SCALES = ("auto", "linear", "sqrt", "log1p")
#: "auto" compresses the time axis when the largest gap between sampled times is more than
#: this many times the smallest (a rule of thumb: common practice, not a published value).
UNEVEN_GAP_RATIO = 4.0

_LINE_STYLES = ("-", "--", ":")
_MARKERS = ("o", "s", "^")
# Opaque tints (share of the colour mixed with white) instead of transparency, so bands print
# the same after a journal flattens transparency.
_OUTER_TINT = 0.25
_INNER_TINT = 0.55
_INK = "#222222"
_MUTED = "#6B6B6B"
_GUIDE = "#BDBDBD"
_HIGHLIGHT = "#ECECEC"

_STYLE: dict[str, Any] = {
    # DejaVu Sans ships with matplotlib, so every machine draws the same glyphs.
    "font.family": "sans-serif",
    "font.sans-serif": ["DejaVu Sans"],
    "font.size": MIN_FONT_PT,
    "axes.titlesize": MIN_FONT_PT,
    "axes.labelsize": MIN_FONT_PT,
    "xtick.labelsize": MIN_FONT_PT,
    "ytick.labelsize": MIN_FONT_PT,
    "legend.fontsize": MIN_FONT_PT,
    "legend.title_fontsize": MIN_FONT_PT,
    "figure.titlesize": 8.0,
    "axes.titlepad": 2.5,
    "axes.labelpad": 2.0,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.edgecolor": _INK,
    "axes.labelcolor": _INK,
    "axes.linewidth": 0.6,
    "text.color": _INK,
    "xtick.color": _INK,
    "ytick.color": _INK,
    "xtick.major.width": 0.6,
    "ytick.major.width": 0.6,
    "xtick.minor.width": 0.6,
    "xtick.major.size": 2.5,
    "ytick.major.size": 2.5,
    "xtick.major.pad": 1.5,
    "ytick.major.pad": 1.5,
    "lines.linewidth": 1.2,
    "lines.solid_capstyle": "round",
    "legend.frameon": False,
    "legend.handlelength": 1.6,
    "legend.borderaxespad": 0.2,
    "figure.dpi": 100,
    "figure.facecolor": "white",
    "axes.facecolor": "white",
    "figure.constrained_layout.h_pad": 0.03,
    "figure.constrained_layout.w_pad": 0.03,
}
#: Settings read when a figure is written: applied around every savefig call.
_SAVE_RC: dict[str, Any] = {
    "savefig.dpi": PNG_DPI,
    "savefig.bbox": "standard",  # never "tight": the width must stay one or two columns
    "pdf.fonttype": 42,  # TrueType, embedded; Type 3 fonts are refused by many journals
    "ps.fonttype": 42,
    "svg.fonttype": "none",  # text stays text, editable in a vector editor
    "svg.hashsalt": "gloam",  # fixed ids in SVG output
}
_SAVE_METADATA = {"pdf": {"CreationDate": None}, "svg": {"Date": None}, "png": {}}

Width = Literal["single", "double"]


# ------------------------------------------------------------------ palette


def cluster_colours(n: int) -> list[str]:
    """Hex colour of each of ``n`` clusters, the same in every figure.

    Parameters
    ----------
    n : int
        Number of clusters (>= 0).

    Returns
    -------
    list of str
        ``n`` hex colours from :data:`CLUSTER_PALETTE`, repeating beyond its length (the
        repeats are told apart by :func:`cluster_styles`).

    References
    ----------
    Okabe and Ito (2008); Wong (2011), *Nature Methods* 8, 441.
    """
    if n < 0:
        raise GloamError(f"number of clusters must be at least 0; got {n}")
    return [CLUSTER_PALETTE[k % len(CLUSTER_PALETTE)] for k in range(n)]


def cluster_styles(n: int) -> list[dict[str, str]]:
    """Colour, line style and marker of each of ``n`` clusters.

    The first ``len(CLUSTER_PALETTE)`` clusters are solid lines with round markers; the next
    round of colours is dashed with squares, the third dotted with triangles.

    Returns
    -------
    list of dict
        Keys ``color``, ``linestyle`` and ``marker`` (matplotlib names), one per cluster.
    """
    rounds = len(CLUSTER_PALETTE)
    return [
        {
            "color": colour,
            "linestyle": _LINE_STYLES[(k // rounds) % len(_LINE_STYLES)],
            "marker": _MARKERS[(k // rounds) % len(_MARKERS)],
        }
        for k, colour in enumerate(cluster_colours(n))
    ]


def _tint(colour: str, share: float) -> str:
    """``colour`` mixed with white (``share`` of the colour), as an opaque hex colour."""
    rgb = np.asarray(to_rgb(colour))
    return to_hex(share * rgb + (1.0 - share))


# ------------------------------------------------------------------ time axis


def choose_time_scale(times: np.ndarray) -> str:
    """The time scale "auto" stands for: ``"log1p"`` for uneven sampling, else ``"linear"``.

    Sampling counts as uneven when the largest gap between consecutive distinct sampled
    times exceeds :data:`UNEVEN_GAP_RATIO` times the smallest.

    Parameters
    ----------
    times : array_like of shape (n_timepoints,)
        Sampled times (any unit; repeats, e.g. across conditions, are allowed).

    Returns
    -------
    str
    """
    unique = np.unique(_as_times(times))
    gaps = np.diff(unique)
    if gaps.size < 2:
        return "linear"
    return "log1p" if gaps.max() > UNEVEN_GAP_RATIO * gaps.min() else "linear"


def _as_times(times: np.ndarray) -> np.ndarray:
    values = np.asarray(times, dtype=float)
    if values.ndim != 1 or values.size == 0:
        raise GloamError(f"times must be a non-empty 1-D array; got shape {values.shape}")
    if not np.isfinite(values).all():
        raise GloamError("times contain NaN or infinite values; give every column a real time")
    return values


def _time_mapping(times: np.ndarray, scale: str) -> tuple[Callable[[np.ndarray], np.ndarray], str]:
    """The position function of ``scale`` fitted to ``times``, and the resolved scale name."""
    values = _as_times(times)
    if scale not in TIME_SCALES:
        raise GloamError(f"time_scale must be one of {', '.join(TIME_SCALES)}; got {scale!r}")
    resolved = choose_time_scale(values) if scale == "auto" else scale
    unique = np.unique(values)
    origin = float(unique[0])
    gaps = np.diff(unique)
    step = float(gaps.min()) if gaps.size else 1.0

    def linear(t: np.ndarray) -> np.ndarray:
        return np.asarray(t, dtype=float)

    def sqrt(t: np.ndarray) -> np.ndarray:
        return np.sqrt(np.clip(np.asarray(t, dtype=float) - origin, 0.0, None))

    def log1p(t: np.ndarray) -> np.ndarray:
        return np.log1p(np.clip(np.asarray(t, dtype=float) - origin, 0.0, None) / step)

    return {"linear": linear, "sqrt": sqrt, "log1p": log1p}[resolved], resolved


def time_axis_transform(times: np.ndarray, scale: str = "auto") -> np.ndarray:
    """Horizontal positions of sampled times on gloam's time axis.

    Parameters
    ----------
    times : array_like of shape (n_timepoints,)
        Sampled times in any unit (repeats allowed).
    scale : {"auto", "linear", "sqrt", "log1p"}
        ``"linear"`` keeps the times; ``"sqrt"`` is ``sqrt(t - t0)``; ``"log1p"`` is
        ``log(1 + (t - t0) / s)``; ``t0`` is the first sampled time and ``s`` the smallest
        gap between distinct sampled times, so the compressed scales do not depend on the
        time unit. ``"auto"`` is ``"log1p"`` for uneven sampling and ``"linear"`` otherwise
        (:func:`choose_time_scale`).

    Returns
    -------
    ndarray of shape (n_timepoints,)
        Positions, increasing with time. Tick labels stay in real time units.

    Raises
    ------
    GloamError
        If ``times`` is empty, not 1-D or not finite, or ``scale`` is unknown.
    """
    mapping, _ = _time_mapping(times, scale)
    return mapping(_as_times(times))


@dataclass(frozen=True)
class _Segment:
    """One condition's stretch of the time axis."""

    name: str
    columns: np.ndarray  # column indices, in time order
    start: float  # first and last sampled time (real units)
    end: float
    base: float  # x position of ``start``
    offset: float  # x = mapping(t) + offset


@dataclass(frozen=True)
class _TimeAxis:
    times: np.ndarray  # (n_columns,) real times
    positions: np.ndarray  # (n_columns,)
    segments: list[_Segment]
    mapping: Callable[[np.ndarray], np.ndarray]
    scale: str
    limits: tuple[float, float]


def _time_axis(times: np.ndarray, conditions: Sequence[str] | None, scale: str) -> _TimeAxis:
    """One segment per condition, side by side, all on the same time scale."""
    mapping, resolved = _time_mapping(times, scale)
    labels = np.asarray(
        [""] * times.size if conditions is None else [str(c) for c in conditions], dtype=object
    )
    if labels.size != times.size:
        raise GloamError(
            f"got {labels.size} conditions for {times.size} time columns; give one per column"
        )
    names = list(dict.fromkeys(labels.tolist()))
    mapped = mapping(times)
    spans = [float(np.ptp(mapped[labels == name])) for name in names]
    unit = max(max(spans), 1e-9)
    gap = 0.15 * unit if len(names) > 1 else 0.0
    positions = np.empty_like(mapped)
    segments = []
    base = 0.0
    for name, span in zip(names, spans, strict=True):
        columns = np.flatnonzero(labels == name)
        columns = columns[np.argsort(times[columns], kind="stable")]
        offset = base - float(mapped[columns].min())
        positions[columns] = mapped[columns] + offset
        segments.append(
            _Segment(
                name,
                columns,
                float(times[columns].min()),
                float(times[columns].max()),
                base,
                offset,
            )
        )
        base += span + gap
    pad = 0.035 * max(float(np.ptp(positions)), 1e-9)
    if np.ptp(positions) == 0:
        pad = 0.5
    return _TimeAxis(
        times,
        positions,
        segments,
        mapping,
        resolved,
        (float(positions.min()) - pad, float(positions.max()) + pad),
    )


def _nice_offsets(span: float, step: float) -> np.ndarray:
    """1-2-5 series values between ``step`` and ``span``."""
    if span <= 0:
        return np.zeros(0)
    low = int(np.floor(np.log10(max(step, span * 1e-4))))
    high = int(np.ceil(np.log10(span)))
    decades = 10.0 ** np.arange(low, high + 1)
    values = (decades[:, None] * np.array([1.0, 2.0, 5.0])).ravel()
    return values[(values >= step * 0.999) & (values <= span * 1.0001)]


def _segment_ticks(axis: _TimeAxis, segment: _Segment, min_fraction: float) -> list[float]:
    """Real times to label on one segment, spaced at least ``min_fraction`` of the panel."""
    span = segment.end - segment.start
    if span == 0:
        return [segment.start]
    if axis.scale == "linear":
        n_bins = max(2, int(round(0.9 / max(min_fraction, 1e-3) * _segment_share(axis, segment))))
        locator = MaxNLocator(nbins=min(n_bins, 6), steps=[1, 2, 2.5, 5, 10])
        values = locator.tick_values(segment.start, segment.end)
        return [v for v in values if segment.start - 1e-9 <= v <= segment.end + 1e-9]
    sampled = np.unique(axis.times[segment.columns])
    step = float(np.diff(sampled).min()) if sampled.size > 1 else span
    candidates = np.unique(
        np.concatenate([[segment.start, segment.end], segment.start + _nice_offsets(span, step)])
    )
    where = axis.mapping(candidates)
    min_gap = min_fraction * (axis.limits[1] - axis.limits[0])
    end_position = where[-1]
    chosen = [0]
    for i in range(1, candidates.size - 1):
        if where[i] - where[chosen[-1]] >= min_gap and end_position - where[i] >= min_gap:
            chosen.append(i)
    chosen.append(candidates.size - 1)
    return [float(candidates[i]) for i in chosen]


def _segment_share(axis: _TimeAxis, segment: _Segment) -> float:
    width = axis.mapping(np.array([segment.end]))[0] - axis.mapping(np.array([segment.start]))[0]
    return float(width / max(axis.limits[1] - axis.limits[0], 1e-12))


def _time_ticks(axis: _TimeAxis, panel_mm: float) -> tuple[list[float], list[str]]:
    """Positions and real-time labels of the major ticks, per segment."""
    min_fraction = max(0.13, 6.5 / max(panel_mm, 1.0))
    min_gap = min_fraction * (axis.limits[1] - axis.limits[0])
    ticks: list[float] = []
    labels: list[str] = []
    for segment in axis.segments:
        for i, value in enumerate(_segment_ticks(axis, segment, min_fraction)):
            where = float(axis.mapping(np.array([value]))[0] + segment.offset)
            if ticks and where - ticks[-1] < min_gap:
                if i > 0:
                    continue
                # A segment's first time wins over the previous segment's last one.
                ticks.pop()
                labels.pop()
            ticks.append(where)
            labels.append(f"{value:g}")
    return ticks, labels


def _apply_time_axis(
    ax, axis: _TimeAxis, ticks: list[float], labels: list[str], *, labelled: bool
) -> None:
    """Real-time tick labels, and the sampled times as short inward minor ticks."""
    ax.set_xticks(ticks, labels if labelled else [""] * len(ticks))
    ax.xaxis.set_minor_locator(FixedLocator(np.unique(axis.positions)))
    ax.xaxis.remove_overlapping_locs = False  # a sampled time on a labelled tick is marked too
    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.tick_params(axis="x", which="minor", direction="in", length=3.2, color=_INK, width=0.7)
    ax.tick_params(axis="x", which="major", labelbottom=labelled)
    ax.set_xlim(*axis.limits)


# ------------------------------------------------------------------ shared helpers


def _figure(width: Width, height_mm: float) -> Figure:
    """An empty constrained-layout figure of a journal width (not registered with pyplot)."""
    width_mm = _width_mm(width)
    if height_mm > _MAX_HEIGHT_MM:
        warnings.warn(
            f"figure is {height_mm:.0f} mm tall, more than a page; use width='double' or "
            "fewer clusters",
            GloamWarning,
            stacklevel=3,
        )
    figure = Figure(
        figsize=(width_mm / _MM_PER_INCH, height_mm / _MM_PER_INCH), layout="constrained"
    )
    FigureCanvasAgg(figure)
    return figure


def _width_mm(width: Width) -> float:
    """Printed width (mm) of a figure one (``"single"``) or two (``"double"``) columns wide."""
    if width not in ("single", "double"):
        raise GloamError(f"width must be 'single' or 'double'; got {width!r}")
    return SINGLE_COLUMN_MM if width == "single" else DOUBLE_COLUMN_MM


def _text_width_mm(figure: Figure, text: str, size: float = MIN_FONT_PT) -> float:
    """Printed width of one line of text (mm) in the figure's font."""
    probe = figure.text(0, 0, text, fontsize=size)
    extent = probe.get_window_extent(figure.canvas.get_renderer())
    probe.remove()
    return float(extent.width / figure.dpi * _MM_PER_INCH)


def _panel_titles(figure: Figure, parts: list[list[str]], room_mm: float) -> list[str]:
    """Join each title's parts with " · ", breaking lines the same way in every panel.

    All titles stay on one line when they all fit in ``room_mm``; otherwise every title
    breaks before its third part (``J=...``), and if that is not enough also after the first.
    """
    for breaks in ({2}, {1, 2}):
        if breaks == {2}:
            one_line = [" · ".join(p) for p in parts]
            if all(_text_width_mm(figure, t) <= room_mm for t in one_line):
                return one_line
        joined = [
            "".join(
                (("\n" if i in breaks else " · ") if i else "") + part for i, part in enumerate(p)
            )
            for p in parts
        ]
        widest = max(_text_width_mm(figure, line) for t in joined for line in t.split("\n"))
        if widest <= room_mm:
            return joined
    return joined


def _wrap(figure: Figure, text: str, room_mm: float, size: float = MIN_FONT_PT) -> str:
    """Break ``text`` at spaces so that no line is wider than ``room_mm`` when printed."""
    lines: list[str] = []
    for word in text.split():
        if lines and _text_width_mm(figure, f"{lines[-1]} {word}", size) <= room_mm:
            lines[-1] = f"{lines[-1]} {word}"
        else:
            lines.append(word)
    return "\n".join(lines)


def _join_fitting(figure: Figure, parts: list[str], joiner: str, room_mm: float) -> str:
    """Join ``parts`` with ``joiner``, starting a new line where one would exceed ``room_mm``."""
    lines = [parts[0]]
    for part in parts[1:]:
        candidate = f"{lines[-1]}{joiner}{part}"
        if _text_width_mm(figure, candidate) <= room_mm:
            lines[-1] = candidate
        else:
            lines.append(part)
    return "\n".join(lines)


def _labels(cluster_labels: Sequence[str] | None, n_clusters: int) -> list[str]:
    if cluster_labels is None:
        return [f"C{k + 1}" for k in range(n_clusters)]
    labels = [str(label) for label in cluster_labels]
    if len(labels) != n_clusters:
        raise GloamError(
            f"got {len(labels)} cluster labels for {n_clusters} clusters; give one per cluster"
        )
    return labels


# ------------------------------------------------------------------ profiles


@dataclass(frozen=True)
class _Summary:
    """Quantile bands of one class at every column: rows follow :data:`BAND_QUANTILES`."""

    bands: np.ndarray | None  # (4, n_columns) or None when the class has no genes
    median: np.ndarray | None  # (n_columns,)


def _summarise(values: np.ndarray, rows: np.ndarray) -> _Summary:
    if rows.size == 0:
        return _Summary(None, None)
    chosen = values[rows]
    levels = np.quantile(chosen, (*BAND_QUANTILES, 0.5), axis=0)
    return _Summary(levels[:4], levels[4])


def _draw_bands(ax, axis: _TimeAxis, summary: _Summary, colour: str, gid: str) -> None:
    if summary.bands is None:
        return
    outer, inner = _tint(colour, _OUTER_TINT), _tint(colour, _INNER_TINT)
    for segment in axis.segments:
        cols = segment.columns
        x = axis.positions[cols]
        suffix = f"-{segment.name}" if segment.name else ""
        ax.fill_between(
            x,
            summary.bands[0, cols],
            summary.bands[3, cols],
            color=outer,
            linewidth=0,
            zorder=1,
            gid=f"{gid}-band90{suffix}",
        )
        ax.fill_between(
            x,
            summary.bands[1, cols],
            summary.bands[2, cols],
            color=inner,
            linewidth=0,
            zorder=2,
            gid=f"{gid}-band50{suffix}",
        )


def _draw_line(
    ax, axis: _TimeAxis, y: np.ndarray, style: dict[str, str], gid: str, *, markers: bool = True
) -> None:
    for segment in axis.segments:
        cols = segment.columns
        suffix = f"-{segment.name}" if segment.name else ""
        ax.plot(
            axis.positions[cols],
            y[cols],
            color=style["color"],
            linestyle=style["linestyle"],
            marker=style["marker"] if markers else None,
            markersize=2.4,
            markeredgewidth=0,
            linewidth=1.3,
            zorder=4,
            gid=f"{gid}{suffix}",
        )


def _symmetric_limit(*arrays: np.ndarray | None) -> float:
    finite = [np.abs(a[np.isfinite(a)]) for a in arrays if a is not None and np.size(a)]
    finite = [a for a in finite if a.size]
    return 1.08 * max(float(np.max(np.concatenate(finite))), 0.5) if finite else 1.0


def plot_cluster_profiles(
    zscores: np.ndarray,
    times: np.ndarray,
    memberships: np.ndarray,
    centroids: np.ndarray,
    *,
    noise: np.ndarray | None = None,
    log_means: np.ndarray | None = None,
    conditions: Sequence[str] | None = None,
    core_threshold: float = 0.7,
    cluster_labels: Sequence[str] | None = None,
    time_unit: str = "h",
    time_scale: str = "auto",
    jaccard: np.ndarray | None = None,
    width: Width = "double",
) -> Figure:
    """Temporal profile of every cluster as a grid of small panels sharing their axes.

    Each cluster's panel shows its centroid in the cluster's colour (markers at the sampled
    times) over two quantile bands of its *core genes* (top class the cluster, membership
    >= ``core_threshold``): the central 90 % (5th-95th percentile, light) and central 50 %
    (quartiles, dark) of their z-scores at each time. No gene is drawn on its own. The title
    reads ``C1 · 42 core / 60 genes`` (core genes / genes whose top class is the cluster),
    followed by ``· J=0.91`` when ``jaccard`` is given. With ``noise``, one more panel in grey
    shows the genes whose top class is the noise class (their median and the same bands).
    With ``log_means``, every panel gets a second, shorter panel below it on the expression
    scale (median mean log2 expression of the same genes, with the same bands). Sampled times
    are marked by short inward ticks; tick labels are in real time units on a time axis
    that is compressed for uneven sampling (:func:`time_axis_transform`). Concatenated
    conditions get one time segment each.

    Parameters
    ----------
    zscores : ndarray of shape (n_genes, n_timepoints)
        Standardised profiles (z-score per gene) that were clustered.
    times : ndarray of shape (n_timepoints,)
        Time of each column in ``time_unit``.
    memberships : ndarray of shape (n_genes, n_clusters)
        Consensus memberships of the clusters (with ``noise``, rows sum to 1 - noise).
    centroids : ndarray of shape (n_clusters, n_timepoints)
        Cluster centroids (z-scores).
    noise : ndarray of shape (n_genes,), optional
        Membership in the noise class; a gene's top class is noise when this exceeds its
        largest cluster membership. Adds the noise panel.
    log_means : ndarray of shape (n_genes, n_timepoints), optional
        Mean log2 expression of each gene in each column; adds the expression panels.
    conditions : sequence of str of length n_timepoints, optional
        Condition of each column when conditions are concatenated.
    core_threshold : float
        Membership at or above which a gene of the cluster is a core gene, in (0, 1].
    cluster_labels : sequence of str of length n_clusters, optional
        Cluster names (default ``C1``, ``C2``, ...).
    time_unit : str
        Unit of ``times`` for the axis label.
    time_scale : {"auto", "linear", "sqrt", "log1p"}
        Time axis scale (see :func:`time_axis_transform`).
    jaccard : ndarray of shape (n_clusters,), optional
        Mean resampling Jaccard of each cluster (Hennig 2007); NaN entries are not shown.
    width : {"single", "double"}
        Journal column width of the figure.

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    GloamError
        If the shapes disagree or a setting is out of range.
    """
    zscores = np.asarray(zscores, dtype=float)
    memberships = np.asarray(memberships, dtype=float)
    centroids = np.asarray(centroids, dtype=float)
    times = _as_times(times)
    if zscores.ndim != 2 or memberships.ndim != 2 or centroids.ndim != 2:
        raise GloamError("zscores, memberships and centroids must be 2-D arrays")
    n_genes, n_columns = zscores.shape
    n_clusters = memberships.shape[1]
    if memberships.shape[0] != n_genes or centroids.shape != (n_clusters, n_columns):
        raise GloamError(
            f"profile plot got zscores {zscores.shape}, memberships {memberships.shape} and "
            f"centroids {centroids.shape}; expected (n, d), (n, c) and (c, d)"
        )
    if n_clusters < 1:
        raise GloamError("profile plot needs at least one cluster")
    if times.shape != (n_columns,):
        raise GloamError(f"profile plot got {times.size} times for {n_columns} columns")
    if not 0.0 < core_threshold <= 1.0:
        raise GloamError(f"core_threshold must be in (0, 1]; got {core_threshold}")
    if noise is not None:
        noise = np.asarray(noise, dtype=float)
        if noise.shape != (n_genes,):
            raise GloamError(f"noise has shape {noise.shape}; expected ({n_genes},), one per gene")
    if log_means is not None:
        log_means = np.asarray(log_means, dtype=float)
        if log_means.shape != zscores.shape:
            raise GloamError(
                f"log_means has shape {log_means.shape}; expected {zscores.shape} like zscores"
            )
    if jaccard is not None:
        jaccard = np.asarray(jaccard, dtype=float)
        if jaccard.shape != (n_clusters,):
            raise GloamError(
                f"jaccard has shape {jaccard.shape}; expected ({n_clusters},), one per cluster"
            )
    labels = _labels(cluster_labels, n_clusters)
    axis = _time_axis(times, conditions, time_scale)

    largest = memberships.max(axis=1)
    top = memberships.argmax(axis=1)
    if noise is not None:
        top = np.where(noise > largest, -1, top)
    core = np.where((top >= 0) & (largest >= core_threshold), top, -1)
    n_top = np.bincount(top[top >= 0], minlength=n_clusters)
    n_core = np.bincount(core[core >= 0], minlength=n_clusters)
    z_summaries = [_summarise(zscores, np.flatnonzero(core == k)) for k in range(n_clusters)]
    log_summaries = (
        [_summarise(log_means, np.flatnonzero(core == k)) for k in range(n_clusters)]
        if log_means is not None
        else None
    )
    noise_rows = np.flatnonzero(top == -1)
    if noise is not None:
        z_summaries.append(_summarise(zscores, noise_rows))
        if log_summaries is not None:
            log_summaries.append(_summarise(log_means, noise_rows))
    styles = cluster_styles(n_clusters)
    if noise is not None:
        styles.append({"color": NOISE_COLOUR, "linestyle": "-", "marker": "o"})
    n_panels = len(z_summaries)

    width_mm = _width_mm(width)
    preferred = 4 if width == "double" else 2
    n_rows = int(np.ceil(n_panels / preferred))
    n_cols = int(np.ceil(n_panels / n_rows))  # as few empty cells as the row count allows
    pitch_mm = (width_mm - 12.0) / n_cols
    titles = []
    for k in range(n_clusters):
        parts = [f"{labels[k]}", f"{n_core[k]} core / {n_top[k]} genes"]
        if jaccard is not None and np.isfinite(jaccard[k]):
            parts.append(f"J={jaccard[k]:.2f}")
        titles.append(parts)
    if noise is not None:
        titles.append(["noise", f"{noise_rows.size} genes"])
    with matplotlib.rc_context(_STYLE):
        joined = _panel_titles(_figure(width, 50.0), titles, pitch_mm - 4.0)
    title_lines = max(text.count("\n") + 1 for text in joined)
    # With expression panels every row carries two y labels, so each panel must be taller
    # than its label (22.8 mm and 13.4 mm at 7 pt); without them one figure label serves all.
    z_mm = float(np.clip(0.5 * pitch_mm, 25.0 if log_means is not None else 20.0, 30.0))
    log_mm = 15.0 if log_means is not None else 0.0
    row_mm = 3.2 * title_lines + 2.0 + z_mm + (log_mm + 1.5 if log_means is not None else 0.0)
    height_mm = n_rows * row_mm + 19.0 + (4.0 if n_rows * n_cols > n_panels else 0.0)

    with matplotlib.rc_context(_STYLE):
        figure = _figure(width, height_mm)
        # One flat grid (a z-score row, then an expression row, per row of clusters) keeps
        # every panel of a row at the same height whatever labels its neighbours carry.
        kinds = 2 if log_means is not None else 1
        grid = figure.add_gridspec(
            n_rows * kinds, n_cols, height_ratios=[z_mm, log_mm][:kinds] * n_rows
        )
        z_axes: list[Any] = []
        log_axes: list[Any] = []
        for index in range(n_panels):
            row, col = divmod(index, n_cols)
            # Panels share their axes by identical limits and ticks set below; matplotlib's
            # sharex/sharey would make every draw walk all sibling axes (slow for c = 15).
            z_axes.append(figure.add_subplot(grid[row * kinds, col]))
            if log_means is not None:
                log_axes.append(figure.add_subplot(grid[row * kinds + 1, col]))

        limit = _symmetric_limit(
            centroids,
            *[s.bands for s in z_summaries],
            *[s.median for s in z_summaries],
        )
        headroom = 1.28 if len(axis.segments) > 1 else 1.0
        for index, ax in enumerate(z_axes):
            summary = z_summaries[index]
            style = styles[index]
            is_noise = noise is not None and index == n_panels - 1
            gid = "noise" if is_noise else labels[index]
            ax.axhline(0.0, color=_GUIDE, linewidth=0.5, zorder=0)
            _draw_bands(ax, axis, summary, style["color"], gid)
            line = summary.median if is_noise else centroids[index]
            if line is not None:
                _draw_line(ax, axis, line, style, f"{gid}-{'median' if is_noise else 'centroid'}")
            if summary.bands is None:
                # The title already says "0 core"; the note goes where nothing else is drawn.
                target = log_axes[index] if log_axes else ax
                if log_axes or is_noise:
                    target.text(
                        0.5,
                        0.5 if log_axes else 0.15,
                        "no genes" if is_noise else f"no core genes (≥ {core_threshold:g})",
                        transform=target.transAxes,
                        ha="center",
                        va="center",
                        color=_MUTED,
                    )
            ax.set_title(joined[index], loc="left")
            ax.set_ylim(-limit, limit * headroom)
            if len(axis.segments) > 1:
                _draw_segment_names(ax, axis, limit * headroom)
            if log_axes:
                log_ax = log_axes[index]
                log_summary = log_summaries[index]  # type: ignore[index]
                _draw_bands(log_ax, axis, log_summary, style["color"], f"{gid}-log2")
                if log_summary.median is not None:
                    _draw_line(
                        log_ax,
                        axis,
                        log_summary.median,
                        style,
                        f"{gid}-log2-median",
                        markers=False,
                    )
        z_ticks = MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10]).tick_values(-limit, limit)
        z_ticks = z_ticks[np.abs(z_ticks) <= limit]
        for ax in z_axes:
            ax.set_yticks(z_ticks)
        if log_axes:
            finite = [s.bands for s in log_summaries if s.bands is not None]  # type: ignore[union-attr]
            low, high = (float(np.min(finite)), float(np.max(finite))) if finite else (0.0, 1.0)
            pad = 0.08 * max(high - low, 0.5)
            log_ticks = MaxNLocator(nbins=3, integer=True).tick_values(low, high)
            log_ticks = log_ticks[(log_ticks >= low - pad) & (log_ticks <= high + pad)]
            for ax in log_axes:
                ax.set_ylim(low - pad, high + pad)
                ax.set_yticks(log_ticks)

        bottoms = log_axes if log_axes else z_axes
        ticks, tick_labels = _time_ticks(axis, pitch_mm)
        for index, ax in enumerate(z_axes):
            row, col = divmod(index, n_cols)
            lowest = index + n_cols >= n_panels
            _apply_time_axis(ax, axis, ticks, tick_labels, labelled=lowest and not log_axes)
            if log_axes:
                _apply_time_axis(log_axes[index], axis, ticks, tick_labels, labelled=lowest)
            if lowest:
                bottoms[index].set_xlabel(f"time ({time_unit})")
            first = col == 0
            ax.tick_params(axis="y", labelleft=first)
            if log_axes:
                log_axes[index].tick_params(axis="y", labelleft=first)
            if first and log_axes:
                ax.set_ylabel("z-score (per gene)")
                log_axes[index].set_ylabel("mean log2\nexpression")
        if log_axes:
            figure.align_ylabels([*z_axes, *log_axes])
        else:
            figure.supylabel("z-score (per gene)", fontsize=MIN_FONT_PT)
        has_jaccard = jaccard is not None and bool(np.isfinite(jaccard).any())
        _profile_key(figure, core_threshold, noise is not None, has_jaccard, width)
    return figure


def _draw_segment_names(ax, axis: _TimeAxis, top: float) -> None:
    for left, right in zip(axis.segments[:-1], axis.segments[1:], strict=True):
        end = float(axis.positions[left.columns].max())
        start = float(axis.positions[right.columns].min())
        ax.axvline((end + start) / 2, color=_GUIDE, linewidth=0.6, zorder=0)
    for segment in axis.segments:
        x = axis.positions[segment.columns]
        ax.text(
            (x.min() + x.max()) / 2,
            top,
            segment.name,
            ha="center",
            va="top",
            color=_MUTED,
            clip_on=False,
        )


def _profile_key(
    figure: Figure, core_threshold: float, has_noise: bool, has_jaccard: bool, width: Width
) -> None:
    """The figure's legend: what the line, the two bands, the inner ticks and J mean."""
    handles = [
        Line2D([], [], color=_INK, marker="o", markersize=2.4, markeredgewidth=0, linewidth=1.3),
        Patch(facecolor=_tint(_INK, _INNER_TINT), linewidth=0),
        Patch(facecolor=_tint(_INK, _OUTER_TINT), linewidth=0),
        Line2D([], [], color=_INK, marker="|", markersize=4, linestyle="none"),
    ]
    labels = [
        "centroid",
        "core genes, central 50 %",
        "core genes, central 90 %",
        "sampled time",
    ]
    notes = [f"core genes: top class the cluster, membership ≥ {core_threshold:g}"]
    if has_noise:
        notes.append("noise panel: median and bands of all its genes")
    if has_jaccard:
        notes.append("J: mean resampling Jaccard (0–1)")
    figure.legend(
        handles,
        labels,
        loc="outside lower center",
        ncols=2 if width == "single" else 4,
        columnspacing=1.2,
        handletextpad=0.5,
        title=_join_fitting(figure, notes, "; ", _width_mm(width) - 8.0),
    )


# ------------------------------------------------------------------ overview


def plot_cluster_overview(
    table: pd.DataFrame,
    centroids: np.ndarray,
    *,
    cluster_labels: Sequence[str] | None = None,
    times: np.ndarray | None = None,
    conditions: Sequence[str] | None = None,
    time_unit: str = "h",
    time_scale: str = "auto",
    core_threshold: float | None = None,
    stable_jaccard: float = 0.75,
    max_corr: float | None = None,
    width: Width = "double",
) -> Figure:
    """One row per cluster: shape, size, robustness, peak time and nearest other cluster.

    Five aligned columns share the cluster rows: (1) the centroid's shape in the cluster's
    colour; (2) a bar of core genes (solid) over a bar of genes whose top class is the
    cluster (tint), with both counts written beside it; (3) the mean resampling Jaccard on a
    0-1 axis with the 0.75 "stable" line (Hennig 2007), filled when stable and open when
    not; (4) the time of the centroid's peak; (5) the Pearson correlation with the most
    similar other centroid, with that cluster's name.

    Parameters
    ----------
    table : DataFrame
        One row per cluster, in cluster order, with columns ``cluster``, ``n_top``,
        ``n_core``, ``jaccard`` (may be NaN), ``peak_time``, ``nearest`` and
        ``nearest_correlation`` (optionally ``peak_condition``).
    centroids : ndarray of shape (n_clusters, n_timepoints)
        Cluster centroids (z-scores), drawn as shapes in column 1.
    cluster_labels : sequence of str, optional
        Row names (default: the ``cluster`` column).
    times : ndarray of shape (n_timepoints,), optional
        Sampled times: place the centroid shapes and the peak axis on gloam's time axis.
        Without them the shapes use equally spaced columns and the peak axis is linear.
    conditions : sequence of str of length n_timepoints, optional
        Condition of each column when conditions are concatenated.
    time_unit : str
        Unit of times and ``peak_time``.
    time_scale : {"auto", "linear", "sqrt", "log1p"}
        Scale of the time axes (see :func:`time_axis_transform`).
    core_threshold : float, optional
        Membership threshold the ``n_core`` counts used, named in the axis label.
    stable_jaccard : float
        Jaccard at or above which a cluster counts as stable (Hennig 2007: 0.75).
    max_corr : float, optional
        Largest correlation two distinct centroids may have; drawn as a line when given.
    width : {"single", "double"}
        Journal column width of the figure.

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    GloamError
        If a column is missing or the shapes disagree.
    """
    needed = [
        "cluster",
        "n_top",
        "n_core",
        "jaccard",
        "peak_time",
        "nearest",
        "nearest_correlation",
    ]
    missing = [column for column in needed if column not in table.columns]
    if missing:
        raise GloamError(
            f"cluster overview table lacks column(s) {missing}; build it with "
            "gloam.stages.cluster_frame"
        )
    centroids = np.asarray(centroids, dtype=float)
    n_clusters = len(table)
    if n_clusters == 0 or centroids.ndim != 2 or centroids.shape[0] != n_clusters:
        raise GloamError(
            f"cluster overview got {n_clusters} table rows and centroids {centroids.shape}; "
            "give one centroid row per cluster"
        )
    labels = _labels(
        cluster_labels if cluster_labels is not None else table["cluster"].astype(str).tolist(),
        n_clusters,
    )
    styles = cluster_styles(n_clusters)
    n_top = table["n_top"].to_numpy(dtype=float)
    n_core = table["n_core"].to_numpy(dtype=float)
    jaccard = table["jaccard"].to_numpy(dtype=float)
    peak = table["peak_time"].to_numpy(dtype=float)
    nearest = table["nearest"].fillna("").astype(str).to_numpy()
    similarity = table["nearest_correlation"].to_numpy(dtype=float)
    if times is not None:
        times = _as_times(times)
        if times.shape != (centroids.shape[1],):
            raise GloamError(
                f"cluster overview got {times.size} times for {centroids.shape[1]} columns"
            )
        axis = _time_axis(times, conditions, time_scale)
        peak_axis_times = times
    else:
        index = np.arange(centroids.shape[1], dtype=float)
        axis = _time_axis(index, None, "linear")
        finite_peak = peak[np.isfinite(peak)]
        peak_axis_times = finite_peak if finite_peak.size else np.array([0.0])
    peak_mapping, peak_scale = _time_mapping(
        peak_axis_times, time_scale if times is not None else "linear"
    )
    rows = np.arange(n_clusters)

    row_mm = 5.2
    height_mm = 24.0 + row_mm * n_clusters
    with matplotlib.rc_context(_STYLE):
        figure = _figure(width, height_mm)
        shape_ax, size_ax, jac_ax, peak_ax, near_ax = figure.subplots(
            1, 5, sharey=True, gridspec_kw={"width_ratios": [1.0, 1.5, 1.0, 1.0, 1.1]}
        )
        for ax in (shape_ax, size_ax, jac_ax, peak_ax, near_ax):
            ax.set_ylim(n_clusters - 0.5, -1.25)  # the top strip holds the lines' labels
            ax.tick_params(axis="y", length=0)
            ax.spines["left"].set_visible(False)
            for row in rows[::2]:
                ax.axhspan(row - 0.5, row + 0.5, color="#F4F4F4", zorder=0, linewidth=0)
        shape_ax.set_yticks(rows, labels)

        # (1) centroid shapes, each scaled into its own row.
        spread = np.ptp(centroids, axis=1, keepdims=True)
        scaled = (centroids - centroids.min(axis=1, keepdims=True)) / np.where(
            spread > 0, spread, 1.0
        )
        for k in rows:
            for segment in axis.segments:
                cols = segment.columns
                shape_ax.plot(
                    axis.positions[cols],
                    k + 0.36 - 0.72 * scaled[k, cols],
                    color=styles[k]["color"],
                    linestyle=styles[k]["linestyle"],
                    linewidth=1.1,
                    gid=f"{labels[k]}-shape",
                )
        shape_ax.set_xlim(*axis.limits)
        shape_ax.set_xticks([])
        shape_ax.spines["bottom"].set_visible(False)
        shape_ax.set_title("centroid shape", loc="left")
        shape_ax.set_xlabel(
            f"time ({time_unit});\neach row scaled to its range"
            if times is not None
            else "time columns in order;\neach row scaled to its range"
        )

        # (2) sizes.
        colours = [style["color"] for style in styles]
        top_bars = size_ax.barh(
            rows, n_top, height=0.62, color=[_tint(c, _OUTER_TINT) for c in colours], zorder=2
        )
        core_bars = size_ax.barh(rows, n_core, height=0.62, color=colours, zorder=3)
        for top_bar, core_bar, label in zip(top_bars, core_bars, labels, strict=True):
            top_bar.set_gid(f"{label}-top")
            core_bar.set_gid(f"{label}-core")
        top_count = max(float(np.nanmax(n_top)), 1.0)
        for k in rows:
            size_ax.text(
                n_top[k] + 0.02 * top_count,
                k,
                f"{int(n_core[k])} / {int(n_top[k])}",
                va="center",
                ha="left",
            )
        size_ax.set_xlim(0, top_count * 1.42)
        size_ax.xaxis.set_major_locator(MaxNLocator(nbins=3, integer=True))
        core_text = f"core ≥ {core_threshold:g}" if core_threshold is not None else "core"
        size_ax.set_xlabel(f"number of genes\n({core_text} / top class)")
        size_ax.set_title("size", loc="left")

        # (3) robustness.
        jac_ax.axvline(stable_jaccard, color=_MUTED, linestyle="--", linewidth=0.7, zorder=1)
        for k in rows:
            if np.isfinite(jaccard[k]):
                stable = jaccard[k] >= stable_jaccard
                jac_ax.plot(
                    jaccard[k],
                    k,
                    marker="o",
                    markersize=4.5,
                    color=colours[k],
                    markerfacecolor=colours[k] if stable else "white",
                    markeredgewidth=1.0,
                    linestyle="none",
                    zorder=3,
                    gid=f"{labels[k]}-jaccard",
                )
            else:
                jac_ax.text(0.03, k, "not resampled", ha="left", va="center", color=_MUTED)
        jac_ax.set_xlim(0, 1.03)
        jac_ax.set_xticks([0, 0.5, 1], ["0", "0.5", "1"])
        jac_ax.set_xlabel("mean resampling\nJaccard (0–1);\nopen: below the line")
        jac_ax.set_title("robustness", loc="left")
        jac_ax.text(
            stable_jaccard - 0.02,
            -0.85,
            f"stable ≥ {stable_jaccard:g}",
            ha="right",
            va="center",
            color=_MUTED,
        )

        # (4) peak time.
        finite_peak = np.isfinite(peak)
        peak_positions = np.where(finite_peak, peak_mapping(np.where(finite_peak, peak, 0)), np.nan)
        for k in rows[finite_peak]:
            peak_ax.plot(
                peak_positions[k],
                k,
                marker="o",
                markersize=4.5,
                color=colours[k],
                linestyle="none",
                zorder=3,
                gid=f"{labels[k]}-peak",
            )
        conditions_of_peak = (
            table["peak_condition"].astype(str).to_numpy()
            if "peak_condition" in table.columns
            else None
        )
        show_condition = conditions_of_peak is not None and len(set(conditions_of_peak)) > 1
        span_times = peak_axis_times
        low, high = float(span_times.min()), float(span_times.max())
        positions = peak_mapping(np.array([low, high]))
        pad = 0.08 * max(positions[1] - positions[0], 1e-9) if high > low else 0.5
        peak_ax.set_xlim(positions[0] - pad, positions[1] + pad)
        peak_time_axis = _TimeAxis(
            np.unique(span_times),
            peak_mapping(np.unique(span_times)),
            [_Segment("", np.arange(np.unique(span_times).size), low, high, 0.0, 0.0)],
            peak_mapping,
            peak_scale,
            (positions[0] - pad, positions[1] + pad),
        )
        peak_ticks, peak_labels = _time_ticks(peak_time_axis, _width_mm(width) * 0.16)
        _apply_time_axis(peak_ax, peak_time_axis, peak_ticks, peak_labels, labelled=True)
        if times is None:
            peak_ax.xaxis.set_minor_locator(FixedLocator([]))
        if show_condition:
            for k in rows[finite_peak]:
                peak_ax.annotate(
                    conditions_of_peak[k],  # type: ignore[index]
                    (peak_positions[k], k),
                    xytext=(4, 0),
                    textcoords="offset points",
                    va="center",
                    color=_MUTED,
                )
        peak_ax.set_xlabel(f"time of the centroid's\nhighest value ({time_unit})")
        peak_ax.set_title("peak", loc="left")

        # (5) nearest other cluster.
        if max_corr is not None:
            near_ax.axvline(max_corr, color=_MUTED, linestyle="--", linewidth=0.7, zorder=1)
        near_ax.axvline(0.0, color=_GUIDE, linewidth=0.5, zorder=1)
        for k in rows:
            if np.isfinite(similarity[k]):
                near_ax.plot(
                    similarity[k],
                    k,
                    marker="D",
                    markersize=3.6,
                    color=colours[k],
                    linestyle="none",
                    zorder=3,
                    gid=f"{labels[k]}-nearest",
                )
                right = similarity[k] > 0.35
                near_ax.annotate(
                    f"{nearest[k]}",
                    (similarity[k], k),
                    xytext=(-5 if right else 5, 0),
                    textcoords="offset points",
                    ha="right" if right else "left",
                    va="center",
                )
            else:
                near_ax.text(-1.0, k, "no other cluster", ha="left", va="center", color=_MUTED)
        near_ax.set_xlim(-1.05, 1.05)
        near_ax.set_xticks([-1, 0, 1], ["−1", "0", "1"])
        near_ax.set_xlabel("Pearson r with the most\nsimilar centroid (−1 to 1)")
        near_ax.set_title("nearest cluster", loc="left")
        if max_corr is not None:
            near_ax.text(
                max_corr - 0.04,
                -0.85,
                f"distinct ≤ {max_corr:g}",
                ha="right",
                va="center",
                color=_MUTED,
            )
    return figure


# ------------------------------------------------------------------ validity

_CRITERION_TITLES = {
    "structure": "structure",
    "robust": "robust",
    "sizeable": "sizeable",
    "distinct": "distinct",
}


def _criteria_matrix(
    table: pd.DataFrame,
    stable_jaccard: float,
    min_core_size: float,
    max_corr: float,
    core_column: str | None,
) -> tuple[list[str], np.ndarray]:
    """Which criterion each c passed: names and a (n_criteria, n_c) bool array.

    Uses the table's own bool columns when present (the decision that was made), else the
    ``failed`` text, else the thresholds.
    """
    from gloam.validity import CRITERIA

    decided = [name for name in CRITERIA if name in table.columns and table[name].dtype == bool]
    known = decided or ["structure", "robust", "sizeable", "distinct"]
    names = list(known)
    if "failed" in table.columns:
        failed_sets = [
            {part.strip() for part in str(text).split(",") if part.strip()}
            for text in table["failed"].fillna("")
        ]
        names += sorted(set().union(*failed_sets) - set(known))
    else:
        failed_sets = None
    rows = []
    for name in names:
        if name in table.columns and table[name].dtype == bool:
            rows.append(table[name].to_numpy(dtype=bool))
        elif failed_sets is not None:
            rows.append(np.array([name not in failed for failed in failed_sets]))
        elif name == "robust" and "min_jaccard" in table.columns:
            rows.append(
                np.nan_to_num(table["min_jaccard"].to_numpy(dtype=float), nan=-1) >= stable_jaccard
            )
        elif name == "sizeable" and core_column is not None:
            rows.append(table[core_column].to_numpy(dtype=float) >= min_core_size)
        elif name == "distinct" and "max_centroid_correlation" in table.columns:
            rows.append(~(table["max_centroid_correlation"].to_numpy(dtype=float) > max_corr))
        else:
            rows.append(np.ones(len(table), dtype=bool))
    return names, np.vstack(rows)


def plot_validity(
    table: pd.DataFrame,
    chosen: int,
    *,
    stable_jaccard: float = 0.75,
    min_core_size: int = 10,
    max_corr: float = 0.85,
    width: Width = "single",
) -> Figure:
    """The criteria that decide the number of clusters c, for every scanned c.

    Four small panels share the c axis: robustness (smallest mean resampling Jaccard, with
    the ``stable_jaccard`` line; Hennig 2007), size (smallest cluster's core genes, with
    ``min_core_size``), distinctness (largest correlation between two centroids, with
    ``max_corr``) and the share of starts that reached the best objective. A point is filled
    when that c passes the panel's criterion and open when it fails. Below them a criteria
    matrix shows, per c, each criterion and whether c passes all of them. The chosen c is
    shaded; when it is 1 the figure says that no cluster structure is supported.

    Parameters
    ----------
    table : DataFrame
        One row per c: ``n_clusters``, ``min_jaccard`` (0-1), ``min_core_size`` or
        ``min_core_genes`` (genes), ``max_centroid_correlation`` (-1..1), optionally
        ``n_at_optimum`` and ``n_starts``, ``passes`` (bool), ``failed`` (comma-separated
        criteria, "" if none) and the bool criterion columns of
        :func:`gloam.validity.judge_n_clusters`. Other columns are ignored.
    chosen : int
        The number of clusters used downstream (1 = no clusters).
    stable_jaccard, min_core_size, max_corr : float
        Thresholds of the robust, sizeable and distinct criteria.
    width : {"single", "double"}
        Journal column width of the figure.

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    GloamError
        If the table is empty or lacks ``n_clusters``.
    """
    if "n_clusters" not in table.columns or table.empty:
        raise GloamError("validity plot needs a non-empty table with an n_clusters column")
    table = table.sort_values("n_clusters", kind="stable").reset_index(drop=True)
    c_values = table["n_clusters"].to_numpy(dtype=int)
    core_column = next((c for c in ("min_core_size", "min_core_genes") if c in table.columns), None)
    names, passed = _criteria_matrix(table, stable_jaccard, min_core_size, max_corr, core_column)
    passes = (
        table["passes"].to_numpy(dtype=bool) if "passes" in table.columns else passed.all(axis=0)
    )
    panels: list[tuple[str, str, np.ndarray, float | None, np.ndarray, tuple]] = []
    if "min_jaccard" in table.columns:
        panels.append(
            (
                "robust",
                "smallest mean Jaccard (0–1)",
                table["min_jaccard"].to_numpy(dtype=float),
                stable_jaccard,
                passed[names.index("robust")],
                (0.0, 1.04),
            )
        )
    if core_column is not None:
        sizes = table[core_column].to_numpy(dtype=float)
        panels.append(
            (
                "sizeable",
                "smallest cluster (core genes)",
                sizes,
                float(min_core_size),
                passed[names.index("sizeable")],
                (
                    0.0,
                    max(
                        float(np.nanmax(sizes)) if np.isfinite(sizes).any() else 1.0,
                        float(min_core_size),
                    )
                    * 1.12,
                ),
            )
        )
    if "max_centroid_correlation" in table.columns:
        panels.append(
            (
                "distinct",
                "largest centroid r (−1 to 1)",
                table["max_centroid_correlation"].to_numpy(dtype=float),
                max_corr,
                passed[names.index("distinct")],
                (-1.04, 1.04),
            )
        )
    if {"n_at_optimum", "n_starts"} <= set(table.columns):
        at_optimum = table["n_at_optimum"].to_numpy(dtype=float)
        panels.append(
            (
                "starts at the optimum",
                "share of starts (0–1)",
                at_optimum / np.maximum(table["n_starts"].to_numpy(dtype=float), 1.0),
                None,
                np.ones(len(table), dtype=bool),  # not a criterion: nothing to fail
                (0.0, 1.04),
            )
        )
    n_cols = 2 if width == "single" else min(4, max(len(panels), 1))
    n_panel_rows = int(np.ceil(len(panels) / n_cols)) if panels else 0
    matrix_rows = len(names) + 1
    height_mm = 12.0 + n_panel_rows * 36.0 + 4.0 * matrix_rows + 16.0
    x_pad = 0.6
    x_limits = (c_values.min() - x_pad, c_values.max() + x_pad)
    chosen_shown = chosen in set(c_values.tolist())

    with matplotlib.rc_context(_STYLE):
        figure = _figure(width, height_mm)
        grid = figure.add_gridspec(
            n_panel_rows + 1,
            n_cols,
            height_ratios=[*([36.0] * n_panel_rows), 4.0 * matrix_rows + 6.0],
        )
        for index, (title, ylabel, y, threshold, ok, ylim) in enumerate(panels):
            ax = figure.add_subplot(grid[divmod(index, n_cols)])
            if chosen_shown:
                ax.axvspan(chosen - 0.4, chosen + 0.4, color=_HIGHLIGHT, zorder=0, linewidth=0)
            if threshold is not None:
                ax.axhline(threshold, color=_MUTED, linestyle="--", linewidth=0.7, zorder=1)
            ax.plot(c_values, y, color=_MUTED, linewidth=0.8, zorder=2)
            ax.plot(
                c_values[ok],
                y[ok],
                linestyle="none",
                marker="o",
                markersize=4,
                color=_INK,
                zorder=3,
                gid=f"{title}-pass",
            )
            ax.plot(
                c_values[~ok],
                y[~ok],
                linestyle="none",
                marker="o",
                markersize=4,
                markerfacecolor="white",
                markeredgecolor=_INK,
                markeredgewidth=0.9,
                zorder=3,
                gid=f"{title}-fail",
            )
            ax.set_ylim(*ylim)
            ax.set_title(
                title
                if threshold is None
                else f"{title} (needs {'≤' if title == 'distinct' else '≥'} {threshold:g})",
                loc="left",
            )
            ax.set_ylabel(ylabel)
            if index + n_cols >= len(panels):  # the lowest panel of its column
                ax.set_xlabel("number of clusters c")
            ax.xaxis.set_major_locator(MaxNLocator(integer=True, nbins=6))
            ax.set_xlim(*x_limits)

        matrix = figure.add_subplot(grid[n_panel_rows, :])
        all_names = [*names, "all criteria"]
        all_passed = np.vstack([passed, passes[None, :]])
        if chosen_shown:
            matrix.axvspan(chosen - 0.4, chosen + 0.4, color=_HIGHLIGHT, zorder=0, linewidth=0)
        for r, name in enumerate(all_names):
            ok = all_passed[r]
            matrix.plot(
                c_values[ok],
                np.full(ok.sum(), r),
                linestyle="none",
                marker="o",
                markersize=4,
                color=_INK,
                gid=f"matrix-{name}-pass",
            )
            matrix.plot(
                c_values[~ok],
                np.full((~ok).sum(), r),
                linestyle="none",
                marker="o",
                markersize=4,
                markerfacecolor="white",
                markeredgecolor=_INK,
                markeredgewidth=0.9,
                gid=f"matrix-{name}-fail",
            )
        matrix.axhline(len(names) - 0.5, color=_GUIDE, linewidth=0.5)
        matrix.set_yticks(np.arange(len(all_names)), all_names)
        matrix.set_ylim(len(all_names) - 0.5, -0.5)
        matrix.tick_params(axis="y", length=0)
        matrix.spines["left"].set_visible(False)
        matrix.set_xlim(*x_limits)
        matrix.xaxis.set_major_locator(MaxNLocator(integer=True, nbins=12))
        matrix.set_xlabel("number of clusters c")
        matrix.set_title("criteria per c (● passes, ○ fails)", loc="left")
        if chosen == 1 and not passed[names.index("structure")].any():
            headline = (
                "Chosen c = 1: the structure test finds no cluster structure, "
                "so no clusters are reported (genes kept as one group)"
            )
        elif chosen == 1:
            headline = (
                "Chosen c = 1: no scanned c passes every criterion, so no cluster structure "
                "is supported (genes kept as one group)"
            )
        else:
            headline = f"Chosen c = {chosen} (shaded)"
        figure.suptitle(
            _wrap(figure, headline, _width_mm(width) - 6.0, 8.0), x=0.02, ha="left", fontsize=8
        )
    return figure


# ------------------------------------------------------------------ fuzzifier


def plot_fuzzifier_curve(
    curve: pd.DataFrame,
    m: float,
    *,
    formula_m: float | None = None,
    method: str = "",
    width: Width = "single",
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
    width : {"single", "double"}
        Journal column width of the figure.

    Returns
    -------
    matplotlib.figure.Figure
    """
    has_distance = "min_centroid_distance" in curve.columns and not curve.empty
    with matplotlib.rc_context(_STYLE):
        figure = _figure(width, 25.0 if curve.empty else 62.0)
        axes = figure.subplots(1, 2 if has_distance else 1, squeeze=False)
        axis = axes[0, 0]
        axis.set_xlabel("fuzzifier m (unitless)")
        axis.set_ylabel("mean largest membership (0–1)")
        if curve.empty:
            axis.text(
                0.5,
                0.5,
                f"m = {m:.3g} ({method or 'fixed'});\nno randomised-data curve",
                ha="center",
                va="center",
                transform=axis.transAxes,
            )
            axis.set_axis_off()
        else:
            curve = curve.sort_values("m")
            axis.plot(
                curve["m"],
                curve["mean_max_membership"],
                color=_INK,
                marker="o",
                markersize=3,
                linewidth=1.0,
                label="randomised data",
            )
            if "uniform_level" in curve.columns:
                axis.plot(
                    curve["m"],
                    curve["uniform_level"],
                    color=_MUTED,
                    linestyle=":",
                    linewidth=1.0,
                    label="no structure (1/c)",
                )
            if has_distance:
                right = axes[0, 1]
                right.plot(
                    curve["m"],
                    curve["min_centroid_distance"],
                    color=_INK,
                    marker="o",
                    markersize=3,
                    linewidth=1.0,
                )
                right.set_xlabel("fuzzifier m (unitless)")
                right.set_ylabel("min. centroid distance (z-score²)")
            for target in axes.flat:
                target.axvline(
                    m, color="#A8A8A8", linewidth=2.4, zorder=0, label=f"used m = {m:.3g}"
                )
                if formula_m is not None and not np.isclose(formula_m, m):
                    target.axvline(
                        formula_m,
                        color=_INK,
                        linewidth=0.9,
                        linestyle="--",
                        zorder=1,
                        label=f"formula m = {formula_m:.3g}",
                    )
            handles, labels = axis.get_legend_handles_labels()
            figure.legend(handles, labels, loc="outside lower center", ncols=2)
        figure.suptitle(
            f"Fuzzifier ({method})" if method else "Fuzzifier", x=0.02, ha="left", fontsize=8
        )
    return figure


# ------------------------------------------------------------------ saving


def save_figure(figure: Figure, *paths: str | os.PathLike[str]) -> None:
    """Write ``figure`` to every path, atomically, in the format its suffix names.

    PNG at :data:`PNG_DPI` dpi; PDF with TrueType fonts embedded (``pdf.fonttype`` 42) and
    no creation date; SVG with text kept as ``<text>`` (``svg.fonttype`` "none"), fixed ids
    and no date. PDF and SVG files are therefore byte-identical when the same figure is
    saved twice. The settings are applied around ``savefig`` itself, where matplotlib reads
    them, and the page is never cropped, so the width stays one or two journal columns.

    Parameters
    ----------
    figure : matplotlib.figure.Figure
    *paths : str or PathLike
        Targets ending in ``.png``, ``.pdf`` or ``.svg``.

    Raises
    ------
    GloamError
        If a path has another suffix (nothing is written then).
    """
    formats = [os.fspath(path).rsplit(".", 1)[-1].lower() for path in paths]
    unknown = [os.fspath(p) for p, f in zip(paths, formats, strict=True) if f not in _SAVE_METADATA]
    if unknown:
        raise GloamError(f"figure path(s) {unknown} must end in .png, .pdf or .svg")
    if not isinstance(figure.canvas, FigureCanvasAgg):
        FigureCanvasAgg(figure)
    with matplotlib.rc_context({**_STYLE, **_SAVE_RC}):
        if not isinstance(figure.get_layout_engine(), (PlaceHolderLayoutEngine, type(None))):
            # Lay the figure out once, at print resolution, and keep that layout: matplotlib's
            # constrained layout moves axes by a last bit from one draw to the next, which
            # changes the hashed clip-path ids of an SVG between two saves.
            original_dpi = figure.dpi
            figure.set_dpi(PNG_DPI)
            figure.draw_without_rendering()
            figure.set_dpi(original_dpi)
            figure.set_layout_engine("none")
        for path, fmt in zip(paths, formats, strict=True):
            with atomic_output(path) as temporary:
                figure.savefig(
                    temporary,
                    format=fmt,
                    dpi=PNG_DPI,
                    metadata=_SAVE_METADATA[fmt],
                    bbox_inches=None,
                    facecolor="white",
                )
