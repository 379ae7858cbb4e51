"""Declarations: orbit ephemerides (series and dates of events) and orbit geometry (sizes, speeds, Roche lobes)."""

from __future__ import annotations

import warnings as _warnings

import numpy as np

from ..constants import DAYS_PER_JULIAN_YEAR, MJD_ZERO_JD
from ..physics import orbit as phys
from ..registry import (ANGLE, ANY, DATE, DAY_COUNTS_BELOW, INCLINATION, POSITIVE, Calculation, Constraint, Domain,
                        Input, Output, Warning, register)
from .common import (CONVENTIONS, HILDITCH_2001, IAU_2012_B2, IAU_2015_B3, MASS_RATIO, SPEED, SYMBOLS, VELOCITY,
                     cited, eccentricity, period, with_speed_check)

EGGLETON_1983 = "P. P. Eggleton (1983), Approximations to the radii of Roche lobes, ApJ 268, 368"
MIKKOLA_1987 = "S. Mikkola (1987), A cubic approximation for Kepler's equation, Celestial Mechanics 40, 329"
HEINTZ_1978 = "W. D. Heintz (1978), Double Stars, D. Reidel, Dordrecht, ch. 4"
MURRAY_DERMOTT_1999 = "C. D. Murray & S. F. Dermott (1999), Solar System Dynamics, Cambridge University Press, ch. 2"
#: the sources of Kepler's third law in solar units: Hilditch's formula with GM_sun (IAU 2015 B3) and the au
KEPLER = (HILDITCH_2001, IAU_2015_B3, IAU_2012_B2)
ROCHE_LOBES = ("roche_lobe1", "roche_lobe2", "roche_lobe1_apastron", "roche_lobe2_apastron")
ASTROPY_TIME = "Astropy Collaboration (2022), ApJ 935, 167: astropy.time for calendar dates and leap seconds"

#: The most events of each kind one request may ask for.
MAX_EVENT_COUNT = 100

EVENT_LISTS = {
    "periastron": ("periastron",),
    "apastron": ("apastron",),
    "conjunctions": ("conjunction_star2_in_front", "conjunction_star1_in_front"),
    "rv_extrema": ("rv1_maximum", "rv1_minimum"),
}
EVENT_ELEMENTS = ("t_periastron", "period", "eccentricity", "omega", "omega_dot", "period_derivative")
LIGHT_TRAVEL_CHOICES = ("none", "star1", "star2")

ORBIT_CONVENTIONS = {
    **{k: v for k, v in CONVENTIONS.items() if k != "mass_ratio"},
    "phase": "orbital phase (t - t_periastron)/period mod 1, zero at periastron",
    "position_angle": "of star 2 relative to star 1, from north through east; node is the position angle of the "
                      "ascending node, where star 2 recedes from the observer; the relative orbit has omega + 180 deg",
    "events": "the first `count` events of each kind at or after `after` (default: the earliest of `times`), in time "
              "order; conjunctions and rv_extrema list `count` of each of their two kinds; conjunctions are where "
              "nu + omega(t) = 90 deg (star 2 in front) or 270 deg, rv_extrema where rv1 is largest or smallest in "
              "time (dv1/dt = 0: nu + omega = 0 or 180 deg without apsidal motion, and off it by about "
              "e sin omega omega_dot / nu_dot rad with it); an event's sigma is the "
              "linear propagation of the uncertainties of t_periastron, period (with their correlation), "
              "eccentricity, omega, omega_dot and period_derivative, through the cycles elapsed since "
              "t_periastron; event dates are in the "
              "request's time_format (JD by default, MJD = JD - 2400000.5 with time_format mjd), which the events' "
              "time_format member names, each with its ISO 8601 date; with k2, max_velocity_separation lists the "
              "rv_extrema with |v1 - v2| (km/s) and its sigma, propagated linearly from k1, k2 and the elements "
              "(the extremum's date moves with them, which changes |v1 - v2| only to second order)",
    "apsidal_motion": "omega(t) = omega + omega_dot (t - t_periastron), omega_dot in deg per Julian year; period is "
                      "the anomalistic period (periastron to periastron), t_periastron the epoch of omega; "
                      "conjunctions then recur with the sidereal period, about P (1 - omega_dot P / 360 deg)",
    "period_derivative": "quadratic ephemeris: periastron n at t_periastron + P (n + Pdot n^2 / 2), Pdot = dP/dt "
                         "(s/yr by default), applied to the series and to every event date",
    "light_travel_time": "with star1 or star2 each event date is when it is seen in that star's light: t + z/c, "
                         "z = (a sin i)(1 - e^2) sin(nu + omega_star)/(1 + e cos nu) the star's distance behind "
                         "the centre of mass (positive receding), so a star beyond the centre of mass is seen late; "
                         "the series are not corrected, nor are the other light-travel terms of eclipse timing "
                         "(the motion of the front star while the light crosses the orbit). The amplitudes "
                         "a sin i / c = K P sqrt(1 - e^2)/(2 pi c) of "
                         "both stars are always given in events.light_travel_time (days), each with its sigma "
                         "(amplitude_star1_sigma) propagated linearly from K, P and e with their correlations; the "
                         "correction's own uncertainty is not propagated into the event dates",
    "iso": "calendar dates of the same time scale as the Julian Dates (no scale conversion), treated as UTC "
           "for leap seconds: a UTC Julian Date counts every day as one, so a leap second moves the clock reading "
           "only within the day that has it (by under a second), and one announced after astropy's table was "
           "issued leaves every other date as it is; none for a number below JD 10000 (4685 BC), a count of days "
           "from an arbitrary zero (T0 = 0)",
}


