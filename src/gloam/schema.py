"""One-line descriptions of configuration mistakes found by a JSON schema.

The workflow validates its config and datasets table against the schemas in
``gloam/workflow/schemas/`` (JSON Schema 2020-12, written as YAML). A schema checker reports a
violation with the whole schema and document attached; a user needs one sentence: which key,
what is wrong with its value, and what the key accepts (its ``description`` in the schema and
the range of numbers the code can use).

A JSON Schema ``number`` admits NaN and infinities when the document comes from YAML
(``.nan``, ``.inf``), and no bound can refuse NaN (every comparison with it is false). Here a
``number`` is a finite one, so ``scan.tol: .nan`` is refused like any other bad value.

It also holds the checks a schema cannot express (:func:`check_thresholds`). Planning imports
this module on the controlling machine, so it needs neither NumPy nor pandas.
"""

from __future__ import annotations

import copy
import math
import numbers
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from gloam.errors import GloamError

__all__ = [
    "describe_schema_violation",
    "key_path",
    "fill_defaults",
    "validator_class",
    "check_thresholds",
]


def key_path(path: Sequence[Any]) -> str:
    """``["genesets", "thresholds", 0]`` -> ``"genesets.thresholds[0]"``."""
    text = ""
    for part in path:
        text += f"[{part}]" if isinstance(part, int) else (f".{part}" if text else str(part))
    return text


def _is_finite_number(checker: Any, instance: Any) -> bool:
    number = isinstance(instance, (int, float)) and not isinstance(instance, bool)
    return number and (isinstance(instance, int) or math.isfinite(instance))


def validator_class(*, defaults: bool = False) -> Any:
    """The Draft 2020-12 validator class in which a ``number`` is finite.

    Parameters
    ----------
    defaults : bool
        Also fill in every missing property that has a ``default`` (a copy of it) while
        validating, as Snakemake's ``validate`` does; the instance is changed in place.
    """
    from jsonschema import Draft202012Validator, validators

    base = Draft202012Validator
    checker = base.TYPE_CHECKER.redefine("number", _is_finite_number)
    keywords = dict(base.VALIDATORS)
    if defaults:
        check_properties = base.VALIDATORS["properties"]

        def properties_with_defaults(validator, properties, instance, schema):
            if isinstance(instance, dict):
                for name, subschema in properties.items():
                    if "default" in subschema:
                        instance.setdefault(name, copy.deepcopy(subschema["default"]))
            yield from check_properties(validator, properties, instance, schema)

        keywords["properties"] = properties_with_defaults
    return validators.extend(base, keywords, type_checker=checker)


def fill_defaults(instance: Any, schema: Mapping[str, Any]) -> str | None:
    """Fill in the defaults of ``schema`` in ``instance`` (in place) and validate it.

    Returns
    -------
    str or None
        None when ``instance`` is valid, else the first violation's message (use
        :func:`describe_schema_violation` for the one a user reads).
    """
    errors = list(validator_class(defaults=True)(schema).iter_errors(instance))
    return errors[0].message if errors else None


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


def _range(node: Mapping[str, Any]) -> str:
    """``"a finite number in (0, 1]"`` for a numeric schema, ``""`` for any other."""
    kinds = node.get("type")
    kinds = [kinds] if isinstance(kinds, str) else list(kinds or [])
    if "number" in kinds:
        what = "a finite number"
    elif "integer" in kinds:
        what = "a whole number"
    else:
        return ""
    low = node.get("exclusiveMinimum", node.get("minimum"))
    high = node.get("exclusiveMaximum", node.get("maximum"))
    if low is None and high is None:
        return what
    opening = "(" if "exclusiveMinimum" in node else "["
    closing = ")" if "exclusiveMaximum" in node else "]"
    low_text = "-inf" if low is None else f"{low:g}" if isinstance(low, float) else str(low)
    high_text = "inf" if high is None else f"{high:g}" if isinstance(high, float) else str(high)
    text = f"{what} in {opening}{low_text}, {high_text}{closing}"
    return text + (" or null" if "null" in kinds else "")


def _description(node: Mapping[str, Any] | None) -> str:
    if not node:
        return ""
    text = " ".join(str(node.get("description", "")).split())
    if not text and "enum" in node:
        text = "one of " + ", ".join(repr(value) for value in node["enum"])
    ranges = [_range(node)] + [_range(option) for option in node.get("oneOf", [])]
    ranges = [part for part in ranges if part]
    if ranges:
        text = f"{text} ({'; or '.join(ranges)})" if text else "; or ".join(ranges)
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
    from jsonschema.exceptions import best_match

    error = best_match(validator_class()(schema).iter_errors(instance))
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


def check_thresholds(thresholds: Iterable[float]) -> tuple[float, ...]:
    """Validate core-membership thresholds.

    Parameters
    ----------
    thresholds : iterable of float
        Each in (0, 1]; at least one; no repeats, also not within 6 significant digits
        (the precision of the labels in file names).

    Returns
    -------
    tuple of float
        The thresholds in the order given.

    Raises
    ------
    GloamError
        If there are none, one is not a number in (0, 1], or one repeats (to 6 significant
        digits).
    """
    if isinstance(thresholds, str | bytes):
        raise GloamError(f"core thresholds must be numbers in (0, 1]; got {thresholds!r}")
    values = []
    for value in thresholds:
        if isinstance(value, bool) or not isinstance(value, numbers.Real):
            raise GloamError(f"core threshold {value!r} is not a number; use values in (0, 1]")
        value = float(value)
        if not (math.isfinite(value) and 0 < value <= 1):
            raise GloamError(
                f"core threshold {value:g} is outside (0, 1]; a core gene needs a membership of "
                "at least the threshold, so use e.g. 0.5 or 0.7"
            )
        if value in values:
            raise GloamError(f"core threshold {value:g} is given twice; list each once")
        # File names and summary columns carry the threshold as {value:g} (6 significant
        # digits): two thresholds with one label would write to the same files.
        twin = next((other for other in values if f"{other:g}" == f"{value:g}"), None)
        if twin is not None:
            raise GloamError(
                f"core thresholds {twin!r} and {value!r} both appear as {value:g} in file names; "
                "give thresholds that differ within 6 significant digits"
            )
        values.append(value)
    if not values:
        raise GloamError("no core thresholds given; give at least one, e.g. 0.7")
    return tuple(values)
