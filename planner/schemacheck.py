"""Check parsed data against the shipped JSON Schemas; the worst failure becomes one clear Problem.

The failure jsonschema ranks most relevant is put in a person's words with the fix (an unknown key
with the nearest known one, a missing key with an example, a wrong type with what is expected).
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from typing import Any

from .problem import Problem, closest, kind_of

__all__ = ["check_schema", "load_schema", "flow"]


def check_schema(
    value: Any,
    schema_file: str,
    definition: str | None = None,
    delegate: Sequence[str] = (),
    dedupe: Sequence[str] = (),
) -> None:
    """Raise a `Problem` for the most relevant way `value` breaks the packaged JSON Schema.

    `definition` picks one of the schema's `$defs` (config.schema.json holds one per file).
    `delegate` names `$defs` the caller has checked itself (the vertex lists, in numpy): they
    accept anything here, so jsonschema never walks 100,000 vertices. `dedupe` names top-level
    lists whose items are checked once per distinct form (see `_form`) when that is sound.
    """
    from jsonschema.exceptions import best_match

    root, validator = _validator(schema_file, definition, tuple(delegate))
    value, places = _deduplicated(value, validator.schema, dedupe)
    error = best_match(validator.iter_errors(value))
    if error is not None:
        problem = _schema_problem(error, root)
        if len(problem.path) >= 2 and (problem.path[0], problem.path[1]) in places:
            problem.path = (problem.path[0], places[problem.path[:2]], *problem.path[2:])
        raise problem


def _form(value: Any) -> Any:
    """What a JSON Schema whose number limits are all 0 can tell apart: structure, keys, text,
    true/false/null verbatim, and of each number only its type and sign."""
    kind = type(value)
    if kind is dict:
        return ("d", tuple((k, _form(v)) for k, v in value.items()))
    if kind is list:
        return ("l", tuple(_form(v) for v in value))
    if kind is int or kind is float:
        if value != value:
            return ("nan",)
        return (kind.__name__, (value > 0) - (value < 0))
    return (kind.__name__, value)


_NUMERIC_LIMITS = ("minimum", "maximum", "exclusiveMinimum", "exclusiveMaximum")


def _form_decides(schema: Any) -> bool:
    """True when `_form` keeps everything `schema` can check: no number limit but 0, no integer
    type, no multiple-of, no numeric const/enum, no uniqueness among items."""
    stack = [schema]
    while stack:
        item = stack.pop()
        if isinstance(item, list):
            stack.extend(item)
        elif isinstance(item, dict):
            for key, sub in item.items():
                if key in ("description", "examples", "title"):
                    continue
                if key in _NUMERIC_LIMITS and sub != 0 or key in ("multipleOf", "uniqueItems"):
                    return False
                if key == "type" and "integer" in (sub if isinstance(sub, list) else [sub]):
                    return False
                if key in ("const", "enum"):
                    values = sub if key == "enum" else [sub]
                    if any(isinstance(v, int | float) and not isinstance(v, bool) for v in values):
                        return False
                stack.append(sub)
    return True


def _deduplicated(value: Any, schema: dict, keys: Sequence[str]
                  ) -> tuple[Any, dict[tuple[str, int], int]]:
    """`value` with the listed top-level lists cut to one item per form, and where each came from.

    Only done when the list's item schema passes `_form_decides`: then every item shares the
    verdict of the item of its form that is checked.
    """
    places: dict[tuple[str, int], int] = {}
    if not keys or not isinstance(value, dict):
        return value, places
    value = dict(value)
    for key in keys:
        items = value.get(key)
        item_schema = schema.get("properties", {}).get(key, {}).get("items")
        if not isinstance(items, list) or item_schema is None or not _form_decides(item_schema):
            continue
        seen: set = set()
        kept = []
        for i, item in enumerate(items):
            form = _form(item)
            if form not in seen:
                seen.add(form)
                places[(key, len(kept))] = i
                kept.append(item)
        value[key] = kept
    return value, places


_VALIDATORS: dict[tuple, tuple[dict, Any]] = {}


def load_schema(schema_file: str) -> dict:
    """The packaged schema `planner/schema/<schema_file>` as a dict."""
    from importlib import resources

    text = resources.files("planner").joinpath("schema", schema_file).read_text("utf-8")
    return json.loads(text)


def _validator(schema_file: str, definition: str | None, delegate: tuple[str, ...]
               ) -> tuple[dict, Any]:
    """A validator for the schema with its local `$ref`s inlined (lookups are slow)."""
    key = (schema_file, definition, delegate)
    if key not in _VALIDATORS:
        from jsonschema import Draft202012Validator

        root = load_schema(schema_file)
        root["$defs"] = {k: ({} if k in delegate else v) for k, v in root["$defs"].items()}
        top = root["$defs"][definition] if definition else root
        flat = _inline({k: v for k, v in top.items() if k != "$defs"}, root, 0)
        Draft202012Validator.check_schema(flat)
        _VALIDATORS[key] = (root, Draft202012Validator(flat))
    return _VALIDATORS[key]


def _inline(schema: Any, root: dict, depth: int) -> Any:
    if depth > 50:
        raise ValueError("schema $refs nest too deeply (a loop?)")
    if isinstance(schema, dict):
        merged = _deref(schema, root) if "$ref" in schema else schema
        return {k: _inline(v, root, depth + 1) for k, v in merged.items()}
    if isinstance(schema, list):
        return [_inline(v, root, depth + 1) for v in schema]
    return schema


def _deref(schema: Any, root: dict) -> dict:
    """Follow local `$ref`s (`#/$defs/name`), keeping a description given beside the `$ref`."""
    if not isinstance(schema, dict):
        return {}
    seen = 0
    merged = dict(schema)
    while "$ref" in merged and seen < 10:
        ref = merged.pop("$ref")
        target: Any = root
        for part in ref.split("#", 1)[-1].strip("/").split("/"):
            target = target.get(part, {}) if isinstance(target, dict) else {}
        merged = {**merged, **target}  # the definition's own words describe the value's shape
        seen += 1
    return merged


def flow(value: Any) -> str:
    """A value written the way a person types it in YAML flow style: `{x: [0, 3000]}`."""
    if isinstance(value, dict):
        return "{" + ", ".join(f"{k}: {flow(v)}" for k, v in value.items()) + "}"
    if isinstance(value, list | tuple):
        return "[" + ", ".join(flow(v) for v in value) + "]"
    if isinstance(value, bool):
        return "true" if value else "false"
    if value is None:
        return "null"
    return str(value)


def _example(schema: dict) -> str | None:
    examples = schema.get("examples")
    return flow(examples[0]) if examples else None


def _schema_problem(error: Any, root: dict) -> Problem:
    path = tuple(error.absolute_path)
    kind = error.validator
    inst = error.instance
    schema = _deref(error.schema, root)
    desc = schema.get("description", "")
    example = _example(schema)
    props = list(_deref(error.schema, root).get("properties", {}))

    if kind == "additionalProperties" and isinstance(inst, dict):
        extra = [k for k in inst if k not in props]
        key = extra[0] if extra else "?"
        near = closest(key, props)
        hint = (f"did you mean {near!r}? " if near else "") + "allowed here: " + ", ".join(props)
        return Problem((*path, key), f"unknown key {key!r}", hint, at_key=True)
    if kind == "required" and isinstance(inst, dict):
        missing = [k for k in error.validator_value if k not in inst]
        key = missing[0] if missing else "?"
        sub = _deref(schema.get("properties", {}).get(key, {}), root)
        ex = _example(sub)
        hint = f"add `{key}: {ex}`" if ex else f"add `{key}`"
        if sub.get("description"):
            hint += f" ({sub['description']})"
        return Problem((*path, key), f"the required key {key!r} is missing", hint)
    if kind == "oneOf" and isinstance(inst, dict):
        keys = [b["required"][0] for b in error.validator_value
                if isinstance(b, dict) and len(b.get("required", ())) == 1]
        present = [k for k in keys if k in inst]
        if not present:
            return Problem(path, f"needs one of {', '.join(keys)}",
                           f"for example {example}" if example else None)
        return Problem(path, f"gives both {' and '.join(present)}; give exactly one of "
                       f"{', '.join(keys)}", "split it into separate entries")
    if kind == "enum":
        options = [str(o) for o in error.validator_value]
        near = closest(str(inst), options) if isinstance(inst, str) else None
        hint = f"did you mean {near!r}?" if near else f"use one of: {', '.join(options)}"
        return Problem(path, f"{kind_of(inst)} is not one of: {', '.join(options)}", hint)
    bounds = {
        "minimum": "at least",
        "exclusiveMinimum": "more than",
        "maximum": "at most",
        "exclusiveMaximum": "less than",
    }
    if kind in bounds:
        limit = error.validator_value
        return Problem(path, f"must be {bounds[kind]} {limit}, got {inst!r}",
                       f"use a number {bounds[kind]} {limit}")
    if kind == "uniqueItems":
        return Problem(path, "the list repeats an entry", "list each entry once")
    simple = kind == "type" and schema.get("type") in ("number", "integer", "boolean", "string")
    what = _TYPE_WORDS[schema["type"]] if simple else desc or _TYPE_WORDS.get(
        str(schema.get("type")), "another value")
    hint = None
    if schema.get("type") in ("number", "integer") and not isinstance(inst, int | float):
        hint = "write a plain number like 12.5, without quotes or a unit"
    elif simple and schema["type"] == "string" and isinstance(inst, int | float | bool):
        hint = f'put it in quotes: "{flow(inst)}"'
    elif simple and desc:
        hint = desc
    elif kind == "const":
        hint = f"write {flow(error.validator_value)}"
    elif example:
        hint = f"for example {example}"
    if kind in ("type", "const", "minItems", "maxItems", "minLength", "maxLength", "pattern"):
        return Problem(path, f"expected {what}, got {kind_of(inst)}", hint)
    return Problem(path, f"{error.message}", hint)


_TYPE_WORDS = {
    "number": "a number",
    "integer": "a whole number",
    "string": "text",
    "boolean": "true or false",
    "array": "a list",
    "object": "a mapping",
}
