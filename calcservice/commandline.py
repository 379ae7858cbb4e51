"""``calcservice compute``: any calculation of the registry, in-process, from the command line.

    calcservice compute sb1 period=41.6+-0.02 k1=23.4+-0.3km/s eccentricity=0.31
    calcservice compute sb2 ... --method monte-carlo --samples 20000 --seed 7
    calcservice compute sb2 ... --format latex > table.tex
    calcservice compute sb1 --csv catalogue.csv --out results.csv --id star

Values are ``NAME=VALUE[+-SIGMA][UNIT]`` (``±`` and ``+/-`` also work), asymmetric
``NAME=VALUE+PLUS-MINUS[UNIT]``, ``inclination=isotropic``, ISO 8601 dates for times,
comma-separated lists for series (``times=2460400.5,2460500.5``) and ``NAME=@FILE`` for
the caller's own draws (numbers separated by spaces, commas or new lines).

Everything goes through :func:`calcservice.core.compute`, the same core as the
HTTP API, so ``--json`` prints exactly the response the service gives.
"""

from __future__ import annotations

import argparse
import csv
import io
import json
import math
import re
import sys
import types
from pathlib import Path
from typing import Any

from . import report
from .core import Problem, compute, compute_batch
from .registry import Calculation, calculations

_NUM = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_UNUM = r"(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_PM = r"(?:\+-|\+/-|±)"
_SYMMETRIC = re.compile(rf"^\s*(?P<value>{_NUM})\s*(?:{_PM}\s*(?P<sigma>{_UNUM}))?\s*(?P<unit>.*?)\s*$")
_PLUS_MINUS = re.compile(rf"^\s*(?P<value>{_NUM})\s*\+\s*(?P<plus>{_UNUM})\s*-\s*(?P<minus>{_UNUM})\s*(?P<unit>.*?)\s*$")
_MINUS_PLUS = re.compile(rf"^\s*(?P<value>{_NUM})\s*-\s*(?P<minus>{_UNUM})\s*\+\s*(?P<plus>{_UNUM})\s*(?P<unit>.*?)\s*$")
_UNIT = re.compile(r"^[A-Za-z(][A-Za-z0-9_ ./*^()+\-]*$")
_HEADER_UNIT = re.compile(r"^\s*(?P<name>[^\[\]]+?)\s*(?:\[(?P<unit>[^\[\]]*)\])?\s*$")
SIGMA_SUFFIXES = ("_sigma_minus", "_sigma_plus", "_sigma")
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
    if re.match(r"^[+-]?[\d.]", text) and not re.match(r"^\d{4}-\d\d", text):
        raise UsageError(field, f"{text!r} is not a measured value ({EXAMPLE_FORMS})")
    return text


def _number(text: str, field: str) -> float:
    x = float(text)
    if not math.isfinite(x):
        raise UsageError(field, f"{text!r} is not a finite number")
    return x


def _samples(path: str, field: str) -> dict:
    try:
        raw = Path(path).read_text()
    except OSError as e:
        raise UsageError(field, f"cannot read samples from {path}: {e.strerror}") from None
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
        raise UsageError(name, f"{calc.name} has no input {name!r}; its inputs are {_input_names(calc)}") from None
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
    return name, parse_measured(raw, name)


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
        body["units"] = dict(_pair(t, "--unit") for t in args.unit)
    if args.time_format:
        body["time_format"] = args.time_format
    return body


# --------------------------------------------------------------------------- output
def _problem_line(p) -> str:
    errors = getattr(p, "errors", None) or {}
    if errors:
        return "; ".join(f"{k}: {' '.join(v)}" for k, v in errors.items())
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
            rows.append([key, style.number(report.printed_entry(entry)), entry.get("unit", ""), desc])
    if rows:
        lines += _columns(["result", "value", "unit", "description"], rows)
    series = results.get("series")
    if isinstance(series, dict):
        names, units, srows = report.series_rows(series)
        header = [f"{n} [{u}]" if u else n for n, u in zip(names, units)]
        body = [[style.number(report.printed_entry(e, digits=12) if n in ("times", "time") else
                              report.printed_entry(e)) for n, e in zip(names, row)] for row in srows]
        lines += [""] + _columns(header, body, right=True)
    for label, unit, entries in report.event_lists({k: v for k, v in results.items()
                                                    if k != "series" and not report.is_measured(v)}):
        keys = [k for k in entries[0] if k not in ("value", "sigma", "low", "high")]
        body = [[style.number(report.printed(e.get("value"), sigma=e.get("sigma"), digits=12))]
                + [report._short(e.get(k)) for k in keys] for e in entries]
        lines += ["", label.replace("_", " ")] + _columns([f"date [{unit}]" if unit else "date"] + keys, body)
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
            f"default {i.default}" if i.default is not None else "optional")
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


