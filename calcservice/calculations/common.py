"""Inputs, conventions and references shared by several declarations."""

import dataclasses

import numpy as np

from ..constants import C_LIGHT_KM_S
from ..registry import ECCENTRICITY, INCLINATION, POSITIVE, Domain, Input, Warning

class SpeedDomain(Domain):
    """A speed of matter, bounded by the speed of light, said in full (not rounded to 6 digits)."""

    def describe(self) -> str:
        return f"must be > {self.low:.9g} and < {self.high:.9g}, the speed of light"


#: a speed of matter: above 0 and below the speed of light (CODATA, exact), refused otherwise
SPEED = SpeedDomain(0.0, C_LIGHT_KM_S, low_open=True, high_open=True)
#: a line-of-sight velocity of matter (either sign), slower than light
VELOCITY = SpeedDomain(-C_LIGHT_KM_S, C_LIGHT_KM_S, low_open=True, high_open=True)
#: above this fraction of c the Newtonian formulas lose accuracy: their relative corrections are of
#: order (v/c)^2, 1 % at 0.1 c (common practice for where special relativity starts to matter)
RELATIVISTIC_FRACTION = 0.1
#: the relative error a number derived from a few decimal inputs can carry from their rounding to doubles, their
#: conversion to canonical units and a few roundings of the arithmetic (half a unit of 2^-52 each): up to 4 units for
#: a momentum ratio (Mdot2 v2) / (Mdot1 v1) with the roles swapped.  Such a number compared with an edge at which a
#: warning starts (1 for the stronger wind or the heavier star, 1e-4 for Eichler & Usov's range, 0.01 per orbit for a
#: secular change, 1000 GHz for the radio Gaunt factor) is taken as on the edge within it, where the decimals given
#: put it (outputs are not changed)
EDGE_ROUNDING = 4.0 * np.finfo(float).eps

def cited(outputs, sources, default=()):
    """``outputs`` each with the references its formula comes from: ``sources[name]``, else ``default``."""
    return tuple(dataclasses.replace(o, references=tuple(sources.get(o.name, default))) for o in outputs)


HILDITCH_2001 = ("R. W. Hilditch (2001), An Introduction to Close Binary Stars, "
                 "Cambridge University Press, ch. 2")
IAU_2015_B3 = "IAU 2015 Resolution B3 on nominal solar and planetary conversion constants (Prsa et al. 2016, AJ 152, 41)"
IAU_2012_B2 = "IAU 2012 Resolution B2 on the re-definition of the astronomical unit"

CONVENTIONS = {
    "radial_velocity": "positive when receding",
    "omega": "argument of periastron of the primary's orbit (spectroscopic convention); "
             "the relative orbit of the secondary about the primary has omega + 180 deg",
    "inclination": "0 to 180 deg, above 90 deg retrograde on the sky; masses depend on sin i only",
    "mass_ratio": "q = M2/M1 = K1/K2; star 1 is the primary, the star whose semi-amplitude is k1",
    "time": "Julian Date (days) unless another format is given",
}

#: what an inclination given as "isotropic" means (the engine draws cos i uniform on [0, 1))
ISOTROPIC = ("inclination \"isotropic\": random orientations, cos i drawn uniform on [0, 1) (i from 0 to 90 deg; what "
             "depends on sin i only is the same for the retrograde half), by Monte Carlo: the results are the "
             "distribution over orientations for an inclination not known at all, not a measurement of it")

#: q as a ratio of masses, where no semi-amplitudes are given (astrometry, geometry)
MASS_RATIO = "q = M2/M1; star 1 is the primary"


