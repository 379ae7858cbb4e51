"""How the columns of a catalogue are named, one rule for the command line, the client and table bodies.

A column is named after an input (``period``), optionally with its unit in brackets
(``period[yr]``); ``NAME_sigma`` holds the input's 1-sigma uncertainty, ``NAME_sigma_minus`` and
``NAME_sigma_plus`` an asymmetric one, in NAME's unit unless they carry a unit of their own.
The standard library and numpy only, so the client can use it without the service's dependencies.
"""

from __future__ import annotations

import re
from typing import Container

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


def lenient_message(rows, texts) -> str:
    """What is wrong with cells read as numbers only by lenient rules, naming their rows."""
    shown = "; ".join(f"row {k + 1} (system {k}): {str(t)[:40]!r}" for k, t in zip(list(rows)[:3], list(texts)[:3]))
    more = f" and {len(rows) - 3} more rows" if len(rows) > 3 else ""
    return (f"{shown}{more} is not a number as a table writes one (digits, a point, an exponent): an "
            "underscore, a hexadecimal prefix or a non-ASCII digit or space is read as a typo")


__all__ = ["SIGMA_SUFFIXES", "MEMBERS", "split_unit", "column_role", "column_name", "not_plain_numbers", "lenient",
           "lenient_message"]
