"""The OpenAPI 3.1 document, generated from the registry (openapi.yaml in the repository is its dump).

Everything a calculation's entry says comes from its declaration: inputs with their units and
domains, outputs, the cross-field conditions that answer 422, and the examples.  The example
answers are computed by the service itself when the document is built, so they cannot drift.
Shared shapes (a measured input's forms, a measured result, a problem, batch columns and rows)
are written once under ``components`` and referenced.
"""

from __future__ import annotations

import json
import math
from dataclasses import fields
from functools import lru_cache
from itertools import combinations
from types import SimpleNamespace
from typing import Any

import yaml

from . import __version__, media
from .config import Limits
from .engine import MIN_DRAWS
from .plots import MAX_BINS, MAX_MARKERS, has_curve
from .registry import DATE, Calculation, Input, calculations


@lru_cache(maxsize=1)
def _service() -> SimpleNamespace:
    """The library's entry points: they compute the examples and say which request members the
    service takes (the one place openapi.py imports them)."""
    from .core import Problem, compute, compute_batch
    from .core.batch import OPTION_KEYS
    from .core.schemas import request_schema
    return SimpleNamespace(compute=compute, compute_batch=compute_batch, Problem=Problem,
                           members=lambda calc: set(request_schema(calc, DEFAULTS).fields),
                           batch_options=set(OPTION_KEYS))


def _ref(name: str) -> dict:
    return {"$ref": f"#/components/schemas/{name}"}


def _key(calc: Calculation) -> str:
    return calc.name.replace("-", "_")


def _unit(spec) -> str:
    return spec.unit or "dimensionless"


DEFAULTS = Limits()
ECHO = {"type": "boolean", "default": False,
        "description": "rows: each answer repeats its inputs as understood; a columns batch (JSON or a table) "
                       "refuses true (422 naming echo): its answer has no place for inputs, which are the columns sent"}
NULLABLE_NUMBER = {"type": ["number", "null"]}
STRING = {"type": "string", "maxLength": DEFAULTS.max_string_length}
UNIT = _ref("Unit")
SIGMA = {"type": "number", "minimum": 0}
ISO_TIME = _ref("IsoTime")


def _measured(value: dict, note: str) -> dict:
    """The forms of a measured quantity of the wire contract, its value being ``value``."""
    return {
        "description": note,
        "oneOf": [
            {**value, "title": "exact value"},
            {"title": "value with a normal 1-sigma", "type": "object", "additionalProperties": False,
             "required": ["value"], "properties": {"value": value, "sigma": SIGMA, "unit": UNIT}},
            {"title": "value with asymmetric 1-sigma (split normal)", "type": "object",
             "additionalProperties": False, "required": ["value", "sigma_minus", "sigma_plus"],
             "properties": {"value": value, "sigma_minus": SIGMA, "sigma_plus": SIGMA, "unit": UNIT}},
            _ref("Samples"),
        ]}


SAMPLES = {"title": "the caller's own draws", "type": "object", "additionalProperties": False,
           "required": ["samples"],
           "description": "e.g. an orbit fit's posterior; every samples input of a request has one length and "
                          "they are paired index by index",
           "properties": {"samples": {"type": "array", "items": {"type": "number"}, "minItems": 2},
                          "unit": UNIT}}

# the nominal (or median) value and its spread, per output; Monte Carlo adds the central 68.27 % interval
MEASURED_RESULT = {
    "type": "object", "required": ["value", "unit"],
    "properties": {
        "value": {**NULLABLE_NUMBER, "description": "nominal value (Monte Carlo: the median)"},
        "sigma": {**NULLABLE_NUMBER, "description": "1-sigma (Monte Carlo: the standard deviation of the draws; "
                                                    "null where it is not defined, with a sigma_undefined warning)"},
        "low": {**NULLABLE_NUMBER, "description": "Monte Carlo: lower end of the central 68.27 % interval"},
        "high": {**NULLABLE_NUMBER, "description": "Monte Carlo: upper end of the central 68.27 % interval"},
        "unit": {"type": "string"},
        "budget": {"$ref": "#/components/schemas/Budget"}}}

NULLABLE_NUMBERS = {"type": "array", "items": NULLABLE_NUMBER}

