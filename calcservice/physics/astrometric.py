"""Astrometric and combined orbits: dynamical masses, Thiele–Innes constants, photocentres,
orbital parallaxes.

Canonical units: period P in days, angles on the sky (semi-major axes, parallaxes) in
milliarcseconds, distances in parsecs, orbital angles in degrees, masses in solar masses,
lengths in au.  Angle-to-length conversions need no constant beyond the definition of the
parsec (1 au at 1 pc subtends 1 arcsec, IAU 2015 Resolution B2), so
a [au] = a [mas] / parallax [mas] = a [mas] * distance [pc] / 1000.

Kepler's third law is written with the IAU 2015 nominal solar mass parameter GM_sun
(not the Gaussian constant, not a^3 = M P^2 in years): M = 4 pi^2 a^3 / (GM_sun P^2).

Sky-plane conventions (W. D. Heintz 1978, *Double Stars*, Reidel; L. Binnendijk
1960, *Properties of Double Stars*, University of Pennsylvania Press): x points north,
y east, position angles count from north through east; the relative orbit of the
secondary about the primary is x = A X + F Y, y = B X + G Y with X = cos E - e,
Y = sqrt(1 - e^2) sin E, and its argument of periastron omega is the relative orbit's
(omega_primary + 180 deg).
"""

from __future__ import annotations

import numpy as np

from .angles import cos_degrees, sin_degrees, wrap_degrees
from .spectroscopic import (companion_mass, kepler_semimajor_axis, kepler_total_mass, mass_function,
                            projected_semimajor_axis)

MAS_PER_ARCSEC = 1000.0


# ----------------------------------------------------------------------------- distances

def parallax_from_distance(distance):
    """Parallax (mas) of a distance (pc): parallax = 1000 / d."""
    return MAS_PER_ARCSEC / distance


def distance_from_parallax(parallax):
    """Distance (pc) of a parallax (mas): d = 1000 / parallax."""
    return MAS_PER_ARCSEC / parallax


def linear_size(angle, parallax):
    """A length in au from its angle (mas) and the parallax (mas): a = a'' / parallax."""
    return angle / parallax


# ----------------------------------------------------------------------------- visual orbits

def individual_masses(total_mass, mass_ratio=None, fractional_mass=None):
    """M1 and M2 from the total mass and q = M2/M1 or B = M2/(M1 + M2).

    M2 = B M, M1 = (1 - B) M, with B = q / (1 + q) and 1 - B = 1 / (1 + q) (not 1 - B, which cancels for a
    large q).  Returns (m1, m2, B, 1 - B).
    """
    if fractional_mass is not None:
        b = fractional_mass
        rest = 1.0 - b
    else:
        b = mass_ratio / (1.0 + mass_ratio)
        rest = 1.0 / (1.0 + mass_ratio)
    return rest * total_mass, b * total_mass, b, rest


def visual(period, angular_semimajor_axis, parallax=None, distance=None, mass_ratio=None,
           fractional_mass=None, **_):
    """Visual orbit + parallax (or distance): a, M1 + M2 and, with q or B, M1 and M2."""
    plx = parallax if parallax is not None else parallax_from_distance(distance)
    a = linear_size(angular_semimajor_axis, plx)
    total = kepler_total_mass(a, period)
    out = {
        "semimajor_axis": a,
        "total_mass": total,
        "parallax": plx,
        "distance": distance_from_parallax(plx),
    }
    if mass_ratio is not None or fractional_mass is not None:
        m1, m2, b, rest = individual_masses(total, mass_ratio, fractional_mass)
        out.update({"m1": m1, "m2": m2, "fractional_mass": b,
                    "mass_ratio": b / rest,
                    "a1": b * a, "a2": rest * a})
    return out


def _per_parallax(parallax, distance):
    """The input that gave the parallax and d ln (1 / parallax) / d that input: a length a'' / parallax grows
    as 1 / parallax (-1 / parallax) or as the distance (+1 / d, parallax = 1000 / d)."""
    if parallax is not None:
        return "parallax", -1.0 / parallax
    return "distance", 1.0 / distance


