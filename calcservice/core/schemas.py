"""Request schemas, generated from each calculation's declaration (marshmallow).

A schema parses and checks the *form* of one request body: numbers, objects of the wire
contract, units, choices, options.  It returns raw quantities in canonical units;
:mod:`.parse` turns them into :class:`~calcservice.engine.Measured` arrays.  The rules a
quantity's numbers obey (:func:`faults`) are written once over arrays: a request checks its
one system with them, a batch its N systems at once.
"""

from __future__ import annotations

import contextlib
import math
import re
import warnings
from dataclasses import dataclass
from functools import lru_cache
from typing import Any

import numpy as np
from marshmallow import RAISE, Schema, ValidationError, fields, post_load, validate, validates_schema

from ..columns import as_doubles, meant, plain_number
from ..config import Limits
from ..registry import Calculation, Input
from ..units import UnitError, factor
from .problems import too_large

MEASURED_KEYS = {"value", "sigma", "sigma_minus", "sigma_plus", "samples", "unit"}
FORM_HINT = ('must be a number, or an object such as {"value": 1.2, "sigma": 0.1}, '
             '{"value": 1.2, "sigma_minus": 0.1, "sigma_plus": 0.2} or {"samples": [...]}')

# the smallest normal double: below it a number keeps fewer than 53 bits (1e-320 keeps 11), so a
# scale (an input whose domain excludes 0: a period, a K, a mass) there has lost its digits before any
# formula multiplies it into an answer; where 0 is in the domain (e, an angle, a time, a sigma) such a
# number is 0 give or take a rounding, and taken
SMALLEST_NORMAL = float(np.finfo(float).tiny)

ISOTROPIC_ALONE = ('"isotropic" (random orientations, cos i uniform) takes no sigma or unit: give the string '
                   '"isotropic" alone (in a table, leave that system\'s sigma empty)')


def number(x: Any, what: str = "value") -> float:
    """A finite float from a JSON number; booleans, strings and overflowing numbers are refused."""
    if type(x) is float and x - x == 0:          # the common case: a finite float
        return x
    if isinstance(x, np.generic):               # a library caller's numpy scalar (np.float32, np.int64)
        x = plain_number(x)
    if x is None:
        raise ValidationError(f"{what} is missing (null or an empty cell): give a number")
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        raise ValidationError(f"{what} must be a number")
    try:
        f = float(x)
    except OverflowError:
        f = math.inf
    if math.isinf(f):
        raise ValidationError(f"{what} is not finite: infinite, or beyond a double (about 1.8e308)")
    if not math.isfinite(f):
        raise ValidationError(f"{what} must be finite")
    return f


def listed(x: Any, what: str) -> Any:
    """A library caller's 1-D numpy array of numbers as the JSON list it stands for (anything else as
    it is, for the list rules to judge); an astropy Quantity is refused, its unit would be lost."""
    if not isinstance(x, np.ndarray):
        return x
    if hasattr(x, "unit"):
        raise ValidationError(f"{what} is an astropy Quantity: give its numbers (q.value) "
                              'and its unit ("unit": q.unit.to_string())')
    if x.ndim != 1 or x.dtype.kind not in "iuf":
        raise ValidationError(f"{what} must be a list of numbers (a 1-D numeric array)")
    return as_doubles(x).tolist() if x.dtype.kind == "f" else x.tolist()


def number_array(x: Any, what: str, limit: int) -> np.ndarray:
    if not isinstance(x, list):
        raise ValidationError(f"{what} must be a list of numbers")
    if not x:
        raise ValidationError(f"{what} must not be empty")
    if len(x) > limit:
        raise ValidationError(f"{what} has {len(x)} entries; the limit is {limit}")
    try:
        arr = np.array(x, dtype=float)
    except (TypeError, ValueError, OverflowError):
        arr = None
    # numpy reads "23.4" as 23.4 and True as 1.0: a list of numbers holds neither (as a single value does not)
    if arr is None or arr.ndim != 1 or any(isinstance(v, (bool, str)) for v in x):
        for v in x:
            number(v, f"each entry of {what}")
        raise ValidationError(f"{what} must be a list of numbers")
    if not np.all(np.isfinite(arr)):
        raise ValidationError(f"{what} must contain finite numbers only")
    return arr


