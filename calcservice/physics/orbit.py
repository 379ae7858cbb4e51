"""Orbit geometry and ephemerides of a Keplerian binary.

Canonical units: times JD (days), period d, angles deg at the interface (radians
inside), speeds km/s, masses solMass, separations au (stellar radii and Roche lobes
solRad), angular sizes mas.  Every function is elementwise numpy and broadcasts: the
ephemeris gets inputs of shape (N, P, 1) and ``times`` of shape (T,), and returns
series of shape (N, P, T).

Conventions (the spectroscopic ones): ``omega`` is the argument of periastron of the
primary's orbit; star 2 has omega + 180 deg, and so has the relative orbit of star 2
about star 1 that a visual observer measures; radial velocity is positive when
receding; ``node`` is the position angle of the ascending node (where star 2 recedes
from us), the position angle is counted from north through east.
"""

from __future__ import annotations

import numpy as np

from ..constants import AU, C_LIGHT_KM_S, DAYS_PER_JULIAN_YEAR, GM_SUN, JULIAN_YEAR, R_SUN, TWO_PI
from . import kepler
from .angles import cos_degrees, sin_cos_degrees, wrap_degrees
from .exact import elapsed
from .spectroscopic import kepler_semimajor_axis, kepler_total_mass, one_minus_e_squared

AU_IN_SOLAR_RADII = AU / R_SUN


# --------------------------------------------------------------------------- phases
def period_change_rate(period_derivative):
    """dP/dt as a pure number (days per day) from dP/dt in s/yr (the unit of the period-change calculation)."""
    return 0.0 if period_derivative is None else np.asarray(period_derivative, dtype=float) / JULIAN_YEAR


def elapsed_cycles(time, period, t_periastron, period_derivative=None):
    """Anomalistic cycles n elapsed since T0 in the quadratic ephemeris t = T0 + P (n + Pdot n^2 / 2).

    The period of cycle n is P (1 + Pdot n) to first order, so periastron n falls at
    T_n = T0 + n P + n^2 P Pdot / 2 (the quadratic ephemeris of eclipse timing; e.g. Hilditch 2001,
    ch. 4 on O - C diagrams), Pdot dimensionless (days per day; from s/yr).  Inverted as
    n = 2 x / (1 + sqrt(1 + 2 Pdot x)), x = (t - T0)/P, which is x itself when Pdot = 0.
    """
    x = (np.asarray(time, dtype=float) - t_periastron) / period
    rate = period_change_rate(period_derivative)
    return 2.0 * x / (1.0 + np.sqrt(1.0 + 2.0 * rate * x))


def period_fraction(time, period, t_periastron):
    """(t - T0)/P split into the nearest whole number of periods n and the signed rest f in [-1/2, 1/2].

    f = (t - T0 - n P) / P with t - T0 and n P carried as exact sums of two doubles (:func:`.exact.elapsed`),
    so a date just before or after a periastron passage keeps its distance to it as exactly as the
    doubles given (frac((t - T0)/P) rounds the quotient first, after 1000 cycles at 1e-13 of a cycle,
    and a phase just below 1 keeps only 1e-16 of a cycle).
    """
    n, rest = elapsed(time, t_periastron, period)
    with np.errstate(invalid="ignore"):
        return n, rest / period


def cycle_phase(time, period, t_periastron, period_derivative=None, signed=False):
    """The fraction of a cycle since the last periastron, n(t) mod 1, of :func:`elapsed_cycles`' n.

    Taken as frac(x) - d with d = x - n = 2 Pdot x^2 / (1 + sqrt(1 + 2 Pdot x))^2 (the same n, no
    cancellation), so that what Pdot adds keeps its own digits beside the whole cycles elapsed: after
    a thousand cycles n itself rounds at 1e-13, where Pdot's share of the phase may be 1e-8.  frac(x)
    is :func:`period_fraction`'s, exact to the last digit near a periastron passage.  ``signed``: the
    fraction from the nearest periastron, in [-1/2, 1/2], which keeps its digits just before one too.
    """
    _whole, fraction = period_fraction(time, period, t_periastron)
    if period_derivative is not None:
        x = (np.asarray(time, dtype=float) - t_periastron) / period
        rate = period_change_rate(period_derivative)
        root = 1.0 + np.sqrt(1.0 + 2.0 * rate * x)
        fraction = fraction - 2.0 * rate * x * x / (root * root)
        fraction = fraction - np.round(fraction)
    return fraction if signed else unsigned_fraction(fraction)


def unsigned_fraction(fraction):
    """A fraction of a cycle in [-1/2, 1/2] moved into [0, 1): -1e-17 is 0 (adding 1 would round it to 1.0)."""
    f = np.where(fraction < 0.0, fraction + 1.0, fraction)
    return np.where(f >= 1.0, 0.0, f)


def cycle_time(cycles, period, t_periastron, period_derivative=None):
    """The date of ``cycles`` anomalistic cycles after T0: T0 + P (n + Pdot n^2 / 2) (quadratic ephemeris)."""
    rate = period_change_rate(period_derivative)
    return t_periastron + period * (cycles + 0.5 * rate * cycles * cycles)


def omega_at(time, omega, t_periastron, omega_dot=None):
    """Argument of periastron (deg) at ``time`` with apsidal motion: omega + omega_dot (t - T0), omega_dot in deg/yr.

    omega is its value at T0; the year is the Julian year (365.25 d).  Without omega_dot, omega itself.
    """
    if omega_dot is None:
        return omega
    return omega + omega_dot * (np.asarray(time, dtype=float) - t_periastron) / DAYS_PER_JULIAN_YEAR


def light_travel_amplitude(k, period, eccentricity):
    """a sin i / c in days of a star's orbit about the centre of mass: K P sqrt(1 - e^2) / (2 pi c).

    From a sin i = K P sqrt(1 - e^2) / (2 pi) (Hilditch 2001, eq. 2.50), K in km/s, P in days;
    1 - e^2 as (1 - e)(1 + e), exact at e -> 1.
    """
    return k * period * np.sqrt((1.0 - eccentricity) * (1.0 + eccentricity)) / (TWO_PI * C_LIGHT_KM_S)


def light_travel_amplitude_derivatives(amplitude, k, period, eccentricity):
    """Partial derivatives of :func:`light_travel_amplitude` A = K P sqrt(1 - e^2) / (2 pi c), a product of powers:
    ``d_k`` = A/K, ``d_period`` = A/P, ``d_eccentricity`` = -A e/(1 - e^2) (days per km/s, per day, per unit e)."""
    return {"d_k": amplitude / k, "d_period": amplitude / period,
            "d_eccentricity": -amplitude * eccentricity / one_minus_e_squared(eccentricity)}


