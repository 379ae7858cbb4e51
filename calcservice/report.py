"""The derivation report: a response printed for a paper or a referee, in LaTeX, Markdown or plain text.

Numbers are rounded for print by the Particle Data Group rule (Review of Particle
Physics, introduction, "Rounding"): the three highest-order digits of the uncertainty
decide how many significant digits it keeps —

* 100 to 354: two significant digits;
* 355 to 949: one significant digit;
* 950 to 999: round up to 1000 and keep two significant digits

— and the value is rounded to the same decimal place.  The JSON response keeps full
precision; only this printed form is rounded.

The report is built from the response (which already carries inputs, results,
provenance and the uncertainty method) and the calculation's declaration (for the
descriptions of inputs and outputs), so every calculation in the registry gets one
without extra code.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from datetime import datetime, timedelta
from decimal import ROUND_HALF_UP, Context, Decimal, localcontext
from typing import Any, Iterable, Mapping

from .registry import Calculation

#: Beyond this many significant digits a double carries no information; an uncertainty far smaller
#: than the value's last representable digit is then treated as negligible for print.
MAX_SIGNIFICANT = 16
#: Significant digits printed for exact numbers (no uncertainty).
EXACT_DIGITS = 6
#: Values outside [1e-3, 1e7) (Julian Dates stay plain) are printed with a common power of ten.
PLAIN_RANGE = (-3, 6)
#: Series longer than this are summarised in the report instead of tabulated.
MAX_SERIES_ROWS = 200

_CONTEXT = Context(prec=800, Emax=10_000, Emin=-10_000)


def _decimal(x: float) -> Decimal:
    # repr gives the shortest string that round-trips, so 0.354 is 0.354 and not 0.35399999...
    return Decimal(repr(float(x)))


def leading_digits(sigma: float) -> tuple[int, int]:
    """The three highest-order digits of ``sigma`` (100..999) and the power of ten of the first one."""
    d = _decimal(abs(sigma))
    if d == 0:
        raise ValueError("an uncertainty of zero has no leading digits")
    digits = "".join(map(str, d.as_tuple().digits)).lstrip("0")
    return int((digits + "000")[:3]), d.adjusted()


def pdg_place(sigma: float) -> int:
    """The power of ten of the last digit kept when printing a number with uncertainty ``sigma``.

    The three highest-order digits decide: 100-354 keep two significant digits, 355-949 one,
    950-999 are rounded up to 1000 and keep two (so the last digit is that of the old leading one).
    """
    three, lead = leading_digits(sigma)
    if three <= 354:
        return lead - 1
    return lead


def round_at(x: float | Decimal, place: int) -> Decimal:
    """``x`` rounded (half away from zero) at the digit of 10**place; never a negative zero."""
    with localcontext(_CONTEXT):
        d = x if isinstance(x, Decimal) else _decimal(x)
        q = d.quantize(Decimal(1).scaleb(place), rounding=ROUND_HALF_UP)
        return abs(q) if q == 0 else q


def round_sigma(sigma: float) -> Decimal:
    """The uncertainty as printed: one or two significant digits by the PDG rule (950-999 -> 1000)."""
    three, lead = leading_digits(sigma)
    if three >= 950:
        with localcontext(_CONTEXT):
            return Decimal(1).scaleb(lead + 1).quantize(Decimal(1).scaleb(lead))
    return round_at(sigma, pdg_place(sigma))


def pdg_round(value: float, sigma: float) -> tuple[str, str]:
    """``value`` and ``sigma`` as printed by the PDG rule, in plain decimal notation.

    >>> pdg_round(1.2345, 0.827)
    ('1.2', '0.8')
    """
    place = pdg_place(sigma)
    return _plain(round_at(value, place)), _plain(round_sigma(sigma))


def _plain(d: Decimal, shift: int = 0) -> str:
    with localcontext(_CONTEXT):
        return format(d.scaleb(-shift), "f")


@dataclass(frozen=True)
class Printed:
    """A number ready to print: digits as strings and a common power of ten (0 when none)."""

    value: str
    sigma: str | None = None
    plus: str | None = None
    minus: str | None = None
    exponent: int = 0

    @property
    def exact(self) -> bool:
        return self.sigma is None and self.plus is None


def _finite(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def _exponent_for(largest: float) -> int:
    if largest == 0 or not math.isfinite(largest):
        return 0
    e = _decimal(abs(largest)).adjusted()
    return 0 if PLAIN_RANGE[0] <= e <= PLAIN_RANGE[1] else e


def _exact(value: float, digits: int = EXACT_DIGITS) -> Printed:
    if value == 0:
        return Printed("0")
    lead = _decimal(abs(value)).adjusted()
    exponent = _exponent_for(value)
    d = round_at(value, lead - digits + 1).normalize(_CONTEXT)
    text = _plain(d, exponent)
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return Printed(text, exponent=exponent)


def _bounded_place(value: float, place: int) -> int:
    """Never print more digits than a double holds (an uncertainty far below the value's precision)."""
    if value != 0 and math.isfinite(value):
        lead = _decimal(abs(value)).adjusted()
        return max(place, lead - MAX_SIGNIFICANT + 1)
    return place


def printed(value, sigma=None, minus=None, plus=None, digits: int = EXACT_DIGITS) -> Printed | None:
    """A measured number rounded for print: symmetric ``sigma``, or asymmetric ``minus``/``plus``.

    With asymmetric errors the smaller one sets the decimal place (so neither is printed with
    fewer digits than the rule asks of it), and both are rounded there.  Without a positive,
    finite uncertainty the value is printed with ``digits`` significant digits.
    """
    if not _finite(value):
        return None
    value = float(value)
    if _finite(minus) and _finite(plus) and (minus > 0 or plus > 0):
        small = min(x for x in (minus, plus) if x > 0)
        place = _bounded_place(value, pdg_place(small))
        if math.isclose(minus, plus, rel_tol=1e-12):
            return printed(value, sigma=minus, digits=digits)
        exponent = _exponent_for(max(abs(value), plus, minus))
        lo = round_sigma(minus) if minus == small else round_at(minus, place)
        hi = round_sigma(plus) if plus == small else round_at(plus, place)
        place = min(place, lo.as_tuple().exponent, hi.as_tuple().exponent)
        if _plain(lo) == _plain(hi):
            return Printed(_plain(round_at(value, place), exponent), sigma=_plain(hi, exponent), exponent=exponent)
        return Printed(_plain(round_at(value, place), exponent), plus=_plain(hi, exponent),
                       minus=_plain(lo, exponent), exponent=exponent)
    if _finite(sigma) and sigma > 0:
        place = pdg_place(sigma)
        bounded = _bounded_place(value, place)
        if bounded != place:
            return _exact(value, MAX_SIGNIFICANT)
        exponent = _exponent_for(max(abs(value), sigma))
        return Printed(_plain(round_at(value, place), exponent), sigma=_plain(round_sigma(sigma), exponent),
                       exponent=exponent)
    return _exact(value, digits)


def printed_entry(entry: Mapping[str, Any], digits: int = EXACT_DIGITS) -> Printed | None:
    """A response's measured entry ({"value", "sigma"[, "low", "high"]}) rounded for print.

    Monte Carlo entries print the median with the central 68.27 % interval as +/- errors.
    """
    value = entry.get("value")
    low, high = entry.get("low"), entry.get("high")
    if _finite(value) and _finite(low) and _finite(high):
        return printed(value, minus=value - low, plus=high - value, digits=digits)
    if "sigma_minus" in entry and "sigma_plus" in entry:
        return printed(value, minus=entry["sigma_minus"], plus=entry["sigma_plus"], digits=digits)
    return printed(value, sigma=entry.get("sigma"), digits=digits)


# --------------------------------------------------------------------------- styles
class Style:
    """How one output format writes numbers, units, names and tables."""

    name = "text"
    pm = "+-"

    def text(self, s: str) -> str:
        return s

    def code(self, s: str) -> str:
        return s

    def unit(self, unit: str) -> str:
        return unit or ""

    def number(self, p: Printed | None) -> str:
        if p is None:
            return "-"
        if p.exact:
            core = p.value
        elif p.sigma is not None:
            core = f"{p.value} {self.pm} {p.sigma}"
        else:
            core = f"{p.value} +{p.plus} -{p.minus}"
        if p.exponent:
            return f"({core}) x 10^{p.exponent}" if not p.exact else f"{core} x 10^{p.exponent}"
        return core


class Text(Style):
    pm = "±"

    def number(self, p):
        s = super().number(p)
        return s.replace(" x 10^", " × 10^").replace(" -", " −") if p is not None else s


class Markdown(Style):
    name = "markdown"
    pm = "±"

    def text(self, s: str) -> str:
        out = str(s)
        for ch in "\\`*_<>|":
            out = out.replace(ch, "\\" + ch)
        return out

    def code(self, s: str) -> str:
        return f"`{str(s).replace('`', '')}`"

    def unit(self, unit: str) -> str:
        return self.text(unit) if unit else ""

    def number(self, p):
        if p is None:
            return "–"
        if p.exact:
            core = p.value
        elif p.sigma is not None:
            core = f"{p.value} ± {p.sigma}"
        else:
            core = f"{p.value} +{p.plus} / −{p.minus}"
        if p.exponent:
            return f"{core} × 10<sup>{p.exponent}</sup>" if p.exact else f"({core}) × 10<sup>{p.exponent}</sup>"
        return core


_LATEX_SPECIAL = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_",
                  "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}",
                  "<": r"\textless{}", ">": r"\textgreater{}", "|": r"\textbar{}"}