# --------------------------------------------------------------------------- catalogue (CSV) through the batch path
def read_catalogue(calc: Calculation, path: str, id_column: str | None) -> tuple[dict, list[str] | None, int]:
    """A CSV catalogue as the ``columns`` member of a batch request, the identifiers and the row count.

    Columns are named after inputs (optionally with a unit in brackets, ``period[yr]``);
    ``NAME_sigma`` (or ``NAME_sigma_minus`` and ``NAME_sigma_plus``) hold uncertainties in
    the unit of NAME.  Any other column is refused unless it is the ``--id`` column.
    """
    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except OSError as e:
        raise UsageError("--csv", f"cannot read {path}: {e.strerror}") from None
    except UnicodeDecodeError:
        raise UsageError("--csv", f"{path} is not UTF-8 text") from None
    try:
        dialect = csv.Sniffer().sniff(text[:4096], delimiters=",;\t")
    except csv.Error:
        dialect = csv.excel
    reader = csv.reader(io.StringIO(text), dialect)
    try:
        header = next(reader)
    except StopIteration:
        raise UsageError("--csv", f"{path} is empty") from None
    rows = [r for r in reader if any(c.strip() for c in r)]
    if not rows:
        raise UsageError("--csv", f"{path} has a header but no rows")
    inputs = {i.name: i for i in calc.inputs}
    plan: list[tuple[int, str, str]] = []          # (column index, input name, member)
    units: dict[str, str] = {}
    ids_at = None
    for k, cell in enumerate(header):
        m = _HEADER_UNIT.match(cell)
        name = m.group("name") if m else cell.strip()
        if id_column is not None and cell.strip() == id_column:
            ids_at = k
            continue
        member = "value"
        base = name
        if name not in inputs:
            for suffix in SIGMA_SUFFIXES:
                if name.endswith(suffix) and name[: -len(suffix)] in inputs:
                    base, member = name[: -len(suffix)], suffix[1:]
                    break
        if base not in inputs:
            raise UsageError(cell.strip() or f"column {k + 1}",
                             f"unknown column in {path}: {calc.name} takes {_input_names(calc)} "
                             "(NAME_sigma for uncertainties; --id COLUMN for an identifier)")
        spec = inputs[base]
        if spec.kind == "series":
            raise UsageError(base, f"{base} is a list for each system and cannot be a CSV column; "
                                   f"give it as {base}=v1,v2,... on the command line")
        if member != "value" and spec.kind != "quantity":
            raise UsageError(name, f"{base} takes no uncertainty")
        if any(p[1] == base and p[2] == member for p in plan):
            raise UsageError(name, f"column {name!r} appears twice")
        if m and m.group("unit") is not None and member == "value":
            units[base] = m.group("unit").strip()
        plan.append((k, base, member))
    if id_column is not None and ids_at is None:
        raise UsageError("--id", f"{path} has no column {id_column!r}")
    columns: dict[str, dict] = {}
    for k, base, member in plan:
        spec = inputs[base]
        values = []
        for r_index, row in enumerate(rows, 2):
            cell = row[k].strip() if k < len(row) else ""
            values.append(_cell(spec, cell, base if member == "value" else f"{base}_{member}", r_index))
        columns.setdefault(base, {})[member] = values
    for base, unit in units.items():
        if unit:
            columns[base]["unit"] = unit
    for base, col in columns.items():
        if "value" not in col:
            raise UsageError(base, f"{path} has uncertainties for {base} but no column {base}")
    ids = [row[ids_at].strip() if ids_at < len(row) else "" for row in rows] if ids_at is not None else None
    return columns, ids, len(rows)


def _cell(spec, cell: str, column: str, line: int):
    if cell == "":
        return None
    if spec.kind == "choice":
        return cell
    try:
        x = float(cell)
    except ValueError:
        if spec.time:
            return cell                  # an ISO 8601 date, judged by the service
        raise UsageError(column, f"line {line}: {cell!r} is not a number") from None
    if not math.isfinite(x):
        raise UsageError(column, f"line {line}: {cell!r} is not a finite number")
    if spec.kind == "integer":
        if not x.is_integer():
            raise UsageError(column, f"line {line}: {cell!r} is not a whole number")
        return int(x)
    return x


def run_batch(name: str, body: dict, limits) -> dict:
    """A batch request through the core (:func:`calcservice.core.compute_batch`), the same
    code the HTTP path ``POST /v1/batch/<calculation>`` runs."""
    return compute_batch(name, body, limits)


