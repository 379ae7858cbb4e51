"""``calcservice compute``: any calculation of the registry, in-process, from the command line.

    calcservice compute sb1 period=41.6+-0.02 k1=23.4+-0.3km/s eccentricity=0.31
    calcservice compute sb2 ... --method monte-carlo --samples 20000 --seed 7
    calcservice compute sb2 ... --format latex > table.tex
    calcservice compute sb1 --in catalogue.ecsv --out results.fits --keep star,hip

Values are ``NAME=VALUE[+-SIGMA][UNIT]`` (``±`` and ``+/-`` also work), asymmetric
``NAME=VALUE+PLUS-MINUS[UNIT]``, ``inclination=isotropic``, ISO 8601 dates for times (with a
sigma in days, or in the unit that follows it: ``2024-03-01+-3``, ``2024-03-01T12:00±6h``),
comma-separated lists for series (``times=2460400.5,2460500.5``) and ``NAME=@FILE`` for
the caller's own draws (numbers separated by spaces, commas or new lines).

Everything goes through :func:`calcservice.core.compute`, the same core as the
HTTP API, so ``--json`` prints exactly the response the service gives.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import re
import sys
import types
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from . import report
from .columns import infinite_cells, meant
from .core import Problem, compute, compute_batch
from .registry import Calculation, calculations

_NUM = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_UNUM = r"(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_PM = r"(?:\+-|\+/-|±)"
_SYMMETRIC = re.compile(rf"^\s*(?P<value>{_NUM})\s*(?:{_PM}\s*(?P<sigma>{_UNUM}))?\s*(?P<unit>.*?)\s*$")
_PLUS_MINUS = re.compile(rf"^\s*(?P<value>{_NUM})\s*\+\s*(?P<plus>{_UNUM})\s*-\s*(?P<minus>{_UNUM})\s*(?P<unit>.*?)\s*$")
_MINUS_PLUS = re.compile(rf"^\s*(?P<value>{_NUM})\s*-\s*(?P<minus>{_UNUM})\s*\+\s*(?P<plus>{_UNUM})\s*(?P<unit>.*?)\s*$")
# a unit is any text astropy may read ("km/s", "°", "%", "µas"), judged by the service; it cannot begin like
# a number, a sign or a date's next field, so that "2024-03-01" stays a date and "1.2+0.3-0.1" asymmetric
_UNIT = re.compile(r"^[^\d\s+\-.,±=][^=]*$")
# an ISO 8601 date with its sigma (2024-08-10+-10, 2024-08-10T06:00±6h): the date as the string the service
# reads, the sigma in days unless a unit follows
_DATE_PM = re.compile(rf"^\s*(?P<value>\d{{4}}-\d\d\S*?)\s*{_PM}\s*(?P<sigma>{_UNUM})\s*(?P<unit>.*?)\s*$")
EXAMPLE_FORMS = "e.g. 61.4, 61.4+-0.9, 61.4±0.9km/s, 2.5yr or 1.2+0.3-0.1"

EXIT_REJECTED = 1     # the inputs parse but the calculation refuses them (the API's 4xx)
EXIT_USAGE = 2        # the command line itself is wrong


class UsageError(Exception):
    """A mistake on the command line, reported in one line naming the field."""

    def __init__(self, field: str | None, message: str):
        super().__init__(f"{field}: {message}" if field else message)


# --------------------------------------------------------------------------- parsing values
def parse_measured(text: str, field: str = "value") -> Any:
    """``VALUE[+-SIGMA][UNIT]`` as a measured quantity of the wire contract (a number or an object).

    Strings that are not numbers (ISO dates, "isotropic") are passed through for the
    service to judge against the input's declaration.
    """
    text = text.strip()
    if not text:
        raise UsageError(field, f"no value given ({EXAMPLE_FORMS})")
    for pattern in (_PLUS_MINUS, _MINUS_PLUS, _SYMMETRIC):
        m = pattern.match(text)
        if not m:
            continue
        unit = m.group("unit")
        if unit and not _UNIT.match(unit):
            continue
        value = _number(m.group("value"), field)
        if "plus" in m.groupdict() and m.group("plus") is not None:
            out: dict[str, Any] = {"value": value, "sigma_minus": _number(m.group("minus"), field),
                                   "sigma_plus": _number(m.group("plus"), field)}
        elif m.group("sigma") is not None:
            out = {"value": value, "sigma": _number(m.group("sigma"), field)}
        elif not unit:
            return value
        else:
            out = {"value": value}
        if unit:
            out["unit"] = unit
        return out
    m = _DATE_PM.match(text)
    if m and (not m.group("unit") or _UNIT.match(m.group("unit"))):
        out = {"value": m.group("value"), "sigma": _number(m.group("sigma"), field)}
        return {**out, "unit": m.group("unit")} if m.group("unit") else out
    if re.match(r"^[+-]?[\d.]", text) and not re.match(r"^\d{4}-\d\d", text):
        raise UsageError(field, f"{text!r} is not a measured value ({EXAMPLE_FORMS})")
    return text


def _number(text: str, field: str) -> float:
    x = float(text)
    if not math.isfinite(x):
        raise UsageError(field, f"{text!r} is not a finite number")
    return x


def _samples(path: str, field: str) -> dict:
    from .config import load_settings
    # read no more than a request body may hold: /dev/zero (or a file of gigabytes) was read without end
    limit = load_settings().limits.max_body_bytes
    try:
        with open(path, "rb") as fh:
            data = fh.read(limit + 1)
        if len(data) > limit:
            raise UsageError(field, f"{path} holds more than {limit} bytes of samples (limit max_body_bytes, "
                                    "CALCSERVICE_MAX_BODY_BYTES): give fewer draws")
        raw = data.decode("utf-8")
    except OSError as e:
        raise UsageError(field, f"cannot read samples from {path}: {e.strerror}") from None
    except UnicodeDecodeError as e:
        raise UsageError(field, f"{path} is not UTF-8 text (byte {e.start}): samples are numbers written as text") \
            from None
    try:
        values = [float(t) for t in re.split(r"[\s,;]+", raw.strip()) if t]
    except ValueError:
        raise UsageError(field, f"{path} must hold numbers only (separated by spaces, commas or new lines)") from None
    return {"samples": values}


def parse_assignment(calc: Calculation, text: str) -> tuple[str, Any]:
    """``NAME=VALUE`` as (input name, JSON value) for the calculation's input ``NAME``."""
    if "=" not in text:
        raise UsageError(None, f"{text!r} is not NAME=VALUE (inputs of {calc.name}: {_input_names(calc)})")
    name, _, raw = text.partition("=")
    name = name.strip()
    try:
        spec = calc.input(name)
    except KeyError:
        hint = meant(name, [i.name for i in calc.inputs], calc.symbols)
        raise UsageError(name, f"{calc.name} has no input {name!r}{hint or f'; its inputs are {_input_names(calc)}'}") \
            from None
    raw = raw.strip()
    if spec.kind == "choice":
        return name, raw
    if spec.kind == "integer":
        try:
            return name, int(raw)
        except ValueError:
            raise UsageError(name, f"{raw!r} is not a whole number") from None
    if spec.kind == "series":
        parts = [p.strip() for p in raw.split(",") if p.strip()]
        if not parts:
            raise UsageError(name, "give a comma-separated list, e.g. 2460400.5,2460500.5")
        out = []
        for p in parts:
            v = parse_measured(p, name)
            if isinstance(v, dict):
                raise UsageError(name, f"{p!r}: the entries of a series are exact numbers without units")
            out.append(v)
        return name, out
    if raw.startswith("@"):
        return name, _samples(raw[1:], name)
    value = parse_measured(raw, name)
    if isinstance(value, str) and not spec.time and not (spec.isotropic and value == "isotropic"):
        # a word where a number goes: said in the command line's own forms, not the JSON objects the service lists
        raise UsageError(name, f"{value!r} is not a number ({EXAMPLE_FORMS}"
                               + (", or isotropic for random orientations)" if spec.isotropic else ")"))
    return name, value


