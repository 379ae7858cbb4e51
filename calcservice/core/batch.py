"""Batch: many systems of one calculation in one request, as rows or as columns.

A batch body holds either

* rows: ``{"systems": [<request body>, ...], <options>}``: each system an ordinary request body
  (a system's own option member replaces the batch's);
* columns: ``{"columns": {"period": {"value": [...], "sigma": [...], "unit": "d"}, "k1": 3.2, ...},
  <options>}``: one array per input's value and sigma (or ``sigma_minus`` and ``sigma_plus``), one
  number meaning "the same for every system", ``null`` meaning "not given for this system";

and the options of the whole batch (``uncertainty``, ``units``, ``correlations``, ``time_format``,
``echo``), checked once: a bad one refuses the whole batch.

Rows are gathered into columns first, so both take one path: the systems' numbers are checked as
arrays by the rules of a single request (:func:`calcservice.core.schemas.faults`), systems that share
a *shape* (the same inputs given in the same form: exact, normal, asymmetric, isotropic; the same
choices) are converted by :func:`calcservice.core.parse.build` and evaluated by ONE engine call.
A system the arrays do not take as they stand (a time string, samples, its own options, a value
that breaks a rule, a wrong type...) is parsed on its own by the single-request parser, so its
error is exactly the one a single request would get.  A bad system never fails the batch: a row
answers ``{"error": <problem>}`` in its place; columns list it in ``errors`` with null in every column.
"""

from __future__ import annotations

import secrets
from dataclasses import dataclass, field, replace
from typing import Any, Callable, Mapping

import numpy as np

from ..columns import as_doubles, column_array, correlated_columns, meant, plain_number, uncertain_parts, unit_of
from ..config import Limits
from ..engine import Measured, Result
from ..registry import Calculation, Input
from ..units import UnitError, factor
from .parse import (Parsed, build, draws_monte_carlo, draws_per_system, find, load, options_of,
                    output_units, parse, within_series_budget)
from .problems import Problem, invalid, too_large
from .render import Rendering, clean_array, in_unit, provenance, warning_mask
from .schemas import MEASURED_KEYS, RawQuantity, broken, unknown_field
from .single import failure, run

OPTION_KEYS = ("correlations", "uncertainty", "units", "time_format", "echo", "covariance", "budget")
SIMPLE_KEYS = frozenset({"value", "sigma", "sigma_minus", "sigma_plus", "unit"})
_NUMBER_TYPES = frozenset({int, float, type(None)})
_BAD = object()

# the form of one input in one system, part of the system's shape
ABSENT, EXACT, NORMAL, ASYMMETRIC, ISOTROPIC = 0, 1, 2, 3, 4


def compute_batch(name: str, body: Any, limits: Limits | None = None, for_json: bool = False,
                  series_arrays: bool = False, refused: Mapping[int, str] | None = None) -> dict:
    """A batch request (rows or columns) to its answer; raises :class:`Problem` only for the batch
    as a whole (unknown calculation, malformed body, a bad batch-wide option, limits).  ``for_json``:
    the answer goes straight to a numpy-aware encoder, so the columns of a columns answer stay numpy
    float arrays, NaN where a system has no value; otherwise lists with None, as the JSON reads.
    ``series_arrays``: a series output stays an array (systems, points), NaN in a failed system's row,
    for a table whose list column has one type whichever systems fail (JSON gives that system null).
    ``refused``: systems of a columns body that a table reader could not read (a ragged row), by index,
    with the reason; each is answered with a 422 keyed ``_row`` in place, whatever its cells hold."""
    calc = find(name)
    limits = limits or Limits()
    if not isinstance(body, dict):
        raise Problem(422, "the batch body must be a JSON object", {"_body": ["must be a JSON object"]})
    if ("systems" in body) == ("columns" in body):
        raise Problem(422, 'give either "systems" (a list of request bodies) or "columns" (one array per input)',
                      {"systems": ["give systems or columns"], "columns": ["give systems or columns"]})
    unknown = set(body) - {"systems", "columns", *OPTION_KEYS}
    if unknown:
        raise invalid({k: [unknown_field(k, ("systems", "columns", *OPTION_KEYS))] for k in sorted(unknown)})
    if "systems" in body:
        return compute_rows(calc, body, limits)
    response = compute_columns(calc, body, limits, series_arrays, refused)
    if not for_json:
        for entry in response["columns"].values():
            if isinstance(entry, dict):
                for key, v in entry.items():
                    if isinstance(v, np.ndarray):
                        entry[key] = clean_array(v)
        for terms in response.get("budget", {}).values():
            for term, shares in terms.items():
                terms[term] = clean_array(shares)
        if isinstance(response["uncertainty"].get("rejected_fraction"), np.ndarray):
            response["uncertainty"]["rejected_fraction"] = clean_array(response["uncertainty"]["rejected_fraction"])
    return response


def within_batch_rows(n: int, where: str, limits: Limits) -> None:
    if n > limits.max_batch_rows:
        raise too_large("max_batch_rows", limits.max_batch_rows, f"{n} systems in one batch",
                        {where: f"must hold at most {limits.max_batch_rows} systems"})


# ----------------------------------------------------------------------------- shapes and groups

@dataclass
class _Column:
    """One quantity input over N systems as given, before unit conversion (NaN: not given)."""

    value: np.ndarray
    sigma_minus: np.ndarray
    sigma_plus: np.ndarray
    factor: np.ndarray | float
    slow: np.ndarray                      # systems the array path does not take as they are
    isotropic: np.ndarray | None = None   # systems given as "isotropic" (random orientations; value 90 there)


