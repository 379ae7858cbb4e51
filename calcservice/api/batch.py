"""Batch: many systems of one calculation in one request, as rows or as columns.

``POST /v1/batch/<calculation>`` takes either

* rows: ``{"systems": [<request body>, ...], "uncertainty": ..., "units": ..., "correlations": ...,
  "time_format": ...}``: each system is an ordinary request body; the top-level options are
  shared (a system's own option member replaces the shared one);
* columns: ``{"columns": {"period": {"value": [...], "sigma": [...], "unit": "d"}, "k1": 3.2, ...},
  <the same shared options>}``: one array per input's value and sigma (or ``sigma_minus`` and
  ``sigma_plus``), one number meaning "the same for every system", ``null`` meaning "not given for
  this system".

Both go through the registry rules of a single request.  Systems that share a *shape* (the same
inputs given, in the same form: exact, normal, asymmetric, samples of one length, isotropic; the
same choices and options) are validated as arrays and evaluated by ONE engine call over all of
them (:func:`calcservice.api.service.build` and :func:`~calcservice.engine.evaluate` take N
systems as readily as one).  A system whose form the array path does not take as it stands
(a time string, samples, its own options, a value out of its domain, a wrong type...) is parsed
on its own by the single-request parser, so its error message is exactly the one a single
request would get; the systems it leaves valid join an engine call of their shape like the rest.
A bad system never fails the batch: rows answer ``{"error": <problem>}`` in its place, columns
list it in ``errors`` with its index and put null in every column.
"""

from __future__ import annotations

import secrets
from dataclasses import dataclass, field, replace
from typing import Any, Callable

import numpy as np
from flask import Blueprint, current_app

from ..config import Limits
from ..engine import Measured, Result
from ..registry import Calculation, Input
from ..units import UnitError, factor
from .edge import json_body, json_response
from .problems import Problem, invalid
from .schemas import MEASURED_KEYS, RawQuantity, _in_domain
from .service import Parsed, _monte_carlo, _output_units, Rendering, evaluations, build, clean_array, failure, find, load, parse, provenance, run

bp = Blueprint("batch", __name__)

OPTION_KEYS = ("correlations", "uncertainty", "units", "time_format")
SIMPLE_KEYS = frozenset({"value", "sigma", "sigma_minus", "sigma_plus", "unit"})
_NUMBER_TYPES = frozenset({int, float, type(None)})
_BAD = object()

# the form of one input in one system, part of the system's shape
ABSENT, EXACT, NORMAL, ASYMMETRIC, ISOTROPIC = 0, 1, 2, 3, 4


@bp.post("/v1/batch/<name>")
def batch(name: str):
    body = json_body()
    # numpy arrays straight to the JSON encoder: no Python float per number on the way out
    return json_response(compute_batch(name, body, current_app.config["CALCSERVICE_SETTINGS"].limits, for_json=True))


def compute_batch(name: str, body: Any, limits: Limits | None = None, for_json: bool = False) -> dict:
    """A batch request (rows or columns) to its response; raises :class:`Problem` only for the
    batch as a whole (unknown calculation, malformed body, limits).  ``for_json``: the response
    goes straight to the JSON encoder (:func:`.edge.dumps`), so the columns of a columns response
    are numpy float arrays, NaN where a system has no value (null in JSON), and the rows of a rows
    response may be pre-encoded fragments; otherwise plain dicts and lists with None, as the JSON reads."""
    calc = find(name)
    limits = limits or Limits()
    if not isinstance(body, dict):
        raise Problem(422, "the batch body must be a JSON object", {"_body": ["must be a JSON object"]})
    if ("systems" in body) == ("columns" in body):
        raise Problem(422, 'give either "systems" (a list of request bodies) or "columns" (one array per input)',
                      {"systems": ["give systems or columns"], "columns": ["give systems or columns"]})
    unknown = set(body) - {"systems", "columns", *OPTION_KEYS}
    if unknown:
        raise invalid({k: ["unknown field"] for k in sorted(unknown)})
    if "systems" in body:
        return compute_rows(calc, body, limits, for_json)
    response = compute_columns(calc, body, limits)
    if not for_json:
        for entry in response["columns"].values():
            if isinstance(entry, dict):
                for key, v in entry.items():
                    if isinstance(v, np.ndarray):
                        entry[key] = clean_array(v)
        if isinstance(response["uncertainty"].get("rejected_fraction"), np.ndarray):
            response["uncertainty"]["rejected_fraction"] = clean_array(response["uncertainty"]["rejected_fraction"])
    return response