def _input_names(calc: Calculation) -> str:
    return ", ".join(i.name for i in calc.inputs)


def _pair(text: str, option: str) -> tuple[str, str]:
    if "=" not in text:
        raise UsageError(option, f"{text!r} must be KEY=VALUE")
    k, _, v = text.partition("=")
    return k.strip(), v.strip()


def build_body(calc: Calculation, args) -> dict:
    """The request body of the wire contract from the parsed command line."""
    body: dict[str, Any] = {}
    for text in args.values:
        name, value = parse_assignment(calc, text)
        if name in body:
            raise UsageError(name, "given twice")
        body[name] = value
    method = args.method
    if method is None and (args.samples is not None or args.seed is not None):
        method = "monte_carlo"          # draws and seeds only mean something for Monte Carlo
    if method is not None:
        unc: dict[str, Any] = {"method": method.replace("-", "_")}
        if args.samples is not None:
            unc["samples"] = args.samples
        if args.seed is not None:
            unc["seed"] = args.seed
        body["uncertainty"] = unc
    if args.correlation:
        corr = []
        for text in args.correlation:
            pair, rho = _pair(text, "--correlation")
            names = [n.strip() for n in pair.split(",")]
            if len(names) != 2:
                raise UsageError("--correlation", f"{text!r} must be NAME1,NAME2=RHO")
            try:
                corr.append({"between": names, "rho": float(rho)})
            except ValueError:
                raise UsageError("--correlation", f"{rho!r} is not a number") from None
        body["correlations"] = corr
    if args.unit:
        units: dict[str, str] = {}
        for text in args.unit:
            name, unit = _pair(text, "--unit")
            if units.get(name, unit) != unit:
                # a dict would keep the last silently, as a repeated input is refused
                raise UsageError("--unit", f"{name} is given twice, as {units[name]!r} and {unit!r}")
            units[name] = unit
        body["units"] = units
    if args.time_format:
        body["time_format"] = args.time_format
    return body


# --------------------------------------------------------------------------- output
_ENTRY = re.compile(r"^entry (\d+): ")


def ordinal(n: int) -> str:
    """1st, 2nd, 3rd, 4th, 11th, 12th, 13th, 21st ..."""
    return f"{n}{'th' if n % 100 in (11, 12, 13) else {1: 'st', 2: 'nd', 3: 'rd'}.get(n % 10, 'th')}"