@dataclass
class _Choice:
    """A choice or integer input over N systems (None: not given)."""

    values: list
    slow: np.ndarray


@dataclass
class Group:
    """Systems of one shape, evaluated by one engine call."""

    rows: np.ndarray                      # indices into the batch
    parsed: Parsed | None = None
    result: Result | None = None
    problem: Problem | None = None        # the whole group's (e.g. an engine error)


@dataclass
class Evaluated:
    """Every system of a batch: the engine groups, and the problem of each system that failed."""

    n: int
    groups: list[Group] = field(default_factory=list)
    problems: dict[int, Problem] = field(default_factory=dict)    # system index -> its problem
    seed: int | None = None                                        # the Monte Carlo seed of the batch
    # each system's form of each input (quantities: ABSENT...; choices: an index into ``levels``),
    # from which the outputs a failed system would have had are found (:func:`expected_outputs`)
    forms: dict[str, np.ndarray] = field(default_factory=dict)
    levels: dict[str, list] = field(default_factory=dict)
    shared: dict = field(default_factory=dict)


@dataclass
class Shared:
    """The options of the whole batch, checked once: as given (for a system parsed on its own) and loaded."""

    raw: dict
    data: dict
    echo: bool = False


ECHO_IN_COLUMNS = ("echo repeats each system's inputs in a rows batch ({\"systems\": [...]}); a columns batch "
                   "(a JSON columns body or a table) answers columns of outputs in the order of the columns sent, "
                   "which are the inputs (a table's own columns come back with ?keep=NAME): send systems to have "
                   "the inputs echoed, or leave echo out")


def shared_options(calc: Calculation, body: dict, limits: Limits, columns: bool = False) -> Shared:
    """The batch's options, checked once for the whole batch: a bad one is the batch's 422 (or 413).
    ``columns``: a columns batch, whose answer has no place for an echo (refused, never ignored)."""
    echo = body.get("echo", False)
    errors: dict[str, list[str]] = {}
    if type(echo) is not bool:
        errors["echo"] = ["must be true or false"]
    elif echo and columns:
        errors["echo"] = [ECHO_IN_COLUMNS]
    raw = {k: body[k] for k in OPTION_KEYS if k in body and k != "echo"}
    data = load(calc, raw, limits, options_only=True)
    output_units(calc, data.get("units", {}), errors)
    quantities = {spec.name for spec in calc.inputs if spec.kind == "quantity"}
    for k, c in enumerate(data.get("correlations", [])):
        unknown = [name for name in c["between"] if name not in quantities]
        if unknown:
            errors.setdefault(f"correlations.{k}.between", []).append(
                f"{', '.join(map(repr, unknown))} is not a measured input of {calc.name}")
    if not errors:
        # the rest as a single request states it (draws, pairs correlated twice, the matrix whole)
        options_of(calc, data, dict.fromkeys(quantities), limits, errors)
    if errors:
        raise invalid(errors)
    return Shared(raw, data, echo)


def number_column(items: list) -> tuple[np.ndarray, np.ndarray]:
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