def light_travel_delay(amplitude, true_anomaly_rad, eccentricity, omega_rad):
    """Roemer delay (days) of a star's light: z / c = (a sin i / c) (1 - e^2) sin(nu + omega) / (1 + e cos nu).

    z = r sin(nu + omega) sin i is the star's distance behind the centre of mass along the line of sight
    (positive receding, the sign of the radial velocity, whose time derivative it is; Hilditch 2001,
    ch. 2), so an event seen in that star's light is observed z / c after the centre of mass would show it.
    """
    return amplitude * kepler.separation(true_anomaly_rad, eccentricity) * np.sin(true_anomaly_rad + omega_rad)


def argument_of_latitude(true_anomaly_rad, omega_deg, cos_sin_nu=None, sin_cos_omega=None):
    """cos(nu + omega) and sin(nu + omega) by the addition theorem, omega's sine and cosine taken in degrees
    (:mod:`.angles`), so that omega = 90 or 270 deg adds no rounding of pi/2 to a small nu.  ``cos_sin_nu``:
    (cos nu, sin nu) when the caller has them more exactly than from nu (:func:`.kepler.true_anomaly_cosine_sine`);
    ``sin_cos_omega``: (sin omega, cos omega) when the caller has them already."""
    cos_nu, sin_nu = (np.cos(true_anomaly_rad), np.sin(true_anomaly_rad)) if cos_sin_nu is None else cos_sin_nu
    sin_w, cos_w = sin_cos_degrees(omega_deg) if sin_cos_omega is None else sin_cos_omega
    return cos_nu * cos_w - sin_nu * sin_w, sin_nu * cos_w + cos_nu * sin_w


def radial_velocities(true_anomaly_rad, eccentricity, omega_deg, k1, k2=None, gamma=0.0, half_cos_sin_nu=None):
    """Radial velocities (km/s) of both stars of a Keplerian orbit.

    v1 = gamma + K1 [cos(nu + omega) + e cos omega],
    v2 = gamma - K2 [cos(nu + omega) + e cos omega]   (Hilditch 2001, eq. 2.45),
    with omega the primary's argument of periastron (deg); star 2 has omega + 180 deg, hence the sign; the bracket
    by :func:`velocity_level`, which keeps its digits at the extrema of an orbit with e -> 1.  Returns (v1, v2), v2
    None without K2.  ``half_cos_sin_nu`` as in :func:`velocity_level`.
    """
    shape = velocity_level(true_anomaly_rad, eccentricity, omega_deg, half_cos_sin_nu)
    v1 = gamma + k1 * shape
    v2 = None if k2 is None else gamma - k2 * shape
    return v1, v2


def sky_position(true_anomaly_rad, separation_over_a, omega_deg, inclination_deg, node_deg, angular_semimajor_axis=None,
                 cos_sin_nu=None):
    """Projected separation (mas, or None) and position angle (deg) of star 2 relative to star 1.

    With u = nu + omega_2 the argument of latitude of the relative orbit (omega_2 = omega + 180 deg),
    rho = a'' (r/a) sqrt(cos^2 u + sin^2 u cos^2 i) and tan(theta - Omega) = tan u cos i
    (W. D. Heintz 1978, *Double Stars*, ch. 4; the quadrant from atan2); cos i from degrees, exact near 90 deg.
    """
    cos_u, sin_u = argument_of_latitude(true_anomaly_rad, omega_deg, cos_sin_nu)   # u - 180 deg: both signs turn
    cos_i = cos_degrees(inclination_deg)
    position_angle = wrap_degrees(node_deg + np.degrees(np.arctan2(-sin_u * cos_i, -cos_u)))
    rho = None
    if angular_semimajor_axis is not None:
        rho = angular_semimajor_axis * separation_over_a * np.hypot(cos_u, sin_u * cos_i)
    return rho, position_angle


def ephemeris(period, eccentricity, omega, t_periastron, k1, times, k2=None, gamma=None,
              angular_semimajor_axis=None, inclination=None, node=None, m1=None, m2=None,
              semimajor_axis=None, omega_dot=None, period_derivative=None, **_):
    """Series of orbital quantities at ``times`` (JD): phase, anomalies, separation, radial velocities.

    M = 2 pi n(t), n the cycles since T0 (:func:`elapsed_cycles`: (t - T0)/P without a period
    derivative), taken modulo one cycle (:func:`cycle_phase`); E from Kepler's equation; nu from E; r/a = 1 - e cos E; radial velocities as in
    :func:`radial_velocities` with omega(t) (:func:`omega_at`, apsidal motion); with a (given, or
    from Kepler's third law and m1 + m2) the separation in au; with the visual elements the
    projected separation and position angle (:func:`sky_position`).
    """
    e = eccentricity
    omega_deg = omega_at(times, omega, t_periastron, omega_dot)
    # the signed distance to the nearest periastron, so that a date just before one keeps its digits
    signed = cycle_phase(times, period, t_periastron, period_derivative, signed=True)
    phase = unsigned_fraction(signed)
    mean = TWO_PI * signed
    ecc = kepler.eccentric_anomaly(mean, e)
    nu = kepler.true_from_eccentric(ecc, e)
    cos_nu, sin_nu, r_over_a = kepler.true_anomaly_cosine_sine(ecc, e)
    v1, v2 = radial_velocities(nu, e, omega_deg, k1, k2, 0.0 if gamma is None else gamma,
                               kepler.true_anomaly_half_cosine_sine(ecc, e))
    out = {
        "phase": phase,
        "mean_anomaly": wrap_degrees(np.degrees(mean)),
        "true_anomaly": wrap_degrees(np.degrees(nu)),
        "separation": r_over_a,
        "rv1": v1,
    }
    if v2 is not None:
        out["rv2"] = v2
    a = semimajor_axis
    if a is None and m1 is not None and m2 is not None:
        a = kepler_semimajor_axis(period, m1 + m2)
    if a is not None:
        out["separation_au"] = a * r_over_a
    if inclination is not None and node is not None:
        rho, pa = sky_position(nu, r_over_a, omega_deg, inclination, node, angular_semimajor_axis, (cos_nu, sin_nu))
        out["position_angle"] = pa
        if rho is not None:
            out["projected_separation"] = rho
    elif inclination is not None and angular_semimajor_axis is not None:
        rho, _pa = sky_position(nu, r_over_a, omega_deg, inclination, 0.0, angular_semimajor_axis, (cos_nu, sin_nu))
        out["projected_separation"] = rho
    return out


# --------------------------------------------------------------------------- events
#: Event kinds and the true anomaly nu(omega) (rad) at which each happens.
#: Conjunctions: nu + omega = 90 deg puts star 1 farthest from us (z = r1 sin(nu + omega) sin i,
#: z positive away from the observer), so star 2 is in front; 270 deg puts star 1 in front.
#: Radial-velocity extrema: cos(nu + omega) = +1 (star 1 recedes fastest) or -1, for a fixed omega (under apsidal
#: motion the extremum in time lies off it: :func:`rv_extremum_true_anomaly`).
EVENT_TRUE_ANOMALY = {
    "periastron": lambda w: np.zeros_like(w),
    "apastron": lambda w: np.full_like(w, np.pi),
    "conjunction_star2_in_front": lambda w: 0.5 * np.pi - w,
    "conjunction_star1_in_front": lambda w: 1.5 * np.pi - w,
    "rv1_maximum": lambda w: -w,
    "rv1_minimum": lambda w: np.pi - w,
}


