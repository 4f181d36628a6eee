"""One-line messages for configuration mistakes (gloam.schema), on the workflow's own schemas."""

from __future__ import annotations

import math

import pytest
import yaml

from gloam.planning import SCHEMA_DIR
from gloam.schema import describe_schema_violation, fill_defaults, key_path

SCHEMAS = SCHEMA_DIR
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


def numeric_entries(node, path=()):
    """Every (key path, schema) in ``node`` that accepts a number or an integer."""
    if isinstance(node, dict):
        kinds = node.get("type")
        kinds = [kinds] if isinstance(kinds, str) else list(kinds or [])
        if {"number", "integer"} & set(kinds):
            yield path, node
        for key, child in node.items():
            yield from numeric_entries(child, (*path, key))
    elif isinstance(node, list):
        for index, child in enumerate(node):
            yield from numeric_entries(child, (*path, index))


def test_every_numeric_setting_has_finite_bounds():
    """A value the code cannot use must be refused before any job: no number without a
    lower and an upper bound, and every bound finite."""
    entries = list(numeric_entries(CONFIG_SCHEMA))
    assert len(entries) > 20
    for path, node in entries:
        low = node.get("minimum", node.get("exclusiveMinimum"))
        high = node.get("maximum", node.get("exclusiveMaximum"))
        assert isinstance(low, int | float) and math.isfinite(low), path
        assert isinstance(high, int | float) and math.isfinite(high), path
        assert low < high, path


@pytest.mark.parametrize("value", [math.nan, math.inf, -math.inf])
def test_non_finite_numbers_are_refused_with_the_range(value):
    """YAML's .nan and .inf are floats, and no JSON Schema bound refuses NaN (IEEE 754: every
    comparison with NaN is false), so a number must be finite to count as one."""
    message = describe_schema_violation({"scan": {"tol": value}}, CONFIG_SCHEMA)
    assert message is not None
    assert "key scan.tol" in message and "a finite number in [0, 1]" in message


def test_defaults_are_filled_in_from_the_schema():
    """Every missing key gets its schema default (as Snakemake's validate does)."""
    config = {"scan": {"n_starts": 5}}
    assert fill_defaults(config, CONFIG_SCHEMA) is None
    scan = CONFIG_SCHEMA["$defs"]["scan"]["properties"]
    assert config["scan"]["n_starts"] == 5
    assert config["scan"]["max_clusters"] == scan["max_clusters"]["default"]
    assert config["preparation"]["fdr"] == 0.05
    # Filled with copies: changing one config never changes the schema's default.
    config["genesets"]["thresholds"].append(0.9)
    assert fill_defaults({}, CONFIG_SCHEMA) is None
    assert CONFIG_SCHEMA["properties"]["genesets"]["properties"]["thresholds"]["default"] == [
        0.5,
        0.7,
    ]