def evaluate_groups(calc: Calculation, n: int, columns: dict[str, _Column], choices: dict[str, _Choice],
                    shared: dict, row_body: Callable[[int], dict], limits: Limits,
                    correlations: Any = None) -> Evaluated:
    """Check N systems as arrays, group them by shape and run one engine call per group.  ``correlations``:
    the batch's own (as given), which a system that lacks an input they name answers without them, warned."""
    out = Evaluated(n)
    slow = np.zeros(n, dtype=bool)
    codes = []
    converted: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
    with np.errstate(all="ignore"):
        for name, c in columns.items():
            spec = calc.input(name)
            given = ~np.isnan(c.value)
            iso = c.isotropic if c.isotropic is not None else np.zeros(n, dtype=bool)
            k = c.factor
            x = c.value if spec.time else c.value * k
            sm, sp = c.sigma_minus * k, c.sigma_plus * k
            # an isotropic system's value is a stand-in, not in the column's unit: no rule applies to it
            bad = c.slow | (given & ~iso & broken(spec, x, sm, sp))
            if spec.time:
                bad |= given & (k != 1.0)       # a date's number in a unit other than days: see MeasuredField
            if spec.required and spec.default is None:
                bad |= ~given
            slow |= bad
            converted[name] = (x, sm, sp)
            code = np.where(sm != sp, ASYMMETRIC, np.where(sm > 0, NORMAL, EXACT))
            codes.append(np.where(given, np.where(iso, ISOTROPIC, code), ABSENT))
            # given, even where unreadable: its outputs are columns of the answer all the same
            out.forms[name] = np.where(given | c.slow, EXACT, ABSENT)
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
        out.forms[name] = np.where(ch.slow, len(distinct), codes[-1])     # an unreadable choice: past the levels

    out.levels, out.shared = levels, shared
    fast = np.flatnonzero(~slow)
    every = fast.size == n
    codes = [c if every else c[fast] for c in codes]
    if fast.size and all((c == c[0]).all() for c in codes):        # the usual catalogue: one shape
        shapes, members = [[int(c[0]) for c in codes]], [fast]
    elif fast.size:
        keys = np.stack(codes + [np.zeros(len(fast), dtype=int)], axis=1)
        # one integer per shape (mixed radix): a sort of integers, not of rows of codes
        radix = keys.max(axis=0) + 1
        if float(np.prod(radix.astype(float))) < 2.0**62:
            flat = np.zeros(len(fast), dtype=np.int64)
            for j in range(keys.shape[1]):
                flat = flat * int(radix[j]) + keys[:, j]
        else:
            flat = np.unique(keys, axis=0, return_inverse=True)[1].reshape(-1)
        _, first, inverse = np.unique(flat, return_index=True, return_inverse=True)
        order = np.argsort(inverse, kind="stable")
        bounds = np.searchsorted(inverse[order], np.arange(len(first) + 1))
        shapes, members = keys[first].tolist(), [fast[order[bounds[g]:bounds[g + 1]]] for g in range(len(first))]
    else:
        shapes, members = [], []
    names = list(columns)
    for shape, rows in zip(shapes, members):
        whole = len(rows) == n                          # every system, in order: no copies
        data = dict(shared)
        for j, name in enumerate(names):
            if shape[j] == ABSENT:
                continue
            x, sm, sp = converted[name]
            if shape[j] == ISOTROPIC:
                z = np.zeros(len(rows))
                data[name] = RawQuantity(np.full(len(rows), 90.0), z, z, isotropic=True)
            else:
                data[name] = RawQuantity(x, sm, sp) if whole else RawQuantity(x[rows], sm[rows], sp[rows])
        for j, name in enumerate(choices, start=len(names)):
            value = levels[name][shape[j]]
            if value is not None:
                data[name] = value
        group = Group(rows)
        try:
            group.parsed = build(calc, data, limits, batch_correlations=True)
        except Problem as p:
            group.problem = p
        out.groups.append(group)

    # the systems the array path left to the single-request parser, then grouped by shape alike
    alike: dict[tuple, list[tuple[int, Parsed]]] = {}
    for i in np.flatnonzero(slow).tolist():
        try:
            body = row_body(i)
            # a system's own correlations must name its inputs, as a single request's must
            shared_ones = correlations is not None and isinstance(body, dict) and body.get("correlations") is correlations
            parsed = parse(calc, body, limits, batch_correlations=shared_ones)
        except Problem as p:
            out.problems[i] = p
            continue
        alike.setdefault(_signature(parsed), []).append((i, parsed))
    for members in alike.values():
        out.groups.append(Group(np.array([i for i, _ in members]), parsed=_stack([p for _, p in members])))

    within_batch_budget(out.groups, limits)
    for group in out.groups:
        if group.problem is None:
            options = group.parsed.options
            if options.seed is None and draws_monte_carlo(group.parsed):
                # one seed for the whole batch, reported once: the batch can be re-run
                out.seed = secrets.randbelow(2**31) if out.seed is None else out.seed
                group.parsed.options = replace(options, seed=out.seed)
            try:
                group.result = run(group.parsed)
            except Problem as p:
                group.problem = p
        if group.problem is not None:
            out.problems.update(dict.fromkeys(group.rows.tolist(), group.problem))
        else:
            for k in group.result.failed:
                out.problems[int(group.rows[k])] = failure(group.result, k)
    return out


def within_batch_budget(groups: list[Group], limits: Limits) -> None:
    """413 before any work when the batch's Monte Carlo draws (systems x samples) or its series
    evaluations exceed their limits (each system passed the per-request ones)."""
    ready = [g for g in groups if g.problem is None]
    draws = sum(len(g.rows) * draws_per_system(g.parsed) for g in ready if draws_monte_carlo(g.parsed))
    if draws > limits.max_batch_draws:
        raise too_large("max_batch_draws", limits.max_batch_draws,
                        f"the batch asks for {draws} Monte Carlo draws (systems x samples): send fewer systems "
                        f"or samples per request",
                        {"uncertainty.samples": f"systems x samples must be <= {limits.max_batch_draws}"})
    within_series_budget([g.parsed for g in ready], [len(g.rows) for g in ready], limits,
                         "send fewer systems, points or Monte Carlo draws per batch")


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
            tuple((k, _frozen(v)) for k, v in p.statics.items()), p.time_format, p.given,
            o.method, o.samples, o.seed, tuple(sorted(o.correlations.items())), tuple(sorted(p.output_units.items())))


def _stack(members: list[Parsed]) -> Parsed:
    """Systems parsed one by one (one form) as one Parsed over all of them, each keeping its echo."""
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
    return replace(first, quantities=quantities, echoes=[m.echo(0) for m in members])


# ----------------------------------------------------------------------------- rows

