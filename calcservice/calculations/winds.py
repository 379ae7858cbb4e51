"""Declarations: colliding winds, mass-loss rates by several methods, distances from dust shells."""

import numpy as np

from ..physics import winds as phys
from ..physics.orbit import period_change_rate
from ..registry import ANGLE, ANY, DATE, ECCENTRICITY, POSITIVE, Calculation, Constraint, Domain, Input, Output, Warning, register
from .common import (EDGE_ROUNDING, HILDITCH_2001, IAU_2012_B2, IAU_2015_B3, SPEED, SYMBOLS, cited,
                     with_speed_check)

# a phase counts cycles from periastron: within 1e8 of them a double still resolves 1.5e-8 of a cycle, beyond
# (1e17) the fraction that places the stars on the orbit is lost and the answer is that of phase 0
ORBITAL_PHASE = Domain(-1e8, 1e8)

EICHLER_USOV_1993 = "D. Eichler & V. Usov (1993), ApJ 402, 271 (shock-cone opening angle)"
CANTO_RAGA_WILKIN_1996 = "J. Cantó, A. C. Raga & F. P. Wilkin (1996), ApJ 469, 729 (thin-shell colliding winds)"
STEVENS_1992 = "I. R. Stevens, J. M. Blondin & A. M. T. Pollock (1992), ApJ 386, 265 (colliding winds, cooling)"
WRIGHT_BARLOW_1975 = "A. E. Wright & M. J. Barlow (1975), MNRAS 170, 41 (radio and infrared emission of winds)"
PANAGIA_FELLI_1975 = "N. Panagia & M. Felli (1975), A&A 39, 1 (free-free emission of ionised winds)"
LEITHERER_ROBERT_1991 = "C. Leitherer & C. Robert (1991), ApJ 377, 629 (radio Gaunt factor)"
VINK_2001 = "J. S. Vink, A. de Koter & H. J. G. L. M. Lamers (2001), A&A 369, 574 (O/B-star mass-loss recipe)"
NUGIS_LAMERS_2000 = "T. Nugis & H. J. G. L. M. Lamers (2000), A&A 360, 227 (Wolf-Rayet mass-loss rates)"
HUANG_1963 = "S.-S. Huang (1963), ApJ 138, 471 (modes of mass ejection and the orbital period)"
RYBICKI_LIGHTMAN_1979 = ("G. B. Rybicki & A. P. Lightman (1979), Radiative Processes in Astrophysics, Wiley, "
                         "eq. 5.19b (Rayleigh-Jeans free-free absorption coefficient)")
JEANS_1924 = "J. H. Jeans (1924), MNRAS 85, 2 (secular change of an orbit losing mass)"
SOBERMAN_1997 = ("G. E. Soberman, E. S. Phinney & E. P. J. van den Heuvel (1997), A&A 327, 620 (stability criteria "
                 "for mass transfer; isotropic re-emission)")

POSITIVE_BELOW_ONE = Domain(0.0, 1.0, low_open=True)
class HalfAngleDomain(Domain):
    """A measured half-opening angle, its upper bound said in full and what it is (not rounded to 6 digits)."""

    def describe(self, unit: str = "deg") -> str:
        return (f"must be > 0 and <= {self.high!r} {unit} (2.1 x 3/4 rad, the widest cone of the Eichler & Usov "
                "(1993) fit, at eta = 1)")

    def message(self, unit: str = "") -> str:
        return self.describe(unit or "deg")


#: a measured half-opening angle: up to the widest cone of the Eichler & Usov (1993) fit, 2.1 x 3/4 rad (90.24 deg,
#: eta = 1), which the collision gives for eta near 1; Cantó, Raga & Wilkin (1996) have eta = 1 at 90 deg
HALF_ANGLE = HalfAngleDomain(0.0, float(np.degrees(phys.EICHLER_USOV_WIDEST)), low_open=True)
EU93_LOWEST_ETA = 1.0e-4

WIND_CONVENTIONS = {
    "momentum_ratio": "eta = (Mdot2 v2)/(Mdot1 v1) with star 1 the stronger wind; when the inputs make eta > 1 "
                      "the roles are swapped (a warning says so): momentum_ratio is then Mdot1 v1/(Mdot2 v2) <= 1, "
                      "the shock cone wraps star 1 and the opening angles refer to it",
    "star_labels": "outputs ending in 1 or 2 (stagnation distances, cooling parameters, temperatures) always keep "
                   "the input's numbering, whichever wind is stronger",
    "winds": "spherical point-source winds at their terminal speeds: no wind acceleration, radiative braking or "
             "inhibition, orbital motion (Coriolis skew) or clumping in the geometry",
    "stagnation_distance": "distance from each star's centre to the stagnation point on the line of centres",
    "opening_half_angle": "asymptotic half-opening angle of the shock cone, measured from the line of centres "
                          "(the axis through the weaker-wind star, pointing away from the stronger-wind star)",
    "cooling_parameter": "chi = t_cool/t_esc; chi >~ 1: the shocked gas stays hot (adiabatic), chi <~ 1: it cools "
                         "fast and forms a thin, unstable radiative shell",
    "mass_loss_rate": "positive for mass leaving a star, in solMass/yr",
}


def _given(x) -> bool:
    return x is not None


def _rows(ok: bool) -> np.ndarray:
    return np.asarray(ok, dtype=bool)


# ----------------------------------------------------------------------------- collision

def _needs(field, when, message):
    """A constraint on ``field`` that fails wherever ``when(**inputs)`` is true."""
    return Constraint((field,), message, lambda **kw: _rows(not when(**kw)))


_ORBIT_ONLY = ("semimajor_axis", "period", "m1", "m2")
_KEPLER = ("period", "m1", "m2")


def _kepler_incomplete(name):
    def when(eccentricity=None, semimajor_axis=None, **kw):
        if not _given(eccentricity) or _given(semimajor_axis):
            return False
        parts = [_given(kw.get(p)) for p in _KEPLER]
        return not parts[_KEPLER.index(name)] and any(parts)
    return when


_COLLISION_CONSTRAINTS = (
    *(_needs(name, lambda separation=None, eccentricity=None, **_: not (_given(separation) or _given(eccentricity)),
             "give separation, or an orbit: eccentricity with semimajor_axis (or period, m1 and m2)")
      for name in ("separation", "eccentricity")),
    _needs("semimajor_axis",
           lambda eccentricity=None, semimajor_axis=None, period=None, m1=None, m2=None, **_:
           _given(eccentricity) and not any(map(_given, (semimajor_axis, period, m1, m2))),
           "an orbit needs its size: give semimajor_axis, or period with m1 and m2"),
    *(_needs(name, _kepler_incomplete(name),
             "Kepler's third law needs period, m1 and m2 together (or give semimajor_axis instead)")
      for name in _KEPLER),
    *(_needs(name, lambda _n=name, **kw: _given(kw.get(_n)) and not _given(kw.get("eccentricity")),
             "a phase or true anomaly needs an orbit: give eccentricity and semimajor_axis (or period, m1 and m2) "
             "instead of separation")
      for name in ("phase", "true_anomaly")),
    *(_needs(name, lambda _n=name, **kw: _given(kw.get(_n)) and _given(kw.get("separation")),
             "belongs to an orbit and is not used with separation: give either separation or an orbit")
      for name in _ORBIT_ONLY),
)