def within(name: str, what: str, items: Any, limits: Limits, limit: str) -> None:
    """A list over a configured length is work over the limits: 413, before anything is converted."""
    value = getattr(limits, limit)
    if isinstance(items, list) and len(items) > value:
        raise too_large(limit, value, f"{name}: {what} has {len(items)} entries",
                        {name: f"at most {value} entries"})


def _calendar_jd(text: str, limits: Limits) -> float:
    if len(text) > limits.max_string_length:
        raise ValidationError("time string is too long")
    from astropy.time import Time
    bare, minutes = _utc_offsets([text])
    try:
        if not _ISO_DATE.fullmatch(bare[0]):
            raise ValueError(bare[0])
        with _second_sixty_quiet():
            t = Time(bare[0], scale="utc")
    except Exception:
        raise ValidationError(f"{text!r} is not an ISO 8601 time or a Julian Date") from None
    return float(np.atleast_1d(_utc_jd(t, bare, minutes, lambda k: repr(text)))[0])


# An ISO 8601 calendar date, with a time of day or not, in ASCII digits (its UTC offset already taken off):
# astropy's guess also reads a Julian epoch "J2000" (in UTC, not TT: 64 s off the standard epoch), a Besselian one
# "B1950.0", a day of year "2020:001" and full-width digits, none of which is ISO 8601
_ISO_DATE = re.compile(r"\d{4}-\d{1,2}-\d{1,2}(?:[T ]\d{1,2}:\d{2}(?::\d{2}(?:\.\d+)?)?)?Z?", re.ASCII)

# A 60th second: astropy reads one where UTC had no leap second as the next minute, silently.
_LEAP_SECOND = re.compile(r".*:6\d(?:\.\d*)?")


@contextlib.contextmanager
def _second_sixty_quiet():
    """Without ERFA's warning of a 60th second past the day's end: :func:`_leap_second_held` refuses it in words."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message='ERFA function "dtf2d" yielded .*time is after end of day')
        yield


def _leap_second_held(second: float, offset_minutes: float, what: str) -> None:
    if offset_minutes:
        raise ValidationError(f"{what} has a 60th second in local time: give a leap second in UTC (Z)")
    if second < 60:
        raise ValidationError(f"{what} has a 60th second where UTC had no leap second")


# A time of day followed by a UTC offset, +hh:mm, +hhmm or +hh (ISO 8601; what Python's
# datetime.isoformat() writes for an aware time), which astropy's ISO formats do not read.
_OFFSET = re.compile(r"(.*\d[T ]\d{2}:\d{2}(?::\d{2}(?:\.\d*)?)?)([+-])([01]\d|2[0-3])(?::?([0-5]\d))?")


def _utc_jd(t, bare: list[str], minutes: np.ndarray, what) -> np.ndarray:
    """The JDs in UTC of the times ``t`` that astropy read from ``bare`` (the texts without their UTC
    offsets, ``minutes``): a 60th second held against the leap seconds UTC had (``what(k)`` names entry
    k in the refusal), each offset taken off."""
    sixty = [k for k, text in enumerate(bare) if _LEAP_SECOND.fullmatch(text)]
    if sixty:
        seconds = np.atleast_1d(t.ymdhms["second"])[sixty]
        for k, second in zip(sixty, seconds.tolist()):
            _leap_second_held(second, minutes[k], what(k))
    return _minus_minutes(t, minutes).jd


# RFC 3339 sec. 5.6 allows a lower-case "t" between date and time and "z" for UTC; astropy reads upper case
_LOWER_T_Z = re.compile(r"(?<=\d)t(?=\d)|(?<=\d)z$")


def _utc_offsets(texts: list[str]) -> tuple[list[str], np.ndarray]:
    """The strings without their UTC offsets, and each offset in minutes (0 where none); white space around a
    date is no part of it (astropy took a final newline and refused a space, either side)."""
    bare, minutes = [_LOWER_T_Z.sub(lambda m: m[0].upper(), t.strip()) for t in texts], np.zeros(len(texts))
    for k, text in enumerate(bare):
        m = _OFFSET.fullmatch(text)
        if m:
            bare[k] = m[1]
            minutes[k] = (1 if m[2] == "+" else -1) * (60 * int(m[3]) + int(m[4] or 0))
    return bare, minutes


def _minus_minutes(t, minutes):
    """Local times given with an offset east of Greenwich, as UTC.

    An offset shifts the clock's labels (ISO 8601; RFC 3339 sec. 4.2: 00:30+01:00 is 23:30Z the day before), so the
    minutes are taken off the labels in a scale without leap seconds (TAI read as labels) and the result read as UTC
    again: astropy's UTC arithmetic counts SI seconds, and across a leap second gave the UTC time one second late."""
    if not minutes.any():
        return t
    import astropy.units as u
    from astropy.time import Time
    labels = Time(t.ymdhms, format="ymdhms", scale="tai") - minutes * u.min
    return Time(labels.ymdhms, format="ymdhms", scale="utc")


