"""Catalogue tables on the wire: Apache Arrow IPC streams, CSV and ECSV.

Pure conversions, no HTTP: a request table's bytes to the JSON columns body of
``POST /v1/batch/<calculation>`` (:func:`read_request`), a columns answer to table bytes
(:func:`encode_answer`), and the two other directions for callers (:func:`encode_request`,
:func:`decode_answer`).  Arrow goes through ``pyarrow``, CSV and ECSV through astropy's table I/O.

A request table has a column ``NAME`` per input (its unit in the Arrow field metadata ``unit``,
in the ECSV header, or as ``NAME[unit]`` in a plain CSV header; none means the input's default
unit), sigma columns ``NAME_sigma`` or ``NAME_sigma_minus`` and ``NAME_sigma_plus`` in NAME's unit
(a sigma column with a unit of its own is converted), choices as strings.  A missing entry (Arrow
null, empty CSV cell, masked ECSV entry, NaN) means "not given for this system", as ``null`` in a
JSON columns body.  Float columns travel as numpy arrays (NaN: not given), other columns as lists.

An answer table has, for each output, ``NAME`` (the value; Monte Carlo: the median), ``NAME_sigma``
and, for Monte Carlo, ``NAME_low`` and ``NAME_high``, then ``error_status``, ``error`` and
``warnings`` (a system's warning codes joined by ``;``); extra members per system (the events of an
ephemeris) follow as JSON text, and per-system parts of the uncertainty as ``uncertainty_<key>``.
The calculation, the batch's uncertainty and the provenance are table metadata (JSON text in the
Arrow schema metadata, a mapping in the ECSV header; plain CSV has no place for them).  Series
outputs are Arrow list columns; CSV and ECSV cannot hold them.  Columns of the caller's own (a
name, a catalogue number) named in ``keep`` come first, as they were sent (:func:`kept_columns`).
"""

from __future__ import annotations

import contextlib
import io
import json
import re
import warnings
from functools import lru_cache
from typing import Any, Container, Mapping, Sequence

import numpy as np

from .columns import (ERROR_COLUMNS, MEMBERS, UNCERTAINTY_PREFIX, as_doubles, column_role, error_text, kept_name_errors, lenient,
                      lenient_message, may_underflow, meant, not_plain_numbers, read_number, split_unit)
from .registry import Calculation
from .units import UnitError, factor

JSON = "application/json"
ARROW = "application/vnd.apache.arrow.stream"
CSV = "text/csv"
ECSV = "text/x-ecsv"
TABLE_TYPES = (ARROW, CSV, ECSV)
MEDIA_TYPES = (JSON, *TABLE_TYPES)

UNIT_KEYS = frozenset({"value", "sigma", "sigma_minus", "sigma_plus", "low", "high"})
_ECSV_SIGNATURE = "# %ECSV"
KIND_WORDS = {"choice": "a choice", "integer": "a whole number", "series": "a series"}


class TableError(ValueError):
    """A table that cannot be taken or given: an HTTP status, a detail and errors by column."""

    def __init__(self, status: int, detail: str, errors: Mapping[str, list[str]] | None = None):
        super().__init__(detail)
        self.status = status
        self.detail = detail
        # a body that is no table at all is named as the body, as a malformed JSON body is (RFC 9457 errors member)
        self.errors = {k: list(v) for k, v in (errors or {"_body": [detail]}).items()}


def is_ecsv(data: bytes | str) -> bool:
    """Whether CSV text is ECSV (it starts with astropy's ``# %ECSV`` signature line)."""
    head = data[:64].lstrip()
    return (head.decode("utf-8", "replace") if isinstance(head, bytes) else head).startswith(_ECSV_SIGNATURE)


# ----------------------------------------------------------------------------- request: table -> columns body

def read_request(data: bytes, media_type: str, calc: Calculation, options: Mapping | None = None) -> dict:
    """A request table (Arrow IPC stream, CSV or ECSV bytes) to the JSON columns body of ``calc``:
    ``{"columns": {name: {"value": ..., "sigma": ..., "unit": ...}}, **options}``.

    ``options`` are the batch's options (``uncertainty``, ``units``, ``correlations``...); a member
    named after an input (a series such as an ephemeris' ``times``, or one value for every system)
    joins the columns.  Raises :class:`TableError` (400 unreadable, 422 a column that does not fit)."""
    return request_body(calc, read_table(data, media_type, calc), options)


def read_table(data: bytes, media_type: str, calc: Calculation, keep: Container[str] = (),
               refused: dict[int, str] | None = None) -> list[tuple[str, Any, str | None]]:
    """A request table's columns as ``(name, values, unit)`` (see :func:`request_body`); those named
    in ``keep`` as read (numbers stay numbers, text text), for :func:`kept_columns`.

    ``refused``: where a text table's row has more or fewer cells than its header (:func:`ragged_rows`),
    that row is read as missing cells and its message put here by system index, for the batch to answer
    that system with it in place; without the mapping such a table is a 422 naming the rows."""
    if media_type == ARROW:
        return _read_arrow(data, calc, keep)
    if media_type in (CSV, ECSV):
        return _read_text(data, calc, keep, refused)
    raise TableError(415, f"a request table is one of {', '.join(TABLE_TYPES)}, not {media_type}")


def kept_columns(calc: Calculation, read: list[tuple[str, Any, str | None]], keep: Sequence[str]) \
        -> tuple[list[tuple[str, Any, str | None]], list[tuple[str, Any, str | None]]]:
    """The columns of :func:`read_table` named in ``keep`` (the caller's own: a name, a catalogue
    number), which :func:`encode_answer` carries into the answer, and the others; raises
    :class:`TableError` (422) when ``keep`` names a column the table lacks, an input's, or one named
    like a column of the answer."""
    keep = list(dict.fromkeys(keep))
    refused = kept_name_errors(calc.name, [spec.name for spec in calc.inputs], [o.name for o in calc.outputs],
                               keep)
    names = {name for name, _, _ in read}
    absent = [name for name in keep if name not in names]
    if absent:
        refused.append(f"the table has no column {', '.join(map(repr, absent))}")
    if refused:
        raise TableError(422, "keep: " + " ".join(refused), {"keep": refused})
    return [c for c in read if c[0] in keep], [c for c in read if c[0] not in keep]


