"""Colliding winds and mass-loss rates at the edges of their domains, against 50-digit mpmath references written
from the published formulas:

- stagnation point r1 = D / (1 + eta^{1/2}), r2 = D eta^{1/2} / (1 + eta^{1/2}) (Stevens, Blondin & Pollock 1992,
  ApJ 386, 265, eq. 1); cooling parameter chi = v_8^4 d_12 / Mdot_-7 (their eq. 8);
- Eichler & Usov (1993), ApJ 402, 271, eq. 1: theta = 2.1 (1 - eta^{2/5} / 4) eta^{1/3};
- Cantó, Raga & Wilkin (1996), ApJ 469, 729, eq. 28: theta_inf - tan theta_inf = pi / (1 - eta), solved here for
  theta_inf in (pi/2, pi) by bisection; the half-angle about the weaker wind is pi - theta_inf;
- period change: Pdot/P = -2 Mdot/M (Jeans-mode wind), 3 Mdot1 (M1 - M2)/(M1 M2) (conservative), Mdot1
  [3 M1/(M M2) - 3/M1 + 1/M] (isotropic re-emission; Soberman, Phinney & van den Heuvel 1997; from memory);
- Wright & Barlow (1975), MNRAS 170, 41, eq. 8 with the Gaunt factor of Leitherer & Robert (1991), ApJ 377, 629;
- the expansion parallax D = v P / s with 1 au/yr in km/s from the au (IAU 2012 B2) and the Julian year.
Constants from provenance.constants.
The formulas, papers and equation numbers cited here are from memory.
"""

import mpmath as mp
import numpy as np
import pytest

from calcservice.core import compute, compute_batch

from .mpmath_helpers import precision, relative_error


working_precision = precision(50)


def reference_eichler_usov(eta):
    eta = mp.mpf(eta)
    return mp.degrees(mp.mpf("2.1") * (1 - eta ** mp.mpf("0.4") / 4) * mp.cbrt(eta))


def reference_canto_raga_wilkin(eta):
    """pi - theta_inf, theta_inf in (pi/2, pi) solving theta - tan theta = pi / (1 - eta), by bisection (degrees)."""
    eta = mp.mpf(eta)
    if eta == 1:
        return mp.mpf(90)
    target = mp.pi / (1 - eta)
    lo, hi = mp.pi / 2, mp.pi          # theta - tan theta falls from +inf to pi across the bracket
    for _ in range(200):
        mid = (lo + hi) / 2
        lo, hi = (mid, hi) if mid - mp.tan(mid) > target else (lo, mid)
    return mp.degrees(mp.pi - (lo + hi) / 2)


#: eta from 1e-30 to 1 (and, as given, its inverse up to 1e30: the roles swap), with the values near 1
MOMENTUM_RATIOS = [1e-30, 1e-12, 1e-9, 1e-6, 3e-5, 1e-4, 2e-3, 0.01, 0.1, 0.5, 0.9, 0.999999, 1.0]


def radio_catalogue(rng: np.random.Generator, n: int, z_rms: float, gamma_e: float) -> dict:
    """Radio mass-loss columns drawn log-uniform: flux densities from 1 uJy to 10 Jy, frequencies from 0.1 to
    1000 GHz, distances from 10 pc to 100 kpc, vinf from 10 to 3e4 km/s, temperatures from 3e3 to 1e5 K."""
    return {"flux_density": list(10 ** rng.uniform(-3, 4, n)), "frequency": list(10 ** rng.uniform(-1, 3, n)),
            "distance": list(10 ** rng.uniform(-2, 2, n)), "vinf": list(10 ** rng.uniform(1, 4.5, n)),
            "temperature": list(10 ** rng.uniform(3.5, 5, n)), "mu": 1.3, "z_rms": z_rms, "gamma_e": gamma_e}


