"""How the columns of a catalogue are named, one rule for the command line, the client and table bodies.

A column is named after an input (``period``), optionally with its unit in brackets
(``period[yr]``); ``NAME_sigma`` holds the input's 1-sigma uncertainty, ``NAME_sigma_minus`` and
``NAME_sigma_plus`` an asymmetric one, in NAME's unit unless they carry a unit of their own.
The standard library and numpy only, so the client can use it without the service's dependencies.
"""

from __future__ import annotations

import datetime
import decimal
import difflib
import math
import numbers
import re
from typing import Container, Iterable, Iterator, Mapping

import numpy as np

SIGMA_SUFFIXES = ("_sigma_minus", "_sigma_plus", "_sigma")
MEMBERS = ("value",) + tuple(s[1:] for s in SIGMA_SUFFIXES)

_HEADER_UNIT = re.compile(r"^\s*(?P<name>[^\[\]]+?)\s*(?:\[(?P<unit>[^\[\]]*)\])?\s*$")


def split_unit(header: str) -> tuple[str, str | None]:
    """``"period[yr]"`` -> ``("period", "yr")``; ``"period"`` -> ``("period", None)``."""
    m = _HEADER_UNIT.match(str(header))
    if not m:
        return str(header).strip(), None
    unit = m.group("unit")
    return m.group("name"), (unit.strip() if unit is not None else None)


def column_role(name: str, inputs: Container[str]) -> tuple[str, str] | None:
    """The input a column belongs to and what it holds there: ``("period", "sigma")`` for
    ``period_sigma``, ``("period", "value")`` for ``period``; None for a column of no input.

    ``name`` is the header without its bracketed unit (see :func:`split_unit`); an input whose own
    name ends like a sigma column is the input itself.
    """
    if name in inputs:
        return name, "value"
    for suffix in SIGMA_SUFFIXES:
        if name.endswith(suffix) and name[: -len(suffix)] in inputs:
            return name[: -len(suffix)], suffix[1:]
    return None


# the columns of an answer table beside each output's NAME and NAME_<member>
ERROR_COLUMNS = ("error_status", "error", "warnings")
UNCERTAINTY_PREFIX = "uncertainty_"
ANSWER_MEMBERS = frozenset({"sigma", "low", "high", "budget"})     # an output's columns NAME_<member>...


def kept_name_errors(calculation: str, inputs: Container[str], outputs: Iterable[str],
                     keep: Iterable[str]) -> list[str]:
    """Why columns named in ``keep`` cannot be carried into an answer (an input's column, or one whose
    name an answer column has: an output's, ``error``, ``warnings``...); empty when they can.  The one
    rule of the service's ``?keep=``, the client's ``keep=`` and the command line's ``--keep``."""
    outputs = list(outputs)
    errors = []
    for name in keep:
        if column_role(name, inputs) is not None:
            errors.append(f"{name!r} is a column of an input of {calculation}, not one of your own")
        elif name in ERROR_COLUMNS or name.startswith(UNCERTAINTY_PREFIX) or \
                any(name == o or (name.startswith(o + "_") and name[len(o) + 1:].split("_")[0] in ANSWER_MEMBERS)
                    for o in outputs):
            errors.append(f"{name!r} is the name of a column of the answer: rename it")
    return errors


def column_name(base: str, member: str, unit: str | None = None) -> str:
    """The inverse of :func:`column_role` (and :func:`split_unit` when ``unit`` is given)."""
    name = base if member == "value" else f"{base}_{member}"
    return f"{name}[{unit}]" if unit else name


# A number as a table writes one: a sign, ASCII digits, a point, an exponent, ASCII spaces around it
# (or nan, inf: a missing value, a number that is not finite, each answered in place).  Python's float()
# and C's strtod read more (underscores between digits, hexadecimal, any script's digits and spaces):
# in a lab's table those are typos or mangled cells, not numbers.
_NUMBER_CHARACTERS = "0123456789+-.eE \t"
_WORDS = np.array(["", "nan", "inf", "infinity"])


def not_plain_numbers(texts) -> np.ndarray:
    """Which cells (strings) are not written as plain decimal numbers (nor nan, inf), vectorised: what is
    left of a cell once the characters of a number are stripped from its ends must be empty or a word.
    Meant for cells a reader took for numbers, or that Python's ``float()`` takes (see :func:`lenient`)."""
    rest = np.char.lower(np.char.strip(np.asarray(texts, dtype=str), _NUMBER_CHARACTERS))
    return ~np.isin(rest, _WORDS)