def compute_rows(calc: Calculation, body: dict, limits: Limits) -> dict:
    """``{"systems": [...]}`` to the rows answer: what the batch shares once at the top (uncertainty
    method, provenance), then per system its ``results`` and ``warnings``, its ``uncertainty`` where it
    differs from the batch's, its ``inputs`` when ``echo`` asks for them, or ``{"error": ...}``."""
    systems = body["systems"]
    if not isinstance(systems, list) or not systems:
        raise invalid({"systems": ["must be a non-empty list of request bodies"]})
    within_batch_rows(len(systems), "systems", limits)
    shared = shared_options(calc, body, limits)
    n = len(systems)
    quantity = [s.name for s in calc.inputs if s.kind == "quantity"]
    choice = [s.name for s in calc.inputs if s.kind in ("choice", "integer")]
    fast_keys = frozenset(quantity) | frozenset(choice)

    # gather the systems' JSON into columns, one pass per input and member: the only per-system
    # Python work before the arrays.  A system that is not an object of inputs is parsed on its own.
    # a member given as null is parsed on its own too, to be refused as its single request is (absent is not given)
    plain = [type(row) is dict and row.keys() <= fast_keys and None not in row.values() for row in systems]
    slow = ~np.array(plain, dtype=bool)
    rows = systems if not slow.any() else [row if ok else {} for row, ok in zip(systems, plain)]
    chosen = {name: [row.get(name) for row in rows] for name in choice}
    entries = {}
    for name in quantity:
        values, minus, plus, units, odd = quantity_entries([row.get(name) for row in rows])
        entries[name] = values, minus, plus, units
        slow |= odd

    columns = {}
    for name in quantity:
        spec = calc.input(name)
        values, minus, plus, units = entries[name]
        value, bad_value = number_column(values)
        sm, bad_minus = number_column(minus)
        sp, bad_plus = (sm, bad_minus) if plus is minus else number_column(plus)
        k = _unit_factors(spec, units, limits)
        bad = slow | bad_value | bad_minus | bad_plus | ~np.isfinite(k)
        columns[name] = _Column(value, sm, sp, k, bad)
    choices = {name: _Choice(chosen[name], slow | _bad_choices(calc.input(name), chosen[name]))
               for name in choice}

    def row_body(i: int) -> dict:
        row = systems[i]
        return {**shared.raw, **row} if isinstance(row, dict) else row

    done = evaluate_groups(calc, n, columns, choices, shared.data, row_body, limits, shared.raw.get("correlations"))
    unc = shared.data.get("uncertainty", {})
    uncertainty: dict[str, Any] = {"method": unc.get("method", "linear").replace("-", "_")}
    if uncertainty["method"] == "monte_carlo":
        uncertainty.update(samples=unc.get("samples", limits.default_samples), seed=unc.get("seed", done.seed))
    time_format = shared.data.get("time_format", "jd")
    results: list = [None] * n
    for i, problem in done.problems.items():
        results[i] = {"error": problem.as_dict()}
    for group in done.groups:
        if group.problem is None:
            rows = Rendering(group.parsed, group.result).rows(uncertainty, time_format, shared.echo)
            for i, row in zip(group.rows.tolist(), rows):
                if results[i] is None:
                    results[i] = row
    answer = {"calculation": calc.name, "count": n, "uncertainty": uncertainty}
    if time_format == "mjd":
        answer["time_format"] = "mjd"
    answer.update(provenance=provenance(calc), results=results)
    return answer


def quantity_entries(entries: list) -> tuple[list, list, list, list, np.ndarray]:
    """One quantity input over a batch's systems as given in their JSON (None: not given) to its
    values, sigmas below and above (0 where none is given) and units as lists, and which systems
    the array path does not take as they stand (an entry that is neither a number nor a plain
    object of value, sigmas and unit, or one whose sigmas contradict each other)."""
    n = len(entries)
    kinds = set(map(type, entries))
    keys = set().union(*entries) if kinds == {dict} else None        # every member name used, at C speed
    if keys is not None and keys <= SIMPLE_KEYS:
        values = [e.get("value") for e in entries]
        units = [e.get("unit") for e in entries] if "unit" in keys else [None] * n
        if "sigma_minus" not in keys and "sigma_plus" not in keys:
            sigmas = [e.get("sigma", 0.0) for e in entries] if "sigma" in keys else [0.0] * n
            odd = np.array([v is None for v in values], dtype=bool) if None in values else np.zeros(n, dtype=bool)
            return values, sigmas, sigmas, units, odd
    elif kinds <= {float, int, type(None)}:
        return entries, [0.0] * n, [0.0] * n, [None] * n, np.zeros(n, dtype=bool)
    values, minus, plus, units = [None] * n, [0.0] * n, [0.0] * n, [None] * n
    odd = np.zeros(n, dtype=bool)
    for i, e in enumerate(entries):
        t = type(e)
        if e is None:
            continue
        if t is float or t is int:
            values[i] = e
        elif t is dict and e.keys() <= SIMPLE_KEYS and e.get("value") is not None:
            values[i] = e["value"]
            if "sigma" in e:
                odd[i] = "sigma_minus" in e or "sigma_plus" in e
                minus[i] = plus[i] = e["sigma"]
            elif "sigma_minus" in e or "sigma_plus" in e:
                minus[i], plus[i] = e.get("sigma_minus"), e.get("sigma_plus")
            units[i] = e.get("unit")
        else:
            odd[i] = True
    return values, minus, plus, units, odd


def _bad_choices(spec: Input, values: list) -> np.ndarray:
    """Systems whose choice (or integer) the array path does not take as it stands."""
    if spec.kind == "choice":
        ok = {None, *spec.choices}
        return np.array([not (v is None or (type(v) is str and v in ok)) for v in values], dtype=bool)
    out = np.zeros(len(values), dtype=bool)
    for k, v in enumerate(values):
        if v is not None and (type(v) is not int or abs(v) > 2**53 or not spec.domain.holds(float(v))):
            out[k] = True
    return out


# ----------------------------------------------------------------------------- columns

def _column_length(name: str, raw) -> int | None:
    if isinstance(raw, list):
        return len(raw)
    if isinstance(raw, dict):
        lengths = {len(v) for key, v in raw.items() if key != "unit" and isinstance(v, (list, np.ndarray))}
        if len(lengths) > 1:
            raise invalid({f"columns.{name}": ["its arrays have different lengths"]})
        return lengths.pop() if lengths else None
    return None