class Latex(Style):
    name = "latex"

    def text(self, s: str) -> str:
        return "".join(_LATEX_SPECIAL.get(ch, ch) for ch in str(s))

    def code(self, s: str) -> str:
        return r"\texttt{" + self.text(s) + "}"

    def unit(self, unit: str) -> str:
        if not unit:
            return ""
        try:
            from astropy import units as u
            latex = u.Unit(unit).to_string("latex_inline")
        except Exception:
            return self.text(unit)
        # astropy writes the astronomical unit "AU"; its symbol is "au" (IAU 2012 Resolution B2)
        return re.sub(r"(?<![A-Za-z])AU(?![A-Za-z])", "au", latex)

    def number(self, p):
        if p is None:
            return "--"
        if p.exact:
            core = p.value
        elif p.sigma is not None:
            core = rf"{p.value} \pm {p.sigma}"
        else:
            core = rf"{p.value}^{{+{p.plus}}}_{{-{p.minus}}}"
        if p.exponent:
            core = (rf"{core} \times 10^{{{p.exponent}}}" if p.exact
                    else rf"({core}) \times 10^{{{p.exponent}}}")
        return f"${core}$"


STYLES = {"text": Text(), "markdown": Markdown(), "latex": Latex()}


# --------------------------------------------------------------------------- plain-text maths as TeX
# The declarations write maths as plain text ("M1 sin^3 i", "(1 - e^2)^{3/2}", "Mdot2", "Gamma_e", "GM_sun"), read by
# the same rules as the web form's (static/form.js, mathNodes): here they become TeX for matplotlib's mathtext and LaTeX.
_GREEK = frozenset("alpha beta gamma Gamma delta Delta epsilon zeta eta theta kappa lambda mu nu xi pi rho sigma "
                   "tau phi chi psi omega Omega".split())
_WORDS = {"Mdot": r"\dot{M}", "Pdot": r"\dot{P}", "sun": r"\odot"}
_FUNCTIONS = frozenset({"sin", "cos", "tan", "arctan", "log", "exp", "ln"})      # set upright, as TeX sets them
_MATH_SYMBOLS = (("<=", r"\leq"), (">=", r"\geq"), (">~", r"\gtrsim"), ("<~", r"\lesssim"), ("''", r"^{\prime\prime}"),
                 ("+-", r"\pm"))
# characters that read the same in text and in maths: between two maths tokens they join them into one formula
_NEUTRAL = frozenset(" 0123456789.,()[]+-/*=:")
_LETTERS = re.compile(r"([A-Za-z]+)(\d*)(?![A-Za-z])")
_POWER = re.compile(r"(\d+(?:\.\d+)?)e([+-]?\d+)(?![\w.])")
_BASE = re.compile(r"(?:^|[^A-Za-z])([A-Za-z]+)$")
_ARTICLE = re.compile(r" (?!(?:sin|cos|tan|log|exp|ln)\b)[A-Za-z]{2,}")