def lenient(texts) -> list[int]:
    """The indices of the cells Python's ``float()`` reads as numbers though no table writes them so
    (``4_1.6`` is 41.6 to it, ``١٢`` 12): typos to refuse, never numbers."""
    suspect = np.flatnonzero(not_plain_numbers(texts)).tolist() if len(texts) else []
    out = []
    for k in suspect:
        try:
            float(texts[k])
        except ValueError:
            continue
        out.append(k)
    return out


#: The smallest subnormal double, which stands for a number written nonzero that a double cannot hold.
SMALLEST_SUBNORMAL = 5e-324
# a nonzero digit before any exponent: "1e-400" is no zero, "0.0e-400" is
_NONZERO = re.compile(r"^\s*[-+]?0*\.?0*[1-9]")
# what may be written so: an exponent of -100 or beyond, or a run of 300 digits
_TINY = re.compile(r"[eE]-0*[1-9][0-9]{2}|[0-9]{300}")


def read_number(text: str, x: float) -> float:
    """``x``, the float a number's ``text`` was read as, save that a number written nonzero and read as 0
    (1e-400, beyond a double's range) is the smallest subnormal of its sign: the caller's number is not 0,
    and as a subnormal it meets the rule of such numbers (refused naming its field where the input must be
    > 0, taken as the 0 it rounds to elsewhere) in JSON bodies, table cells and text columns alike."""
    if x == 0.0 and _NONZERO.match(text):
        return math.copysign(SMALLEST_SUBNORMAL, x)
    return x


def may_underflow(text: str) -> bool:
    """Whether a text holds a number written so that it may be read as 0 though it is not (see read_number)."""
    return _TINY.search(text) is not None


def lenient_message(rows, texts) -> str:
    """What is wrong with cells read as numbers only by lenient rules, naming their rows."""
    shown = "; ".join(f"row {k + 1} (system {k}): {str(t)[:40]!r}" for k, t in zip(list(rows)[:3], list(texts)[:3]))
    more = f" and {len(rows) - 3} more rows" if len(rows) > 3 else ""
    return (f"{shown}{more} is not a number as a table writes one (digits, a point, an exponent): an "
            "underscore, a hexadecimal prefix or a non-ASCII digit or space is read as a typo")


def as_doubles(values) -> np.ndarray:
    """Numbers as a float64 array; those of less precision (float16, float32: a FITS, Arrow or ECSV catalogue's
    column) as the doubles of the decimals they print, their shortest round-trip text, which is what their
    writer put in: 41.6 written as a float32 is 41.599998474121094 as a double, a number nobody wrote, and the
    one every answer and echo would carry."""
    arr = np.asarray(values)
    if arr.dtype.kind == "f" and arr.dtype.itemsize < 8:
        return arr.astype(str).astype(float)
    return arr.astype(float)


def plain_number(x):
    """A numpy scalar as the Python number it stands for (a float32's by :func:`as_doubles`); anything else
    as it is."""
    if isinstance(x, np.floating):      # a longdouble's item() is itself: the double nearest it
        return float(as_doubles(x)) if x.dtype.itemsize < 8 else float(x)
    return x.item() if isinstance(x, np.generic) else x


def unit_of(col) -> str | None:
    """The unit of an astropy Quantity or Column (None for plain numbers)."""
    unit = getattr(col, "unit", None)
    if unit is None:
        return None
    return unit.to_string() if hasattr(unit, "to_string") else str(unit)