def compute_columns(calc: Calculation, body: dict, limits: Limits, series_arrays: bool = False,
                    refused: Mapping[int, str] | None = None) -> dict:
    """``{"columns": {...}}`` to ``{"columns": {output: {"value": [...], ...}}, "errors": [...]}``."""
    given = body["columns"]
    if not isinstance(given, dict) or not given:
        raise invalid({"columns": ["must be an object with one member per input"]})
    unknown = [k for k in given if k not in {s.name for s in calc.inputs}]
    if unknown:
        names = [s.name for s in calc.inputs]
        raise invalid({f"columns.{k}": [f"{calc.name} has no input {k!r}" + meant(k, names, calc.symbols)]
                       for k in unknown})
    given = array_columns(calc, given)
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
    within_batch_rows(n, "columns", limits)
    missing = [s.name for s in calc.inputs if s.required and s.default is None and s.name not in given]
    if missing:
        raise invalid({f"columns.{k}": ["is required"] for k in missing})
    columns: dict[str, _Column] = {}
    choices: dict[str, _Choice] = {}
    views: dict[str, Callable[[int], Any]] = {}
    series: dict[str, Any] = {}
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
            series[spec.name] = raw
        elif spec.kind in ("choice", "integer"):
            values = raw if isinstance(raw, list) else [raw] * n
            choices[spec.name] = _Choice(values, _bad_choices(spec, values))
            views[spec.name] = (lambda v: lambda i: v[i])(values)
        else:
            columns[spec.name], views[spec.name] = _quantity_column(spec, raw, n, limits)

    # the columns' forms first, then the options of the whole batch (their limits among them)
    options = shared_options(calc, body, limits, columns=True)
    raw_shared = {**options.raw, **series}
    shared = {**options.data, **(load(calc, series, limits, options_only=True) if series else {})}

    def row_body(i: int) -> dict:
        row = dict(raw_shared)
        for name, view in views.items():
            v = view(i)
            if v is not None:
                row[name] = v
        return row

    done = evaluate_groups(calc, n, columns, choices, shared, row_body, limits, raw_shared.get("correlations"))
    for k, reason in (refused or {}).items():
        if 0 <= k < n:
            done.problems[k] = invalid({"_row": [reason]}, "a row whose cells do not match the table's header")
    answer = columns_answer(calc, done, limits, series_arrays)
    if shared.get("time_format") == "mjd":
        answer["time_format"] = "mjd"
    return answer


def _is_array(v) -> bool:
    """A library caller's array: numpy (masked too), an astropy Quantity or Column, a pandas Series."""
    return not isinstance(v, (list, tuple, dict, str, bytes)) and hasattr(v, "__array__") and np.ndim(v) >= 1


def _number_array(v, where: str) -> np.ndarray:
    """A library caller's column of numbers as floats, NaN where missing (masked, NaN, None); a column of
    text, booleans, complex numbers or other objects is refused naming ``where``."""
    dtype = getattr(v, "dtype", None)
    kind = getattr(dtype, "kind", "O")
    why = {"U": "text", "S": "bytes", "b": "booleans", "c": "complex numbers", "M": "dates", "m": "durations"}.get(kind)
    if why is None and kind == "O" and any(isinstance(x, (str, bytes, bool, np.bool_, complex))
                                           for x in np.asarray(v).ravel().tolist()):
        why = "text or other objects"
    if why is None:
        try:
            arr = column_array(v, where)
        except ValueError as e:
            raise invalid({where: [str(e).partition(": ")[2] or str(e)]}) from None
        if arr.dtype.kind == "f" and arr.ndim == 1:
            return arr
        why = "text or other objects" if arr.ndim == 1 else f"{arr.ndim} dimensions"
    raise invalid({where: [f"an array of {why} ({dtype}) is no column of numbers: give floats or integers, one "
                           "per system (NaN or a masked entry where a system lacks it); text such as "
                           "'isotropic' goes in a list"]})


