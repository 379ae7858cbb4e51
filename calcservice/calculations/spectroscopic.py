"""Declarations: single- and double-lined spectroscopic binaries."""

import numpy as np

from ..physics import spectroscopic as phys
from ..registry import POSITIVE, Calculation, Input, Output, Warning, register
from .common import (HILDITCH_2001, IAU_2012_B2, IAU_2015_B3, ISOTROPIC, SYMBOLS, cited, conventions,
                     eccentricity, inclination, period, primary_less_massive, semi_amplitude, with_speed_check)

#: the sources of a formula: Hilditch's, with GM_sun (IAU 2015 B3) in a mass, the au (IAU 2012 B2) in a length
MASS = (HILDITCH_2001, IAU_2015_B3)
LENGTH = (HILDITCH_2001, IAU_2012_B2)
KEPLER = (HILDITCH_2001, IAU_2015_B3, IAU_2012_B2)


def _sb1_check(inputs, outputs):
    out = []
    if inputs.get("inclination") is not None and inputs.get("primary_mass") is None:
        out.append(Warning("inclination_unused", "an inclination without a primary_mass determines no companion "
                           "mass; give primary_mass to get m2 and the semi-major axis"))
    m1 = inputs.get("primary_mass")
    # without an inclination the minimum mass tells it already: M2 >= M2,min at every inclination
    m2 = outputs.get("m2", outputs.get("m2_min"))
    if m2 is not None and m1 is not None and np.any(m2 > m1):
        out.append(Warning("companion_more_massive", "the companion comes out more massive than the primary"
                           + ("" if "m2" in outputs else " at any inclination (its minimum mass is)") + "; "
                           "if it is not seen in the spectrum it may be a compact object or a hidden binary",
                           np.broadcast_to(m2 > m1, np.shape(m2))))
    return out


def _sb2_check(inputs, outputs):
    return primary_less_massive(outputs["mass_ratio"])


register(Calculation(
    name="sb1",
    path="/v1/spectroscopic/sb1",
    title="Single-lined spectroscopic binary",
    summary="Mass function and a1 sin i of a single-lined orbit; with a primary mass the minimum companion mass, "
            "and with an inclination too the companion mass and the semi-major axis.",
    inputs=(
        period(),
        semi_amplitude("k1", "1 (the star whose lines are seen)", 23.4),
        eccentricity(),
        Input("primary_mass", "solMass", "mass of the primary (star 1)", POSITIVE, required=False, example=1.9),
        inclination(),
    ),
    outputs=cited((
        Output("mass_function", "solMass", "spectroscopic mass function M2^3 sin^3 i / (M1+M2)^2",
               "f(M) = P K1^3 (1 - e^2)^{3/2} / (2 pi GM_sun)"),
        Output("a1_sin_i", "au", "projected semi-major axis of the primary's orbit",
               "a1 sin i = K1 P (1 - e^2)^{1/2} / (2 pi)"),
        Output("m2_min", "solMass", "minimum companion mass (i = 90 deg)",
               "positive root of M2^3 / (M1 + M2)^2 = f(M)"),
        Output("m2", "solMass", "companion mass at the given inclination",
               "positive root of M2^3 sin^3 i / (M1 + M2)^2 = f(M)"),
        Output("mass_ratio", "", "q = M2/M1 at the given inclination", "q = M2 / M1"),
        Output("semimajor_axis", "au", "relative semi-major axis", "a^3 = GM_sun (M1 + M2) P^2 / (4 pi^2)"),
        Output("a1", "au", "semi-major axis of the primary's orbit", "a1 = a1 sin i / sin i"),
    ), {"mass_function": MASS, "m2_min": MASS, "m2": MASS, "mass_ratio": MASS, "semimajor_axis": KEPLER}, LENGTH),
    function=phys.sb1,
    jacobian=phys.sb1_jacobian,
    references=(HILDITCH_2001, IAU_2015_B3, IAU_2012_B2),
    constants=("GM_sun", "au", "day"),
    conventions=conventions("radial_velocity", "omega", "inclination", isotropic=ISOTROPIC,
                            mass_ratio="q = M2/M1, star 1 the primary (the star whose semi-amplitude is k1)")
    | {"symbols": SYMBOLS["sb1"]},
    check=with_speed_check(_sb1_check, ("k1",)),
    example={"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 23.4, "sigma": 0.3},
             "eccentricity": {"value": 0.31, "sigma": 0.01}, "primary_mass": {"value": 1.9, "sigma": 0.1},
             "inclination": {"value": 71.0, "sigma": 2.0}},
))

register(Calculation(
    name="sb2",
    path="/v1/spectroscopic/sb2",
    title="Double-lined spectroscopic binary",
    summary="Mass ratio, M sin^3 i of both stars and the projected orbits; with an inclination the masses, "
            "the semi-major axis and the periastron and apastron distances.",
    inputs=(
        period(),
        semi_amplitude("k1", "1 (the primary)", 38.2),
        semi_amplitude("k2", "2 (the secondary)", 51.7),
        eccentricity(),
        inclination(),
    ),
    outputs=cited((
        Output("mass_ratio", "", "mass ratio q = M2/M1", "q = K1 / K2"),
        Output("m1_sin3i", "solMass", "M1 sin^3 i", "M1 sin^3 i = P (1 - e^2)^{3/2} (K1 + K2)^2 K2 / (2 pi GM_sun)"),
        Output("m2_sin3i", "solMass", "M2 sin^3 i", "M2 sin^3 i = P (1 - e^2)^{3/2} (K1 + K2)^2 K1 / (2 pi GM_sun)"),
        Output("a_sin_i", "au", "projected relative semi-major axis", "a sin i = (K1 + K2) P (1 - e^2)^{1/2} / (2 pi)"),
        Output("a1_sin_i", "au", "projected semi-major axis of the primary's orbit",
               "a1 sin i = K1 P (1 - e^2)^{1/2} / (2 pi)"),
        Output("a2_sin_i", "au", "projected semi-major axis of the secondary's orbit",
               "a2 sin i = K2 P (1 - e^2)^{1/2} / (2 pi)"),
        Output("m1", "solMass", "mass of the primary", "M1 = M1 sin^3 i / sin^3 i"),
        Output("m2", "solMass", "mass of the secondary", "M2 = M2 sin^3 i / sin^3 i"),
        Output("total_mass", "solMass", "total mass", "M1 + M2"),
        Output("semimajor_axis", "au", "relative semi-major axis", "a = a sin i / sin i"),
        Output("periastron_distance", "au", "separation at periastron", "a (1 - e)"),
        Output("apastron_distance", "au", "separation at apastron", "a (1 + e)"),
    ), {"mass_ratio": (HILDITCH_2001,), "m1_sin3i": MASS, "m2_sin3i": MASS, "m1": MASS, "m2": MASS,
        "total_mass": MASS}, LENGTH),
    function=phys.sb2,
    jacobian=phys.sb2_jacobian,
    references=(HILDITCH_2001, IAU_2015_B3, IAU_2012_B2),
    constants=("GM_sun", "au", "day"),
    conventions=conventions("radial_velocity", "omega", "inclination", "mass_ratio", isotropic=ISOTROPIC)
    | {"symbols": SYMBOLS["sb2"]},
    check=with_speed_check(_sb2_check, ("k1", "k2")),
    example={"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 38.2, "sigma": 0.4},
             "k2": {"value": 51.7, "sigma": 0.6}, "eccentricity": {"value": 0.31, "sigma": 0.01},
             "inclination": {"value": 71.0, "sigma": 2.0}},
))
