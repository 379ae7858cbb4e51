"""Stellar winds in massive binaries: colliding winds and mass-loss rates.

Canonical units: mass-loss rates in solMass/yr, speeds in km/s, lengths in au (stellar
radii in solRad), angles in degrees at the edges (radians inside), temperatures in K,
periods in days, period derivatives in s/yr, radio flux densities in mJy at frequencies in
GHz, distances in kpc (radio) or pc (shell parallax), luminosities in solLum.

Every function is elementwise numpy: it broadcasts over arrays of any shape, never loops
over systems and lets NaN pass through.  Choices (a recipe, a mode) arrive as strings and
are branched on with ``np.where`` so an unknown string gives NaN, never an exception.
Equation numbers of the cited papers are quoted from memory: check them against the papers.
"""

from __future__ import annotations

import math

import numpy as np

from ..constants import (AU, C_LIGHT, DAYS_PER_JULIAN_YEAR, GM_SUN, JULIAN_YEAR, K_B, KM_S_PER_AU_PER_YEAR, L_SUN, M_H,
                         M_SUN, R_SUN, SECONDS_PER_DAY, TWO_PI)
from . import kepler
from .angles import cos_degrees, wrap_degrees
from .exact import elapsed, two_product
from .spectroscopic import kepler_semimajor_axis

_PI = math.pi
_HALF_PI = 0.5 * math.pi

#: centimetres per au, for the cooling parameter's d_12 = d / (10^12 cm)
_CM_PER_AU = AU * 100.0
AU_IN_SOLAR_RADII = AU / R_SUN
#: grams in a solar mass (IAU 2015 nominal GM_sun over CODATA G), for the cgs free-free opacity
M_SUN_G = M_SUN * 1.0e3

# ---------------------------------------------------------------------------------------
# The collision of two winds
# ---------------------------------------------------------------------------------------


def momentum_ratio(mdot1, vinf1, mdot2, vinf2):
    """Wind-momentum ratio eta = (Mdot2 v2) / (Mdot1 v1), as given (may exceed 1).

    Point-source winds at their terminal speeds (Stevens, Blondin & Pollock 1992, ApJ 386, 265).
    """
    return (mdot2 * vinf2) / (mdot1 * vinf1)


def weaker_over_stronger(eta):
    """The momentum ratio with the roles ordered so that it is <= 1: min(eta, 1/eta)."""
    return np.where(eta > 1.0, 1.0 / eta, eta)


def stagnation_distances(separation, eta):
    """Distances (same unit as D) of the stagnation point from star 1 and from star 2.

    Ram-pressure balance on the line of centres, Mdot1 v1 / r1^2 = Mdot2 v2 / r2^2 with
    r1 + r2 = D, gives r1 = D / (1 + eta^{1/2}) and r2 = D eta^{1/2} / (1 + eta^{1/2})
    (Stevens, Blondin & Pollock 1992, ApJ 386, 265, eq. 1), with eta = Mdot2 v2 / (Mdot1 v1)
    as given: the labels stay the user's, whichever wind is stronger.  r2 is never D - r1, which
    cancels for a weak second wind (1e-11 lost at eta = 1e-10).
    """
    root = np.sqrt(eta)
    return separation / (1.0 + root), separation * root / (1.0 + root)


def opening_half_angle_eichler_usov(eta):
    """Asymptotic half-opening angle (rad) of the shock cone about the weaker-wind star.

    theta = 2.1 (1 - eta^{2/5} / 4) eta^{1/3}   for 1e-4 <= eta <= 1
    (Eichler & Usov 1993, ApJ 402, 271, eq. 1), eta <= 1 the weaker/stronger momentum ratio.
    """
    return 2.1 * (1.0 - eta**0.4 / 4.0) * np.cbrt(eta)


#: the Taylor coefficients of sin x - x cos x = sum_k (-1)^(k+1) 2k x^(2k+1) / (2k+1)!, k = 1..13: the first term
#: left out is below 1e-21 of the sum for 0 <= x <= pi/2
_SINE_MINUS_X_COSINE = tuple((-1) ** (k + 1) * 2 * k / math.factorial(2 * k + 1) for k in range(1, 14))


def _tan_minus_angle(phi):
    """tan(phi) - phi = (sin phi - phi cos phi) / cos phi, the numerator by its Taylor series, whose terms fall
    factorially on [0, pi/2]: no cancellation anywhere (tan phi - phi lost 2e-12 near phi = 0.01)."""
    phi = np.asarray(phi, dtype=float)
    p2 = phi * phi
    series = _SINE_MINUS_X_COSINE[-1]
    for coefficient in _SINE_MINUS_X_COSINE[-2::-1]:
        series = coefficient + p2 * series
    with np.errstate(divide="ignore", invalid="ignore"):
        return phi * p2 * series / np.cos(phi)


