"""Unit conversion with astropy, parsed once per unit string and cached."""

from __future__ import annotations

from functools import lru_cache

from astropy import units as u

# A bound on what reaches astropy's parser (its cost grows with the text), not a second grammar:
# any printable text astropy reads is a unit ("%", "µas", "°", "km s-1", "M☉"), control characters are not.
MAX_UNIT_LENGTH = 64


class UnitError(ValueError):
    pass


@lru_cache(maxsize=4096)
def parse_unit(text: str) -> u.UnitBase:
    if not isinstance(text, str) or len(text) > MAX_UNIT_LENGTH or not text.isprintable():
        raise UnitError(f"{text!r} is not a unit astropy can read" if isinstance(text, str) and len(text) <= 80
                        else "not a unit astropy can read")
    try:
        unit = u.Unit(text, parse_strict="raise")
    except Exception:
        raise UnitError(f"unknown unit {text!r}") from None
    if isinstance(unit, u.FunctionUnitBase):
        # dex(km/s), mag(AB): a logarithm of a quantity, not a scale of it
        raise UnitError(f"{text!r} is a logarithmic unit: give the quantity itself, in {unit.physical_unit.to_string()!r}")
    return unit


def needed(unit: u.UnitBase) -> str:
    """The kind of unit that converts to ``unit``, in words: "a length unit", "a dimensionless unit"."""
    name = str(unit.physical_type)
    if name == "unknown":
        # astropy has no word for many composite units (solMass / yr): name the unit itself
        return f"a unit convertible to {unit.to_string()!r}"
    if name == "temperature":
        return "a temperature unit, or an energy unit for kT,"
    return f"{'an' if name[0] in 'aeiou' else 'a'} {name} unit"           # an angle unit, an energy unit


def _unscaled(unit: u.UnitBase) -> u.UnitBase:
    """``unit`` without its numeric scale ('1e305 d' -> 'd')."""
    return u.CompositeUnit(1, unit.bases, unit.powers)


@lru_cache(maxsize=4096)
def factor(from_unit: str, to_unit: str) -> float:
    """The number that turns a value in ``from_unit`` into ``to_unit`` (a plain scale factor).

    The error names the kind of unit ``to_unit`` is: callers put the unit they need there.
    """
    b = parse_unit(to_unit)
    try:
        a = parse_unit(from_unit)
    except UnitError as e:
        if not str(e).startswith("unknown unit") or not to_unit:
            raise
        # say what to write instead: the kind of unit needed and the input's own unit as astropy spells it
        raise UnitError(f"{e}: give {needed(b)} as astropy writes it, such as {to_unit!r}") from None
    # a temperature may be given or asked for as the energy kT (keV, as X-ray spectra give it): E = k_B T,
    # astropy's temperature_energy equivalency (k_B of CODATA); no other unit converts across kinds
    kinds = {str(a.physical_type), str(b.physical_type)}
    equivalencies = u.temperature_energy() if "temperature" in kinds else []
    try:
        k = float(a.to(b, equivalencies=equivalencies))
    except u.UnitConversionError:
        if kinds == {"temperature"}:
            # deg_C and deg_F are temperatures whose zero is not 0 K: no scale factor turns them into kelvin
            raise UnitError(f"unit {from_unit!r} is a temperature scale whose zero is not 0 K, and a unit here only "
                            f"scales a value (and its sigma): give it in {to_unit!r}, or in an energy unit for kT "
                            "such as 'keV'") from None
        raise UnitError(f"unit {from_unit!r} cannot be converted to {to_unit or 'dimensionless'!r} "
                        f"({needed(b)} is needed)") from None
    if k in (0.0, float("inf")) and a.scale != 0:
        # astropy goes through SI: '1e305 d' is 8.64e309 s on the way, though 2.7e302 yr; so the
        # units' own scales are applied last
        k = float(a.scale / b.scale * _unscaled(a).to(_unscaled(b), equivalencies=equivalencies))
    if not 0.0 < k < float("inf"):
        # '-1*au' would flip signs, '1e400*au' is infinite: no unit a measurement is given in
        size = {0.0: "below the smallest double", float("inf"): "beyond the largest double"}.get(k, f"{k:g}")
        raise UnitError(f"unit {from_unit!r} is {size} in {to_unit or 'dimensionless'!r}: a unit must be a "
                        "positive, finite multiple of another")
    return k