COMPONENTS: dict[str, dict] = {
    "Unit": {"type": "string", "maxLength": DEFAULTS.max_string_length,
             "description": "an astropy unit string (d, yr, km/s, deg, mas, solMass, ...); without it the input's "
                            "default unit applies"},
    "IsoTime": {"type": "string", "maxLength": DEFAULTS.max_string_length, "description": "ISO 8601 time (UTC; a time with an offset such as +05:00 is the UTC instant it names)"},
    "MeasuredInput": _measured({"type": "number"}, "a measured number: exact, with a normal or asymmetric 1-sigma, "
                                                   "or as the caller's own draws, in the input's default unit "
                                                   "unless a unit is given"),
    "MeasuredTime": _measured({"oneOf": [{"type": "number", **DATE.as_dict(),
                                          "description": "Julian Date (or MJD with time_format), within 1e8 d of 0"},
                                         ISO_TIME]},
                              "a measured time: a Julian Date (MJD with time_format) or an ISO 8601 string, exact, "
                              "with a 1-sigma in days, or as draws"),
    "Samples": SAMPLES,
    "Series": {"description": "a list of exact numbers in the input's default unit, or an object with the list "
                              "and its unit",
               "oneOf": [{"type": "array", "minItems": 1, "items": {"type": "number"}},
                         {"type": "object", "additionalProperties": False, "required": ["value"],
                          "properties": {"value": {"type": "array", "minItems": 1, "items": {"type": "number"}},
                                         "unit": UNIT}}]},
    "TimeSeries": {"description": "a list of times: Julian Dates (MJD with time_format) or ISO 8601 strings",
                   "type": "array", "minItems": 1, "items": {"oneOf": [{"type": "number", **DATE.as_dict()}, ISO_TIME]}},
    "Correlation": {"type": "object", "additionalProperties": False, "required": ["between", "rho"],
                    "description": "the correlation coefficient of two measured inputs given in the request",
                    "properties": {
                        "between": {"type": "array", "items": {"type": "string", "maxLength": 64},
                                    "minItems": 2, "maxItems": 2, "uniqueItems": True},
                        "rho": {"type": "number", "minimum": -1, "maximum": 1}}},
    "Uncertainty": {"type": "object", "additionalProperties": False,
                    "description": "how uncertainties are propagated; any request with samples inputs is Monte Carlo; "
                                   "samples or seed without a method mean Monte Carlo, and with the linear method "
                                   "they are refused (422 naming uncertainty.samples or uncertainty.seed)",
                    "properties": {
                        "method": {"type": "string", "enum": ["linear", "monte_carlo", "monte-carlo"],
                                   "description": "linear by default; monte_carlo when samples or seed is given"},
                        "samples": {"type": "integer", "minimum": MIN_DRAWS,
                                    "description": f"Monte Carlo draws (default {DEFAULTS.default_samples}; at least "
                                                   f"{MIN_DRAWS}, for a trustworthy sigma and 68.27 % interval; over "
                                                   "the configured max_samples: 413)"},
                        "seed": {"type": "integer", "minimum": 0, "maximum": 2**63 - 1}},
                    # a method other than linear, or neither samples nor seed
                    "anyOf": [{"properties": {"method": {"enum": ["monte_carlo", "monte-carlo"]}}},
                              {"not": {"anyOf": [{"required": ["samples"]}, {"required": ["seed"]}]}}]},
    "UncertaintyReport": {"type": "object", "properties": {
        "method": {"type": "string", "enum": ["linear", "monte_carlo"]},
        "samples": {"type": "integer"},
        "seed": {"type": ["integer", "null"],
                 "description": "null in a batch whose systems drew with seeds of their own"},
        "rejected_fraction": {"type": "number", "minimum": 0, "maximum": 1,
                              "description": "share of the draws outside the inputs' domains or without an answer"}}},
    "MeasuredResult": MEASURED_RESULT,
    "SeriesResult": {"type": "object", "required": ["value", "unit"], "properties": {
        "value": NULLABLE_NUMBERS, "sigma": NULLABLE_NUMBERS, "low": NULLABLE_NUMBERS, "high": NULLABLE_NUMBERS,
        "unit": {"type": "string"}}},
    "Budget": {"type": "object", "additionalProperties": {"type": "number"},
               "description": "with \"budget\": true: the share of the output's variance from each input (they sum "
                              "to 1); a correlation term is keyed by the two inputs joined by a comma and may be "
                              "negative. Monte Carlo: an estimate, or absent with a budget_not_given warning"},
    "OutputCorrelation": {"type": "object", "required": ["outputs", "matrix"],
                          "description": "with \"covariance\": true: the correlation matrix of the scalar outputs "
                                         "that have a sigma (linear: from J Σ Jᵀ; Monte Carlo: from the draws); "
                                         "absent for series outputs, with a covariance_not_given warning",
                          "properties": {"outputs": {"type": "array", "items": {"type": "string"}},
                                         "matrix": {"type": "array", "items": NULLABLE_NUMBERS}}},
    "Warning": {"type": "object", "required": ["code", "message"], "properties": {
        "code": {"type": "string"}, "message": {"type": "string"},
        "fields": {"type": "array", "items": {"type": "string"}}}},
    "Provenance": {"type": "object", "properties": {
        "version": {"type": "string"}, "calculation": {"type": "string"},
        "formulas": {"type": "object", "additionalProperties": {"type": "string"}},
        "formula_sources": {"type": "object", "description": "each formula's sources: 0-based indices into "
                            "references", "additionalProperties": {"type": "array", "items": {"type": "integer"}}},
        "constants": {"type": "object", "additionalProperties": {"type": "object", "properties": {
            "symbol": {"type": "string"}, "value": {"type": "number"}, "unit": {"type": "string"},
            "description": {"type": "string"}, "source": {"type": "string"}}}},
        "references": {"type": "array", "items": {"type": "string"}},
        "conventions": {"type": "object", "additionalProperties": {"type": "string"}}}},
    "Problem": {"type": "object", "required": ["type", "title", "status", "detail"],
                "description": "RFC 9457 problem details",
                "properties": {
                    "type": {"type": "string"}, "title": {"type": "string"}, "status": {"type": "integer"},
                    "detail": {"type": "string"},
                    "errors": {"type": "object", "description": "messages by field (dotted for nested members)",
                               "additionalProperties": {"type": "array", "items": {"type": "string"}}},
                    "limit": {"type": "object", "description": "413: the limit that was reached",
                              "properties": {"name": {"type": "string"}, "value": {"type": "integer"}}}}},
    "RowError": {"type": "object", "required": ["error"], "additionalProperties": False,
                 "description": "a system of a rows batch that could not be answered, in its place",
                 "properties": {"error": _ref("Problem")}},
    "ColumnError": {"allOf": [_ref("Problem"), {"type": "object", "required": ["index"], "properties": {
        "index": {"type": "integer", "minimum": 0, "description": "the system's position in the batch"}}}]},
    "ColumnWarning": {"type": "object", "required": ["code", "message"], "properties": {
        "code": {"type": "string"}, "message": {"type": "string"},
        "fields": {"type": "array", "items": {"type": "string"}},
        "rows": {"type": "array", "items": {"type": "integer"}, "description": "the systems it applies to"}}},
    "ColumnResult": {"type": "object", "required": ["value", "unit"],
                     "description": "one output over the systems; null where a system failed",
                     "properties": {"value": NULLABLE_NUMBERS, "sigma": NULLABLE_NUMBERS, "low": NULLABLE_NUMBERS,
                                    "high": NULLABLE_NUMBERS, "unit": {"type": "string"}}},
    "SeriesColumnResult": {"type": "object", "required": ["value", "unit"],
                           "description": "one series output over the systems: a list per system (null where it "
                                          "failed)",
                           "properties": {k: {"type": "array", "items": {"type": ["array", "null"],
                                                                        "items": NULLABLE_NUMBER}}
                                          for k in ("value", "sigma", "low", "high")} | {"unit": {"type": "string"}}},
    "ColumnsCorrelation": {"type": "object", "required": ["outputs", "matrix"],
                           "description": "with \"covariance\": true: one matrix per system (null for a failed one)",
                           "properties": {"outputs": {"type": "array", "items": {"type": "string"}},
                                          "matrix": {"type": "array", "items": {"type": ["array", "null"], "items":
                                                                                NULLABLE_NUMBERS}}}},
    "Limit": {"type": "object", "required": ["value", "env"], "properties": {
        "value": {"type": "integer"}, "env": {"type": "string"}, "description": {"type": "string"}}},
}


def _column(time: bool) -> dict:
    """A quantity's column in a columns batch: one value for every system, an array with one entry per
    system (null: not given there; any form of a single request), or value and sigma arrays with one unit."""
    one = {"oneOf": [{"type": "number"}, ISO_TIME]} if time else {"type": "number"}
    entry = [{"type": "null"}, _ref("MeasuredTime" if time else "MeasuredInput")]
    per_system = _ref("TimeValues" if time else "Values")
    forms = [
        one,
        {"type": "array", "minItems": 1, "items": {"anyOf": entry}},
        {"type": "object", "additionalProperties": False, "required": ["value"],
         "properties": {"value": per_system, "sigma": per_system, "unit": UNIT}},
        {"type": "object", "additionalProperties": False, "required": ["value", "sigma_minus", "sigma_plus"],
         "properties": {"value": per_system, "sigma_minus": per_system, "sigma_plus": per_system, "unit": UNIT}},
        {"type": "object", "additionalProperties": False, "required": ["samples"],
         "properties": {"samples": {"type": "array", "minItems": 1, "items": {
             "type": "array", "minItems": 2, "items": {"type": "number"}}}, "unit": UNIT}},
    ]
    return {"oneOf": forms}