def test_collision_opening_angles_and_stagnation_point_from_eta_tiny_to_huge():
    rng = np.random.default_rng(5)
    etas = MOMENTUM_RATIOS + [1 / x for x in MOMENTUM_RATIOS[:-1]] + list(10 ** rng.uniform(-12, 12, 20))
    mdot1, vinf1, vinf2, separation = 1e-6, 2000.0, 1500.0, 2.0
    mdot2 = [float(mp.mpf(x) * mdot1 * vinf1 / vinf2) for x in etas]
    body = {"columns": {"mdot1": mdot1, "mdot2": mdot2, "vinf1": vinf1, "vinf2": vinf2, "separation": separation}}
    answer = compute_batch("collision", body)["columns"]
    constants = compute("collision", {"mdot1": 1e-6, "mdot2": 1e-7, "vinf1": 2e3, "vinf2": 2e3, "separation": 1.0})[
        "provenance"]["constants"]
    cm_per_au = mp.mpf(constants["au"]["value"]) * 100
    worst = {}
    for j, m2 in enumerate(mdot2):
        eta = mp.mpf(m2) * vinf2 / (mp.mpf(mdot1) * vinf1)      # as given; the angles take min(eta, 1/eta)
        weak = min(eta, 1 / eta)
        root = mp.sqrt(eta)
        r1, r2 = separation / (1 + root), separation * root / (1 + root)
        reference = {
            "momentum_ratio": weak,
            "opening_half_angle_eu93": reference_eichler_usov(weak),
            "opening_half_angle_crw96": reference_canto_raga_wilkin(weak),
            "stagnation_distance1": r1,
            "stagnation_distance2": r2,
            "cooling_parameter1": (mp.mpf(vinf1) / 1000) ** 4 * (r1 * cm_per_au / mp.mpf(10) ** 12) / (
                mp.mpf(mdot1) / mp.mpf("1e-7")),
            "cooling_parameter2": (mp.mpf(vinf2) / 1000) ** 4 * (r2 * cm_per_au / mp.mpf(10) ** 12) / (
                mp.mpf(m2) / mp.mpf("1e-7")),
        }
        for name, ref in reference.items():
            worst[name] = max(worst.get(name, 0.0), relative_error(answer[name]["value"][j], ref))
    assert max(worst.values()) < 1e-13, worst


@pytest.mark.parametrize("formula", ["eu93", "crw96"])
def test_momentum_ratio_from_an_opening_angle_from_a_hair_to_the_largest(formula):
    # the inverse of each formula; Eichler & Usov's theta reaches at most 2.1 * 3/4 rad = 90.24 deg, so every
    # angle of the domain (0, 90) deg has an eta <= 1; a 1e-30 deg cone is eta ~ 1e-96
    angles = [1e-30, 1e-12, 1e-6, 1e-3, 0.1, 1.0, 10.0, 30.0, 60.0, 89.0, 89.999999]
    body = {"columns": {"opening_half_angle": angles, "opening_angle_formula": formula, "mdot1": 1e-6,
                        "vinf1": 2000.0, "vinf2": 1500.0}}
    answer = compute_batch("mass-loss-momentum-ratio", body)["columns"]
    worst = 0.0
    for j, angle in enumerate(angles):
        psi = mp.radians(mp.mpf(angle))
        if formula == "crw96":
            with mp.workdps(200):                  # tan psi - psi ~ psi^3/3 cancels 2 x 32 digits at 1e-30 deg
                c = mp.tan(psi) - psi              # CRW96 eq. 28 with theta_inf = pi - psi
                eta = c / (mp.pi + c)
        else:
            theta = psi / mp.mpf("2.1")           # solve (1 - eta^{2/5}/4) eta^{1/3} = theta / 2.1 in ln eta
            lo, hi = mp.mpf(-1000), mp.mpf(0)
            for _ in range(200):
                mid = (lo + hi) / 2
                x = mp.exp(mid)
                lo, hi = (mid, hi) if (1 - x ** mp.mpf("0.4") / 4) * mp.cbrt(x) < theta else (lo, mid)
            eta = mp.exp((lo + hi) / 2)
        worst = max(worst, relative_error(answer["momentum_ratio"]["value"][j], eta),
                    relative_error(answer["mdot2"]["value"][j], eta * mp.mpf("1e-6") * 2000 / 1500))
    assert worst < 1e-12, worst


def test_period_change_rates_across_mass_ratios():
    # q = M1/M2 from 1e-6 to 1e6; near q = 1 (conservative) and q = 1.387 (re-emission) the rate diverges: the
    # inputs there are exact doubles and the reference takes them as they are
    q = [1e-6, 0.01, 0.5, 0.999999, 1.000001, 1.3874258867, 1.5, 100.0, 1e6]
    m2 = 11.0
    modes = ["jeans", "conservative", "isotropic-re-emission"]
    rows = [{"period": 6.3, "period_derivative": 0.021, "m1": qj * m2, "m2": m2, "mode": mode}
            for mode in modes for qj in q]
    answer = compute_batch("mass-loss-period-change", {"systems": rows})["results"]
    worst = 0.0
    for row, got in zip(rows, answer):
        m1, m2_, mode = mp.mpf(row["m1"]), mp.mpf(row["m2"]), row["mode"]
        rel = mp.mpf(row["period_derivative"]) / (mp.mpf(row["period"]) * 86400)      # Pdot/P in 1/yr
        m = m1 + m2_
        if mode == "jeans":
            ref = m * rel / 2
        elif mode == "conservative":
            ref = -m1 * m2_ * rel / (3 * (m1 - m2_))
        else:
            ref = -rel / (3 * m1 / (m * m2_) - 3 / m1 + 1 / m)
        worst = max(worst, relative_error(got["results"]["mass_loss_rate"]["value"], ref))
    assert worst < 1e-12, worst