def visual_jacobian(outputs, period, angular_semimajor_axis, parallax=None, distance=None, mass_ratio=None,
                    fractional_mass=None, **_):
    """The logarithmic derivatives of :func:`visual`'s ``outputs`` with respect to its inputs,
    {output: {input: d ln f / dx}} (canonical units: d, mas, pc).

    Every output is a product of powers (Hilditch 2001, ch. 2, Kepler's third law with GM_sun; the parsec,
    IAU 2015 Resolution B2): with a'' the angular semi-major axis and varpi the parallax (varpi = 1000 / d
    when the distance d is given, so d ln varpi / dd = -1/d),

        a = a'' / varpi                       d ln a / da'' = 1/a'',  d ln a / dvarpi = -1/varpi  (/dd = 1/d)
        M1 + M2 = 4 pi^2 a^3 / (GM_sun P^2)   d ln M / dP = -2/P,  d ln M / da'' = 3/a'',  / dvarpi = -3/varpi
        varpi, d = 1000 / varpi               d ln varpi / dvarpi = 1/varpi,  d ln d / dvarpi = -1/varpi

    With q = M2/M1: B = q / (1 + q) and 1 - B = 1 / (1 + q), so d ln (1 - B) / dq = -1/(1 + q),
    d ln B / dq = 1/q - 1/(1 + q) = 1 / (q (1 + q)), d ln q / dq = 1/q; with B = M2/(M1 + M2) given,
    d ln B / dB = 1/B, d ln (1 - B) / dB = -1/(1 - B), d ln (B / (1 - B)) / dB = 1 / (B (1 - B)).  Then
    M1 = (1 - B) M, M2 = B M, a1 = B a and a2 = (1 - B) a add those to the derivatives of M and a.  An input
    absent from an output's mapping is one it does not depend on."""
    per_axis = 1.0 / angular_semimajor_axis
    name, per_parallax = _per_parallax(parallax, distance)
    a = {"angular_semimajor_axis": per_axis, name: per_parallax}
    total = {"period": -2.0 / period, "angular_semimajor_axis": 3.0 * per_axis, name: 3.0 * per_parallax}
    logarithmic = {
        "semimajor_axis": a,
        "total_mass": total,
        "parallax": {name: -per_parallax},
        "distance": {name: per_parallax},
    }
    if mass_ratio is not None or fractional_mass is not None:
        if fractional_mass is not None:
            given, per_b, per_rest = "fractional_mass", 1.0 / fractional_mass, -1.0 / (1.0 - fractional_mass)
        else:
            # 1 / q and then / (1 + q): q (1 + q) would overflow beyond q ~ 1e154
            given, per_rest = "mass_ratio", -1.0 / (1.0 + mass_ratio)
            per_b = (1.0 / mass_ratio) / (1.0 + mass_ratio)
        logarithmic.update({
            "m1": {**total, given: per_rest},
            "m2": {**total, given: per_b},
            "fractional_mass": {given: per_b},
            "mass_ratio": {given: per_b - per_rest},
            "a1": {**a, given: per_b},
            "a2": {**a, given: per_rest},
        })
    return logarithmic


# ----------------------------------------------------------------------------- Thiele–Innes

def thiele_innes_constants(angular_semimajor_axis, inclination, omega, node):
    """Thiele–Innes constants A, B, F, G from the Campbell elements (a, i, omega, node).

    A = a ( cos w cos W - sin w sin W cos i)
    B = a ( cos w sin W + sin w cos W cos i)
    F = a (-sin w cos W - cos w sin W cos i)
    G = a (-sin w sin W + cos w cos W cos i)
    with w = omega of the relative orbit, W = node (Heintz 1978; Binnendijk 1960).  Sines and cosines
    of the angles in degrees (:mod:`.angles`): cos 90 deg is 0, and cos i near 90 deg keeps its digits.
    """
    a = angular_semimajor_axis
    cos_i = cos_degrees(inclination)
    cw, sw, cn, sn = cos_degrees(omega), sin_degrees(omega), cos_degrees(node), sin_degrees(node)
    return (a * (cw * cn - sw * sn * cos_i),
            a * (cw * sn + sw * cn * cos_i),
            a * (-sw * cn - cw * sn * cos_i),
            a * (-sw * sn + cw * cn * cos_i))