def _collision_check(inputs, outputs):
    out = []
    raw = phys.momentum_ratio(inputs["mdot1"], inputs["vinf1"], inputs["mdot2"], inputs["vinf2"])
    swapped = raw > 1.0 + EDGE_ROUNDING
    if np.any(swapped):
        out.append(Warning("roles_swapped", "Mdot2 v2 > Mdot1 v1: star 2 has the stronger wind. momentum_ratio is "
                           "given as Mdot1 v1 / (Mdot2 v2) <= 1 and the shock cone wraps star 1; outputs numbered 1 "
                           "and 2 keep your numbering", swapped))
    eta = outputs["momentum_ratio"]
    low = eta < EU93_LOWEST_ETA * (1.0 - EDGE_ROUNDING)
    if np.any(low):
        out.append(Warning("eu93_out_of_range", f"the momentum ratio is below {EU93_LOWEST_ETA:g}, outside the range "
                           "of the Eichler & Usov (1993) fit (1e-4 <= eta <= 1); prefer opening_half_angle_crw96",
                           low))
    # the separation is the one given, or the orbit's at the phase or true anomaly given
    here = "at the given separation" if inputs.get("separation") is not None else \
        "at the given true anomaly" if inputs.get("true_anomaly") is not None else "at the given orbital phase"
    places = (("", here), ("_periastron", "at periastron"), ("_apastron", "at apastron"))
    for star in ("1", "2"):
        radius = inputs.get("radius" + star)
        if radius is None:
            continue
        radius_au = radius / phys.AU_IN_SOLAR_RADII
        for suffix, where in places:
            r = outputs.get(f"stagnation_distance{star}{suffix}")
            if r is None:
                continue
            inside = r < radius_au
            if np.any(inside):
                other = "2" if star == "1" else "1"
                out.append(Warning(f"stagnation_inside_star{star}",
                                   f"{where} the stagnation point lies inside star {star} (radius{star}): the ram "
                                   f"pressures cannot balance, so the wind of star {other} reaches the surface of "
                                   f"star {star} and the point-wind results there do not hold", inside))
    return out


_SEPARATION_DEPENDENT = (
    ("stagnation_distance1", "au", "distance of the stagnation point from star 1",
     "r1 = D / (1 + eta^{1/2}), D the separation"),
    ("stagnation_distance2", "au", "distance of the stagnation point from star 2",
     "r2 = D eta^{1/2} / (1 + eta^{1/2}), D the separation"),
    ("cooling_parameter1", "", "cooling parameter chi of the shocked wind of star 1 (>~1 adiabatic, <~1 radiative)",
     "chi1 = (v1 / 1000 km/s)^4 (r1 / 1e12 cm) / (Mdot1 / 1e-7 solMass/yr)"),
    ("cooling_parameter2", "", "cooling parameter chi of the shocked wind of star 2 (>~1 adiabatic, <~1 radiative)",
     "chi2 = (v2 / 1000 km/s)^4 (r2 / 1e12 cm) / (Mdot2 / 1e-7 solMass/yr)"),
)


def _collision_outputs():
    outs = [
        Output("momentum_ratio", "", "wind-momentum ratio of the weaker to the stronger wind (<= 1)",
               "eta = Mdot2 v2 / (Mdot1 v1)"),
        Output("opening_half_angle_eu93", "deg", "shock-cone half-opening angle about the weaker-wind star, "
               "Eichler & Usov (1993)", "theta = 2.1 (1 - eta^{2/5} / 4) eta^{1/3} rad"),
        Output("opening_half_angle_crw96", "deg", "shock-cone half-opening angle about the weaker-wind star, "
               "Cantó, Raga & Wilkin (1996)", "psi = pi - theta_inf, theta_inf - tan(theta_inf) = pi / (1 - eta)"),
        Output("post_shock_temperature1", "K", "temperature behind the strong shock in the wind of star 1",
               "k T = (3/16) mu1 m_H v1^2"),
        Output("post_shock_temperature2", "K", "temperature behind the strong shock in the wind of star 2",
               "k T = (3/16) mu2 m_H v2^2"),
        Output("separation", "au", "separation of the stars (as given, or at the phase / true anomaly)",
               "r = a (1 - e cos E) = a (1 - e^2) / (1 + e cos nu)"),
        Output("true_anomaly", "deg", "true anomaly at the given phase", "Kepler's equation M = E - e sin E, "
               "M = 2 pi phase", period=360.0),
        Output("semimajor_axis", "au", "relative semi-major axis (as given, or from Kepler's third law)",
               "a^3 = GM_sun (M1 + M2) P^2 / (4 pi^2)"),
        Output("separation_periastron", "au", "separation at periastron", "a (1 - e)"),
        Output("separation_apastron", "au", "separation at apastron", "a (1 + e)"),
    ]
    for suffix, where in (("", "at the separation"), ("_periastron", "at periastron"), ("_apastron", "at apastron")):
        for name, unit, description, formula in _SEPARATION_DEPENDENT:
            outs.append(Output(name + suffix, unit, f"{description}, {where}", formula))
    orbit = ("separation", "true_anomaly", "separation_periastron", "separation_apastron")
    return cited(outs, {"opening_half_angle_eu93": (EICHLER_USOV_1993,),
                        "opening_half_angle_crw96": (CANTO_RAGA_WILKIN_1996,),
                        **dict.fromkeys(orbit, (HILDITCH_2001,)),
                        "semimajor_axis": (HILDITCH_2001, IAU_2015_B3, IAU_2012_B2)}, (STEVENS_1992,))


def _mdot(name, star, example, required=True, extra=""):
    return Input(name, "solMass/yr", f"mass-loss rate of star {star}{extra}", POSITIVE, required=required,
                 example=example)


def _vinf(name, star, example):
    return Input(name, "km/s", f"terminal wind speed of star {star}", SPEED, example=example)