def request_body(calc: Calculation, read: list[tuple[str, Any, str | None]], options: Mapping | None = None) -> dict:
    """Named columns ``(name, values, unit)`` (values: float array with NaN where not given, or a
    list with None) to the JSON columns body; sigma columns joined to their input's column."""
    inputs = {spec.name: spec for spec in calc.inputs}
    given: dict[str, tuple[Any, str | None]] = {}
    sigmas: dict[str, dict[str, tuple[Any, str | None, str]]] = {}
    errors: dict[str, list[str]] = {}
    for name, values, unit in read:
        if name in given or any(name == col for d in sigmas.values() for *_, col in d.values()):
            errors.setdefault(name, []).append("the column appears twice")
        elif name in inputs:
            given[name] = (values, unit)
        else:
            role = column_role(name, inputs)
            if role is not None:
                base, key = role
                sigmas.setdefault(base, {})[key] = (values, unit, name)
            else:
                shown = _shown(name)
                hint = meant(shown, [i.name for i in calc.inputs], calc.symbols)
                errors[shown] = [f"{calc.name} has no input {shown!r}{hint} (columns: inputs, NAME_sigma, "
                                 f"NAME_sigma_minus, NAME_sigma_plus); a column of your own: ?keep={shown} "
                                 "carries it into the answer"]
    for base, members in sigmas.items():
        spec = inputs[base]
        for key, (_, _, col) in members.items():
            if base not in given:
                errors[col] = [f"a sigma column needs the column {base}"]
            elif spec.kind != "quantity":
                errors[col] = [f"{base} is {KIND_WORDS[spec.kind]}: it has no uncertainty"]
        if "sigma" in members and len(members) > 1:
            errors[members["sigma"][2]] = [f"give either {base}_sigma or {base}_sigma_minus and {base}_sigma_plus"]
        elif ("sigma_minus" in members) != ("sigma_plus" in members):
            errors[next(col for *_, col in members.values())] = [f"{base}_sigma_minus and {base}_sigma_plus go together"]
    for name, (values, unit) in given.items():
        if inputs[name].kind == "series":
            errors[name] = [f"{name} is a series, the same for every system: give it in the options "
                            f'(?options={{"{name}": [...]}})']
        elif inputs[name].kind != "quantity" and unit:
            errors[name] = [f"{name} is {KIND_WORDS[inputs[name].kind]}: it has no unit"]
    columns: dict[str, Any] = {}
    for name, (values, unit) in given.items():
        if name in errors:
            continue
        spec = inputs[name]
        if spec.kind != "quantity":
            columns[name] = values.tolist() if isinstance(values, np.ndarray) else values
            continue
        try:
            entry: dict[str, Any] = {"value": _quantity_values(values, name)}
        except TableError as e:
            errors.update(e.errors)
            continue
        for key, (sigma, sigma_unit, col) in sigmas.get(name, {}).items():
            try:
                sigma = _quantity_values(sigma, col)
            except TableError as e:
                errors.update(e.errors)
                continue
            if sigma_unit and sigma_unit != (spec.unit if unit is None else unit):
                try:
                    k = factor(sigma_unit, spec.unit if unit is None else unit)
                except UnitError as e:
                    errors[col] = [str(e)]
                    continue
                if isinstance(sigma, np.ndarray):
                    sigma = sigma * k
                else:
                    errors[col] = ["a sigma column with a unit of its own must hold numbers only"]
                    continue
            entry[key] = sigma
        if unit is not None:
            entry["unit"] = unit
        columns[name] = entry
    body: dict[str, Any] = {}
    for key, value in (options or {}).items():
        if key in ("columns", "systems"):
            errors[f"options.{key}"] = ["the table holds the systems: options carry the batch's options only"]
        elif key in inputs:
            if key in given:
                errors[f"options.{key}"] = [f"{key} is a column of the table too"]
            columns[key] = value
        else:
            body[key] = value
    if errors:
        listed = sorted(errors.items())
        more = f"; and {len(listed) - MAX_LISTED} more columns" if len(listed) > MAX_LISTED else ""
        raise TableError(422, "the table's columns do not fit " + calc.name + ": " +
                         "; ".join(f"{k}: {' '.join(v)}" for k, v in listed[:MAX_LISTED]) + more,
                         dict(listed[:MAX_LISTED]))
    if not columns:
        raise TableError(422, "the table has no columns", {"_table": ["give one column per input"]})
    return {"columns": columns, **body}


MAX_LISTED = 20         # a table of thousands of unknown columns is answered with the first few


def _shown(name: str) -> str:
    """A caller's column name as an error echoes it: at most 80 characters (as for JSON field names)."""
    return name if len(name) <= 80 else name[:79] + "…"


def _quantity_values(values, name: str):
    """A quantity's column as floats (NaN: not given) when it holds numbers only; else a list whose
    numeric strings are numbers (a text column with one bad cell), for the batch's own parser to word.
    A string that Python reads as a number but no table writes as one (``4_1.6``, ``0x10``, non-ASCII
    digits) is a :class:`TableError` naming the column and its rows: a typo, never silently a number."""
    if isinstance(values, np.ndarray):
        return values
    texts = [k for k, v in enumerate(values) if type(v) is str]
    refused = [texts[j] for j in lenient([values[k] for k in texts])]
    if refused:
        raise lenient_cells(name, refused, [values[k] for k in refused[:3]])
    if all(v is None or type(v) is str for v in values):      # not booleans: true is no number here
        try:
            return np.array([np.nan if v is None else v for v in values], dtype=float)
        except ValueError:
            pass
    out = []
    for v in values:
        if isinstance(v, str):
            try:
                v = float(v)
            except ValueError:
                pass
        out.append(v)
    return out


# a literal first, so that the search runs at C speed over the text: "_" then a digit (is a digit before
# it? 4_1.6, not HD_1234), "0x" (at a cell's start? 0x10, not 1.0x)
_UNDERSCORE = re.compile(r"_[0-9]")
_HEX = re.compile(r"0[xX]")
_CELL_START = ',;\t "+-\n'


def lenient_cells(name: str, rows: Sequence[int], texts: Sequence[str]) -> TableError:
    """The 422 for cells read as numbers only by lenient rules, naming the column and its rows."""
    message = lenient_message(rows, texts)
    return TableError(422, f"column {name}: {message}", {name: [message]})


def _has_lenient_text(lines: list[str], ecsv: bool) -> bool:
    """Whether a table's data lines (after its header: ``k1_sigma`` is a name) may hold a cell a lenient
    number reader would take (``4_1.6``, ``0x10``, a non-ASCII digit or space), looked for over the whole
    text at once before any cell is: names such as HD_1234 or α Cen do not count."""
    names = next((k for k, line in enumerate(lines) if line.strip() and not line.lstrip().startswith("#")),
                 len(lines))
    data = "\n".join(lines[names + 1:])
    if not data.isascii():
        # the characters outside ASCII, once each: their UTF-8 bytes in order decode to them
        raw = np.frombuffer(data.encode("utf-8"), dtype=np.uint8)
        if any(c.isdigit() or c.isspace() for c in set(raw[raw >= 0x80].tobytes().decode("utf-8", "ignore"))):
            return True
    if "_" in data and any(data[m.start() - 1].isdigit() for m in _UNDERSCORE.finditer(data) if m.start()):
        return True
    return ("x" in data or "X" in data) and \
        any(m.start() == 0 or data[m.start() - 1] in _CELL_START for m in _HEX.finditer(data))