def array_columns(calc: Calculation, given: dict) -> dict:
    """A library caller's columns (numpy arrays, masked arrays, Quantities, pandas Series, arrays of
    ``uncertainties`` numbers, numpy scalars) in the forms the JSON columns take, converted once by
    the client's own column conversion (:func:`calcservice.columns.column_array`): numbers as float
    arrays (NaN: not given), a Quantity's unit as the column's, a sigma Quantity in the value's unit."""
    out: dict[str, Any] = {}
    uncertain: dict[str, list] = {}
    for name, raw in given.items():
        spec = calc.input(name)
        where = f"columns.{name}"
        if isinstance(raw, np.generic):
            raw = plain_number(raw)
        if spec.kind == "series" and _is_array(raw):
            values = np.asarray(getattr(raw, "value", raw)).tolist()
            raw = {"value": values, "unit": unit_of(raw)} if unit_of(raw) else values
        elif spec.kind != "quantity" and _is_array(raw):
            arr = np.ma.asarray(np.asarray(raw) if not np.ma.isMaskedArray(raw) else raw)
            raw = [None if m else v for v, m in zip(arr.data.tolist(), np.ma.getmaskarray(arr).tolist())]
        elif spec.kind == "quantity" and uncertain_parts(raw) is not None:
            uncertain[name] = np.asarray(raw).tolist()
            value, sigma = uncertain_parts(raw)
            raw = {"value": value, "sigma": sigma}
        elif _is_array(raw):
            unit = unit_of(raw)
            raw = {"value": _number_array(raw, where), **({"unit": unit} if unit else {})}
        elif isinstance(raw, dict) and any(_is_array(v) or isinstance(v, np.generic) for v in raw.values()):
            raw = dict(raw)
            value = raw.get("value")
            if _is_array(value):
                own = unit_of(value)
                arr = _number_array(value, f"{where}.value")
                if own and raw.get("unit") is None:
                    raw["unit"] = own
                elif own:
                    arr = arr * _factor(own, raw["unit"], f"{where}.value")
                raw["value"] = arr
            target = raw.get("unit") or spec.unit
            for key, v in list(raw.items()):
                if isinstance(v, np.generic):
                    raw[key] = plain_number(v)
                elif key == "samples" and _is_array(v):     # each system's draws, (systems, draws)
                    own = unit_of(v)
                    if own and raw.get("unit") is None:
                        raw["unit"] = own
                    draws = np.asarray(getattr(v, "value", v))
                    if draws.dtype.kind not in "iuf":
                        raise invalid({f"{where}.samples": [f"draws are numbers, not {draws.dtype}"]})
                    raw[key] = as_doubles(draws).tolist()
                elif key != "value" and _is_array(v):
                    arr = _number_array(v, f"{where}.{key}")
                    own = unit_of(v)
                    raw[key] = arr * _factor(own, target, f"{where}.{key}") if own and own != target else arr
        out[name] = raw
    correlated = correlated_columns(uncertain)
    if correlated:
        raise invalid({f"columns.{correlated[0]}": [correlated[1]]})
    return out


def _factor(unit: str, target: str, where: str) -> float:
    try:
        return factor(unit, target)
    except UnitError as e:
        raise invalid({where: [str(e)]}) from None


def _quantity_column(spec: Input, raw, n: int, limits: Limits) -> tuple[_Column, Callable[[int], Any]]:
    """One quantity's column, checked as arrays, and the view of one system's entry (for the
    single-request parser, which words the errors)."""
    zeros = np.zeros(n)
    where = f"columns.{spec.name}"
    if type(raw) in (int, float):
        value, bad = number_column([raw] * n)
        return _Column(value, zeros, zeros, 1.0, bad), lambda i: raw
    if isinstance(raw, list):
        value, bad = number_column(raw)
        iso = _isotropic_entries(spec, raw, bad)
        value = np.where(iso, 90.0, value) if iso.any() else value
        return _Column(value, zeros, zeros, 1.0, bad & ~iso, iso), lambda i: raw[i]
    if isinstance(raw, str) and spec.isotropic and raw == "isotropic":
        return _Column(np.full(n, 90.0), zeros, zeros, 1.0, np.zeros(n, dtype=bool), np.ones(n, dtype=bool)), \
            lambda i: raw
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
            return (*number_column(v), v.__getitem__)
        if isinstance(v, np.ndarray) and v.dtype == float and v.shape == (n,):     # a table's column: NaN not given
            return v, np.zeros(n, dtype=bool), lambda i: None if np.isnan(v[i]) else float(v[i])
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
        if key in raw and (type(raw[key]) not in (int, float, str, list, np.ndarray)):
            raise invalid({f"{where}.{key}": ["must be a number or an array with one entry per system"]})
    value, bad, value_at = member("value")
    # a table's text column may say "isotropic" in some systems and give angles in the others
    iso = _isotropic_entries(spec, raw["value"], bad) if isinstance(raw["value"], list) else np.zeros(n, dtype=bool)
    if iso.any():                       # (a table's float column may be read-only: not written in place)
        value = np.where(iso, 90.0, value)
        bad = bad & ~iso
    keys = [key for key in ("sigma", "sigma_minus", "sigma_plus") if key in raw]
    # a null sigma in one system means none given; a null value means the input is not given there
    members = {key: member(key) for key in keys}
    sigmas = {key: (a, b) for key, (a, b, _) in members.items()}
    for _, b in sigmas.values():
        bad |= b
    if "sigma" in sigmas:
        sm = sp = np.where(np.isnan(sigmas["sigma"][0]), 0.0, sigmas["sigma"][0])
    elif sigmas:
        sm = np.where(np.isnan(sigmas["sigma_minus"][0]), 0.0, sigmas["sigma_minus"][0])
        sp = np.where(np.isnan(sigmas["sigma_plus"][0]), 0.0, sigmas["sigma_plus"][0])
        one_sided = np.isnan(sigmas["sigma_minus"][0]) != np.isnan(sigmas["sigma_plus"][0])
        bad |= one_sided
    else:
        sm = sp = zeros
    absent = np.isnan(value) & ~bad
    for key in keys:
        bad |= absent & ~np.isnan(sigmas[key][0])       # a sigma without a value: the parser says so
    if iso.any():
        # random orientations have no sigma: a system that gives one is worded by the parser (an empty
        # or zero sigma beside "isotropic", as a float column must hold something there, is none)
        unreadable = np.logical_or.reduce([b for _, b in sigmas.values()]) if sigmas else False
        with_sigma = iso & (unreadable | (sm != 0) | (sp != 0))
        bad |= with_sigma
        iso &= ~with_sigma
        sm = np.where(iso, 0.0, sm)
        sp = np.where(iso, 0.0, sp)

    def view(i):
        if iso[i]:
            return "isotropic"
        entry = {"value": value_at(i)}
        for key in keys:
            if members[key][2](i) is not None:
                entry[key] = members[key][2](i)
        if unit is not None:
            entry["unit"] = unit
        return None if entry["value"] is None and len(entry) == 1 + (unit is not None) else entry

    return _Column(value, sm, sp, k, bad, iso if iso.any() else None), view


