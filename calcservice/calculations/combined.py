"""Declarations: orbital parallax from a spectroscopic and an astrometric orbit together."""

import numpy as np

from ..physics import astrometric as phys
from ..physics.angles import sin_degrees
from ..physics.spectroscopic import companion_mass, mass_function
from ..registry import ANGLE, INCLINATION, POSITIVE, Calculation, Constraint, Input, Output, Warning, register
from .astrometric import HEINTZ_1978, IAU_2015_B2, LUMINOSITY_FRACTION, SKY, VAN_DE_KAMP_1967
from .common import (HILDITCH_2001, IAU_2012_B2, IAU_2015_B3, SPEED, SYMBOLS, cited, conventions, eccentricity,
                     period, primary_less_massive, semi_amplitude, with_speed_check)

#: the sources of a mass: Hilditch's formulas with GM_sun (IAU 2015 B3)
MASS = (HILDITCH_2001, IAU_2015_B3)


def _beta_needs_primary_mass(luminosity_fraction, primary_mass, **_):
    return np.asarray(luminosity_fraction is None or primary_mass is not None)


def _beta_below_fractional_mass(period, k1, eccentricity, inclination, primary_mass, luminosity_fraction,
                                k2=None, **_):
    """beta < B, with B from the mass function at the given i (where beta and M1 are given)."""
    if luminosity_fraction is None or primary_mass is None or k2 is not None:
        return np.asarray(True)
    sin_i = sin_degrees(inclination)     # as the physics takes it, so that the two agree at the boundary
    m2 = companion_mass(mass_function(period, k1, eccentricity), primary_mass, sin_i)
    return np.asarray(luminosity_fraction) < m2 / (primary_mass + m2)


def _check(inputs, outputs):
    k2 = inputs.get("k2")
    q = outputs.get("mass_ratio")
    out = [] if k2 is None or q is None else primary_less_massive(q)
    # a single-lined orbit: the companion's mass from the mass function at i, as sb1 gives it and warns of it
    m2, m1 = outputs.get("m2"), inputs.get("primary_mass")
    if k2 is None and m2 is not None and m1 is not None and np.any(m2 > m1):
        out.append(Warning("companion_more_massive", "the companion comes out more massive than the primary; "
                           "if it is not seen in the spectrum it may be a compact object or a hidden binary",
                           np.broadcast_to(m2 > m1, np.shape(m2))))
    return out