register(Calculation(
    name="collision",
    path="/v1/winds/collision",
    title="Colliding winds: momentum ratio, shock geometry and cooling",
    summary="Wind-momentum ratio, stagnation point, shock-cone opening angle (Eichler & Usov 1993; Cantó, Raga & "
            "Wilkin 1996), cooling parameters and post-shock temperatures, at a separation or around an eccentric "
            "orbit (always at periastron and apastron, and at a phase or true anomaly when given).",
    inputs=(
        _mdot("mdot1", "1", 2.4e-5, extra=" (by convention the stronger wind)"),
        _mdot("mdot2", "2", 1.1e-6),
        _vinf("vinf1", "1", 2300.0),
        _vinf("vinf2", "2", 1900.0),
        Input("separation", "au", "separation of the stars (give this, or an orbit with eccentricity)", POSITIVE,
              required=False, example=3.2),
        Input("eccentricity", "", "orbital eccentricity (gives an orbit; with semimajor_axis, or period, m1 and m2)",
              ECCENTRICITY, required=False, example=0.64),
        Input("semimajor_axis", "au", "relative semi-major axis of the orbit", POSITIVE, required=False,
              example=9.1),
        Input("period", "d", "orbital period (with m1 and m2, for the semi-major axis)", POSITIVE, required=False,
              example=2950.0),
        Input("m1", "solMass", "mass of star 1 (with period and m2)", POSITIVE, required=False, example=18.0),
        Input("m2", "solMass", "mass of star 2 (with period and m1)", POSITIVE, required=False, example=24.0),
        Input("phase", "", "orbital phase (t - T_periastron)/P, 0 at periastron (needs an orbit)", ORBITAL_PHASE,
              required=False, example=0.1, period=1.0),
        Input("true_anomaly", "deg", "true anomaly, 0 at periastron (needs an orbit)", ANGLE, required=False,
              example=120.0, period=360.0),
        Input("mu1", "", "mean mass per particle of the shocked wind of star 1 in units of m_H (default: fully "
              "ionised solar gas; fully ionised helium is 1.33)", POSITIVE, required=False,
              default=phys.SOLAR_IONISED_MU, example=1.33),
        Input("mu2", "", "mean mass per particle of the shocked wind of star 2 in units of m_H (default: fully "
              "ionised solar gas)",
              POSITIVE, required=False, default=phys.SOLAR_IONISED_MU, example=0.617),
        Input("radius1", "solRad", "radius of star 1 (to warn when the stagnation point lies inside it)", POSITIVE,
              required=False, example=9.0),
        Input("radius2", "solRad", "radius of star 2 (to warn when the stagnation point lies inside it)", POSITIVE,
              required=False, example=14.0),
    ),
    outputs=_collision_outputs(),
    function=phys.collision,
    references=(STEVENS_1992, EICHLER_USOV_1993, CANTO_RAGA_WILKIN_1996, HILDITCH_2001, IAU_2015_B3, IAU_2012_B2),
    constants=("GM_sun", "au", "day", "m_H", "k_B", "R_sun"),
    conventions={**WIND_CONVENTIONS,
                 "phase": "(t - T_periastron)/P, mean anomaly M = 2 pi phase; true anomaly counted from periastron"}
    | {"symbols": SYMBOLS["collision"]},
    constraints=_COLLISION_CONSTRAINTS,
    # "exactly one of separation, eccentricity" is a constraint so that a phase given alone is named too
    at_most_one=(("separation", "eccentricity"), ("phase", "true_anomaly"), ("semimajor_axis", "period"), ("semimajor_axis", "m1"),
                 ("semimajor_axis", "m2")),
    check=with_speed_check(_collision_check, ("vinf1", "vinf2")),
    example={"mdot1": {"value": 2.4e-5, "sigma": 0.6e-5}, "mdot2": {"value": 1.1e-6, "sigma": 0.4e-6},
             "vinf1": {"value": 2300.0, "sigma": 100.0}, "vinf2": {"value": 1900.0, "sigma": 150.0},
             "eccentricity": {"value": 0.64, "sigma": 0.02}, "period": {"value": 2950.0, "sigma": 15.0},
             "m1": {"value": 18.0, "sigma": 3.0}, "m2": {"value": 24.0, "sigma": 4.0},
             "phase": {"value": 0.1, "sigma": 0.005}},
))


# ------------------------------------------------------------------------- radio mass loss

#: the compositions behind the wind types' defaults (physics.winds.WIND_TYPES derives the numbers from them)
WIND_COMPOSITIONS = {"o-star": "H and He, n(He)/n(H) = 0.1, H+ and He+", "wn": "He, He+",
                     "wc": "He and C, n(C)/n(He) = 0.2, He+ and C2+"}


def _wind_defaults(kind: str) -> str:
    """The defaults of a wind type as used, to the digits a re-derivation needs (from the code, not retyped)."""
    mu, z, gamma, t = phys.WIND_TYPES[kind]
    return f"mu {mu:.10g}, Z {z:.10g}, gamma {gamma:.10g}, T {t:g} K"


def _by_wind_type(k: int) -> tuple[str, dict[str, float]]:
    """Input.default_by for member ``k`` of physics.winds.WIND_TYPES (mu, Z, gamma, T): the value the physics
    takes for each wind type when the input is not given."""
    return ("wind_type", {kind: float(values[k]) for kind, values in phys.WIND_TYPES.items()})


def _radio_gaunt_positive(frequency=None, temperature=None, z_rms=None, wind_type=None, **_):
    """Rows where the radio Gaunt factor of the nominal inputs (with the wind type's defaults) is positive."""
    if frequency is None:
        return _rows(True)
    _, default_z, _, default_t = phys.WIND_TYPES.get(wind_type or "o-star", (np.nan,) * 4)
    g = phys.radio_gaunt_factor(default_t if temperature is None else temperature, frequency * 1.0e9,
                                default_z if z_rms is None else z_rms)
    return ~(g <= 0.0)


def _radio_check(inputs, outputs):
    n = np.shape(outputs["mass_loss_rate"])
    out = [Warning("possibly_non_thermal", "in a colliding-wind binary part of the radio flux may be non-thermal "
                   "synchrotron emission from the wind-collision region, which makes this rate an upper limit; a "
                   "thermal wind has a spectral index near +0.6 (S ~ nu^0.6) and a steady flux",
                   np.ones(n, dtype=bool))]
    ratio = outputs.get("radio_photosphere_stellar_radii")
    if ratio is not None:
        close = ratio < phys.RADIO_PHOTOSPHERE_MIN_STELLAR_RADII
        if np.any(close):
            out.append(Warning("radio_photosphere_in_accelerating_wind", "the radio photosphere lies within "
                               f"{phys.RADIO_PHOTOSPHERE_MIN_STELLAR_RADII:g} stellar radii, where the wind has not "
                               "reached its terminal speed (a beta = 1 law is below 90 % of v_inf there): Wright & "
                               "Barlow (1975) assume a constant speed, so the rate is biased (common practice: "
                               "observe at a lower frequency)", close))
    g = outputs.get("gaunt_factor")
    if g is not None:
        # 1e12 Hz is 1000 GHz, though astropy's conversion (x 1e-9) gives 1000.0000000000001
        bad = (g < 1.0) | (inputs["frequency"] > 1000.0 * (1.0 + EDGE_ROUNDING))
        if np.any(bad):
            out.append(Warning("gaunt_factor_out_of_range", "the radio approximation of the Gaunt factor (Leitherer "
                               "& Robert 1991) fails towards the far infrared (frequency above 1000 GHz or g < 1): "
                               "the result is not reliable", bad))
    return out


