"""Figures: what each draws, on synthetic arrays built here."""

from __future__ import annotations

import matplotlib
import numpy as np
import pandas as pd
import pytest
from matplotlib.collections import LineCollection

from gloam.errors import GloamError
from gloam.plots import (
    MEMBERSHIP_CMAP,
    plot_centroid_correlation,
    plot_cluster_profiles,
    plot_fuzzifier_curve,
    plot_validity,
    save_figure,
)

TIMES = np.array([0.0, 0.5, 1.0, 2.0, 4.0, 8.0, 24.0])


@pytest.fixture
def clustered():
    rng = np.random.default_rng(0)
    n_genes, n_clusters = 90, 3
    centroids = rng.normal(size=(n_clusters, TIMES.size))
    labels = np.repeat(np.arange(n_clusters), n_genes // n_clusters)
    values = centroids[labels] + rng.normal(0, 0.3, (n_genes, TIMES.size))
    memberships = rng.dirichlet(np.full(n_clusters, 0.5), n_genes)
    memberships[np.arange(n_genes), labels] += 1.0
    memberships /= memberships.sum(axis=1, keepdims=True)
    return values, memberships, centroids


def visible_axes(figure):
    return [axis for axis in figure.axes if axis.get_visible() and axis.get_label() != "<colorbar>"]


def test_profile_panels_show_cluster_and_core_sizes(clustered):
    values, memberships, centroids = clustered
    top = memberships.argmax(axis=1)
    core = {0.7: (memberships >= 0.7).sum(axis=0)}
    figure = plot_cluster_profiles(values, TIMES, memberships, centroids, core_sizes=core)
    panels = [axis for axis in visible_axes(figure) if axis.get_title(loc="left")]
    assert len(panels) == 3
    for k, axis in enumerate(panels):
        title = axis.get_title(loc="left")
        assert f"C{k + 1} · {(top == k).sum()} genes" in title
        assert f"≥0.7: {core[0.7][k]}" in title


def test_profiles_use_the_true_time_axis_with_units(clustered):
    values, memberships, centroids = clustered
    figure = plot_cluster_profiles(values, TIMES, memberships, centroids, time_unit="min")
    axis = visible_axes(figure)[0]
    # The centroid is drawn at the sampled times themselves: uneven spacing is kept.
    centroid_lines = [line for line in axis.get_lines() if line.get_linewidth() > 1.5]
    np.testing.assert_allclose(centroid_lines[-1].get_xdata(), TIMES)
    np.testing.assert_allclose(centroid_lines[-1].get_ydata(), centroids[0])
    labels = {a.get_xlabel() for a in visible_axes(figure)} | {
        a.get_ylabel() for a in visible_axes(figure)
    }
    assert "time (min)" in labels and "expression (z-score)" in labels
    colourbar = [a for a in figure.axes if a.get_label() == "<colorbar>"][0]
    assert "membership" in colourbar.get_ylabel()


def test_gene_lines_are_coloured_by_membership_with_cividis(clustered):
    """Line colours equal matplotlib's own cividis colormap at each gene's membership."""
    values, memberships, centroids = clustered
    figure = plot_cluster_profiles(values, TIMES, memberships, centroids)
    axis = visible_axes(figure)[0]
    (collection,) = [c for c in axis.collections if isinstance(c, LineCollection)]
    members = np.flatnonzero(memberships.argmax(axis=1) == 0)
    expected_order = members[np.argsort(memberships[members, 0], kind="stable")]
    colours = collection.get_colors()[:, :3]
    reference = matplotlib.colormaps["cividis_r"](memberships[expected_order, 0])[:, :3]
    assert MEMBERSHIP_CMAP.startswith("cividis")
    np.testing.assert_allclose(colours, reference, atol=1e-6)
    segments = collection.get_segments()
    np.testing.assert_allclose(segments[-1][:, 1], values[expected_order[-1]])


def test_concatenated_conditions_get_separate_time_segments(clustered):
    values, memberships, centroids = clustered
    both = np.hstack([values, values])
    figure = plot_cluster_profiles(
        both,
        np.concatenate([TIMES, TIMES]),
        memberships,
        np.hstack([centroids, centroids]),
        conditions=["cold"] * TIMES.size + ["warm"] * TIMES.size,
    )
    axis = visible_axes(figure)[0]
    centroid_lines = [line for line in axis.get_lines() if line.get_linewidth() > 1.5]
    first, second = centroid_lines[1].get_xdata(), centroid_lines[3].get_xdata()
    assert second.min() > first.max()
    np.testing.assert_allclose(np.diff(first), np.diff(TIMES))
    np.testing.assert_allclose(np.diff(second), np.diff(TIMES))
    assert {text.get_text() for text in axis.texts} == {"cold", "warm"}


def test_profiles_reject_mismatched_shapes(clustered):
    values, memberships, centroids = clustered
    with pytest.raises(GloamError, match="memberships"):
        plot_cluster_profiles(values, TIMES, memberships[:5], centroids)
    with pytest.raises(GloamError, match="times"):
        plot_cluster_profiles(values, TIMES[:3], memberships, centroids)


def test_validity_plot_marks_the_chosen_c():
    table = pd.DataFrame(
        {
            "n_clusters": [2, 3, 4, 5],
            "m": 1.5,
            "xie_beni": [0.5, 0.2, 0.4, 0.9],
            "partition_coefficient": [0.9, 0.85, 0.8, 0.7],
            "min_centroid_distance": [4.0, 3.0, 0.1, 0.05],
            "reason": ["a", "b", "c", "d"],
        }
    )
    figure = plot_validity(table, chosen=3)
    panels = visible_axes(figure)
    assert len(panels) == 3  # only the index columns, not m or reason
    for axis in panels:
        assert axis.get_xlabel() == "number of clusters c"
        assert "(" in axis.get_ylabel()  # every y label carries its unit
        marked = [line for line in axis.get_lines() if line.get_markersize() > 6]
        np.testing.assert_array_equal(marked[0].get_xdata(), [3])
    with pytest.raises(GloamError):
        plot_validity(table[["n_clusters", "m"]], chosen=3)


def test_fuzzifier_plot_marks_used_and_formula_m():
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


def test_correlation_heatmap_matches_pandas_corr():
    """Cell values equal pandas.DataFrame.corr (Pearson) of the centroids."""
    rng = np.random.default_rng(1)
    centroids = rng.normal(size=(4, 9))
    figure = plot_centroid_correlation(centroids, ["A", "B", "C", "D"])
    image = figure.axes[0].get_images()[0]
    reference = pd.DataFrame(centroids.T).corr().to_numpy()
    np.testing.assert_allclose(image.get_array(), reference, atol=1e-12)
    assert [t.get_text() for t in figure.axes[0].get_yticklabels()] == ["A", "B", "C", "D"]


def test_save_figure_writes_png_and_pdf_atomically(tmp_path, clustered):
    values, memberships, centroids = clustered
    figure = plot_cluster_profiles(values, TIMES, memberships, centroids)
    save_figure(figure, tmp_path / "p.png", tmp_path / "p.pdf")
    assert (tmp_path / "p.png").read_bytes()[:4] == b"\x89PNG"
    assert (tmp_path / "p.pdf").read_bytes()[:4] == b"%PDF"
    assert sorted(path.name for path in tmp_path.iterdir()) == ["p.pdf", "p.png"]


def test_save_figure_leaves_nothing_when_the_format_is_unknown(tmp_path):
    figure = plot_centroid_correlation(np.eye(3))
    with pytest.raises(ValueError):
        save_figure(figure, tmp_path / "p.notaformat")
    assert list(tmp_path.iterdir()) == []
