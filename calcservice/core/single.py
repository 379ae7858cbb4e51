"""One calculation for one system: request dict in, response dict out (raises :class:`Problem`)."""

from __future__ import annotations

from functools import lru_cache
from typing import Any

import numpy as np

from ..config import Limits
from ..engine import EngineError, Result, evaluate, split_normal_within
from ..registry import DAY_COUNTS_BELOW, Calculation, Warning
from .parse import Parsed, find, parse
from .problems import Problem, invalid
from .render import Rendering, beyond_range, output_factors, unit_range_error
from .schemas import SMALLEST_NORMAL


def run(parsed: Parsed) -> Result:
    """The engine on parsed inputs; an input problem it finds becomes a 422."""
    try:
        result = evaluate(parsed.calc, parsed.quantities, parsed.statics, parsed.options)
    except EngineError as e:
        raise invalid(e.errors, e.detail) from None
    result.warnings.extend(underflows(parsed.calc, result, parsed.statics))
    result.warnings.extend(misread_dates(parsed))
    result.warnings.extend(unused_inputs(parsed))
    result.warnings.extend(unused_units(parsed, result))
    if result.failed:
        _name_what_fails(parsed, result)
        _name_draws_out_of_domain(parsed, result)
    if parsed.output_units:
        _beyond_unit_range(parsed, result)
    return result


def _beyond_unit_range(parsed: Parsed, result: Result) -> None:
    """A system whose answer leaves a double's range in an output unit it asked for (a finite number beyond
    it, a normal one below the smallest normal double) fails with the 422 naming ``units.NAME`` that
    :func:`render.in_unit` would raise: as a system of its own, so that in a batch it is that row's error,
    as it is its single request's, and the other systems are answered.  Its outputs become NaN, which
    converts without a word."""
    names = tuple(name for name in parsed.output_units if name in result.outputs)
    units, factors = output_factors(parsed.calc, names, tuple(sorted(parsed.output_units.items())))
    failed = np.zeros(parsed.count, dtype=bool)
    for name, unit, k in zip(names, units, factors):
        if k == 1.0:
            continue
        over = np.zeros(parsed.count, dtype=bool)
        under = np.zeros(parsed.count, dtype=bool)
        with np.errstate(over="ignore", under="ignore", invalid="ignore"):
            for values in result.outputs[name].values():
                values = np.asarray(values, dtype=float)
                lost, shrunk = beyond_range(values, values * k)
                over |= lost.reshape(parsed.count, -1).any(axis=1)
                under |= shrunk.reshape(parsed.count, -1).any(axis=1)
        for row in np.flatnonzero(over | under).tolist():
            result.failed.setdefault(row, {}).update(unit_range_error(name, unit, bool(over[row])))
        failed |= over | under
    if failed.any():
        for members in result.outputs.values():
            for key, values in members.items():
                members[key] = np.where(failed.reshape((-1,) + (1,) * (np.ndim(values) - 1)), np.nan, values)


def unused_units(parsed: Parsed, result: Result) -> list[Warning]:
    """A unit asked for an output these inputs do not give (m2 of sb1 without primary_mass): said, where
    the answer would leave it out without a word."""
    return [Warning("unit_unused", "{subject}: not among the results these inputs give (the output needs other "
                    "inputs), so its unit is not used", None, f"units.{name}")
            for name in parsed.output_units if name not in result.outputs]


NO_DRAW_KEPT = "every Monte Carlo draw fell outside"


