"""The registry of calculations: the spine of calcservice.

A calculation is declared once, with :class:`Calculation`; its HTTP endpoint, request
schema, OpenAPI entry, batch support, report and web form are all derived from the
declaration.  Physics functions are pure: they take numpy arrays (or ``None`` for an
optional input that was not given, a string for a choice) in each input's canonical
unit and return a dict of output arrays in each output's canonical unit, omitting the
outputs that the given inputs do not determine.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from functools import cached_property, lru_cache
from typing import Any, Callable, Mapping, Sequence

import numpy as np


@dataclass(frozen=True)
class Domain:
    """A physical interval for an input, e.g. ``Domain(0, 1, high_open=True)`` for 0 <= e < 1."""

    low: float = -math.inf
    high: float = math.inf
    low_open: bool = False
    high_open: bool = False

    def contains(self, x: np.ndarray) -> np.ndarray:
        """Which of the values (an array over systems or draws) lie in the domain; non-finite never."""
        x = np.asarray(x, dtype=float)
        ok = np.isfinite(x)
        ok &= (x > self.low) if self.low_open else (x >= self.low)
        ok &= (x < self.high) if self.high_open else (x <= self.high)
        return ok

    def holds(self, x: float) -> bool:
        """:meth:`contains` for one number, without building an array (each field of a request)."""
        if not math.isfinite(x):
            return False
        if (x <= self.low) if self.low_open else (x < self.low):
            return False
        return not ((x >= self.high) if self.high_open else (x > self.high))

    def closed_bounds(self) -> tuple[float, float]:
        """The same interval as closed bounds in floats (x > a is x >= nextafter(a, inf)), for the
        engine's steps and checks on arrays."""
        low = float(np.nextafter(self.low, np.inf)) if self.low_open else self.low
        high = float(np.nextafter(self.high, -np.inf)) if self.high_open else self.high
        return low, high

    @lru_cache(maxsize=None)
    def message(self, unit: str = "") -> str:
        """The 422 message for a value outside the domain, with the unit it is judged in."""
        return self.describe() + (f" (in {unit})" if unit else "")

    def bounds(self) -> list[tuple[str, float]]:
        """The finite bounds as comparisons a value must pass, e.g. [(">", 0.0), ("<", 180.0)]: what
        the message, the spec's keywords and the spec's component names are all written from."""
        parts = []
        if self.low != -math.inf:
            parts.append((">" if self.low_open else ">=", self.low))
        if self.high != math.inf:
            parts.append(("<" if self.high_open else "<=", self.high))
        return parts

    def describe(self) -> str:
        parts = [f"{op} {bound:g}" for op, bound in self.bounds()]
        return "must be " + " and ".join(parts) if parts else "must be finite"

    def as_dict(self) -> dict:
        """The bounds as JSON Schema keywords."""
        return {_SCHEMA_KEYWORD[op]: bound for op, bound in self.bounds()}


_SCHEMA_KEYWORD = {">": "exclusiveMinimum", ">=": "minimum", "<": "exclusiveMaximum", "<=": "maximum"}

POSITIVE = Domain(0.0, math.inf, low_open=True)
NON_NEGATIVE = Domain(0.0, math.inf)
ANY = Domain()
class DateDomain(Domain):
    """A date as a day number, said as one (a bare "-1e+08 to 1e+08 (in d)" reads as no date at all)."""

    def describe(self) -> str:
        return (f"must be a Julian Date (an MJD with time_format mjd) from {self.low:g} to {self.high:g}: within "
                "about 270,000 years of JD 0")

    def message(self, unit: str = "") -> str:
        return self.describe()


# a date as a Julian Date (or an MJD, as given): within about 270,000 years of JD 0, where a double still
# resolves 15 ms; far beyond it a date is a typing slip and its cycles count would be rounding noise
DATE = DateDomain(-1e8, 1e8)
#: a time below JD 10000 (4685 BC) is no observing date in any format: a count of days from an
#: arbitrary zero (T0 = 0 and days since), read as given, with no calendar date and no date warning
DAY_COUNTS_BELOW = 1e4
ECCENTRICITY = Domain(0.0, 1.0, high_open=True)
INCLINATION = Domain(0.0, 180.0, low_open=True, high_open=True)
ANGLE = Domain(-360.0, 360.0)
FRACTION = Domain(0.0, 1.0)


