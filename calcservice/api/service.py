"""The calculation service without HTTP: request dict in, response dict out.

The Flask edge, the command line and the library all come through here, so a
calculation behaves the same everywhere.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache
from typing import Any, Mapping

import numpy as np
from marshmallow import ValidationError

try:    # optional (see .edge): with it, the parts of a response that go straight to JSON unchanged
    import orjson   # are encoded once, as fragments the encoder copies
except ImportError:  # pragma: no cover
    orjson = None

from .. import __version__
from ..config import Limits
from ..constants import constants_used
from ..engine import EngineError, Measured, Options, Result, evaluate
from ..registry import Calculation, calculations
from ..units import UnitError, factor
from .edge import dumps
from .problems import Problem, invalid
from .schemas import RawQuantity, _CheckedField, error_messages, request_schema

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
    echo_rows: list[dict] | None = None       # one echo per system when N > 1 (a batch group)
    calc: Calculation | None = None           # to build echo_rows when first asked for
    time_format: str = "jd"                   # the caller's format of dates, for the dates a calculation adds

    def echo_at(self, index: int) -> dict:
        if self.echo_rows is None and self.calc is not None and index > 0:
            self.echo_rows = _echo_table(self.calc, self)
        return self.echo if self.echo_rows is None else self.echo_rows[index]


def find(name: str) -> Calculation:
    calcs = calculations()
    if name not in calcs:
        raise Problem(404, f"there is no calculation {name!r}; GET /v1/calculations lists them")
    return calcs[name]


def _convert(spec, raw: RawQuantity, time_format: str) -> tuple[Measured, dict]:
    """A parsed quantity (already in canonical units) as the engine's Measured, and its echo."""
    m = _measured(spec, raw, time_format)
    return m, _echo(spec, m)


def _measured(spec, raw: RawQuantity, time_format: str) -> Measured:
    """A parsed quantity (already in canonical units) as the engine's Measured.

    Times are dates: an MJD given with ``time_format: mjd`` becomes a JD here; the unit
    of a time applies to its sigma only.
    """
    offset = MJD_OFFSET if spec.time and time_format == "mjd" else 0.0
    value = raw.value + np.where(raw.calendar, 0.0, offset) if spec.time else raw.value
    if raw.samples is not None:
        return Measured(value, raw.sigma_minus, raw.sigma_plus, samples=raw.samples + offset)
    return Measured(value, raw.sigma_minus, raw.sigma_plus, isotropic=raw.isotropic)


def _echo(spec, m: Measured) -> dict:
    return _echo_rows(spec, m)[0]


def _echo_table(calc: Calculation, parsed: "Parsed") -> list[dict]:
    """The echo of each system of a batch group (inputs given once for all, e.g. defaults, repeat)."""
    n = max((len(m.value) for m in parsed.quantities.values()), default=1)
    columns = {name: _echo_rows(calc.input(name), m) for name, m in parsed.quantities.items()
               if len(m.value) > 1 and name in parsed.echo}
    return [{name: e if name not in columns else columns[name][k] for name, e in parsed.echo.items()}
            for k in range(n)]


def _echo_rows(spec, m: Measured, count: int | None = None) -> list[dict]:
    """The echo of a quantity for each of its N systems (the first ``count`` only, if given)."""
    k = len(m.value) if count is None else min(count, len(m.value))
    if m.isotropic:
        return [{"value": "isotropic", "unit": spec.unit} for _ in range(k)]
    if k == 1 and m.samples is None:         # one system (every single request): no array slices
        v, lo, hi = m.value.item(0), m.sigma_minus.item(0), m.sigma_plus.item(0)
        if lo != hi:
            return [{"value": v, "sigma_minus": lo, "sigma_plus": hi, "unit": spec.unit}]
        return [{"value": v, "sigma": lo, "unit": spec.unit}]
    values = m.value[:k].tolist()
    if m.samples is not None:
        draws = int(m.samples.shape[1])
        return [{"value": v, "sigma": s, "samples": draws, "unit": spec.unit}
                for v, s in zip(values, m.sigma[:k].tolist())]
    out = []
    for v, lo, hi in zip(values, m.sigma_minus[:k].tolist(), m.sigma_plus[:k].tolist()):
        if lo != hi:
            out.append({"value": v, "sigma_minus": lo, "sigma_plus": hi, "unit": spec.unit})
        else:
            out.append({"value": v, "sigma": lo, "unit": spec.unit})     # lo == hi (their mean may overflow)
    return out


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
    return build(calc, load(calc, body, limits), limits)