def campbell_elements(A, B, F, G):
    """Campbell elements (a, i, omega, node) from the Thiele–Innes constants.

    From the constants' sums and differences (Heintz 1978):
      p = |(A + G, B - F)| = a (1 + cos i),   m = |(A - G, B + F)| = a (1 - cos i),
      a = (p + m) / 2,   tan^2(i/2) = m / p,
      omega + node = atan2(B - F, A + G),   omega - node = atan2(-B - F, A - G).
    The half-angle forms stay accurate near i = 0 and 90 deg, where the textbook
    a^2 = u + (u^2 - v^2)^{1/2} (u = (A^2+B^2+F^2+G^2)/2, v = AG - BF) loses digits.
    The sky-projected orbit is unchanged by (omega, node) -> (omega + 180, node + 180); we
    resolve it by taking node in [0, 180) deg.  omega is returned in [0, 360) deg, and is
    the relative orbit's.  a = 0 gives NaN throughout.
    """
    p = np.hypot(A + G, B - F)
    m = np.hypot(A - G, B + F)
    a = 0.5 * (p + m)
    a = np.where(a > 0, a, np.nan)
    inclination = np.degrees(2.0 * np.arctan2(np.sqrt(m), np.sqrt(p)))
    total = np.arctan2(B - F, A + G)
    difference = np.arctan2(-B - F, A - G)
    omega = np.degrees(0.5 * (total + difference))
    node = np.degrees(0.5 * (total - difference))
    # the 180-deg ambiguity: move node into [0, 180) and omega with it.  A node a rounding error
    # below 0 comes out of the first step as exactly 180.0: that is node 0 with omega turned back,
    # never 180.0 (a caller reducing node mod 180 would then turn the orbit by 180 deg on the sky).
    turns = np.floor(node / 180.0)
    node = node - 180.0 * turns
    over = node >= 180.0
    node = np.where(over, node - 180.0, node)
    omega = wrap_degrees(omega - 180.0 * (turns + over))      # [0, 360): -1e-14 deg is 0, not 360.0
    finite = np.isfinite(a)
    return (a, np.where(finite, inclination, np.nan), np.where(finite, omega, np.nan),
            np.where(finite, node, np.nan))


def relative_omega(omega_primary):
    """omega of the relative orbit (secondary about primary) from the primary's: omega + 180 deg."""
    return wrap_degrees(omega_primary + 180.0)


def primary_omega(omega_relative):
    """omega of the primary's orbit about the centre of mass from the relative orbit's: omega - 180 deg."""
    return wrap_degrees(omega_relative + 180.0)


def thiele_innes(angular_semimajor_axis, inclination, node, omega=None, omega_primary=None, **_):
    """Campbell elements -> Thiele–Innes constants (omega of the relative orbit, or the primary's + 180).

    The constants are linear in (cos omega, sin omega), so omega_primary + 180 deg negates all four: taken so,
    rather than through omega_primary + 180 rounded (which loses a small omega_primary whole).
    """
    if omega is not None:
        A, B, F, G = thiele_innes_constants(angular_semimajor_axis, inclination, omega, node)
    else:
        A, B, F, G = (-x for x in thiele_innes_constants(angular_semimajor_axis, inclination, omega_primary, node))
    # + 0.0: a constant that vanishes (omega, node or i on a quadrant point) reads 0.0, not the -0.0 of a product
    # with a negative zero or of the negation above
    return {"A": A + 0.0, "B": B + 0.0, "F": F + 0.0, "G": G + 0.0}


def campbell(A, B, F, G, **_):
    """Thiele–Innes constants -> Campbell elements, node in [0, 180) deg."""
    a, i, w, n = campbell_elements(A, B, F, G)
    return {"angular_semimajor_axis": a, "inclination": i, "omega": w, "node": n,
            "omega_primary": primary_omega(w)}


# ----------------------------------------------------------------------------- photocentre

def astrometric_mass_function(photocentre_semimajor_axis, period):
    """Astrometric mass function (solMass) of a photocentric orbit, alpha in au, P in days.

    f_ast = 4 pi^2 alpha^3 / (GM_sun P^2) = (M1 + M2) (B - beta)^3, with B = M2/(M1 + M2)
    and beta = L2/(L1 + L2), since alpha = a (B - beta) (P. van de Kamp 1967, *Principles
    of Astrometry*, Freeman); for a dark companion it is M2^3 / (M1 + M2)^2.
    """
    return kepler_total_mass(photocentre_semimajor_axis, period)