def _name_draws_out_of_domain(parsed: Parsed, result: Result) -> None:
    """A Monte Carlo system none of whose draws stayed within the inputs' domains is failed by the engine
    under ``_inputs``; where an input's own sigma puts it there (a draw within its domain is less than
    one in the number drawn: e = 0.5 +- 1e6), the error is keyed by that input and says so."""
    rows = [k for k, errs in result.failed.items() if list(errs) == ["_inputs"]
            and all(m.startswith(NO_DRAW_KEPT) for m in errs["_inputs"])]
    if not rows or result.samples is None:
        return
    at = np.array(rows)
    blamed: dict[str, np.ndarray] = {}
    for name, q in parsed.quantities.items():
        if q.samples is not None or q.isotropic or not q.uncertain or parsed.calc.input(name).period is not None:
            continue                    # a cyclic input's draws are brought into its range, never out of it
        domain = parsed.calc.input(name).domain
        pick = (lambda a: np.broadcast_to(a, (parsed.count,))[at])
        p = split_normal_within(pick(q.value), pick(q.sigma_minus), pick(q.sigma_plus), domain.low, domain.high)
        blamed[name] = p
    for j, row in enumerate(rows):
        names = [name for name, p in blamed.items() if p[j] * result.samples < 1]
        if not names:
            continue
        errors = result.failed[row]
        del errors["_inputs"]
        for name in names:
            spec = parsed.calc.input(name)
            errors[name] = [f"its draws fall within its domain ({spec.domain.message(spec.unit)}) with probability "
                            f"{blamed[name][j]:.1e}: none of the {result.samples} Monte Carlo draws is expected to; "
                            "give a smaller sigma, or the draws themselves as samples"]


@lru_cache(maxsize=None)
def _ordinary(calc: Calculation) -> dict[str, float]:
    """Each input's nominal value in the calculation's own (fictional, ordinary) example, canonical units."""
    try:
        example = parse(calc, calc.example, Limits())
    except Problem:                          # an example is checked by the tests; no verdict without one
        return {}
    return {name: float(q.value[0]) for name, q in example.quantities.items() if not q.isotropic}


def _name_what_fails(parsed: Parsed, result: Result) -> None:
    """Say which output has no finite value in each failed system, and why, by the field at fault.

    The engine fails a system whose nominal inputs give an output that is not finite, keyed
    ``_inputs`` (the combination of inputs).  Here each such output is named with what it is: beyond
    a double (an overflow) or without a value (its formula undefined there); and where putting one
    input alone back to its value in the calculation's example makes every such output finite, that
    input is the one at fault and the error is keyed by its name.  One physics call, and one more per
    input given, over the failed systems only."""
    calc, n = parsed.calc, parsed.count
    for errs in result.failed.values():
        if "_inputs" in errs and len(errs) > 1:
            # a system that broke a rule of the calculation (an input its recipe requires missing) has no
            # finite outputs because of it: that they are not finite says nothing more, and misleads
            kept = [m for m in errs["_inputs"] if not m.startswith("these inputs give no finite value of ")]
            if kept:
                errs["_inputs"] = kept
            else:
                del errs["_inputs"]
    rows = np.array([k for k, errs in result.failed.items() if "_inputs" in errs], dtype=int)
    if not rows.size:
        return
    nominal = {name: v[rows] for name, v in result.nominal_inputs.items()}
    # a choice given per system is an array over the systems; a series (times) is the same for all
    per_system = {k: v[rows] for k, v in parsed.statics.items()
                  if k not in parsed.series and isinstance(v, np.ndarray) and v.shape == (n,)}

    def outputs(changed: str | None = None, value: float = 0.0) -> dict[str, np.ndarray] | None:
        """The physics at the failed systems' nominal inputs (``changed`` put to ``value``), each
        output as (systems, anything else)."""
        arguments = {i.name: None for i in calc.inputs}
        arguments.update(parsed.statics)
        arguments.update(per_system)
        arguments.update(nominal)
        if changed is not None:
            arguments[changed] = np.full(len(rows), value)
        try:
            with np.errstate(all="ignore"):
                out = calc.function(**arguments)
        except Exception:                  # such a mixture may be no system at all: no verdict from it
            return None
        return {o: np.asarray(y, dtype=float).reshape(len(rows), -1) if np.size(y) % len(rows) == 0
                else np.broadcast_to(np.asarray(y, dtype=float), (len(rows),)).reshape(len(rows), 1)
                for o, y in out.items() if y is not None and o in result.outputs}

    at = outputs()
    if at is None:
        return
    bad = {name: ~np.isfinite(y).all(axis=1) for name, y in at.items()}
    if not any(b.any() for b in bad.values()):
        return                              # a Monte Carlo system whose draws all failed: the engine's words
    ordinary = _ordinary(calc) if calc.example and not parsed.series else {}
    cleared: dict[str, np.ndarray] = {}     # input -> which failed systems it alone clears
    for name in nominal:
        if name not in ordinary or (nominal[name] == ordinary[name]).all():
            continue
        out = outputs(name, ordinary[name])
        if out is None:
            continue
        fine = np.ones(len(rows), dtype=bool)
        for output, b in bad.items():
            if output in out:
                fine &= ~b | np.isfinite(out[output]).all(axis=1)
        cleared[name] = fine
    for j, row in enumerate(rows.tolist()):
        named = []
        for output, b in bad.items():
            if b[j]:
                overflow = np.isinf(at[output][j]).any()
                named.append(f"no finite value of {output}: " + (
                    "it, or a number in its computation, overflows a double (beyond about 1.8e308)" if overflow
                    else "its formula has no value there"))
        if not named:
            continue
        errors = result.failed[row]
        del errors["_inputs"]
        culprits = [name for name, fine in cleared.items() if fine[j]]
        if len(culprits) == 1:
            errors.setdefault(culprits[0], []).extend(f"this value (with the others given) gives {m}" for m in named)
        else:
            # two or more: each alone put back clears it, so it is their combination
            which = f" ({', '.join(culprits)})" if culprits else ""
            errors["_inputs"] = [f"these inputs{which} give {m}" for m in named]