# ----------------------------------------------------------------------------- shapes and groups

@dataclass
class _Column:
    """One quantity input over N systems as given, before unit conversion (NaN: not given)."""

    value: np.ndarray
    sigma_minus: np.ndarray
    sigma_plus: np.ndarray
    factor: np.ndarray | float
    slow: np.ndarray                      # systems the array path does not take as they are
    isotropic: bool = False


@dataclass
class _Choice:
    """A choice or integer input over N systems (None: not given)."""

    values: list
    slow: np.ndarray


@dataclass
class _Group:
    rows: np.ndarray                      # indices into the batch
    parsed: Parsed | None = None
    result: Result | None = None
    problem: Problem | None = None        # the whole group's (e.g. an engine error)
    rendering: Rendering | None = None


@dataclass
class _Batch:
    n: int
    groups: list[_Group] = field(default_factory=list)
    problems: dict[int, Problem] = field(default_factory=dict)    # system index -> its problem


def _shared(calc: Calculation, body: dict, limits: Limits) -> tuple[dict, dict]:
    """The batch's shared options, raw and loaded by the request schema (422/413 for the batch)."""
    raw = {k: body[k] for k in OPTION_KEYS if k in body}
    data = load(calc, raw, limits, partial=True)
    errors: dict[str, list[str]] = {}
    _output_units(calc, data.get("units", {}), errors)
    if errors:
        raise invalid(errors)
    samples = data.get("uncertainty", {}).get("samples")
    if samples is not None and samples > limits.max_samples:
        raise Problem(413, f"{samples} Monte Carlo draws asked for; the limit is {limits.max_samples} per system",
                      {"uncertainty.samples": [f"must be <= {limits.max_samples}"]})
    return raw, data


def _floats(items: list) -> tuple[np.ndarray, np.ndarray]:
    """A list of JSON numbers (None: not given) as floats, and which entries are not numbers."""
    n = len(items)
    try:
        arr = np.array(items)              # numbers only: numpy infers float64 (or int64) itself
    except (OverflowError, TypeError, ValueError):
        arr = None
    if arr is not None and arr.shape == (n,) and arr.dtype.kind in "fi":
        arr = arr.astype(float, copy=False)
        # a JSON true or false would have been read as 1.0 or 0.0: only those entries need a look
        if not any(type(items[k]) is bool for k in np.flatnonzero((arr == 0.0) | (arr == 1.0)).tolist()):
            return arr, np.zeros(n, dtype=bool)
    if set(map(type, items)) <= _NUMBER_TYPES:       # numbers and nulls
        try:
            return np.array(items, dtype=float), np.zeros(n, dtype=bool)
        except OverflowError:
            pass
    out = np.full(n, np.nan)
    bad = np.zeros(n, dtype=bool)
    for k, v in enumerate(items):
        if v is None:
            continue
        if type(v) in (int, float):
            try:
                out[k] = float(v)
                continue
            except OverflowError:
                pass
        bad[k] = True
    return out, bad


def _unit_factors(spec: Input, units: list, limits: Limits) -> np.ndarray:
    """The factor to the canonical unit for each system's unit (NaN where it is not usable)."""
    known: dict = {None: 1.0}
    keys = [u if (u is None or (type(u) is str and len(u) <= limits.max_string_length)) else _BAD for u in units]
    for u in set(keys):
        if u in known:
            continue
        try:
            known[u] = np.nan if u is _BAD else factor(u, spec.unit)
        except UnitError:
            known[u] = np.nan
    return np.array([known[u] for u in keys], dtype=float)


