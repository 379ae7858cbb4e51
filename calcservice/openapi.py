"""The OpenAPI 3.1 document, generated from the registry (openapi.yaml in the repository is its dump)."""

from __future__ import annotations

from functools import lru_cache
from itertools import combinations

import yaml

from . import __version__
from .registry import Calculation, Input, calculations

NUMBER = {"type": "number"}


def _quantity_schema(spec: Input) -> dict:
    bounds = spec.domain.as_dict()
    value = {"type": "number", **bounds}
    if spec.time:
        value = {"oneOf": [{"type": "number"}, {"type": "string", "description": "ISO 8601 time (UTC)"}]}
    unit = {"type": "string", "description": f"astropy unit string; default {spec.unit or 'dimensionless'}"}
    forms = [
        value,
        {"type": "object", "additionalProperties": False, "required": ["value"],
         "properties": {"value": value, "sigma": {"type": "number", "minimum": 0}, "unit": unit}},
        {"type": "object", "additionalProperties": False, "required": ["value", "sigma_minus", "sigma_plus"],
         "properties": {"value": value, "sigma_minus": {"type": "number", "minimum": 0},
                        "sigma_plus": {"type": "number", "minimum": 0}, "unit": unit}},
        {"type": "object", "additionalProperties": False, "required": ["samples"],
         "properties": {"samples": {"type": "array", "items": NUMBER, "minItems": 2}, "unit": unit}},
    ]
    if spec.isotropic:
        forms.append({"type": "string", "enum": ["isotropic"]})
    return {"description": f"{spec.description} [{spec.unit or 'dimensionless'}]; {spec.domain.describe()}",
            "oneOf": forms}


def _input_schema(spec: Input) -> dict:
    if spec.kind == "choice":
        d = {"type": "string", "enum": list(spec.choices), "description": spec.description}
    elif spec.kind == "integer":
        d = {"type": "integer", "description": spec.description, **spec.domain.as_dict()}
    elif spec.kind == "series":
        item = {"oneOf": [NUMBER, {"type": "string"}]} if spec.time else NUMBER
        d = {"type": "array", "items": item, "minItems": 1,
             "description": f"{spec.description} [{spec.unit or 'dimensionless'}]"}
    else:
        d = _quantity_schema(spec)
    if spec.default is not None:
        d["default"] = spec.default
    return d


def request_schema(calc: Calculation) -> dict:
    props = {spec.name: _input_schema(spec) for spec in calc.inputs}
    props["correlations"] = {"$ref": "#/components/schemas/Correlations"}
    props["uncertainty"] = {"$ref": "#/components/schemas/UncertaintyOptions"}
    props["units"] = {"type": "object", "additionalProperties": {"type": "string"},
                      "description": "output name -> astropy unit for the response",
                      "propertyNames": {"enum": [o.name for o in calc.outputs]}}
    if any(spec.time for spec in calc.inputs):
        props["time_format"] = {"type": "string", "enum": ["jd", "mjd"], "default": "jd"}
    required = [s.name for s in calc.inputs if s.required and s.default is None]
    d = {"type": "object", "additionalProperties": False, "properties": props}
    if required:
        d["required"] = required
    # exactly one of each exclusive group, at most one of each at-most-one group
    groups = [{"oneOf": [{"required": [name]} for name in group]} for group in calc.exclusive]
    groups += [{"not": {"required": [a, b]}} for group in calc.at_most_one for a, b in combinations(group, 2)]
    if groups:
        d["allOf"] = groups
    if calc.example:
        d["example"] = calc.example
    return d


def _result_schema(calc: Calculation) -> dict:
    props = {o.name: {"$ref": "#/components/schemas/MeasuredResult", "description": f"{o.description} [{o.unit}]"}
             for o in calc.outputs}
    if any(s.kind == "series" for s in calc.inputs):
        props["series"] = {"type": "object", "additionalProperties": {"$ref": "#/components/schemas/SeriesResult"}}
    return {"type": "object", "properties": props, "additionalProperties": True}


