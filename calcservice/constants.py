"""Physical constants used by calcservice, each with value, unit and source.

Every constant is built from :mod:`astropy.constants` where astropy has it, so the
numbers are the published nominal values (IAU 2015 Resolution B3 for the Sun, IAU 2012
Resolution B2 for the au, CODATA for G) and never bare literals in physics code.
Physics modules import the plain float attributes below (``GM_SUN`` in m^3 s^-2 ...),
which are computed once at import time.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from astropy import constants as _c
from astropy import units as _u


@dataclass(frozen=True)
class Constant:
    """A constant as we publish it: symbol, value, unit, description and source."""

    symbol: str
    value: float
    unit: str
    description: str
    source: str

    def as_dict(self) -> dict:
        return {
            "symbol": self.symbol,
            "value": self.value,
            "unit": self.unit,
            "description": self.description,
            "source": self.source,
        }


def _from_astropy(symbol: str, const, description: str, source: str) -> Constant:
    return Constant(symbol, float(const.si.value), str(const.si.unit), description,
                    f"{source} (astropy.constants: {const.reference})")


SECONDS_PER_DAY = 86400.0
DAYS_PER_JULIAN_YEAR = 365.25
#: MJD = JD - 2400000.5 (the Modified Julian Date, IAU 1973; astropy.time's "mjd" format)
MJD_ZERO_JD = 2400000.5

_CONSTANTS = [
    _from_astropy("GM_sun", _c.GM_sun, "nominal solar mass parameter",
                  "IAU 2015 Resolution B3 (Prsa et al. 2016, AJ 152, 41)"),
    _from_astropy("R_sun", _c.R_sun, "nominal solar radius",
                  "IAU 2015 Resolution B3 (Prsa et al. 2016, AJ 152, 41)"),
    _from_astropy("L_sun", _c.L_sun, "nominal solar luminosity",
                  "IAU 2015 Resolution B3 (Prsa et al. 2016, AJ 152, 41)"),
    _from_astropy("au", _c.au, "astronomical unit", "IAU 2012 Resolution B2"),
    _from_astropy("pc", _c.pc, "parsec, 648000/pi au", "IAU 2015 Resolution B2"),
    _from_astropy("G", _c.G, "Newtonian constant of gravitation (used only where a mass in kg is asked for)",
                  "CODATA"),
    _from_astropy("M_sun", _c.M_sun, "solar mass in kg, GM_sun / G", "IAU 2015 Resolution B3 with CODATA G"),
    Constant("m_H", float((_c.m_p + _c.m_e).si.value), "kg", "mass of the hydrogen atom, m_p + m_e",
             f"CODATA (astropy.constants: {_c.m_p.reference})"),
    _from_astropy("m_u", _c.u, "atomic mass constant", "CODATA"),
    _from_astropy("k_B", _c.k_B, "Boltzmann constant", "CODATA"),
    _from_astropy("c", _c.c, "speed of light in vacuum", "CODATA (exact)"),
    Constant("day", SECONDS_PER_DAY, "s", "day of 86400 SI seconds", "IAU (SI day)"),
    Constant("julian_year", DAYS_PER_JULIAN_YEAR * SECONDS_PER_DAY, "s", "Julian year of 365.25 d",
             "IAU 1976 (astropy.units.yr)"),
    Constant("k_gauss", 0.01720209895, "au^(3/2) d^-1 solMass^(-1/2)", "Gaussian gravitational constant",
             "IAU 1976 System of Astronomical Constants"),
]

CONSTANTS: dict[str, Constant] = {c.symbol: c for c in _CONSTANTS}

# Plain floats for physics code (SI unless the name says otherwise).
GM_SUN = CONSTANTS["GM_sun"].value            # m^3 s^-2
R_SUN = CONSTANTS["R_sun"].value              # m
L_SUN = CONSTANTS["L_sun"].value              # W
AU = CONSTANTS["au"].value                    # m
PARSEC = CONSTANTS["pc"].value                # m
G = CONSTANTS["G"].value                      # m^3 kg^-1 s^-2
M_SUN = CONSTANTS["M_sun"].value              # kg
M_H = CONSTANTS["m_H"].value                  # kg
M_U = CONSTANTS["m_u"].value                  # kg
K_B = CONSTANTS["k_B"].value                  # J K^-1
C_LIGHT = CONSTANTS["c"].value                # m s^-1
JULIAN_YEAR = CONSTANTS["julian_year"].value  # s
AU_KM = AU / 1e3                              # km
C_LIGHT_KM_S = C_LIGHT / 1e3                  # km s^-1
R_SUN_KM = R_SUN / 1e3                        # km
TWO_PI = 2.0 * math.pi

# Sanity: the astropy unit system agrees with the constants we publish.
assert abs((1 * _u.au).to_value(_u.m) - AU) == 0.0


def constants_used(symbols) -> dict:
    """The published form of the named constants (for a response's provenance)."""
    return {s: CONSTANTS[s].as_dict() for s in symbols}


# Stellar winds (issue 5): 1 au per Julian year in km/s, the 4.74047 of proper motions and
# expansion parallaxes, derived rather than typed so it follows the au and the year above.
CONSTANTS["au_per_julian_year"] = Constant(
    "au_per_julian_year", AU_KM / JULIAN_YEAR, "km s^-1",
    "1 au per Julian year (4.74047 km/s): converts a proper motion in arcsec/yr at 1 pc to km/s",
    "IAU 2012 Resolution B2 au divided by the Julian year of 365.25 d (IAU 1976)")
KM_S_PER_AU_PER_YEAR = CONSTANTS["au_per_julian_year"].value   # km s^-1