# --------------------------------------------------------------------------- time helpers
def iso_dates(jd: np.ndarray) -> np.ndarray:
    """ISO 8601 strings of Julian Dates, by astropy.time; None where not finite, beyond year 9999 (the ISO
    form's last), or a day count from an arbitrary zero (below DAY_COUNTS_BELOW: no calendar date)."""
    from astropy.time import Time
    jd = np.asarray(jd, dtype=float)
    out = np.full(jd.shape, None, dtype=object)
    ok = np.isfinite(jd) & (jd >= DAY_COUNTS_BELOW) & (jd < 5373484.5)
    if np.any(ok):
        with _warnings.catch_warnings():
            # astropy's "dubious year" past its leap-second table: such a date is right but on a day that
            # later gets a leap second, where its clock reading moves by under a second (the 'iso' convention)
            _warnings.simplefilter("ignore")
            out[ok] = Time(jd[ok], format="jd", scale="utc", precision=0).isot
    return out


# --------------------------------------------------------------------------- ephemeris
def _value(quantities, name):
    q = quantities.get(name)
    return None if q is None else np.asarray(q.value, dtype=float)


def _after(quantities, statics, n):
    after = quantities.get("after")
    if after is not None:
        return np.broadcast_to(np.asarray(after.value, dtype=float), (n,))
    if statics.get("after") is not None:
        return np.broadcast_to(np.asarray(statics["after"], dtype=float), (n,))
    times = statics.get("times")
    return np.full(n, float(np.min(times)) if times is not None and len(times) else np.nan)


def _element_covariance(quantities, correlations, n, elements=EVENT_ELEMENTS) -> np.ndarray:
    """Covariance (N, k, k) of the ``elements`` (by default t_periastron, period, eccentricity, omega).

    Sigmas with the request's correlations; inputs given as samples bring their own sample
    covariance with each other (paired draws keep, e.g., the P-T0 correlation of a fit).
    """
    k = len(elements)
    cov = np.zeros((n, k, k))
    sig = [np.broadcast_to(quantities[name].sigma, (n,)) if name in quantities else np.zeros(n)
           for name in elements]
    dev = {}
    for name in elements:
        q = quantities.get(name)
        if q is not None and q.samples is not None:
            s = np.broadcast_to(q.samples, (n, q.samples.shape[-1]))
            dev[name] = s - s.mean(axis=1, keepdims=True)
    for i, a in enumerate(elements):
        for j, b in enumerate(elements):
            if i == j:
                cov[:, i, i] = sig[i] ** 2
            elif a in dev and b in dev and dev[a].shape == dev[b].shape:
                cov[:, i, j] = (dev[a] * dev[b]).sum(axis=1) / max(dev[a].shape[1] - 1, 1)
            else:
                rho = correlations.get((a, b), correlations.get((b, a), 0.0))
                cov[:, i, j] = rho * sig[i] * sig[j]
    return cov


def _event_entries(day, sigma, cycle, extra_fields=None, offset=0.0):
    """One entry per finite date ``day``, in the caller's time format (JD, or MJD with ``offset`` its zero's
    JD): the date, sigma, ISO date, cycle."""
    iso = iso_dates(day + offset)
    entries = []
    for k in range(len(day)):
        if not np.isfinite(day[k]):
            continue
        e = {"value": float(day[k]), "sigma": float(sigma[k]) if np.isfinite(sigma[k]) else None,
             "iso": iso[k], "cycle": float(cycle[k])}
        if extra_fields:
            e.update({key: v[k] for key, v in extra_fields.items()})
        entries.append(e)
    return entries