_OPTIONS = {"uncertainty.samples": "--samples", "uncertainty.seed": "--seed", "uncertainty.method": "--method",
            "uncertainty": "--method", "time_format": "--time-format"}


def _field(key: str, args=None) -> str:
    """The service's name of a member (``uncertainty.samples``, ``units.m1``, ``correlations.1.rho``) as the command
    line's option that gave it (``--samples``, ``--unit m1``, ``--correlation A,B=RHO`` as typed); an input as is."""
    if key in _OPTIONS:
        return _OPTIONS[key]
    head, _, rest = key.partition(".")
    if head == "units" and rest:
        return f"--unit {rest}"
    typed = list(getattr(args, "correlation", None) or [])
    index = rest.partition(".")[0]
    if head == "correlations" and index.isdigit() and int(index) < len(typed):
        return f"--correlation {typed[int(index)]}"
    return key


def _problem_line(p, args=None) -> str:
    errors = getattr(p, "errors", None) or {}
    if errors:
        # a list's entry is counted from 1, as its user typed it (the JSON answer's "entry 1" is its index)
        counted = lambda m: f"the {ordinal(int(m.group(1)) + 1)} entry: "      # noqa: E731
        return "; ".join(f"{_field(k, args)}: {' '.join(_ENTRY.sub(counted, m) for m in v)}" for k, v in errors.items())
    return getattr(p, "detail", str(p))


def table(response: dict, calc: Calculation) -> str:
    """A readable plain-text table of a response: results (value ± sigma, unit), series, events, warnings."""
    style = report.STYLES["text"]
    unc = response.get("uncertainty", {})
    if unc.get("method") == "monte_carlo":
        how = (f"Monte Carlo, {unc.get('samples')} draws, seed {unc.get('seed')}, "
               f"{unc.get('rejected_fraction', 0):.2%} rejected; median and 68.27 % interval")
    else:
        how = "linear propagation"
    lines = [f"{calc.name}: {calc.title} ({how})", ""]
    results = response.get("results", {})
    rows = []
    for key, entry in results.items():
        if report.is_measured(entry):
            desc = calc.output(key).description if key in {o.name for o in calc.outputs} else ""
            # an undefined sigma said as such, with the interval's ends, as the report and the client's print say it
            rows.append([key, report.measured_cell(entry, style), entry.get("unit", ""), desc])
    if rows:
        lines += _columns(["result", "value", "unit", "description"], rows)
    series = results.get("series")
    if isinstance(series, dict):
        names, units, body = report.series_table(series, style)
        header = report.series_header(names, units, style, "MJD" if response.get("time_format") == "mjd" else "JD")
        lines += ([""] if rows else []) + _columns(header, body, right=True)
    for label, header, body in report.event_tables(results, style):
        lines += ["", label.replace("_", " ")] + _columns(header, body)
    # what the events say of themselves (the light-travel amplitudes), as the report's notes on the events
    notes = report.event_notes(results)
    if notes:
        lines += [""] + [f"{label}: {report.notes_line(values, style)}" for label, values in notes]
    warnings = response.get("warnings", [])
    if warnings:
        lines.append("")
        lines += [f"warning [{w.get('code')}]: {w.get('message')}" for w in warnings]
    return "\n".join(lines).rstrip() + "\n"


def _columns(header: list[str], rows: list[list[str]], right: bool = False) -> list[str]:
    widths = [max(len(str(c)) for c in col) for col in zip(header, *rows)]
    just = (lambda c, w: str(c).rjust(w)) if right else (lambda c, w: str(c).ljust(w))
    fmt = lambda r: "  ".join(just(c, w) for c, w in zip(r, widths)).rstrip()  # noqa: E731
    return [fmt(header), fmt(["-" * w for w in widths])] + [fmt(r) for r in rows]


def describe(calc: Calculation) -> str:
    lines = [f"{calc.name}: {calc.title}", "", calc.summary, "", "inputs:"]
    rows = []
    for i in calc.inputs:
        need = "required" if i.required and i.default is None else (
            f"default {report.default_text(i.default)}" if i.default is not None else "optional")
        if i.kind == "choice":
            what = "one of " + ", ".join(i.choices)
        else:
            what = i.domain.describe() + (", or isotropic" if i.isotropic else "") + (
                ", or an ISO 8601 date" if i.time else "")
        rows.append([i.name, i.unit or "-", need, i.description + f" ({what})"])
    lines += ["  " + r for r in _columns(["name", "unit", "", "description"], rows)]
    groups = [f"exactly one of {', '.join(g)}" for g in calc.exclusive] + [
        f"at most one of {', '.join(g)}" for g in calc.at_most_one]
    if groups:
        lines += ["", "  give " + "; ".join(groups)]
    lines += ["", "outputs:"]
    lines += ["  " + r for r in _columns(["name", "unit", "description"],
                                          [[o.name, o.unit or "-", o.description] for o in calc.outputs])]
    if calc.example:
        lines += ["", "example:", "  calcservice compute " + calc.name + " " + " ".join(
            _assignment(k, v) for k, v in calc.example.items() if k not in ("correlations", "uncertainty", "units"))]
    return "\n".join(lines) + "\n"