def _cell_text(v: Any) -> str:
    if v is None:
        return ""
    if isinstance(v, bool):
        return str(v).lower()
    if isinstance(v, (int, float)):
        return repr(float(v))
    if isinstance(v, str):
        return v
    return json.dumps(v, allow_nan=False, separators=(",", ":"))


def write_catalogue(out, result: dict, calc: Calculation, ids: list[str] | None, id_column: str | None,
                    rows: int) -> int:
    """The batch result as CSV, one row per system in input order: per output ``NAME[unit]``,
    ``NAME_sigma`` (and ``NAME_low``, ``NAME_high`` for Monte Carlo) in full precision, extra members
    (e.g. events) as JSON, then ``warnings`` and ``error`` (what was wrong with a refused row).
    Returns the number of refused rows."""
    cols = result.get("columns", {})
    outputs = {o.name for o in calc.outputs}
    header: list[str] = [id_column] if ids is not None else []
    getters: list[list] = []
    for name in [o.name for o in calc.outputs if o.name in cols] + [k for k in cols if k not in outputs]:
        col = cols[name]
        if isinstance(col, dict) and isinstance(col.get("value"), list):
            unit = col.get("unit", "")
            for member in ("value", "sigma", "low", "high"):
                if isinstance(col.get(member), list):
                    label = name if member == "value" else f"{name}_{member}"
                    header.append(f"{label}[{unit}]" if unit else label)
                    getters.append(col[member])
        elif isinstance(col, list) and len(col) == rows:
            header.append(name)
            getters.append(col)
    errors = {}
    for e in result.get("errors", []) or []:
        idx = e.get("index")
        if isinstance(idx, int):
            errs = e.get("errors") or {}
            errors[idx] = "; ".join(f"{k}: {' '.join(v)}" for k, v in errs.items()) if errs else e.get("detail", "")
    row_warnings: dict[int, list[str]] = {}
    for w in result.get("warnings", []) or []:
        for i in w.get("rows", []):
            row_warnings.setdefault(i, []).append(f"{w.get('code')}: {w.get('message')}")
    header += ["warnings", "error"]
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(header)
    for i in range(rows):
        line = [ids[i]] if ids is not None else []
        line += [_cell_text(g[i] if i < len(g) else None) for g in getters]
        line += ["; ".join(row_warnings.get(i, [])), errors.get(i, "")]
        writer.writerow(line)
    return len(errors)


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
        print(f"calcservice compute: {_problem_line(e)}", file=sys.stderr)
        return EXIT_REJECTED


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

    if args.csv or args.out:
        if not (args.csv and args.out):
            raise UsageError("--out" if args.csv else "--csv", "--csv IN and --out OUT go together")
        if fmt not in ("table", "json"):
            raise UsageError("--format", "a catalogue is written as CSV; --format applies to one system")
        columns, ids, rows = read_catalogue(calc, args.csv, args.id)
        for name in list(body):
            if name in columns:
                raise UsageError(name, "given both as a CSV column and on the command line")
            if name in {i.name for i in calc.inputs}:
                columns[name] = body.pop(name)        # one value (or measured object) for every row
        batch_body = {"columns": columns, **body}
        result = run_batch(calc.name, batch_body, limits)
        if fmt == "json":
            print(json.dumps(result, indent=2, allow_nan=False))
        out = sys.stdout if args.out == "-" else None
        try:
            if out is None:
                with open(args.out, "w", newline="", encoding="utf-8") as fh:
                    failed = write_catalogue(fh, result, calc, ids, args.id, rows)
            else:
                failed = write_catalogue(out, result, calc, ids, args.id, rows)
        except OSError as e:
            raise UsageError("--out", f"cannot write {args.out}: {e.strerror}") from None
        if args.out != "-":
            print(f"{rows - failed} of {rows} systems computed; {failed} refused (see the error column) -> {args.out}",
                  file=sys.stderr)
        return EXIT_REJECTED if failed == rows else 0

    response = compute(calc.name, body, limits)
    if fmt == "json":
        print(json.dumps(response, indent=2, allow_nan=False))
    elif fmt in ("latex", "markdown"):
        sys.stdout.write(report.report(response, calc, fmt, body))
    else:
        sys.stdout.write(table(response, calc))
    return 0


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
    p.add_argument("--csv", metavar="IN", help="a catalogue: one system per row, columns named after inputs "
                   "(period[yr] gives a unit), NAME_sigma for sigmas")
    p.add_argument("--out", metavar="OUT", help="where to write the catalogue's results as CSV ('-' for stdout)")
    p.add_argument("--id", metavar="COLUMN", help="an identifier column of the catalogue, copied to the results")
    p.add_argument("--describe", action="store_true", help="show the calculation's inputs and outputs")
    p.add_argument("--list", action="store_true", help="list the calculations")
    p.set_defaults(func=_compute)
    return p