def test_radio_rate_recipes_and_shell_distance_across_their_ranges():
    rng = np.random.default_rng(3)
    n = 12
    radio = radio_catalogue(rng, n, z_rms=1.0, gamma_e=1.0)
    got = compute_batch("mass-loss-radio", {"columns": radio})["columns"]["mass_loss_rate"]["value"]
    worst = 0.0
    for j in range(n):
        s, nu, d, v, t = (mp.mpf(radio[k][j]) for k in ("flux_density", "frequency", "distance", "vinf",
                                                         "temperature"))
        nu_hz = nu * mp.mpf(10) ** 9
        gaunt = mp.mpf("9.77") * (1 + mp.mpf("0.13") * mp.log10(t ** mp.mpf(1.5) / nu_hz))
        ref = mp.mpf("0.095") * mp.mpf("1.3") * v * (s / 1000) ** mp.mpf(0.75) * d ** mp.mpf(1.5) / mp.sqrt(
            gaunt * nu_hz)
        worst = max(worst, relative_error(got[j], ref))
    # Nugis & Lamers (2000), A&A 360, 227, eq. 22: log Mdot = -11 + 1.29 log L + 1.73 log Y + 0.47 log Z
    metals = 10 ** rng.uniform(-6, -0.1, n)
    nl = {"recipe": "nugis-lamers-2000", "luminosity": list(10 ** rng.uniform(4, 7, n)),
          "helium_fraction": list(rng.uniform(1e-6, 1.0, n) * (1 - metals)), "metal_fraction": list(metals)}
    got = compute_batch("mass-loss-recipe", {"columns": nl})["columns"]["mass_loss_rate"]["value"]
    for j in range(n):
        log_mdot = (-11 + mp.mpf("1.29") * mp.log10(nl["luminosity"][j]) + mp.mpf("1.73") * mp.log10(
            nl["helium_fraction"][j]) + mp.mpf("0.47") * mp.log10(nl["metal_fraction"][j]))
        worst = max(worst, relative_error(got[j], mp.mpf(10) ** log_mdot))
    # expansion parallax, D [pc] = v P / s with v in au/yr (1 au/yr = au / Julian year in km/s)
    constants = compute("shell-distance", {"period": 2950.0, "shell_spacing": 100.0, "expansion_speed": 1e3})[
        "provenance"]["constants"]
    au_km, year = mp.mpf(constants["au"]["value"]) / 1000, mp.mpf("365.25") * 86400
    shells = {"period": list(10 ** rng.uniform(0, 5, n)), "shell_spacing": list(10 ** rng.uniform(-2, 4, n)),
              "expansion_speed": list(10 ** rng.uniform(0, 5, n))}
    got = compute_batch("shell-distance", {"columns": shells})["columns"]["distance"]["value"]
    for j in range(n):
        v_au_per_yr = mp.mpf(shells["expansion_speed"][j]) * year / au_km
        ref = v_au_per_yr * (mp.mpf(shells["period"][j]) / mp.mpf("365.25")) / (mp.mpf(shells["shell_spacing"][j]) / 1000)
        worst = max(worst, relative_error(got[j], ref))
    assert worst < 1e-13, worst