def _assignment(name: str, value: Any) -> str:
    if isinstance(value, dict):
        text = repr(value.get("value"))
        if "sigma" in value:
            text += f"+-{value['sigma']!r}"
        elif "sigma_plus" in value:
            text += f"+{value['sigma_plus']!r}-{value['sigma_minus']!r}"
        text += value.get("unit", "")
    elif isinstance(value, list):
        text = ",".join(map(str, value))
    else:
        text = str(value)
    return f"{name}={text}"


# --------------------------------------------------------------------------- catalogues through astropy's table I/O
TABLE_FORMATS = {".csv": "ascii.csv", ".ecsv": "ascii.ecsv", ".fits": "fits", ".fit": "fits", ".fts": "fits",
                 ".vot": "votable", ".votable": "votable", ".xml": "votable"}
FORMAT_NAMES = {"ascii.csv": "CSV", "ascii.ecsv": "ECSV", "fits": "FITS", "votable": "VOTable"}
PROGRESS_ROWS = 20_000          # a catalogue this long shows a progress bar on a terminal


def table_format(path: str, option: str) -> str:
    """The astropy table format a file's extension names (``.csv``, ``.ecsv``, ``.fits``, ``.vot``/``.xml``)."""
    suffix = Path(path).suffix.lower()
    if suffix not in TABLE_FORMATS:
        raise UsageError(option, f"{path}: unknown table format {suffix or '(no extension)'!r}; "
                                 "use .csv, .ecsv, .fits or .vot (VOTable)")
    return TABLE_FORMATS[suffix]


def declaration(calc: Calculation) -> dict:
    """The calculation's inputs as ``/v1/calculations`` declares them (what the client reads tables by)."""
    return {"name": calc.name, "inputs": [{"name": i.name, "kind": i.kind, "unit": i.unit, "time": bool(i.time)}
                                          for i in calc.inputs],
            "outputs": [{"name": o.name} for o in calc.outputs]}


def read_catalogue(calc: Calculation, path: str, keep: Sequence[str] = ()):
    """A catalogue file as the client's :class:`~calcservice.client.InputTable` (its ``kept`` columns: ``keep``).

    CSV, ECSV, FITS or VOTable by extension, read by ``astropy.table.Table.read``.  Columns are named
    after inputs, in the unit the file gives (ECSV, FITS and VOTable units; ``period[yr]`` in a CSV
    header), else the input's default unit; ``NAME_sigma`` (or ``NAME_sigma_minus`` and
    ``NAME_sigma_plus``) hold uncertainties in the unit of NAME.  Empty cells and masked entries are
    missing: that system's error, in place.  Any other column is refused unless ``--keep`` names it.
    """
    from astropy.table import Table

    from .client import InputTable
    from .columns import column_role, split_unit
    from .tables import is_ecsv, quiet_range_warnings, restore_underflows, table_lines
    fmt = table_format(path, "--in")
    options: dict[str, Any] = {}
    source: Any = path
    refused: dict[int, str] = {}
    if fmt in ("ascii.csv", "ascii.ecsv"):
        try:
            with open(path, encoding="utf-8-sig") as fh:
                text = fh.read()
        except FileNotFoundError:
            raise UsageError("--in", f"cannot read {path}: no such file") from None
        except OSError as e:
            raise UsageError("--in", f"cannot read {path}: {e.strerror or e}") from None
        except UnicodeDecodeError as e:
            raise UsageError("--in", f"{path} is not UTF-8 text (byte {e.start})") from None
    if fmt == "ascii.csv":
        options = {"delimiter": _check_csv_header(path), "guess": False}
        # from the header on, as the service reads a CSV body (tables.table_lines); a ragged row is
        # that system's error in place, as there (tables.ragged_rows)
        source, refused = _ragged_rows(path, table_lines(text.splitlines()), False, options["delimiter"])
    elif fmt == "ascii.ecsv":
        _check_ecsv_header(path, text.splitlines())
        lines, refused = _ragged_rows(path, text.splitlines(), True)
        if refused:
            source, options = lines, {"guess": False}
        elif _has("pandas") and not _ALIGNED.search(text):
            # astropy's ECSV reader with pandas parsing the data lines: the same table, several times sooner
            # (pandas splits at each space, so cells aligned by several are read by astropy's own reader)
            fmt, options = "ecsv", {"engine": "pandas"}
    try:
        with quiet_range_warnings():
            table = Table.read(source, format=fmt, **options)
    except FileNotFoundError:
        raise UsageError("--in", f"cannot read {path}: no such file") from None
    except OSError as e:
        raise UsageError("--in", f"cannot read {path}: {e.strerror or e}") from None
    except Exception as e:           # noqa: BLE001 - astropy's readers raise many kinds; one line says which file
        reason = str(e).strip().splitlines()[0] if str(e).strip() else type(e).__name__
        raise UsageError("--in", f"{path} is not a readable {FORMAT_NAMES[table_format(path, '--in')]} table: "
                                 f"{reason}") from None
    if len(table) == 0:
        raise UsageError("--in", f"{path} has a header but no rows" if table.colnames else f"{path} is empty")
    if fmt in ("ascii.ecsv", "ecsv"):
        _check_ecsv_meta(calc, path, table.meta)
    if fmt == "ascii.csv":
        _kept_as_written(table, source, keep, options["delimiter"])
    absent = [name for name in keep if name not in table.colnames]
    if absent:
        raise UsageError("--keep", f"{path} has no column {absent[0]!r}")
    inputs = {i.name: i for i in calc.inputs}
    for label in table.colnames:
        if label in keep:
            continue
        role = column_role(split_unit(label)[0], inputs)
        if role is None:
            raise UsageError(label, f"unknown column in {path}: {calc.name} takes {_input_names(calc)} "
                                    "(NAME_sigma for uncertainties; --keep COLUMN to copy a column to the results)")
        if inputs[role[0]].kind == "series":
            raise UsageError(role[0], f"{role[0]} is a list for each system and cannot be a column; "
                                      f"give it as {role[0]}=v1,v2,... on the command line")
    if fmt in ("ascii.csv", "ascii.ecsv", "ecsv"):
        lines = source if isinstance(source, list) else text.splitlines()
        _check_number_cells(path, table, [name for name in table.colnames if name not in keep],
                            options.get("delimiter", ","), lines, is_ecsv(text))
        restore_underflows(table, text, lines, is_ecsv(text), options.get("delimiter", ","))
    try:
        data = InputTable.from_data(table, declaration(calc), keep=keep, require_units=False)
    except ValueError as e:
        field, _, message = str(e).partition(": ")
        raise UsageError(field, f"{message} ({path})") from None
    data.refused = refused
    return data