COMPONENTS["Values"] = {"description": "one number for every system, or one per system (null: not given there)",
                        "oneOf": [{"type": "number"}, {"type": "array", "minItems": 1, "items": NULLABLE_NUMBER}]}
COMPONENTS["TimeValues"] = {"description": "one time for every system, or one per system (null: not given there)",
                            "oneOf": [{"oneOf": [{"type": "number"}, ISO_TIME]},
                                      {"type": "array", "minItems": 1,
                                       "items": {"oneOf": [NULLABLE_NUMBER, ISO_TIME]}}]}
COMPONENTS["QuantityColumn"] = _column(False)
COMPONENTS["IsotropicColumn"] = {
    "description": "an inclination's column: a quantity's, or isotropic for every system or for some (a system "
                   "given isotropic is answered by Monte Carlo, the others by the batch's method; isotropic takes no "
                   "sigma: null or 0 there)",
    "anyOf": [_ref("QuantityColumn"), {"const": "isotropic"}, {"type": "array", "minItems": 1, "items": {
        "anyOf": [{"type": "null"}, _ref("MeasuredInput"), {"const": "isotropic"}]}},
        {"type": "object", "additionalProperties": False, "required": ["value"],
         "properties": {"value": {"type": "array", "minItems": 1,
                                  "items": {"anyOf": [NULLABLE_NUMBER, {"const": "isotropic"}]}},
                        **dict.fromkeys(("sigma", "sigma_minus", "sigma_plus"), _ref("Values")), "unit": UNIT}}]}
COMPONENTS["TimeColumn"] = _column(True)


def _column_schema(spec: Input) -> dict:
    """One input's column in a columns batch."""
    if spec.kind == "series":
        return _ref("TimeSeries" if spec.time else "Series")
    if spec.kind in ("choice", "integer"):
        one = {"type": "string", "enum": list(spec.choices)} if spec.kind == "choice" else \
            {"type": "integer", **spec.domain.as_dict()}
        return {"oneOf": [one, {"type": "array", "minItems": 1, "items": {"anyOf": [{"type": "null"}, one]}}]}
    return _ref("TimeColumn" if spec.time else "IsotropicColumn" if spec.isotropic else "QuantityColumn")


def _domain_name(domain) -> str:
    """The component of a measured input on ``domain``, named after its bounds (e.g. MeasuredInput_gt0_lt180)."""
    words = {">": "gt", ">=": "ge", "<": "lt", "<=": "le"}
    # a component name takes letters, digits, ".", "_" and "-" (OpenAPI 3.1): 1e+08 is written 1e08
    return "_".join(["MeasuredInput", *(f"{words[op]}{bound:g}".replace("+", "") for op, bound in domain.bounds())])


def _bounded(spec: Input, schemas: dict) -> dict:
    """A quantity input: the shared forms, with the domain on the bare number and on a value given
    without a unit (with a unit the domain applies after conversion, and the answer is a 422).
    Inputs of one domain share one component."""
    if spec.time:
        return _ref("MeasuredTime")
    bounds = spec.domain.as_dict()
    if not bounds:
        return _ref("MeasuredInput")
    name = _domain_name(spec.domain)
    schemas.setdefault(name, {
        "description": f"a measured input that {spec.domain.describe()} (in its default unit; with a unit of its "
                       "own, once converted)",
        "allOf": [_ref("MeasuredInput")], **bounds,
        "anyOf": [{"required": ["unit"]}, {"properties": {"value": dict(bounds)}}]})
    return _ref(name)


def _input_schema(spec: Input, schemas: dict) -> dict:
    unit = f" [{_unit(spec)}]"
    if spec.kind == "choice":
        d = {"type": "string", "enum": list(spec.choices), "description": spec.description}
    elif spec.kind == "integer":
        d = {"type": "integer", "description": f"{spec.description}; {spec.domain.describe()}",
             **spec.domain.as_dict()}
    elif spec.kind == "series":
        d = {"description": spec.description + ("" if spec.time else unit),
             **_ref("TimeSeries" if spec.time else "Series")}
    else:
        # the domain is said by the component referenced
        d = {"description": f"{spec.description}{unit}", **_bounded(spec, schemas)}
        if spec.isotropic:
            note = "" if "isotropic" in spec.description else '; or "isotropic" (random orientations, cos i uniform)'
            d = {"description": d.pop("description") + note, "anyOf": [d]}
            d["anyOf"].append({"const": "isotropic"})
    if spec.default is not None:
        d["default"] = spec.default
    return d


def _options(calc: Calculation, batch: bool = False) -> dict:
    """The members of a request that are not inputs (in a batch, shared by every system): those the
    service takes, each described here."""
    key = _key(calc)
    known = {"correlations": _ref(f"{key}_correlations"), "uncertainty": _ref("Uncertainty"),
             "units": {"allOf": [_ref("Units")], "propertyNames": _ref(f"{key}_output")},
             "time_format": _ref("TimeFormat"),
             "covariance": _ref("CovarianceOption"), "budget": _ref("BudgetOption"), "echo": _ref("Echo")}
    service = _service()
    taken = service.members(calc) - {s.name for s in calc.inputs}
    if batch:
        taken = service.batch_options if any(s.time for s in calc.inputs) else service.batch_options - {"time_format"}
    unknown = taken - set(known)
    if unknown:
        raise ValueError(f"{calc.name}: the service takes {sorted(unknown)}, which openapi.py does not describe")
    return {k: v for k, v in known.items() if k in taken}


def _correlations(calc: Calculation) -> dict:
    """The correlations option of a calculation: pairs of its measured inputs."""
    measured = [s.name for s in calc.inputs if s.kind == "quantity"]
    return {"type": "array", "items": {"allOf": [_ref("Correlation")], "properties": {
        "between": {"items": {"enum": measured}}}}}


COMPONENTS.update({
    "Units": {"type": "object", "description": "output name -> astropy unit for the answer",
              "additionalProperties": {"type": "string", "maxLength": DEFAULTS.max_string_length}},
    "TimeFormat": {"type": "string", "enum": ["jd", "mjd"], "default": "jd",
                   "description": "how numeric times are read and written"},
    "CovarianceOption": {"type": "boolean", "default": False,
                         "description": "add the correlation matrix of the outputs (correlation)"},
    "BudgetOption": {"type": "boolean", "default": False,
                     "description": "add each output's uncertainty budget (budget)"},
    "Echo": ECHO,
})