def _read_arrow(data: bytes, calc: Calculation, keep: Container[str] = ()) -> list[tuple[str, Any, str | None]]:
    import pyarrow as pa

    table = _arrow_table(data)
    options_in_metadata(calc, [k.decode("utf-8", "replace") for k in table.schema.metadata or {}], "schema metadata")
    kinds = {spec.name: spec.kind for spec in calc.inputs}
    out = []
    for field, column in zip(table.schema, table.columns):
        meta = field.metadata or {}
        # an empty unit says dimensionless, as a JSON unit of "" does (refused for a period), not "no unit given"
        unit = None if b"unit" not in meta else meta[b"unit"].decode("utf-8", "replace").strip()
        misspelt = [key.decode("utf-8", "replace") for key in meta
                    if key != b"unit" and key.strip().lower() in (b"unit", b"units")]
        if misspelt:
            # read under "unit" only, so a unit under another spelling would leave the default unit silently
            message = f"its unit is under the metadata key {misspelt[0]!r}: the key is 'unit'"
            raise TableError(422, f"column {field.name}: {message}", {field.name: [message]})
        kind = kinds.get((column_role(field.name, kinds) or (field.name,))[0], "quantity")
        t = field.type
        if pa.types.is_dictionary(t):
            column, t = column.cast(t.value_type), t.value_type
        if getattr(pa.types, "is_string_view", lambda _: False)(t):
            column, t = column.cast(pa.string()), pa.string()
        if pa.types.is_null(t):             # every entry missing (pyarrow's type for a column of nulls)
            values = np.full(len(column), np.nan) if kind == "quantity" and field.name not in keep \
                else [None] * len(column)
        elif (pa.types.is_floating(t) or pa.types.is_integer(t) or pa.types.is_decimal(t)) and kind == "quantity" \
                and field.name not in keep:
            # nulls become NaN; an integer beyond 2**53 is the nearest double, as a JSON number is; a float32's
            # the decimal it prints (as_doubles)
            values = as_doubles(column.to_numpy(zero_copy_only=False)) if pa.types.is_floating(t) and \
                t.bit_width < 64 else column.cast(pa.float64(), safe=False).to_numpy()
        elif pa.types.is_floating(t) or pa.types.is_integer(t) or pa.types.is_string(t) \
                or pa.types.is_large_string(t) or pa.types.is_boolean(t):
            values = column.to_pylist()
        elif field.name in keep and not pa.types.is_nested(t):
            # the caller's own column (an observation date, a decimal, bytes): as Arrow writes it as text
            try:
                values = column.cast(pa.string()).to_pylist()
            except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
                values = [None if x is None else str(x) for x in column.to_pylist()]
        else:
            raise TableError(422, f"column {field.name} is of type {t}; give numbers or strings, one per system",
                             {field.name: [f"a column of numbers or strings, not {t}"]})
        out.append((field.name, values, unit))
    return out


def _arrow_table(data: bytes):
    """An Arrow IPC stream, or an IPC file (what Feather 2 writes: magic, the stream, its footer, the
    footer's length, magic), as a pyarrow Table; bytes after its end (a second stream or file
    concatenated to it, which pyarrow leaves unread) are refused."""
    import pyarrow as pa

    source = pa.BufferReader(pa.py_buffer(data))
    is_file = data[:6] == b"ARROW1"
    try:
        if is_file:
            source.seek(8)
        table = pa.ipc.open_stream(source).read_all()
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError, OSError) as e:
        raise TableError(400, f"the body is not an Apache Arrow IPC stream: {str(e)[:200]}") from None
    end = source.tell() + (10 + int.from_bytes(data[-10:-6], "little") if is_file else 0)
    if is_file and (data[-6:] != b"ARROW1" or end > len(data)):
        raise TableError(400, "the body is not an Apache Arrow IPC file: it does not end with its footer, the "
                              "footer's length and ARROW1")
    if end != len(data):
        kind = "file" if is_file else "stream"
        message = (f"{len(data) - end} bytes follow the end of the Arrow IPC {kind} (its first {end} bytes) and would "
                   "be left unread (a second stream concatenated to a first is): send one stream")
        raise TableError(400, f"the body has bytes after its Arrow IPC {kind}: {message}", {"_body": [message]})
    return table


def options_in_metadata(calc: Calculation, keys, where: str) -> None:
    """A table's metadata that names a batch option (an ECSV header's meta, Arrow schema metadata), a member of
    the uncertainty option (seed, samples, method) or a unit is refused: a request table's options ride in the
    query parameter and its units with its columns, and the metadata's would go unread (an answer table's
    metadata says what its numbers were computed with, so it reads as though they did)."""
    from .core.batch import OPTION_KEYS
    from .core.schemas import NESTED_NAMES
    series = [spec.name for spec in calc.inputs if spec.kind == "series"]
    members = NESTED_NAMES["uncertainty"]
    found = [key for key in keys if key in OPTION_KEYS or key in series or key in members or is_unit_key(key)]
    if found:
        def message(name: str) -> str:
            if is_unit_key(name) and name not in OPTION_KEYS:       # "units" is the option of the outputs' units
                return (f"the table's {where} gives {name!r}, which is not read there: a column's unit goes with the "
                        "column (its ECSV header entry's unit, its Arrow field metadata's unit, NAME[unit] in CSV)")
            option = f'{{"uncertainty": {{"{name}": ...}}}}' if name in members else f'{{"{name}": ...}}'
            return (f"the table's {where} gives {name!r}, which is not read there: a table's options go in the query "
                    f"parameter options (?options={option}, URL-encoded JSON)")
        raise TableError(422, message(found[0]), {name: [message(name)] for name in found})


def is_unit_key(key) -> bool:
    """A metadata key that means a unit ("units", "Unit", "unit_"), as a caller may write the one key read."""
    return isinstance(key, str) and re.sub(r"[\s_-]", "", key).lower() in ("unit", "units")


def ecsv_column_entries(lines: Sequence[str]) -> list[dict]:
    """The column entries of an ECSV header (its YAML datatype list); none where the header does not parse
    (the reader then says why)."""
    from astropy.table.meta import get_header_from_yaml
    head = []
    for line in lines:
        if not line.startswith("#"):
            break
        head.append(line[2:] if line.startswith("# ") else line[1:])
    if len(head) < 2 or not head[0].lstrip().startswith("%ECSV") or head[1].strip() != "---":
        return []
    try:
        entries = get_header_from_yaml(head[2:]).get("datatype")
    except Exception:       # noqa: BLE001 - the YAML's own errors: astropy's reader refuses the header
        return []
    return [entry for entry in entries if isinstance(entry, dict)] if isinstance(entries, list) else []


def check_ecsv_units(lines: Sequence[str]) -> None:
    """An ECSV column whose unit is under a key the reader does not read (``units``, ``Unit``, or its meta's
    ``unit``), which astropy drops, leaving the column in the input's default unit: refused naming it."""
    for entry in ecsv_column_entries(lines):
        meta = entry.get("meta") if isinstance(entry.get("meta"), dict) else {}
        keys = [repr(k) for k in entry if k != "unit" and is_unit_key(k)] + \
               [f"meta: {k!r}" for k in meta if is_unit_key(k)]
        if keys:
            name = str(entry.get("name", ""))[:80]
            message = f"its unit is under the key {keys[0]}, which the ECSV reader does not read: the key is 'unit'"
            raise TableError(422, f"column {name}: {message}", {name: [message]})


def header_line(lines: Sequence[str]) -> str | None:
    """A CSV table's header: its first line that is neither blank nor a ``#`` comment."""
    return next((line for line in lines if line.strip() and not line.lstrip().startswith("#")), None)