def load(calc: Calculation, body: Any, limits: Limits, partial: bool = False) -> dict:
    """The request body checked by the calculation's schema (forms, units, choices, options).

    ``partial`` skips the required-input checks (a batch's shared options alone)."""
    if not isinstance(body, dict):
        raise Problem(422, "the request body must be a JSON object", {"_body": ["must be a JSON object"]})
    schema = request_schema(calc, limits)
    if not partial:
        loaded = _load_fields(schema, body)
        if loaded is not None:
            return loaded
    try:
        # partial for the inputs only: marshmallow's partial=True would also waive the required
        # members of nested options (a correlation without "between" would then crash the service)
        names = tuple(spec.name for spec in calc.inputs) if partial else False
        return schema.load(body, partial=names)
    except ValidationError as err:
        raise invalid(error_messages(err)) from None


def _load_fields(schema, body: dict) -> dict | None:
    """What ``schema.load(body)`` returns, for a body it will accept, field by field with the
    schema's own fields and without the schema's per-load machinery (its error store, hooks
    and unknown-key pass: a fifth of a small request's parse).  None when anything is amiss
    (an unknown or missing key, a null, a field's error): the schema's full load then says
    what, with every message.  The request schemas have no hooks or schema validators."""
    fields = schema.load_fields
    required, direct = _field_kinds(schema)
    if not body.keys() <= fields.keys() or not required <= body.keys():
        return None
    out = {}
    try:
        for name, f in fields.items():
            if name in body:
                value = body[name]
                if value is None:
                    return None
                # for a field whose checks all live in _deserialize (no validators, no hooks),
                # _deserialize of a value that is there and not null is deserialize's whole work
                out[name] = f._deserialize(value, name, body) if name in direct else \
                    f.deserialize(value, name, body, partial=False)
    except ValidationError:
        return None
    return out


@lru_cache(maxsize=None)
def _field_kinds(schema) -> tuple[frozenset, frozenset]:
    """The required fields of a request schema, and those whose deserialize is their _deserialize."""
    fields = schema.load_fields
    return (frozenset(name for name, f in fields.items() if f.required),
            frozenset(name for name, f in fields.items() if isinstance(f, _CheckedField)
                      and not f.validators and not f.pre_load and not f.post_load))


def build(calc: Calculation, data: Mapping[str, Any], limits: Limits) -> Parsed:
    """Loaded request data to canonical-unit :class:`Measured` inputs, options and output units.

    The quantities may hold N systems at once (a batch group sharing one form): the rules are
    the same for one system or many."""
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
        m = _measured(spec, raw, time_format)
        if spec.kind == "series":
            statics[spec.name] = m.value
            series[spec.name] = m.value
            echo[spec.name] = {"count": int(len(m.value)), "unit": spec.unit}
            continue
        quantities[spec.name] = m
        echo[spec.name] = _echo_rows(spec, m, 1)[0]

    options = _options(calc, data, quantities, limits, errors)
    units = _output_units(calc, data.get("units", {}), errors)
    if errors:
        raise invalid(errors)
    parsed = Parsed(quantities, statics, options, units, echo, series, calc=calc, time_format=time_format)
    n = max((len(m.value) for m in quantities.values()), default=1)
    work = evaluations(parsed, n) if series else 0
    if work > limits.max_series_evaluations:
        # refused before computing: the engine would hold systems x draws x points floats at once
        message = (f"{work} evaluations (systems x draws or perturbations x points) is over the limit of "
                   f"{limits.max_series_evaluations}: ask for fewer points or fewer Monte Carlo draws")
        raise Problem(413, message + " (CALCSERVICE_MAX_SERIES_EVALUATIONS)", {name: [message] for name in series})
    return parsed


