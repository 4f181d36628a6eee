"""The preparation's condition x time interaction test (several conditions with replicates).

Sources: Smyth (2004), Stat Appl Genet Mol Biol 3:3 (moderated F); Benjamini & Hochberg (1995),
JRSS B 57:289 (on data with no interaction, the FDR-significant share stays at or below the
level); Gelman & Stern (2006), Am Stat 60:328 (a difference of responses is tested directly,
not as "significant in one condition only").
"""

from __future__ import annotations

import warnings

import numpy as np

from gloam.errors import GloamWarning
from gloam.prepare import INTERACTION_COLUMNS, PrepareSettings, prepare_expression
from gloam.simulate import simulate_switching


def _prepare(experiment):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", GloamWarning)
        return prepare_expression(
            experiment.matrix.astype(float),
            experiment.samples,
            PrepareSettings(value_type=experiment.value_type),
        )


def test_genes_that_switch_response_are_found_with_their_effect_sizes():
    experiment = simulate_switching(n_genes=1200, seed=3)
    prepared = _prepare(experiment)
    report = prepared.gene_report.set_index("gene")
    for column in INTERACTION_COLUMNS:
        assert column in report.columns
    for condition in ("wt", "mut"):
        for prefix in ("mean_log2_", "log2_range_", "peak_time_"):
            assert f"{prefix}{condition}" in report.columns
    changed = experiment.truth.set_index("gene").loc[report.index, "changed"].astype(bool)
    called = report["interaction_fdr"] <= 0.05
    precision = (called & changed).sum() / called.sum()
    recall = (called & changed).sum() / changed.sum()
    assert precision >= 0.9 and recall >= 0.8
    assert (report.loc[called, "interaction_effect_log2"] > 0).all()
    assert any("interaction" in note for note in prepared.selection_notes)


def test_no_interaction_gives_few_discoveries():
    for seed in (1, 2):
        experiment = simulate_switching(n_genes=1200, null=True, seed=seed)
        report = _prepare(experiment).gene_report
        tested = report["interaction_fdr"].notna()
        assert tested.sum() > 500
        assert (report.loc[tested, "interaction_fdr"] <= 0.05).mean() <= 0.05


def test_one_condition_has_no_interaction_columns():
    experiment = simulate_switching(n_genes=600, seed=4)
    one = experiment.samples[experiment.samples["condition"] == "wt"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", GloamWarning)
        prepared = prepare_expression(
            experiment.matrix[one["sample"]].astype(float), one, PrepareSettings()
        )
    assert not set(INTERACTION_COLUMNS) & set(prepared.gene_report.columns)
    assert np.isfinite(prepared.gene_report["response_p_value"].dropna()).all()
