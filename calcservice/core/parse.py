"""A request body to the engine's inputs: the wire contract parsed for N systems (N = 1 for a
single request, the systems of one engine group for a batch), in canonical units."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any, Mapping

import numpy as np
from marshmallow import ValidationError

from ..columns import meant
from ..config import Limits
from ..engine import MIN_DRAWS, EngineError, Measured, Options, correlation_matrix
from ..registry import Calculation, Input, calculations
from ..units import UnitError, factor
from .problems import Problem, invalid, too_large
from .schemas import RawQuantity, error_messages, request_schema

MJD_OFFSET = 2400000.5


@dataclass
class Parsed:
    """A request parsed and converted to canonical units, ready for the engine (N systems)."""

    calc: Calculation
    quantities: dict[str, Measured]
    statics: dict[str, Any]
    options: Options
    output_units: dict[str, str]
    time_format: str = "jd"
    series: dict[str, np.ndarray] = field(default_factory=dict)
    times: dict[str, Any] = field(default_factory=dict)     # time inputs as given (JD or MJD numbers, ISO text)
    given: frozenset = frozenset()                           # the inputs the request gave (not defaults)
    echoes: list[dict] | None = None                         # each system's echo, built when first asked for

    @cached_property
    def count(self) -> int:
        return max((len(m.value) for m in self.quantities.values()), default=1)

    def echo(self, index: int) -> dict:
        """The inputs of system ``index`` as the answer echoes them (in canonical units; times in the
        request's time format, an ISO 8601 string as given)."""
        if self.echoes is None:
            self.echoes = echo_systems(self)
        return self.echoes[index]


def find(name: str) -> Calculation:
    calcs = calculations()
    if name not in calcs:
        raise Problem(404, f"there is no calculation {name!r}; GET /v1/calculations lists them",
                      {"calculation": [f"no calculation {str(name)[:80]!r}"]})
    return calcs[name]


def echo_systems(parsed: Parsed) -> list[dict]:
    """The echo of every system's inputs: one column of entries per input, then one dict per system."""
    calc, n = parsed.calc, parsed.count
    columns: dict[str, list[dict]] = {}
    for spec in calc.inputs:
        name = spec.name
        if name in parsed.series:
            values = parsed.series[name]
            columns[name] = [{"count": int(len(values)), "unit": spec.unit}] * n
        elif name in parsed.statics and name in parsed.given:
            columns[name] = [{"value": parsed.statics[name]}] * n
        elif name in parsed.quantities:
            m = parsed.quantities[name]
            if name not in parsed.given:
                columns[name] = [{"value": spec.default, "sigma": 0.0, "unit": spec.unit, "default": True}] * n
            else:
                columns[name] = _echo_column(spec, m, n, parsed.times.get(name))
        elif spec.default_by is not None and name not in parsed.given:
            # the value the physics takes from a choice (mu of a WN wind): said, as a default is
            choice, values = spec.default_by
            if parsed.statics.get(choice) in values:
                columns[name] = [{"value": values[parsed.statics[choice]], "sigma": 0.0, "unit": spec.unit,
                                  "default": True, "default_by": choice}] * n
    return [{name: column[k] for name, column in columns.items()} for k in range(n)]


def _echo_column(spec: Input, m: Measured, n: int, given: Any = None) -> list[dict]:
    """One input's echo for each of N systems (a time as given: its number or its ISO 8601 text)."""
    if m.isotropic:
        return [{"value": "isotropic", "unit": spec.unit}] * n
    values = [given] * n if isinstance(given, str) else _per_system(m.value if given is None else given, n)
    if m.samples is not None:
        draws = int(m.samples.shape[1])
        return [{"value": v, "sigma": s, "samples": draws, "unit": spec.unit}
                for v, s in zip(values, _per_system(m.sigma, n))]
    out = []
    for v, lo, hi in zip(values, _per_system(m.sigma_minus, n), _per_system(m.sigma_plus, n)):
        if lo != hi:
            out.append({"value": v, "sigma_minus": lo, "sigma_plus": hi, "unit": spec.unit})
        else:
            out.append({"value": v, "sigma": lo, "unit": spec.unit})     # lo == hi (their mean may overflow)
    return out


def _per_system(a: np.ndarray, n: int) -> list:
    """An array over N systems (or one value for all) as a list of N numbers."""
    values = a.tolist()
    return values * n if len(values) == 1 else values


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


def parse(calc: Calculation, body: Any, limits: Limits, batch_correlations: bool = False) -> Parsed:
    """Validate a request body against the calculation's schema and convert it (``batch_correlations``: see
    :func:`build`)."""
    return build(calc, load(calc, body, limits), limits, batch_correlations)


def load(calc: Calculation, body: Any, limits: Limits, options_only: bool = False) -> dict:
    """The request body checked by the calculation's schema (forms, units, choices, options).

    ``options_only``: the body holds options (and perhaps some inputs) shared by a batch, so the
    required inputs are not asked for."""
    if not isinstance(body, dict):
        raise Problem(422, "the request body must be a JSON object", {"_body": ["must be a JSON object"]})
    try:
        # partial for the inputs only: marshmallow's partial=True would also waive the required
        # members of nested options (a correlation without "between" would then crash the service)
        names = tuple(spec.name for spec in calc.inputs) if options_only else False
        schema = request_schema(calc, limits)
        return schema.load(body, partial=names)
    except ValidationError as err:
        raise invalid(error_messages(err, tuple(schema.fields), calc.symbols)) from None


def build(calc: Calculation, data: Mapping[str, Any], limits: Limits, batch_correlations: bool = False) -> Parsed:
    """Loaded request data to canonical-unit :class:`Measured` inputs, options and output units.

    The quantities may hold N systems at once (a batch group sharing one form): the rules are
    the same for one system or many.  ``batch_correlations``: the correlations are a batch's, for all its
    systems (checked once), so that one naming an input these systems lack is no error of theirs: it has
    no effect there, and the engine says so (``correlation_without_effect``)."""
    errors = check_groups(calc, set(data))
    time_format = data.get("time_format", "jd")
    quantities: dict[str, Measured] = {}
    statics: dict[str, Any] = {}
    series: dict[str, np.ndarray] = {}
    times: dict[str, Any] = {}
    for spec in calc.inputs:
        if spec.name not in data:
            if spec.default is not None:
                if spec.kind in ("choice", "integer"):
                    statics[spec.name] = spec.default
                else:
                    quantities[spec.name] = Measured.exact(spec.default)
            continue
        raw = data[spec.name]
        if spec.kind in ("choice", "integer"):
            statics[spec.name] = raw
            continue
        m = measured(spec, raw, time_format)
        if spec.time and spec.kind == "series" and time_format == "mjd":
            # the series' times in the request's format: its calendar dates (read as JDs) as MJDs too
            times[spec.name] = np.where(raw.calendar, raw.value - MJD_OFFSET, raw.value)
        elif spec.time:
            times[spec.name] = raw.text if raw.text is not None else raw.value
        if spec.kind == "series":
            statics[spec.name] = m.value
            series[spec.name] = m.value
            continue
        quantities[spec.name] = m

    options = options_of(calc, data, quantities, limits, errors, batch_correlations)
    units = output_units(calc, data.get("units", {}), errors)
    if errors:
        raise invalid(errors)
    given = frozenset(spec.name for spec in calc.inputs if spec.name in data)
    parsed = Parsed(calc, quantities, statics, options, units, time_format, series, times, given)
    if series:
        within_series_budget([parsed], [parsed.count], limits, "ask for fewer points or fewer Monte Carlo draws")
    return parsed


def measured(spec: Input, raw: RawQuantity, time_format: str) -> Measured:
    """A parsed quantity (already in canonical units) as the engine's Measured.

    Times are dates held in the request's time format: an MJD given with ``time_format: mjd`` stays
    one (as a JD its double would keep 5e-10 d where the MJD keeps 1e-11 d), and an ISO 8601 date, read
    as a JD, becomes one (JD - 2400000.5 is exact for every JD from 1200000.25 to 4800001); the unit of
    a time applies to its sigma only.
    """
    offset = MJD_OFFSET if spec.time and time_format == "mjd" else 0.0
    value = raw.value - np.where(raw.calendar, offset, 0.0) if spec.time else raw.value
    if raw.samples is not None:
        return Measured(value, raw.sigma_minus, raw.sigma_plus, samples=raw.samples)
    return Measured(value, raw.sigma_minus, raw.sigma_plus, isotropic=raw.isotropic)


def draws_monte_carlo(parsed: Parsed) -> bool:
    """Whether the engine will draw for these inputs (asked for, or inputs that need it)."""
    qs = parsed.quantities.values()
    return parsed.options.method == "monte_carlo" or any(q.samples is not None or q.isotropic for q in qs)


def draws_per_system(parsed: Parsed) -> int:
    """The Monte Carlo draws of each system (the user's samples fix their number)."""
    lengths = [q.samples.shape[1] for q in parsed.quantities.values() if q.samples is not None]
    return lengths[0] if lengths else int(parsed.options.samples)


def evaluations(parsed: Parsed, n: int) -> int:
    """The physics evaluations one engine call makes: systems x columns x series points, where the
    columns are the nominal point and the draws (Monte Carlo) or the 4 m perturbations (linear)."""
    if draws_monte_carlo(parsed):
        columns = 1 + draws_per_system(parsed)
    else:
        columns = 1 + 4 * sum(1 for q in parsed.quantities.values() if q.uncertain)
    return n * columns * math.prod(len(v) for v in parsed.series.values())


def within_series_budget(groups: list[Parsed], counts: list[int], limits: Limits, advice: str) -> None:
    """413 before computing when the engine would hold systems x draws x points floats at once."""
    series = [(p, n) for p, n in zip(groups, counts) if p.series]
    work = sum(evaluations(p, n) for p, n in series)
    if work > limits.max_series_evaluations:
        message = f"{work} evaluations (systems x draws or perturbations x points) is over the limit: {advice}"
        raise too_large("max_series_evaluations", limits.max_series_evaluations, message,
                        dict.fromkeys(series[0][0].series, message))


def within_draw_limit(samples: int, limits: Limits) -> None:
    if samples > limits.max_samples:
        raise too_large("max_samples", limits.max_samples, f"{samples} Monte Carlo draws asked for per system",
                        {"uncertainty.samples": f"must be <= {limits.max_samples}"})


def options_of(calc: Calculation, data: Mapping[str, Any], quantities: Mapping[str, Measured], limits: Limits,
               errors: dict[str, list[str]], batch_correlations: bool = False) -> Options:
    unc = data.get("uncertainty", {})
    method = unc.get("method", "linear")        # the schema implies monte_carlo from samples or a seed
    samples = unc.get("samples", limits.default_samples)
    within_draw_limit(samples, limits)
    if "samples" in unc and samples < MIN_DRAWS:
        errors.setdefault("uncertainty.samples", []).append(
            f"must be >= {MIN_DRAWS}: fewer Monte Carlo draws give no trustworthy sigma or 68.27 % interval")
    correlations: dict[tuple[str, str], float] = {}
    for k, c in enumerate(data.get("correlations", [])):
        a, b = c["between"]
        for name in (a, b):
            if name not in quantities and not batch_correlations:
                errors.setdefault(f"correlations.{k}.between", []).append(
                    f"{name!r} is not an input given in this request")
        key = tuple(sorted((a, b)))
        if key in correlations:
            errors.setdefault(f"correlations.{k}.between", []).append(f"{a} and {b} are correlated twice")
        correlations[key] = c["rho"]
    if correlations and not errors:
        # the matrix as stated, whichever of its inputs a system gives exactly: a set no inputs can have is
        # refused alone as in a batch, not answered where an exact input happens to leave out its contradiction
        try:
            correlation_matrix(sorted({n for pair in correlations for n in pair}), correlations)
        except EngineError as e:
            errors.update(e.errors)
    return Options(method=method, samples=samples, samples_asked="samples" in unc, seed=unc.get("seed"),
                   correlations=correlations,
                   covariance=data.get("covariance", False), budget=data.get("budget", False))


def output_units(calc: Calculation, units: Mapping[str, str], errors: dict[str, list[str]]) -> dict[str, str]:
    """The output units a request asks for, each checked against its output's canonical unit."""
    out: dict[str, str] = {}
    for name, unit in units.items():
        if name not in {o.name for o in calc.outputs}:
            outputs = [o.name for o in calc.outputs]
            errors.setdefault(f"units.{name}", []).append(f"{calc.name} has no output {name!r}" + meant(name, outputs))
            continue
        if calc.output(name).logarithmic:
            errors.setdefault(f"units.{name}", []).append(
                f"{name} is the {calc.output(name).description}: it takes no unit (ask for the quantity itself)")
            continue
        try:
            factor(unit, calc.output(name).unit)      # this way round the error names the kind the output needs
            factor(calc.output(name).unit, unit)      # and the way the answer converts ('1e-320 au' is 1e320 per au)
        except UnitError as e:
            errors.setdefault(f"units.{name}", []).append(str(e))
            continue
        out[name] = unit
    return out