MAX_TIME_PARSES = 64      # astropy calls for one list of time strings (each call parses many at once)


def _calendar_jds(texts: list[str], limits: Limits, positions: list[int] | None = None) -> np.ndarray:
    """The JDs of many ISO 8601 strings.

    One astropy call parses a whole list, where string by string would take minutes for a long
    one; a list that fails is halved until the bad entry (or
    the runs of differently formatted strings) are found, in a bounded number of parses."""
    from astropy.time import Time
    positions = positions if positions is not None else list(range(len(texts)))
    for k, text in enumerate(texts):
        if len(text) > limits.max_string_length:
            raise ValidationError(f"entry {positions[k]}: time string is too long")
    texts, minutes = _utc_offsets(texts)
    for k, text in enumerate(texts):
        if not _ISO_DATE.fullmatch(text):
            raise ValidationError(f"entry {positions[k]}: {text[:64]!r} is not an ISO 8601 time")
    out = np.empty(len(texts))
    calls = 0
    stack = [(0, len(texts))]
    while stack:
        lo, hi = stack.pop()
        calls += 1
        if calls > MAX_TIME_PARSES:
            raise ValidationError("the time strings mix too many formats: give them in one ISO 8601 form")
        try:
            with _second_sixty_quiet():
                t = Time(texts[lo:hi], scale="utc")
        except Exception:
            if hi - lo == 1:
                raise ValidationError(f"entry {positions[lo]}: {texts[lo][:64]!r} is not an ISO 8601 time") from None
            mid = (lo + hi) // 2
            stack += [(mid, hi), (lo, mid)]
            continue
        out[lo:hi] = _utc_jd(t, texts[lo:hi], minutes[lo:hi],
                             lambda k, lo=lo: f"entry {positions[lo + k]}: {texts[lo + k][:64]!r}")
    return out


def faults(spec: Input, x, sigma_minus, sigma_plus) -> list[tuple[Any, str]]:
    """The rules a measured quantity's numbers obey, in canonical units: for each rule, in the order
    a caller should hear of them, where it is broken and its message.  The numbers are floats for
    one system (the rules then give booleans) or arrays over N systems (boolean arrays); a batch
    calls this under ``np.errstate(invalid="ignore")``.  A time's domain holds its number as given (JD or MJD)."""
    outside = not spec.domain.holds(x) if type(x) is float else ~spec.domain.contains(x)
    rules = [((sigma_minus < 0) | (sigma_plus < 0), "sigma must be >= 0"),
             ((x - x != 0) | (sigma_minus - sigma_minus != 0) | (sigma_plus - sigma_plus != 0),    # not finite
              f"overflows a double when converted to {spec.unit or 'dimensionless'}"),
             (outside, spec.domain.message(spec.unit))]
    if is_scale(spec.domain):
        rules.append(((abs(x) < SMALLEST_NORMAL) & (x != 0), subnormal_message("value", spec.unit)))
    return rules


@lru_cache(maxsize=None)
def is_scale(domain) -> bool:
    """Whether an input's domain excludes 0 (a period, a K, a mass: see SMALLEST_NORMAL)."""
    return not domain.holds(0.0)