def mean_anomaly_derivatives(true_anomaly_rad, eccentricity):
    """Partial derivatives of M(nu, e): (dM/dnu at fixed e, dM/de at fixed nu).

    dM/dnu = (1 - e^2)^{3/2} / (1 + e cos nu)^2 (Kepler's second law, r^2 dnu = n a^2 sqrt(1 - e^2) dt);
    dM/de = -sqrt(1 - e^2) sin nu (2 + e cos nu) / (1 + e cos nu)^2, from cos E = (e + cos nu)/(1 + e cos nu)
    and M = E - e sin E (e.g. Murray & Dermott 1999, *Solar System Dynamics*, ch. 2).  1 - e^2 as
    (1 - e)(1 + e) and 1 + e cos nu as (1 - e) + 2 e cos^2(nu/2), exact at e -> 1.
    """
    e = np.asarray(eccentricity, dtype=float)
    half = np.cos(0.5 * np.asarray(true_anomaly_rad, dtype=float))
    c = (1.0 - e) + 2.0 * e * half * half
    s = (1.0 - e) * (1.0 + e)
    d_nu = s * np.sqrt(s) / c**2
    d_e = -np.sqrt(s) * np.sin(true_anomaly_rad) * (2.0 + e * np.cos(true_anomaly_rad)) / c**2
    return d_nu, d_e


#: Newton steps for a radial-velocity extremum under apsidal motion: the start is off by about e kappa (kappa the
#: apsidal rate over the orbital one, ~1e-3 at most for a real binary), and each step squares the error
_EXTREMUM_STEPS = 6


def rv_extremum_true_anomaly(kind, eccentricity, omega_rad, omega_rate=0.0):
    """True anomaly nu (rad) of a radial-velocity extremum of star 1 and its derivatives dnu/de, dnu/domega (per rad)
    and dnu/d omega_rate.

    v1 = gamma + K1 [cos(u) + e cos omega], u = nu + omega (Hilditch 2001, eq. 2.45), is extreme in time where
    dv1/dt = 0: -sin u (dnu/dt + domega/dt) - e sin omega domega/dt = 0, i.e.
    h(nu) = sin u (1 + kappa) + e sin omega kappa = 0, kappa = (domega/dt)/(dnu/dt)
    = omega_rate (1 - e^2)^{3/2} / (1 + e cos nu)^2 (Kepler's second law; ``omega_rate`` = d omega / dM,
    :func:`apsidal_rate_per_mean_anomaly`).  Without apsidal motion u = 0 (maximum) or pi (minimum); with it Newton's
    method from there, and the derivatives by the implicit function theorem, dnu/dx = -h_x / h_nu.
    """
    start = EVENT_TRUE_ANOMALY[kind](omega_rad)
    rate = np.asarray(omega_rate, dtype=float)
    e = np.asarray(eccentricity, dtype=float)
    s = (1.0 - e) * (1.0 + e)
    sin_w, cos_w = np.sin(omega_rad), np.cos(omega_rad)

    def terms(nu):
        c = 1.0 + e * np.cos(nu)
        kappa_per_rate = s * np.sqrt(s) / c**2
        kappa = rate * kappa_per_rate
        kappa_nu = 2.0 * kappa * e * np.sin(nu) / c
        kappa_e = -kappa * (3.0 * e / s + 2.0 * np.cos(nu) / c)
        sin_u, cos_u = np.sin(nu + omega_rad), np.cos(nu + omega_rad)
        h = sin_u * (1.0 + kappa) + e * sin_w * kappa
        h_nu = cos_u * (1.0 + kappa) + (sin_u + e * sin_w) * kappa_nu
        return h, h_nu, kappa, kappa_e, sin_u, cos_u, kappa_per_rate

    nu = start + np.zeros(np.broadcast(start, rate, e).shape)
    for _ in range(_EXTREMUM_STEPS if np.any(rate != 0.0) else 0):
        h, h_nu = terms(nu)[:2]
        with np.errstate(invalid="ignore", divide="ignore"):
            nu = nu - h / h_nu
    h, h_nu, kappa, kappa_e, sin_u, cos_u, kappa_per_rate = terms(nu)
    h_w = cos_u * (1.0 + kappa) + e * cos_w * kappa
    h_e = (sin_u + e * sin_w) * kappa_e + sin_w * kappa
    h_rate = (sin_u + e * sin_w) * kappa_per_rate
    with np.errstate(invalid="ignore", divide="ignore"):
        return nu, -h_e / h_nu, -h_w / h_nu, -h_rate / h_nu


def event_true_anomaly(kind, eccentricity, omega_rad, omega_rate=0.0):
    """True anomaly (rad) of an event kind at omega (rad): ``EVENT_TRUE_ANOMALY``, and for the radial-velocity extrema
    under apsidal motion the extremum in time (:func:`rv_extremum_true_anomaly`)."""
    if kind in ("rv1_maximum", "rv1_minimum"):
        return rv_extremum_true_anomaly(kind, eccentricity, omega_rad, omega_rate)[0]
    return EVENT_TRUE_ANOMALY[kind](omega_rad)


_APSIDAL_PASSES = 200   # each pass gains about the factor P omega_dot dphi/domega (~ omega_dot P / 360 deg) in accuracy


def dated_events(raw_phase, period, t_periastron, omega, after, count, omega_dot=None, period_derivative=None):
    """The first ``count`` dates (JD) at or after ``after`` of an event whose phase depends on omega.

    t = T0 + P (c + Pdot c^2 / 2) with c = n + phi the cycles since T0 (:func:`cycle_time`);
    phi = raw_phase(omega(t), c) - floor(raw_phase(omega, 0)), continuous in omega, at omega(t) of the
    apsidal motion (:func:`omega_at`), found by fixed-point iteration to the last digit since the
    date moves omega; n is the whole number of cycles, the smallest with t >= after.  Arrays over N
    systems with a trailing axis of 1 in, (N, count) arrays out: (time, cycles, omega at each date in deg).
    """
    wdot, pdot = omega_dot, period_derivative
    base = np.floor(raw_phase(omega, 0.0))
    phi = raw_phase(omega, 0.0) - base
    # n from the phase at omega(after): apsidal motion since T0 may have moved the event by many
    # cycles, but by less than one between `after` and the event.  One cycle early, since rounding
    # can put the estimate one past the event that falls on `after` itself; the passes below move on.
    cycles_after = elapsed_cycles(after, period, t_periastron, pdot)
    phi_after = raw_phase(omega_at(after, omega, t_periastron, wdot), cycles_after) - base
    n = np.ceil(cycles_after - phi_after) - 1.0 + np.arange(count)
    for _ in range(3):
        cycles = n + phi
        time = cycle_time(cycles, period, t_periastron, pdot)
        w_t = omega + np.zeros_like(time)
        if wdot is not None:
            # each date leaves the passes once one moves it by two roundings or less (NaN: a failed system), so
            # that its value follows its own trajectory only: the same alone or in a batch
            settled = np.zeros(time.shape, dtype=bool)
            for _ in range(_APSIDAL_PASSES):
                w_next = omega_at(time, omega, t_periastron, wdot)
                c_next = n + raw_phase(w_next, cycles) - base
                t_next = cycle_time(c_next, period, t_periastron, pdot)
                moved = np.abs(t_next - time) > 2.0 * np.spacing(np.abs(t_next))
                w_t, cycles, time = (np.where(settled, old, new) for old, new in
                                     ((w_t, w_next), (cycles, c_next), (time, t_next)))
                settled |= ~moved
                if settled.all():
                    break
        early = time < after
        if not np.any(early):
            break
        n = np.where(early[..., :1], n + 1.0, n)
    return time, cycles, w_t


