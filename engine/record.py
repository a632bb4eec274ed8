"""``record.json`` as untrusted input: its schema, its fingerprint, and the checks.

A record is written by `engine.pack` next to every meeting pack and read back by
``fitladder rerun``. Records travel (mail, shared drives) and are edited by
hand, so a record is checked before anything in it is used:

1. against a JSON Schema (types, ranges, known keys; `jsonschema`), each
   problem named by its field with what to do;
2. against its own fingerprint: ``request_sha256`` is the SHA-256 of the
   request (spec, roles, load options, compared cells, data SHA-256) as the
   pack wrote it, so swapped roles or renamed inputs are caught;
3. for agreement between its parts (roles and spec, the two seeds).

Where the data file is looked for and how it is checked before being read is
the caller's business (the command line); this module holds no I/O.
"""
from __future__ import annotations

import dataclasses
import hashlib
import json
from typing import Any

from .errors import InputProblem
from .spec import SCHEMES, SchemeSpec, SweepSpec

__all__ = ["RECORD_FORMAT", "RECORD_MAX_BYTES", "RECORD_SCHEMA", "check_record",
           "request_fingerprint"]

RECORD_FORMAT = "fitladder-record/1"

#: Largest record.json read (a real one is a few KB).
RECORD_MAX_BYTES = 1024 * 1024

_FIX = ("Restore the record.json the pack was written with, or make a new pack with "
        "'fitladder run'.")

_NAME = {"type": "string", "minLength": 1, "maxLength": 1000}
_OPT_NAME = {"anyOf": [{"type": "null"}, _NAME]}
_COUNT = {"type": "integer", "minimum": 0}
_ORDER = {"type": "integer", "minimum": 0, "maximum": 30}
_PENALTY = {"type": "number", "minimum": 0, "maximum": 1e300}


def _scheme_schema() -> dict:
    props = {
        "kind": {"enum": list(SCHEMES)},
        "folds": {"type": "integer", "minimum": 2, "maximum": 100_000},
        "repeats": {"type": "integer", "minimum": 1, "maximum": 10_000},
        "gap": {"type": "integer", "minimum": 0, "maximum": 10**9},
        "holdout_fraction": {"type": "number", "exclusiveMinimum": 0, "exclusiveMaximum": 1},
        "order_column": _OPT_NAME, "group_column": _OPT_NAME, "split_column": _OPT_NAME,
        "rows_in_time_order": {"type": ["boolean", "null"]},
    }
    for f in dataclasses.fields(SchemeSpec):  # fields added later are known keys too
        props.setdefault(f.name, {})
    return {"type": "object", "properties": props, "additionalProperties": False,
            "required": ["kind"]}


def _spec_schema() -> dict:
    props: dict[str, Any] = {
        "target": _NAME,
        "inputs": {"type": "array", "items": _NAME, "minItems": 1, "maxItems": 100_000,
                   "uniqueItems": True},
        "max_order": _ORDER,
        "orders": {"anyOf": [{"type": "null"},
                             {"type": "array", "items": _ORDER, "minItems": 1,
                              "maxItems": 31}]},
        "interactions": {"type": "boolean"},
        # empty: zero plus a range fitted to the data (`engine.penalty_range`), found again
        # by a re-run from the same rows
        "penalties": {"type": "array", "items": _PENALTY, "minItems": 0, "maxItems": 1000},
        "scheme": _scheme_schema(),
        "seed": {"type": "integer", "minimum": 0, "maximum": 2**63 - 1},
        "learning_sizes": {"type": "array", "minItems": 1, "maxItems": 100,
                           "items": {"type": "number", "exclusiveMinimum": 0, "maximum": 1}},
        "lags": {"anyOf": [{"type": "null"}, {"type": "object"}]},
        "nested_inputs": {"anyOf": [{"type": "null"}, {"enum": ["lasso", "given"]}]},
        "extra_targets": {"type": "array", "items": _NAME, "maxItems": 1000},
        "families": {"type": "array", "items": _NAME, "minItems": 1, "maxItems": 10},
        "l1_ratios": {"type": "array", "maxItems": 100,
                      "items": {"type": "number", "minimum": 0, "maximum": 1}},
    }
    for f in dataclasses.fields(SweepSpec):  # fields added later are known keys too
        props.setdefault(f.name, {})
    return {"type": "object", "properties": props, "additionalProperties": False,
            "required": ["target", "inputs", "penalties", "scheme"]}