def date_unit_message(unit: str | None) -> str:
    """Why a date given as a number takes no unit but days."""
    return (f"a date given as a number is a Julian Date in days (an MJD with time_format mjd): its number cannot "
            f"be converted from {str(unit)[:40]!r}; give it in d, or as an ISO 8601 string (whose sigma may then be "
            "in another unit)")


def subnormal(spec: Input, x: float) -> bool:
    """A scale's number below the smallest normal double (see SMALLEST_NORMAL)."""
    return abs(x) < SMALLEST_NORMAL and x != 0 and is_scale(spec.domain)


def subnormal_message(what: str, unit: str) -> str:
    """A scale's value below the smallest normal double (in ``unit``, the input's canonical one)."""
    where = f" in {unit}" if unit else ""
    return (f"{what} is below the smallest normal double (about 2.2e-308){where}, where a number has lost its "
            "digits (1e-320 keeps 11 of 53 bits) and an answer it is multiplied into with them: give a number "
            "within a double's normal range")


def broken(spec: Input, x: np.ndarray, sigma_minus: np.ndarray, sigma_plus: np.ndarray) -> np.ndarray:
    """Which of N systems break any rule of :func:`faults`."""
    return np.logical_or.reduce([where for where, _ in faults(spec, x, sigma_minus, sigma_plus)])


@dataclass
class RawQuantity:
    """A quantity as the request gave it, before unit conversion (arrays over N systems)."""

    value: np.ndarray
    sigma_minus: np.ndarray
    sigma_plus: np.ndarray
    samples: np.ndarray | None = None
    isotropic: bool = False
    unit: str | None = None
    calendar: bool = False            # a time given as a calendar (ISO) string, already a JD
    text: str | None = None           # that string, echoed as given


class _CheckedField(fields.Field):
    """A field whose checks all live in its ``_deserialize``: with no validators given, marshmallow's
    composition of the empty list (an ``And`` built for every value of every request) is skipped."""

    def _validate(self, value) -> None:
        if self.validators:
            super()._validate(value)