def date_derivatives(time, cycles, period, t_periastron, dphi, omega_dot=None, period_derivative=None):
    """Partial derivatives of event dates t = T0 + P (c + Pdot c^2/2), c = n + phi(elements, omega(t)).

    ``dphi`` maps element names to d phi / d element (omega per deg) at the date.  Implicit
    differentiation, since t enters omega(t) = omega + omega_dot (t - T0): with D = dt/dc = P (1 + Pdot c)
    and F = 1 / (1 - D dphi/domega omega_dot), dt/dx = F D dphi/dx for each element x, dt/dP =
    F (c + Pdot c^2/2), dt/d omega_dot = F D dphi/domega (t - T0) (per deg/yr), dt/dPdot = F P c^2 / 2
    (per s/yr) and dt/dT0 = 1 (omega is omega(T0): the whole ephemeris moves with T0).  A phase that depends on
    the period or omega_dot itself (an extremum or mid-eclipse under apsidal motion, through omega_dot P / 360 deg)
    gives ``dphi["period"]`` or ``dphi["omega_dot"]``, added as F D dphi/dx to the terms above.
    """
    rate = period_change_rate(period_derivative)
    slope = period * (1.0 + rate * cycles)
    w_rate = 0.0 if omega_dot is None else omega_dot / DAYS_PER_JULIAN_YEAR
    dphi_dw = dphi.get("omega", 0.0)
    feedback = 1.0 / (1.0 - slope * dphi_dw * w_rate)
    out = {
        "d_t_periastron": np.ones_like(time),
        "d_period": feedback * (cycles + 0.5 * rate * cycles * cycles),
        "d_omega_dot": np.broadcast_to(feedback * slope * dphi_dw * (time - t_periastron) / DAYS_PER_JULIAN_YEAR,
                                       time.shape),
        "d_period_derivative": feedback * 0.5 * period * cycles * cycles / JULIAN_YEAR,
    }
    for name, d in dphi.items():
        # a phase that moves with the period or omega_dot adds to the terms above
        term = np.broadcast_to(feedback * slope * d, time.shape)
        out["d_" + name] = out["d_" + name] + term if "d_" + name in out else term
    return out


def event_times(kind, period, t_periastron, eccentricity, omega, after, count, omega_dot=None,
                period_derivative=None, light_travel=None):
    """The first ``count`` dates (JD) of an event at or after ``after``, and the partial derivatives.

    The event's phase is that of its true anomaly nu(omega) (:func:`event_true_anomaly`) at omega(t),
    the dates those of :func:`dated_events`, their derivatives those of :func:`date_derivatives`
    (``d_t_periastron``, ``d_period``, ``d_eccentricity``, ``d_omega`` per deg, ``d_omega_dot`` per
    deg/yr, ``d_period_derivative`` per s/yr).  ``light_travel`` = (amplitude in days, star 1 or 2):
    the dates are those seen in that star's light, t + z / c (:func:`light_travel_delay`), returned as
    ``light_time`` too; the correction's own uncertainty is not propagated.  Inputs are arrays over N
    systems; the outputs (N, count) arrays, with ``time`` and ``cycle``.
    """
    p = np.asarray(period, dtype=float)[..., None]
    t0 = np.asarray(t_periastron, dtype=float)[..., None]
    e = np.asarray(eccentricity, dtype=float)[..., None]
    w0 = np.asarray(omega, dtype=float)[..., None]
    start = np.asarray(after, dtype=float)[..., None]
    wdot = None if omega_dot is None else np.asarray(omega_dot, dtype=float)[..., None]
    pdot = None if period_derivative is None else np.asarray(period_derivative, dtype=float)[..., None]

    def raw_phase(w, cycles):
        if kind == "apastron":      # nu = E = M = pi for every e: half a cycle, not the rounding of cos(pi/2) in E
            return 0.5 + 0.0 * (e + w)
        return kepler.mean_from_true(event_true_anomaly(kind, e, np.radians(w), apsidal_rate(wdot, p, pdot, cycles)),
                                     e) / TWO_PI

    time, cycles, w_t = dated_events(raw_phase, p, t0, w0, start, count, wdot, pdot)
    rate = apsidal_rate(wdot, p, pdot, cycles)
    if kind in ("periastron", "apastron"):
        nu = EVENT_TRUE_ANOMALY[kind](np.radians(w_t))
        dphi = {"eccentricity": np.zeros_like(time), "omega": np.zeros_like(time)}
    else:
        if kind in ("rv1_maximum", "rv1_minimum"):
            nu, dnu_de, dnu_dw, dnu_drate = rv_extremum_true_anomaly(kind, e, np.radians(w_t), rate)
        else:
            nu = EVENT_TRUE_ANOMALY[kind](np.radians(w_t))
            dnu_de, dnu_dw, dnu_drate = 0.0, -1.0, 0.0                  # nu = 90 deg - omega or 270 deg - omega
        d_nu, d_e = mean_anomaly_derivatives(nu, e)
        dphi = {"eccentricity": (d_e + d_nu * dnu_de) / TWO_PI, "omega": d_nu * dnu_dw * np.radians(1.0) / TWO_PI}
        if wdot is not None:
            # the extremum moves with the apsidal rate, so with P, omega_dot and Pdot themselves
            dphi.update(apsidal_rate_terms(d_nu * dnu_drate / TWO_PI, wdot, p, pdot, cycles))
    out = {"time": time, "cycle": cycles, "true_anomaly": nu, "omega": w_t,
           **date_derivatives(time, cycles, p, t0, dphi, wdot, pdot)}
    if light_travel is not None:
        amplitude, star = light_travel
        w_star = np.radians(w_t) + (np.pi if star == 2 else 0.0)
        delay = light_travel_delay(np.asarray(amplitude, dtype=float)[..., None], nu, e, w_star)
        out["time"] = time + delay
        out["light_time"] = np.broadcast_to(delay, time.shape)
    return out


