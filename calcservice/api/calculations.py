"""One POST endpoint per declared calculation, derived from the registry."""

from __future__ import annotations

from flask import Blueprint, current_app, request

from ..registry import calculations
from ..core import Problem, compute
from .edge import json_body, json_response
from .render import FORMATS, render

bp = Blueprint("calculations", __name__)


def _endpoint(name: str):
    def view():
        settings = current_app.config["CALCSERVICE_SETTINGS"]
        body = json_body(settings.limits)
        if request.environ.get("QUERY_STRING"):
            for key in ("format", "plot"):
                given = request.args.getlist(key)
                if len(set(given)) > 1:      # which one was meant is a guess: the first, the last?
                    raise Problem(400, f"{key} is given {len(given)} times with different values",
                                  {key: [f"give one {key}, not {', '.join(repr(v[:40]) for v in given[:4])}"]})
            fmt = request.args.get("format", "json")
            plot = request.args.get("plot")  # chooses the histogram of a figure; other formats ignore it
        else:
            fmt, plot = "json", None
        if plot is not None:
            outputs = [o.name for o in calculations()[name].outputs]
            if plot not in outputs:
                raise Problem(400, f"plot must name an output of {name}",
                              {"plot": [f"{name} has no output {plot[:40]!r}; outputs are {', '.join(outputs)}"]})
        if fmt == "json":
            return json_response(compute(name, body, settings.limits))
        if fmt not in FORMATS:
            raise Problem(400, f"format must be one of: {', '.join(('json',) + tuple(FORMATS))}",
                          {"format": [f"unknown format {fmt[:40]!r}"]})
        return render(name, body, fmt, settings.limits, request.args)
    view.__name__ = f"calculate_{name.replace('-', '_')}"
    return view


for _calc in calculations().values():
    bp.add_url_rule(_calc.path, view_func=_endpoint(_calc.name), methods=["POST"])
