"""The reference page at ``GET /docs``: every calculation of the registry, for a person to read.

Each calculation shows its endpoint, inputs (units, domains, defaults, choices), outputs with
their formulas, conventions, references and constants with their sources, and its fictional
example three ways: as a curl command, as Python (the client), and as a link into the web form
with the example filled in.  The page is written on the server from the declarations: no script,
nothing from elsewhere, the form's Content-Security-Policy.
"""

from __future__ import annotations

import json
import re
import unicodedata
from functools import lru_cache
from html import escape
from importlib import resources
from urllib.parse import quote, urlencode

from flask import Blueprint, Response, request

from .. import __version__
from ..constants import CONSTANTS
from ..registry import Calculation, Input, calculations
from ..report import default_text, field_parts, tex_maths
from .form import secure

bp = Blueprint("docs", __name__)

OPTION_KEYS = ("correlations", "uncertainty", "units", "time_format", "covariance", "budget")


def form_link(calc: Calculation, example: dict | None = None) -> str:
    """The web form's address for ``calc``, with the fields of ``example`` filled in when given:
    ``/#NAME?period=41.6&period.sigma=0.02&...`` (the form opens it and computes)."""
    if not example:
        return f"/#{quote(calc.name)}"
    fields: list[tuple[str, str]] = []
    for name, value in example.items():
        if name == "correlations":
            fields.append(("correlations", "; ".join(f"{c['between'][0]},{c['between'][1]}={c['rho']:g}"
                                                      for c in value)))
        elif name == "uncertainty":
            fields += [(k if k != "method" else "uncertainty", str(v)) for k, v in value.items()]
        elif name == "time_format":
            fields.append((name, value))
        elif isinstance(value, list):
            fields.append((name, ", ".join(_text(v) for v in value)))
        elif isinstance(value, dict):
            if "value" in value:
                fields.append((name, _text(value["value"])))
            if "sigma" in value:
                fields.append((f"{name}.sigma", _text(value["sigma"])))
            elif "sigma_plus" in value:
                fields.append((f"{name}.sigma", f"+{_text(value['sigma_plus'])} -{_text(value['sigma_minus'])}"))
            if "unit" in value:
                fields.append((f"{name}.unit", value["unit"]))
        else:
            fields.append((name, _text(value)))
    return f"/#{quote(calc.name)}?{urlencode(fields, quote_via=quote)}"


def _text(v) -> str:
    return f"{v:g}" if isinstance(v, float) and abs(v) < 1e16 else str(v)


def curl_command(calc: Calculation, base_url: str) -> str:
    body = json.dumps(calc.example, separators=(", ", ": "))
    return (f"curl -s -X POST {base_url.rstrip('/')}{calc.path} \\\n"
            f"     -H 'Content-Type: application/json' \\\n     -d '{body}'")


def python_call(calc: Calculation, base_url: str) -> str:
    """The example as a call of :meth:`calcservice.client.Client.calculate`."""
    args = [repr(calc.name)]
    for name, value in calc.example.items():
        args.append(f"{name}={value!r}")
    joined = ",\n    ".join(args)
    return ("from calcservice.client import Client\n\n"
            f"answer = Client({base_url.rstrip('/')!r}).calculate(\n    {joined},\n)\n"
            "print(answer)                  # value ± sigma per output, as the report rounds it\n"
            "results = answer[\"results\"]    # every digit, as the service sent it")