def ephemeris_events(quantities, statics, options, time_format="jd") -> list[dict]:
    """The ``events`` member per system: dates of periastron, apastron, conjunctions and RV extrema with sigmas.

    Dates are in the caller's ``time_format`` ("jd", or "mjd" = JD - 2400000.5), named by the
    events' ``time_format`` member; each entry also carries its ISO 8601 date.
    """
    names = ("period", "t_periastron", "eccentricity", "omega")
    n = max(len(np.atleast_1d(quantities[k].value)) for k in names if k in quantities)
    p, t0, e, w = (np.broadcast_to(_value(quantities, k), (n,)) for k in names)
    w_dot, p_dot = (None if _value(quantities, k) is None else np.broadcast_to(_value(quantities, k), (n,))
                    for k in ("omega_dot", "period_derivative"))
    count = int(statics.get("count") or 3)
    offset = MJD_ZERO_JD if time_format == "mjd" else 0.0
    after = _after(quantities, statics, n)
    k1, k2 = _value(quantities, "k1"), _value(quantities, "k2")
    # the elements' covariance, with K1 and K2 for the light-travel amplitudes and the velocity separations
    elements = EVENT_ELEMENTS + ("k1", "k2")
    with np.errstate(all="ignore"):     # an infinite sigma or element gives a null date, not a warning
        cov_all = _element_covariance(quantities, getattr(options, "correlations", {}) or {}, n, elements)
        cov = cov_all[:, :len(EVENT_ELEMENTS), :len(EVENT_ELEMENTS)]
        amplitudes = {star: None if k is None else np.broadcast_to(phys.light_travel_amplitude(k, p, e), (n,))
                      for star, k in (("star1", k1), ("star2", k2))}
        amplitude_sigmas = {}
        for (star, a), k_name in zip(amplitudes.items(), ("k1", "k2")):
            if a is None:
                amplitude_sigmas[star] = None
                continue
            partials = phys.light_travel_amplitude_derivatives(a, np.broadcast_to(_value(quantities, k_name), (n,)), p, e)
            partials["d_" + k_name] = partials.pop("d_k")
            terms = {"d_" + name: partials.get("d_" + name, np.zeros(n))[:, None] for name in elements}
            amplitude_sigmas[star] = phys.event_sigma(terms, cov_all, elements)[:, 0]
    chosen = statics.get("light_travel_time") or "none"
    light = None if chosen == "none" or amplitudes.get(chosen) is None else (amplitudes[chosen], int(chosen[-1]))

    per_system: list[dict] = [{"events": {}} for _ in range(n)]
    kinds_all: dict[str, list] = {}
    with np.errstate(all="ignore"):
        for list_name, kinds in EVENT_LISTS.items():
            parts = []
            for kind in kinds:
                ev = phys.event_times(kind, p, t0, e, w, after, count, w_dot, p_dot, light)
                sigma = phys.event_sigma(ev, cov, EVENT_ELEMENTS)
                parts.append((kind, ev, sigma))
            kinds_all[list_name] = parts
        extrema = kinds_all["rv_extrema"]
        separations = {}
        if k2 is not None:
            k1n, k2n = np.broadcast_to(k1, (n,)), np.broadcast_to(k2, (n,))
            for kind, ev, _s in extrema:
                # at the extremum's own true anomaly and omega (apsidal motion moves omega from t_periastron on)
                vs = phys.velocity_separation(e[:, None], ev["omega"], k1n[:, None], k2n[:, None], ev["true_anomaly"])
                terms = phys.velocity_separation_derivatives(ev, k1n, k2n, e, p, t0, w_dot, p_dot)
                separations[kind] = (np.broadcast_to(vs, ev["time"].shape),
                                     phys.event_sigma(terms, cov_all, elements))
    for i in range(n):
        events = per_system[i]["events"]
        for list_name, parts in kinds_all.items():
            rows = []
            for kind, ev, sigma in parts:
                fields = {"kind": np.full(count, kind, dtype=object)} if len(parts) > 1 else None
                rows.extend(_event_entries(ev["time"][i], sigma[i], ev["cycle"][i], fields, offset))
            rows.sort(key=lambda r: r["value"])
            events[list_name] = rows
        # the lines of an SB2 are split most at the radial-velocity extrema: both are listed, with |v1 - v2|
        mvs = []
        for kind, ev, sigma in extrema:
            fields = {"kind": np.full(count, kind, dtype=object)}
            if kind in separations:
                value, spread = separations[kind]
                fields["velocity_separation"] = [float(x) for x in value[i]]
                fields["velocity_separation_sigma"] = [float(x) if np.isfinite(x) else None for x in spread[i]]
            mvs.extend(_event_entries(ev["time"][i], sigma[i], ev["cycle"][i], fields, offset))
        mvs.sort(key=lambda r: r["value"])
        events["max_velocity_separation"] = mvs
        events["unit"] = "d"
        # the units of the entries' fields and of the light-travel amplitudes
        events["units"] = {**({"velocity_separation": "km/s", "velocity_separation_sigma": "km/s"}
                              if separations else {}),
                           "amplitude_star1": "d", "amplitude_star1_sigma": "d",
                           "amplitude_star2": "d", "amplitude_star2_sigma": "d"}
        events["time_format"] = time_format
        events["light_travel_time"] = {
            "applied": chosen if light is not None else "none",
            **{f"amplitude_{star}{part}": (float(a[i]) if a is not None and np.isfinite(a[i]) else None)
               for star in amplitudes for part, a in (("", amplitudes[star]), ("_sigma", amplitude_sigmas[star]))}}
    return per_system


def _ephemeris_check(inputs, outputs):
    if inputs.get("inclination") is not None and inputs.get("angular_semimajor_axis") is None \
            and inputs.get("node") is None:
        # the reverse half (node or angular_semimajor_axis without an inclination) is a constraint: a 422
        return [Warning("inclination_unused", "an inclination without angular_semimajor_axis or node determines "
                        "no output (the radial velocities, phases and separations do not depend on it); give "
                        "angular_semimajor_axis for the projected separation, node for the position angle")]
    return []


def _quadratic_ephemeris_defined(period=None, t_periastron=None, period_derivative=None, times=None, after=None,
                                 count=None, **_):
    """Where the period would shrink to zero before a time asked for, the quadratic ephemeris has no date."""
    if period_derivative is None or period is None or t_periastron is None:
        return np.asarray(True)
    rate = phys.period_change_rate(period_derivative)
    p, t0 = np.asarray(period, dtype=float), np.asarray(t_periastron, dtype=float)
    ends = [np.min(times), np.max(times)] if times is not None and len(times) else []
    if after is not None:
        ends += [np.asarray(after, dtype=float), np.asarray(after, dtype=float) + (int(count or 3) + 1) * p]
    ok = np.ones(np.shape(p), dtype=bool)
    for t in ends:
        ok &= 1.0 + 2.0 * rate * (t - t0) / p > 0.0
    return ok