def _monte_carlo(parsed: Parsed) -> bool:
    qs = parsed.quantities.values()
    return parsed.options.method == "monte_carlo" or any(q.samples is not None or q.isotropic for q in qs)


def evaluations(parsed: Parsed, n: int) -> int:
    """The physics evaluations one engine call makes: systems x columns x series points, where the
    columns are the nominal point and the draws (Monte Carlo) or the 4 m perturbations (linear)."""
    qs = list(parsed.quantities.values())
    if _monte_carlo(parsed):
        lengths = [q.samples.shape[1] for q in qs if q.samples is not None]
        columns = 1 + (max(lengths) if lengths else int(parsed.options.samples))
    else:
        columns = 1 + 4 * sum(1 for q in qs if q.uncertain)
    points = math.prod(len(v) for v in parsed.series.values())
    return n * columns * points


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
    out: dict[str, str] = {}
    if not units:
        return out
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


def clean_array(a: np.ndarray) -> list:
    """An array as (nested) lists of JSON-safe floats: non-finite numbers become null."""
    if type(a) is not np.ndarray or a.dtype != np.float64:
        a = np.asarray(a, dtype=float)
    finite = np.isfinite(a)
    if finite.all():
        return a.tolist()
    obj = a.astype(object)
    obj[~finite] = None
    return obj.tolist()


@lru_cache(maxsize=4096)
def _output_factors(calc: Calculation, names: tuple[str, ...], units: tuple) -> tuple[tuple, tuple]:
    """The unit of each output as asked for (else its canonical one) and the factor to it."""
    asked = dict(units)
    out_units = tuple(asked.get(name, calc.output(name).unit) for name in names)
    factors = tuple(factor(calc.output(name).unit, unit) if unit != calc.output(name).unit else 1.0
                    for name, unit in zip(names, out_units))
    return out_units, factors


def output_table(calc: Calculation, result: Result, units: Mapping[str, str]) -> list[tuple]:
    """Each output as (name, is_series, [{"value": ..., "sigma": ..., "unit": ...} per system]) in
    the requested unit, converted and cleaned once for all systems of an engine call."""
    names = list(result.outputs)
    out_units, factors = _output_factors(calc, tuple(names), tuple(sorted(units.items())))
    members = [result.outputs[name] for name in names]
    floats = result.floats
    if floats is not None and floats[0] == tuple(names):
        # one system, linear: the engine's numbers (value and sigma of each output) as floats already
        table = []
        for name, unit, k, value, sigma in zip(names, out_units, factors, floats[1], floats[2]):
            value, sigma = value * k, sigma * k
            table.append((name, False, [{"value": value if value - value == 0 else None,      # non-finite: null
                                         "sigma": sigma if sigma - sigma == 0 else None, "unit": unit}]))
        return table
    if all(o["value"].shape == (1,) for o in members):
        # one system, no series: every number at once as plain floats, cheaper than any array operation
        numbers = iter(np.concatenate([arr for o in members for arr in o.values()]).tolist())
        table = []
        for name, unit, k, o in zip(names, out_units, factors, members):
            entry = {}
            for key in o:
                x = next(numbers) * k
                entry[key] = x if x - x == 0 else None          # non-finite: null
            entry["unit"] = unit
            table.append((name, False, [entry]))
        return table
    # one conversion and one clean per member over all outputs of one shape: a dozen outputs
    # cost a few array operations, not a few dozen
    alike: dict[tuple, list[int]] = {}
    for i, name in enumerate(names):
        o = result.outputs[name]
        alike.setdefault((np.shape(o["value"]), tuple(o)), []).append(i)
    columns: list = [None] * len(names)
    for (shape, keys), members in alike.items():
        k = np.array([factors[i] for i in members]).reshape((-1,) + (1,) * len(shape))
        cleaned = {key: clean_array(np.array([result.outputs[names[i]][key] for i in members]) * k) for key in keys}
        for pos, i in enumerate(members):
            columns[i] = {key: cleaned[key][pos] for key in keys}
    table = []
    for name, unit, o in zip(names, out_units, columns):
        keys = ["value", *(key for key in o if key != "value")]
        lists = [o[key] for key in keys]
        if keys == ["value", "sigma"]:
            entries = [{"value": v, "sigma": s, "unit": unit} for v, s in zip(*lists)]
        else:
            entries = [{**dict(zip(keys, values)), "unit": unit} for values in zip(*lists)]
        table.append((name, np.ndim(result.outputs[name]["value"]) > 1, entries))
    return table