# --------------------------------------------------------------------------- a declaration's maths as HTML
# The page has no script: the maths the LaTeX report and the figures set from a declaration's plain text
# (report.tex_maths) is written here as HTML, from the same TeX, so that the three agree.
_TEX_NAMES = {"alpha": "α", "beta": "β", "gamma": "γ", "Gamma": "Γ", "delta": "δ", "Delta": "Δ", "epsilon": "ε",
              "zeta": "ζ", "eta": "η", "theta": "θ", "kappa": "κ", "lambda": "λ", "mu": "μ", "nu": "ν", "xi": "ξ",
              "pi": "π", "rho": "ρ", "sigma": "σ", "tau": "τ", "phi": "φ", "chi": "χ", "psi": "ψ", "omega": "ω",
              "Omega": "Ω", "odot": "⊙", "leq": "≤", "geq": "≥", "gtrsim": "≳", "lesssim": "≲", "prime": "′",
              "pm": "±", "times": "×", ",": ""}   # TeX's thin space before a function: HTML keeps the space


def _braced(tex: str, start: int) -> tuple[str, int]:
    """The group at ``start`` ({...} balanced, else one character) and the index after it."""
    if tex[start:start + 1] != "{":
        return tex[start:start + 1], start + 1
    depth = 0
    for j in range(start, len(tex)):
        depth += (tex[j] == "{") - (tex[j] == "}")
        if depth == 0:
            return tex[start + 1:j], j + 1
    return tex[start + 1:], len(tex)


def tex_html(tex: str) -> str:
    """The TeX that ``report.tex_maths`` writes (symbols, ^ and _ groups, \\dot, \\sqrt, \\mathrm, functions) as HTML:
    variables in italics, functions and Greek letters upright, sub- and superscripts as such, minus signs."""
    out, i = [], 0
    while i < len(tex):
        c = tex[i]
        if c == "\\":
            m = re.compile(r"\\([A-Za-z]+|.)").match(tex, i)
            name, i = m.group(1), m.end()
            if name in ("mathrm", "dot", "sqrt"):
                group, i = _braced(tex, i)
                if name == "dot" and group.isalpha():
                    # a rate: the letter with its dot over it, in one italic (Ṁ, Ṗ), as the form writes it
                    out.append(f"<i>{unicodedata.normalize('NFC', group + chr(0x307))}</i>")
                    continue
                inner = escape(group) if name == "mathrm" else tex_html(group)
                out.append({"mathrm": inner, "dot": inner + chr(0x307), "sqrt": f"√({inner})"}[name])
            else:
                out.append(_TEX_NAMES.get(name, name))      # a function (sin, log) upright, by its name
        elif c in "^_":
            group, i = _braced(tex, i + 1)
            tag = "sup" if c == "^" else "sub"
            out.append(f"<{tag}>{tex_html(group)}</{tag}>")
        elif c.isalpha():
            m = re.compile(r"[A-Za-z]+").match(tex, i)
            out.append(f"<i>{m.group(0)}</i>")
            i = m.end()
        else:
            out.append("−" if c == "-" else escape(c))
            i += 1
    return "".join(out)


def maths_html(text: str, names=(), formula: bool = False) -> str:
    """A declaration's text (a description, a formula) as HTML with its maths set, the field names it mentions as
    code (``report.field_parts``), in a span whose title keeps the text itself to copy."""
    html = []
    for k, part in enumerate(field_parts(text, names, formula)):
        if k % 2:
            html.append(f"<code>{escape(part)}</code>")
            continue
        pieces = tex_maths(part, lambda w: escape(w).replace("$", "&#36;")).split("$")
        html += [tex_html(p) if j % 2 else p for j, p in enumerate(pieces)]
    return f'<span class="math" title="{escape(text)}">{"".join(html)}</span>'


def _input_row(spec: Input, names=()) -> str:
    if spec.kind == "choice":
        domain = "one of " + ", ".join(f"<code>{escape(c)}</code>" for c in spec.choices)
        unit = ""
    else:
        domain = escape(spec.domain.describe().removeprefix("must be "))
        unit = escape(spec.unit or "dimensionless")
    notes = []
    if spec.kind == "series":
        notes.append("a list")
    # what the description already says is not said again ("(JD, or ISO 8601); Julian Date or ISO 8601")
    if spec.time and "ISO 8601" not in spec.description:
        notes.append("Julian Date or ISO 8601")
    if spec.isotropic and '"isotropic"' not in spec.description:
        notes.append('or <code>"isotropic"</code>')
    if spec.default is not None:
        notes.append(f"default {escape(default_text(spec.default))}")
    need = "required" if spec.required and spec.default is None else "optional"
    return (f"<tr><td><code>{escape(spec.name)}</code></td><td>{unit}</td><td>{domain}</td><td>{need}</td>"
            f"<td>{maths_html(spec.description, names)}{'; ' if notes else ''}{'; '.join(notes)}</td></tr>")