def _apsides_slower_than_the_orbit(omega_dot=None, period=None, **_):
    """Apsidal motion advances omega by less than a turn per orbit (apsidal period U = 360 deg / omega_dot
    longer than P, in practice by far): beyond it omega(t) is no slow drift, and at 1e300 deg/yr its turns
    over the times asked for kept no digit of the angle."""
    if omega_dot is None or period is None:
        return np.asarray(True)
    return np.asarray(np.abs(omega_dot) * np.asarray(period, dtype=float) / DAYS_PER_JULIAN_YEAR < 360.0)


APSIDAL_CONSTRAINT = Constraint(("omega_dot",), "the apsides must turn by less than 360 deg per orbit "
                                "(|omega_dot| P < 360 deg: apsidal motion is slow beside the orbit)",
                                _apsides_slower_than_the_orbit)


def _ephemeris_consistent_masses(m1=None, m2=None, **_):
    return np.asarray((m1 is None) == (m2 is None))


def _ephemeris_visual_needs_inclination(angular_semimajor_axis=None, node=None, inclination=None, **_):
    return np.asarray(inclination is not None or (angular_semimajor_axis is None and node is None))


register(Calculation(
    name="ephemeris",
    path="/v1/orbit/ephemeris",
    title="Orbit ephemeris",
    summary="Phase, anomalies, separation and radial velocities of both stars at given times, the position on the "
            "sky when visual elements are given, and the dates of the next periastron passages, apastrons, "
            "conjunctions and radial-velocity extrema, each with its propagated uncertainty.",
    inputs=(
        period(example=2037.4),
        eccentricity(example=0.873),
        Input("omega", "deg", "argument of periastron of the primary's orbit", ANGLE, example=243.6, period=360.0),
        Input("t_periastron", "d", "a time of periastron passage (JD, or ISO 8601)", DATE, time=True,
              example=2458712.3),
        Input("k1", "km/s", "radial-velocity semi-amplitude of star 1 (the primary)", SPEED, example=61.2),
        Input("k2", "km/s", "radial-velocity semi-amplitude of star 2", SPEED, required=False, example=142.8),
        Input("gamma", "km/s", "systemic velocity", VELOCITY, required=False, default=0.0, example=-7.4),
        Input("times", "d", "times of the series (JD numbers, or ISO 8601 strings)", DATE, kind="series",
              time=True, label="time", example=[2460400.5, 2460500.5, 2460600.5]),
        Input("angular_semimajor_axis", "mas", "angular semi-major axis of the relative visual orbit", POSITIVE,
              required=False, example=11.8),
        Input("inclination", "deg", "orbital inclination (0 < i < 180 deg)", INCLINATION, required=False,
              example=58.0),
        Input("node", "deg", "position angle of the ascending node", ANGLE, required=False, example=112.0,
              period=360.0),
        Input("m1", "solMass", "mass of star 1 (with m2, for the physical separation)", POSITIVE, required=False,
              example=31.0),
        Input("m2", "solMass", "mass of star 2 (with m1, for the physical separation)", POSITIVE, required=False,
              example=13.3),
        Input("semimajor_axis", "au", "relative semi-major axis (for the physical separation)", POSITIVE,
              required=False, example=16.4),
        Input("after", "d", "list events at or after this time (default: the earliest of times)", DATE,
              required=False, time=True, exact=True, example=2460400.5),
        Input("count", "", "how many events of each kind to list", Domain(1, MAX_EVENT_COUNT), default=3,
              kind="integer", example=3),
        Input("omega_dot", "deg/yr", "apsidal motion: rate of advance of omega (omega is its value at t_periastron; "
              "period is then the anomalistic period)", ANY, required=False, example=0.8),
        Input("period_derivative", "s/yr", "rate of change of the period dP/dt (quadratic ephemeris; any "
              "time-per-time unit)", ANY, required=False, example=0.0),
        Input("light_travel_time", "", "correct the event dates for the light-travel time across the orbit (the "
              "a sin i / c term of the Roemer delay) as seen in the light of star1 or star2 (star2 needs k2), or "
              "none", kind="choice", choices=LIGHT_TRAVEL_CHOICES, required=False, default="none",
              example="none"),
    ),
    outputs=cited((
        Output("phase", "", "orbital phase since periastron", "phi = n(t) mod 1, n(t) = (t - T0)/P without "
               "a period derivative", period=1.0),
        Output("mean_anomaly", "deg", "mean anomaly", "M = 2 pi n(t), t = T0 + P (n + Pdot n^2 / 2)", period=360.0),
        Output("true_anomaly", "deg", "true anomaly", "tan(nu/2) = sqrt((1 + e)/(1 - e)) tan(E/2), "
               "E - e sin E = M", period=360.0),
        Output("separation", "", "separation of the stars in units of the semi-major axis",
               "r/a = 1 - e cos E = (1 - e^2)/(1 + e cos nu)"),
        Output("rv1", "km/s", "radial velocity of star 1", "v1 = gamma + K1 [cos(nu + omega) + e cos omega], "
               "omega = omega0 + omega_dot (t - T0)"),
        Output("rv2", "km/s", "radial velocity of star 2", "v2 = gamma - K2 [cos(nu + omega) + e cos omega], "
               "omega = omega0 + omega_dot (t - T0)"),
        Output("separation_au", "au", "separation of the stars",
               "r = a (1 - e cos E), a given or a^3 = GM_sun (M1 + M2) P^2 / (4 pi^2)"),
        Output("projected_separation", "mas", "angular separation of the stars on the sky",
               "rho = a'' (r/a) sqrt(cos^2 u + sin^2 u cos^2 i), u = nu + omega + 180 deg"),
        Output("position_angle", "deg", "position angle of star 2 relative to star 1",
               "tan(theta - Omega) = tan u cos i, u = nu + omega + 180 deg", period=360.0),
    ), {"true_anomaly": (MIKKOLA_1987, MURRAY_DERMOTT_1999), "separation": (MURRAY_DERMOTT_1999,),
        "separation_au": (MURRAY_DERMOTT_1999, *KEPLER), "projected_separation": (HEINTZ_1978,),
        "position_angle": (HEINTZ_1978,)}, (HILDITCH_2001,)),
    function=phys.ephemeris,
    references=(MIKKOLA_1987, MURRAY_DERMOTT_1999, HILDITCH_2001, HEINTZ_1978, ASTROPY_TIME, IAU_2015_B3,
                IAU_2012_B2),
    constants=("GM_sun", "au", "day", "c", "julian_year"),
    conventions=ORBIT_CONVENTIONS
    | {"symbols": SYMBOLS["ephemeris"]},
    constraints=(
        Constraint(("m1", "m2"), "m1 and m2 go together (both give the physical separation)",
                   _ephemeris_consistent_masses),
        Constraint(("inclination",), "angular_semimajor_axis and node need an inclination",
                   _ephemeris_visual_needs_inclination),
        Constraint(("period_derivative",), "with this period derivative the period reaches zero before some of the "
                   "times (or event dates) asked for: the quadratic ephemeris t = T0 + P (n + Pdot n^2 / 2) has no "
                   "date there", _quadratic_ephemeris_defined),
        APSIDAL_CONSTRAINT,
        Constraint(("k2",), "light_travel_time star2 needs k2 (its a sin i comes from k2)",
                   lambda k2=None, light_travel_time=None, **_: np.asarray(light_travel_time != "star2"
                                                                           or k2 is not None)),
    ),
    at_most_one=(("semimajor_axis", "m1"), ("semimajor_axis", "m2")),
    check=with_speed_check(_ephemeris_check, ("k1", "k2", "gamma")),
    extra=ephemeris_events,
    example={"period": {"value": 2037.4, "sigma": 1.2}, "eccentricity": {"value": 0.873, "sigma": 0.004},
             "omega": {"value": 243.6, "sigma": 1.5}, "t_periastron": {"value": 2458712.3, "sigma": 0.8},
             "k1": {"value": 61.2, "sigma": 1.1}, "k2": {"value": 142.8, "sigma": 3.0}, "gamma": -7.4,
             "times": [2460400.5, 2460500.5, 2460600.5, 2460700.5, 2460750.5], "count": 2,
             "correlations": [{"between": ["period", "t_periastron"], "rho": -0.4}]},
))