register(Calculation(
    name="mass-loss-radio",
    path="/v1/winds/mass-loss/radio",
    title="Mass-loss rate from thermal radio or millimetre free-free emission",
    summary="Mass-loss rate of a spherical, fully accelerated ionised wind from its free-free flux density "
            "(Wright & Barlow 1975) with the radio Gaunt factor of Leitherer & Robert (1991) and an optional "
            "volume filling factor for clumping.",
    inputs=(
        Input("flux_density", "mJy", "observed flux density", POSITIVE, example=1.8),
        Input("frequency", "GHz", "observing frequency", POSITIVE, example=8.4),
        Input("distance", "kpc", "distance", POSITIVE, example=2.1),
        Input("vinf", "km/s", "terminal wind speed", SPEED, example=1700.0),
        Input("wind_type", "", "composition whose defaults fill mu, z_rms, gamma_e and temperature when not given: "
              + ", ".join(f"{kind} ({WIND_COMPOSITIONS[kind]}, {_wind_defaults(kind)})" for kind in phys.WIND_TYPES),
              kind="choice", choices=tuple(phys.WIND_TYPES), required=False, default="o-star", example="wn",
              unused_with=("mu", "z_rms", "gamma_e", "temperature")),
        Input("mu", "", "mean atomic weight per ion (default from wind_type)", POSITIVE, required=False,
              example=4.0, default_by=_by_wind_type(0)),
        Input("z_rms", "", "rms ionic charge (default from wind_type)", POSITIVE, required=False, example=1.0,
              default_by=_by_wind_type(1)),
        Input("gamma_e", "", "mean number of free electrons per ion (default from wind_type)", POSITIVE,
              required=False, example=1.0, default_by=_by_wind_type(2)),
        Input("temperature", "K", "electron temperature of the radio-emitting wind (default from wind_type)",
              POSITIVE, required=False, example=1.0e4, default_by=_by_wind_type(3)),
        Input("clumping", "", "volume filling factor f of a clumped wind (1 = smooth); the rate scales as f^{1/2}",
              POSITIVE_BELOW_ONE, required=False, default=1.0, example=0.25),
        Input("stellar_radius", "solRad", "radius of the star (to give the radio photosphere in stellar radii and "
              "warn when it lies in the accelerating wind)", POSITIVE, required=False, example=8.5),
    ),
    outputs=cited((
        Output("mass_loss_rate", "solMass/yr", "mass-loss rate",
               "Mdot = 0.095 mu v S^{3/4} D^{3/2} / (Z gamma^{1/2} g^{1/2} nu^{1/2}) f^{1/2} "
               "(v km/s, S Jy, D kpc, nu Hz)"),
        Output("gaunt_factor", "", "free-free Gaunt factor at the observing frequency",
               "g = 9.77 (1 + 0.13 log10(T^{3/2} / (Z nu)))"),
        Output("radio_photosphere_radius", "solRad", "radius of the radio photosphere: the impact parameter at "
               "which the line-of-sight free-free optical depth of the smooth wind is 1",
               "R(tau = 1) = (pi C / 2)^{1/3}, C = 0.018 T^{-3/2} Z^2 gamma g nu^{-2} (Mdot / (4 pi v mu m_H))^2 "
               "(cgs, Mdot the smooth-wind rate)"),
        Output("radio_photosphere_stellar_radii", "", "radius of the radio photosphere in stellar radii",
               "R(tau = 1) / R_star"),
    ), {"mass_loss_rate": (WRIGHT_BARLOW_1975, PANAGIA_FELLI_1975), "gaunt_factor": (LEITHERER_ROBERT_1991,)},
        (RYBICKI_LIGHTMAN_1979, WRIGHT_BARLOW_1975)),
    function=phys.radio_mass_loss,
    references=(WRIGHT_BARLOW_1975, PANAGIA_FELLI_1975, LEITHERER_ROBERT_1991, RYBICKI_LIGHTMAN_1979),
    constants=("M_sun", "m_H", "R_sun", "julian_year"),
    conventions={"mass_loss_rate": WIND_CONVENTIONS["mass_loss_rate"],
                 "wind": "spherical, isothermal, fully ionised wind at constant speed (the radio photosphere lies "
                         "far out, where the wind has reached v_inf); an unresolved source",
                 "radio_photosphere": "the impact parameter where the line-of-sight free-free optical depth of "
                                      "the smooth wind is 1; with stellar_radius a warning when it lies within 10 "
                                      "stellar radii (a beta = 1 law has not reached 90 % of v_inf there; common "
                                      "practice)",
                 "clumping": "volume filling factor f: clumps f^-1 times denser than the mean, empty between; a "
                             "density-squared diagnostic then overestimates the smooth-wind rate by f^-1/2",
                 "defaults": "wind_type defaults derive mu, Z and gamma from the stated composition "
                             "(mu = sum n_i A_i / sum n_i, Z^2 = sum n_i Z_i^2 / sum n_i, "
                             "gamma = sum n_i Z_i / sum n_i); compositions and temperatures are common practice"}
    | {"symbols": SYMBOLS["mass-loss-radio"]},
    # where 1 + 0.13 log10(T^{3/2} / (Z nu)) <= 0 the rate has no value: the refusal names the inputs that cause it
    constraints=(Constraint(("frequency", "temperature"), "the radio Gaunt factor g = 9.77 (1 + 0.13 log10(T^{3/2} / "
                            "(Z nu))) of Leitherer & Robert (1991) is not positive at this frequency and electron "
                            "temperature (nu >= 10^7.69 T^{3/2} / Z Hz, about 49 THz at 1e4 K): the radio "
                            "approximation does not hold and no rate can be given", _radio_gaunt_positive),),
    check=with_speed_check(_radio_check, ("vinf",)),
    example={"flux_density": {"value": 1.8, "sigma": 0.1}, "frequency": 8.4, "distance": {"value": 2.1, "sigma": 0.3},
             "vinf": {"value": 1700.0, "sigma": 100.0}, "wind_type": "wn", "stellar_radius": 8.5},
))


# ----------------------------------------------------------------------- period change