def _small(v: np.ndarray) -> bool:
    """Whether any of ``v`` lies below the smallest normal double in size (0 among them)."""
    if v.size == 1:                          # a single request's output: a float's comparison
        return -SMALLEST_NORMAL < v.item() < SMALLEST_NORMAL
    return bool(np.count_nonzero(np.abs(v) < SMALLEST_NORMAL))


def underflows(calc: Calculation, result: Result, statics: dict) -> list[Warning]:
    """An ``underflow`` warning for each output whose value lies below the smallest normal double
    (2.2e-308) in its canonical unit: a subnormal one has lost its digits, and a 0 that the
    physics reached by underflowing (1e-110 km/s cubed) is not the formula's value.

    Overflow needs no such test (the engine fails the system: no finite value); a 0 does, since
    outputs may be exactly 0 by physics (a phase at periastron).  So, only when some output is 0, the
    physics is called once more at the nominal inputs of the call's systems with numpy's underflow
    raised: a 0 is flagged where that call underflowed."""
    if not any(_small(o["value"]) for o in result.outputs.values()):     # the usual case, at a few us
        return []
    small = {name: np.abs(o["value"]) < SMALLEST_NORMAL for name, o in result.outputs.items()}
    n = len(next(iter(small.values())))
    hit = {name: s.reshape(n, -1).any(axis=1) for name, s in small.items()}
    zero = {name: (result.outputs[name]["value"] == 0).reshape(n, -1).any(axis=1) for name in small}
    if any((hit[name] & zero[name]).any() for name in small):
        arguments = {i.name: None for i in calc.inputs}
        arguments.update(statics)
        arguments.update(result.nominal_inputs)
        try:
            with np.errstate(all="ignore", under="raise"):
                calc.function(**arguments)
            underflowed = False
        except FloatingPointError:
            underflowed = True
        except Exception:                   # the engine already judged these inputs; no verdict here
            underflowed = False
        if not underflowed:
            hit = {name: h & ~zero[name] for name, h in hit.items()}
    return [Warning("underflow", "{subject}: below the smallest normal double (about 2.2e-308) in its unit at "
                    "these inputs, where a number has lost its digits or underflowed to 0: the value given is "
                    "not the formula's", where, name)
            for name, where in hit.items() if where.any()]