def _response_schema(calc: Calculation) -> dict:
    return {"type": "object", "required": ["calculation", "results", "uncertainty", "inputs", "warnings", "provenance"],
            "properties": {
                "calculation": {"type": "string", "enum": [calc.name]},
                "results": _result_schema(calc),
                "uncertainty": {"$ref": "#/components/schemas/UncertaintyReport"},
                "inputs": {"type": "object"},
                "warnings": {"type": "array", "items": {"$ref": "#/components/schemas/Warning"}},
                "provenance": {"$ref": "#/components/schemas/Provenance"},
            }}


def _problem_responses(*codes: int) -> dict:
    text = {400: "malformed JSON", 404: "unknown path", 405: "wrong method", 413: "body or work over the limits",
            415: "not JSON", 422: "values that parse but are not physical or are inconsistent"}
    return {str(c): {"description": text[c], "content": {"application/problem+json": {
        "schema": {"$ref": "#/components/schemas/Problem"}}}} for c in codes}


COMPONENTS = {
    "MeasuredResult": {"type": "object", "required": ["value", "unit"], "properties": {
        "value": {"type": ["number", "null"]}, "sigma": {"type": ["number", "null"]},
        "low": {"type": ["number", "null"]}, "high": {"type": ["number", "null"]}, "unit": {"type": "string"}}},
    "SeriesResult": {"type": "object", "required": ["value", "unit"], "properties": {
        "value": {"type": "array", "items": {"type": ["number", "null"]}},
        "sigma": {"type": "array", "items": {"type": ["number", "null"]}},
        "low": {"type": "array", "items": {"type": ["number", "null"]}},
        "high": {"type": "array", "items": {"type": ["number", "null"]}},
        "unit": {"type": "string"}}},
    "Correlations": {"type": "array", "items": {"type": "object", "additionalProperties": False,
                                                "required": ["between", "rho"], "properties": {
        "between": {"type": "array", "items": {"type": "string", "maxLength": 64}, "minItems": 2, "maxItems": 2,
                    "uniqueItems": True},
        "rho": {"type": "number", "minimum": -1, "maximum": 1}}}},
    "UncertaintyOptions": {"type": "object", "additionalProperties": False, "properties": {
        "method": {"type": "string", "enum": ["linear", "monte_carlo", "monte-carlo"], "default": "linear"},
        "samples": {"type": "integer", "minimum": 1},
        "seed": {"type": "integer", "minimum": 0, "maximum": 2**63 - 1}}},
    "UncertaintyReport": {"type": "object", "required": ["method"], "properties": {
        "method": {"type": "string", "enum": ["linear", "monte_carlo"]},
        "samples": {"type": "integer"}, "seed": {"type": "integer"},
        "rejected_fraction": {"type": "number", "minimum": 0, "maximum": 1}}},
    "Warning": {"type": "object", "required": ["code", "message"], "properties": {
        "code": {"type": "string"}, "message": {"type": "string"},
        "fields": {"type": "array", "items": {"type": "string"}}}},
    "Provenance": {"type": "object", "required": ["version", "constants", "references", "conventions"],
                   "properties": {"version": {"type": "string"}, "calculation": {"type": "string"},
                                  "formulas": {"type": "object"}, "constants": {"type": "object"},
                                  "references": {"type": "array", "items": {"type": "string"}},
                                  "conventions": {"type": "object"}}},
    "Problem": {"type": "object", "required": ["type", "title", "status", "detail"], "properties": {
        "type": {"type": "string"}, "title": {"type": "string"}, "status": {"type": "integer"},
        "detail": {"type": "string"},
        "errors": {"type": "object", "additionalProperties": {"type": "array", "items": {"type": "string"}}}}},
}