def event_sigma(derivatives, covariance, names=("t_periastron", "period", "eccentricity", "omega")):
    """Linear sigma (days) of event dates: sigma^2 = J C J^T with J the partial derivatives.

    For a periastron passage n cycles after T0 this is
    sigma^2 = sigma_T0^2 + n^2 sigma_P^2 + 2 n rho sigma_P sigma_T0.
    ``covariance`` is (N, 4, 4) over ``names``.
    """
    jac = np.stack([derivatives["d_" + k] for k in names], axis=-1)   # (N, count, 4)
    var = np.einsum("nci,nij,ncj->nc", jac, covariance, jac)
    return np.sqrt(np.maximum(var, 0.0))


def velocity_level(true_anomaly_rad, eccentricity, omega_deg, half_cos_sin_nu=None):
    """cos(nu + omega) + e cos omega, the shape of the radial-velocity curve (Hilditch 2001, eq. 2.45), u = nu + omega.

    Written 2 cos^2(u/2) - [(1 - e) + 2 e sin^2(omega/2)] where cos u < 0 and [(1 - e) + 2 e cos^2(omega/2)]
    - 2 sin^2(u/2) elsewhere, cos(u/2) and sin(u/2) by the addition theorem with omega/2 in degrees, so that at an
    extremum of v1 of an orbit with e -> 1, where the level is 1 -+ e cos omega (near its minimum with omega -> 0,
    near its maximum with omega -> 180 deg), the bracket keeps its digits and the other term is a square of a small
    number: cos u + e cos omega kept only 1e-16 of its +-1 there (1e-9 of the level at e = 1 - 1e-9,
    omega = 0.001 deg).  ``half_cos_sin_nu``: (cos(nu/2), sin(nu/2)) when the caller has them more exactly than
    from nu (:func:`.kepler.true_anomaly_half_cosine_sine`)."""
    e = np.asarray(eccentricity, dtype=float)
    if half_cos_sin_nu is None:
        half = 0.5 * np.asarray(true_anomaly_rad, dtype=float)
        half_cos_sin_nu = (np.cos(half), np.sin(half))
    cos_nu_half, sin_nu_half = half_cos_sin_nu
    sin_w_half, cos_w_half = sin_cos_degrees(0.5 * np.asarray(omega_deg, dtype=float))
    cos_u_half = cos_nu_half * cos_w_half - sin_nu_half * sin_w_half
    sin_u_half = sin_nu_half * cos_w_half + cos_nu_half * sin_w_half
    below = 2.0 * cos_u_half * cos_u_half - ((1.0 - e) + 2.0 * e * sin_w_half * sin_w_half)
    above = ((1.0 - e) + 2.0 * e * cos_w_half * cos_w_half) - 2.0 * sin_u_half * sin_u_half
    return np.where(np.abs(cos_u_half) < np.abs(sin_u_half), below, above)


def velocity_separation(eccentricity, omega_deg, k1, k2, true_anomaly_rad):
    """|v1 - v2| (km/s) at a true anomaly: (K1 + K2) |cos(nu + omega) + e cos omega| (Hilditch 2001, eq. 2.45,
    :func:`velocity_level`); at a radial-velocity extremum without apsidal motion (K1 + K2)(1 + e cos omega) or
    (K1 + K2)(1 - e cos omega)."""
    return (k1 + k2) * np.abs(velocity_level(true_anomaly_rad, eccentricity, omega_deg))


def velocity_separation_derivatives(event, k1, k2, eccentricity, period, t_periastron, omega_dot=None,
                                    period_derivative=None):
    """Partial derivatives of |v1 - v2| (km/s) at the radial-velocity extrema ``event`` of :func:`event_times`:
    ``d_k1``, ``d_k2``, ``d_eccentricity``, ``d_omega`` (per deg), ``d_t_periastron``, ``d_period`` (per d),
    ``d_omega_dot`` (per deg/yr), ``d_period_derivative`` (per s/yr), each (N, count).

    The separation vs = (K1 + K2) |cos u + e cos omega|, u = nu + omega (:func:`velocity_separation`), is
    extreme in time at the event (v1 is, and v1 - v2 is proportional to v1 - gamma), so its derivative by an
    element x is its partial at the event's date held fixed (the envelope theorem):
    dvs/dx = (K1 + K2) s [-sin u (dnu/dx + domega/dx) - e sin omega domega/dx + cos omega de/dx] + |...| dK/dx,
    s the sign of cos u + e cos omega.  At a fixed date, nu(M, e) has dnu/de = -(dM/de)/(dM/dnu)
    (:func:`mean_anomaly_derivatives`) and dnu/dx = 2 pi (dc/dx)/(dM/dnu) for x = T0, P, Pdot, the cycles c of
    t = T0 + P (c + Pdot c^2/2) changing by dc/dx = -(dt/dx at fixed c)/(dt/dc); omega(t) = omega + omega_dot
    (t - T0) (:func:`omega_at`).  Without apsidal motion sin u = 0 and this is the derivative of
    (K1 + K2)(1 +- e cos omega)."""
    e = np.asarray(eccentricity, dtype=float)[..., None]
    p = np.asarray(period, dtype=float)[..., None]
    t0 = np.asarray(t_periastron, dtype=float)[..., None]
    k = (np.asarray(k1, dtype=float) + np.asarray(k2, dtype=float))[..., None]
    nu, cycles = event["true_anomaly"], event["cycle"]
    time = event["time"] - event.get("light_time", 0.0)            # the extremum itself, not when it is seen
    w = np.radians(event["omega"])
    u = nu + w
    level = velocity_level(nu, e, event["omega"])
    side = np.sign(level)
    d_nu, d_m_de = mean_anomaly_derivatives(nu, e)
    pdot = None if period_derivative is None else np.asarray(period_derivative, dtype=float)[..., None]
    slope = p * (1.0 + period_change_rate(pdot) * cycles)                             # dt/dc
    w_rate = 0.0 if omega_dot is None else np.radians(np.asarray(omega_dot, dtype=float)[..., None]) / \
        DAYS_PER_JULIAN_YEAR                                                          # rad per day
    # dt/dx with the cycles held: the date derivatives of a phase that moves with nothing
    at_fixed_cycles = date_derivatives(time, cycles, p, t0, {}, None, pdot)
    dnu = {x: -TWO_PI * at_fixed_cycles["d_" + x] / slope / d_nu
           for x in ("t_periastron", "period", "period_derivative")}
    dnu["eccentricity"] = -d_m_de / d_nu
    dw = {"omega": np.radians(1.0), "t_periastron": -w_rate,
          "omega_dot": np.radians(1.0) * (time - t0) / DAYS_PER_JULIAN_YEAR}
    sin_u, e_sin_w = np.sin(u), e * np.sin(w)
    out = {"d_k1": np.abs(level), "d_k2": np.abs(level)}
    for x in ("eccentricity", "omega", "t_periastron", "period", "omega_dot", "period_derivative"):
        term = -sin_u * (dnu.get(x, 0.0) + dw.get(x, 0.0)) - e_sin_w * dw.get(x, 0.0)
        if x == "eccentricity":
            term = term + np.cos(w)
        out["d_" + x] = np.broadcast_to(k * side * term, nu.shape)
    out["d_k1"] = out["d_k2"] = np.broadcast_to(out["d_k1"], nu.shape)
    return out