def request_schema(calc: Calculation, schemas: dict) -> dict:
    """A calculation's request body: its inputs (units and domains), and the options."""
    props = {spec.name: _input_schema(spec, schemas) for spec in calc.inputs}
    props.update(_options(calc))
    required = [s.name for s in calc.inputs if s.required and s.default is None]
    d: dict[str, Any] = {"type": "object", "additionalProperties": False, "properties": props}
    if required:
        d["required"] = required
    # exactly one of each exclusive group, at most one of each at-most-one group
    groups = [{"oneOf": [{"required": [name]} for name in group]} for group in calc.exclusive]
    groups += [{"not": {"required": [a, b]}} for group in calc.at_most_one for a, b in combinations(group, 2)]
    if groups:
        d["allOf"] = groups
    return d


def _results_schema(calc: Calculation) -> dict:
    series = any(s.kind == "series" for s in calc.inputs)
    outputs = {o.name: {"description": f"{o.description} [{o.unit or 'dimensionless'}]",
                        **_ref("SeriesResult" if series else "MeasuredResult")} for o in calc.outputs}
    if series:
        label = next(s.label or s.name for s in calc.inputs if s.kind == "series")
        outputs[label] = {"description": "the series' own values", **_ref("SeriesResult")}
        return {"type": "object", "properties": {"series": {"type": "object", "properties": outputs}}}
    return {"type": "object", "properties": outputs}


COMPONENTS["Answer"] = {
    "type": "object", "required": ["calculation", "results", "uncertainty", "warnings", "provenance"],
    "description": "the answer to one system; results: the outputs the given inputs determine (a calculation's own "
                   "schema names them)",
    "properties": {"calculation": {"type": "string"}, "results": {"type": "object"},
                   "uncertainty": _ref("UncertaintyReport"),
                   "inputs": {"type": "object", "description": "the inputs as understood, in their default units"},
                   "warnings": {"type": "array", "items": _ref("Warning")}, "provenance": _ref("Provenance"),
                   "correlation": _ref("OutputCorrelation")}}


def _response_schema(calc: Calculation) -> dict:
    return {"allOf": [_ref("Answer")], "properties": {"calculation": {"const": calc.name},
                                                      "results": _ref(f"{_key(calc)}_results")}}


# ----------------------------------------------------------------------------- problems

PROBLEM_TEXT = {
    400: "malformed request: not JSON, a number beyond a double, nested too deep, an unknown format or plot, plot "
         "with a format that draws no figure, a query parameter the route does not take (named in errors) or one "
         "given twice with different values",
    404: "unknown path",
    405: "wrong method (the Allow header lists the right ones)",
    406: "none of the media types in Accept can be answered (the problem lists those that can): a calculation "
         "answers application/json, or with format its report or figure type; a rows batch answers in JSON only; "
         "series outputs need JSON or Arrow",
    413: "the body or the work is over a configured limit (GET /v1/limits; the problem names it)",
    415: "the body is not of a media type the route takes",
    422: "values that parse but are not physical or are inconsistent (the problem names the fields)",
}
EDGE_EXAMPLES = {
    400: {"type": "/problems/malformed-request", "title": "Malformed request", "status": 400,
          "detail": "the request body is not valid JSON: Expecting value: line 1 column 1 (char 0)"},
    404: {"type": "/problems/not-found", "title": "Not found", "status": 404,
          "detail": "there is nothing at /v1/nothing; GET /v1/calculations lists the calculations",
          "errors": {"_path": ["no resource at /v1/nothing"]}},
    406: {"type": "/problems/not-acceptable", "title": "Not acceptable", "status": 406,
          "detail": f"the answer can be given as {', '.join(media.ANSWERS)}; Accept lists none of them",
          "errors": {"Accept": [f"must accept one of {', '.join(media.ANSWERS)}"]}},
    413: {"type": "/problems/too-large", "title": "Request or work too large", "status": 413,
          "detail": f"the request body is over {DEFAULTS.max_body_bytes} bytes (max_body_bytes)",
          "limit": {"name": "max_body_bytes", "value": DEFAULTS.max_body_bytes}},
    415: {"type": "/problems/unsupported-media-type", "title": "Unsupported media type", "status": 415,
          "detail": "send the request body as JSON with Content-Type: application/json"},
}


def _problems(*codes: int) -> dict:
    """Problem responses, the shared ones of components/responses."""
    return {str(code): {"$ref": f"#/components/responses/{RESPONSE_NAMES[code]}"} for code in codes}


RESPONSE_NAMES = {400: "Malformed", 404: "NotFound", 405: "MethodNotAllowed", 406: "NotAcceptable", 413: "TooLarge",
                  415: "UnsupportedMediaType"}
# the 400s of a calculation's route: malformed bodies, and the figure parameters it cannot draw
PLOT_400 = {"MalformedSeriesPlot": "plot naming a series output (without plot the figure draws the series)",
            "MalformedNoCurve": "format=svg or png without plot (this calculation draws no curve: plot names the "
                                "output to draw)"}
BATCH_400 = PROBLEM_TEXT[400] + ", a table that cannot be read, or the options or keep parameter with a JSON body"
BATCH_422 = PROBLEM_TEXT[422] + (", for the batch as a whole: neither or both of systems and columns, columns of "
                                 "different lengths, a bad option, an option in a request table's metadata (options "
                                 "go in the options parameter)")
BATCH_RESPONSES = {400: "BatchMalformed", 406: "NotAcceptable", 413: "TooLarge", 415: "UnsupportedMediaType",
                   422: "BatchInvalid"}


REFUSALS = ("Besides the schema, a request is refused with 422 naming the fields for: a value outside its domain "
            "once converted from the unit given; a unit that does not convert to the input's (or, in units, to the "
            "output's); a number that overflows a double once converted (or samples whose spread does); time strings "
            "that are not ISO 8601 times (or mix too many formats); a date given as a number (a Julian Date, or an "
            "MJD with time_format mjd) with a unit other than days (the unit of an ISO date applies to its sigma); "
            "a value of an input whose domain excludes 0 "
            "below the smallest normal double (a subnormal, under 2.2e-308, once converted); correlations naming an "
            "input not given, a pair correlated twice, an input given as samples (they carry their own "
            "correlations), or a correlation matrix that is not positive definite; samples inputs of different "
            "lengths, or samples of an input none of which lies in its domain (or a sigma that leaves no Monte Carlo "
            "draw within it, keyed by that input); inputs for which an output has no finite value (overflow, or no "
            "value: keyed by the one input "
            "at fault where there is one); plot=NAME without the Monte Carlo method, or for an "
            "output the inputs do not determine; and each calculation's own physical conditions (its 422 response).")