def column_array(col, label: str = "column") -> np.ndarray:
    """A column of a caller's table (a list, numpy array, masked array, astropy Column, Quantity or Time,
    pandas Series) as a float array with NaN where missing, or an object array (strings, None where
    missing), for the client and the library alike.  A text cell Python reads as a number though no table
    writes one so (``4_1.6``), or a column of booleans, is a ValueError naming ``label``."""
    mask = None
    if hasattr(col, "isot") and hasattr(col, "jd"):             # an astropy Time column: ISO 8601 in UTC
        mask = np.asarray(getattr(col, "mask", False))
        col = np.asarray(col.utc.isot, dtype=object)
        if mask.any():
            col[mask] = None
        return col
    if type(col).__module__.startswith("pandas"):              # a Series (nullable dtypes: pd.NA is missing)
        # numbers (nullable ones too) as floats; text cells are looked at below, as pandas would
        # read "4_1.6" as 41.6
        if getattr(col.dtype, "kind", "O") in "iuf":
            # a float32 column (nullable Float32 too) in its own type first, for as_doubles to read its decimals
            own = np.dtype(getattr(col.dtype, "numpy_dtype", col.dtype))
            return as_doubles(col.to_numpy(dtype=own if own.kind == "f" else float, na_value=np.nan))
        col = col.to_numpy(dtype=object)
    if hasattr(col, "unmasked") and hasattr(col, "mask"):      # astropy Masked (a masked Quantity)
        mask = np.asarray(col.mask)
        col = col.unmasked
    elif hasattr(col, "mask") and not np.isscalar(getattr(col, "mask")):   # MaskedColumn, numpy masked array
        mask = np.ma.getmaskarray(col)
        col = np.ma.getdata(col)
    if hasattr(col, "unit") and hasattr(col, "value") and not isinstance(col, dict):
        col = col.value
    try:
        arr = np.asarray(col)
    except ValueError:          # numpy's "inhomogeneous shape": a list in some cells, which named no column
        raise ValueError(f"{label}: a column is one number (or text) per system, not a list in some cells") from None
    if arr.dtype.kind == "b" or (arr.dtype.kind == "O" and any(isinstance(v, (bool, np.bool_)) for v in arr.tolist())):
        raise ValueError(f"{label}: a column of true and false holds no numbers")
    if arr.dtype.kind in "cm" or (arr.dtype.kind == "O" and any(isinstance(v, _NO_NUMBERS) for v in arr.tolist())):
        # JSON has neither (the encoder's TypeError named no column), and a duration's unit is the table's to say
        raise ValueError(f"{label}: a column of complex numbers or durations holds no real numbers: give floats (a "
                         "duration as its number in a unit, e.g. days)")
    if arr.dtype.kind in "iuf":
        arr = as_doubles(arr)
    elif arr.dtype.kind in "USO":
        # text cells that are numbers are numbers (a column mixing "isotropic" and angles)
        cells = [_missing_to_none(v) for v in arr.tolist()]
        texts = [k for k, v in enumerate(cells) if isinstance(v, str)]
        refused = [texts[j] for j in lenient([cells[k] for k in texts])]
        if refused:
            raise ValueError(f"{label}: {lenient_message(refused, [cells[k] for k in refused[:3]])}")
        items = [_number_or_text(v) for v in cells]
        odd = next((v for v in items if v is not None and not isinstance(v, (float, str, datetime.date, np.datetime64))),
                   None)
        if odd is not None:
            # a Quantity, an uncertainties number or a masked entry among plain numbers: JSON has no such value
            # (the encoder's TypeError named no column), and read alone each would lose its unit or sigma
            raise ValueError(f"{label}: a column holds one number (or text) per system, not a {type(odd).__name__} "
                             "among them: give a Quantity column, or numbers and a unit")
        if all(v is None or (isinstance(v, float)) for v in items):
            arr = np.array([np.nan if v is None else v for v in items], dtype=float)
        else:
            arr = np.array(items, dtype=object)
    else:
        arr = arr.astype(object)
    if mask is not None and mask.any():
        arr = arr.astype(float if arr.dtype.kind == "f" else object, copy=True)
        arr[mask] = np.nan if arr.dtype.kind == "f" else None
    return arr


_NO_NUMBERS = (complex, np.complexfloating, datetime.timedelta, np.timedelta64)


def _number_or_text(v):
    if isinstance(v, str):
        try:
            x = read_number(v, float(v))
        except ValueError:
            return v
        return x if math.isfinite(x) else v
    if isinstance(v, (numbers.Real, decimal.Decimal)) and not isinstance(v, bool):     # a Decimal, a Fraction too
        try:
            return float(v)
        except OverflowError:       # an integer beyond a double: infinite, that system's error as 1e999 is
            return math.inf if v > 0 else -math.inf
    return v


def _missing_to_none(v):
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return None
    if isinstance(v, bytes):
        v = v.decode("utf-8")
    if isinstance(v, str) and v.strip() == "":
        return None
    try:
        import pandas as pd
        if v is pd.NA or v is pd.NaT:
            return None
    except ImportError:
        pass
    return v