@dataclass(frozen=True)
class Input:
    """One input of a calculation.

    kind:
      ``"quantity"`` a measured number (any form of the wire contract);
      ``"choice"`` one string of ``choices`` (no uncertainty);
      ``"series"`` a list of exact numbers that becomes an extra trailing axis of
      every output (e.g. the times of an ephemeris);
      ``"integer"`` an exact whole number within ``domain`` (e.g. a count), passed as int.
    ``unit`` is the canonical unit the physics function receives; ``"time"`` inputs
    also take ISO 8601 strings (``time=True``).  ``isotropic`` lets an inclination be
    given as the string ``"isotropic"`` (random orientations, cos i uniform).
    """

    name: str
    unit: str
    description: str
    domain: Domain = ANY
    required: bool = True
    default: Any = None
    kind: str = "quantity"
    choices: tuple[str, ...] = ()
    isotropic: bool = False
    time: bool = False
    example: Any = None
    label: str | None = None       # key of a series input's values in the response (default: its name)
    unused_with: tuple[str, ...] = ()   # given beside all of these it changes nothing (warning input_unused)
    period: float | None = None    # a cyclic input, meaning the same modulo this (a phase in cycles: 1.0)
    exact: bool = False            # a bound taken as given (where a list begins): a sigma is not used (warned)
    # a default that a choice picks, (choice input, {choice: value}), as the physics function applies it when
    # the input is not given: echoed with the inputs as the value used, so a report shows it
    default_by: tuple[str, Mapping[str, float]] | None = None

    def as_dict(self) -> dict:
        d: dict[str, Any] = {"name": self.name, "kind": self.kind, "description": self.description,
                             "required": self.required}
        if self.kind != "choice":
            d["unit"] = self.unit
            d["domain"] = self.domain.describe()
            d["bounds"] = self.domain.as_dict()
        if self.default is not None:
            d["default"] = self.default
        if self.default_by is not None:
            d["default_by"] = {"input": self.default_by[0], "values": dict(self.default_by[1])}
        if self.choices:
            d["choices"] = list(self.choices)
        if self.isotropic:
            d["accepts"] = ["isotropic"]
        if self.time:
            d["time"] = True
        if self.label:
            d["label"] = self.label
        if self.example is not None:
            d["example"] = self.example
        return d


@dataclass(frozen=True)
class Output:
    """One output: name, canonical unit, description, its formula and the references it comes from.

    ``period`` marks an angle that wraps (e.g. 360.0 for a position angle); the engine
    then takes differences and intervals on the circle.  ``turns_with`` = (other output, turn)
    marks an angle folded jointly with another: where the physics takes ``other`` one of its
    periods on to bring it into its range, this angle turns by ``turn`` (the argument of
    periastron by 180 deg when the node is folded into [0, 180) deg); the engine undoes the
    joint fold before it differences or summarises, so the pair moves continuously.
    ``references`` are those of the calculation's references that are the sources of this
    output's formula (and of the constants in it), so that a report cites each formula by its
    own sources.
    """

    name: str
    unit: str
    description: str
    formula: str = ""
    period: float | None = None
    turns_with: tuple[str, float] | None = None
    logarithmic: bool = False         # a log10 of a quantity (its unit in the description): no unit may be asked
    references: tuple[str, ...] = ()

    def as_dict(self) -> dict:
        d = {"name": self.name, "unit": self.unit, "description": self.description, "formula": self.formula}
        if self.period is not None:
            d["period"] = self.period
        if self.turns_with is not None:
            d["turns_with"] = {"output": self.turns_with[0], "turn": self.turns_with[1]}
        if self.logarithmic:
            d["logarithmic"] = True
        if self.references:
            d["references"] = list(self.references)
        return d


@dataclass(frozen=True)
class Warning:
    """A warning raised by a calculation's ``check``: ``where`` selects the systems it applies to.

    ``subject`` names the field the warning is about; warnings of one code and message that
    differ only in subject are reported once, the message's ``{subject}`` naming them all.
    """

    code: str
    message: str
    where: np.ndarray | None = None
    subject: str | None = None


@dataclass(frozen=True)
class Constraint:
    """A condition on the nominal inputs that must hold, reported as 422 against ``fields``."""

    fields: tuple[str, ...]
    message: str
    test: Callable[..., np.ndarray]


def symbol_names(text: str, names) -> dict[str, str]:
    """The symbols of a calculation's formulas that stand for one of ``names``, from its symbols convention
    ("P = period, K1 = k1, e = eccentricity, a = semimajor_axis (relative orbit), ..."): {"P": "period", ...}."""
    names = set(names)
    out: dict[str, str] = {}
    for part in re.split(r",\s*(?![^()]*\))", text):
        left, eq, right = part.partition("=")
        words = right.split()
        meaning = words[0].strip("(),;") if eq and words else ""
        if meaning in names:
            for symbol in left.split(","):
                if symbol.strip() and symbol.strip() != meaning:
                    out[symbol.strip()] = meaning
    return out