# --------------------------------------------------------------------------- geometry
def _geometry_check(inputs, outputs):
    out = []
    for star in ("1", "2"):
        fill = outputs.get("fill_factor" + star)
        if fill is not None and np.any(fill > 1.0):
            out.append(Warning(f"roche_lobe_overflow{star}",
                               f"star {star} is larger than its Roche lobe at periastron (fill factor > 1): "
                               "mass transfer is expected there, and the point-mass orbit is only approximate",
                               np.broadcast_to(fill > 1.0, np.shape(fill))))
    r1, r2, peri = inputs.get("radius1"), inputs.get("radius2"), outputs.get("periastron_distance")
    if r1 is not None and r2 is not None and peri is not None:
        touching = (np.asarray(r1) + np.asarray(r2)) >= peri * phys.AU_IN_SOLAR_RADII
        if np.any(touching):
            out.append(Warning("stars_touch_at_periastron",
                               "radius1 + radius2 reaches the periastron distance: the stars would touch",
                               np.broadcast_to(touching, np.shape(peri))))
    return out


def _geometry_m1_needs_partner(m1=None, m2=None, mass_ratio=None, **_):
    return np.asarray(m1 is None or m2 is not None or mass_ratio is not None)


def _geometry_radii_need_masses(m1=None, semimajor_axis=None, mass_ratio=None, radius1=None, radius2=None, **_):
    splittable = m1 is not None or (semimajor_axis is not None and mass_ratio is not None)
    return np.asarray(splittable or (radius1 is None and radius2 is None))