def unused_inputs(parsed: Parsed) -> list[Warning]:
    """An ``input_unused`` warning for each input given beside every input that makes it idle
    (:attr:`Input.unused_with`): an answer that does not depend on a choice the caller made should
    say so, or the caller believes it did (an opening-angle formula beside a momentum ratio)."""
    given = parsed.given
    out = []
    for spec in parsed.calc.inputs:
        if spec.unused_with and spec.name in given and given.issuperset(spec.unused_with):
            idle = spec.unused_with
            because = (f"{idle[0]} is given" if len(idle) == 1 else
                       f"{', '.join(idle[:-1])} and {idle[-1]} are all given")
            out.append(Warning("input_unused", f"{{subject}} is not used when {because}: the answer does not "
                               "depend on it", None, spec.name))
        q = parsed.quantities.get(spec.name) if spec.exact and spec.name in given else None
        if q is not None:
            # a bound (where a list of events begins) is taken as given: its sigma or draws would go unread
            where = (q.sigma_minus > 0) | (q.sigma_plus > 0) if q.samples is None else np.ones(len(q.value), bool)
            if where.any():
                out.append(Warning("uncertainty_unused", "{subject}: a bound taken as given (where the list "
                                   "begins), so its uncertainty is not used: the answer does not depend on it",
                                   where, spec.name))
    return out


#: Julian Dates from 10000 to 100000 are in 4685 to 4439 BC, while as MJDs they are the dates of 1886 to 2132: an
#: MJD given as a JD.  Smaller numbers are day counts from an arbitrary zero (registry.DAY_COUNTS_BELOW).
JD_LOOKS_LIKE_MJD = (DAY_COUNTS_BELOW, 1e5)
#: An MJD above this is after AD 7334, while every JD since AD 763 is: a JD given with time_format mjd.
MJD_LOOKS_LIKE_JD = 2e6


def misread_dates(parsed: Parsed) -> list[Warning]:
    """A warning for each date given as a number that reads as the other time format: an MJD (58711.8)
    sent as a JD is a date in 4553 BC, a JD sent with ``time_format: mjd`` one in AD 8596, and either is
    answered without an error (the DATE domain holds both), every phase and event shifted by 2400000.5 d.
    Judged on the dates the request became, in its time format (an ISO 8601 date falls in neither range)."""
    out = []
    mjd = parsed.time_format == "mjd"
    for spec in parsed.calc.inputs:
        if not spec.time or spec.name not in parsed.given:
            continue
        name = spec.name
        day = parsed.series[name] if name in parsed.series else parsed.quantities[name].value
        low, high = JD_LOOKS_LIKE_MJD
        with np.errstate(invalid="ignore"):
            where = day >= MJD_LOOKS_LIKE_JD if mjd else (day >= low) & (day < high)
        if not where.any():
            continue
        if name in parsed.series:                 # one list for every system
            where = None
        if mjd:
            message = ("{subject}: an MJD of 2000000 or more is a date after AD 7334: if it is a Julian Date, leave "
                       "time_format out (or give jd)")
        else:
            message = ("{subject}: a Julian Date from 10000 to 100000 is a date in 4685 to 4439 BC: if it is an MJD "
                       "(JD - 2400000.5), give time_format mjd")
        out.append(Warning("date_format_suspect", message, where, name))
    return out


def failure(result: Result, index: int) -> Problem | None:
    """The 422 for system ``index`` if its inputs failed a constraint or gave no finite result."""
    errors = result.failed.get(index)
    if errors is None:
        return None
    if all(k.startswith("units.") for k in errors):       # an output unit the answer leaves a double in
        return invalid(errors)
    if all("no finite value" in m for messages in errors.values() for m in messages):
        names = sorted(k for k in errors if k != "_inputs")
        return invalid(errors, "these inputs give no finite result" + (f": invalid value for {', '.join(names)}"
                                                                       if names else ""))
    return invalid(errors, "the inputs are not physically consistent")


def compute(name: str, body: Any, limits: Limits | None = None, keep_draws: bool = False) -> dict:
    """The response of the wire contract to the request ``body`` for calculation ``name``.

    ``keep_draws``: a Monte Carlo response also carries the draws of each output under ``"_draws"``
    (numpy arrays, for a histogram; never sent on the wire)."""
    parsed = parse(find(name), body, limits or Limits())
    parsed.options.keep_draws = keep_draws
    result = run(parsed)
    problem = failure(result, 0)
    if problem is not None:
        raise problem
    response = Rendering(parsed, result).response(0)
    if keep_draws and result.draws is not None:
        response["_draws"] = {k: v[0] for k, v in result.draws.items()}
    return response
