"""One-line messages for configuration mistakes (gloam.schema), on the workflow's own schemas."""

from __future__ import annotations

from pathlib import Path

import pytest
import yaml

from gloam.schema import describe_schema_violation, key_path

SCHEMAS = Path(__file__).resolve().parents[1] / "workflow" / "schemas"
CONFIG_SCHEMA = yaml.safe_load((SCHEMAS / "config.schema.yaml").read_text(encoding="utf-8"))
DATASETS_SCHEMA = yaml.safe_load((SCHEMAS / "datasets.schema.yaml").read_text(encoding="utf-8"))


def test_key_paths_read_like_the_config():
    assert key_path(["genesets", "thresholds", 0]) == "genesets.thresholds[0]"
    assert key_path(["scan"]) == "scan"
    assert key_path([]) == ""


def test_a_valid_config_has_no_violation():
    assert describe_schema_violation({}, CONFIG_SCHEMA) is None
    assert describe_schema_violation({"scan": {"n_starts": 5}}, CONFIG_SCHEMA) is None


@pytest.mark.parametrize(
    ("config", "words"),
    [
        # A typo at the top level names the key and the keys that exist.
        ({"scann": {"n_starts": 3}}, ["'scann' was unexpected", "known keys:", "scan"]),
        # A typo inside a section names the section and its keys.
        ({"fuzzifier": {"mm": 2}}, ["'mm' was unexpected", "under fuzzifier", "n_clusters_check"]),
        # A value out of range names the key and what it accepts (its schema description).
        ({"scan": {"n_starts": 0}}, ["key scan.n_starts", "allowed:"]),
        ({"genesets": {"thresholds": [0.7, 0]}}, ["key genesets.thresholds[1]", "allowed:"]),
        ({"scan": {"init": "everywhere"}}, ["key scan.init", "'random', 'kmeans++'"]),
    ],
)
def test_violations_are_one_line_naming_the_key(config, words):
    message = describe_schema_violation(config, CONFIG_SCHEMA)
    assert message is not None and "\n" not in message
    assert message.startswith("config")
    for word in words:
        assert word in message, (word, message)
    assert len(message) < 600  # never the whole schema or document


def test_a_datasets_row_names_its_column():
    row = {"name": "x", "matrix": "m.tsv", "samples": "s.tsv", "value_type": "cnt"}
    message = describe_schema_violation(row, DATASETS_SCHEMA, name="datasets table 't.tsv'")
    assert message.startswith("datasets table 't.tsv' key value_type")
    assert "'counts', 'log'" in message
    missing = describe_schema_violation({"name": "x", "matrix": "m.tsv"}, DATASETS_SCHEMA)
    assert missing is not None and "'samples' is a required property" in missing