# a line of an ECSV table (not a # line) with cells apart by more than one space
_ALIGNED = re.compile(r"^(?!#)[^\n]*?\S[ \t]{2,}\S", re.MULTILINE)


def _has(module: str) -> bool:
    import importlib.util
    return importlib.util.find_spec(module) is not None


def _check_csv_header(path: str) -> str:
    """A CSV file's delimiter, and its header checked as the HTTP path checks a CSV body
    (:func:`calcservice.tables.check_csv_text`): a column named twice or not at all is refused under the
    name written, not astropy's ``period_1``."""
    from .tables import TableError, check_csv_text
    try:
        with open(path, encoding="utf-8-sig", errors="replace") as fh:
            head = []
            for line in fh:                 # up to the header: blank lines and # comments before it
                head.append(line.rstrip("\r\n"))
                if line.strip() and not line.lstrip().startswith("#"):
                    break
    except OSError:
        return ","                  # the reader says what is wrong with the file
    try:
        return check_csv_text(head)
    except TableError as e:
        field, messages = next(iter(e.errors.items()))
        if field == "_body":
            raise UsageError("--in", f"{' '.join(messages)} ({path})") from None
        raise UsageError(field, f"{' '.join(messages)} in the header of {path}") from None


def _ragged_rows(path: str, lines: list[str], ecsv: bool, delimiter: str = ","):
    """:func:`calcservice.tables.ragged_rows`, its refusal of a text that is no table (a quote never closed) one
    line naming the file."""
    from .tables import TableError, ragged_rows
    try:
        return ragged_rows(lines, ecsv, delimiter)
    except TableError as e:
        raise UsageError("--in", f"{' '.join(next(iter(e.errors.values())))} ({path})") from None


def _check_ecsv_header(path: str, lines: list[str]) -> None:
    """An ECSV file's line of names checked as the HTTP path checks an ECSV body: a column named twice is
    refused under the name written, not astropy's complaint of two lists of names."""
    from .tables import TableError, check_header, ecsv_delimiter
    try:
        check_header(lines, ecsv_delimiter(lines), ecsv=True)
    except TableError as e:
        field, messages = next(iter(e.errors.items()))
        raise UsageError("--in" if field == "_body" else field, f"{' '.join(messages)} in the header of {path}") \
            from None


def _check_ecsv_meta(calc: Calculation, path: str, meta) -> None:
    """An ECSV file's meta naming an option or a unit, refused as the HTTP path refuses it
    (:func:`calcservice.tables.options_in_metadata`): it would go unread."""
    from .tables import TableError, is_unit_key, options_in_metadata
    try:
        options_in_metadata(calc, list(meta), "meta")
    except TableError as e:
        field = next(iter(e.errors))
        where = ("give each column its unit in its header entry" if is_unit_key(field) and field != "units" else
                 "give the options on the command line (--method, --samples, --seed, --correlation, --unit, "
                 "--time-format)")
        raise UsageError(field, f"the meta of {path} gives {field!r}, which is not read there: {where}") from None


def _kept_as_written(table, lines: list[str], keep, delimiter: str) -> None:
    """A CSV's kept columns as the service gives them back (:func:`calcservice.tables.kept_as_written`):
    ``0012`` stays text; masked where empty."""
    from astropy.table import MaskedColumn

    from .tables import kept_as_written
    for name, values in kept_as_written(table, lines, keep, delimiter).items():
        missing = [v is None for v in values]
        kinds = {type(v) for v in values} - {type(None)}
        fill = 0 if kinds <= {int} else (0.0 if kinds <= {int, float} else "")
        table[name] = MaskedColumn([fill if v is None else v for v in values], mask=missing)