def uncertain_parts(col) -> tuple[np.ndarray, np.ndarray] | None:
    """An array (or list) of ``uncertainties`` numbers as their nominal values and standard deviations
    (NaN where an entry is None); None for anything else."""
    if isinstance(col, (str, bytes, dict)) or not (isinstance(col, list) or hasattr(col, "__array__")):
        return None
    if isinstance(col, list):        # a JSON column may be ragged ([[41.6], 41.7]): numpy cannot shape it
        items = col
    else:
        items = np.asarray(col, dtype=object).ravel().tolist() if np.ndim(col) == 1 else []
    if not items or not all(x is None or (hasattr(x, "nominal_value") and hasattr(x, "std_dev")) for x in items) \
            or all(x is None for x in items):
        return None
    return (np.array([np.nan if x is None else x.nominal_value for x in items], dtype=float),
            np.array([np.nan if x is None else x.std_dev for x in items], dtype=float))


def correlated_columns(columns: dict[str, list]) -> tuple[str, str] | None:
    """The first column of ``uncertainties`` numbers correlated with another (they share a variable in
    some system) and why it is refused: a columns batch has one correlation for every system, so the
    numbers would otherwise travel as if independent, with wrong sigmas."""
    names = list(columns)
    for a, name in enumerate(names):
        for other in names[a + 1:]:
            shared = [i for i, (x, y) in enumerate(zip(columns[name], columns[other]))
                      if x is not None and y is not None and set(map(id, x.derivatives)) & set(map(id, y.derivatives))]
            if shared:
                more = f" and {len(shared) - 1} more" if len(shared) > 1 else ""
                return name, (f"its uncertainties numbers are correlated with those of {other} (system {shared[0]}"
                              f"{more}): a columns batch has one correlation for all systems (correlations); give "
                              "each system with its own correlations as rows (systems)")
    return None


def infinite_cells(columns: Mapping[str, object]) -> Iterator[tuple[str, str, np.ndarray, np.ndarray]]:
    """The infinite cells of a catalogue's columns (``{input: {member: array}}``, as a columns batch holds
    them): (input, member, its array, the systems where it is infinite), for the members that have any.
    JSON has no infinity (an encoder writes null, read as a value not given), so a caller of the JSON
    path puts them back or refuses them."""
    for name, entry in columns.items():
        if not isinstance(entry, Mapping):
            continue
        for member, v in entry.items():
            if isinstance(v, np.ndarray) and v.dtype.kind == "f" and np.isinf(v).any():
                yield name, member, v, np.flatnonzero(np.isinf(v))


def meant(name: str, known, symbols: Mapping[str, str] | None = None) -> str:
    """"; did you mean X?" where ``name`` plainly means one of ``known``: its symbol in the formulas
    (``symbols``: "e" eccentricity, "K1" k1), the one known name it begins ("ecc": eccentricity) or one close
    to it ("inclinaton": inclination); else ""."""
    name = str(name)
    if symbols and symbols.get(name) in known:
        return f"; did you mean {symbols[name]}?"
    starts = [k for k in known if len(name) >= 3 and k.startswith(name)]
    close = starts if len(starts) == 1 else difflib.get_close_matches(name, list(known), n=1, cutoff=0.75)
    return f"; did you mean {close[0]}?" if close else ""


def naming(errors: Mapping[str, list[str]]) -> str:
    """The detail of a 422 that says no more than which fields are at fault: "missing k2" for those only
    missing, "invalid value for period" for the others, both where both are.  A table's error cell leaves it
    out before the field errors, which say it and why (:func:`error_text`)."""
    names = sorted(k for k in errors if k != "_more")
    if not names:
        return "invalid input"
    missing = [k for k in names if errors[k] == ["is required"]]
    invalid = [k for k in names if k not in missing]
    parts = [f"{word} {', '.join(k or repr(k) for k in group)}"          # a name "" is shown as ''
             for word, group in (("missing", missing), ("invalid value for", invalid)) if group]
    return "; ".join(parts) + (" and more" if "_more" in errors else "")


def error_text(problem: Mapping) -> str:
    """A problem as one cell of an answer table: ``detail; field: message; ...``, without a detail that only
    names the fields (``k2: is required``, not ``invalid value for k2; k2: is required``)."""
    errors = problem.get("errors") or {}
    detail = str(problem.get("detail") or "")
    parts = [detail] if detail and not (errors and detail == naming(errors)) else []
    parts += [f"{k}: {' '.join(map(str, v)) if isinstance(v, list) else v}" for k, v in errors.items()]
    return "; ".join(parts)


__all__ = ["as_doubles", "plain_number", "naming", "error_text", "unit_of", "column_array", "uncertain_parts", "correlated_columns", "SIGMA_SUFFIXES", "MEMBERS", "split_unit", "column_role", "column_name", "not_plain_numbers", "lenient",
           "lenient_message", "meant", "infinite_cells"]