RECORD_SCHEMA: dict = {
    "$schema": "https://json-schema.org/draft/2020-12/schema",
    "title": "Fitladder record.json",
    "type": "object",
    "required": ["format", "spec", "data", "roles"],
    "additionalProperties": False,
    "properties": {
        "format": {"const": RECORD_FORMAT},
        "created_utc": {"type": "string", "maxLength": 64},
        "request_sha256": {"type": "string", "pattern": "^[0-9a-f]{64}$"},
        "spec": _spec_schema(),
        "seed": {"type": "integer", "minimum": 0, "maximum": 2**63 - 1},
        "data": {
            "type": "object", "additionalProperties": False, "required": ["sha256"],
            "properties": {
                "file": _OPT_NAME,
                "path": {"anyOf": [{"type": "null"},
                                   {"type": "string", "minLength": 1, "maxLength": 4096}]},
                "sha256": {"anyOf": [{"type": "null"},   # a URL read by a cluster
                                     {"type": "string", "pattern": "^[0-9a-f]{64}$"}]},
                "size_bytes": {"anyOf": [{"type": "null"}, _COUNT]},
                "rows_in": _COUNT, "rows_used": _COUNT, "rows_dropped": _COUNT,
            }},
        "load_options": {
            "type": "object", "additionalProperties": False,
            "properties": {"decimal": {"enum": [None, ".", ","]},
                           "stream": {"type": "boolean"},
                           "sample_rows": {"anyOf": [{"type": "null"}, _COUNT]},
                           "sheet": {"anyOf": [{"type": "null"}, _NAME,
                                               {"type": "integer", "minimum": 0,
                                                "maximum": 10_000}]}}},
        "roles": {
            "type": "object", "additionalProperties": False, "required": ["target", "inputs"],
            "properties": {"target": _NAME,
                           "inputs": {"type": "array", "items": _NAME, "minItems": 1,
                                      "maxItems": 100_000},
                           "order_column": _OPT_NAME, "group_column": _OPT_NAME,
                           "split_column": _OPT_NAME}},
        "compare_cells": {
            "type": "array", "maxItems": 50,
            "items": {"type": "array", "prefixItems": [_ORDER, _PENALTY],
                      "minItems": 2, "maxItems": 2}},
        "error_unit": {"enum": ["mse", "rmse"]},
        "versions": {"type": "object",
                     "additionalProperties": {"type": ["string", "null"], "maxLength": 200}},
    },
}

_WHAT = {
    "type": lambda e: f"must be {_type_words(e.validator_value)}",
    "enum": lambda e: "must be one of " + ", ".join(json.dumps(v) for v in e.validator_value),
    "const": lambda e: f"must be {json.dumps(e.validator_value)}",
    "minimum": lambda e: f"must be at least {e.validator_value}",
    "maximum": lambda e: f"must be at most {e.validator_value}",
    "exclusiveMinimum": lambda e: f"must be more than {e.validator_value}",
    "exclusiveMaximum": lambda e: f"must be less than {e.validator_value}",
    "minItems": lambda e: f"must list at least {e.validator_value} item(s)",
    "maxItems": lambda e: f"must list at most {e.validator_value} items",
    "minLength": lambda e: "must not be empty",
    "maxLength": lambda e: f"must be at most {e.validator_value} characters long",
    "pattern": lambda e: "must be 64 hexadecimal digits (a SHA-256)",
    "uniqueItems": lambda e: "must list each name once",
}


def _type_words(t: Any) -> str:
    words = {"integer": "a whole number", "number": "a number", "string": "text",
             "boolean": "true or false", "array": "a list", "object": "a JSON object",
             "null": "null"}
    if isinstance(t, list):
        return " or ".join(words.get(x, x) for x in t)
    return words.get(t, str(t))


def _field(path: Any) -> str:
    parts = []
    for p in path:
        if isinstance(p, int):
            parts.append(f"[{p}]")
        else:
            parts.append(("." if parts else "") + str(p))
    return "".join(parts) or "the record"


def _short(value: Any, limit: int = 40) -> str:
    try:
        text = json.dumps(value, ensure_ascii=False, allow_nan=True)
    except (TypeError, ValueError):
        text = repr(value)
    return text if len(text) <= limit else text[: limit - 1] + "…"