#: the symbols of each calculation's formulas and the inputs and outputs they stand for, by calculation
SYMBOLS = {
    "sb1": ("P = period, K1 = k1, e = eccentricity, M1 = primary_mass, i = inclination, f(M) = mass_function, M2 = "
            "m2, q = mass_ratio, a = semimajor_axis, a1 = a1 (primary's orbit about the centre of mass)"),
    "sb2": ("P = period, K1 = k1, K2 = k2, e = eccentricity, i = inclination, q = mass_ratio, M1 = m1, M2 = m2, a = "
            "semimajor_axis (relative orbit), a1, a2 = the stars' orbits about the centre of mass"),
    "visual": ("P = period, a'' = angular_semimajor_axis, parallax in mas, d = distance, a = semimajor_axis (relative"
               " orbit), M1 = m1, M2 = m2, q = mass_ratio, B = fractional_mass"),
    "campbell": ("A, B, F, G = the Thiele-Innes constants, a = angular_semimajor_axis, i = inclination, omega, node"),
    "thiele-innes": ("a = angular_semimajor_axis, i = inclination, w = omega, W = node"),
    "photocentre": ("alpha'' = photocentre_semimajor_axis, alpha = photocentre_semimajor_axis_au, P = period, M1 = "
                    "primary_mass, M2 = m2, beta = luminosity_fraction, B = fractional_mass, f_ast = "
                    "astrometric_mass_function, a = semimajor_axis (relative orbit), q = mass_ratio"),
    "orbital-parallax": ("P = period, K1 = k1, K2 = k2, e = eccentricity, i = inclination, a'' = "
                         "angular_semimajor_axis, alpha'' = photocentre_semimajor_axis, alpha = "
                         "photocentre_semimajor_axis_au, M1 = m1 (primary_mass), M2 = m2, beta = luminosity_fraction,"
                         " B = M2/(M1 + M2), f(M) = P K1^3 (1 - e^2)^{3/2} / (2 pi GM_sun), a = semimajor_axis "
                         "(relative orbit), a1, a2 = the stars' orbits about the centre of mass, omega"),
    "ephemeris": ("t = a time of times, T0 = t_periastron, P = period, e = eccentricity, omega (omega0 at T0), "
                  "omega_dot, Pdot = period_derivative, n(t) = cycles since T0, M = mean_anomaly, E = eccentric "
                  "anomaly, nu = true_anomaly, r = separation_au, K1 = k1, K2 = k2, gamma, M1 = m1, M2 = m2, a = "
                  "semimajor_axis, a'' = angular_semimajor_axis, i = inclination, Omega = node, u = argument of "
                  "latitude of the relative orbit, rho = projected_separation, theta = position_angle"),
    "geometry": ("P = period, e = eccentricity, M1 = m1, M2 = m2, q = mass_ratio, a = semimajor_axis, r = separation,"
                 " v = speed, r_L = Roche-lobe radius, R1 = radius1, R2 = radius2"),
    "mid-eclipse": ("P = period, e = eccentricity, omega, i = inclination, T0 = t_periastron, nu = true anomaly, M = "
                    "mean anomaly, nu_min = nu at mid-eclipse, nu_conj = nu at conjunction, phi = phase, rho = "
                    "projected separation, a = semimajor_axis, M1 + M2 = total_mass, R1 = radius1, R2 = radius2, "
                    "omega_dot, Pdot = period_derivative; dates listed from after"),
    "collision": ("Mdot1 = mdot1, Mdot2 = mdot2, v1 = vinf1, v2 = vinf2, eta = momentum_ratio, D = separation, e = "
                  "eccentricity, a = semimajor_axis, P = period, M1 = m1, M2 = m2, E = eccentric anomaly, nu = "
                  "true_anomaly, mu1 = mu1, mu2 = mu2, r1, r2 = stagnation distances, chi = cooling parameter, T = "
                  "post-shock temperature, k = k_B, theta, psi = half-opening angles"),
    "mass-loss-radio": ("S = flux_density, nu = frequency, D = distance, v = vinf, mu = mu, Z = z_rms, gamma = "
                        "gamma_e, T = temperature, f = clumping, g = gaunt_factor, R_star = stellar_radius, Mdot = "
                        "mass_loss_rate"),
    "mass-loss-period-change": ("P = period, Pdot = period_derivative, M1 = m1, M2 = m2, dM/dt = the system's rate of"
                                " mass change, dM1/dt = star 1's"),
    "mass-loss-momentum-ratio": ("eta = momentum_ratio, psi, theta = opening_half_angle, Mdot1 = mdot1, Mdot2 = "
                                 "mdot2, v1 = vinf1, v2 = vinf2"),
    "mass-loss-recipe": ("L = luminosity, M = mass, Teff = teff, Z/Z_sun = metallicity (vink-2001), ratio = "
                         "vinf_over_vesc, Y = helium_fraction, Z = metal_fraction (nugis-lamers-2000), Gamma_e = "
                         "eddington_factor, Mdot = mass_loss_rate"),
    "shell-distance": ("P = period, s = shell_spacing, v = expansion_speed, D = distance"),
    "shell-forecast": ("P = period, n = shells, t_n = formation_epoch + n P, t_obs = observation_date, v = "
                       "expansion_speed, D = distance (or 1000 / parallax), theta = angular_radius, R = radius"),
}