def _symbol(letters: str) -> str | None:
    """A run of letters as a maths symbol (a Greek letter, a function, a dotted rate, a one-letter variable), or
    None for a word."""
    if letters in _GREEK or letters in _FUNCTIONS:
        return "\\" + letters
    if letters in _WORDS:
        return _WORDS[letters]
    return letters if len(letters) == 1 else None


def _group(text: str, start: int) -> tuple[str, int] | None:
    """The argument of ^ or _ at ``start``: {...} or (...) balanced, else a number or a word; (inner, end)."""
    if text.startswith(("{", "("), start):
        open_, close = text[start], "}" if text[start] == "{" else ")"
        depth = 0
        for j in range(start, len(text)):
            depth += (text[j] == open_) - (text[j] == close)
            if depth == 0:
                return text[start + 1:j], j + 1
        return None
    m = re.compile(r"-?[0-9.]+|[A-Za-z]+").match(text, start)
    return (m.group(0), m.end()) if m else None


def _maths_tokens(text: str, symbols: tuple = _MATH_SYMBOLS) -> list[tuple[str, str]]:
    """``text`` as (kind, content) tokens: "math" (TeX), "text" (words, as written) or "neutral" (as written)."""
    out: list[tuple[str, str]] = []
    i = 0
    while i < len(text):
        c, prev = text[i], text[i - 1] if i else " "
        if c in "^_" and i:
            base = _BASE.search(text[:i])
            if c == "^" or (base and (len(base.group(1)) <= 2 or _symbol(base.group(1)) is not None)):
                g = _group(text, i + 1)
                if g:
                    out.append(("math", c + "{" + _inner_tex(g[0], symbols) + "}"))
                    i = g[1]
                    continue
        if c.isdigit() and not (prev.isalnum() or prev in "_."):
            m = _POWER.match(text, i)
            if m:                   # 1e12 -> 10^{12}, 2.5e-7 -> 2.5 x 10^{-7}
                out.append(("math", ("" if m.group(1) == "1" else m.group(1) + r" \times ")
                            + "10^{" + m.group(2).lstrip("+") + "}"))
                i = m.end()
                continue
        symbol = next(((a, t) for a, t in symbols if text.startswith(a, i)), None)
        if symbol:
            out.append(("math", symbol[1]))
            i += len(symbol[0])
            continue
        if text.startswith(("e.g.", "i.e."), i) and not (prev.isascii() and prev.isalnum()):
            out.append(("text", text[i:i + 4]))      # the abbreviations are words, not e times g
            i += 4
            continue
        if c.isascii() and c.isalpha():
            m = _LETTERS.match(text, i)
            # a word begins here: not within one, nor the s of a possessive ("the primary's orbit")
            starts = not (prev.isascii() and (prev.isalnum() or prev == "_")) and not (
                prev == "'" and i > 1 and text[i - 2].isalpha())
            if m and starts:
                letters, digits = m.groups()
                tex = _symbol(letters)
                if len(letters) == 2 and not digits and tex is None and text.startswith("_", m.end()):
                    tex = letters                   # a two-letter symbol with a subscript: GM_sun
                if letters == "a" and not digits and _ARTICLE.match(text, m.end()):
                    tex = None                      # the article ("a dark companion"), not the semi-major axis
                if len(letters) == 1 and not digits and re.compile(r"-[A-Za-z]").match(text, m.end()):
                    tex = None                      # a hyphenated word ("o-star"), not a variable
                if len(letters) == 1 and not digits and out[-1:] == [("neutral", "/")] and len(out) > 1 \
                        and out[-2][0] == "text":
                    tex = None                      # a unit's denominator ("1000 km/s"), not a variable
                if letters == "sqrt" and not digits and (g := _group(text, m.end())) and text[m.end()] == "(":
                    out.append(("math", r"\sqrt{" + _inner_tex(g[0], symbols) + "}"))
                    i = g[1]
                    continue
                if tex is not None:
                    before = next((kind for kind, t in reversed(out) if t != " "), None)
                    if letters in _FUNCTIONS and before == "math" and out[-1][1] == " ":
                        tex = r"\," + tex      # mathtext sets no space before sin after a symbol (M1 sin^3 i)
                    out.append(("math", tex + (f"_{{{digits}}}" if digits else "")))
                    i = m.end()
                    continue
            word = re.compile(r"[A-Za-z0-9]+").match(text, i).group(0)     # a word, digits run into it kept
            out.append(("text", word))
            i += len(word)
            continue
        out.append(("neutral" if c in _NEUTRAL else "text", c))
        i += 1
    return out


def _inner_tex(text: str, symbols: tuple = _MATH_SYMBOLS) -> str:
    """A superscript's or subscript's argument, all of it maths (its words upright)."""
    return "".join(s if kind != "text" else (r"\mathrm{" + s + "}" if s.isalnum() else s)
                   for kind, s in _maths_tokens(text, symbols))


#: the symbols for plain LaTeX, which has no \gtrsim nor \lesssim without a package (amssymb), and whose text
#: fonts have no < nor > (OT1 sets them as inverted marks): they are set as maths too
LATEX_SYMBOLS = tuple((a, {">~": r"\stackrel{>}{\sim}", "<~": r"\stackrel{<}{\sim}"}.get(a, t))
                      for a, t in _MATH_SYMBOLS) + (("<", "<"), (">", ">"))
_RELATIONS = frozenset({"<", ">", r"\leq", r"\geq"})