# --------------------------------------------------------------------------- geometry
def roche_lobe_fraction(mass_ratio):
    """Eggleton (1983, ApJ 268, 368) Roche-lobe radius over the separation.

    r_L / a = 0.49 q^{2/3} / (0.6 q^{2/3} + ln(1 + q^{1/3})), q = M_star / M_companion;
    better than 1 % for 0 < q < infinity.
    """
    q = np.asarray(mass_ratio, dtype=float)
    q13 = np.cbrt(q)
    q23 = q13 * q13
    return 0.49 * q23 / (0.6 * q23 + np.log1p(q13))


def apsidal_speeds(total_mass, semimajor_axis, eccentricity):
    """Relative orbital speeds (km/s) at periastron and apastron: v^2 = G M (2/r - 1/a) (vis-viva equation).

    At r = a (1 -+ e), 2/r - 1/a = (1 +- e) / (a (1 -+ e)), so v = (G M / a)^{1/2} ((1 +- e)/(1 -+ e))^{1/2}:
    the difference 2/r - 1/a, which cancels at apastron when e -> 1, is never formed.
    """
    e = np.asarray(eccentricity, dtype=float)
    circular = np.sqrt(GM_SUN * np.asarray(total_mass, dtype=float) / (np.asarray(semimajor_axis, dtype=float) * AU))
    ratio = np.sqrt((1.0 + e) / (1.0 - e))
    return circular * ratio / 1e3, circular / ratio / 1e3


def geometry(period, eccentricity, m1=None, m2=None, semimajor_axis=None, mass_ratio=None,
             radius1=None, radius2=None, **_):
    """Size, extreme distances, speeds and Roche lobes of a binary orbit.

    a from Kepler's third law with m1 + m2 (or M1 + M2 from a); periastron a(1 - e), apastron
    a(1 + e); vis-viva speeds there; Roche lobes by Eggleton (1983) at the instantaneous
    separations; fill factors R / r_L at periastron.  ``mass_ratio`` (M2/M1) splits a total
    mass obtained from a into m1 and m2.
    """
    e = eccentricity
    out = {}
    if semimajor_axis is not None:
        a = semimajor_axis
        total = kepler_total_mass(a, period)
        if mass_ratio is not None:
            # both from the ratio: total - m1 would cancel for a small q
            m1 = total / (1.0 + mass_ratio)
            m2 = total * mass_ratio / (1.0 + mass_ratio)
    elif m1 is not None and (m2 is not None or mass_ratio is not None):
        if m2 is None:
            m2 = mass_ratio * m1
        total = m1 + m2
        a = kepler_semimajor_axis(period, total)
    else:
        return out
    peri = a * (1.0 - e)
    apo = a * (1.0 + e)
    speed_periastron, speed_apastron = apsidal_speeds(total, a, e)
    out.update({
        "semimajor_axis": a,
        "total_mass": total,
        "periastron_distance": peri,
        "apastron_distance": apo,
        "speed_periastron": speed_periastron,
        "speed_apastron": speed_apastron,
    })
    if m1 is None or m2 is None:
        return out
    lobe1 = roche_lobe_fraction(m1 / m2)
    lobe2 = roche_lobe_fraction(m2 / m1)
    out.update({
        "m1": m1,
        "m2": m2,
        "mass_ratio": m2 / m1,
        "roche_lobe1": lobe1 * peri * AU_IN_SOLAR_RADII,
        "roche_lobe2": lobe2 * peri * AU_IN_SOLAR_RADII,
        "roche_lobe1_apastron": lobe1 * apo * AU_IN_SOLAR_RADII,
        "roche_lobe2_apastron": lobe2 * apo * AU_IN_SOLAR_RADII,
    })
    if radius1 is not None:
        out["fill_factor1"] = radius1 / out["roche_lobe1"]
    if radius2 is not None:
        out["fill_factor2"] = radius2 / out["roche_lobe2"]
    return out


# --------------------------------------------------------------------------- eclipses
#: the true anomaly (rad) of each conjunction from omega (rad): star 2 in front of star 1 (an
#: eclipse of star 1) at nu + omega = 90 deg, star 1 in front (an eclipse of star 2) at 270 deg
CONJUNCTION_ARGUMENT = {1: 0.5 * np.pi, 2: 1.5 * np.pi}
_MID_ECLIPSE_STEPS = 40
_HALF_ORBIT = 0.5 * np.pi * (1.0 - 1e-9)
_MID_ECLIPSE_MAX_STEP = 0.2   # rad: Newton's steps kept short so that no iterate leaves the conjunction's half-orbit