def _get(summary: str, schema: dict | None = None, content_type: str = "application/json") -> dict:
    return {"get": {"summary": summary, "responses": {
        "200": {"description": summary, "content": {content_type: {"schema": schema or {"type": "object"}}}},
        **_problem_responses(404)}}}


RENDERED_CONTENT = {
    "text/x-tex": {"schema": {"type": "string", "description": "LaTeX derivation report (format=latex)"}},
    "text/markdown": {"schema": {"type": "string", "description": "Markdown derivation report (format=markdown)"}},
    "image/svg+xml": {"schema": {"type": "string", "description": "figure (format=svg)"}},
    "image/png": {"schema": {"type": "string", "contentMediaType": "image/png", "description": "figure (format=png)"}},
}


def _format_parameters(calc: Calculation) -> list[dict]:
    """The ``format`` and ``plot`` query parameters of a calculation's endpoint."""
    from .api.render import FORMATS
    from .plots import has_curve
    curve = ("without plot, svg and png draw the radial-velocity curves of both stars with the requested times "
             "marked (and the relative orbit when visual elements are given); " if has_curve(calc) else "")
    return [
        {"name": "format", "in": "query", "required": False,
         "description": "json (default): the response; latex or markdown: the derivation report (inputs, formulas "
                        "with references, constants with sources, conventions, uncertainty method), numbers rounded "
                        "by the Particle Data Group rule; svg or png: a figure",
         "schema": {"type": "string", "enum": ["json", *FORMATS], "default": "json"}},
        {"name": "plot", "in": "query", "required": False,
         "description": f"with format=svg or png: {curve}plot=NAME draws the histogram of output NAME's Monte Carlo "
                        "draws with the median and the central 68.27 % interval (needs the Monte Carlo method)",
         "schema": {"type": "string", "enum": [o.name for o in calc.outputs]}},
    ]


ANY_ITEMS = {"type": "array", "minItems": 1, "items": {}}
BATCH_OPTIONS = {
    "correlations": {"$ref": "#/components/schemas/Correlations"},
    "uncertainty": {"$ref": "#/components/schemas/UncertaintyOptions"},
    "units": {"type": "object", "additionalProperties": {"type": "string"},
              "description": "output name -> astropy unit for the response"},
    "time_format": {"type": "string", "enum": ["jd", "mjd"], "default": "jd"},
    "echo": {"type": "boolean", "default": False, "description": "rows: each row echoes its inputs"},
}


def _batch_column_schema(spec: Input) -> dict:
    """One input's column: entries that are wrong for one system are answered in its place, so the
    entries themselves are not constrained here (the single request's rules apply to each)."""
    if spec.kind == "series":
        return _input_schema(spec)
    if spec.kind != "quantity":
        return {"description": f"{spec.description}: one value for every system, or an array of one per system "
                               "(null: not given)"}
    return {"description": f"{spec.description} [{spec.unit or 'dimensionless'}]",
            "$ref": "#/components/schemas/BatchQuantityColumn"}


_PER_SYSTEM = {"oneOf": [NUMBER, ANY_ITEMS, {"type": "string"}]}
BATCH_QUANTITY_COLUMN = {
    "description": "one number for every system, an array of exact values (null: not given for that system), or "
                   "an object of value and sigma (or sigma_minus and sigma_plus) arrays or numbers with one unit "
                   "for the column; samples as one list of draws per system",
    "oneOf": [NUMBER, ANY_ITEMS, {"type": "string"},
              {"type": "object", "additionalProperties": False, "properties": {
                  "value": _PER_SYSTEM, "sigma": _PER_SYSTEM, "sigma_minus": _PER_SYSTEM, "sigma_plus": _PER_SYSTEM,
                  "unit": {"type": "string"}, "samples": {"type": "array", "items": {"type": "array"}}}}],
}