def tex_maths(text: str, plain=lambda s: s.replace("$", r"\$"), symbols: tuple = _MATH_SYMBOLS) -> str:
    """A declaration's text with its maths set as TeX between ``$`` signs and its words left as words (through
    ``plain``, which escapes them for the target): "spectroscopic mass function M2^3 sin^3 i / (M1+M2)^2" becomes
    "spectroscopic mass function $M_{2}^{3}\\sin^{3} i / (M_{1}+M_{2})^{2}$", for matplotlib's mathtext and LaTeX
    alike; one-letter variables are italic, functions upright, Greek letters by name."""
    tokens = _maths_tokens(text, symbols)
    out, k = [], 0
    while k < len(tokens):
        kind, s = tokens[k]
        if kind != "math":
            out.append(plain(s))
            k += 1
            continue
        # the formula runs on through neutral tokens up to the next word (its closing brackets, "= 90"), and takes
        # an opening bracket or sign written against it; spaces at its ends stay outside
        j = k + 1
        while j < len(tokens) and tokens[j][0] != "text":
            j += 1
        # a relation takes the number written before it too ("0 < i < 180"), set as one formula
        start, back = k, "([-" + (" 0123456789." if s in _RELATIONS else "")
        while start > 0 and tokens[start - 1][0] == "neutral" and tokens[start - 1][1] in back and out \
                and out[-1] == tokens[start - 1][1]:
            out.pop()
            start -= 1
        while start < k and tokens[start][1] == " ":
            out.append(" ")
            start += 1
        formula = "".join(t for _, t in tokens[start:j])
        if start < k and tokens[start][1] in "([" \
                and formula.count(tokens[start][1]) > formula.count(")]"["([".index(tokens[start][1])]):
            out.append(tokens[start][1])    # a bracket whose partner is beyond the formula stays beside it
            formula = formula[1:]
        tex = formula.rstrip(" ([-")
        while tex and tex[-1] in ")]" and tex.count(tex[-1]) > tex.count("(["[")]".index(tex[-1])]):
            tex = tex[:-1]                  # likewise a closing bracket whose partner is before it
        out.append("$" + tex.rstrip() + "$" + formula[len(tex.rstrip()):])
        k = j
    return "".join(out)


def field_parts(text: str, names: Iterable[str] = (), formula: bool = False) -> list[str]:
    """``text`` split around the calculation's field names it mentions (odd items), which a reader finds in the
    inputs' table as written: set as maths, ``omega_primary`` would read omega with a subscript and ``m1`` as
    M with a subscript.  Names that are words (period, inclination) stay words; a formula is written in symbols
    (a1 sin i, K1), so there only a name with an underscore is a field's."""
    fields = sorted((n for n in names if "_" in n or (not formula and any(c.isdigit() for c in n))),
                    key=len, reverse=True)
    if not fields:
        return [text]
    return re.split(r"(?<![\w])(" + "|".join(map(re.escape, fields)) + r")(?![\w])", text)


def latex_text(text: str, names: Iterable[str] = (), formula: bool = False) -> str:
    """A declaration's text (a description, a formula) for the LaTeX report: the field names it mentions as code
    (``field_parts``), the rest with its maths set as maths."""
    style = STYLES["latex"]
    return "".join(style.code(p) if k % 2 else tex_maths(p, style.text, LATEX_SYMBOLS) if p else ""
                   for k, p in enumerate(field_parts(text, names, formula)))


# --------------------------------------------------------------------------- the report's content
def asking_budget(body: Any) -> Any:
    """The request ``body`` with the uncertainty budget asked for, since the report always shows it.
    A body that is not an object, or whose ``budget`` is not a boolean, is left for the parser to refuse."""
    if isinstance(body, Mapping) and isinstance(body.get("budget", False), bool):
        return {**body, "budget": True}
    return body



def is_measured(x: Any) -> bool:
    return isinstance(x, dict) and "value" in x and "unit" in x and not isinstance(x.get("value"), (list, dict))


def measured_cell(entry: Mapping[str, Any], style: Style) -> str:
    """An output's value for the results table; where its sigma is undefined (null: a Monte Carlo
    distribution without a finite variance) the 68.27 % interval is written out as such."""
    p = printed_entry(entry)
    low, high = entry.get("low"), entry.get("high")
    if p is None or "sigma" not in entry or entry["sigma"] is not None or not (_finite(low) and _finite(high)):
        return style.number(p)
    # the ends of the interval at the median's decimal place (set by the shorter half-width, PDG rule)
    place = p.exponent - (len(p.value.split(".")[1]) if "." in p.value else 0)
    ends = [Printed(_plain(round_at(x, place), p.exponent), exponent=p.exponent) for x in (low, high)]
    return (style.number(Printed(p.value, exponent=p.exponent)) + style.text(" (sigma undefined; 68.27 % interval ")
            + style.number(ends[0]) + style.text(" to ") + style.number(ends[1]) + style.text(")"))


def _given(entry: Mapping[str, Any], style: Style) -> str:
    """An input as the request gave it (not rounded: these are the caller's own numbers)."""
    v = entry.get("value")
    if v == "isotropic":
        return style.text("isotropic (cos i uniform)")
    if "count" in entry and "value" not in entry:
        return style.text(f"{entry['count']} value{'' if entry['count'] == 1 else 's'}")
    if isinstance(v, str) and _finite(entry.get("sigma")) and entry["sigma"] > 0:
        # an ISO 8601 date with its sigma (in the unit column's unit): the sigma is part of the input
        pm = r" $\pm$ " if style.name == "latex" else " ± "
        return style.code(v) + pm + style.number(as_given(entry["sigma"]))
    if not _finite(v):
        return style.code(str(v))
    if entry.get("samples"):
        p = printed(v, sigma=entry.get("sigma"))
        return style.number(p) + style.text(f" (median and sd of {entry['samples']} samples)")
    if "sigma_minus" in entry:
        return style.number(as_given(v, minus=entry["sigma_minus"], plus=entry["sigma_plus"]))
    s = entry.get("sigma")
    if _finite(s) and s > 0:
        return style.number(as_given(v, sigma=s))
    if entry.get("default"):
        # the declaration's number, not the caller's: six significant digits as any exact number (0.617284)
        return style.number(_exact(v)) + style.text(" (default)")
    return style.number(as_given(v))


def default_text(value: Any) -> str:
    """A declared default as the report prints it beside an input (six significant digits, 0.617284 for 50/81), for
    the reference page and the command line's description, which printed every digit of the double."""
    if _finite(value) and not isinstance(value, int):
        return Text().number(_exact(value))
    return str(value)


def _as_requested(entry: Any, given: Any) -> Any:
    """An input's echo as the caller wrote it where the caller gave it in a unit of their own (a period
    of 27.4 ± 0.3 yr, which the answer echoes converted as 10007.850 ± 109.575 d): the report shows what
    was given, in the unit it was given in.  Anything else (samples, a symbol for the name) as echoed."""
    if not (isinstance(entry, dict) and isinstance(given, Mapping) and isinstance(given.get("unit"), str)
            and given["unit"] != entry.get("unit") and "samples" not in given and "samples" not in entry):
        return entry
    members = ("value", "sigma", "sigma_minus", "sigma_plus")
    if not all(isinstance(given.get(k), (int, float, str, type(None))) and not isinstance(given.get(k), bool)
               for k in members) or "value" not in given:
        return entry
    out = {k: given[k] for k in members if given.get(k) is not None}
    if isinstance(out.get("value"), str) != isinstance(entry.get("value"), str):
        return entry
    return {**out, "unit": given["unit"]}


