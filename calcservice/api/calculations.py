"""One POST endpoint per declared calculation, derived from the registry."""

from __future__ import annotations

from flask import Blueprint, current_app, request

from ..registry import calculations
from ..core import Problem, compute
from ..media import JSON, MIMETYPES, quality
from .edge import json_body, json_response, query_parameters
from .render import FORMATS, render

bp = Blueprint("calculations", __name__)

# what a calculation answers, by ?format= (json, the default, first)
ANSWER_TYPES = {"json": JSON, **{f: MIMETYPES[f].split(";")[0] for f in FORMATS}}
CALCULATION_QUERY = {"format": f"the answer's form: {', '.join(ANSWER_TYPES)}",
                     "plot": "with format=svg or png, the output whose Monte Carlo histogram is drawn"}
OFFERED = ", ".join(f"{media} (format={f})" if f != "json" else media for f, media in ANSWER_TYPES.items())


def acceptable(fmt: str) -> None:
    """A 406 naming Accept when it lists media types and the answer's is not among them (q=0 refuses
    a type; ``*/*`` and ``application/*`` take JSON); the problem lists what this calculation can
    answer, and which ``format`` gives a type that Accept does take.  No Accept, ``*/*`` (curl's, a
    browser's fetch) or one that reads as no media range at all takes every answer."""
    header = request.headers.get("Accept")
    if not header or header == "*/*":
        return
    accept = request.accept_mimetypes
    answer = ANSWER_TYPES[fmt]
    q = quality(accept, answer)
    if q is None or q > 0:
        return
    instead = [f for f, media in ANSWER_TYPES.items() if f != fmt and (quality(accept, media) or 0) > 0]
    hint = f"; ask with format={instead[0]} for {ANSWER_TYPES[instead[0]]}" if instead else ""
    raise Problem(406, f"this request is answered as {answer}, which Accept does not take; a calculation answers "
                       f"{OFFERED}{hint}",
                  {"Accept": [f"must accept {answer}" + (f" (or give format={instead[0]})" if instead else "")]})


def _endpoint(name: str):
    def view():
        settings = current_app.config["CALCSERVICE_SETTINGS"]
        body = json_body(settings.limits)
        query = query_parameters(CALCULATION_QUERY, "a calculation")
        fmt = query.get("format", "json")
        plot = query.get("plot")      # chooses the histogram of a figure
        if plot is not None:
            outputs = [o.name for o in calculations()[name].outputs]
            if plot not in outputs:
                raise Problem(400, f"plot must name an output of {name}",
                              {"plot": [f"{name} has no output {plot[:40]!r}; outputs are {', '.join(outputs)}"]})
        if fmt != "json" and fmt not in FORMATS:
            raise Problem(400, f"format must be one of: {', '.join(('json',) + tuple(FORMATS))}",
                          {"format": [f"unknown format {fmt[:40]!r}"]})
        if plot is not None and fmt not in ("svg", "png"):
            # no other answer draws one: answering without it would leave the parameter unused
            raise Problem(400, f"plot chooses the histogram of a figure: give it with format=svg or format=png, "
                               f"not format={fmt[:40]}",
                          {"plot": [f"draws a histogram with format=svg or png; format={fmt[:40]} draws none"]})
        acceptable(fmt)
        if fmt == "json":
            return json_response(compute(name, body, settings.limits))
        return render(name, body, fmt, settings.limits, request.args)
    view.__name__ = f"calculate_{name.replace('-', '_')}"
    return view


for _calc in calculations().values():
    bp.add_url_rule(_calc.path, view_func=_endpoint(_calc.name), methods=["POST"])
