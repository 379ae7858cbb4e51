"""One calculation for one system: request dict in, response dict out (raises :class:`Problem`)."""

from __future__ import annotations

from typing import Any

import numpy as np

from ..config import Limits
from ..engine import EngineError, Result, evaluate
from ..registry import Calculation, Warning
from .parse import Parsed, find, parse
from .problems import Problem, invalid
from .render import Rendering


SMALLEST_NORMAL = np.finfo(float).tiny


def run(parsed: Parsed) -> Result:
    """The engine on parsed inputs; an input problem it finds becomes a 422."""
    try:
        result = evaluate(parsed.calc, parsed.quantities, parsed.statics, parsed.options)
    except EngineError as e:
        raise invalid(e.errors, e.detail) from None
    result.warnings.extend(underflows(parsed.calc, result, parsed.statics))
    return result


def underflows(calc: Calculation, result: Result, statics: dict) -> list[Warning]:
    """An ``underflow`` warning for each output whose value lies below the smallest normal double
    (2.2e-308) in its canonical unit: a subnormal one has lost its digits, and a 0 that the
    physics reached by underflowing (1e-110 km/s cubed) is not the formula's value.

    Overflow needs no such test (the engine fails the system: no finite value); a 0 does, since
    outputs may be exactly 0 by physics (a phase at periastron).  So the physics is called once more
    at the nominal inputs of the systems with a 0, with numpy's underflow raised, only when there is
    such a 0: a 0 is flagged where that call underflowed."""
    if not result.outputs:
        return []
    values = np.concatenate([o["value"].ravel() for o in result.outputs.values()])
    if not np.count_nonzero(np.abs(values) < SMALLEST_NORMAL):       # the usual case, in one test
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


def failure(result: Result, index: int) -> Problem | None:
    """The 422 for system ``index`` if its inputs failed a constraint or gave no finite result."""
    errors = result.failed.get(index)
    return None if errors is None else invalid(errors, "the inputs are not physically consistent")


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