def render_outputs(calc: Calculation, result: Result, index: int, units: Mapping[str, str],
                   table: list[tuple] | None = None) -> dict:
    """The ``results`` member for system ``index``; series outputs go under ``series``."""
    results: dict[str, Any] = {}
    series: dict[str, Any] = {}
    for name, is_series, entries in (table if table is not None else output_table(calc, result, units)):
        (series if is_series else results)[name] = entries[index]
    if series:
        results["series"] = series
    return results


def provenance(calc: Calculation) -> dict:
    """Version, formulas, constants, references and conventions of a calculation: built from the
    declaration once, copied per response (a caller may change its copy)."""
    formulas, constants, references, conventions = _provenance_parts(calc)
    return {
        "version": __version__,
        "calculation": calc.name,
        "formulas": dict(formulas),
        "constants": {k: dict(v) for k, v in constants.items()},
        "references": list(references),
        "conventions": dict(conventions),
    }


@lru_cache(maxsize=None)
def _provenance_parts(calc: Calculation) -> tuple:
    return ({o.name: o.formula for o in calc.outputs if o.formula}, constants_used(calc.constants),
            tuple(calc.references), dict(calc.conventions))


def warnings_for(result: Result, index: int, masks: list | None = None) -> list[dict]:
    """The warnings that apply to system ``index`` (``masks`` from :func:`warning_masks`, if at hand)."""
    grouped: dict[tuple[str, str], list[str]] = {}
    for k, w in enumerate(result.warnings):
        if masks is not None:
            if masks[k] is not None and not masks[k][index % len(masks[k])]:
                continue
        elif w.where is not None and not bool(np.asarray(w.where).reshape(-1)[index % np.size(w.where)]):
            continue
        subjects = grouped.setdefault((w.code, w.message), [])
        if w.subject is not None and w.subject not in subjects:
            subjects.append(w.subject)
    out = []
    for (code, message), subjects in grouped.items():
        if subjects:
            out.append({"code": code, "message": message.replace("{subject}", ", ".join(subjects)),
                        "fields": subjects})
        else:
            out.append({"code": code, "message": message})
    return out


def warning_masks(result: Result) -> list:
    """Each warning's systems as a list of booleans (None: every system)."""
    return [None if w.where is None else np.asarray(w.where, dtype=bool).reshape(-1).tolist()
            for w in result.warnings]


def uncertainty_for(result: Result, index: int) -> dict:
    if result.method == "linear":
        return {"method": "linear"}
    return {"method": "monte_carlo", "samples": result.samples, "seed": result.seed,
            "rejected_fraction": float(result.rejected_fraction[index])}


def run(calc: Calculation, parsed: Parsed) -> Result:
    """The engine on parsed inputs; an input problem it finds becomes a 422."""
    try:
        return evaluate(calc, parsed.quantities, parsed.statics, parsed.options)
    except EngineError as e:
        raise invalid(e.errors, e.detail) from None


def failure(result: Result, index: int) -> Problem | None:
    """The 422 for system ``index`` if its inputs failed a constraint or gave no finite result."""
    errors = result.failed.get(index)
    return None if errors is None else invalid(errors, "the inputs are not physically consistent")


def compute(name: str, body: Any, limits: Limits | None = None, keep_draws: bool = False,
            encoded: bool = False) -> dict:
    """One calculation, one system: the response of the wire contract (raises :class:`Problem`).

    ``encoded``: the response goes straight to the JSON encoder (its provenance may then be a
    pre-encoded fragment rather than a dict)."""
    calc = find(name)
    limits = limits or Limits()
    parsed = parse(calc, body, limits)
    parsed.options.keep_draws = keep_draws
    result = run(calc, parsed)
    problem = failure(result, 0)
    if problem is not None:
        raise problem
    response = respond(calc, parsed, result, 0, encoded=encoded)
    if keep_draws and result.draws is not None:
        response["_draws"] = {k: v[0] for k, v in result.draws.items()}
    return response