class MeasuredField(_CheckedField):
    """One measured quantity in any form of the wire contract."""

    def __init__(self, spec: Input, limits: Limits, **kw):
        super().__init__(**kw)
        self.spec = spec
        self.limits = limits

    def _deserialize(self, value, attr, data, **kwargs) -> RawQuantity:
        spec = self.spec
        if type(value) is dict:                 # the usual form first
            return self._from_object(value)
        if isinstance(value, np.generic):       # a library caller's numpy scalar: the number it holds
            value = plain_number(value)
        one = np.zeros(1)
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            x = number(value)
            if not spec.domain.holds(x):
                raise ValidationError(spec.domain.message(spec.unit))
            if subnormal(spec, x):
                raise ValidationError(subnormal_message("value", spec.unit))
            return RawQuantity(np.array([x]), one, one)
        if isinstance(value, str):
            if spec.isotropic and value == "isotropic":
                return RawQuantity(np.array([90.0]), one, one, isotropic=True)
            if spec.time:
                return RawQuantity(np.array([_calendar_jd(value, self.limits)]), one, one, calendar=True, text=value)
            raise ValidationError(FORM_HINT + (' or "isotropic"' if spec.isotropic else ""))
        if not isinstance(value, dict):
            raise ValidationError(FORM_HINT + (' or "isotropic"' if spec.isotropic else ""))
        return self._from_object(value)

    def _from_object(self, value: dict) -> RawQuantity:
        """The object forms: value with sigma or sigma_minus and sigma_plus, or samples; a unit."""
        spec = self.spec
        if not MEASURED_KEYS.issuperset(value):
            unknown = set(value) - MEASURED_KEYS
            raise ValidationError(f"unknown key(s) {', '.join(sorted(map(str, unknown)))}; " + FORM_HINT)
        unit = value.get("unit")
        if unit is not None and not isinstance(unit, str):
            raise ValidationError("unit must be a string")
        if unit is not None and len(unit) > self.limits.max_string_length:
            raise ValidationError("unit is too long")
        k = self._factor(unit)
        if spec.time and k != 1.0 and not isinstance(value.get("value"), str):
            # the unit of a time applies to its sigma only: a number with it stays a day count, so 2019.6 "yr"
            # (a Julian epoch, meant) would be read as JD 2019.6, 4707 BC
            raise ValidationError(date_unit_message(unit))
        if "samples" in value:
            if set(value) - {"samples", "unit"}:
                raise ValidationError("samples cannot be combined with value or sigma")
            samples = listed(value["samples"], "samples")
            within(spec.name, "samples", samples, self.limits, "max_sample_array")
            s = number_array(samples, "samples", self.limits.max_sample_array)
            if len(s) < 2:
                raise ValidationError("samples must hold at least 2 draws")
            with np.errstate(over="ignore", invalid="ignore"):
                s = s * (1.0 if spec.time else k)
                sd = s.std(ddof=1)
            med = np.median(s)
            if not np.isfinite(sd):
                raise ValidationError("the samples (in the canonical unit) or their spread overflow a double")
            if not spec.domain.contains(s).any():
                # Monte Carlo keeps the draws within the domain: with none left, this input alone is at fault
                domain = spec.domain.message(spec.unit)
                raise ValidationError(f"every sample lies outside the input's domain ({domain}): no Monte Carlo "
                                      "draw is left")
            if is_scale(spec.domain) and np.count_nonzero((np.abs(s) < SMALLEST_NORMAL) & (s != 0)):
                raise ValidationError(subnormal_message("a sample", spec.unit))
            return RawQuantity(np.array([med]), np.array([sd]), np.array([sd]), samples=s[None, :], unit=unit)
        if "value" not in value:
            raise ValidationError("value is missing; " + FORM_HINT)
        v = value["value"]
        text = v if isinstance(v, str) and spec.time else None
        if text is not None:
            x = _calendar_jd(v, self.limits)
        elif spec.isotropic and isinstance(v, str):
            # e.g. a table's cell: say what the column may hold
            raise ValidationError(ISOTROPIC_ALONE if v == "isotropic" else 'value must be a number or "isotropic"')
        else:
            x = number(v, "value")
        if "sigma" in value and ("sigma_minus" in value or "sigma_plus" in value):
            raise ValidationError("give either sigma or sigma_minus and sigma_plus, not both")
        if ("sigma_minus" in value) != ("sigma_plus" in value):
            raise ValidationError("sigma_minus and sigma_plus go together")
        if "sigma" in value:
            sm = sp = number(value["sigma"], "sigma")
        elif "sigma_minus" in value:
            sm, sp = number(value["sigma_minus"], "sigma_minus"), number(value["sigma_plus"], "sigma_plus")
        else:
            sm = sp = 0.0
        x, sm, sp = x if spec.time else x * k, sm * k, sp * k      # the unit of a time applies to its sigma only
        for broken_here, message in faults(spec, x, sm, sp):
            if broken_here:
                raise ValidationError(message)
        numbers = np.array([x, sm, sp])          # one array, three views: cheaper than three arrays
        return RawQuantity(numbers[0:1], numbers[1:2], numbers[2:3], unit=unit, calendar=text is not None, text=text)

    def _factor(self, unit: str | None) -> float:
        if unit is None:
            return 1.0
        try:
            return factor(unit, self.spec.unit)
        except UnitError as e:
            raise ValidationError(str(e)) from None