def fractional_mass_from_photocentre(astrometric_mass_function_value, primary_mass, luminosity_fraction=0.0,
                                     iterations=60):
    """The fractional mass B = M2/(M1 + M2) that solves (B - beta)^3 / (1 - B) = f_ast / M1.

    Writing B = beta + (1 - beta) s maps the root to s in (0, 1) with
    s^3 / (1 - s) = r, r = f_ast / (M1 (1 - beta)^2).  The left side rises from 0 to
    infinity, so for beta < 1 there is exactly one root, and it has B > beta: the branch
    where the photocentre moves with the primary.  We solve
    F(y) = 3 ln s - ln(1 - s) - ln r = 0 for y = logit s by Newton's method: F' = 3 - 2 s
    lies in (1, 3) and F is concave, so the iterates converge from any start (after one
    step they rise monotonically to the root) for every system at once.  1 - s is kept
    as 1 / (1 + e^y) so that M2 >> M1 loses no digits.  Returns (B, 1 - B); NaN where no
    root exists (beta >= 1, f_ast <= 0, M1 <= 0).
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        f = np.asarray(astrometric_mass_function_value, dtype=float)
        m1 = np.asarray(primary_mass, dtype=float)
        beta = np.asarray(luminosity_fraction, dtype=float)
        ok = (f > 0) & (m1 > 0) & (beta >= 0) & (beta < 1)
        dark = np.where(ok, 1.0 - beta, np.nan)
        log_r = np.log(np.where(ok, f, np.nan)) - np.log(np.where(ok, m1, np.nan)) - 2.0 * np.log(dark)
        # s ~ r^(1/3) for a light companion, 1 - s ~ 1/r for a heavy one
        y = np.maximum(log_r / 3.0, log_r)
        # each system stops at its own convergence, so that its root does not depend on the other systems of
        # the call (alone or in a batch, at the nominal point or a step of the stencil)
        done = np.zeros(y.shape, dtype=bool)
        for _ in range(iterations):
            log_s = -np.logaddexp(0.0, -y)
            log_1ms = -np.logaddexp(0.0, y)
            s = np.exp(log_s)
            step = (3.0 * log_s - log_1ms - log_r) / (3.0 - 2.0 * s)
            y = np.where(done, y, y - step)
            done |= ~np.isfinite(step) | (np.abs(step) < 1e-14)
            if done.all():
                break
        s = np.exp(-np.logaddexp(0.0, -y))
        one_minus_s = np.exp(-np.logaddexp(0.0, y))
        # exp(y) multiplies the rounding of y by |y| (up to 6e-15 relative in 1 - s where the companion is far
        # heavier than M1 (1 - beta)^2): a last Newton step in y on the residual written without logarithms,
        # h = s^3 M1 (1 - beta)^2 / ((1 - s) f_ast) - 1, moves s and 1 - s by their own factors
        # (ds = s (1 - s) dy).  The factors are taken in an order whose partial products stay near 1/s^2, 1/s and 1
        # (no underflow for any normal f_ast); the step is kept where it is finite and the residual is that of a
        # converged root (an f_ast below the normal range has lost the digits a residual would need)
        residual = (s / one_minus_s) * (s * (m1 * dark / f)) * (s * dark) - 1.0
        dy = -residual / (3.0 - 2.0 * s)
        polished_s, polished_rest = s * (1.0 + one_minus_s * dy), one_minus_s * (1.0 - s * dy)
        good = np.isfinite(polished_s) & np.isfinite(polished_rest) & (np.abs(residual) < 1e-10)
        s, one_minus_s = np.where(good, polished_s, s), np.where(good, polished_rest, one_minus_s)
        return beta + dark * s, dark * one_minus_s


def photocentre(photocentre_semimajor_axis, period, primary_mass, parallax=None, distance=None,
                luminosity_fraction=None, **_):
    """Photocentric orbit + parallax + M1 (+ beta) -> f_ast, M2, a (relative orbit)."""
    beta = 0.0 if luminosity_fraction is None else luminosity_fraction
    plx = parallax if parallax is not None else parallax_from_distance(distance)
    alpha = linear_size(photocentre_semimajor_axis, plx)
    f = astrometric_mass_function(alpha, period)
    b, one_minus_b = fractional_mass_from_photocentre(f, primary_mass, beta)
    m2 = primary_mass * b / one_minus_b
    total = primary_mass + m2
    a = kepler_semimajor_axis(period, total)
    return {
        "astrometric_mass_function": f,
        "m2": m2,
        "semimajor_axis": a,
        "total_mass": total,
        "mass_ratio": m2 / primary_mass,
        "fractional_mass": b,
        "photocentre_semimajor_axis_au": alpha,
        "a1": b * a,
        "parallax": plx,
        "distance": distance_from_parallax(plx),
    }


def photocentre_jacobian(outputs, photocentre_semimajor_axis, period, primary_mass, parallax=None, distance=None,
                         luminosity_fraction=None, **_):
    """The logarithmic derivatives of :func:`photocentre`'s ``outputs`` with respect to its inputs,
    {output: {input: d ln f / dx}} (canonical units: mas, d, solMass, pc; beta dimensionless).

    alpha = alpha'' / varpi and f_ast = 4 pi^2 alpha^3 / (GM_sun P^2) are products of powers (van de Kamp 1967;
    the parsec, IAU 2015 Resolution B2; varpi = 1000 / d when the distance is given):
    d ln alpha / dalpha'' = 1/alpha'', / dvarpi = -1/varpi (/dd = 1/d); d ln f_ast = 3 d ln alpha - 2 dP / P.

    M2 is defined implicitly (:func:`fractional_mass_from_photocentre`) by (M1 + M2)(B - beta)^3 = f_ast with
    B = M2 / (M1 + M2), i.e. by G = 3 ln D - 2 ln T - ln f_ast = 0 with T = M1 + M2 and
    D = (1 - beta) M2 - beta M1 = (B - beta) T > 0.  By the implicit function theorem
    d ln M2 / dx = -(dG/dx) / (M2 dG/dM2), where, with u = B - beta and s = u / (1 - beta) in (0, 1),

        M2 dG/dM2 = 3 (1 - beta) M2 / D - 2 M2 / T = B (3 - 2 s) / s  > 0,
        dG/d ln f_ast = -1,   dG/dM1 = -3 beta / D - 2 / T,   dG/dbeta = -3 T / D = -3 / u,

    so that, with W = 1 / ((1 - beta) B (3 - 2 s)),

        d ln M2 / dx    = u W d ln f_ast / dx   for x = alpha'', varpi (or d), P,
        d ln M2 / dM1   = (3 beta + 2 u) W / T,
        d ln M2 / dbeta = 3 W.

    (3 - 2 s lies in (1, 3): no singularity; beta = 0 gives sb1's companion mass at sin i = 1, d ln M2 / d ln f
    = 1 / (3 - 2 B), d ln M2 / dM1 = 2 / (T (3 - 2 B)).)  u is taken as (f_ast / T)^{1/3}, which the root
    satisfies, rather than B - beta, which loses the digits of a light companion beside a bright one.  The
    derived outputs follow by the chain rule: d ln T = B d ln M2 + [x = M1] / T; d ln q = d ln M2 - [x = M1] / M1;
    d ln B = (1 - B) d ln M2 - [x = M1] / T (1 - B = M1 / T, which keeps its digits for M2 >> M1);
    a = (GM_sun T P^2 / 4 pi^2)^{1/3} (Kepler's third law): d ln a = d ln T / 3 + (2/3) [x = P] / P;
    a1 = B a: d ln B + d ln a.  An input absent from an output's mapping is one it does not depend on."""
    per_axis = 1.0 / photocentre_semimajor_axis
    name, per_parallax = _per_parallax(parallax, distance)
    per_p = 1.0 / period
    alpha = {"photocentre_semimajor_axis": per_axis, name: per_parallax}
    ln_f = {"photocentre_semimajor_axis": 3.0 * per_axis, name: 3.0 * per_parallax, "period": -2.0 * per_p}
    m1, total = primary_mass, outputs["total_mass"]
    b, rest = outputs["fractional_mass"], m1 / total
    beta = 0.0 if luminosity_fraction is None else luminosity_fraction
    dark = 1.0 - beta
    u = np.cbrt(outputs["astrometric_mass_function"] / total)                      # B - beta
    w = 1.0 / (dark * b * (3.0 - 2.0 * u / dark))
    per_f = u * w                                                                  # d ln M2 / d ln f_ast
    ln_m2 = {x: per_f * d for x, d in ln_f.items()}
    ln_m2["primary_mass"] = (3.0 * beta + 2.0 * u) * w / total
    if luminosity_fraction is not None:
        ln_m2["luminosity_fraction"] = 3.0 * w
    ln_total = {x: b * d for x, d in ln_m2.items()}
    ln_total["primary_mass"] = ln_total["primary_mass"] + 1.0 / total
    ln_b = {x: rest * d for x, d in ln_m2.items()}
    ln_b["primary_mass"] = ln_b["primary_mass"] - 1.0 / total
    ln_a = {x: d / 3.0 for x, d in ln_total.items()}
    ln_a["period"] = ln_a["period"] + 2.0 / 3.0 * per_p
    return {
        "astrometric_mass_function": ln_f,
        "m2": ln_m2,
        "semimajor_axis": ln_a,
        "total_mass": ln_total,
        "mass_ratio": {**ln_m2, "primary_mass": ln_m2["primary_mass"] - 1.0 / m1},
        "fractional_mass": ln_b,
        "a1": {x: ln_b[x] + ln_a[x] for x in ln_a},
        "photocentre_semimajor_axis_au": alpha,
        "parallax": {name: -per_parallax},
        "distance": {name: per_parallax},
    }


# ----------------------------------------------------------------------------- orbital parallax

def orbital_parallax(angular_size, linear_size_au):
    """Parallax (mas) from one and the same orbit measured as an angle (mas) and a length (au)."""
    return angular_size / linear_size_au


def combined(period, k1, eccentricity, inclination, k2=None, angular_semimajor_axis=None,
             photocentre_semimajor_axis=None, primary_mass=None, luminosity_fraction=None, omega=None, **_):
    """Orbital parallax and masses from a spectroscopic orbit and an astrometric one.

    SB2 + visual orbit: a = (a1 + a2) sin i / sin i, parallax = a'' / a,
    M1,2 = M1,2 sin^3 i / sin^3 i (Hilditch 2001, ch. 2; Heintz 1978).
    SB1 + photocentric orbit: a1 = a1 sin i / sin i.  A dark companion (beta = 0) puts the
    photocentre on the primary, alpha = a1, so parallax = alpha'' / a1 needs no masses; a
    luminous one (beta > 0) has alpha = a (B - beta) = a1 (1 - beta / B), which needs B
    and hence M1: M2 solves the mass function at the given i.  NaN where beta >= B.
    """
    sin_i = sin_degrees(inclination)
    a1 = projected_semimajor_axis(period, k1, eccentricity) / sin_i
    out = {}
    if k2 is not None:
        a2 = projected_semimajor_axis(period, k2, eccentricity) / sin_i
        a = a1 + a2
        total = kepler_total_mass(a, period)
        m1 = total * k2 / (k1 + k2)
        plx = orbital_parallax(angular_semimajor_axis, a)
        out.update({"m1": m1, "m2": total * k1 / (k1 + k2), "total_mass": total, "mass_ratio": k1 / k2,
                    "semimajor_axis": a, "a1": a1, "a2": a2})
    else:
        beta = 0.0 if luminosity_fraction is None else luminosity_fraction
        if primary_mass is not None:
            m2 = companion_mass(mass_function(period, k1, eccentricity), primary_mass, sin_i)
            total = primary_mass + m2
            b = m2 / total
            out.update({"m1": primary_mass * np.ones_like(m2), "m2": m2, "total_mass": total,
                        "mass_ratio": m2 / primary_mass, "semimajor_axis": a1 / b, "a1": a1})
            alpha_au = a1 * (1.0 - beta / b)
        else:
            alpha_au = a1   # a dark companion: the declaration requires primary_mass for any beta
        alpha_au = np.where(alpha_au > 0, alpha_au, np.nan)
        plx = orbital_parallax(photocentre_semimajor_axis, alpha_au)
        out["photocentre_semimajor_axis_au"] = alpha_au
    out["parallax"] = plx
    out["distance"] = distance_from_parallax(plx)
    if omega is not None:
        out["omega_relative"] = relative_omega(omega)
    return out