def _evaluate(calc: Calculation, n: int, columns: dict[str, _Column], choices: dict[str, _Choice],
              shared: dict, row_body: Callable[[int], dict], limits: Limits) -> _Batch:
    """Validate N systems as arrays, group them by shape and run one engine call per group."""
    out = _Batch(n)
    slow = np.zeros(n, dtype=bool)
    codes = []
    converted: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
    with np.errstate(all="ignore"):
        for name, c in columns.items():
            spec = calc.input(name)
            given = ~np.isnan(c.value)
            k = c.factor
            x = c.value if spec.time else c.value * k
            sm, sp = c.sigma_minus * k, c.sigma_plus * k
            bad = c.slow | (given & ~(np.isfinite(x) & np.isfinite(sm) & np.isfinite(sp)
                                      & (c.sigma_minus >= 0) & (c.sigma_plus >= 0)))
            if not spec.time and not c.isotropic:
                bad |= given & ~spec.domain.contains(np.where(given, x, 0.0))
            if spec.required and spec.default is None:
                bad |= ~given
            slow |= bad
            converted[name] = (x, sm, sp)
            code = np.where(sm != sp, ASYMMETRIC, np.where(sm > 0, NORMAL, EXACT))
            codes.append(np.where(given, ISOTROPIC if c.isotropic else code, ABSENT))
    levels: dict[str, list] = {}
    for name, ch in choices.items():
        spec = calc.input(name)
        slow |= ch.slow
        if spec.required and spec.default is None:
            slow |= np.array([v is None for v in ch.values], dtype=bool)
        values = [None if bad else v for v, bad in zip(ch.values, ch.slow.tolist())]   # slow ones may not hash
        distinct = {v: j for j, v in enumerate(dict.fromkeys(values))}
        levels[name] = list(distinct)
        codes.append(np.array([distinct[v] for v in values]))

    fast = np.flatnonzero(~slow)
    if fast.size:
        keys = np.stack(codes + [np.zeros(n, dtype=int)], axis=1)[fast]
        # one integer per shape (mixed radix): a sort of integers, not of rows of codes
        radix = keys.max(axis=0) + 1
        if float(np.prod(radix.astype(float))) < 2.0**62:
            flat = np.zeros(len(fast), dtype=np.int64)
            for j in range(keys.shape[1]):
                flat = flat * int(radix[j]) + keys[:, j]
        else:
            flat = np.unique(keys, axis=0, return_inverse=True)[1].reshape(-1)
        if (flat == flat[0]).all():                     # the usual catalogue: one shape
            shapes, order, bounds = keys[:1], np.arange(len(fast)), np.array([0, len(fast)])
        else:
            _, first, inverse = np.unique(flat, return_index=True, return_inverse=True)
            shapes = keys[first]
            order = np.argsort(inverse, kind="stable")
            bounds = np.searchsorted(inverse[order], np.arange(len(shapes) + 1))
        names = list(columns)
        for g, shape in enumerate(shapes):
            rows = fast[order[bounds[g]:bounds[g + 1]]]
            data = dict(shared)
            for j, name in enumerate(names):
                if shape[j] == ABSENT:
                    continue
                x, sm, sp = converted[name]
                if shape[j] == ISOTROPIC:
                    z = np.zeros(len(rows))
                    data[name] = RawQuantity(np.full(len(rows), 90.0), z, z, isotropic=True)
                else:
                    data[name] = RawQuantity(x[rows], sm[rows], sp[rows])
            for j, name in enumerate(choices, start=len(names)):
                value = levels[name][shape[j]]
                if value is not None:
                    data[name] = value
            group = _Group(rows)
            try:
                group.parsed = build(calc, data, limits)
            except Problem as p:
                group.problem = p
            out.groups.append(group)

    # the systems the array path left to the single-request parser, then grouped by shape alike
    alike: dict[tuple, list[tuple[int, Parsed]]] = {}
    for i in np.flatnonzero(slow).tolist():
        try:
            parsed = parse(calc, row_body(i), limits)
        except Problem as p:
            out.problems[i] = p
            continue
        alike.setdefault(_signature(parsed), []).append((i, parsed))
    for members in alike.values():
        out.groups.append(_Group(np.array([i for i, _ in members]), parsed=_stack([p for _, p in members])))

    _check_budget(out.groups, limits)
    seed = None
    for g, group in enumerate(out.groups):
        if group.problem is None:
            options = group.parsed.options
            if options.seed is None and _monte_carlo(group.parsed):
                # one seed for the whole batch, reported with every result: the batch can be re-run
                seed = secrets.randbelow(2**31) if seed is None else seed
                group.parsed.options = replace(options, seed=seed)
            try:
                group.result = run(calc, group.parsed)
            except Problem as p:
                group.problem = p
        if group.problem is not None:
            out.problems.update(dict.fromkeys(group.rows.tolist(), group.problem))
        else:
            for k in group.result.failed:
                out.problems[int(group.rows[k])] = failure(group.result, k)
    return out