class Rendering:
    """What every system's response of one engine call shares, computed once (outputs converted
    and cleaned, warnings, extras, provenance); :meth:`row` picks one system's response.

    ``encoded``: the responses go straight to the JSON encoder (orjson), so their constant parts
    may be pre-encoded fragments, and :meth:`fragments` may give whole rows as fragments."""

    def __init__(self, calc: Calculation, parsed: Parsed, result: Result, encoded: bool = False):
        self.calc, self.parsed, self.result = calc, parsed, result
        self.encoded = encoded and orjson is not None
        self._table: list[tuple] | None = None
        self._plain = False                            # no series output (known with the table)
        self.masks = warning_masks(result)
        self.extras = (calc.extra(parsed.quantities, parsed.statics, parsed.options, time_format=parsed.time_format)
                       if calc.extra else None)
        self.series = {calc.input(name).label or name: {"value": _clean(values), "unit": calc.input(name).unit}
                       for name, values in parsed.series.items()}
        self.provenance = _provenance_fragment(calc) if self.encoded else provenance(calc)
        self._kinds: list | None = None               # per system: which set of warnings applies
        self._warnings: dict[int, list[dict]] = {}

    @property
    def table(self) -> list[tuple]:
        if self._table is None:
            self._table = output_table(self.calc, self.result, self.parsed.output_units)
            self._plain = not any(is_series for _, is_series, _ in self._table)
        return self._table

    def _kind(self, index: int) -> int | None:
        """Which distinct set of warnings applies to system ``index`` (None: one system, no sets)."""
        if self._kinds is None:
            masks = self.masks
            systems = max((len(m) for m in masks if m is not None), default=1)
            if systems == 1:
                return None
            applies = np.ones((len(masks), systems), dtype=bool)
            for k, m in enumerate(masks):
                if m is not None:
                    applies[k] = m
            self._kinds = np.unique(applies.T, axis=0, return_inverse=True)[1].reshape(-1).tolist()
        return self._kinds[index]

    def warnings(self, index: int) -> list[dict]:
        """:func:`warnings_for` system ``index``, built once per distinct set of warnings that apply
        (a catalogue's systems share a handful); systems with the same set share the entries, as
        they share the provenance."""
        if not self.masks:
            return []
        kind = self._kind(index)
        if kind is None:
            return warnings_for(self.result, index, self.masks)
        entries = self._warnings.get(kind)
        if entries is None:
            entries = self._warnings[kind] = warnings_for(self.result, index, self.masks)
        return list(entries)

    def row(self, index: int, echo: dict | None = None) -> dict:
        table = self.table
        if self._plain:                        # no series: each output's entry for this system
            results = {name: entries[index] for name, _, entries in table}
        else:
            results = render_outputs(self.calc, self.result, index, self.parsed.output_units, table)
        if "series" in results:
            results["series"] = {**self.series, **results["series"]}
        if self.extras:
            results.update(self.extras[index])
        return {
            "calculation": self.calc.name,
            "results": results,
            "uncertainty": uncertainty_for(self.result, index),
            "inputs": echo if echo is not None else self.parsed.echo_at(index),
            "warnings": self.warnings(index),
            "provenance": self.provenance,
        }

    def fragments(self) -> list | None:
        """Every system's :meth:`row` as one pre-encoded JSON fragment, the bytes the encoder would
        write for the row's dict (a test holds the two byte for byte), without building the dozens
        of small dicts per system: constant parts encoded once, each number column by orjson in
        one call.  None where this path does not apply (no encoder, one system, series or extras)."""
        result, calc = self.result, self.calc
        names = list(result.outputs)
        if not self.encoded or self.extras or not names:
            return None
        n = len(result.outputs[names[0]]["value"])
        if n < 2 or any(np.shape(o["value"]) != (n,) for o in result.outputs.values()):
            return None
        out_units, factors = _output_factors(calc, tuple(names), tuple(sorted(self.parsed.output_units.items())))
        parts = _Template()
        parts.text(b'{"calculation":' + dumps(calc.name) + b',"results":{')
        for i, (name, unit, k) in enumerate(zip(names, out_units, factors)):
            o = result.outputs[name]
            parts.text((b"," if i else b"") + dumps(name) + b":{")
            for j, key in enumerate(["value", *(key for key in o if key != "value")]):
                parts.text((b"," if j else b"") + dumps(key) + b":")
                parts.slot(_number_texts(np.multiply(o[key], k, dtype=float)))     # as output_table converts
            parts.text(b',"unit":' + dumps(unit) + b"}")
        parts.text(b'},"uncertainty":')
        if result.method == "linear":
            parts.text(dumps(uncertainty_for(result, 0)))
        else:
            head = dumps({"method": "monte_carlo", "samples": result.samples, "seed": result.seed})
            parts.text(head[:-1] + b',"rejected_fraction":')
            parts.slot(_number_texts(result.rejected_fraction))
            parts.text(b"}")
        parts.text(b',"inputs":')
        self._echo_parts(parts, n)
        parts.text(b',"warnings":')
        if not self.masks or self._kind(0) is None:          # the same warnings for every system
            parts.text(dumps(self.warnings(0)))
        else:
            encoded: dict[int, bytes] = {}
            for index, kind in enumerate(self._kinds):
                if kind not in encoded:
                    encoded[kind] = dumps(self.warnings(index))
            parts.slot([encoded[kind] for kind in self._kinds])
        parts.text(b',"provenance":' + dumps(self.provenance) + b"}")
        return [orjson.Fragment(row) for row in parts.fill(n)]

    def _echo_parts(self, parts: "_Template", n: int) -> None:
        """The ``inputs`` member of every row: a template of columns where the group's systems give
        each input in one form, else each system's echo encoded on its own."""
        parsed = self.parsed
        if parsed.echo_rows is None:
            columns = []
            for name, e in parsed.echo.items():
                m = parsed.quantities.get(name)
                if m is None or len(m.value) == 1:
                    columns.append((name, e, None))
                    continue
                if m.isotropic or m.samples is not None or not (m.sigma_minus == m.sigma_plus).all():
                    columns = None              # forms that may differ from system to system
                    break
                columns.append((name, e, m))
            if columns is not None:
                parts.text(b"{")
                for i, (name, e, m) in enumerate(columns):
                    head = (b"," if i else b"") + dumps(name) + b":"
                    if m is None:
                        parts.text(head + dumps(e))
                        continue
                    parts.text(head + b'{"value":')
                    parts.slot(_number_texts(m.value))
                    parts.text(b',"sigma":')
                    parts.slot(_number_texts(m.sigma_minus))
                    parts.text(b',"unit":' + dumps(e["unit"]) + b"}")
                parts.text(b"}")
                return
        parts.slot([dumps(parsed.echo_at(index)) for index in range(n)])


def respond(calc: Calculation, parsed: Parsed, result: Result, index: int, echo: dict | None = None,
            encoded: bool = False) -> dict:
    return Rendering(calc, parsed, result, encoded).row(index, echo)


class _Template:
    """A JSON text with slots: constant bytes and, per slot, one piece of bytes per system."""

    def __init__(self):
        self.template = b""
        self.slots: list[list[bytes]] = []

    def text(self, b: bytes) -> None:
        self.template += b.replace(b"%", b"%%")

    def slot(self, texts: list[bytes]) -> None:
        self.slots.append(texts)
        self.template += b"%s"

    def fill(self, n: int) -> list[bytes]:
        if not self.slots:
            return [self.template % ()] * n
        return [self.template % values for values in zip(*self.slots)]


def _number_texts(a: np.ndarray) -> list[bytes]:
    """Each number of a float array as the JSON encoder writes it (non-finite: null), in one call."""
    return dumps(np.ascontiguousarray(a, dtype=float))[1:-1].split(b",")


@lru_cache(maxsize=None)
def _provenance_fragment(calc: Calculation):
    """The provenance of a calculation encoded once, for the responses that go straight to JSON."""
    return orjson.Fragment(dumps(provenance(calc)))