def test_collision_around_an_orbit_near_periastron_and_apastron_at_e_to_1():
    # r = a (1 - e cos E) at a phase (Kepler's equation, Murray & Dermott 1999, eq. 2.52), r = a (1 - e^2)/(1 + e cos nu)
    # at a true anomaly; phases a hair either side of periastron (just below 1, where the phase once lost its
    # distance to periastron in 2 pi phase), true anomalies a hair from apastron
    e_values = [0.9, 0.99999, 1 - 1e-10]
    phases = [1e-9, 0.99999999, 3.0 - 1e-7, 0.5]
    anomalies = [179.9999, 180.0001, 0.0, 359.99999]
    rows = [{"eccentricity": e, "phase": p} for e in e_values for p in phases]
    rows += [{"eccentricity": e, "true_anomaly": nu} for e in e_values for nu in anomalies]
    winds = {"mdot1": 1e-6, "mdot2": 1e-8, "vinf1": 2000.0, "vinf2": 1500.0, "semimajor_axis": 3.0}
    answer = compute_batch("collision", {"systems": [{**winds, **row} for row in rows]})["results"]
    worst = 0.0
    eta = mp.mpf(1e-8) * 1500 / (mp.mpf(1e-6) * 2000)
    for row, got in zip(rows, answer):
        e = mp.mpf(row["eccentricity"])
        if "phase" in row:
            mean = 2 * mp.pi * (mp.mpf(row["phase"]) - mp.nint(mp.mpf(row["phase"])))
            sign, mean = (-1 if mean < 0 else 1), abs(mean)
            # Newton from an upper bound of the root, min(M + e, pi, M/(1 - e)): E - e sin E is convex on [0, pi]
            big_e = min(mean + e, mp.pi, mean / (1 - e))
            for _ in range(500):
                big_e = big_e - (big_e - e * mp.sin(big_e) - mean) / (1 - e * mp.cos(big_e))
            big_e *= sign
            r = 3 * (1 - e * mp.cos(big_e))
        else:
            r = 3 * (1 - e * e) / (1 + e * mp.cos(mp.radians(mp.mpf(row["true_anomaly"]))))
        root = mp.sqrt(eta)
        reference = {"separation": r, "stagnation_distance1": r / (1 + root), "stagnation_distance2": r * root / (1 + root),
                     "separation_periastron": 3 * (1 - e), "separation_apastron": 3 * (1 + e)}
        worst = max(worst, *(relative_error(got["results"][k]["value"], v) for k, v in reference.items()))
    assert worst < 1e-12, worst


def test_vink_recipe_on_both_sides_of_the_bistability_jump():
    # Vink, de Koter & Lamers (2001), A&A 369, 574, eqs. 14-15 (jump), 24 (hot side), 25 (cool side), with
    # Gamma_e = kappa_e L / (4 pi c G M) (kappa_e = 0.325 cm^2/g, the service's stated opacity) and v_inf/v_esc 2.6 / 1.3
    rng = np.random.default_rng(23)
    n = 16
    mass = 10 ** rng.uniform(1, 2, n)
    # below the Eddington limit (Gamma_e < 1, refused otherwise): L / M below 3e4 solar units
    columns = {"recipe": "vink-2001", "luminosity": list(mass * 10 ** rng.uniform(3, 4.4, n)), "mass": list(mass), "teff": list(rng.uniform(12.5e3, 50e3, n)),
               "metallicity": list(10 ** rng.uniform(-2, 0.5, n))}
    answer = compute_batch("mass-loss-recipe", {"columns": columns})["columns"]
    constants = compute("mass-loss-recipe", {"recipe": "vink-2001", "luminosity": 3.2e5, "mass": 38.0, "teff": 36500.0})[
        "provenance"]["constants"]
    l_sun, gm, c = (mp.mpf(constants[k]["value"]) for k in ("L_sun", "GM_sun", "c"))
    worst = 0.0
    for j in range(n):
        lum, mass, teff, z = (mp.mpf(columns[k][j]) for k in ("luminosity", "mass", "teff", "metallicity"))
        gamma = mp.mpf("0.0325") * lum * l_sun / (4 * mp.pi * c * gm * mass)
        jump = 1000 * (mp.mpf("61.2") + mp.mpf("2.59") * (mp.mpf("-14.94") + mp.mpf("3.1857") * gamma
                                                         + mp.mpf("0.85") * mp.log10(z)))
        if abs(teff / jump - 1) < mp.mpf(10) ** -9:
            continue
        if teff >= jump:
            x = mp.log10(teff / 40000)
            log_mdot = (mp.mpf("-6.697") + mp.mpf("2.194") * mp.log10(lum / 1e5) - mp.mpf("1.313") * mp.log10(mass / 30)
                        - mp.mpf("1.226") * mp.log10(mp.mpf("2.6") / 2) + mp.mpf("0.933") * x - mp.mpf("10.92") * x * x
                        + mp.mpf("0.85") * mp.log10(z))
        else:
            log_mdot = (mp.mpf("-6.688") + mp.mpf("2.210") * mp.log10(lum / 1e5) - mp.mpf("1.339") * mp.log10(mass / 30)
                        - mp.mpf("1.601") * mp.log10(mp.mpf("1.3") / 2) + mp.mpf("1.07") * mp.log10(teff / 20000)
                        + mp.mpf("0.85") * mp.log10(z))
        worst = max(worst, relative_error(answer["mass_loss_rate"]["value"][j], mp.mpf(10) ** log_mdot),
                    relative_error(answer["bistability_jump_temperature"]["value"][j], jump),
                    relative_error(answer["eddington_factor"]["value"][j], gamma))
    assert worst < 1e-13, worst


