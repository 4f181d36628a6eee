"""Figures: what each draws, on synthetic arrays built here, and how they are saved.

References named beside the checks: NumPy (``numpy.quantile``, ``numpy.median``) as the
reference for the bands; Pillow for PNG resolution; the PDF specification (ISO 32000-1,
section 9.9: ``/FontFile2`` holds an embedded TrueType program, ``/Subtype /Type3`` marks a
Type 3 font) and poppler's ``pdffonts`` for fonts; the SVG 1.1 specification for ``<text>``.
"""

from __future__ import annotations

import re
import shutil
import subprocess

import matplotlib
import numpy as np
import pandas as pd
import pytest
from matplotlib.colors import to_hex, to_rgb
from matplotlib.text import Text
from PIL import Image

from gloam.errors import GloamError
from gloam.plots import (
    BAND_QUANTILES,
    CLUSTER_PALETTE,
    DOUBLE_COLUMN_MM,
    NOISE_COLOUR,
    SINGLE_COLUMN_MM,
    choose_time_scale,
    cluster_colours,
    cluster_styles,
    plot_cluster_overview,
    plot_cluster_profiles,
    plot_fuzzifier_curve,
    plot_validity,
    save_figure,
    time_axis_transform,
)

TIMES = np.array([0.0, 0.5, 1.0, 2.0, 4.0, 8.0, 24.0])
THRESHOLD = 0.7


