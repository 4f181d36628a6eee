"""The invented demo generator: deterministic, documented shapes, count-like noise."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from gloam.cli import main
from gloam.demo import (
    DEMO_TIMES_HOURS,
    PLANTED_RESPONSES,
    response_profiles,
    simulate_demo,
    write_demo,
)
from gloam.errors import GloamError
from gloam.io import read_matrix, read_sample_sheet


@pytest.fixture(scope="module")
def demo():
    return simulate_demo(seed=5, n_genes=1500)


def test_same_seed_gives_identical_data_and_another_seed_does_not():
    first = simulate_demo(seed=3, n_genes=200)
    second = simulate_demo(seed=3, n_genes=200)
    pd.testing.assert_frame_equal(first.counts, second.counts)
    pd.testing.assert_frame_equal(first.truth, second.truth)
    other = simulate_demo(seed=4, n_genes=200)
    assert not np.array_equal(first.counts.to_numpy(), other.counts.to_numpy())


def test_layout_matches_the_scenario(demo):
    assert demo.counts.shape == (1500, len(DEMO_TIMES_HOURS) * 3)
    assert list(demo.samples["sample"]) == list(demo.counts.columns)
    assert sorted(demo.samples["time"].unique()) == list(DEMO_TIMES_HOURS)
    assert (demo.samples.groupby("time")["replicate"].nunique() == 3).all()
    # Unevenly spaced on purpose.
    assert len(set(np.diff(DEMO_TIMES_HOURS))) > 1
    assert list(demo.truth["gene"]) == list(demo.counts.index)
    counts = demo.counts.to_numpy()
    assert counts.dtype.kind == "i" and (counts >= 0).all()


def test_response_shares_follow_the_settings(demo):
    shares = demo.truth["response"].value_counts()
    for name in PLANTED_RESPONSES:
        assert shares[name] == 150
    assert shares["flat"] == 450
    assert shares["unstructured"] == 1500 - 750 - 450


def test_response_profiles_peak_where_the_docstring_says():
    times = np.array(DEMO_TIMES_HOURS)
    profiles = dict(zip(PLANTED_RESPONSES, response_profiles(times), strict=True))
    np.testing.assert_allclose(np.abs(response_profiles(times)).max(axis=1), 1.0)
    np.testing.assert_allclose(response_profiles(times)[:, 0], 0.0, atol=1e-12)
    assert times[np.argmax(profiles["early_transient"])] == 1.0
    assert times[np.argmax(profiles["mid_transient"])] == 6.0
    assert profiles["early_transient"][times == 6.0][0] < 0.1
    assert profiles["late_sustained"][times >= 24].min() > 0.95
    assert profiles["late_sustained"][times <= 6].max() < 0.1
    assert profiles["repressed"][times >= 4].max() < -0.9
    assert times[np.argmin(profiles["oscillating"])] == 12.0
    np.testing.assert_allclose(profiles["oscillating"][times >= 24], 0.0, atol=1e-12)


def test_planted_genes_follow_their_response_in_normalised_data(demo):
    """Replicate means of log2 CPM correlate with the planted shape (scipy.stats.pearsonr as
    the reference correlation)."""
    cpm = demo.counts / demo.counts.sum(axis=0) * 1e6
    log_cpm = np.log2(cpm + 1).T.groupby(demo.samples["time"].to_numpy()).mean().T
    shapes = dict(zip(PLANTED_RESPONSES, response_profiles(log_cpm.columns), strict=True))
    for name in PLANTED_RESPONSES:
        genes = demo.truth.loc[demo.truth["response"] == name, "gene"]
        r = [stats.pearsonr(log_cpm.loc[g], shapes[name]).statistic for g in genes]
        assert np.median(r) > 0.9, name


def test_flat_genes_show_negative_binomial_overdispersion(demo):
    """Negative-binomial counts: variance = mu + phi * mu^2 (Robinson & Smyth 2007).  After
    dividing out size factors, the moment estimate of phi for well-expressed flat genes lands
    near the generator's dispersion (0.03 + 1/mu, times a log-normal factor with mean about
    1.05); Poisson counts would give phi near 0."""
    from pydeseq2.preprocessing import deseq2_norm

    _normed, size_factors = deseq2_norm(demo.counts.T.to_numpy())
    flat = demo.truth[(demo.truth["response"] == "flat") & (demo.truth["base_mean"] > 300)]
    counts = demo.counts.loc[flat["gene"]].to_numpy() / size_factors[None, :]
    mean = counts.mean(axis=1)
    variance = counts.var(axis=1, ddof=1)
    phi = (variance - mean) / mean**2
    expected = np.median(0.03 + 1.0 / flat["base_mean"].to_numpy()) * np.exp(0.3**2 / 2)
    assert len(phi) > 20
    assert 0.6 * expected < np.median(phi) < 1.5 * expected


def test_library_sizes_vary_between_samples(demo):
    totals = demo.counts.sum(axis=0)
    assert totals.max() / totals.min() > 1.5


@pytest.mark.parametrize(
    "settings",
    [
        {"n_genes": 10},
        {"n_replicates": 0},
        {"planted_fraction": 0.0},
        {"planted_fraction": 0.8, "flat_fraction": 0.5},
    ],
)
def test_bad_settings_raise_a_gloam_error(settings):
    with pytest.raises(GloamError):
        simulate_demo(**settings)


def test_written_files_read_back_through_the_project_readers(tmp_path):
    paths = write_demo(tmp_path, seed=2, n_genes=120)
    assert [path.name for path in paths] == ["counts.tsv", "samples.tsv", "truth.tsv"]
    expected = simulate_demo(seed=2, n_genes=120)
    matrix = read_matrix(paths[0])
    np.testing.assert_array_equal(matrix.to_numpy(), expected.counts.to_numpy())
    sheet = read_sample_sheet(paths[1])
    assert list(sheet["sample"]) == list(matrix.columns)
    np.testing.assert_array_equal(sheet["time"], expected.samples["time"])


def test_cli_demo_writes_the_three_files(tmp_path, capsys):
    assert main(["demo", "--out-dir", str(tmp_path / "d"), "--n-genes", "80"]) == 0
    for name in ("counts.tsv", "samples.tsv", "truth.tsv"):
        assert (tmp_path / "d" / name).stat().st_size > 0
    assert "demo written" in capsys.readouterr().out


def test_cli_demo_bad_size_is_one_line_error(tmp_path, capsys):
    with pytest.raises(SystemExit) as exit_info:
        main(["demo", "--out-dir", str(tmp_path), "--n-genes", "3"])
    assert exit_info.value.code == 2
    error = capsys.readouterr().err
    assert error.startswith("gloam: error:") and "n_genes" in error
    assert not list(tmp_path.iterdir())


def test_mutant_line_switches_the_documented_shares_and_nothing_else():
    from gloam.demo import MUTANT_CONDITION, MUTANT_SWITCHES

    data = simulate_demo(seed=5, n_genes=1500, with_mutant=True)
    assert set(data.samples["condition"]) == {"cold", MUTANT_CONDITION}
    assert data.counts.shape[1] == 2 * len(DEMO_TIMES_HOURS) * 3
    truth = data.truth
    for source, target, share in MUTANT_SWITCHES:
        members = truth["response"] == source
        moved = members & (truth[f"response_{MUTANT_CONDITION}"] == target)
        assert moved.sum() == round(share * members.sum())
    assert truth["switched"].sum() == sum(
        round(share * (truth["response"] == source).sum()) for source, _, share in MUTANT_SWITCHES
    )
    # Unswitched genes keep their label; flat genes in the wild type stay flat.
    same = ~truth["switched"]
    assert (truth.loc[same, "response"] == truth.loc[same, f"response_{MUTANT_CONDITION}"]).all()