register(Calculation(
    name="geometry",
    path="/v1/orbit/geometry",
    title="Orbit geometry",
    summary="Semi-major axis from Kepler's third law (or the total mass from a), periastron and apastron distances, "
            "relative orbital speeds there, Roche-lobe radii of both stars at periastron and apastron (Eggleton "
            "1983) and the stars' Roche-lobe fill factors.",
    inputs=(
        period(example=118.3),
        eccentricity(example=0.62),
        Input("m1", "solMass", "mass of star 1", POSITIVE, required=False, example=8.4),
        Input("m2", "solMass", "mass of star 2", POSITIVE, required=False, example=5.1),
        Input("semimajor_axis", "au", "relative semi-major axis (instead of m1 and m2)", POSITIVE, required=False,
              example=1.6),
        Input("mass_ratio", "", "q = M2/M1 (with semimajor_axis or m1, instead of m2)", POSITIVE, required=False,
              example=0.6),
        Input("radius1", "solRad", "radius of star 1", POSITIVE, required=False, example=4.3),
        Input("radius2", "solRad", "radius of star 2", POSITIVE, required=False, example=2.9),
    ),
    outputs=cited((
        Output("semimajor_axis", "au", "relative semi-major axis", "a^3 = GM_sun (M1 + M2) P^2 / (4 pi^2)"),
        Output("total_mass", "solMass", "total mass", "M1 + M2 = 4 pi^2 a^3 / (GM_sun P^2)"),
        Output("m1", "solMass", "mass of star 1", "M1 = (M1 + M2)/(1 + q)"),
        Output("m2", "solMass", "mass of star 2", "M2 = q M1"),
        Output("mass_ratio", "", "mass ratio q = M2/M1", "q = M2 / M1"),
        Output("periastron_distance", "au", "separation at periastron", "a (1 - e)"),
        Output("apastron_distance", "au", "separation at apastron", "a (1 + e)"),
        Output("speed_periastron", "km/s", "relative orbital speed at periastron",
               "v^2 = GM_sun (M1 + M2) (2/r - 1/a), r = a (1 - e)"),
        Output("speed_apastron", "km/s", "relative orbital speed at apastron",
               "v^2 = GM_sun (M1 + M2) (2/r - 1/a), r = a (1 + e)"),
        Output("roche_lobe1", "solRad", "Roche-lobe radius of star 1 at periastron",
               "r_L = a (1 - e) 0.49 q1^{2/3} / (0.6 q1^{2/3} + ln(1 + q1^{1/3})), q1 = M1/M2"),
        Output("roche_lobe2", "solRad", "Roche-lobe radius of star 2 at periastron",
               "r_L = a (1 - e) 0.49 q2^{2/3} / (0.6 q2^{2/3} + ln(1 + q2^{1/3})), q2 = M2/M1"),
        Output("roche_lobe1_apastron", "solRad", "Roche-lobe radius of star 1 at apastron",
               "r_L = a (1 + e) 0.49 q1^{2/3} / (0.6 q1^{2/3} + ln(1 + q1^{1/3})), q1 = M1/M2"),
        Output("roche_lobe2_apastron", "solRad", "Roche-lobe radius of star 2 at apastron",
               "r_L = a (1 + e) 0.49 q2^{2/3} / (0.6 q2^{2/3} + ln(1 + q2^{1/3})), q2 = M2/M1"),
        Output("fill_factor1", "", "radius of star 1 over its Roche lobe at periastron", "R1 / r_L, with r_L of star 1 at periastron"),
        Output("fill_factor2", "", "radius of star 2 over its Roche lobe at periastron", "R2 / r_L, with r_L of star 2 at periastron"),
    ), {"mass_ratio": (HILDITCH_2001,), "periastron_distance": (MURRAY_DERMOTT_1999,),
        "apastron_distance": (MURRAY_DERMOTT_1999,), "speed_periastron": (MURRAY_DERMOTT_1999, *KEPLER[1:]),
        "speed_apastron": (MURRAY_DERMOTT_1999, *KEPLER[1:]),
        **dict.fromkeys(ROCHE_LOBES, (EGGLETON_1983, *KEPLER[1:])),
        "fill_factor1": (EGGLETON_1983,), "fill_factor2": (EGGLETON_1983,)}, KEPLER),
    function=phys.geometry,
    references=(EGGLETON_1983, HILDITCH_2001, MURRAY_DERMOTT_1999, IAU_2015_B3, IAU_2012_B2),
    constants=("GM_sun", "au", "R_sun", "day"),
    conventions={"mass_ratio": MASS_RATIO,
                 "roche_lobe": "Eggleton (1983) volume-equivalent radius with the instantaneous separation in place "
                               "of a (an approximation for eccentric orbits)",
                 "speeds": "relative orbital speed of the two stars (vis-viva), not of either star about the "
                           "centre of mass"}
    | {"symbols": SYMBOLS["geometry"]},
    exclusive=(("m1", "semimajor_axis"),),
    at_most_one=(("m2", "mass_ratio"), ("m2", "semimajor_axis")),
    constraints=(
        Constraint(("m2", "mass_ratio"), "m1 needs m2 or mass_ratio", _geometry_m1_needs_partner),
        Constraint(("radius1", "radius2"), "Roche-lobe fill factors need the masses of both stars: give m1 with m2 "
                   "(or mass_ratio), or semimajor_axis with mass_ratio", _geometry_radii_need_masses),
    ),
    check=with_speed_check(_geometry_check, ("speed_periastron",)),
    example={"period": {"value": 118.3, "sigma": 0.2}, "eccentricity": {"value": 0.62, "sigma": 0.02},
             "m1": {"value": 8.4, "sigma": 0.5}, "m2": {"value": 5.1, "sigma": 0.3},
             "radius1": {"value": 4.3, "sigma": 0.3}, "radius2": {"value": 2.9, "sigma": 0.2}},
))


# --------------------------------------------------------------------------- mid-eclipse
MID_ECLIPSE_ELEMENTS = ("t_periastron", "period", "eccentricity", "omega", "inclination", "omega_dot",
                        "period_derivative")