def _check_budget(groups: list[_Group], limits: Limits) -> None:
    """413 before any work when the batch's Monte Carlo draws (systems x samples) exceed the budget."""
    draws = 0
    for group in groups:
        if group.problem is None and _monte_carlo(group.parsed):
            lengths = [q.samples.shape[1] for q in group.parsed.quantities.values() if q.samples is not None]
            draws += len(group.rows) * (lengths[0] if lengths else group.parsed.options.samples)
    if draws > limits.max_batch_draws:
        raise Problem(413, f"the batch asks for {draws} Monte Carlo draws (systems x samples); the limit is "
                           f"{limits.max_batch_draws}: send fewer systems or samples per request",
                      {"uncertainty.samples": [f"systems x samples must be <= {limits.max_batch_draws}"]})
    # series (e.g. ephemeris times): each system passed the per-request limit, the batch must too
    series = [g for g in groups if g.problem is None and g.parsed.series]
    work = sum(evaluations(g.parsed, len(g.rows)) for g in series)
    if work > limits.max_series_evaluations:
        message = (f"{work} evaluations (systems x draws or perturbations x points) is over the limit of "
                   f"{limits.max_series_evaluations}: send fewer systems, points or Monte Carlo draws per batch")
        raise Problem(413, message + " (CALCSERVICE_MAX_SERIES_EVALUATIONS)",
                      {name: [message] for name in series[0].parsed.series})


def _form(q: Measured) -> int:
    if q.isotropic:
        return ISOTROPIC
    if np.any(q.sigma_minus != q.sigma_plus):
        return ASYMMETRIC
    return NORMAL if np.any(q.sigma_plus > 0) else EXACT


def _frozen(v):
    return (v.shape, v.tobytes()) if isinstance(v, np.ndarray) else v


def _signature(p: Parsed) -> tuple:
    """What must be equal for systems parsed one by one to share an engine call."""
    o = p.options
    return (tuple((name, None if q.samples is None else q.samples.shape[1], _form(q))
                  for name, q in p.quantities.items()),
            tuple((k, _frozen(v)) for k, v in p.statics.items()),
            o.method, o.samples, o.seed, tuple(sorted(o.correlations.items())), tuple(sorted(p.output_units.items())))


def _stack(members: list[Parsed]) -> Parsed:
    """Systems parsed one by one (one form) as one Parsed over all of them."""
    first = members[0]
    if len(members) == 1:
        return first
    quantities = {}
    for name, q in first.quantities.items():
        qs = [m.quantities[name] for m in members]
        samples = None if q.samples is None else np.concatenate([m.samples for m in qs], axis=0)
        quantities[name] = Measured(np.concatenate([m.value for m in qs]),
                                    np.concatenate([m.sigma_minus for m in qs]),
                                    np.concatenate([m.sigma_plus for m in qs]), samples=samples,
                                    isotropic=q.isotropic)
    stacked = Parsed(quantities, first.statics, first.options, first.output_units, first.echo, first.series,
                     time_format=first.time_format)
    stacked.echo_rows = [m.echo for m in members]
    return stacked


def _rendering(calc: Calculation, group: _Group, encoded: bool = False) -> Rendering:
    if group.rendering is None:
        group.rendering = Rendering(calc, group.parsed, group.result, encoded)
    return group.rendering


# ----------------------------------------------------------------------------- rows