def mid_eclipse_offset(star, eccentricity, omega_rad, inclination_deg, omega_rate=0.0):
    """delta = nu_min - nu_c (rad): how far in true anomaly the minimum projected separation near the conjunction that
    eclipses ``star`` lies from that conjunction, nu_c = 90 deg - omega (star 1 eclipsed) or 270 deg - omega.

    Minimising rho^2 = r^2 (1 - sin^2 i sin^2 u), u = nu + omega, in time sets its derivative to zero:
    g(nu) = 2 e sin nu (1 - sin^2 i sin^2 u) / (1 + e cos nu) - sin^2 i sin 2u (1 + kappa) = 0
    (with r'/r = e sin nu / (1 + e cos nu) from the ellipse; e.g. Hilditch 2001, ch. 2 on eclipse
    timing in eccentric orbits), kappa = (d omega/dt)/(d nu/dt) = omega_rate (1 - e^2)^{3/2} / (1 + e cos nu)^2
    for apsidal motion, ``omega_rate`` = d omega / dM = omega_dot P / 360 deg (0 without).  Written in delta,
    u = 90 deg + delta or 270 deg + delta, so sin^2 u = cos^2 delta, sin 2u = -sin 2 delta, cos 2u = -cos 2 delta and
    1 - sin^2 i sin^2 u = cos^2 i + sin^2 i sin^2 delta: no cancellation near an edge-on orbit's mid-eclipse, where
    1 - sin^2 i sin^2 u with u from nu kept only 1e-16 / cos^2 i of itself (the offset from the conjunction, which
    is of order cos^2 i, then lost 1e-6 of itself at i = 89.999 deg and its linear sigma all of it).  Newton's method
    on g from delta = 0, where it starts within a small angle of the root whenever an eclipse is possible; the root
    is delta = 0 when e = 0 or i = 90 deg.  sin i and cos i from the inclination in degrees (:mod:`.angles`), each
    with its own relative precision (sin^2 i as 1 - cos^2 i lost 3e-13 of itself at i = 179 deg).
    """
    sin_i, cos_i = sin_cos_degrees(np.asarray(inclination_deg, dtype=float))
    c2 = cos_i * cos_i
    s2 = sin_i * sin_i
    start = CONJUNCTION_ARGUMENT[star] - omega_rad
    shape = np.broadcast(start, eccentricity, c2, omega_rate).shape
    flat = [np.broadcast_to(np.asarray(a, dtype=float), shape).ravel()
            for a in (eccentricity, c2, s2, omega_rate, start)]
    delta = np.zeros(flat[0].size)
    # each system's iterate is left once a step moves it by no more than two roundings (at the root, where
    # further steps only turn between neighbouring doubles): the steps go on for the others only, and a
    # system's answer is the same alone or in a batch
    live = np.arange(delta.size)
    for _ in range(_MID_ECLIPSE_STEPS):
        if not live.size:
            break
        e, c2, s2, rate, first = (a[live] for a in flat)
        old = delta[live]
        nu = first + old
        sin_nu, cos_nu = np.sin(nu), np.cos(nu)
        c = 1.0 + e * cos_nu
        sin_d = np.sin(old)
        sin_2d, cos_2d = np.sin(2.0 * old), np.cos(2.0 * old)
        shape_factor = c2 + s2 * sin_d * sin_d
        h = 2.0 * e * sin_nu / c
        kappa = rate * (1.0 - e * e) ** 1.5 / c**2
        g = h * shape_factor + s2 * sin_2d * (1.0 + kappa)
        dg = (2.0 * e * (cos_nu + e) / c**2 * shape_factor + h * s2 * sin_2d
              + 2.0 * s2 * cos_2d * (1.0 + kappa) + s2 * sin_2d * kappa * h)
        with np.errstate(invalid="ignore", divide="ignore"):
            step = np.where(dg > 0.0, g / dg, 0.0)
        # kept within the half-orbit where ``star`` is the farther one: beyond it the other star is in front
        new = np.clip(old - np.clip(step, -_MID_ECLIPSE_MAX_STEP, _MID_ECLIPSE_MAX_STEP), -_HALF_ORBIT, _HALF_ORBIT)
        delta[live] = new
        live = live[np.abs(new - old) > 2.0 * np.spacing(np.abs(old))]
    return delta.reshape(shape)


def mid_eclipse_true_anomaly(star, eccentricity, omega_rad, inclination_deg, omega_rate=0.0):
    """True anomaly (rad) of the minimum projected separation near the conjunction that eclipses ``star``:
    the conjunction's, 90 deg - omega or 270 deg - omega, plus :func:`mid_eclipse_offset`."""
    offset = mid_eclipse_offset(star, eccentricity, omega_rad, inclination_deg, omega_rate)
    return CONJUNCTION_ARGUMENT[star] - omega_rad + offset


def apsidal_rate_per_mean_anomaly(omega_dot, period):
    """d omega / dM = omega_dot P / 360 deg (omega_dot in deg/yr, P in days); 0 without apsidal motion."""
    return 0.0 if omega_dot is None else omega_dot / DAYS_PER_JULIAN_YEAR * period / 360.0


def apsidal_rate(omega_dot, period, period_derivative, cycles):
    """d omega / dM at ``cycles`` cycles after T0: omega_dot P (1 + Pdot c) / 360 deg, the period of that cycle being
    dt/dc = P (1 + Pdot c) in the quadratic ephemeris (:func:`cycle_time`); 0 without apsidal motion."""
    if omega_dot is None:
        return 0.0
    return apsidal_rate_per_mean_anomaly(omega_dot, period) * (1.0 + period_change_rate(period_derivative) * cycles)


def apsidal_rate_terms(dphi_drate, omega_dot, period, period_derivative, cycles):
    """d phi / dx for x = period, omega_dot and period_derivative (per s/yr) of a phase that moves with
    :func:`apsidal_rate` (``dphi_drate`` = d phi / d rate), for :func:`date_derivatives`."""
    scale = DAYS_PER_JULIAN_YEAR * 360.0
    stretch = 1.0 + period_change_rate(period_derivative) * cycles
    out = {"period": dphi_drate * omega_dot * stretch / scale,
           "omega_dot": dphi_drate * period * stretch / scale}
    if period_derivative is not None:
        out["period_derivative"] = dphi_drate * omega_dot * period * cycles / (scale * JULIAN_YEAR)
    return out


#: Newton steps for the conjunction under apsidal motion: each squares the error, from a start off by omega_rate
#: times the mid-eclipse offset (a few 1e-5 rad at most for a real binary)
_CONJUNCTION_STEPS = 6


def conjunction_true_anomaly(star, eccentricity, omega_rad, mid_mean_anomaly, omega_rate=0.0):
    """True anomaly nu_c (rad) of the conjunction next to a mid-eclipse at mean anomaly ``mid_mean_anomaly`` (rad),
    omega (rad) being the argument of periastron at the mid-eclipse.

    The conjunction is where nu + omega(t) = 90 deg (star 2 in front) or 270 deg, and under apsidal motion omega has
    moved since the mid-eclipse by omega_rate (M_c - M_mid) (``omega_rate`` = d omega / dM,
    :func:`apsidal_rate_per_mean_anomaly`), so nu_c = nu_0 + d with nu_0 = 90 deg - omega (or 270 deg - omega) and
    d + omega_rate (M(nu_0 + d) - M_mid) = 0, solved by Newton's method (dM/dnu from
    :func:`mean_anomaly_derivatives`); d = 0 without apsidal motion.
    """
    start = CONJUNCTION_ARGUMENT[star] - omega_rad
    rate = np.asarray(omega_rate, dtype=float)
    if not np.any(rate != 0.0):
        return start
    shift = np.zeros(np.broadcast(start, rate, eccentricity, mid_mean_anomaly).shape)
    for _ in range(_CONJUNCTION_STEPS):
        nu = start + shift
        residual = shift + rate * (kepler.mean_from_true(nu, eccentricity) - mid_mean_anomaly)
        slope = 1.0 + rate * mean_anomaly_derivatives(nu, eccentricity)[0]
        with np.errstate(invalid="ignore", divide="ignore"):
            shift = shift - residual / slope
    return start + shift


