"""JSON report: a :class:`~boardheat.checks.CheckResult` as a versioned, documented JSON file.

Input: a check result (SI, kelvin). Output: ``report.json`` whose keys state their units
(``tj_peak_c`` °C, ``t_peak_s`` s, ``margin_k`` K, ``power_peak_w`` W, ``energy_j`` J), laid
out by :data:`REPORT_JSON_SCHEMA` (JSON Schema, draft 2020-12). Floats are written with
Python's shortest round-trip representation, so reading the file back gives every number
bit for bit; a value that is not finite is written as ``null``. :func:`read_report_json`
checks the schema name and version and validates the structure.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from boardheat.checks import CheckResult
from boardheat.report.files import ReportError, write_text
from boardheat.report.summary import CAUTIONS, to_celsius, verdict_line

SCHEMA_NAME = "boardheat-report"
SCHEMA_VERSION = 1

_NUM: dict[str, Any] = {"type": ["number", "null"]}
_STATUS: dict[str, Any] = {"enum": ["PASS", "NEAR", "FAIL"]}
_STR: dict[str, Any] = {"type": "string"}


def _obj(props: dict[str, Any], description: str) -> dict[str, Any]:
    return {
        "type": "object",
        "description": description,
        "properties": props,
        "required": list(props),
        "additionalProperties": False,
    }


_PART = _obj(
    {
        "refdes": _STR,
        "package": {"type": ["string", "null"]},
        "junction_model": _STR,
        "tj_max_c": _NUM,
        "tj_peak_c": _NUM,
        "t_peak_s": _NUM,
        "margin_k": _NUM,
        "time_above_s": _NUM,
        "board_peak_c": _NUM,
        "tj_steady_c": _NUM,
        "power_peak_w": _NUM,
        "energy_j": _NUM,
        "status": _STATUS,
    },
    "One part: junction limit and peak (°C), time of peak and time above the limit (s), "
    "margin = limit - peak (K), hottest footprint temperature (°C), steady-state junction "
    "temperature at the final power (°C, null if not computed), peak power (W), energy (J).",
)

_LAMINATE = _obj(
    {"peak_c": _NUM, "limit_c": _NUM, "margin_k": _NUM, "time_s": _NUM, "status": _STATUS},
    "Hottest board point against the laminate's maximum operating temperature.",
)

_SANITY = _obj(
    {
        "name": _STR,
        "value": _NUM,
        "reference": _NUM,
        "tolerance": _NUM,
        "unit": _STR,
        "passed": {"type": "boolean"},
        "detail": _STR,
    },
    "A lumped-model sanity check: value against reference in SI ``unit`` (temperature "
    "values are differences, K); tolerance is relative (0 = informational).",
)

REPORT_JSON_SCHEMA: dict[str, Any] = {
    "$schema": "https://json-schema.org/draft/2020-12/schema",
    "$id": "https://boardheat.invalid/schemas/boardheat-report-1.json",
    "title": "boardheat check report",
    "description": "Junction temperatures of every part of one board (variant) with verdicts. "
    "Units are stated in the key names: _c °C, _k kelvin difference, _s seconds, _w watts, "
    "_j joules. A number that is not finite is written as null.",
    **_obj(
        {
            "schema": {"const": SCHEMA_NAME},
            "schema_version": {"const": SCHEMA_VERSION},
            "board": _STR,
            "variant": _STR,
            "source": _STR,
            "analysis": {"enum": ["transient", "steady"]},
            "ambient_c": _NUM,
            "duration_s": _NUM,
            "near_band_k": _NUM,
            "verdict": _STATUS,
            "verdict_text": _STR,
            "counts": _obj(
                {
                    "parts": {"type": "integer"},
                    "pass": {"type": "integer"},
                    "near": {"type": "integer"},
                    "fail": {"type": "integer"},
                },
                "Number of parts in total and by status.",
            ),  # fmt: skip
            "parts": {"type": "array", "items": _PART},
            "laminate": _LAMINATE,
            "hottest_instant": {
                "type": ["object", "null"],
                "description": "Time of the board map and the part it belongs to.",
                "properties": {"time_s": _NUM, "refdes": _STR},
                "required": ["time_s", "refdes"],
                "additionalProperties": False,
            },
            "sanity_checks": {"type": "array", "items": _SANITY},
            "warnings": {"type": "array", "items": _STR},
            "stats": {
                "type": "object",
                "description": "Run statistics (counts, solver name, seconds).",
                "additionalProperties": {"type": ["number", "string", "null"]},
            },
            "cautions": {"type": "array", "items": _STR},
        },
        "The whole report.",
    ),
}


def _num(x: float | None) -> float | None:
    """Return ``x`` as a plain float, or None if it is None or not finite."""
    if x is None:
        return None
    value = float(x)
    return value if math.isfinite(value) else None


def _c(kelvin: float | None) -> float | None:
    return None if kelvin is None else _num(to_celsius(kelvin))


def _stat(x: float | int | str) -> float | int | str | None:
    if isinstance(x, str):
        return x
    if isinstance(x, bool):
        return int(x)
    if isinstance(x, int):
        return x
    if hasattr(x, "dtype") and x.dtype.kind in "iu":  # numpy integer
        return int(x)
    return _num(x)


def report_dict(result: CheckResult) -> dict[str, Any]:
    """Return the JSON document of ``result`` as plain Python data (see the schema)."""
    parts = [
        {
            "refdes": p.refdes,
            "package": p.package,
            "junction_model": p.junction_model,
            "tj_max_c": _c(p.tj_max),
            "tj_peak_c": _c(p.tj_peak),
            "t_peak_s": _num(p.t_peak),
            "margin_k": _num(p.margin),
            "time_above_s": _num(p.time_above),
            "board_peak_c": _c(p.board_peak),
            "tj_steady_c": _c(p.tj_steady),
            "power_peak_w": _num(p.power_peak),
            "energy_j": _num(p.energy),
            "status": p.status,
        }
        for p in result.parts
    ]
    lam = result.laminate
    hot = result.hot
    return {
        "schema": SCHEMA_NAME,
        "schema_version": SCHEMA_VERSION,
        "board": result.board_name,
        "variant": result.variant,
        "source": result.source,
        "analysis": "steady" if result.steady else "transient",
        "ambient_c": _c(result.ambient),
        "duration_s": _num(result.duration),
        "near_band_k": _num(result.margin),
        "verdict": result.verdict,
        "verdict_text": verdict_line(result),
        "counts": {
            "parts": len(result.parts),
            "pass": sum(p.status == "PASS" for p in result.parts),
            "near": sum(p.status == "NEAR" for p in result.parts),
            "fail": sum(p.status == "FAIL" for p in result.parts),
        },
        "parts": parts,
        "laminate": {
            "peak_c": _c(lam.peak),
            "limit_c": _c(lam.limit),
            "margin_k": _num(lam.limit - lam.peak),
            "time_s": _num(lam.time),
            "status": lam.status,
        },
        "hottest_instant": None
        if hot is None
        else {"time_s": _num(hot.time), "refdes": hot.refdes},
        "sanity_checks": [
            {
                "name": c.name,
                "value": _num(c.value),
                "reference": _num(c.reference),
                "tolerance": _num(c.tolerance),
                "unit": c.unit,
                "passed": bool(c.passed),
                "detail": c.detail,
            }
            for c in result.sanity
        ],
        "warnings": list(result.warnings),
        "stats": {str(k): _stat(v) for k, v in result.stats.items()},
        "cautions": list(CAUTIONS),
    }


def dumps(document: Mapping[str, Any]) -> str:
    """Return ``document`` as indented JSON text ending in a newline (no NaN, no Infinity)."""
    return json.dumps(document, indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def write_report_json(result: CheckResult, path: Path) -> Path:
    """Write ``report.json`` of ``result`` to ``path`` atomically and return ``path``."""
    return write_text(path, dumps(report_dict(result)))


def read_report_json(path: Path) -> dict[str, Any]:
    """Read a report written by :func:`write_report_json` and check its schema and version.

    Raises
    ------
    ReportError
        If the file cannot be read, is not JSON, is another schema or version, or does not
        follow :data:`REPORT_JSON_SCHEMA`; the message names the file and the JSON path.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as err:
        raise ReportError(f"{path}: could not read the report ({err})") from err
    try:
        document = json.loads(text)
    except json.JSONDecodeError as err:
        raise ReportError(
            f"{path}: found invalid JSON (line {err.lineno}, column {err.colno}: {err.msg}), "
            "expected a boardheat report"
        ) from err
    if not isinstance(document, dict):
        raise ReportError(f"{path}: found {_kind(document)}, expected a JSON object")
    name = document.get("schema")
    if name != SCHEMA_NAME:
        raise ReportError(f"{path}: schema: found {name!r}, expected {SCHEMA_NAME!r}")
    version = document.get("schema_version")
    if isinstance(version, bool) or version != SCHEMA_VERSION:
        raise ReportError(
            f"{path}: schema_version: found {version!r}, expected {SCHEMA_VERSION} "
            "(this version of boardheat reads only that one)"
        )
    problem = validate(document, REPORT_JSON_SCHEMA)
    if problem:
        raise ReportError(f"{path}: {problem}")
    return document