def _schema_problem(rec: Any, where: str) -> InputProblem | None:
    from jsonschema import Draft202012Validator

    validator = Draft202012Validator(RECORD_SCHEMA)
    errors = sorted(validator.iter_errors(rec), key=lambda e: (len(e.path), list(map(str, e.path))))
    if not errors:
        return None
    e = errors[0]
    if e.validator == "additionalProperties":
        known = sorted((e.schema.get("properties") or {}).keys())
        extra = sorted(set(e.instance) - set(known)) if isinstance(e.instance, dict) else []
        place = _field(e.path)
        return InputProblem(
            f"'{where}' is not a usable record: {place} holds the unknown key "
            f"{', '.join(repr(k) for k in extra[:5])} (known keys: {', '.join(known)}). "
            f"Remove it or correct its spelling. {_FIX}", code="bad_record",
            column=str(extra[0]) if extra else None)
    if e.validator == "required":
        missing = [k for k in e.validator_value if not isinstance(e.instance, dict)
                   or k not in e.instance]
        return InputProblem(
            f"'{where}' is not a usable record: {_field(e.path)} lacks "
            f"{', '.join(repr(k) for k in missing)}. {_FIX}", code="bad_record")
    if e.validator in ("anyOf", "oneOf"):
        # report the most telling branch: the one whose type matched, else the first
        sub = min(e.context or [e], key=lambda s: (s.validator == "type", len(s.path)))
        what = _WHAT.get(sub.validator, lambda _: "has a value that is not allowed")(sub)
    else:
        what = _WHAT.get(e.validator, lambda _: "has a value that is not allowed")(e)
    more = f" ({len(errors) - 1} more problem{'s' if len(errors) > 2 else ''} after it)" \
        if len(errors) > 1 else ""
    return InputProblem(
        f"'{where}' is not a usable record: field {_field(e.path)} {what}, but it is "
        f"{_short(e.instance)}{more}. Correct that field. {_FIX}", code="bad_record",
        column=_field(e.path))


def request_fingerprint(rec: dict) -> str:
    """SHA-256 of the request a record describes (canonical JSON of its parts).

    Parameters
    ----------
    rec : the record (JSON-ready dict) as `engine.pack.record_dict` makes it.

    Returns
    -------
    str
        64 hexadecimal digits; equal for records that ask for the same run.
    """
    part = {"spec": rec.get("spec"), "roles": rec.get("roles"),
            "load_options": rec.get("load_options"), "compare_cells": rec.get("compare_cells"),
            "seed": rec.get("seed"), "data_sha256": (rec.get("data") or {}).get("sha256")}
    text = json.dumps(part, sort_keys=True, separators=(",", ":"), ensure_ascii=True,
                      allow_nan=False)
    return hashlib.sha256(text.encode("ascii")).hexdigest()


def check_record(rec: Any, where: str = "record.json") -> SweepSpec:
    """Check a parsed record and return the request it holds.

    Parameters
    ----------
    rec : the parsed JSON of a record.
    where : how to name the record in messages (its path).

    Returns
    -------
    SweepSpec
        The validated request.

    Raises
    ------
    InputProblem
        ``code='bad_record'`` naming the field and what to do, or
        ``code='record_changed'`` when the request no longer matches the
        fingerprint the pack wrote.
    """
    if not isinstance(rec, dict) or rec.get("format") != RECORD_FORMAT:
        raise InputProblem(
            f"'{where}' is not a Fitladder record (its 'format' is not {RECORD_FORMAT}). "
            "Give the record.json written inside a pack folder.", code="bad_record")
    problem = _schema_problem(rec, where)
    if problem is not None:
        raise problem
    want = rec.get("request_sha256")
    if want is not None and request_fingerprint(rec) != want:
        raise InputProblem(
            f"The request in '{where}' was changed after the pack was written (its fingerprint "
            "request_sha256 no longer matches the spec, roles, options and data it names), so "
            "re-running it would not reproduce the pack. Restore the original record; to run "
            "a changed request, use 'fitladder run' with the options you want.",
            code="record_changed")
    spec_d, roles = rec["spec"], rec["roles"]
    scheme = spec_d["scheme"]
    pairs = [("target", roles["target"], spec_d["target"]),
             ("inputs", list(roles["inputs"]), list(spec_d["inputs"]))]
    for key in ("order_column", "group_column", "split_column"):
        pairs.append((key, roles.get(key), scheme.get(key)))
    for key, in_roles, in_spec in pairs:
        if in_roles != in_spec:
            raise InputProblem(
                f"'{where}' contradicts itself: roles.{key} is {_short(in_roles)} but "
                f"spec.{('scheme.' if key.endswith('column') else '')}{key} is "
                f"{_short(in_spec)}. {_FIX}", code="bad_record", column=key)
    if "seed" in rec and rec["seed"] != spec_d.get("seed", 0):
        raise InputProblem(
            f"'{where}' contradicts itself: seed is {rec['seed']} but spec.seed is "
            f"{spec_d.get('seed', 0)}. {_FIX}", code="bad_record", column="seed")
    try:
        spec = SweepSpec.from_dict(spec_d)
        spec.validate()
    except InputProblem as exc:
        raise InputProblem(f"The request in '{where}' cannot be run: {exc.message} {_FIX}",
                           code="bad_record") from None
    except (TypeError, KeyError, ValueError, AttributeError) as exc:
        raise InputProblem(f"The request in '{where}' cannot be read ({type(exc).__name__}: "
                           f"{_short(str(exc), 120)}). {_FIX}", code="bad_record") from None
    return spec