def _sources(calc: Calculation, cited: tuple[str, ...]) -> str:
    """An output's sources as links to the numbered references of its calculation: [1, 3]."""
    numbers = sorted(calc.references.index(r) + 1 for r in cited if r in calc.references)
    return ("[" + ", ".join(f'<a href="#{escape(calc.name)}-ref{k}">{k}</a>' for k in numbers) + "]"
            if numbers else "")


def _section(calc: Calculation, base_url: str) -> str:
    key = escape(calc.name)
    names = [f.name for f in (*calc.inputs, *calc.outputs)]
    inputs = "".join(_input_row(s, names) for s in calc.inputs)
    outputs = "".join(f"<tr><td><code>{escape(o.name)}</code></td><td>{escape(o.unit or 'dimensionless')}</td>"
                      f"<td>{maths_html(o.description, names)}</td>"
                      f"<td class=\"formula\">{maths_html(o.formula, names, formula=True)}</td>"
                      f"<td>{_sources(calc, o.references)}</td></tr>"
                      for o in calc.outputs)
    rules = [f"exactly one of {', '.join(g)}" for g in calc.exclusive]
    rules += [f"at most one of {', '.join(g)}" for g in calc.at_most_one]
    # one rule per message, naming every input it is said of: a rule declared for each of four inputs was said
    # four times, and "belongs to an orbit" named none of them
    said: dict[str, list[str]] = {}
    for c in calc.constraints:
        fields = said.setdefault(c.message, [])
        fields += [f for f in c.fields if f not in fields and not f.startswith("_")]
    # the messages as the 422 says them (the maths as typed), so that a refusal can be found here
    rules += [f"{', '.join(fields)}: {message}" if fields else message for message, fields in said.items()]
    conventions = "".join(f"<dt>{escape(k.replace('_', ' '))}</dt><dd>{escape(v)}</dd>"
                          for k, v in calc.conventions.items())
    references = "".join(f'<li id="{escape(calc.name)}-ref{k}">{escape(r)}</li>'
                         for k, r in enumerate(calc.references, 1))
    constants = "".join(f"<li><code>{escape(c.symbol)}</code> = {c.value:.10g} {escape(c.unit)}: "
                        f"{escape(c.description)} ({escape(c.source)})</li>"
                        for c in (CONSTANTS[n] for n in calc.constants if n in CONSTANTS))
    parts = [
        f'<section class="calculation" id="{key}" data-calculation="{key}">',
        f"<h2>{escape(calc.title)} <code class=\"name\">{key}</code></h2>",
        f'<p class="endpoint"><code>POST {escape(calc.path)}</code> · <code>POST /v1/batch/{key}</code></p>',
        f"<p>{escape(calc.summary)}</p>",
        "<h3>Inputs</h3>",
        '<table class="inputs"><thead><tr><th>name</th><th>default unit</th><th>domain</th><th>needed</th>'
        f"<th>meaning</th></tr></thead><tbody>{inputs}</tbody></table>",
    ]
    if rules:
        parts.append("<p class=\"rules\">Rules of the inputs (a request that breaks one is refused with 422 naming "
                     "them): " + "; ".join(escape(r) for r in rules) + ".</p>")
    parts += [
        "<h3>Outputs</h3>",
        '<table class="outputs"><thead><tr><th>name</th><th>unit</th><th>meaning</th><th>formula</th>'
        '<th>sources</th></tr></thead>'
        f"<tbody>{outputs}</tbody></table>",
    ]
    if conventions:
        parts.append(f"<h3>Conventions</h3><dl>{conventions}</dl>")
    if references:
        parts.append(f"<h3>References</h3><ol>{references}</ol>")
    if constants:
        parts.append(f"<h3>Constants</h3><ul>{constants}</ul>")
    if calc.example:
        parts += [
            "<h3>Example (a fictional system)</h3>",
            f'<pre class="curl">{escape(curl_command(calc, base_url))}</pre>',
            f'<pre class="python">{escape(python_call(calc, base_url))}</pre>',
            f'<p><a class="form-link" href="{escape(form_link(calc, dict(calc.example)))}">Open this example in the '
            f'form</a> · <a class="form-plain" href="{escape(form_link(calc))}">the empty form</a></p>',
        ]
    parts.append("</section>")
    return "\n".join(parts)