DOUBLE_DIGITS = 15          # significant decimal digits a double always keeps (DBL_DIG, C99 5.2.4.2.2)


def as_given(value: float, sigma: float | None = None, minus: float | None = None,
             plus: float | None = None) -> Printed:
    """An input's numbers as the caller gave them (every digit, never rounded), over one power of ten
    as a result's are, the value padded with zeros to the decimals of its errors: 41.6 and 0.02
    print as 41.60 ± 0.02, 2e-05 +3e-06 -1e-06 as (2.0 +0.3 -0.1) x 10^-5."""
    given = {k: x for k, x in (("value", value), ("sigma", sigma), ("minus", minus), ("plus", plus))
             if _finite(x)}
    exponent = _exponent_for(max(abs(x) for x in given.values()))
    with localcontext(_CONTEXT):
        digits = {k: _decimal(abs(x) if x == 0 else x).normalize().scaleb(-exponent) for k, x in given.items()}
        places = max(max(0, -d.as_tuple().exponent) for d in digits.values())
        own = digits.pop("value")
        own_places = max(0, -own.as_tuple().exponent)
        # zeros past a double's 15 significant digits are digits nobody gave (a machine-written
        # -5.948421176462592 beside a 16-decimal sigma is not -5.9484211764625920)
        if places > own_places and len(own.as_tuple().digits) + places - own_places > DOUBLE_DIGITS:
            places = own_places
        value = own.quantize(Decimal(1).scaleb(-places))
        text = {k: format(d, "f") for k, d in digits.items()}
    return Printed(format(value, "f"), sigma=text.get("sigma"), plus=text.get("plus"), minus=text.get("minus"),
                   exponent=exponent)


def _references_of(calc: Calculation | None, output_name: str, references: list[str]) -> list[int]:
    """1-based indices into ``references`` of the sources of one output's formula, as its declaration names
    them (none for a definition that needs no source); all of them only for a calculation whose outputs
    name no sources at all (or without the declaration)."""
    if calc is None or not any(o.references for o in calc.outputs):
        return list(range(1, len(references) + 1))
    try:
        declared = calc.output(output_name).references
    except KeyError:
        return []
    return sorted(references.index(r) + 1 for r in declared if r in references)


def _cite(indices: list[int], dash: str = "–") -> str:
    if not indices:
        return ""
    if indices == list(range(indices[0], indices[-1] + 1)) and len(indices) > 2:
        return f"[{indices[0]}{dash}{indices[-1]}]"
    return "[" + ", ".join(map(str, indices)) + "]"


def _uncertainty_text(unc: Mapping[str, Any], correlations: Iterable[Mapping[str, Any]] = (),
                      calc: Calculation | None = None, inputs: Mapping[str, Any] | None = None) -> list[str]:
    lines = []
    if unc.get("method") == "monte_carlo":
        # inputs given as samples were not drawn: they are the caller's own draws, as given
        sampled = [k for k, v in (inputs or {}).items() if isinstance(v, Mapping) and v.get("samples")]
        drawn = (f"{', '.join(sampled)}: the caller's own draws, paired index by index; the other inputs drawn "
                 if sampled else "inputs drawn ")
        lines.append(f"Monte Carlo with {unc.get('samples')} draws, seed {unc.get('seed')}; "
                     f"rejected fraction {unc.get('rejected_fraction', 0):.4g}; results are the median with the "
                     f"central 68.27 % interval, {drawn}normal (split normal when asymmetric), "
                     "truncated to their physical domains")
    else:
        jacobian = ("the calculation's analytic Jacobian" if calc is not None and calc.jacobian is not None
                    else "a numerical (central-difference) Jacobian")
        lines.append(f"linear (first-order) propagation through {jacobian}, with the input covariance "
                     "built from the sigmas and correlations")
    isotropic = [k for k, v in (inputs or {}).items() if isinstance(v, Mapping) and v.get("value") == "isotropic"]
    if isotropic:
        lines.append(", ".join(isotropic) + " isotropic: random orientations, cos i drawn uniform on [0, 1); the "
                     "results are a distribution over orientations, not a measurement (see the conventions)")
    corr = [c for c in correlations or () if isinstance(c, Mapping) and "between" in c]
    if corr:
        lines.append("correlations: " + ", ".join(f"rho({c['between'][0]}, {c['between'][1]}) = {c['rho']}"
                                                  for c in corr))
    return lines


def series_columns(series: Mapping[str, Any]) -> tuple[list[str], list[str], int]:
    """The names and units of a response's series and its number of rows, without building them."""
    names = [k for k, v in series.items() if isinstance(v, dict) and isinstance(v.get("value"), list)]
    units = [series[k].get("unit", "") for k in names]
    return names, units, max((len(series[k]["value"]) for k in names), default=0)


def series_rows(series: Mapping[str, Any]) -> tuple[list[str], list[str], list[list[Any]]]:
    names, units, length = series_columns(series)
    rows = []
    for i in range(length):
        row = []
        for k in names:
            s = series[k]
            entry = {key: (s[key][i] if isinstance(s.get(key), list) and i < len(s[key]) else None)
                     for key in ("value", "sigma", "low", "high")}
            row.append(entry)
        rows.append(row)
    return names, units, rows


def series_table(series: Mapping[str, Any], s: Style) -> tuple[list[str], list[str], list[list[str]]]:
    """A series' names, units and rows printed in style ``s``: each entry rounded by its sigma, the times
    to 12 significant digits (a JD needs them); one writer for the reports, the command line and the
    client's print."""
    names, units, rows = series_rows(series)
    body = [[s.number(printed_entry(e, digits=12) if k in SERIES_DATES else printed_entry(e))
             for k, e in zip(names, row)] for row in rows]
    return names, units, body


#: the names under which a series holds its dates (an ephemeris' times)
SERIES_DATES = ("times", "time")


def series_header(names: list[str], units: list[str], s: Style, scale: str = "JD") -> list[str]:
    """A series' column headings, ``name [unit]``, the dates' saying their scale (``time [d, JD]``) as the event
    tables' do; one writer for the reports, the command line and the client's print."""
    return [s.code(k) + (f" [{s.unit(u)}{', ' + scale if k in SERIES_DATES else ''}]" if u else "")
            for k, u in zip(names, units)]