def test_shell_forecast_of_a_shell_just_formed_after_many_periods():
    # age = t_obs - (t0 + n P), theta = v age / D (the expansion parallax read backwards, IAU 2012 au, Julian year):
    # a shell a day (or a second) old, thousands of days after the epoch, keeps the digits of its age
    period, epoch, speed, distance = 2950.123, 2451234.5678, 1200.0, 2400.0
    constants = compute("shell-distance", {"period": 2950.0, "shell_spacing": 100.0, "expansion_speed": 1e3})[
        "provenance"]["constants"]
    au_km, year = mp.mpf(constants["au"]["value"]) / 1000, mp.mpf("365.25") * 86400
    worst = 0.0
    for after in (1.0, 1e-5, 137.25):
        observation = float(mp.mpf(epoch) + 3 * mp.mpf(period) + after)
        body = {"period": period, "formation_epoch": epoch, "expansion_speed": speed, "observation_date": observation,
                "distance": distance, "shells": [-2, 0, 3]}
        results = compute("shell-forecast", body)["results"]["series"]
        for j, n in enumerate((-2, 0, 3)):
            age_days = mp.mpf(observation) - (mp.mpf(epoch) + n * mp.mpf(period))
            radius_au = mp.mpf(speed) * age_days * 86400 / au_km
            reference = {"age": age_days * 86400 / year, "radius": radius_au,
                         "angular_radius": 1000 * radius_au / mp.mpf(distance)}
            for name, ref in reference.items():
                worst = max(worst, relative_error(results[name]["value"][j], ref))
    assert worst < 1e-13, worst


def test_radio_photosphere_radius_across_the_range():
    # tau = 1 at the impact parameter p = (pi C / 2)^{1/3}, C = 0.018 T^{-3/2} Z^2 gamma n^2 r^4 g / nu^2 in cgs with
    # n r^2 = Mdot / (4 pi v mu m_H) (Rybicki & Lightman 1979, eq. 5.19b; Wright & Barlow 1975): flux densities
    # from 1 uJy to 10 Jy, frequencies from 0.1 to 1000 GHz
    n = 10
    columns = radio_catalogue(np.random.default_rng(31), n, z_rms=1.2, gamma_e=1.1)
    answer = compute_batch("mass-loss-radio", {"columns": columns})
    got = answer["columns"]["radio_photosphere_radius"]["value"]
    constants = compute("mass-loss-radio", {"flux_density": 1.8, "frequency": 8.4, "distance": 2.1, "vinf": 1700.0})[
        "provenance"]["constants"]
    m_sun_g, m_h_g = (mp.mpf(constants[k]["value"]) * 1000 for k in ("M_sun", "m_H"))
    r_sun_cm, year = mp.mpf(constants["R_sun"]["value"]) * 100, mp.mpf(constants["julian_year"]["value"])
    worst = 0.0
    for j in range(n):
        s, nu, d, v, t = (mp.mpf(columns[k][j]) for k in ("flux_density", "frequency", "distance", "vinf",
                                                         "temperature"))
        mu, z, gamma = mp.mpf(1.3), mp.mpf(1.2), mp.mpf(1.1)
        nu_hz = nu * mp.mpf(10) ** 9
        gaunt = mp.mpf("9.77") * (1 + mp.mpf("0.13") * mp.log10(t ** mp.mpf(1.5) / (z * nu_hz)))
        mdot = (mp.mpf("0.095") * mu * v * (s / 1000) ** mp.mpf(0.75) * d ** mp.mpf(1.5)
                / (z * mp.sqrt(gamma * gaunt * nu_hz)))                       # Wright & Barlow (1975), eq. 8
        n_r2 = mdot * m_sun_g / year / (4 * mp.pi * v * 10 ** 5 * mu * m_h_g)
        c = mp.mpf("0.018") * t ** mp.mpf(-1.5) * z * z * gamma * n_r2 ** 2 * gaunt / nu_hz ** 2
        worst = max(worst, relative_error(got[j], mp.cbrt(mp.pi * c / 2) / r_sun_cm))
    assert worst < 1e-13, worst