class SeriesField(_CheckedField):
    """A list of exact numbers (or, for times, ISO 8601 strings)."""

    def __init__(self, spec: Input, limits: Limits, **kw):
        super().__init__(**kw)
        self.spec = spec
        self.limits = limits

    def _deserialize(self, value, attr, data, **kwargs) -> RawQuantity:
        if isinstance(value, dict):
            unknown = set(value) - {"value", "unit"}
            if unknown or "value" not in value:
                raise ValidationError('must be a list, or an object {"value": [...], "unit": "..."}')
            unit, value = value.get("unit"), value["value"]
            if unit is not None and not isinstance(unit, str):
                raise ValidationError("unit must be a string")
        else:
            unit = None
        value = listed(value, "the list")
        if not isinstance(value, list) or not value:
            raise ValidationError("must be a non-empty list")
        within(self.spec.name, "the list", value, self.limits, "max_series")
        calendar = np.zeros(len(value), dtype=bool)
        if self.spec.time and any(isinstance(v, str) for v in value):
            out = np.empty(len(value))
            strings = []
            for k, v in enumerate(value):
                if isinstance(v, str):
                    strings.append(k)
                    calendar[k] = True
                else:
                    out[k] = number(v, "each entry")
            out[strings] = _calendar_jds([value[k] for k in strings], self.limits, strings)
        else:
            out = number_array(value, "the list", self.limits.max_series)
        if unit is not None:
            if self.spec.time:
                # days, as a single date given as a number takes them; any other unit cannot turn a day count into one
                try:
                    days = factor(unit, self.spec.unit) == 1.0
                except UnitError:
                    days = False
                if not days:
                    raise ValidationError(date_unit_message(unit))
            try:
                out = out * factor(unit, self.spec.unit)
            except UnitError as e:
                raise ValidationError(str(e)) from None
        outside = np.flatnonzero(~self.spec.domain.contains(out))
        if outside.size:
            raise ValidationError(f"entry {int(outside[0])}: {self.spec.domain.describe()}"
                                  + (f" ({outside.size} entries are outside)" if outside.size > 1 else ""))
        z = np.zeros(1)
        raw = RawQuantity(out, z, z, unit=unit)
        raw.calendar = calendar
        return raw


class FlagField(_CheckedField):
    """A JSON boolean, and nothing that merely reads as one (1, "true")."""

    def _deserialize(self, value, attr, data, **kwargs) -> bool:
        if type(value) is not bool:
            raise ValidationError("must be true or false")
        return value


class ChoiceField(_CheckedField):
    def __init__(self, spec: Input, **kw):
        super().__init__(**kw)
        self.spec = spec

    def _deserialize(self, value, attr, data, **kwargs):
        if not isinstance(value, str) or value not in self.spec.choices:
            raise ValidationError(f"must be one of: {', '.join(self.spec.choices)}")
        return value


class IntegerField(_CheckedField):
    def __init__(self, spec: Input, **kw):
        super().__init__(**kw)
        self.spec = spec

    def _deserialize(self, value, attr, data, **kwargs):
        if isinstance(value, bool) or not isinstance(value, int):
            if isinstance(value, float) and value.is_integer():
                value = int(value)
            else:
                raise ValidationError("must be a whole number")
        if abs(value) > 2**63 or not self.spec.domain.holds(float(value)):     # 10**400: no float
            raise ValidationError(self.spec.domain.describe())
        return int(value)


# Validators are marshmallow's own: since marshmallow 4 a validator that merely returns False
# no longer rejects anything.


class CorrelationSchema(Schema):
    class Meta:
        unknown = RAISE

    between = fields.List(fields.String(validate=validate.Length(max=64)), required=True)
    rho = fields.Function(deserialize=lambda v: number(v, "rho"), required=True)      # a JSON number, never "0.3"

    @validates_schema
    def _check(self, data, **kwargs):
        if len(data["between"]) != 2 or data["between"][0] == data["between"][1]:
            raise ValidationError("between must name two different inputs", "between")
        if not -1.0 <= data["rho"] <= 1.0:
            raise ValidationError("rho must be between -1 and 1", "rho")


class WholeNumber(fields.Integer):
    """A whole-number option: 7 or 7.0 (JSON has no separate integer type), never 7.5, "7" or true."""

    def _deserialize(self, value, attr, data, **kwargs):
        if type(value) is float and value.is_integer():
            value = int(value)
        return super()._deserialize(value, attr, data, **kwargs)


class UncertaintySchema(Schema):
    class Meta:
        unknown = RAISE

    method = fields.String(validate=validate.OneOf(("linear", "monte_carlo", "monte-carlo")))
    samples = WholeNumber(strict=True)
    seed = WholeNumber(strict=True, validate=validate.Range(
        0, 2**63, max_inclusive=False, error="must be a whole number from 0 to 2^63 - 1, not {input}"))

    @validates_schema
    def _check(self, data, **kwargs):
        # draws and a seed contradict the linear method: answering linear would silently drop them
        if data.get("method") == "linear":
            errors = {key: [f"{key} is for the Monte Carlo method, not the linear one: drop it, or ask for "
                            '"method": "monte_carlo"'] for key in ("samples", "seed") if key in data}
            if errors:
                raise ValidationError(errors)

    @post_load
    def _method(self, data, **kwargs):
        """The method spelt one way; draws or a seed without a method ask for Monte Carlo (as the
        command line's --samples and --seed do)."""
        implied = "monte_carlo" if "samples" in data or "seed" in data else "linear"
        return {**data, "method": data.get("method", implied).replace("-", "_")}