def _check_number_cells(path: str, table, names: list[str], delimiter: str, lines: list[str], ecsv: bool) -> None:
    """The HTTP path's check of a text table's numbers (:func:`calcservice.tables.check_number_cells`):
    ``0x10`` or ``4_1.6`` in a column astropy read as numbers is refused, naming column and row.
    ``lines``: the text astropy read (ragged rows emptied)."""
    from .tables import TableError, check_number_cells
    try:
        check_number_cells(table, lines, ecsv, names, delimiter)
    except TableError as e:
        field, messages = next(iter(e.errors.items()))
        raise UsageError(field, f"{' '.join(messages)} ({path})") from None


def run_batch(name: str, body: dict, limits, refused: dict[int, str] | None = None) -> dict:
    """A batch request through the core (:func:`calcservice.core.compute_batch`), the same
    code the HTTP path ``POST /v1/batch/<calculation>`` runs."""
    return compute_batch(name, body, limits, refused=refused)


def _infinities_back(arrays: dict, columns: dict) -> dict:
    """The JSON form of a slice of a catalogue (``columns``) with the infinite cells of its arrays put back: JSON
    writes them null, which the batch would answer as a value not given, where the service says of an infinite
    table cell that it is not finite."""
    for name, member, v, where in infinite_cells(arrays):
        cells = columns[name][member]
        for k in where.tolist():
            cells[k] = float(v[k])
    return columns