def _period_change_check(inputs, outputs):
    out = []
    mode = inputs.get("mode")
    pdot = inputs["period_derivative"]
    fast = np.abs(period_change_rate(pdot)) > phys.SECULAR_CHANGE_PER_ORBIT * (1.0 + EDGE_ROUNDING)
    if np.any(fast):
        out.append(Warning("not_secular", "the period changes by more than 1 % of itself per orbit (|dP/dt| > 0.01): "
                           "every mode's relation is orbit-averaged and holds for a change slow against the orbit; "
                           "a measured secular change is a few orders of magnitude slower", fast))
    if mode == "jeans" and np.any(pdot < 0):
        out.append(Warning("period_decreasing", "the period decreases, which an isotropic wind cannot do (it widens "
                           "the orbit); another process dominates the period change (mass transfer, a third body, "
                           "magnetic braking, light-travel time), so the rate is negative and not a wind's",
                           pdot < 0))
    if mode == "conservative":
        m1, m2 = inputs["m1"], inputs["m2"]
        near = np.abs(m1 - m2) < 0.02 * (m1 + m2)
        if np.any(near):
            out.append(Warning("near_equal_masses", "near M1 = M2 the period changes little for any transfer rate: "
                               "the rate is poorly determined", near))
        rate = outputs.get("mass_loss_rate")
        if rate is not None and np.any(rate < 0):
            out.append(Warning("transfer_reversed", "the rate is negative: mass flows from star 2 to star 1",
                               rate < 0))
    if mode == "isotropic-re-emission":
        q = inputs["m1"] / inputs["m2"]
        near = np.abs(q - phys.REEMISSION_STATIONARY_Q) < 0.03 * phys.REEMISSION_STATIONARY_Q
        if np.any(near):
            out.append(Warning("near_stationary_mass_ratio", "near q = M1/M2 = 1.387 isotropic re-emission barely "
                               "changes the period for any transfer rate: the rate is poorly determined", near))
        rate = outputs.get("mass_loss_rate")
        if rate is not None and np.any(rate < 0):
            out.append(Warning("transfer_reversed", "the rate is negative: re-emission of matter from star 1 cannot "
                               "change the period this way at this mass ratio; another process dominates",
                               rate < 0))
    return out


register(Calculation(
    name="mass-loss-period-change",
    path="/v1/winds/mass-loss/period-change",
    title="Mass-loss or transfer rate from the rate of change of the orbital period",
    summary="The isotropic-wind (Jeans mode) mass-loss rate of the system, the rate of conservative mass "
            "transfer from star 1 to star 2, or the rate of transfer from star 1 that star 2 re-emits (isotropic "
            "re-emission), that explains a measured period derivative.",
    inputs=(
        Input("period", "d", "orbital period", POSITIVE, example=6.3),
        Input("period_derivative", "s/yr", "rate of change of the period dP/dt (any time-per-time unit)", ANY,
              example=0.21),
        Input("m1", "solMass", "mass of star 1 (the donor in the conservative and re-emission modes)", POSITIVE,
              example=27.0),
        Input("m2", "solMass", "mass of star 2", POSITIVE, example=11.0),
        Input("mode", "", "jeans: isotropic fast wind carrying its star's specific orbital angular momentum "
              "(Pdot/P = -2 (dM/dt)/(M1 + M2)); conservative: transfer from star 1 to star 2 keeping total mass and "
              "orbital angular momentum (Pdot/P = 3 (dM1/dt)(M1 - M2)/(M1 M2)); isotropic-re-emission: transfer "
              "from star 1 that star 2 re-emits at once with its own specific orbital angular momentum "
              "(Pdot/P = (dM1/dt) [3 M1/(M M2) - 3/M1 + 1/M], M = M1 + M2)", kind="choice",
              choices=("jeans", "conservative", "isotropic-re-emission"), example="jeans"),
    ),
    outputs=cited((
        Output("mass_loss_rate", "solMass/yr", "jeans: rate of mass loss from the system -dM/dt; conservative and "
               "isotropic-re-emission: rate of transfer from star 1, -dM1/dt (all positive for the named direction)",
               "jeans: (M1 + M2) Pdot / (2 P); conservative: -M1 M2 Pdot / (3 P (M1 - M2)); isotropic-re-emission: "
               "-(Pdot / P) / [3 M1/(M M2) - 3/M1 + 1/M], M = M1 + M2"),
        Output("relative_period_derivative", "1/yr", "Pdot / P", "Pdot / P"),
    ), {"mass_loss_rate": (JEANS_1924, HUANG_1963, HILDITCH_2001, SOBERMAN_1997)}, ()),
    function=phys.period_change_mass_loss,
    references=(JEANS_1924, HUANG_1963, HILDITCH_2001, SOBERMAN_1997),
    constants=("day", "julian_year"),
    conventions={"mass_loss_rate": "jeans: mass leaving the system is positive (a lengthening period); "
                                   "conservative and isotropic-re-emission: transfer from star 1 is positive",
                 "orbit": "each mode keeps the eccentricity constant (its rule is that of a circular orbit)",
                 "period_derivative": "dP/dt, positive when the period lengthens; s/yr by default"}
    | {"symbols": SYMBOLS["mass-loss-period-change"]},
    # the mode is a choice: this constraint acts where constraints are shown the choices; otherwise the
    # division by M1 - M2 = 0 gives no finite rate and the row is refused all the same
    constraints=(Constraint(("m1", "m2"), "the conservative mode needs m1 != m2: at equal masses the period "
                            "does not change to first order whatever the transfer rate",
                            lambda m1=None, m2=None, mode=None, **_:
                            _rows(True) if mode != "conservative" or m1 is None or m2 is None else m1 != m2),),
    check=_period_change_check,
    example={"period": 6.3, "period_derivative": {"value": 0.21, "sigma": 0.04}, "m1": {"value": 27.0, "sigma": 2.0},
             "m2": {"value": 11.0, "sigma": 1.0}, "mode": "jeans"},
))


# --------------------------------------------------------------------- momentum ratio

def _momentum_check(inputs, outputs):
    out = []
    eta = outputs.get("momentum_ratio")
    if eta is None:
        return out
    above = eta > 1
    if np.any(above):
        out.append(Warning("star2_stronger", "momentum_ratio > 1: star 2 has the stronger wind, against the "
                           "convention that star 1 is the stronger; the rate follows all the same", above))
    if inputs.get("opening_half_angle") is not None and inputs.get("opening_angle_formula") == "eu93":
        low = eta < EU93_LOWEST_ETA
        if np.any(low):
            out.append(Warning("eu93_out_of_range", "the angle maps to eta < 1e-4, outside the range of the Eichler & "
                               "Usov (1993) fit; prefer opening_angle_formula crw96", low))
    return out