def table_lines(lines: Sequence[str]) -> list[str]:
    """A CSV table's lines from its header on: ``#`` comments (and blank lines) before the header are
    a description of the table; after it a line is a row, whatever its first cell (an identifier #12)."""
    start = next((k for k, line in enumerate(lines) if line.strip() and not line.lstrip().startswith("#")),
                 len(lines))
    return list(lines[start:])


def delimiter(header: str | None) -> str:
    """A CSV table's delimiter: comma, semicolon or tab, whichever its header uses most (a comma on a
    tie): a spreadsheet set to a decimal comma writes semicolons."""
    return max((",", ";", "\t"), key=(header or "").count)


def ecsv_delimiter(lines: Sequence[str]) -> str:
    """An ECSV table's delimiter: a space, or the comma its header declares."""
    comma = any(re.match(r"#\s*delimiter:\s*['\"]?,", line) for line in lines if line.startswith("#"))
    return "," if comma else " "


def check_header(lines: Sequence[str], delimiter: str = ",", ecsv: bool = False) -> None:
    """A CSV header's names as written (see :func:`header_line`): astropy would call a second
    ``period`` ``period_1`` and an empty name ``col3``, names the caller never wrote.  Raises
    :class:`TableError` (422) naming the column; the HTTP edge and the command line both check so.
    ``ecsv``: the line of names under an ECSV header, whose cells may be apart by more than one space; the
    header's column entries are checked for a unit under another key (:func:`check_ecsv_units`) too."""
    import csv
    if ecsv:
        check_ecsv_units(lines)
    header = header_line(lines)
    if header is None:
        return
    names = [name.strip() for name in next(csv.reader([header.strip() if ecsv else header], delimiter=delimiter,
                                                      skipinitialspace=ecsv))]
    errors: dict[str, list[str]] = {}
    for k, name in enumerate(names):
        if not name:
            errors.setdefault("_body", []).append(f"column {k + 1} of the header has no name")
        elif name in names[:k]:
            errors.setdefault(name[:80], []).append("the column appears twice")
    if errors:
        parts = (["a column named twice"] if set(errors) - {"_body"} else []) + \
                (["a column without a name"] if "_body" in errors else [])
        raise TableError(422, "the table's header has " + " and ".join(parts), errors)


@contextlib.contextmanager
def quiet_range_warnings():
    """astropy's fast reader warns (to the log) of a cell beyond a double or below its normal range
    ("OverflowError converting to FloatType"): the number is then that system's error, said in words
    by the batch, so the warning is left out (the command line prints one line); so is its warning of a
    file's unit it cannot parse ('yrs' in a FITS header), which is then refused in words naming the column."""
    from astropy.units import UnitsWarning
    from astropy.utils.exceptions import AstropyWarning
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="OverflowError converting to (Float|Int)Type",
                                category=AstropyWarning)
        warnings.filterwarnings("ignore", message=".* did not parse as .*unit", category=UnitsWarning)
        yield


def ragged_rows(lines: Sequence[str], ecsv: bool, delimiter: str = ",") -> tuple[list[str], dict[int, str]]:
    """A text table's rows whose number of cells is not its header's, as a message by system index,
    and the table's lines with each such row's cells emptied (a row of missing cells in its place).

    astropy pads a short CSV row with missing cells and refuses a whole table for one long row; a
    ragged row is a broken line of a file (a cell lost, a delimiter not quoted), whose cells cannot
    be put under their columns, so that row alone is refused, in place.  Cells are counted as
    Python's csv module splits them (quotes respected; ECSV: spaces, or the commas its header
    declares); blank lines are no rows, as for astropy.  The lines are split again only when some
    line's count of delimiters differs from the header's or a quote is there."""
    lines = list(lines)
    if ecsv:
        delimiter = ecsv_delimiter(lines)
        start = next((k for k, line in enumerate(lines) if line.strip() and not line.startswith("#")), None)
    else:
        start = next((k for k, line in enumerate(lines) if line.strip() and not line.lstrip().startswith("#")), None)
    if start is None:
        return lines, {}
    # ECSV's reader takes a # line anywhere for a comment; a CSV's row may begin with # (an identifier)
    body = [("" if line.startswith("#") else line.strip()) for line in lines[start:]] if ecsv else lines[start:]
    width = body[0].count(delimiter)
    if all(line.count(delimiter) == width or not line.strip() for line in body) and \
            not any('"' in line for line in body):
        return lines, {}
    import csv
    reader = csv.reader(body, delimiter=delimiter, skipinitialspace=ecsv)
    header = next(reader)
    h = len(header)
    refused: dict[int, str] = {}
    system, done = 0, reader.line_num
    empty = delimiter.join(['""'] * h)
    for record in reader:
        first, done = done, reader.line_num
        if done == len(body) and done - first > 1 and sum(line.count('"') for line in body[first:done]) % 2:
            # a quote never closed: the reader took every line after it for one cell, and those systems were lost
            where = f"line {start + first + 1}"
            raise TableError(400, f"the {'ECSV' if ecsv else 'CSV'} text has a quote on {where} that is never "
                                  f"closed: the {done - first} lines from there would be read as one cell",
                             {"_body": [f"a quote opened on {where} is not closed (a quote within a cell is written "
                                        "twice, inside a quoted cell)"]})
        if not record or (len(record) == 1 and not record[0].strip()):
            continue                                    # a blank line: no row
        if len(record) != h:
            refused[system] = (f"row {system + 1} (system {system}) has {len(record)} cells where the header has "
                               f"{h}: a cell is missing or one too many (a delimiter within a cell must be quoted), "
                               "so its cells cannot be put under their columns")
            lines[start + first] = empty
            for k in range(start + first + 1, start + done):
                lines[k] = ""
        system += 1
    return lines, refused