def event_keys(entries: list[dict]) -> list[str]:
    """The members of an event list shown beside its dates: those some entry has (an ISO date is none for
    a day count from an arbitrary zero: no column of blanks); a member's sigma (``NAME_sigma``) is printed
    with it (:func:`event_field`), not in a column of its own."""
    keys = [k for k in entries[0] if k not in ("value", "sigma", "low", "high")
            and any(e.get(k) is not None for e in entries)]
    return [k for k in keys if not (k.endswith("_sigma") and k[:-len("_sigma")] in entries[0])]


def event_field(entry: Mapping[str, Any], key: str, unit: str) -> Printed | str:
    """An event's member as printed: its calendar date to what the date's sigma supports (:func:`iso_shown`,
    ``unit`` the dates'), value ± sigma rounded together where its sigma is beside it (``NAME_sigma``, as an
    SB2's velocity_separation has), else its short text."""
    if key == "iso" and entry.get(key):
        return iso_shown(entry[key], entry, unit)
    if key + "_sigma" in entry and _finite(entry.get(key)):
        return printed(entry[key], sigma=entry[key + "_sigma"])
    return short_text(entry.get(key))


def event_tables(results: Mapping[str, Any], s: Style) -> list[tuple[str, list[str], list[list[str]]]]:
    """The dated events of an answer's ``results`` as (label, header, rows) tables in style ``s``: each date
    with its sigma, then the members beside it (:func:`event_keys`, :func:`event_field`) with their units;
    one writer for the reports, the command line and the client's print."""
    tables = []
    for label, unit, entries in event_lists({k: v for k, v in results.items()
                                             if k != "series" and not is_measured(v)}):
        keys = event_keys(entries)
        fields = event_field_units(results, label)
        header = ["date" + (f" [{s.unit(unit)}]" if unit else "")] + [
            s.text(k) + (f" [{s.unit(fields[k])}]" if fields.get(k) else "") for k in keys]
        body = [[s.number(printed(e.get("value"), sigma=e.get("sigma"), digits=12))]
                + [s.number(f) if isinstance(f, Printed) else s.text(f) for f in (event_field(e, k, unit) for k in keys)]
                for e in entries]
        tables.append((label, header, body))
    return tables


def event_lists(members: Mapping[str, Any]) -> list[tuple[str, str, list[dict]]]:
    """Extra members of the results made of lists of dated/measured entries (e.g. an ephemeris's events)."""
    out = []
    for key, member in members.items():
        if isinstance(member, dict):
            unit = member.get("unit", "")
            # dates given back in the caller's format: say which
            if "time_format" in member:
                unit = f"{unit}, {'MJD' if member['time_format'] == 'mjd' else 'JD'}"
            for sub, entries in member.items():
                if isinstance(entries, list) and entries and all(isinstance(e, dict) for e in entries):
                    out.append((f"{key}: {sub}", unit, entries))
        elif isinstance(member, list) and member and all(isinstance(e, dict) for e in member):
            out.append((key, "", member))
    return out


def event_field_units(results: Mapping[str, Any], label: str) -> Mapping[str, str]:
    """The units of the fields of one list of :func:`event_lists` (the member's ``units``, e.g. km/s for an
    event's velocity_separation), by field name."""
    member = results.get(label.split(":")[0])
    units = member.get("units") if isinstance(member, Mapping) else None
    return units if isinstance(units, Mapping) else {}


def event_notes(results: Mapping[str, Any]) -> list[tuple[str, list[tuple[str, Any, str]]]]:
    """The members of an extra answer (an ephemeris's events) that are small mappings of plain values, such as
    the light-travel time applied and its amplitudes: [(label, [(name, value, unit), ...])]."""
    out = []
    for key, member in results.items():
        if key == "series" or is_measured(member) or not isinstance(member, Mapping):
            continue
        units = member.get("units") if isinstance(member.get("units"), Mapping) else {}
        for sub, values in member.items():
            if sub != "units" and isinstance(values, Mapping) and values and all(
                    isinstance(v, (str, int, float)) or v is None for v in values.values()):
                out.append((f"{key}: {sub}".replace("_", " "),
                            [(k, v, units.get(k, "")) for k, v in values.items()]))
    return out


def notes_line(values: list[tuple[str, Any, str]], s: Style) -> str:
    """One mapping of notes on the events as ``key = value unit, ...``: its members and their sigmas as an event's
    (:func:`event_keys`, :func:`event_field`: a light-travel amplitude as value ± sigma, none left blank)."""
    entry, units = {k: v for k, v, _u in values}, {k: u for k, _v, u in values}
    fields = ((k, event_field(entry, k, "")) for k in event_keys([entry]))
    return ", ".join(s.text(f"{k} = ") + (s.number(f) if isinstance(f, Printed) else s.text(f))
                     + (f" {s.unit(units[k])}" if units[k] else "") for k, f in fields)


def _share(x: float) -> str:
    """A share of variance as a percentage: one decimal, or two significant digits below 0.1 %."""
    pct = 100.0 * x
    if pct != 0 and abs(pct) < 0.1:
        return format(pct, ".2g")
    return format(pct, ".1f")


#: A share of variance smaller than this is the rounding of the doubles it is a difference of (a Monte Carlo share
#: of an input the output does not depend on came out as -2.6e-16), printed as no share at all.
BUDGET_ROUNDING = 1e-12


def budget_rows(results: Mapping[str, Any]) -> tuple[list[tuple[str, list[tuple[str, float]]]], list[str]]:
    """Each output with a sigma and its uncertainty budget: [(output, [(term, share), ...])], inputs
    by decreasing share then the correlation terms ("a,b") on their own lines, terms of zero (an input
    the output does not depend on, to :data:`BUDGET_ROUNDING`) left out; and the outputs with a sigma but no budget."""
    shown, missing = [], []
    for name, entry in results.items():
        if not is_measured(entry) or not (_finite(entry.get("sigma")) and entry["sigma"] > 0):
            continue
        terms = entry.get("budget")
        finite = {k: v for k, v in (terms or {}).items() if _finite(v)}
        if not finite:
            missing.append(name)
            continue
        inputs = sorted(((k, v) for k, v in finite.items() if "," not in k and abs(v) >= BUDGET_ROUNDING),
                        key=lambda kv: -kv[1])
        pairs = [(k, v) for k, v in finite.items() if "," in k and abs(v) >= BUDGET_ROUNDING]
        shown.append((name, inputs + pairs))
    return shown, missing