@pytest.fixture(scope="module")
def clustered():
    """Three clusters of 30 genes, with 8 genes given mostly to the noise class."""
    rng = np.random.default_rng(0)
    n_genes, n_clusters = 90, 3
    centroids = rng.normal(size=(n_clusters, TIMES.size))
    labels = np.repeat(np.arange(n_clusters), n_genes // n_clusters)
    zscores = centroids[labels] + rng.normal(0, 0.3, (n_genes, TIMES.size))
    memberships = rng.dirichlet(np.full(n_clusters, 0.5), n_genes)
    memberships[np.arange(n_genes), labels] += 1.5
    memberships /= memberships.sum(axis=1, keepdims=True)
    noise = np.full(n_genes, 0.02)
    noise[::11] = 0.9
    memberships *= (1.0 - noise)[:, None]
    log_means = 5.0 + 2.0 * rng.normal(size=(n_genes, 1)) + 0.5 * zscores
    return zscores, memberships, centroids, noise, log_means


def _classes(memberships, noise):
    """Top class (-1 = noise) and core class (-1 = none), computed here with NumPy."""
    largest = memberships.max(axis=1)
    top = np.where(noise > largest, -1, memberships.argmax(axis=1))
    core = np.where((top >= 0) & (largest >= THRESHOLD), top, -1)
    return top, core


def _panel(figure, title_start):
    (axis,) = [a for a in figure.axes if a.get_title(loc="left").startswith(title_start)]
    return axis


def _by_gid(artists, gid):
    (artist,) = [a for a in artists if a.get_gid() == gid]
    return artist


def _band_edges(collection, positions):
    """Lowest and highest y of a fill_between polygon at each x position."""
    vertices = collection.get_paths()[0].vertices
    low = np.array([vertices[np.isclose(vertices[:, 0], x), 1].min() for x in positions])
    high = np.array([vertices[np.isclose(vertices[:, 0], x), 1].max() for x in positions])
    return low, high


@pytest.fixture(scope="module")
def profiles(clustered):
    zscores, memberships, centroids, noise, log_means = clustered
    return plot_cluster_profiles(
        zscores,
        TIMES,
        memberships,
        centroids,
        noise=noise,
        log_means=log_means,
        core_threshold=THRESHOLD,
        jaccard=np.array([0.91, 0.5, np.nan]),
    )


# ------------------------------------------------------------------ palette and time axis


def test_palette_is_okabe_ito_without_black_and_yellow():
    """Hex values of Okabe & Ito (2008) as reprinted by Wong (2011), Nat. Methods 8, 441
    (from memory); black and yellow are left out on purpose."""
    okabe_ito = {"#E69F00", "#56B4E9", "#009E73", "#0072B2", "#D55E00", "#CC79A7"}
    assert set(CLUSTER_PALETTE) == okabe_ito
    assert len(set(CLUSTER_PALETTE)) == len(CLUSTER_PALETTE)
    colours = cluster_colours(15)
    assert colours[:6] == list(CLUSTER_PALETTE) and colours[6:12] == list(CLUSTER_PALETTE)
    assert NOISE_COLOUR not in CLUSTER_PALETTE
    red, green, blue = to_rgb(NOISE_COLOUR)
    assert red == green == blue  # a neutral grey


def test_clusters_beyond_the_palette_get_another_line_style_and_marker():
    """Common practice: redundant coding (style + marker) when colours must repeat."""
    styles = cluster_styles(15)
    pairs = {(s["color"], s["linestyle"], s["marker"]) for s in styles}
    assert len(pairs) == 15  # every cluster is told apart by colour, line style or marker
    assert styles[0]["linestyle"] != styles[6]["linestyle"] != styles[12]["linestyle"]


def test_auto_time_scale_compresses_uneven_sampling_only():
    """The brief's two designs: geometric-like sampling -> log1p, even sampling -> linear."""
    uneven = np.array([0, 0.5, 1, 2, 4, 6, 9, 12, 24, 48], dtype=float)
    even = np.arange(0, 21, 2, dtype=float)
    assert choose_time_scale(uneven) == "log1p"
    assert choose_time_scale(even) == "linear"
    np.testing.assert_allclose(time_axis_transform(even), even)


def test_time_transforms_match_their_numpy_formulas():
    """log1p is log(1 + (t - t0)/s) with s the smallest gap; sqrt is sqrt(t - t0) (NumPy)."""
    times = np.array([2.0, 2.5, 3.0, 4.0, 8.0, 26.0])
    np.testing.assert_allclose(
        time_axis_transform(times, "log1p"), np.log1p((times - 2.0) / 0.5), rtol=1e-12
    )
    np.testing.assert_allclose(time_axis_transform(times, "sqrt"), np.sqrt(times - 2.0))
    # A change of unit (hours -> minutes) leaves the compressed scale unchanged.
    np.testing.assert_allclose(
        time_axis_transform(times * 60, "log1p"), time_axis_transform(times, "log1p")
    )
    with pytest.raises(GloamError, match="time_scale"):
        time_axis_transform(times, "log10")
    with pytest.raises(GloamError, match="NaN"):
        time_axis_transform(np.array([0.0, np.nan]))


# ------------------------------------------------------------------ profiles


def test_one_panel_per_cluster_plus_noise_with_counts_in_titles(profiles, clustered):
    """Titles carry core / top-class counts computed here with NumPy, and J when finite."""
    _, memberships, _, noise, _ = clustered
    top, core = _classes(memberships, noise)
    titles = [a.get_title(loc="left").replace("\n", " · ") for a in profiles.axes]
    titles = [t for t in titles if t]
    expected = [f"C{k + 1} · {(core == k).sum()} core / {(top == k).sum()} genes" for k in range(3)]
    expected[0] += " · J=0.91"
    expected[1] += " · J=0.50"
    expected.append(f"noise · {(top == -1).sum()} genes")
    assert titles == expected
    assert (top == -1).sum() > 0 and (core == 0).sum() < (top == 0).sum()


def test_bands_are_numpy_quantiles_of_the_core_genes(profiles, clustered):
    """Outer band = 5th/95th, inner band = 25th/75th percentile of core genes (numpy.quantile)."""
    zscores, memberships, _, noise, _ = clustered
    _, core = _classes(memberships, noise)
    positions = time_axis_transform(TIMES)
    for k in range(3):
        axis = _panel(profiles, f"C{k + 1} ·")
        reference = np.quantile(zscores[core == k], BAND_QUANTILES, axis=0)
        outer = _band_edges(_by_gid(axis.collections, f"C{k + 1}-band90"), positions)
        inner = _band_edges(_by_gid(axis.collections, f"C{k + 1}-band50"), positions)
        np.testing.assert_allclose(outer, reference[[0, 3]], rtol=1e-12)
        np.testing.assert_allclose(inner, reference[[1, 2]], rtol=1e-12)
    assert not any(line.get_gid() and "gene" in line.get_gid() for line in axis.get_lines())


def test_centroids_and_bands_use_the_cluster_palette(profiles, clustered):
    _, _, centroids, _, _ = clustered
    positions = time_axis_transform(TIMES)
    for k, colour in enumerate(cluster_colours(3)):
        axis = _panel(profiles, f"C{k + 1} ·")
        line = _by_gid(axis.get_lines(), f"C{k + 1}-centroid")
        assert to_hex(line.get_color()) == to_hex(colour)
        np.testing.assert_allclose(line.get_xdata(), positions)
        np.testing.assert_allclose(line.get_ydata(), centroids[k])
        band = _by_gid(axis.collections, f"C{k + 1}-band50")
        # An opaque tint: the colour mixed with white, so it keeps the cluster's hue.
        face = np.asarray(band.get_facecolor()[0][:3])
        mix = (1.0 - face) / (1.0 - np.asarray(to_rgb(colour)))
        np.testing.assert_allclose(mix, mix[0], atol=0.01)
        assert band.get_facecolor()[0][3] == 1.0


def test_noise_panel_shows_the_noise_genes_median_in_grey(profiles, clustered):
    """Median and bands of the genes whose top class is noise (numpy.median / quantile)."""
    zscores, memberships, _, noise, _ = clustered
    top, _ = _classes(memberships, noise)
    axis = _panel(profiles, "noise ·")
    line = _by_gid(axis.get_lines(), "noise-median")
    assert to_hex(line.get_color()) == to_hex(NOISE_COLOUR)
    np.testing.assert_allclose(line.get_ydata(), np.median(zscores[top == -1], axis=0))
    outer = _band_edges(_by_gid(axis.collections, "noise-band90"), time_axis_transform(TIMES))
    np.testing.assert_allclose(outer, np.quantile(zscores[top == -1], [0.05, 0.95], axis=0))


def test_expression_panels_show_median_log2_of_core_genes(profiles, clustered):
    """The expression line is numpy.median of the core genes' mean log2 values."""
    _, memberships, _, noise, log_means = clustered
    _, core = _classes(memberships, noise)
    log_axes = [a for a in profiles.axes if any(g.get_gid() == "C1-log2-median" for g in a.lines)]
    (axis,) = log_axes
    line = _by_gid(axis.get_lines(), "C1-log2-median")
    np.testing.assert_allclose(line.get_ydata(), np.median(log_means[core == 0], axis=0))
    assert axis.get_ylabel().replace("\n", " ") == "mean log2 expression"
    assert len([a for a in profiles.axes if a.get_label() != "<colorbar>"]) == 8
    y_labels = {a.get_ylabel() for a in profiles.axes}
    x_labels = {a.get_xlabel() for a in profiles.axes}
    assert "z-score (per gene)" in y_labels and x_labels == {"", "time (h)"}


def test_without_expression_panels_one_figure_label_names_the_z_scores(clustered):
    """One panel per cluster and one for noise is absent here (noise not given)."""
    zscores, memberships, centroids, _, _ = clustered
    figure = plot_cluster_profiles(zscores, TIMES, memberships, centroids, width="single")
    assert figure.get_supylabel() == "z-score (per gene)"
    assert len(figure.axes) == 3


def test_panels_share_limits_and_mark_every_sampled_time(profiles):
    """Minor ticks sit at the positions of every sampled time (time_axis_transform, whose
    formula is checked against NumPy above); labels are real times."""
    z_axes = [a for a in profiles.axes if a.get_title(loc="left")]
    assert len(z_axes) == 4
    assert len({a.get_ylim() for a in z_axes}) == 1 and len({a.get_xlim() for a in z_axes}) == 1
    for axis in z_axes:
        np.testing.assert_allclose(axis.get_xticks(minor=True), time_axis_transform(TIMES))
    labels = [t.get_text() for t in profiles.axes[-1].get_xticklabels()]
    assert labels[0] == "0" and labels[-1] == "24"  # real time units, not positions


def test_conditions_get_their_own_time_segments(clustered):
    """On a linear axis each segment keeps the real time differences (NumPy diff)."""
    zscores, memberships, centroids, _, _ = clustered
    figure = plot_cluster_profiles(
        np.hstack([zscores, zscores]),
        np.concatenate([TIMES, TIMES]),
        memberships,
        np.hstack([centroids, centroids]),
        conditions=["cold"] * TIMES.size + ["warm"] * TIMES.size,
        time_scale="linear",
    )
    axis = _panel(figure, "C1 ·")
    first = _by_gid(axis.get_lines(), "C1-centroid-cold").get_xdata()
    second = _by_gid(axis.get_lines(), "C1-centroid-warm").get_xdata()
    assert second.min() > first.max()
    np.testing.assert_allclose(np.diff(first), np.diff(TIMES))
    np.testing.assert_allclose(np.diff(second), np.diff(TIMES))
    assert {"cold", "warm"} <= {text.get_text() for text in axis.texts}


def test_up_to_fifteen_clusters_fit_a_page():
    """Journal page text block about 240 mm tall: common practice."""
    rng = np.random.default_rng(3)
    c, n = 15, 150
    memberships = rng.dirichlet(np.full(c, 0.2), n)
    figure = plot_cluster_profiles(
        rng.normal(size=(n, TIMES.size)), TIMES, memberships, rng.normal(size=(c, TIMES.size))
    )
    assert len([a for a in figure.axes if a.get_title(loc="left")]) == 15
    width, height = figure.get_size_inches() * 25.4
    assert width == pytest.approx(DOUBLE_COLUMN_MM) and height <= 240.0


def test_profiles_reject_mismatched_shapes(clustered):
    """User mistakes give a GloamError naming the argument."""
    zscores, memberships, centroids, noise, _ = clustered
    with pytest.raises(GloamError, match="memberships"):
        plot_cluster_profiles(zscores, TIMES, memberships[:5], centroids)
    with pytest.raises(GloamError, match="times"):
        plot_cluster_profiles(zscores, TIMES[:3], memberships, centroids)
    with pytest.raises(GloamError, match="noise"):
        plot_cluster_profiles(zscores, TIMES, memberships, centroids, noise=noise[:4])
    with pytest.raises(GloamError, match="width"):
        plot_cluster_profiles(zscores, TIMES, memberships, centroids, width="wide")


# ------------------------------------------------------------------ overview


@pytest.fixture(scope="module")
def overview():
    rng = np.random.default_rng(2)
    centroids = rng.normal(size=(4, TIMES.size))
    correlation = np.corrcoef(centroids)  # NumPy's Pearson r as the table's input
    np.fill_diagonal(correlation, -np.inf)
    nearest = correlation.argmax(axis=1)
    table = pd.DataFrame(
        {
            "cluster": ["C1", "C2", "C3", "C4"],
            "n_top": [60, 45, 30, 12],
            "n_core": [40, 20, 25, 3],
            "jaccard": [0.92, 0.6, np.nan, 0.8],
            "peak_time": TIMES[centroids.argmax(axis=1)],
            "nearest": [f"C{j + 1}" for j in nearest],
            "nearest_correlation": correlation[np.arange(4), nearest],
        }
    )
    figure = plot_cluster_overview(
        table, centroids, cluster_labels=list(table["cluster"]), times=TIMES, max_corr=0.9
    )
    return table, figure


def test_overview_bars_are_core_and_top_counts_in_cluster_colours(overview):
    """Bar lengths equal the table's counts; colours equal the Okabe-Ito palette order."""
    table, figure = overview
    size_axis = _panel(figure, "size")
    for k, colour in enumerate(cluster_colours(4)):
        bar = _by_gid(size_axis.patches, f"C{k + 1}-core")
        assert bar.get_width() == table["n_core"][k]
        assert to_hex(bar.get_facecolor()) == to_hex(colour)
        assert _by_gid(size_axis.patches, f"C{k + 1}-top").get_width() == table["n_top"][k]
    texts = {t.get_text() for t in size_axis.texts}
    assert {"40 / 60", "3 / 12"} <= texts


def test_overview_marks_robustness_against_the_stable_line(overview):
    """Hennig (2007): mean Jaccard >= 0.75 is stable; filled when stable, open when not."""
    _, figure = overview
    axis = _panel(figure, "robustness")
    assert axis.get_xlim() == (0.0, 1.03)
    (line,) = [ln for ln in axis.get_lines() if ln.get_linestyle() == "--"]
    assert line.get_xdata()[0] == 0.75
    stable = _by_gid(axis.get_lines(), "C1-jaccard")
    unstable = _by_gid(axis.get_lines(), "C2-jaccard")
    assert stable.get_xdata()[0] == 0.92 and unstable.get_xdata()[0] == 0.6
    assert to_hex(stable.get_markerfacecolor()) == to_hex(cluster_colours(1)[0])
    assert to_hex(unstable.get_markerfacecolor()) == "#ffffff"
    assert "not resampled" in {t.get_text() for t in axis.texts}  # the NaN row


def test_overview_names_the_nearest_cluster_and_labels_units(overview):
    """Markers sit at NumPy's Pearson r (numpy.corrcoef) with the nearest centroid."""
    table, figure = overview
    axis = _panel(figure, "nearest cluster")
    for k in range(4):
        marker = _by_gid(axis.get_lines(), f"C{k + 1}-nearest")
        assert marker.get_xdata()[0] == pytest.approx(table["nearest_correlation"][k])
    assert set(table["nearest"]) <= {t.get_text() for t in axis.texts}
    for title in ("size", "robustness", "peak", "nearest cluster"):
        assert re.search(r"\(.+\)", _panel(figure, title).get_xlabel())  # every axis has a unit
    with pytest.raises(GloamError, match="lacks"):
        plot_cluster_overview(table.drop(columns="jaccard"), np.zeros((4, 3)))


# ------------------------------------------------------------------ validity


@pytest.fixture(scope="module")
def validity_table():
    c = np.arange(2, 8)
    table = pd.DataFrame(
        {
            "n_clusters": c,
            "min_jaccard": [0.95, 0.9, 0.8, 0.7, 0.6, 0.5],
            "min_core_genes": [80, 40, 25, 12, 8, 4],
            "max_centroid_correlation": [0.1, 0.3, 0.5, 0.85, 0.93, 0.97],
            "n_at_optimum": [20, 18, 15, 9, 5, 2],
            "n_starts": 20,
            "xie_beni": [0.2, 0.3, 0.2, 0.5, 0.6, 0.9],
        }
    )
    # Criteria judged here with the thresholds used below (0.75, 10, 0.9).
    table["structure"] = True
    table["robust"] = table["min_jaccard"] >= 0.75
    table["sizeable"] = table["min_core_genes"] >= 10
    table["distinct"] = ~(table["max_centroid_correlation"] > 0.9)
    criteria = ["structure", "robust", "sizeable", "distinct"]
    table["passes"] = table[criteria].all(axis=1)
    table["failed"] = [",".join(n for n in criteria if not row[n]) for _, row in table.iterrows()]
    return table


def test_validity_draws_each_criterion_with_its_threshold(validity_table):
    """Filled/open markers follow the criteria judged in the fixture with the thresholds
    (Hennig 2007 for 0.75; 10 genes and r = 0.9 are the project's defaults)."""
    figure = plot_validity(validity_table, 4, stable_jaccard=0.75, min_core_size=10, max_corr=0.9)
    c = validity_table["n_clusters"].to_numpy()
    for name, column, threshold in [
        ("robust", "min_jaccard", 0.75),
        ("sizeable", "min_core_genes", 10),
        ("distinct", "max_centroid_correlation", 0.9),
    ]:
        axis = _panel(figure, name)
        dashed = [ln for ln in axis.get_lines() if ln.get_linestyle() == "--"]
        assert dashed[0].get_ydata()[0] == threshold
        passed = validity_table[name].to_numpy()
        np.testing.assert_array_equal(_by_gid(axis.lines, f"{name}-pass").get_xdata(), c[passed])
        np.testing.assert_array_equal(_by_gid(axis.lines, f"{name}-fail").get_xdata(), c[~passed])
        np.testing.assert_allclose(
            _by_gid(axis.lines, f"{name}-pass").get_ydata(), validity_table[column][passed]
        )
    matrix = _panel(figure, "criteria per c")
    overall = _by_gid(matrix.lines, "matrix-all criteria-pass").get_xdata()
    np.testing.assert_array_equal(overall, c[validity_table["passes"]])
    assert [t.get_text() for t in matrix.get_yticklabels()][-1] == "all criteria"
    # The chosen c is shaded in every panel.
    for axis in figure.axes:
        spans = [p for p in axis.patches if p.get_x() == pytest.approx(3.6)]
        assert len(spans) == 1
    assert "c = 4" in figure.get_suptitle()


def test_validity_says_when_no_structure_is_supported(validity_table):
    """c = 1 means no clusters; the figure has to say so in words."""
    no_structure = validity_table.assign(structure=False, passes=False)
    figure = plot_validity(no_structure, 1)
    text = figure.get_suptitle().replace("\n", " ")
    assert "c = 1" in text and "no cluster structure" in text
    with pytest.raises(GloamError, match="n_clusters"):
        plot_validity(validity_table.drop(columns="n_clusters"), 3)


def test_fuzzifier_plot_marks_used_and_formula_m():
    """Vertical lines at the m values given (the input is the reference)."""
    curve = pd.DataFrame(
        {
            "m": [1.1, 1.3, 1.5],
            "mean_max_membership": [0.9, 0.4, 0.2],
            "uniform_level": [0.2] * 3,
            "min_centroid_distance": [3.0, 1.0, 0.0],
        }
    )
    figure = plot_fuzzifier_curve(curve, 1.35, formula_m=1.3, method="fixed")
    axis = figure.axes[0]
    vertical = {line.get_xdata()[0] for line in axis.get_lines() if len(line.get_xdata()) == 2}
    assert vertical == {1.35, 1.3}
    assert axis.get_xlabel() == "fuzzifier m (unitless)"
    empty = plot_fuzzifier_curve(curve.iloc[:0], 1.6, method="fixed")
    assert "1.6" in empty.axes[0].texts[0].get_text()


# ------------------------------------------------------------------ print size and saving


@pytest.fixture(scope="module")
def every_figure(profiles, overview, validity_table):
    curve = pd.DataFrame({"m": [1.1, 1.5], "mean_max_membership": [0.9, 0.3]})
    return {
        "profiles": profiles,
        "overview": overview[1],
        "validity": plot_validity(validity_table, 4),
        "fuzzifier": plot_fuzzifier_curve(curve, 1.3),
    }


def test_every_figure_is_one_or_two_columns_wide_with_text_of_at_least_7_pt(every_figure):
    """85 / 180 mm widths and 7 pt text: common practice for journal figures."""
    for name, figure in every_figure.items():
        width_mm = figure.get_size_inches()[0] * 25.4
        assert min(abs(width_mm - SINGLE_COLUMN_MM), abs(width_mm - DOUBLE_COLUMN_MM)) < 0.5, name
        figure.canvas.draw()
        texts = [t for t in figure.findobj(Text) if t.get_visible() and t.get_text().strip() != ""]
        assert texts, name
        smallest = min(t.get_fontsize() for t in texts)
        assert smallest >= 7.0, (name, smallest)


@pytest.fixture(scope="module")
def saved(tmp_path_factory, every_figure):
    folder = tmp_path_factory.mktemp("figures")
    figure = every_figure["validity"]
    paths = [folder / "v.png", folder / "v.pdf", folder / "v.svg"]
    save_figure(figure, *paths)
    first = {path.suffix: path.read_bytes() for path in paths}
    save_figure(figure, folder / "again.pdf", folder / "again.svg", folder / "again.png")
    return folder, first


def test_png_is_300_dpi_at_the_figure_width(saved):
    """Resolution read back with Pillow from the PNG's pHYs chunk."""
    folder, _ = saved
    with Image.open(folder / "v.png") as image:
        dpi = image.info["dpi"]
        width_px = image.size[0]
    assert dpi == pytest.approx((300, 300), abs=0.01)
    assert width_px / 300 * 25.4 == pytest.approx(SINGLE_COLUMN_MM, abs=0.5)


def test_pdf_embeds_truetype_fonts_and_no_type3(saved):
    """ISO 32000-1 §9.9: /FontFile2 is an embedded TrueType program; Type 3 fonts are not
    accepted by many journals."""
    folder, first = saved
    pdf = first[".pdf"]
    assert pdf[:4] == b"%PDF"
    assert b"/FontFile2" in pdf and b"/Type3" not in pdf
    assert re.search(rb"/Subtype\s*/(CIDFontType2|TrueType)", pdf)


def test_pdffonts_reports_embedded_truetype(saved):
    """poppler's pdffonts, an independent PDF reader."""
    if shutil.which("pdffonts") is None:
        pytest.skip("pdffonts (poppler-utils) is not installed; the byte check above still ran")
    folder, _ = saved
    report = subprocess.run(
        ["pdffonts", str(folder / "v.pdf")], capture_output=True, text=True, check=True
    ).stdout
    fonts = report.splitlines()[2:]  # after the header and its underline
    assert fonts
    for line in fonts:
        assert "TrueType" in line and "Type 3" not in line
        # Columns emb, sub, uni follow the encoding: the font is embedded.
        assert re.search(r"\byes\s+(yes|no)\s+(yes|no)\s+\d+\s+\d+\s*$", line), line


def test_svg_keeps_text_as_text(saved):
    """SVG 1.1 §10: text drawn with <text> elements stays selectable and editable."""
    _, first = saved
    svg = first[".svg"].decode()
    assert "<text" in svg and "Chosen c = 4" in svg


def test_pdf_svg_and_png_are_byte_identical_when_saved_twice(saved):
    """Reproducible builds: no creation date (ISO 32000-1 §14.3.3 /CreationDate; SVG 1.1
    <dc:date>), fixed SVG ids and a PNG without a time chunk (PNG spec §11.3.6.1 tIME), so two
    saves of one figure give the same bytes."""
    folder, first = saved
    assert (folder / "again.pdf").read_bytes() == first[".pdf"]
    assert (folder / "again.svg").read_bytes() == first[".svg"]
    assert (folder / "again.png").read_bytes() == first[".png"]
    assert b"CreationDate" not in first[".pdf"]
    assert b"<dc:date>" not in first[".svg"]
    assert b"tIME" not in first[".png"]


def test_save_figure_refuses_unknown_formats_and_writes_nothing(tmp_path, every_figure):
    """A user mistake is a GloamError, checked before any file is written."""
    with pytest.raises(GloamError, match=r"\.png, \.pdf or \.svg"):
        save_figure(every_figure["fuzzifier"], tmp_path / "p.png", tmp_path / "p.notaformat")
    assert list(tmp_path.iterdir()) == []


def test_saving_does_not_change_global_matplotlib_settings(tmp_path, every_figure):
    """Settings are scoped with matplotlib.rc_context, not set globally."""
    before = dict(matplotlib.rcParams)
    save_figure(every_figure["fuzzifier"], tmp_path / "f.pdf")
    assert dict(matplotlib.rcParams) == before
