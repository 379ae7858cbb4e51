"""One calculation for one system: request dict in, response dict out (raises :class:`Problem`)."""

from __future__ import annotations

from typing import Any

from ..config import Limits
from ..engine import EngineError, Result, evaluate
from .parse import Parsed, find, parse
from .problems import Problem, invalid
from .render import Rendering


def run(parsed: Parsed) -> Result:
    """The engine on parsed inputs; an input problem it finds becomes a 422."""
    try:
        return evaluate(parsed.calc, parsed.quantities, parsed.statics, parsed.options)
    except EngineError as e:
        raise invalid(e.errors, e.detail) from None


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