def _isotropic_entries(spec: Input, items: list, bad: np.ndarray) -> np.ndarray:
    """Which entries of a column's list are the string "isotropic" (for an input that takes it);
    only the entries that are not numbers are looked at."""
    iso = np.zeros(len(items), dtype=bool)
    if spec.isotropic:
        for k in np.flatnonzero(bad).tolist():
            iso[k] = type(items[k]) is str and items[k] == "isotropic"
    return iso


def expected_outputs(calc: Calculation, done: Evaluated, limits: Limits) -> dict[str, tuple]:
    """The outputs (name -> trailing shape of a series) the failed systems would have had, from the
    inputs each gave: a columns answer has the same columns whichever systems fail.  Each distinct
    set of given inputs (a required input, or one of an exactly-one-of group, taken as given) runs
    once through the engine with NaN for every number: the physics says which outputs it gives."""
    failed = np.array(sorted(done.problems), dtype=np.int64)
    if not failed.size:
        return {}
    names = list(done.forms)
    if names:
        keys = np.stack([np.asarray(done.forms[name])[failed] for name in names], axis=1)
        keys = np.unique(keys, axis=0).tolist()
    else:
        keys = [[]]
    shapes: dict[str, tuple] = {}
    for key in keys:
        form = dict(zip(names, key))
        given = {name for name in names if name not in done.levels and form[name] != ABSENT}
        given |= {spec.name for spec in calc.inputs if spec.kind == "quantity" and spec.required
                  and spec.default is None}
        for group in calc.exclusive:
            present = [g for g in group if g in given]
            given -= set(present[1:])
            if not present:
                given.add(group[0])
        for group in calc.at_most_one:
            given -= set([g for g in group if g in given][1:])
        series = {spec.name for spec in calc.inputs if spec.kind == "series"}
        data = {k: v for k, v in done.shared.items() if k == "time_format" or k in series}
        nan = np.full(1, np.nan)
        for name in given:
            data[name] = RawQuantity(nan, np.zeros(1), np.zeros(1))
        for name, levels in done.levels.items():
            spec = calc.input(name)
            value = levels[form[name]] if form[name] < len(levels) else None
            if value is None and spec.default is None and spec.kind == "choice" and spec.required:
                value = spec.choices[0]
            if value is not None:
                data[name] = value
        try:
            parsed = build(calc, data, limits)
            result = run(parsed)
        except Problem:
            continue
        for name, entry in result.outputs.items():
            shapes.setdefault(name, entry["value"].shape[1:])
        if calc.extra is not None:          # members per system (an ephemeris' events): null columns too
            with np.errstate(all="ignore"):
                for extra in calc.extra(parsed.quantities, parsed.statics, parsed.options,
                                        time_format=parsed.time_format) or []:
                    shapes.update(dict.fromkeys([key for key in extra if key not in shapes], None))
    return shapes