# --------------------------------------------------------------------------- validation
_TYPES: dict[str, tuple[type, ...]] = {
    "object": (dict,),
    "array": (list,),
    "string": (str,),
    "number": (int, float),
    "integer": (int,),
    "boolean": (bool,),
    "null": (type(None),),
}


def _kind(x: object) -> str:
    """Return the JSON type name of ``x`` for messages."""
    if isinstance(x, bool):
        return "boolean"
    for name in ("object", "array", "string", "integer", "number", "null"):
        if isinstance(x, _TYPES[name]):
            return name
    return type(x).__name__


def _is(x: object, type_name: str) -> bool:
    if type_name in ("number", "integer") and isinstance(x, bool):
        return False
    return isinstance(x, _TYPES[type_name])


def validate(x: Any, schema: Mapping[str, Any], where: str = "$") -> str | None:
    """Return the first way ``x`` breaks ``schema``, or None if it follows it.

    Supports the JSON Schema keywords used by :data:`REPORT_JSON_SCHEMA`: type, const, enum,
    properties, required, additionalProperties and items.

    >>> validate({"a": [1, "x"]}, {"properties": {"a": {"items": {"type": "number"}}}})
    "$.a[1]: found string 'x', expected number"
    """
    if "type" in schema:
        allowed = schema["type"] if isinstance(schema["type"], list) else [schema["type"]]
        if not any(_is(x, t) for t in allowed):
            return f"{where}: found {_kind(x)} {x!r:.40}, expected {' or '.join(allowed)}"
    if "const" in schema and (x != schema["const"] or type(x) is not type(schema["const"])):
        return f"{where}: found {x!r:.40}, expected {schema['const']!r}"
    if "enum" in schema and x not in schema["enum"]:
        return f"{where}: found {x!r:.40}, expected one of {', '.join(map(repr, schema['enum']))}"
    if isinstance(x, dict):
        props = schema.get("properties", {})
        for key in schema.get("required", []):
            if key not in x:
                return f"{where}: found no key {key!r}, expected the keys {', '.join(props)}"
        extra = schema.get("additionalProperties", True)
        for key, value in x.items():
            if key in props:
                problem = validate(value, props[key], f"{where}.{key}")
            elif extra is False:
                return f"{where}.{key}: found an unknown key, expected one of {', '.join(props)}"
            elif isinstance(extra, Mapping):
                problem = validate(value, extra, f"{where}.{key}")
            else:
                problem = None
            if problem:
                return problem
    if isinstance(x, list) and "items" in schema:
        for i, item in enumerate(x):
            problem = validate(item, schema["items"], f"{where}[{i}]")
            if problem:
                return problem
    return None