register(Calculation(
    name="orbital-parallax",
    path="/v1/combined/orbital-parallax",
    title="Orbital parallax: distance and masses from combined orbits",
    summary="Distance and masses from a double-lined spectroscopic orbit plus the visual orbit's angular "
            "semi-major axis and inclination, or from a single-lined orbit plus the photocentric orbit of a pair "
            "whose companion is dark (a_phot = a1) or of known light fraction.",
    inputs=(
        period(),
        semi_amplitude("k1", "1 (the primary), from the spectroscopic orbit", 24.6),
        Input("k2", "km/s", "radial-velocity semi-amplitude of star 2 (double-lined case: give this with "
              "angular_semimajor_axis, or photocentre_semimajor_axis instead)", SPEED, required=False,
              example=31.9),
        eccentricity(),
        Input("inclination", "deg", "inclination of the astrometric orbit (0 < i < 180 deg); masses depend on "
              "sin i only", INCLINATION, example=58.0),
        Input("angular_semimajor_axis", "mas", "angular semi-major axis of the relative (visual) orbit "
              "(double-lined case)", POSITIVE, required=False, example=9.84),
        Input("photocentre_semimajor_axis", "mas", "angular semi-major axis of the photocentre's orbit "
              "(single-lined case, instead of k2 and angular_semimajor_axis)", POSITIVE, required=False,
              example=2.12),
        Input("primary_mass", "solMass", "mass of the primary (single-lined case; gives M2 and a)", POSITIVE,
              required=False, example=1.31),
        Input("luminosity_fraction", "", "the companion's fraction of the light, beta = L2/(L1 + L2), in the "
              "single-lined case (needs primary_mass); leave out for a dark companion", LUMINOSITY_FRACTION,
              required=False, example=0.0),
        Input("omega", "deg", "argument of periastron of the primary's orbit from the radial velocities "
              "(optional; returned as the relative orbit's omega to compare with the visual orbit)", ANGLE,
              required=False, example=37.0, period=360.0),
    ),
    outputs=cited((
        Output("parallax", "mas", "orbital parallax",
               "parallax = a'' / a (double-lined); alpha'' / (a1 (1 - beta/B)) (single-lined)"),
        Output("distance", "pc", "distance", "d = 1000 / parallax[mas]"),
        Output("m1", "solMass", "mass of the primary", "M1 = M1 sin^3 i / sin^3 i (double-lined); given (single-lined)"),
        Output("m2", "solMass", "mass of the secondary",
               "M2 = M2 sin^3 i / sin^3 i (double-lined); root of M2^3 sin^3 i / (M1 + M2)^2 = f(M) (single-lined)"),
        Output("total_mass", "solMass", "total mass", "M1 + M2"),
        Output("mass_ratio", "", "mass ratio q = M2/M1", "q = K1/K2 (double-lined); M2/M1 (single-lined)"),
        Output("semimajor_axis", "au", "relative semi-major axis", "a = (a1 + a2) sin i / sin i; a = a1 / B"),
        Output("a1", "au", "semi-major axis of the primary's orbit", "a1 = K1 P (1 - e^2)^{1/2} / (2 pi sin i)"),
        Output("a2", "au", "semi-major axis of the secondary's orbit", "a2 = K2 P (1 - e^2)^{1/2} / (2 pi sin i)"),
        Output("photocentre_semimajor_axis_au", "au", "semi-major axis of the photocentre's orbit",
               "alpha = a1 (1 - beta / B); alpha = a1 for a dark companion"),
        Output("omega_relative", "deg", "argument of periastron of the relative orbit, to compare with the visual "
               "or photocentric orbit's (for the photocentre of a dark companion compare omega itself)",
               "omega_relative = omega + 180 deg", period=360.0),
    ), {"parallax": (HEINTZ_1978, VAN_DE_KAMP_1967, IAU_2015_B2), "distance": (IAU_2015_B2,), "m1": MASS,
        "m2": MASS, "total_mass": MASS, "mass_ratio": (HILDITCH_2001,),
        "semimajor_axis": (HILDITCH_2001, IAU_2015_B3, IAU_2012_B2),
        "photocentre_semimajor_axis_au": (VAN_DE_KAMP_1967, IAU_2012_B2), "omega_relative": (HEINTZ_1978,)},
        (HILDITCH_2001, IAU_2012_B2)),
    function=phys.combined,
    references=(HILDITCH_2001, HEINTZ_1978, VAN_DE_KAMP_1967, IAU_2015_B3, IAU_2012_B2, IAU_2015_B2),
    constants=("GM_sun", "au", "pc", "day"),
    conventions={
        **conventions("radial_velocity", "omega", "inclination", "mass_ratio"),
        "parallax": SKY["parallax"],
        "kepler": SKY["kepler"],
        "combination": "period, eccentricity and inclination are shared by both orbits; the spectroscopic omega "
                       "is the primary's, the visual orbit's omega is the relative orbit's: omega_relative = "
                       "omega + 180 deg. A dark companion's photocentre is the primary, whose orbit has the "
                       "spectroscopic omega itself",
        "photocentre": "alpha = a (B - beta) = a1 (1 - beta/B), B = M2/(M1 + M2): needs beta < B",
    }
    | {"symbols": SYMBOLS["orbital-parallax"]},
    constraints=(
        Constraint(("luminosity_fraction", "primary_mass"),
                   "a luminous companion's light fraction needs primary_mass (alpha = a1 (1 - beta/B)); "
                   "leave luminosity_fraction out for a dark companion", _beta_needs_primary_mass),
        Constraint(("luminosity_fraction",),
                   "beta must be below the fractional mass B = M2/(M1 + M2) that the orbit gives, or the "
                   "photocentre would not move with the primary", _beta_below_fractional_mass),
    ),
    exclusive=(("k2", "photocentre_semimajor_axis"), ("angular_semimajor_axis", "photocentre_semimajor_axis")),
    at_most_one=(("k2", "primary_mass"), ("k2", "luminosity_fraction")),
    check=with_speed_check(_check, ("k1", "k2")),
    example={"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 24.6, "sigma": 0.3},
             "k2": {"value": 31.9, "sigma": 0.4}, "eccentricity": {"value": 0.31, "sigma": 0.01},
             "inclination": {"value": 58.0, "sigma": 0.8}, "angular_semimajor_axis": {"value": 9.84, "sigma": 0.07}},
))
