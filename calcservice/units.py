"""Unit conversion with astropy, parsed once per unit string and cached."""

from __future__ import annotations

import re
from functools import lru_cache

from astropy import units as u

_UNIT_TEXT = re.compile(r"^[A-Za-z0-9_ ./*^()+\-]{0,64}$")


class UnitError(ValueError):
    pass


@lru_cache(maxsize=4096)
def parse_unit(text: str) -> u.UnitBase:
    if not isinstance(text, str) or not _UNIT_TEXT.match(text):
        raise UnitError(f"{text!r} is not a unit astropy can read")
    try:
        return u.Unit(text, parse_strict="raise")
    except Exception:
        raise UnitError(f"unknown unit {text!r}") from None


@lru_cache(maxsize=4096)
def factor(from_unit: str, to_unit: str) -> float:
    """The number that turns a value in ``from_unit`` into ``to_unit`` (a plain scale factor)."""
    a, b = parse_unit(from_unit), parse_unit(to_unit)
    try:
        return float(a.to(b))
    except u.UnitConversionError:
        want = str(b.physical_type) if b != u.dimensionless_unscaled else "dimensionless"
        raise UnitError(f"unit {from_unit!r} cannot be converted to {to_unit or 'dimensionless'!r} "
                        f"(a {want} unit is needed)") from None