def _batch_paths(calc: Calculation, key: str, schemas: dict, paths: dict) -> None:
    """``POST /v1/batch/<name>``: rows (a list of request bodies) or columns (one array per input)."""
    options = {k: v for k, v in BATCH_OPTIONS.items() if k != "time_format" or any(s.time for s in calc.inputs)}
    options["units"] = {**options["units"], "propertyNames": {"enum": [o.name for o in calc.outputs]}}
    rows = {"type": "object", "additionalProperties": False, "required": ["systems"], "properties": {
        "systems": {"type": "array", "minItems": 1, "items": {},
                    "description": f"request bodies of {calc.path} (#/components/schemas/{key}_request), one per "
                                   "system; the top-level options apply to each unless it gives its own; a system "
                                   "that is not valid is answered in its place"},
        **options}}
    columns = {"type": "object", "additionalProperties": False, "required": ["columns"], "properties": {
        "columns": {"type": "object", "minProperties": 1, "additionalProperties": False,
                    "properties": {spec.name: _batch_column_schema(spec) for spec in calc.inputs}},
        **options}}
    if calc.example:
        shared = {k: v for k, v in calc.example.items() if k in BATCH_OPTIONS}
        rows["example"] = {"systems": [{k: v for k, v in calc.example.items() if k not in BATCH_OPTIONS}], **shared}
    schemas["BatchQuantityColumn"] = BATCH_QUANTITY_COLUMN
    schemas[f"{key}_batch_request"] = {"oneOf": [rows, columns]}
    column_result = {"type": "object", "required": ["value", "unit"], "properties": {
        "value": {"type": "array", "items": {}}, "sigma": {"type": "array", "items": {}},
        "low": {"type": "array", "items": {}}, "high": {"type": "array", "items": {}}, "unit": {"type": "string"}}}
    schemas[f"{key}_batch_response"] = {"oneOf": [
        {"type": "object", "required": ["calculation", "count", "uncertainty", "provenance", "results"], "properties": {
            "calculation": {"type": "string", "enum": [calc.name]},
            "count": {"type": "integer", "minimum": 1},
            "uncertainty": {"type": "object", "required": ["method"]},
            "provenance": {"$ref": "#/components/schemas/Provenance"},
            "results": {"type": "array", "description": "one per system, in input order", "items": {"anyOf": [
                {"type": "object", "required": ["results", "warnings"], "additionalProperties": False,
                 "properties": {"results": {"type": "object"}, "warnings": {"type": "array"},
                                "uncertainty": {"type": "object"}, "inputs": {"type": "object"},
                                "time_format": {"type": "string"}}},
                {"type": "object", "required": ["error"], "additionalProperties": False,
                 "properties": {"error": {"$ref": "#/components/schemas/Problem"}}}]}}}},
        {"type": "object", "required": ["calculation", "count", "columns", "errors", "uncertainty", "warnings",
                                        "provenance"], "properties": {
            "calculation": {"type": "string", "enum": [calc.name]},
            "count": {"type": "integer", "minimum": 1},
            "columns": {"type": "object", "description": "each output: value, sigma (low, high) arrays over the "
                                                         "systems and its unit, null where a system failed; extra "
                                                         "members (e.g. events) as one entry per system",
                        "properties": {o.name: column_result for o in calc.outputs},
                        "additionalProperties": {"type": "array"}},
            "errors": {"type": "array", "items": {"allOf": [
                {"$ref": "#/components/schemas/Problem"},
                {"type": "object", "required": ["index"], "properties": {"index": {"type": "integer", "minimum": 0}}}]}},
            "uncertainty": {"type": "object", "required": ["method"], "properties": {
                "method": {"oneOf": [{"type": "string"}, {"type": "array"}]}}},
            "warnings": {"type": "array", "items": {"type": "object", "required": ["code", "message", "rows"],
                                                    "properties": {"code": {"type": "string"},
                                                                   "message": {"type": "string"},
                                                                   "rows": {"type": "array",
                                                                            "items": {"type": "integer"}}}}},
            "provenance": {"$ref": "#/components/schemas/Provenance"}}},
    ]}
    paths[f"/v1/batch/{calc.name}"] = {"post": {
        "operationId": f"batch_{key}",
        "summary": f"{calc.title}: many systems at once",
        "description": "Rows ({\"systems\": [...]}) are answered with one full response (or {\"error\": problem}) per "
                       "system, in input order; columns ({\"columns\": {input: {\"value\": [...], \"sigma\": [...]}}}) "
                       "with one array per output and the failed systems in errors with their index. Systems of one "
                       "shape are computed together. Monte Carlo draws (systems x samples) are limited per batch.",
        "requestBody": {"required": True, "content": {"application/json": {
            "schema": {"$ref": f"#/components/schemas/{key}_batch_request"}}}},
        "responses": {"200": {"description": "one answer per system", "content": {"application/json": {
            "schema": {"$ref": f"#/components/schemas/{key}_batch_response"}}}},
                      **_problem_responses(400, 413, 415, 422)},
    }}