def run_catalogue(calc: Calculation, data, shared: dict, options: dict, limits, progress: bool | None = None):
    """Every system of ``data`` (an InputTable) through :func:`run_batch`, in slices the limits allow,
    as one :class:`~calcservice.client.BatchResult` in input order.  ``shared`` holds inputs given once
    for all systems; ``progress`` shows a bar (default: on a terminal for a long catalogue)."""
    from dataclasses import asdict

    import orjson

    from .client import dumps, from_columns_answer, merge_results, rows_per_request, slice_for_draws
    n = data.count
    per = rows_per_request(asdict(limits), options)
    if progress is None:
        progress = n >= PROGRESS_ROWS and sys.stderr.isatty()
    monte_carlo = (options.get("uncertainty") or {}).get("method") == "monte_carlo"
    if progress and not monte_carlo:
        # slices small enough for the bar to move; linear answers do not depend on the slicing
        per = min(per, max(1000, n // 20))
    bar = None
    if progress:
        try:
            from tqdm import tqdm
            bar = tqdm(total=n, unit="system", desc=calc.name, file=sys.stderr, leave=False)
        except ImportError:
            pass
    parts = []
    start = 0
    try:
        while start < n:
            stop = min(n, start + per)
            # the JSON forms of the wire contract (NaN as null), as an HTTP body would bring them
            chunk = data.json(start, stop)
            columns = _infinities_back(chunk, orjson.loads(dumps(chunk)))
            refused = {k - start: reason for k, reason in data.refused.items() if start <= k < stop}
            try:
                answer = run_batch(calc.name, {"columns": {**columns, **shared}, **options}, limits, refused)
            except Problem as p:
                per = slice_for_draws(p, stop - start, asdict(limits), options)     # as the client cuts them
                if per is None:
                    raise
                continue
            parts.append((start, stop, from_columns_answer(answer, stop - start)))
            if bar is not None:
                bar.update(stop - start)
            start = stop
    finally:
        if bar is not None:
            bar.close()
    return merge_results(parts, n)


def failure_summary(result) -> str:
    """How many systems failed and why, grouped by reason (the most frequent first)."""
    from collections import Counter
    reasons = Counter(text for text in result.error_text(short=True) if text)
    failed = sum(reasons.values())
    if not failed:
        return "none failed"
    shown = [f"{reason} ({count})" for reason, count in reasons.most_common(5)]
    if len(reasons) > 5:
        shown.append(f"{len(reasons) - 5} other reasons ({sum(c for _, c in reasons.most_common()[5:])})")
    return f"{failed} failed: " + "; ".join(shown)


def write_catalogue(path: str, result, calc: Calculation) -> int:
    """The batch result as a table, one row per system in input order, in the format ``path``'s extension
    names ("-": CSV on standard output): the kept columns as read, per output ``NAME``, ``NAME_sigma`` (and ``NAME_low``,
    ``NAME_high`` for Monte Carlo) with units (``NAME[unit]`` headers in CSV), empty or masked where a
    system failed, then ``error_status``, ``error`` (what was wrong) and ``warnings`` (codes joined by
    ``;``).  Returns the number of failed systems."""
    from astropy.table import MaskedColumn, Table
    fmt = "ascii.csv" if path == "-" else table_format(path, "--out")
    table = result.to_table()
    status = np.zeros(result.count, dtype=int)
    for e in result.errors:
        if isinstance(e.get("index"), int):
            status[e["index"]] = int(e.get("status") or 422)
    table.add_column(MaskedColumn(status, mask=status == 0), name="error_status", index=table.colnames.index("error"))
    table.meta = {"calculation": calc.name}
    answer = result.response or {}
    unc = {k: v for k, v in (answer.get("uncertainty") or {}).items() if isinstance(v, (str, int, float))}
    # what a FITS header or a VOTable INFO can hold of how the numbers were made: the method, draws and seed
    # redraw them, the version names the code
    described = {"CALC": calc.name, **{k.upper(): unc[k] for k in ("method", "samples", "seed") if k in unc},
                 "VERSION": (answer.get("provenance") or {}).get("version")}
    described = {k: v for k, v in described.items() if v is not None}
    if fmt in ("ascii.csv", "ascii.ecsv"):
        # plain columns, each unit in the service's own spelling ("au", "km/s", not astropy's "AU", "km / s"): in
        # a CSV header, as the reader takes it; in the ECSV header, as the service's ECSV answer writes it
        from .columns import column_name
        from .tables import spelled_unit
        spelled = {column_name(name, member): result.unit.get(name) or ""
                   for name in result for member in ("value", "sigma", "low", "high")}
        plain = Table(masked=True)
        for name in table.colnames:
            col = table[name]
            if name in spelled and hasattr(col, "unmasked"):
                unit = spelled[name]
                values = MaskedColumn(col.unmasked.value, mask=col.mask)
                if fmt == "ascii.csv":
                    plain[column_name(name, "value", unit)] = values
                else:
                    values.unit = spelled_unit(unit) if unit else None
                    plain[name] = values
            else:
                plain[name] = col
        if fmt == "ascii.ecsv":
            # the answer's calculation, method and provenance as the service's ECSV header has them
            plain.meta = {"calculation": calc.name, "uncertainty": unc,
                          **({"provenance": answer["provenance"]} if "provenance" in answer else {})}
        table = plain
    elif fmt == "fits":
        table.meta = described
    try:
        if path == "-":
            table.write(sys.stdout, format=fmt)
        elif fmt == "votable":
            # astropy's VOTable writer drops a table's meta: the same keys as INFO elements of the table
            from astropy.io.votable import from_table
            from astropy.io.votable.tree import Info
            document = from_table(table)
            document.get_first_table().infos.extend(Info(name=k.lower(), value=str(v)) for k, v in described.items())
            document.to_xml(path)
        else:
            table.write(path, format=fmt, overwrite=True)
    except OSError as e:
        raise UsageError("--out", f"cannot write {path}: {e.strerror or e}") from None
    return len(result.failed)


# --------------------------------------------------------------------------- the subcommand
def _compute(args) -> int:
    from .config import load_settings
    try:
        return _compute_or_raise(args, load_settings().limits)
    except UsageError as e:
        print(f"calcservice compute: {e}", file=sys.stderr)
        return EXIT_USAGE
    except BrokenPipeError:
        return 0
    except Problem as e:
        print(f"calcservice compute: {_problem_line(e, args)}", file=sys.stderr)
        return EXIT_REJECTED


def _same_file(a: str, b: str) -> bool:
    """Whether two paths name one file (through links and ./ too); a file not yet there is no other."""
    try:
        return os.path.samefile(a, b)
    except OSError:
        return False


def _compute_or_raise(args, limits) -> int:
    calcs = calculations()
    if args.list:
        width = max(len(n) for n in calcs)
        sys.stdout.write("".join(f"{n.ljust(width)}  {c.title}\n" for n, c in calcs.items()))
        return 0
    if args.calculation is None:
        raise UsageError(None, f"give a CALCULATION, one of: {', '.join(calcs)}")
    if args.calculation not in calcs:
        raise UsageError(None, f"there is no calculation {args.calculation!r}; choose from: {', '.join(calcs)}")
    calc = calcs[args.calculation]
    if args.describe:
        sys.stdout.write(describe(calc))
        return 0
    fmt = "json" if args.json else (args.format or "table")
    body = build_body(calc, args)

    if args.keep and not args.input:
        # the columns to keep are a catalogue's: for one system they would be dropped without a word
        raise UsageError("--keep", "--keep names columns of a catalogue to copy into its results: give it with "
                                   "--in FILE and --out FILE")
    if args.input or args.out:
        if not (args.input and args.out):
            raise UsageError("--out" if args.input else "--in", "--in FILE and --out FILE go together")
        if args.out != "-" and _same_file(args.input, args.out):
            # the results would be written over the catalogue they were computed from
            raise UsageError("--out", f"{args.out} is the --in file: write the results to another file")
        if fmt not in ("table", "json"):
            raise UsageError("--format", "a catalogue is written in the format of --out's extension; "
                                         "--format applies to one system")
        out_format = "ascii.csv" if args.out == "-" else table_format(args.out, "--out")   # refused before any work
        series = [i.name for i in calc.inputs if i.kind == "series" and i.name in body]
        if series and out_format in ("ascii.csv", "ascii.ecsv"):
            # as the service refuses a CSV or ECSV answer over a series (406), before the work
            raise UsageError("--out", f"the outputs over {', '.join(series)} hold a series per system, which CSV "
                                      f"and ECSV cannot carry: write --out as .fits or .vot (VOTable), which hold "
                                      "an array per cell (--json prints the JSON answer too)")
        data = read_catalogue(calc, args.input, [name for names in args.keep or () for name in names])
        rows = data.count
        shared = {}
        for name in list(body):
            if name in data.columns:
                raise UsageError(name, "given both as a catalogue column and on the command line")
            if name in {i.name for i in calc.inputs}:
                shared[name] = body.pop(name)        # one value (or measured object) for every row
        result = run_catalogue(calc, data, shared, body, limits, args.progress)
        if fmt == "json":
            answers = result.responses
            print(json.dumps(answers[0] if len(answers) == 1 else answers, indent=2, allow_nan=False))
        result.kept = data.kept
        failed = write_catalogue(args.out, result, calc)
        if args.out != "-":
            print(f"{rows - failed} of {rows} systems computed; {failure_summary(result)} -> {args.out}",
                  file=sys.stderr)
        return EXIT_REJECTED if failed == rows else 0

    response = compute(calc.name, report.asking_budget(body) if fmt in ("latex", "markdown") else body, limits)
    if fmt == "json":
        print(json.dumps(response, indent=2, allow_nan=False))
    elif fmt in ("latex", "markdown"):
        sys.stdout.write(report.report(response, calc, fmt, body))
    else:
        sys.stdout.write(table(response, calc))
    return 0


def _names(text: str) -> list[str]:
    """``--keep star,hip``: the column names, in order."""
    names = [name.strip() for name in text.split(",")]
    if not all(names):
        raise argparse.ArgumentTypeError(f"{text!r} is not a comma-separated list of column names")
    return names


def _one_line_error(self, message: str):
    self.exit(EXIT_USAGE, f"{self.prog}: {message}\n")


def _known_args_with_late_values(self, args=None, namespace=None):
    """argparse stops collecting NAME=VALUE at the first option; collect the ones after it too."""
    ns, extras = argparse.ArgumentParser.parse_known_args(self, args, namespace)
    late = [e for e in extras if "=" in e and not e.startswith("-")]
    if late:
        ns.values = list(ns.values or []) + late
        extras = [e for e in extras if e not in late]
    return ns, extras


def add_compute(subparsers) -> argparse.ArgumentParser:
    """Add the ``compute`` subcommand to the ``calcservice`` command's subparsers."""
    calcs = calculations()
    epilog = "calculations:\n" + "\n".join(f"  {n:<26}{c.title}" for n, c in calcs.items()) + (
        "\n\nvalues: NAME=VALUE[+-SIGMA][UNIT], e.g. k1=61.4+-0.9km/s, period=2.5yr, e=0.3±0.01, "
        "x=1.2+0.3-0.1 (asymmetric), inclination=isotropic, t_periastron=2024-03-01T12:00, "
        "t_periastron=2024-03-01+-3 (a date ± days, or ±6h), "
        "times=2460400.5,2460500.5 (series), k1=@draws.txt (your own samples)."
        "\n\nexit status: 0 done, 1 the calculation refused the inputs, 2 the command line is wrong.")
    p = subparsers.add_parser(
        "compute", help="compute any calculation in-process (try: calcservice compute --list)",
        description="Compute one calculation of the registry in-process, with the same core as the HTTP API.",
        epilog=epilog, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.error = types.MethodType(_one_line_error, p)
    p.parse_known_args = types.MethodType(_known_args_with_late_values, p)
    p.add_argument("calculation", nargs="?", metavar="CALCULATION", help="name of the calculation (see below)")
    p.add_argument("values", nargs="*", metavar="NAME=VALUE", help="inputs, e.g. k1=61.4+-0.9km/s")
    out = p.add_mutually_exclusive_group()
    out.add_argument("--json", action="store_true", help="print the JSON response of the HTTP API")
    out.add_argument("--format", choices=("table", "json", "latex", "markdown"),
                     help="table (default), json, or the derivation report as latex or markdown")
    p.add_argument("--method", choices=("linear", "monte-carlo", "monte_carlo"),
                   help="uncertainty propagation (default linear; --samples or --seed imply monte-carlo)")
    p.add_argument("--samples", type=int, metavar="N", help="Monte Carlo draws")
    p.add_argument("--seed", type=int, metavar="S", help="Monte Carlo seed (reproducible draws)")
    p.add_argument("--correlation", action="append", metavar="A,B=RHO", help="correlation of two inputs "
                   "(repeatable)")
    p.add_argument("--unit", action="append", metavar="OUTPUT=UNIT", help="unit of an output in the answer, "
                   "e.g. semimajor_axis=solRad (repeatable)")
    p.add_argument("--time-format", choices=("jd", "mjd"), help="read time numbers as JD (default) or MJD")
    p.add_argument("--in", "--csv", dest="input", metavar="FILE", help="a catalogue (.csv, .ecsv, .fits, .vot): one "
                   "system per row, columns named after inputs (units from the file, or period[yr] in a CSV "
                   "header), NAME_sigma for sigmas, empty or masked cells missing")
    p.add_argument("--out", metavar="FILE", help="where to write the catalogue's results, in the format its "
                   "extension names (.csv, .ecsv, .fits, .vot; '-' for CSV on stdout; outputs over a series such "
                   "as times need .fits or .vot)")
    p.add_argument("--progress", action=argparse.BooleanOptionalAction, default=None,
                   help="a progress bar for the catalogue (default: on a terminal, from 20000 systems)")
    p.add_argument("--keep", "--id", dest="keep", action="append", type=_names, metavar="COLUMN[,COLUMN]",
                   help="columns of the catalogue that are no input (a name, a catalogue number), copied to the "
                        "results as they are (repeatable)")
    p.add_argument("--describe", action="store_true", help="show the calculation's inputs and outputs")
    p.add_argument("--list", action="store_true", help="list the calculations")
    p.set_defaults(func=_compute)
    return p