def compute_rows(calc: Calculation, body: dict, limits: Limits, encoded: bool = False) -> dict:
    """``{"systems": [...]}`` to ``{"results": [...]}``: each a full single response or ``{"error": ...}``
    (with ``encoded``, a response may be a pre-encoded fragment of the same JSON)."""
    systems = body["systems"]
    if not isinstance(systems, list) or not systems:
        raise invalid({"systems": ["must be a non-empty list of request bodies"]})
    if len(systems) > limits.max_batch_rows:
        raise Problem(413, f"{len(systems)} systems in one batch; the limit is {limits.max_batch_rows}",
                      {"systems": [f"must hold at most {limits.max_batch_rows} systems"]})
    raw_shared, shared = _shared(calc, body, limits)
    n = len(systems)
    quantity = [s.name for s in calc.inputs if s.kind == "quantity"]
    choice = [s.name for s in calc.inputs if s.kind in ("choice", "integer")]
    is_choice = frozenset(choice)
    fast_keys = frozenset(quantity) | is_choice
    values = {nm: [None] * n for nm in quantity}
    minus = {nm: [0.0] * n for nm in quantity}
    plus = {nm: [0.0] * n for nm in quantity}
    units = {nm: [None] * n for nm in quantity}
    chosen = {nm: [None] * n for nm in choice}
    slow = np.zeros(n, dtype=bool)

    # gather the systems' JSON into columns: the only per-system Python work before the arrays
    slots = {nm: (values[nm], minus[nm], plus[nm], units[nm]) for nm in quantity}
    for i, row in enumerate(systems):
        if type(row) is not dict or not row.keys() <= fast_keys:
            slow[i] = True
            continue
        for name, v in row.items():
            if name in is_choice:
                chosen[name][i] = v
                continue
            t = type(v)
            value_of, minus_of, plus_of, unit_of = slots[name]
            if t is float or t is int:
                value_of[i] = v
            elif t is dict and v.keys() <= SIMPLE_KEYS and v.get("value") is not None:
                value_of[i] = v["value"]
                if "sigma" in v:
                    if "sigma_minus" in v or "sigma_plus" in v:
                        slow[i] = True
                        break
                    minus_of[i] = plus_of[i] = v["sigma"]
                elif "sigma_minus" in v or "sigma_plus" in v:
                    minus_of[i] = v.get("sigma_minus")
                    plus_of[i] = v.get("sigma_plus")
                unit_of[i] = v.get("unit")
            else:
                slow[i] = True
                break

    columns = {}
    for name in quantity:
        spec = calc.input(name)
        value, bad_value = _floats(values[name])
        sm, bad_minus = _floats(minus[name])
        sp, bad_plus = _floats(plus[name])
        k = _unit_factors(spec, units[name], limits)
        bad = slow | bad_value | bad_minus | bad_plus | ~np.isfinite(k)
        columns[name] = _Column(value, sm, sp, k, bad)
    choices = {name: _Choice(chosen[name], slow | _bad_choices(calc.input(name), chosen[name]))
               for name in choice}

    def row_body(i: int) -> dict:
        row = systems[i]
        return {**raw_shared, **row} if isinstance(row, dict) else row

    done = _evaluate(calc, n, columns, choices, shared, row_body, limits)
    results: list = [None] * n
    for i, problem in done.problems.items():
        results[i] = {"error": problem.as_dict()}
    for group in done.groups:
        if group.problem is None:
            rendering = _rendering(calc, group, encoded)
            rows = rendering.fragments() if encoded else None
            for k, i in enumerate(group.rows.tolist()):
                if results[i] is None:
                    results[i] = rows[k] if rows is not None else rendering.row(k)
    return {"calculation": calc.name, "results": results}


def _bad_choices(spec: Input, values: list) -> np.ndarray:
    """Systems whose choice (or integer) the array path does not take as it stands."""
    if spec.kind == "choice":
        ok = {None, *spec.choices}
        return np.array([not (v is None or (type(v) is str and v in ok)) for v in values], dtype=bool)
    out = np.zeros(len(values), dtype=bool)
    for k, v in enumerate(values):
        if v is not None and (type(v) is not int or abs(v) > 2**53 or not _in_domain(spec.domain, float(v))):
            out[k] = True
    return out


# ----------------------------------------------------------------------------- columns