def mid_eclipse_phase(star, eccentricity, omega_deg, inclination_deg, omega_rate=0.0):
    """Phase after periastron (0 to 1) of the mid-eclipse of ``star``, its offset from the conjunction (cycles),
    its true anomaly (rad) and its distance from the conjunction at omega, delta = nu - (90 deg or 270 deg - omega).

    The offset is (M(nu_min) - M(nu_c)) / 2 pi with nu_c the conjunction's true anomaly
    (:func:`conjunction_true_anomaly`: under apsidal motion omega at the conjunction is not omega at the mid-eclipse),
    taken from nu_min - nu_c by :func:`.kepler.mean_anomaly_difference`, not as the difference of two mean anomalies
    of ~1 rad (which kept 1e-16 rad of an offset of order cos^2 i near an edge-on orbit).
    """
    w = np.radians(omega_deg)
    start = CONJUNCTION_ARGUMENT[star] - w
    delta = mid_eclipse_offset(star, eccentricity, w, inclination_deg, omega_rate)
    nu = start + delta
    mid_mean = kepler.mean_from_true(nu, eccentricity)
    shift = conjunction_true_anomaly(star, eccentricity, w, mid_mean, omega_rate) - start
    offset = kepler.mean_anomaly_difference(start + shift, delta - shift, eccentricity)
    mid = mid_mean / TWO_PI
    return np.mod(mid, 1.0), offset / TWO_PI, nu, delta


def mid_eclipse(period, eccentricity, omega, inclination, t_periastron=None, semimajor_axis=None, total_mass=None,
                radius1=None, radius2=None, omega_dot=None, **_):
    """Phases of mid-eclipse (minimum projected separation), their offsets from conjunction, the separations.

    For each eclipse (star 1 eclipsed: star 2 in front; star 2 eclipsed) the phase of the minimum
    projected separation (:func:`mid_eclipse_true_anomaly`), its offset from the conjunction in days,
    the minimum separation in units of a and, with a (given, or from Kepler's third law and the total
    mass), in solar radii; with both radii, that separation over R1 + R2: the discs overlap (an eclipse
    happens) where it is below 1.
    """
    out = {}
    a = semimajor_axis
    if a is None and total_mass is not None:
        a = kepler_semimajor_axis(period, total_mass)
    if a is not None:
        out["semimajor_axis"] = a
    for star in (1, 2):
        phase, cycles_after_conjunction, nu, delta = mid_eclipse_phase(star, eccentricity, omega, inclination,
                                                                       apsidal_rate_per_mean_anomaly(omega_dot, period))
        # rho / a = (r/a) (cos^2 u + sin^2 u cos^2 i)^{1/2}, u = nu + omega (+ 180 deg for the relative orbit, which
        # changes no square; Heintz 1978, ch. 4), with u = 90 or 270 deg + delta: cos^2 u = sin^2 delta, exact at
        # mid-eclipse of an edge-on orbit (from nu and omega, cos u kept only 1e-16 absolute)
        rho = kepler.separation(nu, eccentricity) * np.hypot(np.sin(delta), np.cos(delta) * cos_degrees(inclination))
        out[f"mid_eclipse_phase{star}"] = phase
        out[f"conjunction_offset{star}"] = cycles_after_conjunction * period
        out[f"minimum_separation{star}_over_a"] = rho
        if a is not None:
            out[f"minimum_separation{star}"] = rho * a * AU_IN_SOLAR_RADII
            if radius1 is not None and radius2 is not None:
                out[f"eclipse_parameter{star}"] = out[f"minimum_separation{star}"] / (radius1 + radius2)
    return out


#: central-difference steps for the derivatives of a mid-eclipse phase (e; omega and i in deg): the phase is
#: smooth, and these steps keep truncation and rounding errors near 1e-9 of a cycle; the step in e is at most
#: MID_ECLIPSE_ECCENTRICITY_SHARE of 1 - e, so that e + step stays an orbit and the phase, which goes as
#: (1 - e)^{3/2} there, is differenced over a step that its curvature does not bend (1e-7 relative)
MID_ECLIPSE_PHASE_STEPS = {"eccentricity": 1e-6, "omega": 1e-4, "inclination": 1e-4}
MID_ECLIPSE_ECCENTRICITY_SHARE = 1e-3
#: the step in omega_rate = d omega / dM (dimensionless): the phase is nearly linear in it
MID_ECLIPSE_RATE_STEP = 1e-6


def mid_eclipse_dates(star, period, t_periastron, eccentricity, omega, inclination, after, count, omega_dot=None,
                      period_derivative=None):
    """The first ``count`` mid-eclipse dates (JD) of ``star`` at or after ``after``, and the partial derivatives.

    The phase is M(nu_min)/2 pi of :func:`mid_eclipse_true_anomaly` at omega(t) (apsidal motion),
    the dates those of :func:`dated_events`, the derivatives those of :func:`date_derivatives` with
    d phi / d(e, omega, i) by central differences.  Returns (N, count) arrays ``time``, ``cycle`` and
    ``d_<element>`` for t_periastron, period, eccentricity, omega, inclination, omega_dot,
    period_derivative.
    """
    p = np.asarray(period, dtype=float)[..., None]
    t0 = np.asarray(t_periastron, dtype=float)[..., None]
    e = np.asarray(eccentricity, dtype=float)[..., None]
    w0 = np.asarray(omega, dtype=float)[..., None]
    inc = np.asarray(inclination, dtype=float)[..., None]
    start = np.asarray(after, dtype=float)[..., None]
    wdot = None if omega_dot is None else np.asarray(omega_dot, dtype=float)[..., None]
    pdot = None if period_derivative is None else np.asarray(period_derivative, dtype=float)[..., None]

    def raw_phase(w, cycles, e=e, inc=inc, rate=None):     # continuous in its arguments (no reduction mod 1)
        rate = apsidal_rate(wdot, p, pdot, cycles) if rate is None else rate
        nu = mid_eclipse_true_anomaly(star, e, np.radians(w), inc, rate)
        return kepler.mean_from_true(nu, e) / TWO_PI

    time, cycles, w_t = dated_events(raw_phase, p, t0, w0, start, count, wdot, pdot)
    rate = apsidal_rate(wdot, p, pdot, cycles)
    dphi = {}
    steps = dict(MID_ECLIPSE_PHASE_STEPS)
    steps["eccentricity"] = np.minimum(steps["eccentricity"], MID_ECLIPSE_ECCENTRICITY_SHARE * (1.0 - e))
    if wdot is not None:
        steps["omega_rate"] = MID_ECLIPSE_RATE_STEP
    for name, h in steps.items():
        args = {"w": w_t, "cycles": cycles, "e": e, "inc": inc, "rate": rate + np.zeros_like(w_t)}
        key = {"eccentricity": "e", "omega": "w", "inclination": "inc", "omega_rate": "rate"}[name]
        up, down = dict(args), dict(args)
        up[key] = args[key] + h
        down[key] = args[key] - h
        dphi[name] = (raw_phase(**up) - raw_phase(**down)) / (2.0 * h)
    if wdot is not None:
        # the minimum moves with the apsidal rate, so with P, omega_dot and Pdot themselves
        dphi.update(apsidal_rate_terms(dphi.pop("omega_rate"), wdot, p, pdot, cycles))
    return {"time": time, "cycle": cycles, **date_derivatives(time, cycles, p, t0, dphi, wdot, pdot)}