def mid_eclipse_events(quantities, statics, options, time_format="jd") -> list[dict]:
    """The ``events`` member per system: dates of mid-eclipse of each star after ``after``, with linear sigmas.

    t = T0 + P (c + Pdot c^2 / 2), c = n + phi with phi the mid-eclipse phase at omega(t); sigma^2 = J C J^T
    over the elements (:func:`calcservice.physics.orbit.mid_eclipse_dates`).
    """
    n = max(len(np.atleast_1d(quantities[k].value)) for k in MID_ECLIPSE_ELEMENTS if k in quantities)
    t0, p, e, w, i = (np.broadcast_to(_value(quantities, k), (n,)) for k in MID_ECLIPSE_ELEMENTS[:5])
    w_dot, p_dot = (None if _value(quantities, k) is None else np.broadcast_to(_value(quantities, k), (n,))
                    for k in ("omega_dot", "period_derivative"))
    count = int(statics.get("count") or 3)
    offset = MJD_ZERO_JD if time_format == "mjd" else 0.0
    after = _after(quantities, statics, n)
    per_system: list[dict] = [{"events": {}} for _ in range(n)]
    with np.errstate(all="ignore"):
        cov = _element_covariance(quantities, getattr(options, "correlations", {}) or {}, n, MID_ECLIPSE_ELEMENTS)
        for star in (1, 2):
            ev = phys.mid_eclipse_dates(star, p, t0, e, w, i, after, count, w_dot, p_dot)
            sigma = phys.event_sigma(ev, cov, MID_ECLIPSE_ELEMENTS)
            for k in range(n):
                per_system[k]["events"][f"eclipse_of_star{star}"] = _event_entries(ev["time"][k], sigma[k],
                                                                                   ev["cycle"][k], None, offset)
        sizes = {name: _value(quantities, name) for name in ("semimajor_axis", "total_mass", "radius1", "radius2")}
        if sizes["radius1"] is not None and sizes["radius2"] is not None:
            # with the apsidal motion, as the outputs eclipse_parameter1,2 and their no_eclipse warnings have it
            geometry = phys.mid_eclipse(p, e, w, i, omega_dot=w_dot, **sizes)
            for star in (1, 2):
                overlap = np.broadcast_to(geometry.get(f"eclipse_parameter{star}", np.nan), (n,))
                for k in range(n):
                    per_system[k].setdefault("eclipse_possible", {})[f"star{star}"] = (
                        bool(overlap[k] < 1.0) if np.isfinite(overlap[k]) else None)
    for k in range(n):
        per_system[k]["events"]["unit"] = "d"
        per_system[k]["events"]["time_format"] = time_format
    return per_system


def _mid_eclipse_check(inputs, outputs):
    out = []
    for star in ("1", "2"):
        ratio = outputs.get(f"eclipse_parameter{star}")
        if ratio is not None and np.any(ratio >= 1.0):
            out.append(Warning(f"no_eclipse_of_star{star}", f"at their closest on the sky near this conjunction the "
                               f"discs of the stars do not overlap (minimum_separation{star} >= radius1 + radius2): "
                               f"star {star} is not eclipsed; the dates are those of closest approach",
                               ratio >= 1.0))
    return out


def _mid_eclipse_radii_need_size(semimajor_axis=None, total_mass=None, radius1=None, radius2=None, **_):
    return np.asarray((radius1 is None and radius2 is None)
                      or (radius1 is not None and radius2 is not None
                          and (semimajor_axis is not None or total_mass is not None)))