def _column_length(name: str, raw) -> int | None:
    if isinstance(raw, list):
        return len(raw)
    if isinstance(raw, dict):
        lengths = {len(v) for key, v in raw.items() if key != "unit" and isinstance(v, list)}
        if len(lengths) > 1:
            raise invalid({f"columns.{name}": ["its arrays have different lengths"]})
        return lengths.pop() if lengths else None
    return None


def compute_columns(calc: Calculation, body: dict, limits: Limits) -> dict:
    """``{"columns": {...}}`` to ``{"columns": {output: {"value": [...], ...}}, "errors": [...]}``."""
    given = body["columns"]
    if not isinstance(given, dict) or not given:
        raise invalid({"columns": ["must be an object with one member per input"]})
    unknown = [k for k in given if k not in {s.name for s in calc.inputs}]
    if unknown:
        raise invalid({f"columns.{k}": [f"{calc.name} has no input {k!r}"] for k in unknown})
    lengths = {}
    for name, raw in given.items():
        if calc.input(name).kind != "series":
            length = _column_length(name, raw)
            if length is not None:
                lengths[name] = length
    if len(set(lengths.values())) > 1:
        raise invalid({f"columns.{k}": [f"has {v} entries; every column must have the same length "
                                        f"(or be one value for all)"] for k, v in lengths.items()})
    n = next(iter(lengths.values()), 1)
    if n < 1:
        raise invalid({"columns": ["the columns are empty"]})
    if n > limits.max_batch_rows:
        raise Problem(413, f"{n} systems in one batch; the limit is {limits.max_batch_rows}",
                      {"columns": [f"must hold at most {limits.max_batch_rows} systems"]})
    missing = [s.name for s in calc.inputs if s.required and s.default is None and s.name not in given]
    if missing:
        raise invalid({f"columns.{k}": ["is required"] for k in missing})
    raw_shared, shared = _shared(calc, body, limits)

    columns: dict[str, _Column] = {}
    choices: dict[str, _Choice] = {}
    views: dict[str, Callable[[int], Any]] = {}
    for spec in calc.inputs:
        if spec.name not in given:
            if spec.kind == "quantity":
                nan = np.full(n, np.nan)
                columns[spec.name] = _Column(nan, np.zeros(n), np.zeros(n), 1.0, np.zeros(n, dtype=bool))
            elif spec.kind in ("choice", "integer"):
                choices[spec.name] = _Choice([None] * n, np.zeros(n, dtype=bool))
            continue
        raw = given[spec.name]
        if spec.kind == "series":
            shared.update(load(calc, {spec.name: raw}, limits, partial=True))
            raw_shared[spec.name] = raw
        elif spec.kind in ("choice", "integer"):
            values = raw if isinstance(raw, list) else [raw] * n
            choices[spec.name] = _Choice(values, _bad_choices(spec, values))
            views[spec.name] = (lambda v: lambda i: v[i])(values)
        else:
            columns[spec.name], views[spec.name] = _quantity_column(spec, raw, n, limits)

    def row_body(i: int) -> dict:
        row = dict(raw_shared)
        for name, view in views.items():
            v = view(i)
            if v is not None:
                row[name] = v
        return row

    done = _evaluate(calc, n, columns, choices, shared, row_body, limits)
    return _columns_response(calc, done)