def _series_names(results: Mapping[str, Any]) -> list[str]:
    series = results.get("series")
    return series_columns(series)[0] if isinstance(series, dict) else []


class _Doc:
    """A report document being written in one style: headings, paragraphs, tables, lists."""

    def __init__(self, style: Style):
        self.style = style
        self.lines: list[str] = []

    def heading(self, text: str):
        s = self.style
        if s.name == "latex":
            self.lines += [rf"\paragraph{{{s.text(text)}}}", ""]
        elif s.name == "markdown":
            self.lines += [f"### {s.text(text)}", ""]
        else:
            self.lines += [text, "-" * len(text)]

    def para(self, text: str):
        self.lines += [text, ""]

    def items(self, entries: list[str], numbered: bool = False):
        s = self.style
        if not entries:
            return
        if s.name == "latex":
            env = "enumerate" if numbered else "itemize"
            self.lines.append(rf"\begin{{{env}}}")
            self.lines += [rf"  \item {e}" for e in entries]
            self.lines += [rf"\end{{{env}}}", ""]
        else:
            for k, e in enumerate(entries, 1):
                self.lines.append(f"{k}. {e}" if numbered else f"- {e}")
            self.lines.append("")

    def table(self, header: list[str], rows: list[list[str]], align: str | None = None, wrap_last: bool = False):
        """A table; ``wrap_last``: the last column is prose (a description, a source), which LaTeX wraps in a
        paragraph column instead of running it off the page."""
        s = self.style
        align = align or "l" * len(header)
        if s.name == "latex":
            spec = align[:-1] + r"p{0.4\linewidth}" if wrap_last else align
            self.lines.append(rf"\begin{{tabular}}{{{spec}}}")
            self.lines.append(r"\hline")
            self.lines.append(" & ".join(header) + r" \\")
            self.lines.append(r"\hline")
            self.lines += [" & ".join(r) + r" \\" for r in rows]
            self.lines.append(r"\hline")
            self.lines += [r"\end{tabular}", ""]
        elif s.name == "markdown":
            self.lines.append("| " + " | ".join(header) + " |")
            self.lines.append("|" + "|".join(":---" if a == "l" else "---:" for a in align) + "|")
            self.lines += ["| " + " | ".join(r) + " |" for r in rows]
            self.lines.append("")
        else:
            widths = [max(len(str(c)) for c in col) for col in zip(header, *rows)]
            fmt = lambda r: "  ".join(str(c).ljust(w) for c, w in zip(r, widths)).rstrip()  # noqa: E731
            self.lines += [fmt(header), fmt(["-" * w for w in widths])] + [fmt(r) for r in rows] + [""]

    def text(self) -> str:
        return "\n".join(self.lines).rstrip() + "\n"


def report(response: Mapping[str, Any], calc: Calculation | None = None, style: str = "markdown",
           request: Mapping[str, Any] | None = None) -> str:
    """The derivation report of one response in ``style`` ("latex", "markdown" or "text")."""
    s = STYLES[style]
    doc = _Doc(s)
    prov = response.get("provenance", {})
    version = prov.get("version", "")
    name = response.get("calculation", "")
    title = calc.title if calc is not None else name
    references = list(prov.get("references", []))
    formulas = prov.get("formulas", {})

    if s.name == "latex":
        doc.lines += [f"% Derivation report by calcservice {version}: {name}",
                      "% Numbers rounded for print by the Particle Data Group rule; the JSON response keeps full "
                      "precision.", "% Units use astropy's LaTeX forms (\\mathrm, \\odot): plain LaTeX, no packages.",
                      ""]
        doc.lines += [rf"\subsection*{{{s.text(title)} ({s.code(name)})}}", ""]
    elif s.name == "markdown":
        doc.lines += [f"## {s.text(title)} ({s.code(name)})", ""]
    else:
        head = f"{title} ({name})"
        doc.lines += [head, "=" * len(head), ""]

    # dates are JD unless the request said "time_format": "mjd" (the answer then says so too)
    scale = "MJD" if response.get("time_format") == "mjd" else "JD"
    dates = ({n for i in calc.inputs if getattr(i, "time", False) for n in (i.name, i.label) if n}
             if calc is not None else set())
    fields = [f.name for f in (*calc.inputs, *calc.outputs)] if calc is not None else []
    # a declaration's text in LaTeX: its maths set as maths, its field names as code (an input's description read
    # "0 \textless{} i ... cos i uniform", a formula "P K1\textasciicircum{}3" in typewriter type)
    declared = (lambda t, formula=False: latex_text(t, fields, formula)) if s.name == "latex" else s.text
    doc.heading("Inputs")
    rows = []
    for key, entry in response.get("inputs", {}).items():
        desc = ""
        if calc is not None:
            try:
                desc = calc.input(key).description
            except KeyError:
                pass
        entry = _as_requested(entry, request.get(key) if isinstance(request, Mapping) else None)
        unit = entry.get("unit", "") if isinstance(entry, dict) else ""
        shown_unit = s.unit(unit)
        # a date given as a number: say whether it is a JD or an MJD (an ISO 8601 string says what it is)
        if key in dates and not (isinstance(entry, dict) and isinstance(entry.get("value"), str)):
            shown_unit = (shown_unit + " " if shown_unit else "") + s.text(f"({scale})")
        rows.append([s.code(key), _given(entry, s) if isinstance(entry, dict) else s.text(str(entry)),
                     shown_unit, declared(desc)])
    doc.table(["input", "value", "unit", "description"], rows, wrap_last=True)

    results = response.get("results", {})
    measured = {k: v for k, v in results.items() if is_measured(v)}
    rows = []
    for key, entry in measured.items():
        desc = ""
        if calc is not None:
            try:
                desc = calc.output(key).description
            except KeyError:
                pass
        # an output's description set with its maths as maths in LaTeX (M1 sin^3 i read as code), as a figure sets it
        rows.append([s.code(key), measured_cell(entry, s), s.unit(entry.get("unit", "")), declared(desc)])
    if rows:
        doc.heading("Results")
        doc.table(["result", "value", "unit", "description"], rows, wrap_last=True)

    series = results.get("series")
    if isinstance(series, dict):
        names, units, length = series_columns(series)
        doc.heading("Series")
        if length > MAX_SERIES_ROWS:
            doc.para(s.text(f"{length} rows: too many to print here; the JSON response (or the CSV batch path) "
                            "has them all."))
        else:
            body = series_table(series, s)[2]
            header = series_header(names, units, s, scale)
            doc.table(header, body, "r" * len(header))

    for label, header, body in event_tables(results, s):
        doc.heading(label.replace("_", " ").capitalize())
        doc.table(header, body)
    notes = event_notes(results)
    if notes:
        doc.heading("Notes on the events")
        doc.items([s.text(f"{label}: ") + notes_line(values, s) for label, values in notes])

    doc.heading("Formulas")
    entries = []
    for key in list(measured) + ([k for k in series if k in formulas] if isinstance(series, dict) else []):
        f = formulas.get(key)
        if f:
            cite = _cite(_references_of(calc, key, references), "--" if s.name == "latex" else "–")
            entries.append(f"{s.code(key)}: {declared(f, True) if s.name == 'latex' else s.code(f)} {cite}")
    doc.items(entries)

    doc.heading("References")
    doc.items([s.text(r) for r in references], numbered=True)

    constants = prov.get("constants", {})
    if constants:
        doc.heading("Constants")
        # every digit of the constant (a nominal value is exact), over a power of ten as a result's: 1.3271244e+20
        # read as code in a LaTeX table
        rows = [[s.code(c.get("symbol", k)), s.number(as_given(c["value"])) if _finite(c.get("value"))
                 else s.text(str(c.get("value"))), s.unit(c.get("unit", "")),
                 s.text(c.get("source", ""))] for k, c in constants.items()]
        doc.table(["constant", "value", "unit", "source"], rows, wrap_last=True)

    conventions = prov.get("conventions", {})
    if conventions:
        doc.heading("Conventions")
        doc.items([f"{s.code(k)}: {s.text(v)}" for k, v in conventions.items()])

    doc.heading("Uncertainty")
    corr = (request or {}).get("correlations", ()) if isinstance(request, Mapping) else ()
    doc.items([s.text(t) for t in _uncertainty_text(response.get("uncertainty", {}), corr, calc,
                                                     response.get("inputs"))])

    _budget_section(doc, results, response.get("uncertainty", {}))

    # the budget section says where the budget is not given; the warning would say it twice
    warnings = [w for w in response.get("warnings", []) if w.get("code") != "budget_not_given"]
    if warnings:
        doc.heading("Warnings")
        doc.items([f"{s.code(w.get('code', ''))}: {s.text(w.get('message', ''))}" for w in warnings])

    doc.para(s.text(f"calcservice {version}. Numbers rounded for print by the Particle Data Group rule (Review of "
                    "Particle Physics, introduction); the JSON response keeps full precision."))
    return doc.text()