register(Calculation(
    name="mass-loss-momentum-ratio",
    path="/v1/winds/mass-loss/momentum-ratio",
    title="Mass-loss rate from the wind-momentum ratio or the shock-cone opening angle",
    summary="One star's mass-loss rate from the other's, both terminal speeds and the wind-momentum ratio, which "
            "is given or inferred from a measured half-opening angle of the shock cone by inverting Eichler & Usov "
            "(1993) or Cantó, Raga & Wilkin (1996).",
    inputs=(
        Input("momentum_ratio", "", "wind-momentum ratio eta = Mdot2 v2 / (Mdot1 v1) (or give opening_half_angle)",
              POSITIVE, required=False, example=0.05),
        Input("opening_half_angle", "deg", "measured asymptotic half-opening angle of the shock cone about star 2, "
              "the weaker wind (or give momentum_ratio)", HALF_ANGLE, required=False, example=38.0),
        Input("opening_angle_formula", "", "formula inverted for an opening_half_angle (not used with "
              "momentum_ratio): eu93 (Eichler & Usov 1993) or crw96 (Cantó, Raga & Wilkin 1996)", kind="choice",
              choices=("eu93", "crw96"), required=False, default="crw96", example="crw96",
              unused_with=("momentum_ratio",)),
        _mdot("mdot1", "1", 2.0e-5, required=False, extra=" (give this or mdot2)"),
        _mdot("mdot2", "2", 1.0e-6, required=False, extra=" (give this or mdot1)"),
        _vinf("vinf1", "1", 2500.0),
        _vinf("vinf2", "2", 1500.0),
    ),
    outputs=cited((
        Output("momentum_ratio", "", "wind-momentum ratio (as given, or from the opening angle)",
               "eu93: theta = 2.1 (1 - eta^{2/5}/4) eta^{1/3} inverted; crw96: eta = c / (pi + c), "
               "c = tan(psi) - psi"),
        Output("mdot2", "solMass/yr", "mass-loss rate of star 2", "Mdot2 = eta Mdot1 v1 / v2"),
        Output("mdot1", "solMass/yr", "mass-loss rate of star 1", "Mdot1 = Mdot2 v2 / (eta v1)"),
    ), {"momentum_ratio": (EICHLER_USOV_1993, CANTO_RAGA_WILKIN_1996)}, (STEVENS_1992,)),
    function=phys.mass_loss_from_momentum_ratio,
    references=(EICHLER_USOV_1993, CANTO_RAGA_WILKIN_1996, STEVENS_1992),
    conventions={k: WIND_CONVENTIONS[k] for k in ("winds", "opening_half_angle", "mass_loss_rate")}
    | {"momentum_ratio": "eta = (Mdot2 v2)/(Mdot1 v1), star 1 the stronger wind; an opening angle gives eta <= 1, "
                         "the cone wrapping star 2, up to 90 deg (crw96, a plane shock at eta = 1) or 2.1 x 3/4 rad = "
                         "90.24 deg (eu93, its widest cone, at eta = 1); crw96 beyond 90 deg gives eta > 1 (star 2 the "
                         "stronger, warned)"}
    | {"symbols": SYMBOLS["mass-loss-momentum-ratio"]},
    exclusive=(("momentum_ratio", "opening_half_angle"), ("mdot1", "mdot2")),
    check=with_speed_check(_momentum_check, ("vinf1", "vinf2")),
    example={"opening_half_angle": {"value": 38.0, "sigma": 4.0}, "opening_angle_formula": "crw96",
             "mdot1": {"value": 2.0e-5, "sigma": 0.5e-5}, "vinf1": {"value": 2500.0, "sigma": 150.0},
             "vinf2": {"value": 1500.0, "sigma": 200.0}},
))


# ---------------------------------------------------------------------------- recipes

_VINK_ONLY = ("mass", "teff", "metallicity", "vinf_over_vesc")
_NUGIS_ONLY = ("helium_fraction", "metal_fraction")
_NEEDS = {"vink-2001": ("mass", "teff"), "nugis-lamers-2000": _NUGIS_ONLY}
_ONLY = {"vink-2001": _VINK_ONLY, "nugis-lamers-2000": _NUGIS_ONLY}


def _chosen_recipe(kw):
    """The recipe: as given when the constraint sees it, otherwise inferred from the inputs present."""
    if kw.get("recipe") is not None:
        return kw["recipe"]
    vink = any(_given(kw.get(f)) for f in _VINK_ONLY)
    nugis = any(_given(kw.get(f)) for f in _NUGIS_ONLY)
    return "vink-2001" if vink and not nugis else "nugis-lamers-2000" if nugis and not vink else None


def _recipe_unused(name, owner):
    def when(**kw):
        recipe = _chosen_recipe(kw)
        if not _given(kw.get(name)):
            return False
        if recipe is None:     # inputs of both recipes given
            return True
        return recipe != owner
    return when


def _recipe_missing(name, owner):
    def when(**kw):
        return _chosen_recipe(kw) == owner and not _given(kw.get(name))
    return when


_RECIPE_CONSTRAINTS = (
    *(_needs(name, _recipe_unused(name, owner), f"is an input of {owner} only; give the inputs of one recipe")
      for owner, names in _ONLY.items() for name in names),
    *(_needs(name, _recipe_missing(name, owner), f"is required by {owner}")
      for owner, names in _NEEDS.items() for name in names),
    Constraint(("luminosity", "mass"), "the star is at or above its Eddington limit (Gamma_e = sigma_e L / "
               "(4 pi c GM_sun M) >= 1 with sigma_e = 0.325 cm^2/g): no line-driven wind of Vink et al. (2001) exists "
               "there",
               lambda **kw:
               _rows(True) if _chosen_recipe(kw) != "vink-2001" or not (_given(kw.get("luminosity"))
                                                                      and _given(kw.get("mass")))
               else ~(phys.eddington_factor(kw["luminosity"], kw["mass"]) >= 1.0)),
    Constraint(("helium_fraction", "metal_fraction"), "helium_fraction + metal_fraction must not exceed 1",
               lambda helium_fraction=None, metal_fraction=None, **_:
               _rows(True) if not (_given(helium_fraction) and _given(metal_fraction))
               else helium_fraction + metal_fraction <= 1.0),
)


#: half the width of the 22.5-27.5 kK band between the Vink et al. (2001) fits, taken about the jump temperature
VINK_JUMP_HALF_WIDTH = 2.5e3


def _out_of(x, low, high, low_open=False):
    """Where x is outside [low, high] (outside (low, high] with ``low_open``)."""
    return ((x <= low) if low_open else (x < low)) | (x > high)