def _read_text(data: bytes, calc: Calculation, keep: Container[str] = (),
               refused: dict[int, str] | None = None) -> list[tuple[str, Any, str | None]]:
    from astropy.io.ascii import InconsistentTableError
    from astropy.io.ascii.ecsv import InvalidEcsvDatatypeWarning
    from astropy.table import Table

    try:
        text = data.decode("utf-8-sig")         # a spreadsheet's byte order mark is no part of a name
    except UnicodeDecodeError as e:
        raise TableError(400, f"the CSV body is not valid UTF-8 (byte {e.start}): save the table as UTF-8") from None
    if "\x00" in text:         # C's reader ends a cell there: what follows would be silently lost
        line = text.count("\n", 0, text.index("\x00")) + 1
        raise TableError(400, f"the {'ECSV' if is_ecsv(text) else 'CSV'} body holds a NUL byte (line {line})",
                         {"_body": [f"a NUL byte on line {line}"]})
    ecsv = is_ecsv(text)
    lines = text.splitlines()
    # lines beginning with # are comments, as in astropy's other text tables (ECSV's header is one)
    if not ecsv:
        lines = table_lines(lines)
    csv_options = {} if ecsv else {"delimiter": check_csv_text(lines)}
    if ecsv:                    # a name given twice, as the caller wrote it (astropy's reader says period_1)
        check_header(lines, ecsv_delimiter(lines), ecsv=True)
    lines, ragged = ragged_rows(lines, ecsv, csv_options.get("delimiter", ","))
    if ragged:
        if refused is None:
            raise TableError(422, "rows whose cells do not match the header: " + "; ".join(list(ragged.values())[:3]),
                             {"_rows": list(ragged.values())[:MAX_LISTED]})
        refused.update(ragged)
    try:
        # the lines, split as astropy splits a table's text: a string without a line break it would
        # take for the name of a file on the server's disk
        with quiet_range_warnings():
            # a datatype ECSV does not define (complex128) is read "anyway" by astropy, into what no input takes
            warnings.simplefilter("error", InvalidEcsvDatatypeWarning)
            table = Table.read(lines, format="ascii.ecsv" if ecsv else "ascii.csv", guess=False, **csv_options)
    except InvalidEcsvDatatypeWarning as e:
        found = re.search(r"datatype '(.*?)' of column '(.*?)'", str(e))
        datatype, name = found.groups() if found else ("?", "_body")
        raise TableError(400, f"the body is not ECSV text: column {name[:80]!r} has the datatype {datatype[:40]!r}, "
                              "which ECSV does not define", {name[:80]: [
                                  f"datatype {datatype[:40]!r} is not an ECSV datatype (bool, int8 to int64, uint8 to "
                                  "uint64, float16 to float128, string)"]}) from None
    except KeyError as e:           # astropy's ECSV reader looks up each column's keys
        raise TableError(400, f"the body is not {'ECSV' if ecsv else 'CSV'} text: its header lacks the key "
                              f"{str(e.args[0] if e.args else '')[:64]!r} (ECSV gives each column a name and a "
                              "datatype)") from None
    except (InconsistentTableError, ValueError, TypeError, IndexError, AttributeError) as e:
        failed = re.match(r"column '(.*)' failed to convert", str(e)) if ecsv else None
        if failed:                  # a cell against its column's declared datatype: say which
            try:
                cells = _text_cells(lines, ecsv)
            except Exception:       # noqa: BLE001 - the first reader's error below says what is wrong
                cells = None
            if cells is not None:
                _check_cells(cells, [failed.group(1)], ecsv, declared=True)
            # a number the datatype cannot hold (300 in an int8): the column is named as every refusal does
            raise TableError(400, f"the body is not ECSV text: {str(e)[:200]}",
                             {failed.group(1)[:80]: [f"its cells cannot be read as its declared datatype: "
                                                     f"{str(e)[:200]}"]}) from None
        raise TableError(400, f"the body is not {'ECSV' if ecsv else 'CSV'} text: {str(e)[:200]}") from None
    except Exception as e:          # the YAML header of ECSV raises its own errors
        if type(e).__module__.startswith(("yaml", "astropy")):
            raise TableError(400, f"the body is not {'ECSV' if ecsv else 'CSV'} text: {str(e)[:200]}") from None
        raise
    options_in_metadata(calc, table.meta, "meta")
    kinds = {spec.name: spec.kind for spec in calc.inputs}
    written = {} if ecsv else kept_as_written(table, lines, keep, csv_options["delimiter"])
    check_number_cells(table, lines, ecsv, [name for name in table.colnames if name not in keep and
                                            column_role(name if ecsv else split_unit(name)[0], kinds) is not None])
    restore_underflows(table, text, lines, ecsv, csv_options.get("delimiter", ","))
    out = []
    for name in table.colnames:
        col = table[name]
        unit = None
        if ecsv:
            unit = col.unit.to_string() if col.unit is not None else None
        else:
            name, unit = split_unit(name)
        if col.ndim != 1:
            raise TableError(422, f"column {name} has more than one value per system", {name: ["one value per system"]})
        kind = kinds.get((column_role(name, kinds) or (name,))[0], "quantity")
        masked = np.ma.asarray(col)
        if masked.dtype.kind in "fiu" and kind == "quantity" and name not in keep:
            # an ECSV float32 column's cells are the decimals written, not the float32 nearest them (as_doubles)
            values = np.where(np.ma.getmaskarray(masked), np.nan, as_doubles(np.ma.getdata(masked)))
        else:
            values = written.get(name) or masked.tolist()       # masked entries become None
        # a CSV header's empty brackets (period[]) say dimensionless, as a JSON unit of "" does: refused for a period
        out.append((name, values, unit if not ecsv else unit or None))
    return out


# a cell that begins with a zero and another digit: an identifier such as 0012, which a number loses
_LEADING_ZERO = re.compile(r"(?:^|[,;\t\"])[ ]*[+-]?0[0-9]", re.MULTILINE)


def kept_as_written(table, lines: Sequence[str], keep: Container[str], delimiter: str = ",") -> dict[str, list]:
    """The kept columns (the caller's own) of a CSV table that astropy read as whole numbers though a
    cell is written with a leading zero (``0012``), as :func:`kept_text` gives them from their text;
    the text is read again only when such a cell may be there.  The service and the command line
    both keep a CSV's columns so."""
    whole = [name for name in table.colnames if split_unit(name)[0] in keep and table[name].dtype.kind in "iu"]
    if not whole:
        return {}
    data = "\n".join(table_lines(lines)[1:])
    if _LEADING_ZERO.search(data) is None:
        return {}
    raw = _text_cells(lines, False, delimiter)
    return {split_unit(name)[0]: kept_text([None if c is None else str(c) for c in np.ma.asarray(raw[name]).tolist()])
            for name in whole if name in raw.colnames}


def kept_text(cells: list) -> list:
    """A kept CSV column read as text, as numbers where every cell is one written as Python writes it
    (``101``, ``12.5``: the same text comes back), else as the text sent (``0012``, ``12.50``)."""
    texts = [c for c in cells if c is not None and c != ""]
    for kind in (int, float):
        try:
            numbers = [kind(t) for t in texts]
        except ValueError:
            continue
        if [repr(x) for x in numbers] == texts:
            it = iter(numbers)
            return [None if c is None or c == "" else next(it) for c in cells]
    return [None if c == "" else c for c in cells]


def check_number_cells(table, lines: Sequence[str], ecsv: bool, names: Sequence[str], delimiter: str = ",") -> None:
    """Raise a 422 :class:`TableError` naming the column and rows where a column of ``names`` that
    astropy read as numbers holds a cell not written as one (CSV: ``0x10`` is 16 to C's strtod; ECSV:
    ``4_1.6`` is 41.6 to numpy).  The text is looked at once for such characters, and the cells read
    again as text only when it holds some; the HTTP edge and the command line both check so."""
    numeric = [name for name in names if table[name].dtype.kind in "fiu"]
    if numeric and _has_lenient_text(list(lines), ecsv):
        try:
            cells = _text_cells(lines, ecsv, delimiter)
        except Exception as e:      # noqa: BLE001 - astropy's readers raise many kinds; the text is at fault
            raise TableError(400, f"the body is not {'ECSV' if ecsv else 'CSV'} text: {str(e)[:200]}") from None
        _check_cells(cells, numeric, ecsv)


def check_csv_text(lines: Sequence[str]) -> str:
    """A CSV table's header checked (:func:`check_header`) and its delimiter (:func:`delimiter`)."""
    sep = delimiter(header_line(lines))
    check_header(lines, sep)
    return sep


