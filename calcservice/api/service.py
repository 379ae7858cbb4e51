"""The calculation service without HTTP: request dict in, response dict out.

The Flask edge, the command line and the library all come through here, so a
calculation behaves the same everywhere.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np
from marshmallow import ValidationError

from .. import __version__
from ..config import Limits
from ..constants import constants_used
from ..engine import EngineError, Measured, Options, Result, evaluate
from ..registry import Calculation, calculations
from ..units import UnitError, factor
from .problems import Problem, invalid
from .schemas import RawQuantity, error_messages, request_schema

MJD_OFFSET = 2400000.5


@dataclass
class Parsed:
    """A request parsed and converted to canonical units, ready for the engine."""

    quantities: dict[str, Measured]
    statics: dict[str, Any]
    options: Options
    output_units: dict[str, str]
    echo: dict[str, dict]
    series: dict[str, np.ndarray] = field(default_factory=dict)


def find(name: str) -> Calculation:
    calcs = calculations()
    if name not in calcs:
        raise Problem(404, f"there is no calculation {name!r}; GET /v1/calculations lists them")
    return calcs[name]


def _convert(spec, raw: RawQuantity, time_format: str) -> tuple[Measured, dict]:
    """A parsed quantity (already in canonical units) as the engine's Measured, and its echo.

    Times are dates: an MJD given with ``time_format: mjd`` becomes a JD here; the unit
    of a time applies to its sigma only.
    """
    offset = MJD_OFFSET if spec.time and time_format == "mjd" else 0.0
    value = raw.value + np.where(raw.calendar, 0.0, offset) if spec.time else raw.value
    if raw.samples is not None:
        m = Measured(value, raw.sigma_minus, raw.sigma_plus, samples=raw.samples + offset)
    else:
        m = Measured(value, raw.sigma_minus, raw.sigma_plus, isotropic=raw.isotropic)
    return m, _echo(spec, m)


def _echo(spec, m: Measured) -> dict:
    if m.isotropic:
        return {"value": "isotropic", "unit": spec.unit}
    d: dict[str, Any] = {"value": float(m.value[0])}
    if m.samples is not None:
        d.update(sigma=float(m.sigma[0]), samples=int(m.samples.shape[1]))
    elif m.asymmetric:
        d.update(sigma_minus=float(m.sigma_minus[0]), sigma_plus=float(m.sigma_plus[0]))
    else:
        d["sigma"] = float(m.sigma[0])
    d["unit"] = spec.unit
    return d


def check_groups(calc: Calculation, given: set[str]) -> dict[str, list[str]]:
    """Exactly-one-of and at-most-one-of groups of the declaration."""
    errors: dict[str, list[str]] = {}
    for group in calc.exclusive:
        present = [g for g in group if g in given]
        if len(present) != 1:
            msg = f"give exactly one of {', '.join(group)}" + (f" (got {len(present)})" if present else "")
            for g in (present or group):
                errors.setdefault(g, []).append(msg)
    for group in calc.at_most_one:
        present = [g for g in group if g in given]
        if len(present) > 1:
            for g in present:
                errors.setdefault(g, []).append(f"give at most one of {', '.join(group)}")
    return errors


def parse(calc: Calculation, body: Any, limits: Limits) -> Parsed:
    """Validate a request body against the calculation's schema and convert it."""
    if not isinstance(body, dict):
        raise Problem(422, "the request body must be a JSON object", {"_body": ["must be a JSON object"]})
    try:
        data = request_schema(calc, limits).load(body)
    except ValidationError as err:
        raise invalid(error_messages(err)) from None
    errors = check_groups(calc, set(data))
    time_format = data.get("time_format", "jd")
    quantities: dict[str, Measured] = {}
    statics: dict[str, Any] = {}
    echo: dict[str, dict] = {}
    series: dict[str, np.ndarray] = {}
    for spec in calc.inputs:
        if spec.name not in data:
            if spec.default is not None:
                if spec.kind in ("choice", "integer"):
                    statics[spec.name] = spec.default
                else:
                    quantities[spec.name] = Measured.exact(spec.default)
                    echo[spec.name] = {"value": spec.default, "sigma": 0.0, "unit": spec.unit, "default": True}
            continue
        raw = data[spec.name]
        if spec.kind in ("choice", "integer"):
            statics[spec.name] = raw
            echo[spec.name] = {"value": raw}
            continue
        m, e = _convert(spec, raw, time_format)
        if spec.kind == "series":
            statics[spec.name] = m.value
            series[spec.name] = m.value
            echo[spec.name] = {"count": int(len(m.value)), "unit": spec.unit}
            continue
        quantities[spec.name] = m
        echo[spec.name] = e

    options = _options(calc, data, quantities, limits, errors)
    units = _output_units(calc, data.get("units", {}), errors)
    if errors:
        raise invalid(errors)
    return Parsed(quantities, statics, options, units, echo, series)