def _recipe_check(inputs, outputs):
    out = []
    recipe = inputs.get("recipe")
    lum = inputs["luminosity"]
    if recipe == "vink-2001" and inputs.get("teff") is not None and inputs.get("mass") is not None:
        teff = inputs["teff"]
        z = inputs.get("metallicity")
        z = np.ones_like(teff) if z is None else z
        jump = phys.vink_jump_temperature(lum, inputs["mass"], z)
        hot = teff >= jump
        # eq. 24 holds for 27.5 kK < Teff <= 50 kK, eq. 25 for 12.5 kK <= Teff <= 22.5 kK: the hot side's lower bound
        # is open
        for fit, low, high, low_open, which in ((hot, *phys.VINK_HOT_RANGE, True, "hot-side fit (their eq. 24)"),
                                                (~hot, *phys.VINK_COOL_RANGE, False, "cool-side fit (their eq. 25)")):
            bad = fit & _out_of(teff, low, high, low_open)
            if np.any(bad):
                out.append(Warning("vink_fit_out_of_range", f"teff is outside {low / 1e3:g}-{high / 1e3:g} kK, the "
                                   f"range of the Vink et al. (2001) {which} used at this temperature: the rate is "
                                   "extrapolated", bad))
        for bad, message in (
            (_out_of(z, 1.0 / 30.0, 3.0), "metallicity is outside 1/30-3 Z_sun, the range of the Vink et al. (2001) "
                                          "models"),
            (_out_of(lum, 10**4.5, 10**6.25), "luminosity is outside log L/L_sun = 4.5-6.25, about the range of the "
                                              "Vink et al. (2001) model grid"),
            # the jump falls in 22.5-27.5 kK for most stars but moves with Gamma_e and Z beyond it (about 19-29 kK
            # over the grid): a teff as close to this star's jump as the band's half-width is as near it
            (((teff > 22.5e3) & (teff < 27.5e3)) | (np.abs(teff - jump) < VINK_JUMP_HALF_WIDTH),
             "teff lies in 22.5-27.5 kK, or within 2.5 kK of this star's bi-stability jump temperature, where the "
             "rate changes by about an order of magnitude across the jump temperature, which is itself uncertain by "
             "a few kK"),
        ):
            if np.any(bad):
                out.append(Warning("outside_calibration", message, bad))
    if recipe == "nugis-lamers-2000":
        bad = _out_of(lum, 10**4.5, 10**6.5)
        if np.any(bad):
            out.append(Warning("outside_calibration", "luminosity is outside log L/L_sun = 4.5-6.5, about the range of "
                               "the Galactic Wolf-Rayet stars fitted by Nugis & Lamers (2000)", bad))
        y = inputs.get("helium_fraction")
        if y is not None and np.any(y < 0.3):
            out.append(Warning("outside_calibration", "helium_fraction below 0.3 is not a Wolf-Rayet surface: Nugis & "
                               "Lamers (2000) fitted hydrogen-poor or hydrogen-free stars", y < 0.3))
    return out


register(Calculation(
    name="mass-loss-recipe",
    path="/v1/winds/mass-loss/recipe",
    title="Mass-loss rate from a published recipe",
    summary="Predicted mass-loss rates: Vink, de Koter & Lamers (2001) for O and B stars on either side of the "
            "bi-stability jump, or Nugis & Lamers (2000) for Wolf-Rayet stars.",
    inputs=(
        Input("recipe", "", "vink-2001 (inputs luminosity, mass, teff, optional metallicity and vinf_over_vesc) or "
              "nugis-lamers-2000 (inputs luminosity, helium_fraction, metal_fraction)", kind="choice",
              choices=phys.RECIPES, example="vink-2001"),
        Input("luminosity", "solLum", "stellar luminosity", POSITIVE, example=3.2e5),
        Input("mass", "solMass", "stellar mass (vink-2001)", POSITIVE, required=False, example=38.0),
        Input("teff", "K", "effective temperature (vink-2001)", POSITIVE, required=False, example=36500.0),
        Input("metallicity", "", "metallicity Z/Z_sun (vink-2001; 1 when not given)", POSITIVE, required=False,
              example=1.0, default_by=("recipe", {"vink-2001": 1.0})),
        Input("vinf_over_vesc", "", "ratio of terminal to escape speed (vink-2001; 2.6 above and 1.3 below the "
              "bi-stability jump when not given)", POSITIVE, required=False, example=2.6),
        Input("helium_fraction", "", "surface helium mass fraction Y (nugis-lamers-2000)", POSITIVE_BELOW_ONE,
              required=False, example=0.86),
        Input("metal_fraction", "", "surface mass fraction Z of all elements heavier than helium, including C and O "
              "(nugis-lamers-2000)", POSITIVE_BELOW_ONE, required=False, example=0.12),
    ),
    outputs=cited((
        Output("mass_loss_rate", "solMass/yr", "predicted mass-loss rate", "Mdot = 10^(log Mdot)"),
        Output("log_mass_loss_rate", "", "log10 of the mass-loss rate in solMass/yr",
               "vink-2001: eqs. 24 (hot) and 25 (cool side); nugis-lamers-2000: -11.00 + 1.29 log L + 1.73 log Y "
               "+ 0.47 log Z", logarithmic=True),
        Output("bistability_jump_temperature", "K", "temperature of the bi-stability jump (vink-2001)",
               "T_jump = 61.2 + 2.59 log <rho> kK, log <rho> = -14.94 + 3.1857 Gamma_e + 0.85 log(Z/Z_sun)"),
        Output("eddington_factor", "", "electron-scattering Eddington factor Gamma_e (vink-2001)",
               "Gamma_e = sigma_e L / (4 pi c GM_sun M), sigma_e = 0.325 cm^2/g"),
    ), {"eddington_factor": (VINK_2001, IAU_2015_B3), "bistability_jump_temperature": (VINK_2001,)},
        (VINK_2001, NUGIS_LAMERS_2000)),
    function=phys.recipe_mass_loss,
    references=(VINK_2001, NUGIS_LAMERS_2000, IAU_2015_B3),
    constants=("L_sun", "GM_sun", "c"),
    conventions={"mass_loss_rate": WIND_CONVENTIONS["mass_loss_rate"],
                 "vink-2001": "the hot-side formula at teff >= the jump temperature, the cool-side formula below it",
                 "inputs": "inputs of the other recipe are refused"}
    | {"symbols": SYMBOLS["mass-loss-recipe"]},
    constraints=_RECIPE_CONSTRAINTS,
    check=_recipe_check,
    example={"recipe": "vink-2001", "luminosity": {"value": 3.2e5, "sigma": 0.5e5},
             "mass": {"value": 38.0, "sigma": 5.0}, "teff": {"value": 36500.0, "sigma": 1000.0}},
))


# ----------------------------------------------------------------------- shell distance