def restore_underflows(table, text: str, lines: Sequence[str], ecsv: bool, delimiter: str = ",") -> None:
    """Cells written nonzero that astropy read as 0 (1e-400, beyond a double's range) put back, in place, as
    what :func:`calcservice.columns.read_number` makes of them; the cells are read again as text only then.
    The service's table bodies and the command line's catalogue files both pass here."""
    tiny = may_underflow(text) and [name for name in table.colnames if table[name].dtype.kind == "f"
                                    and np.any(np.ma.getdata(table[name]) == 0)]
    if not tiny:
        return
    texts = _text_cells(lines, ecsv, delimiter)
    for name in tiny:
        data, cells = np.ma.getdata(table[name]), np.ma.getdata(texts[name])
        for k in np.flatnonzero(data == 0).tolist():
            data[k] = read_number(str(cells[k]), data[k])


def _text_cells(lines: Sequence[str], ecsv: bool, delimiter: str = ","):
    """The table's cells as text, read again by astropy (only when a cell is in question)."""
    from astropy.io import ascii
    from astropy.table import Table

    as_text = {"converters": {"*": [ascii.convert_numpy(str)]}, "guess": False}
    if ecsv:
        comma = any(re.match(r"#\s*delimiter:\s*['\"]?,", line) for line in lines if line.startswith("#"))
        return Table.read([line for line in lines if not line.startswith("#")], format="ascii.basic",
                          delimiter="," if comma else " ", **as_text)
    return Table.read(table_lines(lines), format="ascii.csv", delimiter=delimiter, **as_text)


def _check_cells(raw, names: Sequence[str], ecsv: bool, declared: bool = False) -> None:
    """The 422 naming each column of ``names`` and its rows whose text is not a plain number;
    ``declared``: the ECSV header declares the column numeric, so any other text is refused too."""
    errors: dict[str, list[str]] = {}
    for name in names:
        if name not in raw.colnames:
            continue
        cells = np.ma.getdata(raw[name])
        rows = np.flatnonzero(not_plain_numbers(cells)).tolist()
        label = name if ecsv else split_unit(name)[0]
        # astropy read every cell of a column it made numeric; a declared one may hold plain text
        taken = [rows[j] for j in lenient([str(cells[k]) for k in rows])] if declared else rows
        if taken:
            errors.update(lenient_cells(label, taken, [str(cells[k]) for k in taken[:3]]).errors)
        elif rows and declared:
            shown = "; ".join(f"row {k + 1} (system {k}): {str(cells[k])[:40]!r}" for k in rows[:3])
            more = f" and {len(rows) - 3} more rows" if len(rows) > 3 else ""
            errors[label] = [f"{shown}{more} is not a number, which the header's datatype for {label} declares"]
    if errors:
        raise TableError(422, "cells that are not numbers as written: " +
                         "; ".join(f"{k}: {' '.join(v)}" for k, v in errors.items()), errors)


# ----------------------------------------------------------------------------- request: columns body -> table

def encode_request(body: Mapping, media_type: str) -> bytes:
    """A JSON columns body (``{"columns": {...}}``; its options are not part of a table: send them as
    the ``options`` query parameter) as an Arrow IPC stream, CSV or ECSV table."""
    columns = body["columns"] if "columns" in body else body
    lengths = {len(v) for entry in columns.values() for v in (entry.values() if isinstance(entry, dict) else [entry])
               if isinstance(v, (list, np.ndarray))}
    n = lengths.pop() if len(lengths) == 1 else 1
    cols: list[tuple[str, Any, str, str | None]] = []     # name, values, kind, unit
    for name, entry in columns.items():
        if not isinstance(entry, dict):
            entry = {"value": entry}
        unit = entry.get("unit")
        for key in MEMBERS:
            if key in entry:
                v = entry[key]
                if not isinstance(v, (list, np.ndarray)):
                    v = [v] * n
                cols.append((name if key == "value" else f"{name}_{key}", *_column_values(v), unit))
    return _encode(cols, {}, media_type)


def _column_values(v) -> tuple[Any, str]:
    """Numbers as a float array (NaN for None), anything else as text."""
    if isinstance(v, np.ndarray) and v.dtype.kind in "fiu":
        return v.astype(float, copy=False), "float"
    if all(x is None or (type(x) in (int, float)) for x in v):
        return np.array([np.nan if x is None else x for x in v], dtype=float), "float"
    return [None if x is None else str(x) for x in v], "text"


# ----------------------------------------------------------------------------- answer: columns answer -> table

def encode_answer(response: Mapping, media_type: str, kept: Sequence[tuple[str, Any, str | None]] = ()) -> bytes:
    """A columns answer of ``compute_batch`` (numpy arrays with NaN, or lists with None) as an Arrow
    IPC stream, CSV or ECSV table, the ``kept`` columns of the request (see :func:`read_request`)
    first; raises :class:`TableError` (406) for series outputs in CSV/ECSV."""
    n = int(response["count"])
    if media_type != ARROW:
        series = [name for name, entry in response["columns"].items() if isinstance(entry, dict) and
                  _is_series(entry.get("value"))]
        if series:
            raise series_refused(series)
    cols: list[tuple[str, Any, str, str | None]] = [(name, *_kept_values(v), unit) for name, v, unit in kept]
    extras = []
    failed_rows = np.zeros(n, dtype=bool)
    failed_rows[[int(p["index"]) for p in response.get("errors", [])]] = True
    budget = response.get("budget") or {}
    for name, entry in response["columns"].items():
        if isinstance(entry, dict) and "value" in entry:
            unit = entry.get("unit") or None
            if name in budget:          # the shares of its variance by input: NAME_budget_<term> columns
                entry = {**entry, "budget": budget[name]}
            for key, v in entry.items():
                if key == "unit":
                    continue
                col = name if key == "value" else f"{name}_{key}"
                if isinstance(v, dict):             # e.g. terms of a variance budget: a column each
                    cols.extend((f"{col}_{term}", *_answer_values(a), None) for term, a in v.items())
                else:
                    values, kind = _answer_values(v)
                    if kind == "series" and isinstance(values, np.ndarray):
                        values = (values, failed_rows)      # a failed system's series is null
                    cols.append((col, values, kind, unit if key in UNIT_KEYS else None))
        else:                                       # a member per system (an ephemeris' events): JSON text
            extras.append((name, [None if x is None else json.dumps(x, separators=(",", ":")) for x in entry],
                           "json", None))
    status = np.zeros(n, dtype=np.int64)
    failed = np.ones(n, dtype=bool)
    error = np.full(n, None, dtype=object)
    for problem in response.get("errors", []):
        i = problem["index"]
        status[i], failed[i] = problem["status"], False
        error[i] = error_text(problem)
    cols.append(("error_status", np.ma.array(status, mask=failed), "int", None))
    cols.append(("error", error, "text", None))
    cols.append(("warnings", warning_index(response.get("warnings", []), n), "codes", None))
    cols.extend(extras)
    meta_uncertainty = {}
    for key, v in (response.get("uncertainty") or {}).items():
        if isinstance(v, (np.ndarray, list)) and len(v) == n and key in ("rejected_fraction", "method"):
            cols.append((UNCERTAINTY_PREFIX + key, *_answer_values(v), None))
        else:
            meta_uncertainty[key] = v.tolist() if isinstance(v, np.ndarray) else v
    meta = {"calculation": response.get("calculation"), "uncertainty": meta_uncertainty}
    if "provenance" in response:
        meta["provenance"] = response["provenance"]
    return _encode(cols, meta, media_type)