def _quantity_column(spec: Input, raw, n: int, limits: Limits) -> tuple[_Column, Callable[[int], Any]]:
    """One quantity's column, checked as arrays, and the view of one system's entry (for the
    single-request parser, which words the errors)."""
    zeros = np.zeros(n)
    where = f"columns.{spec.name}"
    if type(raw) in (int, float):
        value, bad = _floats([raw] * n)
        return _Column(value, zeros, zeros, 1.0, bad), lambda i: raw
    if isinstance(raw, list):
        value, bad = _floats(raw)
        return _Column(value, zeros, zeros, 1.0, bad), lambda i: raw[i]
    if isinstance(raw, str) and spec.isotropic and raw == "isotropic":
        return _Column(np.full(n, 90.0), zeros, zeros, 1.0, np.zeros(n, dtype=bool), isotropic=True), lambda i: raw
    if not isinstance(raw, (dict, str)):
        raise invalid({where: ["must be a number, an array with one entry per system, or an object of value and "
                               "sigma arrays"]})
    if not isinstance(raw, dict):
        # e.g. one ISO 8601 time for every system: the single-request parser takes (or words) it
        return _Column(np.full(n, np.nan), zeros, zeros, 1.0, np.ones(n, dtype=bool)), lambda i: raw
    unknown = set(raw) - MEASURED_KEYS
    if unknown:
        raise invalid({where: [f"unknown key(s) {', '.join(sorted(map(str, unknown)))}"]})
    unit = raw.get("unit")
    if unit is not None and (not isinstance(unit, str) or len(unit) > limits.max_string_length):
        raise invalid({f"{where}.unit": ["must be a unit string"]})
    try:
        k = 1.0 if unit is None else factor(unit, spec.unit)
    except UnitError as e:
        raise invalid({f"{where}.unit": [str(e)]}) from None
    if "sigma" in raw and ("sigma_minus" in raw or "sigma_plus" in raw):
        raise invalid({where: ["give either sigma or sigma_minus and sigma_plus, not both"]})
    if ("sigma_minus" in raw) != ("sigma_plus" in raw):
        raise invalid({where: ["sigma_minus and sigma_plus go together"]})

    def member(key):
        """One member as floats over the systems, the entries it cannot take, and entry i's JSON."""
        v = raw[key]
        if isinstance(v, list):
            return (*_floats(v), v.__getitem__)
        if type(v) in (int, float) and abs(v) < 1e308:   # one number for every system: no list built
            return np.full(n, float(v)), np.zeros(n, dtype=bool), lambda i: v
        return np.full(n, np.nan), np.ones(n, dtype=bool), lambda i: v

    if "samples" in raw:
        samples = raw["samples"]
        if set(raw) - {"samples", "unit"} or not isinstance(samples, list) or len(samples) != n \
                or not all(isinstance(s, list) for s in samples):
            raise invalid({where: ["samples must be a list of one list of draws per system, without value or "
                                   "sigma"]})
        view = (lambda i: {"samples": samples[i], "unit": unit}) if unit is not None else \
            (lambda i: {"samples": samples[i]})
        return _Column(np.full(n, np.nan), zeros, zeros, k, np.ones(n, dtype=bool)), view
    if "value" not in raw:
        raise invalid({where: ["value is missing"]})
    for key in ("value", "sigma", "sigma_minus", "sigma_plus"):
        if key in raw and (type(raw[key]) not in (int, float, str, list)):
            raise invalid({f"{where}.{key}": ["must be a number or an array with one entry per system"]})
    value, bad, value_at = member("value")
    keys = [key for key in ("sigma", "sigma_minus", "sigma_plus") if key in raw]
    # a null sigma in one system means none given; a null value means the input is not given there
    members = {key: member(key) for key in keys}
    sigmas = {key: (a, b) for key, (a, b, _) in members.items()}
    for _, b in sigmas.values():
        bad |= b
    if "sigma" in sigmas:
        sm = sp = np.nan_to_num(sigmas["sigma"][0], nan=0.0)
    elif sigmas:
        sm = np.nan_to_num(sigmas["sigma_minus"][0], nan=0.0)
        sp = np.nan_to_num(sigmas["sigma_plus"][0], nan=0.0)
        one_sided = np.isnan(sigmas["sigma_minus"][0]) != np.isnan(sigmas["sigma_plus"][0])
        bad |= one_sided
    else:
        sm = sp = zeros
    absent = np.isnan(value) & ~bad
    for key in keys:
        bad |= absent & ~np.isnan(sigmas[key][0])       # a sigma without a value: the parser says so

    def view(i):
        entry = {"value": value_at(i)}
        for key in keys:
            if members[key][2](i) is not None:
                entry[key] = members[key][2](i)
        if unit is not None:
            entry["unit"] = unit
        return None if entry["value"] is None and len(entry) == 1 + (unit is not None) else entry

    return _Column(value, sm, sp, k, bad), view