def _budget_section(doc: _Doc, results: Mapping[str, Any], unc: Mapping[str, Any]) -> None:
    """The uncertainty budget: a small table per output with a sigma (its share of variance from each
    input, the correlation terms on their own lines), and one line naming the outputs without one."""
    s = doc.style
    shown, missing = budget_rows(results)
    series = results.get("series") if isinstance(results.get("series"), dict) else {}
    series_out = [k for k in _series_names(results)
                  if any(_finite(x) and x > 0 for x in (series[k].get("sigma") or []))]
    if not (shown or missing or series_out):
        return
    doc.heading("Uncertainty budget")
    monte_carlo = unc.get("method") == "monte_carlo"
    if shown:
        if monte_carlo:
            doc.para(s.text("Share of each output's variance from each input, estimated from the draws as the "
                            "fall in variance when that input is held at its nominal value (the shares need not "
                            "sum to 100 %, and sampling noise can put a small share slightly below 0)."))
        else:
            doc.para(s.text("Share of each output's linear variance from each input, (df/dx sigma)^2 / sigma_f^2; "
                            "a correlated pair's term 2 rho (df/dx sigma_x)(df/dy sigma_y) / sigma_f^2 is a line of "
                            "its own and may be negative; the shares sum to 100 %. Inputs with no share are not "
                            "listed."))
        for name, terms in shown:
            doc.table([s.code(name), s.text("share of variance [%]")],
                      [[s.text("correlation " + t.replace(",", ", ")) if "," in t else s.code(t),
                        f"${_share(v)}$" if s.name == "latex" else _share(v)]      # a true minus sign in LaTeX
                       for t, v in terms], "lr")
    parts = []
    if missing:
        reason = ("Monte Carlo draws of correlated, sampled or isotropic inputs have no share of their own to "
                  "hold fixed" if monte_carlo else "its variance could not be split by input")
        parts.append(", ".join(missing) + f" ({reason})")
    if series_out:
        parts.append(", ".join(series_out) + " (series outputs)")
    if parts:
        doc.para(s.text("Uncertainty budget not given for " + "; and for ".join(parts) + "."))


def iso_shown(iso: str, entry: Mapping[str, Any], unit: str) -> str:
    """An event's calendar date to the resolution its sigma supports, as the web form shows it: the day for
    a sigma of a day or more, the minute for one of a minute or more (to the nearest, not cut), else as given.
    A date the calendar cannot hold (a leap second's :60) stays as given."""
    sigma = entry.get("sigma")
    if not _finite(sigma) and _finite(entry.get("low")) and _finite(entry.get("high")):
        sigma = (entry["high"] - entry["low"]) / 2
    if not unit.startswith("d") or not _finite(sigma) or sigma < 1 / 1440:
        return iso
    try:
        t = datetime.fromisoformat(iso.replace("Z", "+00:00"))
    except ValueError:
        return iso
    if sigma >= 1:
        return (t + timedelta(hours=12)).date().isoformat()
    return (t + timedelta(seconds=30)).replace(second=0, microsecond=0).isoformat(timespec="minutes")[:16]


def short_text(x: Any) -> str:
    """A cell of an event table: a float to 6 significant digits, nothing for None."""
    if isinstance(x, float):
        return format(x, ".6g")
    if x is None:
        return ""
    return str(x)


def latex(response, calc=None, request=None) -> str:
    return report(response, calc, "latex", request)


def markdown(response, calc=None, request=None) -> str:
    return report(response, calc, "markdown", request)


def text(response, calc=None, request=None) -> str:
    return report(response, calc, "text", request)