def series_refused(names) -> TableError:
    """The 406 for series (a list of numbers per system) asked for as CSV or ECSV."""
    return TableError(406, f"{', '.join(names)} hold a series per system, which CSV and ECSV cannot carry: "
                           f"ask for {JSON} or {ARROW}", {"Accept": [f"ask for {JSON} or {ARROW}"]})


def _is_series(v) -> bool:
    if isinstance(v, np.ndarray):
        return v.ndim > 1
    return isinstance(v, list) and any(isinstance(x, (list, np.ndarray)) for x in v)


def warning_index(warnings: list[Mapping], n: int) -> tuple[list[str], np.ndarray]:
    """Each system's warning codes joined by ``;`` ("" for none), from columnar warnings (``rows``),
    as the distinct texts and each system's index into them: a catalogue's systems share a few sets
    of codes, so each text is built once, never a string per system."""
    order: dict[str, int] = {}
    for w in warnings:
        order.setdefault(w["code"], len(order))
    # a system's set of codes as the bits of one integer: the service has a few dozen codes at most
    words = [np.zeros(n, dtype=np.int64) for _ in range(0, len(order), 62)] or [np.zeros(n, dtype=np.int64)]
    for w in warnings:
        k = order[w["code"]]
        words[k // 62][np.asarray(w["rows"], dtype=np.int64) if "rows" in w else slice(None)] |= 1 << (k % 62)
    key = words[0] if len(words) == 1 else np.rec.fromarrays(words)
    if len(words) == 1 and n and key.max() < 1 << 16:  # a few codes: counted, not sorted
        present = np.bincount(key) > 0
        sets, index = np.flatnonzero(present), (np.cumsum(present) - 1)[key]
    else:
        sets, index = np.unique(key, return_inverse=True)
    codes = list(order)
    texts = []
    for s in sets.tolist():
        bits = s if isinstance(s, tuple) else (s,)
        texts.append(";".join(code for k, code in enumerate(codes) if bits[k // 62] >> (k % 62) & 1))
    return texts, index.reshape(n)


def warning_codes(warnings: list[Mapping], n: int) -> np.ndarray:
    """Each system's warning codes joined by ``;`` ("" for none), from columnar warnings (``rows``)."""
    texts, index = warning_index(warnings, n)
    return np.array(texts, dtype=object)[index]


def _answer_values(v) -> tuple[Any, str]:
    """An answer member and its kind: "float" (an array, NaN: null), "series" (an array (N, T), or a
    list with None for a system without one) or "text"."""
    if isinstance(v, np.ndarray) and v.dtype.kind in "fiu":
        return v, "float" if v.ndim == 1 else "series"
    if _is_series(v):
        return v, "series"
    if all(x is None or type(x) in (int, float) for x in v):
        return np.array([np.nan if x is None else x for x in v], dtype=float), "float"
    return v, "text"


def _kept_values(v) -> tuple[Any, str]:
    """A kept request column and its kind, as read: whole numbers (a catalogue number) "int", other
    numbers "float", anything else "text"."""
    if isinstance(v, np.ndarray) and v.dtype.kind == "f":
        return v, "float"
    kinds = set(map(type, v)) - {type(None)}
    if kinds == {int}:
        try:
            return np.ma.array([0 if x is None else x for x in v], mask=[x is None for x in v], dtype=np.int64), "int"
        except OverflowError:
            pass
    elif kinds and kinds <= {int, float}:
        return np.array([np.nan if x is None else x for x in v], dtype=float), "float"
    return [None if x is None else str(x) for x in v], "text"


def _encode(cols: list[tuple[str, Any, str | None]], meta: dict, media_type: str) -> bytes:
    if media_type == ARROW:
        return _arrow(cols, meta)
    if media_type in (CSV, ECSV):
        return _text(cols, meta, ecsv=media_type == ECSV)
    raise TableError(406, f"a table is one of {', '.join(TABLE_TYPES)}, not {media_type}")


def _arrow(cols, meta: dict) -> bytes:
    import pyarrow as pa

    arrays, fields = [], []
    for name, v, kind, unit in cols:
        field_meta = {"content": "application/json"} if kind == "json" else {}
        if unit is not None:
            field_meta["unit"] = unit
        arr = _arrow_array(pa, v, kind)
        arrays.append(arr)
        fields.append(pa.field(name, arr.type, metadata=field_meta or None))
    schema = pa.schema(fields, metadata={k: json.dumps(v, separators=(",", ":"), default=_json_default)
                                         for k, v in meta.items()} or None)
    table = pa.Table.from_arrays(arrays, schema=schema)
    # sized first (a pass that writes nothing), then written once into its own buffer: half the
    # time of a stream that grows and is copied out
    mock = pa.MockOutputStream()
    with pa.ipc.new_stream(mock, schema) as writer:
        writer.write_table(table)
    out = bytearray(mock.size())
    with pa.ipc.new_stream(pa.FixedSizeBufferWriter(pa.py_buffer(out)), schema) as writer:
        writer.write_table(table)
    return bytes(out)           # WSGI servers (gunicorn) send bytes only


def _arrow_array(pa, v, kind: str):
    if kind == "codes":                             # distinct texts and each system's index into them
        texts, index = v
        return pa.DictionaryArray.from_arrays(pa.array(index.astype(np.int32)), pa.array(texts, type=pa.string())) \
            .cast(pa.string())
    if kind == "int":
        return pa.array(v.data, mask=np.ma.getmaskarray(v))
    if kind == "float":                             # NaN -> null, a validity bitmap only where there is one
        null = np.isnan(v)
        return pa.array(v, mask=null) if null.any() else pa.array(v)
    if kind == "series":
        if isinstance(v, tuple):                    # (systems, points) and the failed systems' rows
            v, failed = v
            flat = pa.array(np.ascontiguousarray(v).reshape(-1), from_pandas=True)
            return pa.FixedSizeListArray.from_arrays(flat, v.shape[1], mask=pa.array(failed) if failed.any() else None)
        if isinstance(v, np.ndarray):
            flat = pa.array(np.ascontiguousarray(v).reshape(-1), from_pandas=True)
            return pa.FixedSizeListArray.from_arrays(flat, v.shape[1])
        return pa.array([None if x is None else [None if y is None or y != y else float(y) for y in x] for x in v],
                        type=pa.list_(pa.float64()))
    return pa.array(v, type=pa.string(), from_pandas=True)


def _json_default(o):
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, np.generic):
        return o.item()
    raise TypeError(f"{type(o).__name__} is not JSON serialisable")


@lru_cache(maxsize=256)
def spelled_unit(text: str):
    """The astropy unit ``text`` names, written in an ECSV header as ``text``: as the JSON answer spells it
    (``au``, ``km/s``), where astropy's own string is ``AU`` and ``km / s``.  An ECSV reader parses it to the same
    unit (the header holds ``str(unit)``, so the unit is an alias named ``text``)."""
    from astropy import units as u
    unit = u.Unit(text)
    return unit if unit.to_string() == text else u.def_unit(text, unit)


def header_units(lines: Sequence[str]) -> dict[str, str]:
    """Each column's unit as an ECSV header writes it (astropy's reader gives it back in its own spelling)."""
    from astropy.table.meta import get_header_from_yaml
    head = []
    for line in lines:
        if not line.startswith("#"):
            break
        head.append(line[2:] if line.startswith("# ") else line[1:])
    return {c["name"]: str(c["unit"]) for c in get_header_from_yaml(head).get("datatype", ())
            if c.get("unit") is not None}


def _text(cols, meta: dict, ecsv: bool) -> bytes:
    from astropy.table import Column, MaskedColumn, Table

    table = Table()
    for name, v, kind, unit in cols:
        if kind == "int":
            data, mask = v.data, np.ma.getmaskarray(v)
        elif kind == "float":
            data, mask = v, np.isnan(v)
        elif kind == "codes":
            texts, index = v
            data, mask = np.array(texts, dtype=str)[index], np.zeros(len(index), dtype=bool)
        else:       # text: empty where there is none (astropy writes masked entries one by one, far slower)
            data, mask = np.array(["" if x is None else str(x) for x in v], dtype=str), np.zeros(len(v), dtype=bool)
        if kind == "json":                      # a member per system as JSON text, marked so a reader can tell
            unit = None
            header = name if ecsv else f"{name}[json]"
        else:
            header = name if ecsv or not unit else f"{name}[{unit}]"
        if mask.any():                          # a masked column only where needed: it writes far slower
            col = MaskedColumn(data, name=header, mask=mask)
        else:
            col = Column(data, name=header)
        if ecsv and unit:
            col.unit = spelled_unit(unit)
        if ecsv and kind == "json":
            col.description = JSON_TEXT
        table.add_column(col)
    out = io.StringIO()
    if ecsv:
        table.meta.update(json.loads(json.dumps(meta, default=_json_default)))    # plain mappings for the YAML
        table.write(out, format="ascii.ecsv")
    else:
        table.write(out, format="ascii.csv")
    return out.getvalue().encode("utf-8")


# ----------------------------------------------------------------------------- answer: table -> columns answer

def decode_answer(data: bytes, media_type: str) -> dict:
    """An answer table back to the shape of a JSON columns answer: ``calculation``, ``count``,
    ``columns`` (``{name: {"value": array, "sigma": array, ..., "unit": ...}}``, NaN where null;
    series as arrays (N, T) or lists), ``errors`` (``[{"index", "status", "detail"}]``),
    ``warnings`` (per system, a list of codes), ``uncertainty`` and ``provenance`` where the
    format holds them."""
    if media_type == ARROW:
        cols, meta = _decode_arrow(data)
    elif media_type in (CSV, ECSV):
        cols, meta = _decode_text(data)
    else:
        raise TableError(415, f"an answer table is one of {', '.join(TABLE_TYPES)}, not {media_type}")
    names = [name for name, _, _ in cols]
    values = {name: (v, unit) for name, v, unit in cols}
    n = len(cols[0][1]) if cols else 0
    columns: dict[str, Any] = {}
    budget: dict[str, dict[str, Any]] = {}
    uncertainty = dict(meta.get("uncertainty") or {})
    taken = set(ERROR_COLUMNS)
    for name in names:
        if name.startswith(UNCERTAINTY_PREFIX):
            v = values[name][0]
            uncertainty[name[len(UNCERTAINTY_PREFIX):]] = v
            taken.add(name)
    for name in names:
        if name in taken:
            continue
        v, unit = values[name]
        if unit == "json":
            columns[name] = [None if x is None else json.loads(x) for x in v]
            taken.add(name)
            continue
        entry = {"value": v}
        taken.add(name)
        for other in names:
            if other not in taken and other.startswith(name + "_") and (other[len(name) + 1:] in UNIT_KEYS):
                entry[other[len(name) + 1:]] = values[other][0]
                taken.add(other)
            elif other not in taken and other.startswith(name + "_budget_"):
                budget.setdefault(name, {})[other[len(name) + len("_budget_"):]] = values[other][0]
                taken.add(other)
        entry["unit"] = unit or ""
        columns[name] = entry
    status = values.get("error_status", (None,))[0]
    detail = values.get("error", (None,))[0]
    errors = []
    if status is not None:
        st = np.asarray(status, dtype=float)
        for i in np.flatnonzero(~np.isnan(st)).tolist():
            errors.append({"index": i, "status": int(st[i]), "detail": detail[i] if detail is not None else None})
    codes = values.get("warnings", (None,))[0]
    warnings = [[c for c in (x or "").split(";") if c] for x in codes] if codes is not None else [[] for _ in range(n)]
    out = {"calculation": meta.get("calculation"), "count": n, "columns": columns, "errors": errors,
           "warnings": warnings, "uncertainty": uncertainty}
    if "provenance" in meta:
        out["provenance"] = meta["provenance"]
    if budget:
        out["budget"] = budget
    return out


def _decode_arrow(data: bytes):
    import pyarrow as pa

    table = pa.ipc.open_stream(pa.py_buffer(data)).read_all()
    meta = {k.decode(): json.loads(v) for k, v in (table.schema.metadata or {}).items()}
    cols = []
    for field, column in zip(table.schema, table.columns):
        fm = field.metadata or {}
        unit = "json" if fm.get(b"content") == b"application/json" else fm.get(b"unit", b"").decode() or None
        t = field.type
        if pa.types.is_floating(t):
            v = column.to_numpy()
        elif pa.types.is_fixed_size_list(t):
            # (systems, points); a failed system's null series is a row of NaN, as null numbers are
            whole = column.combine_chunks()
            v = whole.values.to_numpy(zero_copy_only=False).astype(float).reshape(len(column), t.list_size)
            if whole.null_count:
                v[whole.is_null().to_numpy(zero_copy_only=False)] = np.nan
        else:
            v = column.to_pylist()
        cols.append((field.name, v, unit))
    return cols, meta


JSON_TEXT = "JSON text"      # the description of an ECSV column whose cells are JSON (e.g. an ephemeris' events)


def _decode_text(data: bytes):
    from astropy.table import Table

    text = data.decode("utf-8")
    ecsv = is_ecsv(text)
    lines = text.splitlines()
    table = Table.read(lines, format="ascii.ecsv" if ecsv else "ascii.csv", guess=False)    # never a path
    written = header_units(lines) if ecsv else {}
    cols = []
    for name in table.colnames:
        col = table[name]
        masked = np.ma.asarray(col)
        unit = written.get(name, col.unit.to_string()) if ecsv and col.unit is not None else None
        if ecsv and col.description == JSON_TEXT:
            unit = "json"
        if not ecsv:
            name, header_unit = split_unit(name)
            unit = header_unit or unit
        if name in ("error", "warnings"):           # text; a column of empty cells reads as numbers
            v = [None if x is None or masked.dtype.kind != "U" else x for x in masked.tolist()]
            if name == "warnings":
                v = ["" if x is None else x for x in v]
        elif masked.dtype.kind in "fiu":
            v = np.asarray(masked.astype(float).filled(np.nan), dtype=float).view(np.ndarray)
        else:
            v = masked.tolist()
        cols.append((name, v, unit))
    return cols, dict(table.meta) if ecsv else {}