def _options(calc, data, quantities, limits: Limits, errors) -> Options:
    unc = data.get("uncertainty", {})
    method = unc.get("method", "linear").replace("-", "_")
    samples = unc.get("samples", limits.default_samples)
    if not 1 <= samples:
        errors.setdefault("uncertainty.samples", []).append("must be >= 1")
    elif samples > limits.max_samples:
        raise Problem(413, f"{samples} Monte Carlo draws asked for; the limit is {limits.max_samples} per request",
                      {"uncertainty.samples": [f"must be <= {limits.max_samples}"]})
    correlations: dict[tuple[str, str], float] = {}
    for k, c in enumerate(data.get("correlations", [])):
        a, b = c["between"]
        for name in (a, b):
            if name not in quantities:
                errors.setdefault(f"correlations.{k}.between", []).append(
                    f"{name!r} is not an input given in this request")
        key = tuple(sorted((a, b)))
        if key in correlations:
            errors.setdefault(f"correlations.{k}.between", []).append(f"{a} and {b} are correlated twice")
        correlations[key] = c["rho"]
    return Options(method=method, samples=samples, seed=unc.get("seed"), correlations=correlations)


def _output_units(calc, units: Mapping[str, str], errors) -> dict[str, str]:
    out = {}
    known = {o.name: o for o in calc.outputs}
    for name, unit in units.items():
        if name not in known:
            errors.setdefault(f"units.{name}", []).append(f"{calc.name} has no output {name!r}")
            continue
        try:
            factor(known[name].unit, unit)
        except UnitError as e:
            errors.setdefault(f"units.{name}", []).append(str(e))
            continue
        out[name] = unit
    return out


def _clean(x) -> Any:
    """JSON-safe floats: non-finite numbers become null; arrays become lists."""
    if isinstance(x, np.ndarray):
        if x.ndim == 0:
            return _clean(x.item())
        return [_clean(v) for v in x.tolist()]
    if isinstance(x, float):
        return x if math.isfinite(x) else None
    if isinstance(x, (np.floating, np.integer)):
        return _clean(x.item())
    return x


def render_outputs(calc: Calculation, result: Result, index: int, units: Mapping[str, str]) -> dict:
    """The ``results`` member for system ``index``; series outputs go under ``series``."""
    results: dict[str, Any] = {}
    series: dict[str, Any] = {}
    for name, o in result.outputs.items():
        canonical = calc.output(name).unit
        unit = units.get(name, canonical)
        k = factor(canonical, unit) if unit != canonical else 1.0
        entry = {key: _clean(arr[index] * k) for key, arr in o.items()}
        entry["unit"] = unit
        target = series if np.ndim(o["value"]) > 1 else results
        target[name] = {"value": entry.pop("value"), **entry}
    if series:
        results["series"] = series
    return results


def provenance(calc: Calculation) -> dict:
    return {
        "version": __version__,
        "calculation": calc.name,
        "formulas": {o.name: o.formula for o in calc.outputs if o.formula},
        "constants": constants_used(calc.constants),
        "references": list(calc.references),
        "conventions": dict(calc.conventions),
    }


def warnings_for(result: Result, index: int) -> list[dict]:
    out = []
    seen = set()
    for w in result.warnings:
        if w.where is not None and not bool(np.asarray(w.where).reshape(-1)[index % np.size(w.where)]):
            continue
        key = (w.code, w.message)
        if key not in seen:
            seen.add(key)
            out.append({"code": w.code, "message": w.message})
    return out


def uncertainty_for(result: Result, index: int) -> dict:
    if result.method == "linear":
        return {"method": "linear"}
    return {"method": "monte_carlo", "samples": result.samples, "seed": result.seed,
            "rejected_fraction": float(result.rejected_fraction[index])}


def compute(name: str, body: Any, limits: Limits | None = None, keep_draws: bool = False) -> dict:
    """One calculation, one system: the response of the wire contract (raises :class:`Problem`)."""
    calc = find(name)
    limits = limits or Limits()
    parsed = parse(calc, body, limits)
    parsed.options.keep_draws = keep_draws
    try:
        result = evaluate(calc, parsed.quantities, parsed.statics, parsed.options)
    except EngineError as e:
        raise invalid(e.errors, e.detail) from None
    if result.failed:
        raise invalid(result.failed[0], "the inputs are not physically consistent")
    response = respond(calc, parsed, result, 0)
    if keep_draws and result.draws is not None:
        response["_draws"] = {k: v[0] for k, v in result.draws.items()}
    return response


def respond(calc: Calculation, parsed: Parsed, result: Result, index: int, echo: dict | None = None) -> dict:
    results = render_outputs(calc, result, index, parsed.output_units)
    if "series" in results:
        for name, values in parsed.series.items():
            spec = calc.input(name)
            results["series"] = {name: {"value": _clean(values), "unit": spec.unit}, **results["series"]}
    if calc.extra is not None:
        extras = calc.extra(parsed.quantities, parsed.statics, parsed.options)
        if extras:
            results.update(extras[index])
    return {
        "calculation": calc.name,
        "results": results,
        "uncertainty": uncertainty_for(result, index),
        "inputs": echo if echo is not None else parsed.echo,
        "warnings": warnings_for(result, index),
        "provenance": provenance(calc),
    }