@dataclass(frozen=True, eq=False)
class Calculation:
    """The single declaration from which a calculation's every surface is derived."""

    name: str
    path: str
    title: str
    summary: str
    inputs: tuple[Input, ...]
    outputs: tuple[Output, ...]
    function: Callable[..., Mapping[str, np.ndarray]]
    references: tuple[str, ...] = ()
    constants: tuple[str, ...] = ()
    conventions: Mapping[str, str] = field(default_factory=dict)
    constraints: tuple[Constraint, ...] = ()
    exclusive: tuple[tuple[str, ...], ...] = ()   # exactly one of each group must be given
    at_most_one: tuple[tuple[str, ...], ...] = ()  # at most one of each group may be given
    check: Callable[..., Sequence[Warning]] | None = None
    extra: Callable[..., Mapping[str, Any]] | None = None   # extra response members (e.g. events)
    example: Mapping[str, Any] | None = None
    # optional analytic Jacobian for the linear method, as logarithmic derivatives: called with the
    # outputs of ``function`` and its keyword arguments (the same point), it returns
    # {output: {input: d ln output / d input}}, arrays shaped like the inputs, in canonical units
    # (per degree for an angle in degrees), for every output ``function`` returns; an input absent
    # from an output's mapping is one the output does not depend on.  The engine forms
    # df/dx = f d ln f / dx for all outputs in one product, so it suits outputs that are products
    # of powers (never 0 on the domain).  Without it the engine takes central differences.
    jacobian: Callable[..., Mapping[str, Mapping[str, np.ndarray]]] | None = None

    def input(self, name: str) -> Input:
        return self._inputs[name]

    def output(self, name: str) -> Output:
        return self._outputs[name]

    @cached_property
    def _inputs(self) -> dict[str, Input]:
        return {i.name: i for i in self.inputs}

    @cached_property
    def _outputs(self) -> dict[str, Output]:
        return {o.name: o for o in self.outputs}

    @cached_property
    def symbols(self) -> dict[str, str]:
        """The symbols of the formulas that stand for an input ("e": eccentricity), from the symbols
        convention: what a caller who writes one means."""
        return symbol_names(self.conventions.get("symbols", ""), self._inputs)

    def as_dict(self) -> dict:
        return {
            "name": self.name,
            "path": self.path,
            "title": self.title,
            "summary": self.summary,
            "inputs": [i.as_dict() for i in self.inputs],
            "exactly_one_of": [list(g) for g in self.exclusive],
            "at_most_one_of": [list(g) for g in self.at_most_one],
            "outputs": [o.as_dict() for o in self.outputs],
            "references": list(self.references),
            "constants": list(self.constants),
            "conventions": dict(self.conventions),
            "example": self.example,
        }


REGISTRY: dict[str, Calculation] = {}


def register(calc: Calculation) -> Calculation:
    """Add a declaration to the registry (names and paths must be unique)."""
    if calc.name in REGISTRY:
        raise ValueError(f"calculation {calc.name!r} is declared twice")
    if any(c.path == calc.path for c in REGISTRY.values()):
        raise ValueError(f"path {calc.path!r} is declared twice")
    names = [i.name for i in calc.inputs]
    if len(set(names)) != len(names):
        raise ValueError(f"{calc.name}: duplicate input names")
    idle = {i.name: sorted(set(i.unused_with) - set(names)) for i in calc.inputs if set(i.unused_with) - set(names)}
    if idle:
        raise ValueError(f"{calc.name}: unused_with names inputs the calculation does not have: {idle}")
    turns = [i.name for i in calc.inputs if i.period is not None and not i.period > 0]
    if turns:
        raise ValueError(f"{calc.name}: a cyclic input's period must be > 0: {turns}")
    uncited = sorted({r for o in calc.outputs for r in o.references} - set(calc.references))
    if uncited:
        raise ValueError(f"{calc.name}: outputs cite references the calculation does not list: {uncited}")
    if calc.jacobian is not None:
        # for a wrapping output or a series input the linear method does more than take first
        # derivatives (the two one-sided differences on the circle measure the curvature behind
        # its trust check); a declared Jacobian would silently drop that
        wrapping = [o.name for o in calc.outputs if o.period is not None]
        series = [i.name for i in calc.inputs if i.kind == "series"]
        if wrapping or series:
            raise ValueError(f"{calc.name}: a declared jacobian needs outputs that do not wrap and no series "
                             f"inputs (wrapping: {wrapping}, series: {series}); leave it to finite differences")
    periods = {o.name: o.period for o in calc.outputs}
    for o in calc.outputs:
        if o.turns_with is not None and (o.period is None or periods.get(o.turns_with[0]) is None):
            raise ValueError(f"{calc.name}: {o.name} turns with {o.turns_with[0]}: both must be wrapping outputs")
    REGISTRY[calc.name] = calc
    return calc


def calculations() -> dict[str, Calculation]:
    """All declared calculations (importing the declaration modules on first use)."""
    if not _LOADED:
        from . import calculations as _declarations  # noqa: F401  (registers on import)
        _LOADED.append(True)
    return REGISTRY


_LOADED: list = []      # the declarations imported (an import statement per call costs a request ~1 us)


def get(name: str) -> Calculation:
    return calculations()[name]