EXTRA_PATH_BUILDERS = []   # callables (spec dict) -> None, for blueprints that add paths (e.g. batch)


def build_spec() -> dict:
    paths: dict[str, dict] = {
        "/v1/health": _get("liveness: the worker answers", {"type": "object", "required": ["status", "version"],
                                                             "properties": {"status": {"type": "string"},
                                                                            "version": {"type": "string"}}}),
        "/v1/ready": _get("readiness: the registry and spec load"),
        "/v1/constants": _get("every constant with value, unit and source"),
        "/v1/calculations": _get("every calculation: inputs, units, domains, outputs, references"),
        "/v1/calculations/{name}": {"get": {
            "summary": "one calculation's declaration",
            "parameters": [{"name": "name", "in": "path", "required": True, "schema": {"type": "string"}}],
            "responses": {"200": {"description": "the declaration",
                                  "content": {"application/json": {"schema": {"type": "object"}}}},
                          **_problem_responses(404)}}},
        "/openapi.yaml": _get("this document", {"type": "string"}, "application/yaml"),
    }
    schemas = dict(COMPONENTS)
    for calc in calculations().values():
        key = calc.name.replace("-", "_")
        schemas[f"{key}_request"] = request_schema(calc)
        schemas[f"{key}_response"] = _response_schema(calc)
        _batch_paths(calc, key, schemas, paths)
        paths[calc.path] = {"post": {
            "operationId": f"calculate_{key}",
            "summary": calc.title,
            "description": calc.summary,
            "parameters": _format_parameters(calc),
            "requestBody": {"required": True, "content": {"application/json": {
                "schema": {"$ref": f"#/components/schemas/{key}_request"}}}},
            "responses": {"200": {"description": "the derived quantities with uncertainties and provenance "
                                                 "(JSON), the derivation report (format=latex|markdown) or a "
                                                 "figure (format=svg|png)",
                                  "content": {"application/json": {
                                      "schema": {"$ref": f"#/components/schemas/{key}_response"}},
                                      **RENDERED_CONTENT}},
                          **_problem_responses(400, 413, 415, 422)},
        }}
    spec = {
        "openapi": "3.1.0",
        "info": {"title": "calcservice", "version": __version__,
                 "description": "Binary-star orbital elements to physical numbers with propagated uncertainties. "
                                "Conventions: radial velocity positive when receding; omega is the primary's "
                                "argument of periastron; q = M2/M1 = K1/K2; times are Julian Dates."},
        "paths": paths,
        "components": {"schemas": schemas},
    }
    for builder in EXTRA_PATH_BUILDERS:
        builder(spec)
    return spec


@lru_cache(maxsize=1)
def spec_yaml() -> str:
    return yaml.safe_dump(build_spec(), sort_keys=False, allow_unicode=True, width=110)


def main() -> None:
    """Write the spec to the repository's openapi.yaml: ``python -m calcservice.openapi > openapi.yaml``."""
    print(spec_yaml(), end="")


if __name__ == "__main__":
    main()