def _field_for(spec: Input, limits: Limits) -> fields.Field:
    kw = {"required": spec.required and spec.default is None}
    if spec.kind == "choice":
        return ChoiceField(spec, **kw)
    if spec.kind == "integer":
        return IntegerField(spec, **kw)
    if spec.kind == "series":
        return SeriesField(spec, limits, **kw)
    return MeasuredField(spec, limits, **kw)


class RequestSchema(Schema):
    class Meta:
        unknown = RAISE


#: the members of the nested options, for the name a caller meant by an unknown one
NESTED_NAMES = {"uncertainty": tuple(UncertaintySchema._declared_fields),
                "correlations": tuple(CorrelationSchema._declared_fields)}


@lru_cache(maxsize=None)
def request_schema(calc: Calculation, limits: Limits) -> Schema:
    """The marshmallow schema of one calculation's request body (built once)."""
    members: dict[str, fields.Field] = {spec.name: _field_for(spec, limits) for spec in calc.inputs}
    members["correlations"] = fields.List(fields.Nested(CorrelationSchema))
    members["uncertainty"] = fields.Nested(UncertaintySchema)
    members["units"] = fields.Dict(keys=fields.String(validate=validate.Length(max=64)),
                                   values=fields.String(validate=validate.Length(max=limits.max_string_length)))
    members["covariance"] = FlagField()
    members["budget"] = FlagField()
    if any(spec.time for spec in calc.inputs):
        members["time_format"] = fields.String(validate=validate.OneOf(("jd", "mjd")))
    schema_class = RequestSchema.from_dict(members, name=f"{calc.name}_request")
    return schema_class()


def _short(name: str, limit: int = 80) -> str:
    # a caller's unknown key is echoed in the error, so bound what we send back
    return name if len(name) <= limit else name[:limit] + "..."


def unknown_field(name: str, known, symbols=None) -> str:
    return "unknown field" + meant(name, known, symbols)


def error_messages(err: ValidationError, known=(), symbols=None) -> dict[str, list[str]]:
    """marshmallow's nested messages flattened to {"field": ["message", ...]}; an unknown top-level name is
    answered with the one of ``known`` it seems to mean."""
    out: dict[str, list[str]] = {}

    # the root's prefix is None: an unknown top-level name "" is named "", as "uncertainty." names one inside
    def walk(prefix: str | None, msg):
        if isinstance(msg, dict):
            for k, v in msg.items():
                k = _short(str(k))
                key = f"{prefix}.{k}" if prefix is not None else k
                if k == "_schema":
                    key = "_schema" if prefix is None else prefix
                elif k in ("key", "value") and (prefix or "").startswith("units.") and not isinstance(v, dict):
                    key = prefix        # marshmallow's Dict says which half of units.NAME: the name is enough
                walk(key, v)
        elif isinstance(msg, list):
            for m in msg:
                if isinstance(m, (dict, list)):
                    walk(prefix, m)
                else:
                    out.setdefault("_schema" if prefix is None else prefix, []).append(str(m))
        else:
            out.setdefault("_schema" if prefix is None else prefix, []).append(str(msg))

    walk(None, err.messages)
    plain = {"Unknown field.": "unknown field", "Missing data for required field.": "is required",
             "Field may not be null.": "may not be null: give a value (an optional field may be left out)"}

    def unknown(key: str) -> str:
        if "." not in key:
            return unknown_field(key, known, symbols)
        outer, name = key.split(".", 1)[0], key.rsplit(".", 1)[1]       # uncertainty.metod, correlations.0.rh
        return unknown_field(name, NESTED_NAMES.get(outer, ()))

    return {k: [unknown(k) if m == "Unknown field." else plain.get(m, m) for m in v] for k, v in out.items()}