def _refusals(calc: Calculation) -> str:
    """The conditions of this calculation the schema cannot say, from the declaration."""
    reasons = list(dict.fromkeys(f"{', '.join(c.fields)}: {c.message}" for c in calc.constraints))
    if calc.exclusive:
        reasons.append("exactly one of " + "; ".join(" or ".join(g) for g in calc.exclusive))
    own = ("; its own: " + "; ".join(reasons)) if reasons else ""
    return "the general reasons of the calculations tag" + own


def _malformed(calc: Calculation) -> str:
    """The name of the 400 response of a calculation's route (the figure parameters it cannot draw differ)."""
    if any(s.kind == "series" for s in calc.inputs):
        return "MalformedSeriesPlot"
    return "Malformed" if has_curve(calc) else "MalformedNoCurve"


def _break(calc: Calculation, example: dict) -> dict:
    """The example with one input moved out of its domain, given in its default unit named (the schema
    lets a value with a unit through: the domain applies once converted, and the answer is a 422)."""
    for spec in calc.inputs:
        bounds = spec.domain
        if spec.kind == "quantity" and not spec.time and spec.name in example:
            if bounds.low != -math.inf:
                return {**example, spec.name: {"value": bounds.low - 1.0, "unit": spec.unit}}
            if bounds.high != math.inf:
                return {**example, spec.name: {"value": bounds.high + 1.0, "unit": spec.unit}}
    for spec in calc.inputs:          # no bounded input: a unit that does not convert
        if spec.kind == "quantity" and not spec.time and spec.name in example:
            return {**example, spec.name: {"value": 1.0, "unit": "kg" if spec.unit != "solMass" else "km"}}
    return {**example, "colour": "blue"}


def _plain(obj) -> Example:
    """A computed answer as the JSON reads (numpy values as numbers, non-finite as null)."""
    def default(o):
        if hasattr(o, "tolist"):
            return o.tolist()
        raise TypeError(type(o).__name__)
    text = json.dumps(obj, default=default, allow_nan=True)
    return Example(json.loads(text, parse_constant=lambda c: None))


PROVENANCE_KEPT = ("version",)
ANSWERS_NOTE = ("The examples are fictional systems; their answers are the service's own, computed when this "
                "document was built, written compactly: numbers to 6 significant digits (from 1e4 to 1e8, as Julian "
                "Dates, to 4 decimals), the provenance cut to the version (formulas, constants with sources, "
                "references and conventions are in GET /v1/calculations/{name} and on /docs), without the echo of "
                "the inputs, and in a batch answer each answered row with its first output only (the others as in "
                "the calculation's own example).")


def _round(x: float) -> float:
    """A number of an example answer to 6 significant digits; from 1e4 to 1e8 (a Julian Date, an MJD) to
    4 decimals, so that a time keeps its fraction of a day."""
    if not math.isfinite(x) or x == 0:
        return x
    exponent = math.floor(math.log10(abs(x)))
    return float(f"{x:.{exponent + 5 if 4 <= exponent < 8 else 6}g}")


def abridged(answer: Example) -> Example:
    """An answer as its example shows it (ANSWERS_NOTE): provenance cut to the version, no echo of the inputs
    at the top level, a batch's rows with their first output, numbers rounded (``_round``)."""
    def cut(node, top=False):
        if isinstance(node, dict):
            if top and isinstance(node.get("results"), list):
                node = type(node)({**node, "results": [{**row, "results": dict(list(row["results"].items())[:1])}
                                            if isinstance(row.get("results"), dict) else row
                                            for row in node["results"]]})
            return type(node)({k: ({kk: vv for kk, vv in v.items() if kk in PROVENANCE_KEPT}
                                   if k == "provenance" and isinstance(v, dict) else cut(v))
                               for k, v in node.items() if not (top and k == "inputs")})
        if isinstance(node, list):
            return [cut(v) for v in node]
        if isinstance(node, float):
            return _round(node)
        return node
    return cut(answer, top=True)


def _examples(calc: Calculation) -> dict:
    """The declaration's fictional example, and the service's own answers to it."""
    service = _service()
    compute, compute_batch, Problem = service.compute, service.compute_batch, service.Problem
    body = dict(calc.example)
    out = {"request": _plain(body), "response": abridged(_plain(compute(calc.name, body)))}
    try:
        compute(calc.name, _break(calc, body))
    except Problem as p:
        out["422"] = _plain(p.as_dict())
    shared = {k: v for k, v in body.items() if k in _options(calc)}
    system = {k: v for k, v in body.items() if k not in shared}
    rows = {"systems": [system, _break(calc, system)], **shared}
    out["batch_request"] = _plain(rows)
    out["batch_response"] = abridged(_plain(compute_batch(calc.name, rows)))
    return out


# ----------------------------------------------------------------------------- operations

FORMAT = {"name": "format", "in": "query", "required": False,
          "description": "json (default): the answer; latex or markdown: the derivation report (inputs, formulas with "
                         "references, constants with sources, conventions, uncertainty method), numbers rounded by the "
                         "Particle Data Group rule; svg or png: a figure: the radial-velocity curves of a calculation "
                         "that has them, or with plot=NAME the histogram of output NAME's Monte Carlo draws with the "
                         f"median and the central 68.27 % interval (at most {MAX_BINS} bins). Beyond {MAX_MARKERS} requested "
                         "times a curve's layer of points keeps one marker per cell whose diagonal is a marker's "
                         "radius, with the cell's lowest and highest error-bar ends (rasterized in SVG if still above "
                         f"{MAX_MARKERS}), and a footnote "
                         "says how many were drawn: a figure's size and cost do not grow with the number of times. "
                         "plot needs the Monte Carlo method (\"uncertainty\": "
                         "{\"method\": \"monte_carlo\"}, or samples inputs): without it the answer is a 422 naming "
                         "plot. With another format, plot is a 400 naming it (no figure is drawn to use it).",
          "schema": {"type": "string", "enum": ["json", *media.FORMATS], "default": "json"}}


def _plot_parameter(calc: Calculation) -> dict:
    curve = "; without it, the radial-velocity curves" if has_curve(calc) else ""
    return {"name": "plot", "in": "query", "required": False,
            "description": f"with format=svg or png: the output to draw (see format){curve}",
            "schema": _ref(f"{_key(calc)}_output")}


TEXT = {"type": "string"}
RENDERED = {media.REPORTS["latex"].split(";")[0]: {"schema": TEXT},
            media.REPORTS["markdown"].split(";")[0]: {"schema": TEXT},
            media.FIGURES["svg"]: {"schema": TEXT},
            media.FIGURES["png"]: {"schema": {"type": "string", "contentMediaType": "image/png"}}}