def columns_answer(calc: Calculation, done: Evaluated, limits: Limits, series_arrays: bool = False) -> dict:
    """The columns response; its arrays are numpy float arrays, NaN where a system has no value
    (null in JSON: the edge's encoder writes non-finite floats so).  Its columns do not depend on
    which systems failed: an output of a failed system is a column of nulls, in the batch's units."""
    n = done.n
    ok = [g for g in done.groups if g.problem is None]
    units = output_units(calc, done.shared.get("units", {}), {})
    expected = expected_outputs(calc, done, limits)
    present = [o for o in calc.outputs if o.name in expected or any(o.name in g.result.outputs for g in ok)]
    outputs = {o.name for o in calc.outputs}
    batch_method = (done.shared.get("uncertainty") or {}).get("method", "linear")
    drawn = batch_method == "monte_carlo" or any(g.result.method == "monte_carlo" for g in ok)
    members = ("value", "sigma", "low", "high") if drawn else ("value", "sigma")
    # one engine call for the whole catalogue, in order (the usual case): its arrays need no scatter
    whole = ok[0] if len(ok) == 1 and len(ok[0].rows) == n and (ok[0].rows == np.arange(n)).all() else None
    columns: dict[str, dict] = {}
    for o in present:
        unit = units.get(o.name, o.unit)
        k = factor(o.unit, unit) if unit != o.unit else 1.0
        keys = dict.fromkeys(key for g in ok if o.name in g.result.outputs for key in g.result.outputs[o.name]) \
            or dict.fromkeys(members)
        trail = next((g.result.outputs[o.name]["value"].shape[1:] for g in ok if o.name in g.result.outputs),
                     expected.get(o.name, ()))
        entry: dict[str, Any] = {}
        for key in keys:
            if whole is not None and o.name in whole.result.outputs:
                full = np.array(whole.result.outputs[o.name][key], dtype=float)      # every system, in order
            else:
                full = np.full((n,) + trail, np.nan)
                for g in ok:
                    # a linear group has no low/high where a Monte Carlo one has: null for its systems
                    if key in g.result.outputs.get(o.name, ()):
                        full[g.rows] = g.result.outputs[o.name][key]
            entry[key] = in_unit(full, k, [o.name], [unit]) if k != 1.0 else full
        columns[o.name] = {"value": entry.pop("value"), **entry, "unit": unit}

    failed = np.zeros(n, dtype=bool)
    failed[list(done.problems)] = True
    for entry in columns.values():
        for key, arr in entry.items():
            if key != "unit":
                arr[failed] = np.nan            # numpy arrays: the JSON encoder writes NaN as null
                if arr.ndim > 1 and done.problems and not series_arrays:
                    # a failed system's series is null, not a list of nulls
                    values = clean_array(arr)
                    for i in done.problems:
                        values[i] = None
                    entry[key] = values

    extras: dict[str, list] = {key: [None] * n for key in expected if key not in outputs}
    warned: dict[tuple[str, str, str | None], np.ndarray] = {}
    order: list[tuple[str, str, str | None]] = []          # the warnings in each group's own order
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
        keys = []
        for w in g.result.warnings:
            hit = rows[warning_mask(w, len(rows))]
            hit = hit[~failed[hit]]
            if len(hit):
                keys.append((w.code, w.message, w.subject))
                warned.setdefault(keys[-1], np.zeros(n, dtype=bool))[hit] = True
        _keep_order(order, keys)
        if g.result.method == "monte_carlo":
            seeds.add(g.result.seed)
            samples.add(g.result.samples)
            rejected[rows] = g.result.rejected_fraction
    rejected[failed] = np.nan
    answered = np.zeros(n, dtype=bool)
    for g in ok:
        answered[g.rows] = True
    answered &= ~failed
    methods = {g.result.method for g in ok if answered[g.rows].any()} or {batch_method}
    if len(methods) == 1:
        uncertainty: dict[str, Any] = {"method": methods.pop()}
    else:                                       # a method per system (None where none answered)
        method = np.full(n, None, dtype=object)
        for g in ok:
            method[g.rows] = g.result.method
        method[~answered] = None
        uncertainty = {"method": method.tolist()}
    if not seeds and batch_method == "monte_carlo":      # no system answered: the batch's draws
        unc = done.shared.get("uncertainty") or {}
        seeds.add(unc.get("seed", done.seed))
        samples.add(unc.get("samples", limits.default_samples))
    if seeds:
        uncertainty["samples"] = samples.pop() if len(samples) == 1 else sorted(samples)
        uncertainty["seed"] = seeds.pop() if len(seeds) == 1 else sorted(seeds, key=lambda s: (s is None, s))
        uncertainty["rejected_fraction"] = rejected
    response = {
        "calculation": calc.name,
        "count": n,
        "columns": {**columns, **extras},
        "errors": [{"index": i, **done.problems[i].as_dict()} for i in sorted(done.problems)],
        "uncertainty": uncertainty,
        "warnings": [_columns_warning(code, message, subject, np.flatnonzero(rows).tolist())
                     for (code, message, subject), rows in ((key, warned[key]) for key in order)],
        "provenance": provenance(calc),
    }
    if any(g.result.correlation is not None for g in ok):
        response["correlation"] = _columns_correlation(calc, ok, n, failed)
    if any(g.result.budget for g in ok):
        response["budget"] = _columns_budget(ok, n, failed)
    return response


def _columns_correlation(calc: Calculation, ok: list, n: int, failed: np.ndarray) -> dict:
    """Every system's correlation matrix over the outputs any group correlates (NaN: not given)."""
    given = {name for g in ok if g.result.correlation is not None for name in g.result.correlation[0]}
    names = [o.name for o in calc.outputs if o.name in given]
    index = {name: k for k, name in enumerate(names)}
    matrix = np.full((n, len(names), len(names)), np.nan)
    for g in ok:
        if g.result.correlation is not None:
            own, matrices = g.result.correlation
            at = [index[name] for name in own]
            matrix[np.ix_(g.rows, at, at)] = matrices
    matrices = clean_array(matrix)
    for i in np.flatnonzero(failed).tolist():
        matrices[i] = None                      # a failed system has no matrix, not one of nulls
    return {"outputs": names, "matrix": matrices}


def _columns_budget(ok: list, n: int, failed: np.ndarray) -> dict:
    """Each output's variance shares by term over every system (NaN: not given)."""
    budget: dict[str, dict[str, np.ndarray]] = {}
    for g in ok:
        for name, terms in (g.result.budget or {}).items():
            for term, shares in terms.items():
                budget.setdefault(name, {}).setdefault(term, np.full(n, np.nan))[g.rows] = shares
    for terms in budget.values():
        for shares in terms.values():
            shares[failed] = np.nan
    return budget


def _keep_order(order: list, keys: list) -> None:
    """Put into ``order`` each of ``keys`` (one engine group's warnings, in the order a single request gives
    them) it lacks, before the first of those that follow it in ``keys``: each system's codes in a table's
    ``warnings`` cell then come in its single request's order, whatever the warnings of other groups."""
    for k, key in enumerate(keys):
        if key in order:
            continue
        later = [order.index(other) for other in keys[k + 1:] if other in order]
        order.insert(min(later) if later else len(order), key)


def _columns_warning(code: str, message: str, subject: str | None, rows: list[int]) -> dict:
    """A warning of a columns answer: one per field it is about, naming that field and its rows."""
    if subject is None:
        return {"code": code, "message": message, "rows": rows}
    return {"code": code, "message": message.replace("{subject}", subject), "fields": [subject], "rows": rows}