def _columns_response(calc: Calculation, done: _Batch) -> dict:
    """The columns response; its arrays are numpy float arrays, NaN where a system has no value
    (written as null in JSON by :func:`calcservice.api.edge.dumps`)."""
    n = done.n
    ok = [g for g in done.groups if g.problem is None]
    units = ok[0].parsed.output_units if ok else {}
    present = [o for o in calc.outputs if any(o.name in g.result.outputs for g in ok)]
    # one engine call for the whole catalogue, in order (the usual case): its arrays need no scatter
    whole = ok[0] if len(ok) == 1 and len(ok[0].rows) == n and (ok[0].rows == np.arange(n)).all() else None
    columns: dict[str, dict] = {}
    for o in present:
        unit = units.get(o.name, o.unit)
        k = factor(o.unit, unit) if unit != o.unit else 1.0
        keys = dict.fromkeys(key for g in ok if o.name in g.result.outputs for key in g.result.outputs[o.name])
        trail = next(g.result.outputs[o.name]["value"].shape[1:] for g in ok if o.name in g.result.outputs)
        entry: dict[str, Any] = {}
        for key in keys:
            if whole is not None and o.name in whole.result.outputs:
                full = np.array(whole.result.outputs[o.name][key], dtype=float)      # every system, in order
            else:
                full = np.full((n,) + trail, np.nan)
                for g in ok:
                    if o.name in g.result.outputs:
                        full[g.rows] = g.result.outputs[o.name][key]
            entry[key] = full * k if k != 1.0 else full
        columns[o.name] = {"value": entry.pop("value"), **entry, "unit": unit}

    failed = np.zeros(n, dtype=bool)
    failed[list(done.problems)] = True
    for entry in columns.values():
        for key, arr in entry.items():
            if key != "unit":
                arr[failed] = np.nan            # numpy arrays: the JSON encoder writes NaN as null
                if arr.ndim > 1 and done.problems:
                    # a failed system's series is null, not a list of nulls
                    values = clean_array(arr)
                    for i in done.problems:
                        values[i] = None
                    entry[key] = values

    extras: dict[str, list] = {}
    warned: dict[tuple[str, str], np.ndarray] = {}
    seeds, samples = set(), set()
    rejected = np.full(n, np.nan)
    for g in ok:
        rows = g.rows
        if calc.extra is not None:
            per_system = calc.extra(g.parsed.quantities, g.parsed.statics, g.parsed.options,
                                    time_format=g.parsed.time_format) or []
            for k, i in enumerate(rows.tolist()):
                if i not in done.problems and k < len(per_system):
                    for key, v in per_system[k].items():
                        extras.setdefault(key, [None] * n)[i] = v
        for w in g.result.warnings:
            mask = np.ones(len(rows), dtype=bool) if w.where is None else \
                np.resize(np.asarray(w.where, dtype=bool).reshape(-1), len(rows))
            hit = rows[mask]
            hit = hit[~failed[hit]]
            if len(hit):
                key = (w.code, w.message)
                warned.setdefault(key, np.zeros(n, dtype=bool))[hit] = True
        if g.result.method == "monte_carlo":
            seeds.add(g.result.seed)
            samples.add(g.result.samples)
            rejected[rows] = g.result.rejected_fraction
    rejected[failed] = np.nan
    answered = np.zeros(n, dtype=bool)
    for g in ok:
        answered[g.rows] = True
    answered &= ~failed
    methods = {g.result.method for g in ok if answered[g.rows].any()}
    if len(methods) == 1:
        uncertainty: dict[str, Any] = {"method": methods.pop()}
    else:                                       # a method per system (None where none answered)
        method = np.full(n, None, dtype=object)
        for g in ok:
            method[g.rows] = g.result.method
        method[~answered] = None
        uncertainty = {"method": method.tolist()}
    if seeds:
        uncertainty["samples"] = samples.pop() if len(samples) == 1 else sorted(samples)
        uncertainty["seed"] = seeds.pop() if len(seeds) == 1 else sorted(seeds)
        uncertainty["rejected_fraction"] = rejected
    response = {
        "calculation": calc.name,
        "count": n,
        "columns": {**columns, **extras},
        "errors": [{"index": i, **done.problems[i].as_dict()} for i in sorted(done.problems)],
        "uncertainty": uncertainty,
        "warnings": [{"code": code, "message": message, "rows": np.flatnonzero(rows).tolist()}
                     for (code, message), rows in warned.items()],
        "provenance": provenance(calc),
    }
    return response