def _calculation_path(calc: Calculation, ex: dict) -> dict:
    key = _key(calc)
    return {"post": {
        "operationId": f"calculate_{key}",
        "summary": calc.title,
        "description": calc.summary,
        "tags": ["calculations"],
        "parameters": [{"$ref": "#/components/parameters/format"}, _plot_parameter(calc)],
        "requestBody": {"required": True, "content": {media.JSON: {
            "schema": _ref(f"{key}_request"), "example": ex["request"]}}},
        "responses": {
            "200": {"description": "the answer; with format, a report or a figure",
                    "content": {media.JSON: {"schema": _ref(f"{key}_response"), "example": ex["response"]},
                                **RENDERED}},
            "400": {"$ref": f"#/components/responses/{_malformed(calc)}"},
            **_problems(406, 413, 415),
            "422": {"description": _refusals(calc), "content": {media.PROBLEM: {
                "schema": _ref("Problem"), **({"example": ex["422"]} if "422" in ex else {})}}}}}}


BATCH = ("Rows ({\"systems\": [...]}) are answered with one entry per system, in input order: its results, warnings "
         "and what differs from the batch's uncertainty (its inputs with \"echo\": true), or {\"error\": problem} "
         "in its place; provenance once, at the top. Columns ({\"columns\": {input: {\"value\": [...], \"sigma\": "
         "[...]}}}) are answered with one array per output and the failed systems in errors with their index. A "
         "system that is not valid never fails the batch; the options that apply to the whole batch (uncertainty, "
         "units, correlations, time_format, echo, covariance, budget) are checked once, and a bad one is a 422 for "
         "the whole request; a correlation of the batch naming an input a system does not give has no effect on "
         "that system, which is answered with a correlation_without_effect warning. Monte Carlo draws (systems x "
         "samples) are limited per batch.\n\n"
         "Bodies and answers may be JSON, an Apache Arrow IPC stream (application/vnd.apache.arrow.stream), CSV or "
         "ECSV (text/csv, ECSV when the text starts with '# %ECSV'; text/x-ecsv accepted too). Content-Type says "
         "the body's type, Accept picks the answer's (default: the body's own; 406 when none fits, and for a rows "
         "batch asked for as a table; 415 for an unknown body type). Content-Encoding: gzip on the body and "
         "Accept-Encoding: gzip on the answer work for "
         "every type. A table has one column NAME per input in its unit (Arrow field metadata {\"unit\": ...}, the "
         "ECSV header, or NAME[unit] as a CSV header; else the input's default unit), NAME_sigma (or "
         "NAME_sigma_minus and NAME_sigma_plus) in NAME's unit, choices as strings, an isotropic inclination as the "
         "string isotropic; a missing value (Arrow null, empty CSV cell, masked ECSV entry) means not given for that "
         "system. The options of a table body go in the query parameter options. An answer table has, per output, "
         "NAME, NAME_sigma (Monte Carlo also NAME_low, NAME_high), then error_status, error and warnings; "
         "calculation, uncertainty and provenance in the table metadata. Tables carry no correlation (covariance: true "
         "asked of a table answer: 406). Series outputs need JSON or Arrow (CSV/ECSV: 406).\n\n"
         "The example of each batch route: the calculation's fictional system, and a copy with an input out of its "
         "domain, answered in its place.")
TABLES = {media.ARROW: {"schema": _ref("ArrowStream")}, media.CSV: {"schema": TEXT}, media.ECSV: {"schema": TEXT}}
COMPONENTS["ArrowStream"] = {"type": "string", "format": "binary", "contentMediaType": media.ARROW}


def _batch_path(calc: Calculation, ex: dict) -> dict:
    key = _key(calc)
    return {"post": {
        "operationId": f"batch_{key}",
        "summary": f"{calc.title}: many systems",
        "tags": ["batch"],
        "parameters": [{"$ref": "#/components/parameters/options"}, {"$ref": "#/components/parameters/keep"}],
        "requestBody": {"required": True, "content": {
            media.JSON: {"schema": _ref(f"{key}_batch_request"), "example": ex["batch_request"]}, **TABLES}},
        "responses": {
            "200": {"description": "one answer per system",
                    "headers": {"Content-Encoding": {"$ref": "#/components/headers/Content-Encoding"}},
                    "content": {media.JSON: {"schema": _ref(f"{key}_batch_response"),
                                             "example": ex["batch_response"]}, **TABLES}},
            **{str(code): {"$ref": f"#/components/responses/{name}"} for code, name in BATCH_RESPONSES.items()}}}}


COMPONENTS["BatchOptions"] = {
    "type": "object", "additionalProperties": False,
    "description": "the options of a batch (the members of a JSON batch body besides systems and columns)",
    "properties": {"correlations": {"type": "array", "items": _ref("Correlation")}, "uncertainty": _ref("Uncertainty"),
                   "units": _ref("Units"), "time_format": _ref("TimeFormat"), "echo": _ref("Echo"),
                   "covariance": _ref("CovarianceOption"), "budget": _ref("BudgetOption")}}


COMPONENTS["BatchRow"] = {
    "type": "object", "required": ["results"], "description": "one system's answer in a rows batch",
    "properties": {"results": {"type": "object"}, "warnings": {"type": "array", "items": _ref("Warning")},
                   "uncertainty": {**_ref("UncertaintyReport"), "description": "only what differs from the batch's"},
                   "inputs": {"type": "object", "description": "with echo"},
                   "correlation": _ref("OutputCorrelation")}}


COMPONENTS["BatchRowsAnswer"] = {
    "title": "rows", "type": "object", "required": ["calculation", "results"],
    "description": "the answer to rows: provenance, count and uncertainty once, then one entry per system",
    "properties": {"calculation": {"type": "string"}, "count": {"type": "integer", "minimum": 1},
                   "uncertainty": _ref("UncertaintyReport"), "provenance": _ref("Provenance"),
                   "results": {"type": "array", "description": "one per system, in input order",
                               "items": {"anyOf": [_ref("BatchRow"), _ref("RowError")]}}}}