def opening_half_angle_canto_raga_wilkin(eta, iterations=64):
    """Asymptotic half-opening angle (rad) of the thin-shell cone about the weaker-wind star.

    Cantó, Raga & Wilkin (1996), ApJ 469, 729, eq. 28: theta_inf - tan(theta_inf) = pi / (1 - eta),
    with theta_inf in (pi/2, pi] the asymptotic angle seen from the stronger-wind star and the
    half-angle psi = pi - theta_inf.  Substituting gives tan(psi) - psi = pi eta / (1 - eta),
    whose left side increases from 0 at psi = 0 to infinity at psi = pi/2: one root, found by
    bisection on [0, min(pi/2, (3 c)^{1/3})], c = pi eta / (1 - eta), for a fixed number of steps
    (2^-64 of the bracket, below rounding) and polished by one Newton step kept inside the final
    bracket.  eta = 1 gives pi/2.  Since tan psi - psi >= psi^3 / 3 on [0, pi/2), the root lies below
    (3 c)^{1/3}, and above 0.7 of that bound: the bracket is relative, so a tiny cone keeps its digits
    (from [0, pi/2] a root below ~1e-11 rad, eta below ~1e-38, kept only 2^-64 pi/2 of absolute precision:
    5e-15 relative at eta = 1e-38, 40 % at eta = 1e-60).
    """
    eta = np.asarray(eta, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        target = np.where(eta < 1.0, _PI * eta / (1.0 - eta), np.inf)
    lo = np.zeros_like(target)
    hi = np.minimum(_HALF_PI, np.cbrt(3.0 * target))
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        below = _tan_minus_angle(mid) < target
        lo = np.where(below, mid, lo)
        hi = np.where(below, hi, mid)
    psi = 0.5 * (lo + hi)
    with np.errstate(divide="ignore", invalid="ignore"):
        step = (_tan_minus_angle(psi) - target) / np.tan(psi) ** 2
    polished = np.clip(psi - np.where(np.isfinite(step), step, 0.0), lo, hi)
    psi = np.where(np.isfinite(target), polished, _HALF_PI)
    return np.where(np.isfinite(eta) & (eta >= 0.0), psi, np.nan)


#: the widest half-angle of the Eichler & Usov (1993) fit, 2.1 x 3/4 rad (90.24 deg), at eta = 1
EICHLER_USOV_WIDEST = 2.1 * 0.75


def momentum_ratio_from_eichler_usov(half_angle, iterations=64):
    """Invert Eichler & Usov (1993): the eta <= 1 whose half-opening angle is ``half_angle`` (rad).

    With u = eta^{1/15}, theta / 2.1 = u^5 - u^11 / 4, which increases on 0 <= u <= 1 (its
    derivative 5 u^4 - 11 u^10 / 4 > 0 there) from 0 to 3/4: theta above 2.1 * 3/4 rad
    (90.24 deg) has no solution (NaN).  Since (3/4) u^5 <= u^5 - u^11/4 <= u^5 there, the root lies in
    [t^{1/5}, min(1, (4 t / 3)^{1/5})], t = theta / 2.1, a bracket 6 % wide at any t (from [0, 1] a tiny
    cone's u, ~1e-7, kept only a few digits), bisected for a fixed number of steps.  eta = u^15 multiplies the
    rounding of u by 15, so a last Newton step is taken in ln eta on the residual written without logarithms,
    r = eta^{1/3} (1 - eta^{2/5} / 4) / t - 1, whose slope d ln(theta) / d ln(eta) = 1/3 - (1/10) eta^{2/5} /
    (1 - eta^{2/5} / 4) lies in [1/5, 1/3]: eta to a few roundings (u^15 alone was 3e-15 off at small cones).
    """
    target = np.asarray(half_angle, dtype=float) / 2.1
    # the widest angle, given in degrees (90.24085273310467), comes back as 0.7500000000000001 of 2.1 rad
    target = np.where((target > 0.75) & (target <= 0.75 * (1.0 + 4.0 * np.finfo(float).eps)), 0.75, target)
    lo = target ** 0.2
    hi = np.minimum(1.0, (target / 0.75) ** 0.2)
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        below = mid**5 - mid**11 / 4.0 < target
        lo = np.where(below, mid, lo)
        hi = np.where(below, hi, mid)
    u = 0.5 * (lo + hi)
    eta = u**15
    with np.errstate(divide="ignore", invalid="ignore"):
        power = eta**0.4
        bracket = 1.0 - 0.25 * power
        residual = np.cbrt(eta) * bracket / target - 1.0
        polished = eta * (1.0 - residual / (1.0 / 3.0 - 0.1 * power / bracket))
    eta = np.where(np.isfinite(polished) & (polished > 0.0), polished, eta)
    ok = np.isfinite(target) & (target >= 0.0) & (target <= 0.75)
    return np.where(ok, eta, np.nan)


def momentum_ratio_from_canto_raga_wilkin(half_angle):
    """Invert Cantó, Raga & Wilkin (1996) in closed form: with c = tan(psi) - psi, eta = c / (pi + c).

    ``half_angle`` psi in radians, 0 <= psi < pi.  psi = pi/2 (a plane shock) is eta = 1.  Beyond it the cone
    about star 2 opens wider than a plane: star 2 has the stronger wind, and their eq. 28 for the roles swapped,
    tan(psi1) - psi1 = pi / (eta - 1) about star 1 with psi1 = pi - psi, is again eta = c / (pi + c) (c < -pi there).
    """
    psi = np.asarray(half_angle, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        c = _tan_minus_angle(psi)
        eta = np.where(psi == _HALF_PI, 1.0, c / (_PI + c))
    ok = (psi >= 0.0) & (psi < _PI)
    return np.where(ok, eta, np.nan)


def cooling_parameter(vinf, distance_au, mdot):
    """Cooling parameter chi = t_cool / t_esc of the shocked wind.

    chi ~ v_8^4 d_12 / Mdot_-7   (Stevens, Blondin & Pollock 1992, ApJ 386, 265, eq. 8), with v_8 the
    pre-shock speed in 1000 km/s, d_12 the distance of the star to the contact discontinuity in
    1e12 cm and Mdot_-7 the mass-loss rate in 1e-7 solMass/yr.  chi >~ 1: adiabatic shock;
    chi <~ 1: radiative shock.
    """
    return (vinf / 1.0e3) ** 4 * (distance_au * _CM_PER_AU / 1.0e12) / (mdot / 1.0e-7)


def post_shock_temperature(vinf, mu):
    """Temperature (K) behind a strong adiabatic shock: k T = (3/16) mu m_H v^2.

    Rankine–Hugoniot jump for a gamma = 5/3 gas (e.g. Stevens, Blondin & Pollock 1992), mu the mean
    mass per particle of the shocked (ionised) gas in units of the hydrogen-atom mass m_H.
    """
    v = vinf * 1.0e3
    return 3.0 / 16.0 * mu * M_H * v * v / K_B


#: mean mass per particle of fully ionised gas of solar composition (X = 0.70, Y = 0.28,
#: Z = 0.02: 1/mu = 2X + 3Y/4 + Z/2), the default for the post-shock temperature
SOLAR_IONISED_MU = 1.0 / (2.0 * 0.70 + 0.75 * 0.28 + 0.5 * 0.02)


def _at_separation(separation, eta, mdot1, vinf1, mdot2, vinf2, suffix=""):
    r1, r2 = stagnation_distances(separation, eta)
    return {
        "stagnation_distance1" + suffix: r1,
        "stagnation_distance2" + suffix: r2,
        "cooling_parameter1" + suffix: cooling_parameter(vinf1, r1, mdot1),
        "cooling_parameter2" + suffix: cooling_parameter(vinf2, r2, mdot2),
    }


def orbital_semimajor_axis(semimajor_axis=None, period=None, m1=None, m2=None):
    """The relative semi-major axis (au): as given, or from Kepler's third law with P and M1 + M2."""
    if semimajor_axis is not None:
        return semimajor_axis
    if period is not None and m1 is not None and m2 is not None:
        return kepler_semimajor_axis(period, m1 + m2)
    return None


def collision(mdot1, mdot2, vinf1, vinf2, separation=None, eccentricity=None, semimajor_axis=None,
              period=None, m1=None, m2=None, phase=None, true_anomaly=None, mu1=None, mu2=None, **_):
    """Colliding-wind geometry and shock properties at a separation, or around an orbit.

    With an orbit (eccentricity with a, or with P, M1 and M2) the separation-dependent outputs
    are given at periastron a(1 - e) and apastron a(1 + e), and at the phase (mean anomaly
    2 pi phase from periastron, Kepler's equation solved) or the true anomaly nu, where
    r = a (1 - e cos E) = a (1 - e^2) / (1 + e cos nu).
    """
    eta_given = momentum_ratio(mdot1, vinf1, mdot2, vinf2)
    eta = weaker_over_stronger(eta_given)
    out = {
        "momentum_ratio": eta,
        "opening_half_angle_eu93": np.degrees(opening_half_angle_eichler_usov(eta)),
        "opening_half_angle_crw96": np.degrees(opening_half_angle_canto_raga_wilkin(eta)),
        "post_shock_temperature1": post_shock_temperature(vinf1, SOLAR_IONISED_MU if mu1 is None else mu1),
        "post_shock_temperature2": post_shock_temperature(vinf2, SOLAR_IONISED_MU if mu2 is None else mu2),
    }
    winds = (mdot1, vinf1, mdot2, vinf2)
    if separation is not None:
        out["separation"] = separation
        out.update(_at_separation(separation, eta_given, *winds))
        return out
    a = orbital_semimajor_axis(semimajor_axis, period, m1, m2)
    if a is None or eccentricity is None:
        return out
    e = eccentricity
    out["semimajor_axis"] = a
    out["separation_periastron"] = a * (1.0 - e)
    out["separation_apastron"] = a * (1.0 + e)
    out.update(_at_separation(a * (1.0 - e), eta_given, *winds, suffix="_periastron"))
    out.update(_at_separation(a * (1.0 + e), eta_given, *winds, suffix="_apastron"))
    if phase is not None:
        # the phase from the nearest periastron, so that a phase just below a whole number keeps its digits
        big_e = kepler.eccentric_anomaly(TWO_PI * (phase - np.round(phase)), e)
        nu = np.degrees(kepler.true_from_eccentric(big_e, e))
        r = a * kepler.separation_from_eccentric(big_e, e)
    elif true_anomaly is not None:
        nu = true_anomaly
        # r/a = (1 - e^2)/(1 + e cos nu) with cos^2(nu/2) in degrees: exact near apastron as e -> 1
        r = a * kepler.separation_from_half_angle_cosine(cos_degrees(0.5 * np.asarray(nu, dtype=float)), e)
    else:
        return out
    out["true_anomaly"] = wrap_degrees(nu)
    out["separation"] = r
    out.update(_at_separation(r, eta_given, *winds))
    return out


def mass_loss_from_momentum_ratio(vinf1, vinf2, mdot1=None, mdot2=None, momentum_ratio=None,
                                  opening_half_angle=None, opening_angle_formula=None, **_):
    """The other star's mass-loss rate from the wind-momentum ratio eta = Mdot2 v2 / (Mdot1 v1).

    eta is given, or inferred from a measured half-opening angle (deg) of the shock cone by
    inverting Eichler & Usov (1993) or Cantó, Raga & Wilkin (1996).  Then
    Mdot2 = eta Mdot1 v1 / v2, or Mdot1 = Mdot2 v2 / (eta v1).
    """
    eta = momentum_ratio
    if eta is None and opening_half_angle is not None:
        psi = np.radians(opening_half_angle)
        formula = opening_angle_formula or "crw96"
        eta = np.where(formula == "eu93", momentum_ratio_from_eichler_usov(psi),
                       np.where(formula == "crw96", momentum_ratio_from_canto_raga_wilkin(psi), np.nan))
    if eta is None:
        return {}
    out = {"momentum_ratio": eta}
    if mdot1 is not None:
        out["mdot2"] = eta * mdot1 * vinf1 / vinf2
    elif mdot2 is not None:
        out["mdot1"] = mdot2 * vinf2 / (eta * vinf1)
    return out


# ---------------------------------------------------------------------------------------
# Mass loss from thermal free-free radio emission
# ---------------------------------------------------------------------------------------

#: Wright & Barlow (1975), MNRAS 170, 41, eq. 8: Mdot = WRIGHT_BARLOW_COEFFICIENT mu v S^{3/4} D^{3/2}
#: / (Z gamma^{1/2} g^{1/2} nu^{1/2}) solMass/yr, with v in km/s, S in Jy, D in kpc and nu in Hz
WRIGHT_BARLOW_COEFFICIENT = 0.095
#: Leitherer & Robert (1991), ApJ 377, 629: g = 9.77 (1 + 0.13 log10(T^{3/2} / (Z nu)))
GAUNT_SCALE = 9.77
GAUNT_SLOPE = 0.13


def ion_mix(number_fractions, mass_numbers, charges):
    """Mean atomic weight per ion mu, rms ionic charge Z and electrons per ion gamma of a mixture.

    mu = sum n_i A_i / sum n_i, Z^2 = sum n_i Z_i^2 / sum n_i, gamma = sum n_i Z_i / sum n_i
    (the definitions of Wright & Barlow 1975, MNRAS 170, 41).  Sequences over ion species.
    """
    n = np.asarray(number_fractions, dtype=float)
    total = n.sum()
    mu = float(np.dot(n, mass_numbers) / total)
    z_rms = float(np.sqrt(np.dot(n, np.square(charges)) / total))
    gamma = float(np.dot(n, charges) / total)
    return mu, z_rms, gamma


#: Defaults by wind type: (mu, Z, gamma, electron temperature K) for the radio-emitting outer wind,
#: derived from a stated composition with ion_mix (compositions are common practice, from memory):
#:  o-star: H and He with n(He)/n(H) = 0.1, H+ and He+; T = 0.5 Teff of a mid-O star, 2e4 K;
#:  wn:     pure He, He+ (He recombines to He+ far out in Wolf-Rayet winds); T = 1e4 K;
#:  wc:     He and C with n(C)/n(He) = 0.2, He+ and C2+; T = 1e4 K.
WIND_TYPES = {
    "o-star": ion_mix((1.0, 0.1), (1.008, 4.003), (1, 1)) + (2.0e4,),
    "wn": ion_mix((1.0,), (4.003,), (1,)) + (1.0e4,),
    "wc": ion_mix((1.0, 0.2), (4.003, 12.011), (1, 2)) + (1.0e4,),
}


def radio_gaunt_factor(temperature, frequency_hz, z_rms):
    """Free-free Gaunt factor at radio frequencies, g = 9.77 (1 + 0.13 log10(T^{3/2} / (Z nu))).

    Leitherer & Robert (1991), ApJ 377, 629, with T in K and nu in Hz.
    """
    return GAUNT_SCALE * (1.0 + GAUNT_SLOPE * np.log10(temperature**1.5 / (z_rms * frequency_hz)))


def wright_barlow_mass_loss(flux_density_jy, frequency_hz, distance_kpc, vinf, mu, z_rms, gamma_e, gaunt):
    """Mass-loss rate (solMass/yr) of a smooth, spherical, isothermal, fully accelerated wind.

    Mdot = 0.095 mu v S^{3/4} D^{3/2} / (Z gamma^{1/2} g^{1/2} nu^{1/2})
    (Wright & Barlow 1975, MNRAS 170, 41, eq. 8), v in km/s, S in Jy, D in kpc, nu in Hz.
    """
    return (WRIGHT_BARLOW_COEFFICIENT * mu * vinf * flux_density_jy**0.75 * distance_kpc**1.5
            / (z_rms * np.sqrt(gamma_e * gaunt * frequency_hz)))


#: Rayleigh-Jeans free-free absorption, alpha = 0.018 T^{-3/2} Z^2 n_e n_i nu^{-2} g cm^-1 in cgs
#: (G. B. Rybicki & A. P. Lightman 1979, Radiative Processes in Astrophysics, eq. 5.19b)
FREE_FREE_ABSORPTION_CGS = 0.018
#: the radio photosphere should lie where the wind coasts at v_inf: a beta = 1 velocity law
#: v = v_inf (1 - R/r) reaches 90 % of v_inf at 10 R (common practice)
RADIO_PHOTOSPHERE_MIN_STELLAR_RADII = 10.0


def radio_photosphere_radius(mdot_smooth, frequency_hz, vinf, mu, z_rms, gamma_e, temperature, gaunt):
    """Radius (solRad) of the radio photosphere: the impact parameter where the free-free tau is 1.

    In a smooth wind at constant speed n_i = Mdot / (4 pi r^2 v mu m_H), n_e = gamma n_i, and
    alpha = 0.018 T^{-3/2} Z^2 n_e n_i nu^{-2} g = C / r^4 (Rybicki & Lightman 1979, eq. 5.19b);
    along the line of sight at impact parameter p, tau(p) = int C / (p^2 + z^2)^2 dz = pi C / (2 p^3)
    (Wright & Barlow 1975, MNRAS 170, 41), so tau = 1 at p = (pi C / 2)^{1/3}.  Mdot is the
    smooth-wind rate that gives the observed flux (a clumped wind has the same emission measure).
    """
    n_r2 = (mdot_smooth * M_SUN_G / JULIAN_YEAR) / (4.0 * _PI * vinf * 1.0e5 * mu * M_H * 1.0e3)
    c = FREE_FREE_ABSORPTION_CGS * temperature**-1.5 * z_rms**2 * gamma_e * n_r2**2 * gaunt / frequency_hz**2
    return np.cbrt(0.5 * _PI * c) / (R_SUN * 100.0)


def radio_mass_loss(flux_density, frequency, distance, vinf, wind_type=None, mu=None, z_rms=None, gamma_e=None,
                    temperature=None, clumping=None, stellar_radius=None, **_):
    """Thermal radio mass-loss rate with the wind type's defaults for what is not given.

    A clumped wind of volume filling factor f (clumps of density 1/f times the mean, empty
    between) emits like a smooth wind f^{-1/2} times denser, so Mdot = Mdot_smooth f^{1/2}
    (common practice for density-squared diagnostics).  The radius of the radio photosphere
    is always given, and in stellar radii when the star's radius is.
    """
    d_mu, d_z, d_gamma, d_t = WIND_TYPES.get(wind_type or "o-star", (np.nan,) * 4)
    mu = d_mu if mu is None else mu
    z_rms = d_z if z_rms is None else z_rms
    gamma_e = d_gamma if gamma_e is None else gamma_e
    temperature = d_t if temperature is None else temperature
    f = 1.0 if clumping is None else clumping
    nu = frequency * 1.0e9
    g = radio_gaunt_factor(temperature, nu, z_rms)
    mdot = wright_barlow_mass_loss(flux_density * 1.0e-3, nu, distance, vinf, mu, z_rms, gamma_e, g)
    photosphere = radio_photosphere_radius(mdot, nu, vinf, mu, z_rms, gamma_e, temperature, g)
    out = {"mass_loss_rate": mdot * np.sqrt(f), "gaunt_factor": g, "radio_photosphere_radius": photosphere}
    if stellar_radius is not None:
        out["radio_photosphere_stellar_radii"] = photosphere / stellar_radius
    return out


# ---------------------------------------------------------------------------------------
# Mass loss from the rate of change of the orbital period
# ---------------------------------------------------------------------------------------


def relative_period_change(period, period_derivative):
    """Pdot / P in 1/yr, from P in days and Pdot in s/yr."""
    return period_derivative / (period * SECONDS_PER_DAY)


#: the largest change of the period over one orbit, |dP/dt| as a pure number (:func:`.orbit.period_change_rate`),
#: for which the modes' orbit-averaged relations are used without a warning: they hold for a change slow against
#: the orbit (adiabatic), and a measured secular change is 1e-10 to 1e-5 of the period per orbit (common
#: practice, a rule of thumb)
SECULAR_CHANGE_PER_ORBIT = 0.01


def jeans_mass_loss(period, period_derivative, m1, m2):
    """Rate (solMass/yr, positive = mass leaving) of an isotropic fast wind from the binary.

    A wind that leaves with the specific orbital angular momentum of its star keeps a M
    constant (Jeans 1924, MNRAS 85, 2; e.g. Hilditch 2001, sect. 4.3), so P ~ M^-2 and
    Pdot / P = -2 (dM/dt) / (M1 + M2); the result is -dM/dt = (M1 + M2) Pdot / (2 P).
    """
    return 0.5 * (m1 + m2) * relative_period_change(period, period_derivative)


def conservative_transfer_rate(period, period_derivative, m1, m2):
    """Rate (solMass/yr) of conservative mass transfer from star 1 to star 2, -dM1/dt.

    With M1 + M2 and the orbital angular momentum constant, P ~ (M1 M2)^-3, so
    Pdot / P = 3 (dM1/dt) (M1 - M2) / (M1 M2) (e.g. Hilditch 2001, sect. 4.3); the result is
    -dM1/dt = -M1 M2 Pdot / (3 P (M1 - M2)), positive when star 1 loses mass to star 2.
    """
    return -m1 * m2 * relative_period_change(period, period_derivative) / (3.0 * (m1 - m2))


def reemission_factor(m1, m2):
    """The bracket of isotropic re-emission, (Pdot/P) / (dM1/dt) = 3 M1/(M M2) - 3/M1 + 1/M in 1/solMass
    (see :func:`reemission_transfer_rate`); 0 at q = M1/M2 = (1 + 10^{1/2})/3.

    Over one denominator it is (3 M1^2 - 2 M1 M2 - 3 M2^2) / (M M1 M2); the numerator, which vanishes at the
    root, is summed from exact products (:func:`.exact.two_product`) so that it keeps the digits the masses
    give it: the rate near the root is as exact as its conditioning allows, not 1e-16 / (q - 1.387) worse.
    """
    m1 = np.asarray(m1, dtype=float)
    m2 = np.asarray(m2, dtype=float)
    p11, e11 = two_product(m1, m1)
    p12, e12 = two_product(m1, m2)
    p22, e22 = two_product(m2, m2)
    # 3 (p11 - p22) - 2 p12: p11 - p22 is exact near the root (Sterbenz: q^2 ~ 1.9 < 2), its triple carried
    # exactly, and the last difference of two close doubles exact again
    triple, e3 = two_product(3.0, p11 - p22)
    numerator = (triple - 2.0 * p12) + (e3 + 3.0 * (e11 - e22) - 2.0 * e12)
    return numerator / ((m1 + m2) * m1 * m2)


def reemission_transfer_rate(period, period_derivative, m1, m2):
    """Rate (solMass/yr) of transfer from star 1 that star 2 re-emits at once, -dM1/dt (isotropic re-emission).

    Star 2 keeps its mass; the matter leaves the system from star 2's neighbourhood with star 2's
    specific orbital angular momentum, (M1/M)^2 a^2 Omega (Soberman, Phinney & van den Heuvel 1997,
    "isotropic re-emission").  For a circular orbit, J = M1 M2 (G a / M)^{1/2} and
    dJ/dt = (dM1/dt) (M1/M)^2 a^2 Omega give da/a = 2 (dM1) [M1/(M M2) - 1/M1 + 1/(2M)] (the orbit
    widens for q = M1/M2 < 1.28) and, with Kepler's third law,
    Pdot/P = (dM1/dt) [3 M1/(M M2) - 3/M1 + 1/M], M = M1 + M2.  The result is
    -dM1/dt = -(Pdot/P) / [3 M1/(M M2) - 3/M1 + 1/M]; the period does not change to first order at
    3 q^2 - 2 q - 3 = 0, q = (1 + 10^{1/2})/3 = 1.387.
    """
    return -relative_period_change(period, period_derivative) / reemission_factor(m1, m2)


REEMISSION_STATIONARY_Q = (1.0 + np.sqrt(10.0)) / 3.0     # the mass ratio M1/M2 at which Pdot = 0 in that mode


def period_change_mass_loss(period, period_derivative, m1, m2, mode=None, **_):
    """Mass-loss (or transfer) rate from Pdot in the chosen mode ("jeans", "conservative" or
    "isotropic-re-emission")."""
    rate = np.where(mode == "jeans", jeans_mass_loss(period, period_derivative, m1, m2),
                    np.where(mode == "conservative", conservative_transfer_rate(period, period_derivative, m1, m2),
                             np.where(mode == "isotropic-re-emission",
                                      reemission_transfer_rate(period, period_derivative, m1, m2), np.nan)))
    # + 0.0: a period that does not change gives a rate of 0.0, not the -0.0 of -M1 M2 0 / (...)
    return {"mass_loss_rate": rate + 0.0,
            "relative_period_derivative": relative_period_change(period, period_derivative)}


# ---------------------------------------------------------------------------------------
# Mass-loss recipes
# ---------------------------------------------------------------------------------------

#: electron-scattering opacity used for the Eddington factor in the bi-stability jump
#: temperature (cm^2/g; a partly ionised H-He atmosphere near the jump, from memory)
VINK_ELECTRON_OPACITY = 0.325
#: v_inf / v_esc on each side of the bi-stability jump (Vink, de Koter & Lamers 2001, sect. 7)
VINK_RATIO_HOT = 2.6
VINK_RATIO_COOL = 1.3
#: Teff ranges (K) of the model grids behind each fit (Vink, de Koter & Lamers 2001, eqs. 24-25; from memory):
#: hot side 27.5 kK < Teff <= 50 kK (open below), cool side 12.5-22.5 kK (closed); between them lies the jump
VINK_HOT_RANGE = (27.5e3, 50.0e3)
VINK_COOL_RANGE = (12.5e3, 22.5e3)


def eddington_factor(luminosity, mass, opacity_cgs=VINK_ELECTRON_OPACITY):
    """Electron-scattering Eddington factor Gamma_e = kappa_e L / (4 pi c G M).

    Written by Vink, de Koter & Lamers (2001) as 7.66e-5 sigma_e (L/Lsun) / (M/Msun), sigma_e in cm^2/g.
    """
    kappa = opacity_cgs * 0.1   # cm^2/g -> m^2/kg
    return kappa * luminosity * L_SUN / (4.0 * _PI * C_LIGHT * GM_SUN * mass)


def vink_jump_temperature(luminosity, mass, metallicity):
    """Temperature (K) of the bi-stability jump, Vink, de Koter & Lamers (2001), A&A 369, 574, eqs. 14-15.

    log <rho> = -14.94 + 3.1857 Gamma_e + 0.85 log(Z/Zsun); T_jump = 61.2 + 2.59 log <rho> (kK).
    """
    log_rho = -14.94 + 3.1857 * eddington_factor(luminosity, mass) + 0.85 * np.log10(metallicity)
    return 1.0e3 * (61.2 + 2.59 * log_rho)


def vink_hot_log_mass_loss(luminosity, mass, teff, metallicity, ratio):
    """log Mdot (solMass/yr) on the hot side of the jump (27.5 kK < Teff <= 50 kK).

    log Mdot = -6.697 + 2.194 log(L/1e5) - 1.313 log(M/30) - 1.226 log(ratio/2) + 0.933 log(Teff/4e4)
               - 10.92 [log(Teff/4e4)]^2 + 0.85 log(Z/Zsun)   (Vink, de Koter & Lamers 2001, eq. 24).
    """
    x = np.log10(teff / 4.0e4)
    return (-6.697 + 2.194 * np.log10(luminosity / 1.0e5) - 1.313 * np.log10(mass / 30.0)
            - 1.226 * np.log10(ratio / 2.0) + 0.933 * x - 10.92 * x * x + 0.85 * np.log10(metallicity))


def vink_cool_log_mass_loss(luminosity, mass, teff, metallicity, ratio):
    """log Mdot (solMass/yr) on the cool side of the jump (12.5 kK <= Teff <= 22.5 kK).

    log Mdot = -6.688 + 2.210 log(L/1e5) - 1.339 log(M/30) - 1.601 log(ratio/2) + 1.07 log(Teff/2e4)
               + 0.85 log(Z/Zsun)   (Vink, de Koter & Lamers 2001, eq. 25).
    """
    return (-6.688 + 2.210 * np.log10(luminosity / 1.0e5) - 1.339 * np.log10(mass / 30.0)
            - 1.601 * np.log10(ratio / 2.0) + 1.07 * np.log10(teff / 2.0e4) + 0.85 * np.log10(metallicity))


def vink_log_mass_loss(luminosity, mass, teff, metallicity=1.0, vinf_over_vesc=None):
    """log Mdot of Vink, de Koter & Lamers (2001): the hot formula above the jump temperature, else the cool.

    Without v_inf/v_esc, 2.6 is used on the hot side and 1.3 on the cool side (their sect. 7).
    """
    hot = teff >= vink_jump_temperature(luminosity, mass, metallicity)
    ratio_hot = VINK_RATIO_HOT if vinf_over_vesc is None else vinf_over_vesc
    ratio_cool = VINK_RATIO_COOL if vinf_over_vesc is None else vinf_over_vesc
    return np.where(hot, vink_hot_log_mass_loss(luminosity, mass, teff, metallicity, ratio_hot),
                    vink_cool_log_mass_loss(luminosity, mass, teff, metallicity, ratio_cool))


def nugis_lamers_log_mass_loss(luminosity, helium_fraction, metal_fraction):
    """log Mdot (solMass/yr) of a Wolf-Rayet wind, Nugis & Lamers (2000), A&A 360, 227, eq. 22.

    log Mdot = -11.00 + 1.29 log(L/Lsun) + 1.73 log Y + 0.47 log Z, Y and Z the surface mass
    fractions of helium and of all heavier elements.
    """
    return (-11.00 + 1.29 * np.log10(luminosity) + 1.73 * np.log10(helium_fraction)
            + 0.47 * np.log10(metal_fraction))


RECIPES = ("vink-2001", "nugis-lamers-2000")


def recipe_mass_loss(recipe, luminosity, mass=None, teff=None, metallicity=None, vinf_over_vesc=None,
                     helium_fraction=None, metal_fraction=None, **_):
    """Mass-loss rate (solMass/yr) by the named recipe; a recipe's missing inputs give NaN."""
    nan = np.full(np.shape(luminosity), np.nan)
    out = {}
    if mass is not None and teff is not None:
        z = 1.0 if metallicity is None else metallicity
        vink = vink_log_mass_loss(luminosity, mass, teff, z, vinf_over_vesc)
        if recipe == "vink-2001":
            out["bistability_jump_temperature"] = vink_jump_temperature(luminosity, mass, z)
            out["eddington_factor"] = eddington_factor(luminosity, mass)
    else:
        vink = nan
    if helium_fraction is not None and metal_fraction is not None:
        nl = nugis_lamers_log_mass_loss(luminosity, helium_fraction, metal_fraction)
    else:
        nl = nan
    log_mdot = np.where(recipe == "vink-2001", vink, np.where(recipe == "nugis-lamers-2000", nl, nan))
    out["log_mass_loss_rate"] = log_mdot
    out["mass_loss_rate"] = 10.0**log_mdot
    return out


# ---------------------------------------------------------------------------------------
# Distance from periodic dust shells (expansion parallax)
# ---------------------------------------------------------------------------------------


def shell_distance(period, shell_spacing, expansion_speed=None, distance=None, parallax=None, **_):
    """Expansion parallax of shells made once per orbit.

    Successive shells lie v P apart, seen as an angle s: D = v P / s, i.e.
    D (pc) = v (km/s) P (yr) / (4.74047 s (arcsec)) with 1 au/yr = 4.74047 km/s (IAU 2012 au,
    Julian year).  Given the distance instead, v = 4.74047 s D / P.
    """
    years = period / (JULIAN_YEAR / SECONDS_PER_DAY)
    spacing_arcsec = shell_spacing * 1.0e-3
    if expansion_speed is not None:
        distance = expansion_speed * years / (KM_S_PER_AU_PER_YEAR * spacing_arcsec)
    elif parallax is not None:
        distance = 1.0e3 / parallax
    elif distance is None:
        return {}
    speed = KM_S_PER_AU_PER_YEAR * spacing_arcsec * distance / years
    return {"distance": distance, "parallax": 1.0e3 / distance, "expansion_speed": speed}


def shell_age_days(period, formation_epoch, observation_date, shells):
    """Days since shell n formed, t - (t0 + n P), from the exact t - t0 and n P (:func:`.exact.elapsed`).

    A shell that forms at the observation date in the decimals given (age 0) can come out below 0 by the rounding of
    t, t0 and P to doubles (half a unit of 2^-52 of each of t, t0 and n P): within 4 units of their sizes the age is
    0, so that such a shell is one formed by then, of radius 0.
    """
    _n, age = elapsed(observation_date, formation_epoch, period, shells)
    slack = 4.0 * np.finfo(float).eps * (np.abs(observation_date) + np.abs(formation_epoch)
                                         + np.abs(np.multiply(shells, period)))
    return np.where((age < 0.0) & (age >= -slack), 0.0, age)


def shell_forecast(period, formation_epoch, expansion_speed, observation_date, shells, distance=None, parallax=None,
                   **_):
    """Angular radius at ``observation_date`` of each shell made once per orbit: the inverse of :func:`shell_distance`.

    Shell n forms at t_n = formation_epoch + n P and expands at v, so at t its radius is
    R = v (t - t_n) and its angular radius theta = R / D, i.e.
    theta (arcsec) = v (km/s) (t - t_n) (yr) / (4.74047 D (pc)) with 1 au/yr = 4.74047 km/s (IAU 2012 au,
    Julian year).  Times in JD (days), ``shells`` the whole numbers n (an extra trailing axis).  The age
    t - t_n = (t - t0) - n P is summed from the exact t - t0 and n P (:func:`.exact.elapsed`): t0 + n P
    rounded to a Julian Date first loses 1e-12 of a 100-day age.
    """
    d = distance if distance is not None else 1.0e3 / parallax
    years = shell_age_days(period, formation_epoch, observation_date, shells) / DAYS_PER_JULIAN_YEAR
    radius = expansion_speed * years / KM_S_PER_AU_PER_YEAR
    return {"angular_radius": 1.0e3 * radius / d, "radius": radius, "age": years}
