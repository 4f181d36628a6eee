"""One-line descriptions of configuration mistakes found by a JSON schema.

The workflow validates its config and datasets table against the schemas in
``workflow/schemas/`` (JSON Schema 2020-12, written as YAML). A schema checker reports a
violation with the whole schema and document attached; a user needs one sentence: which key,
what is wrong with its value, and what the key accepts (its ``description`` in the schema).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

__all__ = ["describe_schema_violation", "key_path"]


def key_path(path: Sequence[Any]) -> str:
    """``["genesets", "thresholds", 0]`` -> ``"genesets.thresholds[0]"``."""
    text = ""
    for part in path:
        text += f"[{part}]" if isinstance(part, int) else (f".{part}" if text else str(part))
    return text


def _resolve(node: Mapping[str, Any], root: Mapping[str, Any]) -> Mapping[str, Any]:
    """Follow a local ``$ref`` (``#/$defs/...``) to the schema it names."""
    reference = node.get("$ref")
    if not isinstance(reference, str) or not reference.startswith("#/"):
        return node
    target: Any = root
    for part in reference[2:].split("/"):
        target = target.get(part, {}) if isinstance(target, Mapping) else {}
    return target if isinstance(target, Mapping) else node


def _schema_of(path: Sequence[Any], root: Mapping[str, Any]) -> Mapping[str, Any] | None:
    """The part of ``root`` that describes the value at ``path`` (None if not found)."""
    node: Mapping[str, Any] = _resolve(root, root)
    for part in path:
        if isinstance(part, int):
            items = node.get("items")
            if not isinstance(items, Mapping):
                return None
            node = _resolve(items, root)
            continue
        properties = node.get("properties", {})
        if part in properties:
            node = _resolve(properties[part], root)
            continue
        extra = node.get("additionalProperties")
        if not isinstance(extra, Mapping):
            return None
        node = _resolve(extra, root)
    return node


def _description(node: Mapping[str, Any] | None) -> str:
    if not node:
        return ""
    text = " ".join(str(node.get("description", "")).split())
    if not text and "enum" in node:
        text = "one of " + ", ".join(repr(value) for value in node["enum"])
    return text


def describe_schema_violation(
    instance: Any, schema: Mapping[str, Any], *, name: str = "config"
) -> str | None:
    """Describe the most relevant way ``instance`` violates ``schema`` in one line.

    Parameters
    ----------
    instance : object
        The document checked (a config mapping, or one row of a table as a mapping).
    schema : mapping
        A JSON Schema (draft 2020-12) as loaded from YAML; local ``$ref`` are followed.
    name : str
        What the document is, for the message (``"config"``, ``"datasets table row 'x'"``).

    Returns
    -------
    str or None
        ``"<name> key <path>: <problem>; <what the key accepts>"``, or None if the instance
        is valid.
    """
    from jsonschema import Draft202012Validator
    from jsonschema.exceptions import best_match

    error = best_match(Draft202012Validator(schema).iter_errors(instance))
    if error is None:
        return None
    path = list(error.absolute_path)
    if error.validator == "additionalProperties":
        parent = _schema_of(path, schema) or {}
        known = sorted(parent.get("properties", {}))
        where = f" under {key_path(path)}" if path else ""
        return f"{name}: {error.message}{where}; check the spelling" + (
            f" (known keys: {', '.join(known)})" if known else ""
        )
    if error.validator == "required":
        return f"{name}: {error.message}" + (f" under {key_path(path)}" if path else "")
    accepts = _description(_schema_of(path, schema))
    if not accepts and path and isinstance(path[-1], int):  # an item: what its list takes
        accepts = _description(_schema_of(path[:-1], schema))
    where = f" key {key_path(path)}" if path else ""
    return f"{name}{where}: {error.message}" + (f"; allowed: {accepts}" if accepts else "")