COMPONENTS["BatchColumnsAnswer"] = {
    "title": "columns", "type": "object", "required": ["calculation", "count", "columns", "errors"],
    "description": "the answer to columns: one array per output over the systems, the failed systems in errors",
    "properties": {
        "calculation": {"type": "string"}, "count": {"type": "integer", "minimum": 1},
        "columns": {"type": "object", "description": "one member per output (a calculation's own schema names "
                                                      "them), and extra members (e.g. events)"},
        "errors": {"type": "array", "items": _ref("ColumnError")},
        "uncertainty": {"type": "object", "properties": {
            "method": {"description": "the batch's method, or one per system (null for a failed one) where they "
                                      "differ (an isotropic inclination is answered by Monte Carlo beside linear "
                                      "systems; their low and high are null)",
                       "oneOf": [{"type": "string"}, {"type": "array", "items": {"type": ["string", "null"]}}]},
            "rejected_fraction": {"oneOf": [{"type": "number"}, NULLABLE_NUMBERS]}}},
        "warnings": {"type": "array", "items": _ref("ColumnWarning")},
        "provenance": _ref("Provenance"),
        "correlation": _ref("ColumnsCorrelation"),
        "kept": {"type": "object", "description": "a table request's columns named in keep, as they were sent",
                 "additionalProperties": {"type": "array", "items": {"type": ["number", "string", "null"]}}}}}


COMPONENTS["BatchAnswer"] = {
    "description": "the answer to a batch: rows or columns (a calculation's own schema names the results of a row "
                   "and the columns)", "oneOf": [_ref("BatchRowsAnswer"), _ref("BatchColumnsAnswer")]}
COMPONENTS["ExtraColumn"] = {"type": "array", "items": {"type": ["object", "null"]},
                             "description": "an extra member of a columns answer (e.g. events), one entry per system"}
COMPONENTS["RowsOrColumns"] = {
    "description": "rows: systems, one request body per system (the top-level options apply to each unless it "
                   "gives its own); columns: one entry per input, every array with one entry per system. A system "
                   "(or column entry) that is not valid is answered with its error in its place; echo is for "
                   "rows (a columns answer has no place for inputs)",
    "oneOf": [{"title": "rows", "required": ["systems"]},
              {"title": "columns", "required": ["columns"], "properties": {"echo": {"const": False}}}]}


def _columns(calc: Calculation) -> dict:
    """The columns of a columns batch: one per input, named; a plain quantity's is a QuantityColumn."""
    special = {spec.name: _column_schema(spec) for spec in calc.inputs}
    special = {name: schema for name, schema in special.items() if schema != _ref("QuantityColumn")}
    d = {"type": "object", "minProperties": 1, "propertyNames": {"enum": [s.name for s in calc.inputs]}}
    if special:
        d["properties"] = special
    return {**d, "additionalProperties": _ref("QuantityColumn")}


def _batch_schemas(calc: Calculation, schemas: dict) -> None:
    """``POST /v1/batch/<name>``: rows (a list of request bodies) or columns (one array per input)."""
    key = _key(calc)
    schemas[f"{key}_batch_request"] = {
        "type": "object", "additionalProperties": False, "allOf": [_ref("RowsOrColumns")],
        "properties": {
            "systems": {"type": "array", "minItems": 1, "items": _ref(f"{key}_request")},
            "columns": _columns(calc),
            **_options(calc, batch=True)}}
    series = any(s.kind == "series" for s in calc.inputs)
    column = _ref("SeriesColumnResult" if series else "ColumnResult")
    # the outputs by name; a calculation with extra members (events) has them beside its outputs
    columns = {"additionalProperties": {"anyOf": [column, _ref("ExtraColumn")]}} if calc.extra is not None else \
        {"propertyNames": _ref(f"{key}_output"), "additionalProperties": column}
    schemas[f"{key}_batch_response"] = {"allOf": [_ref("BatchAnswer")], "properties": {
        "results": {"items": {"properties": {"results": _ref(f"{key}_results")}}}, "columns": columns}}


def _get(summary: str, schema: dict, example: Any = None, content_type: str = media.JSON, tag: str = "service") -> dict:
    content = {"schema": schema}
    if example is not None:
        content["example"] = Example(example) if isinstance(example, dict) else example
    # the service's own routes take no query parameter (400 naming one given); the pages take any
    return {"get": {"summary": summary, "tags": [tag], "responses": {
        "200": {"description": "the answer", "content": {content_type: content}},
        **(_problems(400) if tag == "service" else {})}}}


def _limits_example() -> dict:
    return {"limits": {f.name: {"value": getattr(DEFAULTS, f.name), "env": f"CALCSERVICE_{f.name.upper()}"}
                       for f in fields(Limits)}}


def _service_paths() -> dict:
    from .constants import CONSTANTS
    sb = min(calculations().values(), key=lambda c: len(json.dumps(c.as_dict())))    # the shortest declaration
    declaration = {"type": "object", "required": ["name", "path", "inputs", "outputs"]}
    declared = sb.as_dict()
    return {
        "/v1/health": _get("liveness: the worker answers",
                           {"type": "object", "required": ["status", "version"],
                            "properties": {"status": {"const": "ok"}, "version": {"type": "string"}}},
                           {"status": "ok", "version": __version__}),
        "/v1/ready": _get("readiness: the registry and the spec load",
                          {"type": "object", "required": ["status"], "properties": {
                              "status": {"type": "string"}, "version": {"type": "string"},
                              "calculations": {"type": "integer"}, "spec_bytes": {"type": "integer"}}},
                          {"status": "ready", "version": __version__, "calculations": len(calculations())}),
        "/v1/constants": _get("every constant with value, unit and source",
                              {"type": "object", "required": ["constants"], "properties": {"constants": {
                                  "type": "object", "additionalProperties": {"type": "object"}}}},
                              {"constants": {k: c.as_dict() for k, c in list(CONSTANTS.items())[:2]}}),
        "/v1/limits": _get("every limit in force: its value, its environment variable and what it bounds "
                           "(LIMITS.md)",
                           {"type": "object", "required": ["limits"], "properties": {"limits": {
                               "type": "object", "additionalProperties": _ref("Limit")}}}, _limits_example()),
        "/v1/calculations": _get("every calculation: inputs, units, domains, outputs, references (the example: "
                                 "one, with its first input and output)",
                                 {"type": "object", "required": ["calculations"], "properties": {
                                     "calculations": {"type": "array", "items": declaration}}},
                                 {"calculations": [_plain({**declared, "inputs": declared["inputs"][:1],
                                                           "outputs": declared["outputs"][:1]})]}),
        "/v1/calculations/{name}": {"get": {
            "summary": "one calculation's declaration", "tags": ["service"],
            "parameters": [{"name": "name", "in": "path", "required": True,
                            "schema": {"type": "string", "enum": list(calculations())}, "example": sb.name}],
            "responses": {"200": {"description": "the declaration", "content": {media.JSON: {
                "schema": declaration, "example": _plain(sb.as_dict())}}},
                          **_problems(400, 404)}}},
        "/openapi.yaml": _get("this document", {"type": "object", "required": ["openapi", "paths"]},
                              content_type="application/yaml"),
        "/docs": _get("the reference page: every calculation with its inputs, outputs, formulas, references, "
                      "conventions and examples", {"type": "string"}, content_type="text/html", tag="pages"),
        "/": _get("the web form", {"type": "string"}, content_type="text/html", tag="pages"),
    }