register(Calculation(
    name="mid-eclipse",
    path="/v1/orbit/mid-eclipse",
    title="Mid-eclipse times of an eccentric, inclined orbit",
    summary="The times of minimum projected separation near each conjunction (mid-eclipse, which differs from the "
            "conjunction when e > 0 and i < 90 deg), with propagated uncertainties, their offsets from the "
            "conjunctions, the separation on the sky at minimum and, with both radii, whether the discs overlap.",
    inputs=(
        period(example=9.73),
        eccentricity(example=0.28),
        Input("omega", "deg", "argument of periastron of the primary's orbit", ANGLE, example=61.0, period=360.0),
        Input("t_periastron", "d", "a time of periastron passage (JD, or ISO 8601)", DATE, time=True,
              example=2460811.42),
        Input("inclination", "deg", "orbital inclination (0 < i < 180 deg)", INCLINATION, example=84.6),
        Input("after", "d", "list mid-eclipses at or after this time (JD, or ISO 8601)", DATE, time=True,
              exact=True, example=2461000.5),
        Input("count", "", "how many mid-eclipses of each star to list", Domain(1, MAX_EVENT_COUNT), default=3,
              kind="integer", example=3),
        Input("semimajor_axis", "au", "relative semi-major axis (for the separation in solar radii; or give "
              "total_mass)", POSITIVE, required=False, example=0.118),
        Input("total_mass", "solMass", "M1 + M2 (for the semi-major axis by Kepler's third law; or give "
              "semimajor_axis)", POSITIVE, required=False, example=3.9),
        Input("radius1", "solRad", "radius of star 1 (with radius2, to tell whether the discs overlap)", POSITIVE,
              required=False, example=2.1),
        Input("radius2", "solRad", "radius of star 2 (with radius1)", POSITIVE, required=False, example=1.6),
        Input("omega_dot", "deg/yr", "apsidal motion: rate of advance of omega (omega is its value at t_periastron; "
              "period is then the anomalistic period)", ANY, required=False, example=0.8),
        Input("period_derivative", "s/yr", "rate of change of the period dP/dt (quadratic ephemeris; any "
              "time-per-time unit)", ANY, required=False, example=0.0),
    ),
    outputs=cited((
        *(o for star, whom in (("1", "star 1 eclipsed, star 2 in front"), ("2", "star 2 eclipsed, star 1 in front"))
          for o in (
              Output(f"mid_eclipse_phase{star}", "", f"phase after periastron of mid-eclipse ({whom})",
                     "phi = M(nu_min) / 2 pi, nu_min: d rho^2/d nu = 0 next to nu + omega = "
                     + ("90" if star == "1" else "270") + " deg", period=1.0),
              Output(f"conjunction_offset{star}", "d", f"mid-eclipse minus conjunction ({whom})",
                     "(M(nu_min) - M(nu_conj)) P / 2 pi, nu_conj + omega(t_conj) = "
                     + ("90" if star == "1" else "270") + " deg (omega at the conjunction under apsidal motion)"),
              Output(f"minimum_separation{star}_over_a", "", f"projected separation at mid-eclipse over a ({whom})",
                     "rho/a = (1 - e^2)/(1 + e cos nu) sqrt(1 - sin^2 i sin^2(nu + omega))"),
              Output(f"minimum_separation{star}", "solRad", f"projected separation at mid-eclipse ({whom})",
                     "rho = a (rho/a)"),
              Output(f"eclipse_parameter{star}", "", f"minimum projected separation over R1 + R2 ({whom}): the discs "
                     "overlap, an eclipse happens, where it is below 1", "rho_min / (R1 + R2)"),
          )),
        Output("semimajor_axis", "au", "relative semi-major axis (as given, or from Kepler's third law)",
               "a^3 = GM_sun (M1 + M2) P^2 / (4 pi^2)"),
    ), {**{f"{name}{star}": (HILDITCH_2001, MURRAY_DERMOTT_1999) for star in "12"
           for name in ("mid_eclipse_phase", "conjunction_offset")},
        **{f"minimum_separation{star}_over_a": (HILDITCH_2001, HEINTZ_1978) for star in "12"},
        **{f"minimum_separation{star}": (HILDITCH_2001, HEINTZ_1978, *KEPLER[1:]) for star in "12"},
        "semimajor_axis": KEPLER}, (HILDITCH_2001,)),
    function=phys.mid_eclipse,
    references=(HILDITCH_2001, HEINTZ_1978, MURRAY_DERMOTT_1999, MIKKOLA_1987, ASTROPY_TIME, IAU_2015_B3,
                IAU_2012_B2),
    constants=("GM_sun", "au", "R_sun", "day", "julian_year"),
    conventions={**{k: ORBIT_CONVENTIONS[k] for k in ("omega", "inclination", "time", "phase", "iso")},
                 "mid_eclipse": "the time of minimum projected separation of the two centres near a conjunction "
                                "(spherical stars, no light-travel time); eclipse_of_star1 is the conjunction with "
                                "star 2 in front (nu + omega = 90 deg), eclipse_of_star2 the other; which one is the "
                                "deeper (primary) eclipse depends on the surface brightnesses",
                 "events": "the first `count` mid-eclipses of each star at or after `after`, with the linear sigma "
                           "of t_periastron, period (with their correlation), eccentricity, omega, inclination, "
                           "omega_dot and period_derivative "
                           "through the cycles elapsed since t_periastron; dates in the request's time_format (the "
                           "events' time_format member), each with its ISO 8601 date",
                 "eclipse_possible": "given with both radii: true where the discs overlap at the minimum separation",
                 "apsidal_motion": ORBIT_CONVENTIONS["apsidal_motion"] + "; the phases, offsets and separations "
                                   "are those at t_periastron, the event dates follow omega(t)",
                 "period_derivative": ORBIT_CONVENTIONS["period_derivative"]}
    | {"symbols": SYMBOLS["mid-eclipse"]},
    constraints=(Constraint(("radius1", "radius2"), "whether the discs overlap needs both radii and the orbit's size "
                            "(semimajor_axis or total_mass)", _mid_eclipse_radii_need_size),
                 Constraint(("period_derivative",), "with this period derivative the period reaches zero before the "
                            "mid-eclipses asked for: the quadratic ephemeris t = T0 + P (n + Pdot n^2 / 2) has no "
                            "date there", _quadratic_ephemeris_defined),
                 APSIDAL_CONSTRAINT),
    at_most_one=(("semimajor_axis", "total_mass"),),
    check=_mid_eclipse_check,
    extra=mid_eclipse_events,
    example={"period": {"value": 9.73, "sigma": 0.0004}, "eccentricity": {"value": 0.28, "sigma": 0.01},
             "omega": {"value": 61.0, "sigma": 2.0}, "t_periastron": {"value": 2460811.42, "sigma": 0.05},
             "inclination": {"value": 84.6, "sigma": 0.4}, "after": 2461000.5, "count": 3,
             "total_mass": {"value": 3.9, "sigma": 0.2}, "radius1": {"value": 2.1, "sigma": 0.1},
             "radius2": {"value": 1.6, "sigma": 0.1}},
))