register(Calculation(
    name="shell-distance",
    path="/v1/winds/shell-distance",
    title="Distance from periodic dust shells (expansion parallax)",
    summary="Distance and parallax from the angular spacing of shells made once per orbit and their expansion "
            "speed, or the expansion speed from a known distance or parallax.",
    inputs=(
        Input("period", "d", "orbital period (one shell per orbit)", POSITIVE, example=2950.0),
        Input("shell_spacing", "mas", "angular spacing of successive shells on the sky", POSITIVE, example=410.0),
        Input("expansion_speed", "km/s", "expansion speed of the shells (give this, distance or parallax)", SPEED,
              required=False, example=1100.0),
        Input("distance", "pc", "distance (give this, expansion_speed or parallax)", POSITIVE, required=False,
              example=2200.0),
        Input("parallax", "mas", "parallax (give this, expansion_speed or distance)", POSITIVE, required=False,
              example=0.22),
    ),
    outputs=cited((
        Output("distance", "pc", "distance", "D = v P / s; D (pc) = v (km/s) P (yr) / (4.74047 s (arcsec))"),
        Output("parallax", "mas", "parallax", "parallax (mas) = 1000 / D (pc)"),
        Output("expansion_speed", "km/s", "expansion speed of the shells", "v = 4.74047 s (arcsec) D (pc) / P (yr)"),
    ), {}, (IAU_2012_B2,)),
    function=phys.shell_distance,
    references=(IAU_2012_B2,),
    constants=("au", "julian_year", "au_per_julian_year", "day", "pc"),
    conventions={"shells": "one shell per orbit, expanding at constant speed; shell_spacing is the increase of a "
                           "shell's angular radius from one shell to the next, and the edge of a spherical shell "
                           "moves across the sky at the full expansion speed (for a cone or spiral the projection "
                           "changes the result)",
                 "speed": "1 au/yr = 4.74047 km/s (IAU 2012 au, Julian year)"}
    | {"symbols": SYMBOLS["shell-distance"]},
    exclusive=(("expansion_speed", "distance", "parallax"),),
    check=with_speed_check(None, ("expansion_speed",)),
    example={"period": {"value": 2950.0, "sigma": 15.0}, "shell_spacing": {"value": 410.0, "sigma": 12.0},
             "expansion_speed": {"value": 1100.0, "sigma": 60.0}},
))


# ----------------------------------------------------------------------- shell forecast

def _whole_shells(shells=None, **_):
    return _rows(shells is None or bool(np.all(np.asarray(shells) == np.round(shells))))


def _shells_formed(shells=None, period=None, formation_epoch=None, observation_date=None, **_):
    if shells is None or period is None or formation_epoch is None or observation_date is None:
        return _rows(True)
    last = np.max(shells)
    # the physics' own age: a shell formed at the observation date (age 0 in the decimals given) is formed by then
    return phys.shell_age_days(np.asarray(period), np.asarray(formation_epoch), np.asarray(observation_date),
                               last) >= 0.0


def _shells_dated(shells=None, period=None, formation_epoch=None, **_):
    """The earliest shell's formation date is a date the service reads (the DATE domain): a shell
    numbered -1e15 would have formed long before the Universe, an answer to nothing asked."""
    if shells is None or period is None or formation_epoch is None:
        return _rows(True)
    first = np.asarray(formation_epoch) + np.min(shells) * np.asarray(period)
    return first >= DATE.low


register(Calculation(
    name="shell-forecast",
    path="/v1/winds/shell-forecast",
    title="Where periodic dust shells will be: angular radii at a date",
    summary="The angular radius of each dust shell made once per orbit at an observation date, from the formation "
            "period, the date of one formation event, the expansion speed and the distance or parallax (the "
            "inverse of the expansion parallax of shell-distance).",
    inputs=(
        Input("period", "d", "formation period: one shell per orbit", POSITIVE, example=3120.0),
        Input("formation_epoch", "d", "date of one shell-formation event, shell 0 (JD, or ISO 8601)", DATE, time=True,
              example=2457310.0),
        Input("expansion_speed", "km/s", "expansion speed of the shells", SPEED, example=980.0),
        Input("distance", "pc", "distance (give this or parallax)", POSITIVE, required=False, example=1850.0),
        Input("parallax", "mas", "parallax (give this or distance)", POSITIVE, required=False, example=0.54),
        Input("observation_date", "d", "date of the planned observation (JD, or ISO 8601)", DATE, time=True,
              example=2461400.5),
        Input("shells", "", "shell numbers n: shell n forms at formation_epoch + n period (0 the given event, -1 the "
              "one before, 1 the next); each must have formed by observation_date", ANY, kind="series",
              label="shell", example=[-3, -2, -1, 0, 1]),
    ),
    outputs=cited((
        Output("angular_radius", "mas", "angular radius of the shell at observation_date",
               "theta = v (t_obs - t_n) / D; theta (arcsec) = v (km/s) age (yr) / (4.74047 D (pc))"),
        Output("radius", "au", "linear radius of the shell at observation_date", "R = v (t_obs - t_n)"),
        Output("age", "yr", "time since the shell formed", "t_obs - (formation_epoch + n P)"),
    ), {}, (IAU_2012_B2,)),
    function=phys.shell_forecast,
    references=(IAU_2012_B2,),
    constants=("au", "julian_year", "au_per_julian_year", "pc"),
    conventions={"shells": "one shell per orbit, formed at formation_epoch + n period and expanding at constant "
                           "speed from the star; the edge of a spherical shell moves across the sky at the full "
                           "expansion speed (for a cone or spiral the projection changes the result)",
                 "speed": "1 au/yr = 4.74047 km/s (IAU 2012 au, Julian year)",
                 "time": "Julian Dates (days) unless another format is given; ages in Julian years"}
    | {"symbols": SYMBOLS["shell-forecast"]},
    exclusive=(("distance", "parallax"),),
    constraints=(
        Constraint(("shells",), "shell numbers are whole numbers", _whole_shells),
        Constraint(("shells",), "every listed shell must have formed by observation_date (shell n forms at "
                   "formation_epoch + n period)", _shells_formed),
        Constraint(("shells",), f"every listed shell must have formed on or after JD {DATE.low:g}, the earliest date "
                   "read here (shell n forms at formation_epoch + n period)", _shells_dated),
    ),
    check=with_speed_check(None, ("expansion_speed",)),
    example={"period": {"value": 3120.0, "sigma": 20.0}, "formation_epoch": {"value": 2457310.0, "sigma": 15.0},
             "expansion_speed": {"value": 980.0, "sigma": 50.0}, "distance": {"value": 1850.0, "sigma": 120.0},
             "observation_date": 2461400.5, "shells": [-3, -2, -1, 0, 1],
             "correlations": [{"between": ["period", "formation_epoch"], "rho": -0.3}]},
))