def _too_large() -> Example:
    """A 413 of the service's own: more Monte Carlo draws than the limit."""
    compute, Problem = _service().compute, _service().Problem
    calc = next(iter(calculations().values()))
    try:
        compute(calc.name, {**calc.example, "uncertainty": {"method": "monte_carlo",
                                                            "samples": DEFAULTS.max_samples + 1}})
    except Problem as p:
        return _plain(p.as_dict())
    return Example(EDGE_EXAMPLES[413])


def _problem_examples() -> dict:
    """The problems the shared responses show: the edge's own, a 413 of the service's and a batch's 422."""
    calc = next(iter(calculations().values()))
    out = {f"problem_{code}": example for code, example in {**EDGE_EXAMPLES, 413: _too_large()}.items()}
    try:
        _service().compute_batch(calc.name, {"systems": [calc.example], "columns": {}})
    except _service().Problem as p:
        out["batch_422"] = _plain(p.as_dict())
    return {name: {"value": Example(value)} for name, value in out.items()}


def _shared_responses(examples: dict) -> dict:
    def response(text: str, example: str | None) -> dict:
        content = {"schema": _ref("Problem")}
        if example in examples:
            content["examples"] = {example: {"$ref": f"#/components/examples/{example}"}}
        return {"description": text, "content": {media.PROBLEM: content}}
    out = {name: response(PROBLEM_TEXT.get(code, name), f"problem_{code}") for code, name in RESPONSE_NAMES.items()}
    out.update({name: response(f"{PROBLEM_TEXT[400]}; {text}", "problem_400") for name, text in PLOT_400.items()})
    out["BatchMalformed"] = response(BATCH_400, "problem_400")
    out["BatchInvalid"] = response(BATCH_422, "batch_422")
    return out


TAGS = [
    {"name": "calculations", "description": "One system per request. Every numeric input takes the forms of "
                                            "MeasuredInput (exact, normal, asymmetric, samples) in its default unit or "
                                            "with its own. " + REFUSALS},
    {"name": "batch", "description": BATCH},
    {"name": "service", "description": "Health, readiness, constants, limits, the declarations and this document."},
    {"name": "pages", "description": "Pages for a person: the form and the reference."},
]


def build_spec() -> dict:
    paths = _service_paths()
    examples = _problem_examples()
    schemas = dict(COMPONENTS)
    for calc in calculations().values():
        key = _key(calc)
        ex = _examples(calc)
        schemas[f"{key}_output"] = {"type": "string", "enum": [o.name for o in calc.outputs]}
        schemas[f"{key}_correlations"] = _correlations(calc)
        schemas[f"{key}_request"] = request_schema(calc, schemas)
        schemas[f"{key}_results"] = _results_schema(calc)
        schemas[f"{key}_response"] = _response_schema(calc)
        _batch_schemas(calc, schemas)
        paths[calc.path] = _calculation_path(calc, ex)
        paths[f"/v1/batch/{calc.name}"] = _batch_path(calc, ex)
    return {
        "openapi": "3.1.0",
        "info": {"title": "calcservice", "version": __version__,
                 "description": "Binary-star orbital elements to physical numbers with propagated uncertainties. "
                                "Conventions: radial velocity positive when receding; omega is the primary's "
                                "argument of periastron; q = M2/M1 = K1/K2; times are Julian Dates. "
                                "Every error is an RFC 9457 problem (application/problem+json). "
                                "A person's reference: GET /docs. " + ANSWERS_NOTE},
        "tags": TAGS,
        "paths": paths,
        "components": {
            "schemas": schemas,
            "parameters": {
                "format": FORMAT,
                "options": {"name": "options", "in": "query", "required": False,
                            "description": "with a table body (Arrow, CSV, ECSV): the options of the whole batch, "
                                           "a URL-encoded JSON object with the members of a JSON body's options "
                                           "(a JSON body carries its own: with one, this parameter is a 400)",
                            "content": {media.JSON: {"schema": _ref("BatchOptions")}}},
                "keep": {"name": "keep", "in": "query", "required": False,
                         "description": "with a table body (Arrow, CSV, ECSV): columns of your own (a name, a "
                                        "catalogue number), comma-separated, carried as they are into the answer: "
                                        "first in an answer table, under kept in a JSON answer (a JSON body: 400; "
                                        "an input's column, one the table lacks or one named like an answer "
                                        "column: 422)",
                         "schema": {"type": "string", "examples": ["name,hip"]}}},
            "headers": {"Content-Encoding": {"description": "gzip when the request's Accept-Encoding asks for it",
                                             "schema": {"type": "string", "enum": ["gzip"]}}},
            "responses": _shared_responses(examples),
            "examples": examples,
        },
    }


class _Dumper(yaml.SafeDumper):
    """A YAML dumper that writes every node out in full: no anchors, no aliases."""

    def ignore_aliases(self, data) -> bool:
        return True


class Example(dict):
    """An example value: written in YAML's flow style (it reads as the JSON on the wire)."""


SHORT = 200       # a mapping or list whose JSON is this short is written on one line, in flow style


def _short(data) -> bool:
    if isinstance(data, list) and not any(isinstance(x, (dict, list)) for x in data):
        return True     # a list of names or numbers (an enum, required) reads well on a line, wrapped
    if isinstance(data, dict) and any(isinstance(v, Example) or (isinstance(v, dict) and not _short(v))
                                      for v in data.values()):
        return False    # an example starts a line of its own
    return len(json.dumps(data, default=str)) <= SHORT


_Dumper.add_representer(Example, lambda dumper, data: dumper.represent_mapping(
    "tag:yaml.org,2002:map", data.items(), flow_style=True))
_Dumper.add_representer(dict, lambda dumper, data: dumper.represent_mapping(
    "tag:yaml.org,2002:map", data.items(), flow_style=_short(data)))
_Dumper.add_representer(list, lambda dumper, data: dumper.represent_sequence(
    "tag:yaml.org,2002:seq", data, flow_style=_short(data)))


def dump_yaml(document) -> str:
    """YAML as the spec is written: short mappings and lists on one line, no anchors or aliases."""
    return yaml.dump(document, Dumper=_Dumper, sort_keys=False, allow_unicode=True, width=140)


@lru_cache(maxsize=1)
def spec_yaml() -> str:
    return dump_yaml(build_spec())


def main() -> None:
    """Write the spec to the repository's openapi.yaml: ``python -m calcservice.openapi > openapi.yaml``."""
    print(spec_yaml(), end="")


if __name__ == "__main__":
    main()
