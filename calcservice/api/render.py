"""Responses in formats other than JSON: ``?format=latex|markdown`` (the derivation report) and
``?format=svg|png`` (figures: radial-velocity curves of a time series, or with ``&plot=NAME``
the histogram of a Monte Carlo output's draws)."""

from __future__ import annotations

from typing import Any, Mapping

from flask import Response

from .. import plots, report
from ..config import Limits
from ..core import Problem, compute, find
from ..media import FORMATS, MIMETYPES


def render(name: str, body: Any, fmt: str, limits: Limits, args: Mapping[str, str] | None = None) -> Response:
    """The calculation ``name`` on ``body``, rendered as ``fmt`` (one of :data:`FORMATS`)."""
    calc = find(name)
    args = args or {}
    if fmt in ("latex", "markdown"):
        response = compute(name, report.asking_budget(body), limits)
        text = report.report(response, calc, fmt, body if isinstance(body, dict) else None)
        return Response(text, content_type=MIMETYPES[fmt])
    if fmt not in ("svg", "png"):
        raise Problem(400, f"format must be one of: json, {', '.join(FORMATS)}", {"format": [f"unknown format {fmt!r}"]})
    return Response(figure(name, body, fmt, limits, args.get("plot")), mimetype=MIMETYPES[fmt])


def figure(name: str, body: Any, fmt: str, limits: Limits, plot: str | None = None) -> bytes:
    """The figure bytes: a histogram of the draws of output ``plot``, or the time-series curve."""
    calc = find(name)
    outputs = {o.name: o for o in calc.outputs}
    if plot is not None:
        if plot not in outputs:
            raise Problem(400, f"plot must name an output of {name}",
                          {"plot": [f"{name} has no output {plot[:40]!r}; outputs are {', '.join(outputs)}"]})
        response = compute(name, body, limits, keep_draws=True)
        if response["uncertainty"]["method"] != "monte_carlo":
            raise Problem(422, "a histogram needs Monte Carlo draws",
                          {"plot": ['a histogram needs the Monte Carlo method: add "uncertainty": '
                                    '{"method": "monte_carlo"} to the request']})
        draws = response.get("_draws", {}).get(plot)
        entry = response["results"].get(plot)
        if draws is not None and getattr(draws, "ndim", 1) > 1:
            raise Problem(400, f"{plot} is a series; plot a single-valued output",
                          {"plot": [f"{plot} is a series; without plot=, format={fmt} draws the series"]})
        if draws is None or entry is None:
            raise Problem(422, f"{plot} is not determined by the given inputs",
                          {"plot": [f"{plot} is not among this response's results"]})
        try:
            return plots.histogram(plot, draws, entry, fmt, outputs[plot].description, outputs[plot].unit)
        except plots.PlotError as e:
            raise Problem(422, e.message, {e.field: [e.message]}) from None
    if not plots.has_curve(calc):
        raise Problem(400, f"format={fmt} on {name} draws the histogram of a Monte Carlo output: add plot=NAME",
                      {"plot": [f"give plot=NAME (one of {', '.join(outputs)}) with the Monte Carlo method"]})
    response = compute(name, body, limits)
    try:
        return plots.curve(calc, response, body, fmt, lambda b: compute(name, b, limits))
    except plots.PlotError as e:
        raise Problem(422, e.message, {e.field: [e.message]}) from None