@lru_cache(maxsize=8)
def page_html(base_url: str) -> str:
    """The whole page for a service answering at ``base_url`` (the examples' address)."""
    calcs = list(calculations().values())
    index = "".join(f'<li><a href="#{escape(c.name)}">{escape(c.title)}</a> <code>{escape(c.name)}</code></li>'
                    for c in calcs)
    body = "\n".join(_section(c, base_url) for c in calcs)
    return f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>calcservice reference</title>
<link rel="stylesheet" href="/docs/docs.css">
</head>
<body>
<header class="masthead"><h1>calcservice reference</h1>
<p>Binary-star orbital elements to physical numbers, each with its uncertainty, formula and sources.
Version <code>{escape(__version__)}</code>. The <a href="/">form</a> computes them in the browser;
the machine-readable description is <a href="/openapi.yaml">openapi.yaml</a>; limits: <a href="/v1/limits">/v1/limits</a>.</p>
</header>
<main>
<section id="wire">
<h2>Inputs, answers, errors</h2>
<p>Every numeric input is a number (exact), <code>{{"value": 12.3, "sigma": 0.2}}</code> (normal),
<code>{{"value": 12.3, "sigma_minus": 0.1, "sigma_plus": 0.3}}</code> (split normal) or
<code>{{"samples": [...]}}</code> (your own draws, paired index by index across inputs); an object may add
<code>"unit"</code> (an astropy unit string), otherwise the input's default unit applies. Options:
<code>correlations</code>, <code>uncertainty</code> (<code>linear</code> or <code>monte_carlo</code>, with
<code>samples</code>, at least 100, and <code>seed</code>, which without a method mean Monte Carlo), <code>units</code> (of the outputs), <code>covariance</code>,
<code>budget</code>. Each output answers <code>value</code>, <code>sigma</code> and its <code>unit</code>
(Monte Carlo: the median, and <code>low</code>/<code>high</code> of the central 68.27 % interval).
Errors are RFC 9457 problem details naming the fields. <code>?format=latex</code> or <code>markdown</code>
gives the derivation report, <code>svg</code> or <code>png</code> a figure.
<code>POST /v1/batch/NAME</code> takes many systems as rows or columns (JSON, Arrow, CSV or ECSV); with a
table, <code>?options=</code> carries the batch's options as JSON and <code>?keep=name,hip</code> brings columns of
your own back beside each system's results.</p>
</section>
<nav><h2>Calculations</h2><ul class="index">{index}</ul></nav>
{body}
</main>
</body>
</html>
"""


@bp.get("/docs")
def page():
    r = Response(page_html(request.host_url), content_type="text/html; charset=utf-8")
    r.headers["Cache-Control"] = "no-cache"
    return secure(r)


@bp.get("/docs/docs.css")
def style():
    css = resources.files("calcservice").joinpath("static", "docs.css").read_bytes()
    r = Response(css, content_type="text/css; charset=utf-8")
    r.headers["Cache-Control"] = "no-cache"
    return secure(r)
