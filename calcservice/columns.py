"""How the columns of a catalogue are named, one rule for the command line, the client and table bodies.

A column is named after an input (``period``), optionally with its unit in brackets
(``period[yr]``); ``NAME_sigma`` holds the input's 1-sigma uncertainty, ``NAME_sigma_minus`` and
``NAME_sigma_plus`` an asymmetric one, in NAME's unit unless they carry a unit of their own.
Standard library only, so the client can use it without the service's dependencies.
"""

from __future__ import annotations

import re
from typing import Container

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


__all__ = ["SIGMA_SUFFIXES", "MEMBERS", "split_unit", "column_role", "column_name"]