def conventions(*keys, **more) -> dict:
    """The shared ``CONVENTIONS`` named by ``keys`` (only those that apply to a calculation), then ``more``."""
    return {**{k: CONVENTIONS[k] for k in keys}, **more}


def period(**kw) -> Input:
    return Input("period", "d", "orbital period", POSITIVE, example=kw.pop("example", 41.6), **kw)


def eccentricity(**kw) -> Input:
    return Input("eccentricity", "", "orbital eccentricity", ECCENTRICITY, example=kw.pop("example", 0.31), **kw)


def inclination(required=False, isotropic=True, **kw) -> Input:
    return Input("inclination", "deg", "orbital inclination (0 < i < 180 deg), or \"isotropic\" for random "
                 "orientations (cos i uniform, Monte Carlo)" if isotropic else "orbital inclination",
                 INCLINATION, required=required, isotropic=isotropic, example=kw.pop("example", 71.0), **kw)


def semi_amplitude(name: str, star: str, example: float) -> Input:
    return Input(name, "km/s", f"radial-velocity semi-amplitude of star {star}", SPEED,
                 example=example)


def relativistic_speeds(inputs, names, outputs=None) -> list:
    """A warning for each speed of ``names`` above 0.1 c in size in some system: an input as given, or else the
    output of that name (a speed the calculation derives, such as a periastron speed, is as Newtonian as one given)."""
    out = []
    for name in names:
        v = inputs.get(name)
        if v is None and outputs is not None:
            v = outputs.get(name)
        if v is None:
            continue
        # a velocity (gamma) may be negative: approaching at 0.1 c is as relativistic as receding
        fast = np.abs(np.asarray(v)) > RELATIVISTIC_FRACTION * C_LIGHT_KM_S
        if np.count_nonzero(fast):      # np.any costs a few us more on the one system of a request
            out.append(Warning("relativistic_speed", f"{name} above 0.1 c: the Newtonian formulas used here lose "
                               "accuracy (relative corrections of order (v/c)^2, 1 % at 0.1 c and growing)",
                               fast, subject=name))
    return out


def primary_less_massive(q) -> list[Warning]:
    """The warning of a double-lined orbit (sb2, the combined orbit) whose star 1 is the lighter, q = K1/K2 > 1;
    K1 = K2 in two units (45300 m/s and 45.3 km/s) is q = 1, though the conversion's rounding may put it just above."""
    above = q > 1.0 + EDGE_ROUNDING
    if np.any(above):
        return [Warning("primary_less_massive", "q = K1/K2 > 1: star 1 (the star of k1) is the less massive star",
                        above)]
    return []


def with_speed_check(check, names):
    """``check`` followed by the relativistic-speed warnings on the speeds ``names`` (inputs, or outputs)."""
    def combined(inputs, outputs):
        return [*(check(inputs, outputs) if check is not None else ()), *relativistic_speeds(inputs, names, outputs)]
    return combined
