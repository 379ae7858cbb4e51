"""The linear sigmas of the engine's central differences (its general path; a declared Jacobian, as visual's,
is set aside here) held to exact derivatives: mpmath at 50 digits of each formula, at ordinary points and at the edges
of the domains.  A good central difference gives ~1e-10 of the sigma; the tolerances here (1e-8,
1e-7 after thousands of cycles) leave room for the rounding of the physics, not for the step."""

import dataclasses

import mpmath as mp
import numpy as np

from calcservice.engine import Measured, Options, evaluate
from calcservice.registry import get

from .mpmath_helpers import precision, relative_error

working_precision = precision(50)


def _sigmas(name, values, sigmas, statics=None):
    """The engine's linear sigmas of ``name`` at ``values`` (N systems) with ``sigmas`` on some inputs."""
    quantities = {k: Measured.normal(v, sigmas.get(k, 0.0)) for k, v in values.items()}
    # the central differences themselves, also for a calculation that declares its Jacobian (visual)
    result = evaluate(dataclasses.replace(get(name), jacobian=None), quantities, statics or {}, Options())
    return {k: o["sigma"] for k, o in result.outputs.items()}, {k: o["value"] for k, o in result.outputs.items()}, \
        result


def test_visual_mass_sigma_is_exact_for_a_precise_period():
    # Kepler's third law M = 4 pi^2 (a''/plx)^3 / (GM P^2) (Hilditch 2001, ch. 2; from memory): the
    # relative sigma of M is sqrt((2 sP/P)^2 + (3 sa/a)^2 + (3 splx/plx)^2) exactly; evaluated with mpmath
    # at 50 digits.  A period known to 1e-6 of itself was stepped by 1e-8 P, its difference 1e-8 of M
    # beside a rounding of ~1e-16: a sigma off by ~1e-8.
    periods = np.array([7305.0, 412.7, 88.31, 15003.0])
    sp = periods * np.array([1e-6, 3e-7, 2e-6, 1e-5])
    values = {"period": periods, "angular_semimajor_axis": np.array([412.0, 37.2, 5.61, 1203.0]),
              "parallax": np.array([48.3, 12.1, 3.3, 102.9])}
    sa, splx = values["angular_semimajor_axis"] * 1e-3, values["parallax"] * 2e-3
    sig, val, _ = _sigmas("visual", values, {"period": sp, "angular_semimajor_axis": sa, "parallax": splx})
    for k in range(len(periods)):
        want = mp.sqrt((2 * mp.mpf(sp[k]) / mp.mpf(periods[k])) ** 2
                       + (3 * mp.mpf(sa[k]) / mp.mpf(values["angular_semimajor_axis"][k])) ** 2
                       + (3 * mp.mpf(splx[k]) / mp.mpf(values["parallax"][k])) ** 2)
        assert relative_error(sig["total_mass"][k] / val["total_mass"][k], want) < 1e-9
    # the period alone: its share is the one the short step lost
    sig, val, _ = _sigmas("visual", values, {"period": sp})
    for k in range(len(periods)):
        assert relative_error(sig["total_mass"][k] / val["total_mass"][k], 2 * mp.mpf(sp[k]) / mp.mpf(periods[k])) < 1e-9


def test_thiele_innes_sigmas_at_a_small_argument_of_periastron():
    # A = a (cos w cos W - sin w sin W cos i), F = a (-sin w cos W - cos w sin W cos i) (Heintz 1978,
    # Double Stars; from memory), so dA/dw = F, dB/dw = G, dF/dw = -A, dG/dw = -B (w in radians),
    # evaluated with mpmath at 50 digits.  omega = 1e-3 deg with a sigma of 1.5 deg was stepped by
    # 1e-8 deg (1e-5 |omega|): the rounding of A over that step put the sigma off by ~1e-6 of a sigma_w
    # (where a constant is near its extremum in omega, as A at k = 0, its sigma is small beside it).
    omega = np.array([1e-3, -2e-4, 359.9995, 3e-3])
    values = {"angular_semimajor_axis": np.full(4, 327.0), "inclination": np.array([63.0, 12.0, 101.0, 88.0]),
              "omega": omega, "node": np.array([118.0, 30.0, 250.0, 5.0])}
    s = 1.5
    sig, _, _ = _sigmas("thiele-innes", values, {"omega": np.full(4, s)})
    deg = mp.pi / 180
    for k in range(4):
        a, i, w, W = (mp.mpf(values[n][k]) * (1 if n == "angular_semimajor_axis" else deg)
                      for n in ("angular_semimajor_axis", "inclination", "omega", "node"))
        A = a * (mp.cos(w) * mp.cos(W) - mp.sin(w) * mp.sin(W) * mp.cos(i))
        B = a * (mp.cos(w) * mp.sin(W) + mp.sin(w) * mp.cos(W) * mp.cos(i))
        F = a * (-mp.sin(w) * mp.cos(W) - mp.cos(w) * mp.sin(W) * mp.cos(i))
        G = a * (-mp.sin(w) * mp.sin(W) + mp.cos(w) * mp.cos(W) * mp.cos(i))
        for name, derivative in (("A", F), ("B", G), ("F", -A), ("G", -B)):
            assert abs(sig[name][k] - abs(derivative) * deg * s) < 1e-8 * a * deg * s, name


def test_geometry_fill_factor_near_e_one_is_stepped_within_the_domain():
    # fill factor R / (r_L a (1 - e)) (Eggleton 1983 for r_L; a(1 - e) the periastron distance): its
    # relative sigma from e alone is s_e / (1 - e) exactly.  At 1 - e = 1e-5 a step of 1e-8 (1e-5 of
    # max(sigma, 1e-3 e)) is 1e-3 of the distance to e = 1, where 1/(1 - e) bends: a sigma off by ~1e-6.
    e = np.array([1 - 1e-5, 1 - 3e-6, 0.9999, 0.99])
    se = (1 - e) * 0.1
    values = {"period": np.full(4, 118.3), "eccentricity": e, "m1": np.full(4, 8.4), "m2": np.full(4, 5.1),
              "radius1": np.full(4, 4.3), "radius2": np.full(4, 2.9)}
    sig, val, _ = _sigmas("geometry", values, {"eccentricity": se})
    for k in range(4):
        want = mp.mpf(se[k]) / (1 - mp.mpf(e[k]))
        for name in ("fill_factor1", "fill_factor2"):
            assert relative_error(sig[name][k] / val[name][k], want) < 1e-8, name


def test_geometry_periastron_speed_at_a_circular_orbit_is_differenced_to_second_order():
    # vis-viva at periastron, v = (GM (1 + e) / (a (1 - e)))^(1/2) (Hilditch 2001, ch. 2; from memory):
    # d ln v / de = 1 / (1 - e^2), 1 at e = 0, where e - h leaves the domain.  The one-sided difference
    # of first order erred by h v''/(2 v') = h / 2 of the sigma (5e-8 with sigma_e = 0.01); of second
    # order, by ~h^2.  Reference: mpmath's derivative of the formula at 50 digits (GM and a cancel).
    values = {"period": np.full(3, 118.3), "eccentricity": np.zeros(3), "m1": np.array([8.4, 1.0, 30.0]),
              "m2": np.array([5.1, 0.2, 29.0])}
    se = np.array([0.01, 0.05, 0.02])
    sig, val, result = _sigmas("geometry", values, {"eccentricity": se})
    slope = mp.diff(lambda x: mp.log(mp.sqrt((1 + x) / (1 - x))), mp.mpf(0))
    for k in range(3):
        assert relative_error(sig["speed_periastron"][k] / val["speed_periastron"][k], slope * mp.mpf(se[k])) < 1e-8
        # d ln v_apastron / de = -1 / (1 - e^2)
        assert relative_error(sig["speed_apastron"][k] / val["speed_apastron"][k], slope * mp.mpf(se[k])) < 1e-8
    assert "interval_crosses_domain" in {w.code for w in result.warnings}


def _true_anomaly(t, t0, period, e):
    """nu (rad) at t from Kepler's equation M = E - e sin E (Hilditch 2001, ch. 2; from memory), mpmath."""
    m = 2 * mp.pi * ((mp.mpf(t) - t0) / period)
    m = m - 2 * mp.pi * mp.floor(m / (2 * mp.pi))
    big_e = mp.findroot(lambda x: x - e * mp.sin(x) - m, m + e * mp.sin(m))
    return 2 * mp.atan2(mp.sqrt(1 + e) * mp.sin(big_e / 2), mp.sqrt(1 - e) * mp.cos(big_e / 2))


def test_ephemeris_true_anomaly_sigma_from_the_epoch_of_a_short_period_orbit():
    # d nu / d T0 = -(2 pi / P) (1 + e cos nu)^2 / (1 - e^2)^(3/2) (from d nu/dt in Kepler's problem;
    # from memory), with nu from Kepler's equation in mpmath at 50 digits.  A date was stepped by
    # 1e-4 d whatever the period: for P ~ 1 d and e = 0.87 the anomaly bends within that step and the
    # sigma was off by up to ~3e-5; the engine now shortens a step that bends.
    calc = get("ephemeris")
    rng = np.random.default_rng(5)
    n = 12
    periods = rng.uniform(0.5, 3.0, n)
    t0 = 2458712.3 + rng.uniform(0.0, 1.0, n)
    e = 0.873
    times = np.array([2460400.5, 2460500.5, 2460600.5, 2460700.5, 2460750.5])
    quantities = {"period": Measured.exact(periods), "eccentricity": Measured.exact(np.full(n, e)),
                  "omega": Measured.exact(np.full(n, 243.6)), "t_periastron": Measured.normal(t0, 0.01),
                  "k1": Measured.exact(np.full(n, 61.2))}
    result = evaluate(calc, quantities, {"times": times, "count": 2}, Options())
    got = result.outputs["true_anomaly"]["sigma"]
    ee = mp.mpf(e)
    for k in range(n):
        for j, t in enumerate(times):
            nu = _true_anomaly(t, mp.mpf(t0[k]), mp.mpf(periods[k]), ee)
            rate = 2 * mp.pi / mp.mpf(periods[k]) * (1 + ee * mp.cos(nu)) ** 2 / (1 - ee * ee) ** mp.mpf(1.5)
            assert relative_error(got[k, j], rate * 180 / mp.pi * mp.mpf(0.01)) < 1e-8


def test_ephemeris_radial_velocity_sigma_from_the_period_after_thousands_of_cycles():
    # rv1 = K1 (cos(nu + w) + e cos w) + gamma (Hilditch 2001, ch. 2; from memory), differentiated in the
    # period by mpmath at 50 digits through Kepler's equation.  After ~2000 cycles a step of 1e-5 P moves
    # the phase by 0.02 of a cycle: the engine sees the stencil bend and shortens the step.
    calc = get("ephemeris")
    periods = np.array([0.7314, 1.9021, 3.3307])
    t0 = np.array([2456001.23, 2456002.71, 2456000.05])
    e = np.array([0.12, 0.0, 0.45])
    w = np.array([61.0, 90.0, 300.0])
    times = np.array([2458003.1, 2458010.4])
    sp = periods * 2e-8
    quantities = {"period": Measured.normal(periods, sp), "eccentricity": Measured.exact(e),
                  "omega": Measured.exact(w), "t_periastron": Measured.exact(t0),
                  "k1": Measured.exact(np.full(3, 55.0))}
    result = evaluate(calc, quantities, {"times": times, "count": 1}, Options())
    got = result.outputs["rv1"]["sigma"]
    for k in range(3):
        for j, t in enumerate(times):
            ee, ww = mp.mpf(e[k]), mp.mpf(w[k]) * mp.pi / 180

            def rv(p):
                nu = _true_anomaly(t, mp.mpf(t0[k]), p, ee)
                return 55 * (mp.cos(nu + ww) + ee * mp.cos(ww))

            want = abs(mp.diff(rv, mp.mpf(periods[k]))) * mp.mpf(sp[k])
            assert relative_error(got[k, j], want) < 1e-7


def test_collision_sigmas_at_ordinary_points():
    # eta = Mdot2 v2 / (Mdot1 v1), stagnation distance of star 1 r1 = D / (1 + eta^(1/2)) (Stevens,
    # Blondin & Pollock 1992; from memory), the Eichler & Usov (1993) half-angle 2.1 (1 - eta^(2/5)/4)
    # eta^(1/3) rad (from memory): every derivative from mpmath at 50 digits.  The step tied to a sigma
    # of 1e-4 of each input put these off by ~1e-8.
    rng = np.random.default_rng(11)
    n = 5
    values = {"mdot1": 10 ** rng.uniform(-5, -4, n), "mdot2": 10 ** rng.uniform(-8, -6, n),
              "vinf1": rng.uniform(1000, 3000, n), "vinf2": rng.uniform(500, 2500, n),
              "separation": rng.uniform(1, 30, n)}
    sig = {k: 1e-4 * v for k, v in values.items()}
    got, val, _ = _sigmas("collision", values, sig)
    for k in range(n):
        x = {name: mp.mpf(v[k]) for name, v in values.items()}

        def eta(m1, m2, v1, v2):
            return m2 * v2 / (m1 * v1)

        def r1(m1, m2, v1, v2, d):
            return d / (1 + mp.sqrt(eta(m1, m2, v1, v2)))

        def angle(m1, m2, v1, v2):
            q = eta(m1, m2, v1, v2)
            return 2.1 * (1 - q ** mp.mpf(0.4) / 4) * q ** (mp.mpf(1) / 3) * 180 / mp.pi

        order = ("mdot1", "mdot2", "vinf1", "vinf2", "separation")
        args = [x[o] for o in order]
        for name, f, nargs in (("momentum_ratio", eta, 4), ("stagnation_distance1", r1, 5),
                               ("opening_half_angle_eu93", angle, 4)):
            var = 0
            for j in range(nargs):
                d = mp.diff(lambda z: f(*(args[:j] + [z] + args[j + 1:nargs])), args[j])
                var += (d * mp.mpf(sig[order[j]][k])) ** 2
            assert relative_error(got[name][k], mp.sqrt(var)) < 1e-8, name


def test_campbell_elements_sigmas_from_thiele_innes_constants():
    # p = |(A + G, B - F)|, m = |(A - G, B + F)|, a = (p + m) / 2, tan^2(i/2) = m / p,
    # omega +- node = atan2(B - F, A + G), atan2(-B - F, A - G) (Heintz 1978, Double Stars; from memory):
    # each derivative by mpmath at 50 digits.  Constants known to 1e-4 of themselves were stepped by
    # 1e-8 of themselves: sigmas off by up to ~1e-7.
    rng = np.random.default_rng(1)
    n = 40
    example = {"A": 151.2, "B": 268.9, "F": -287.4, "G": 93.6}
    values = {k: v * rng.uniform(0.3, 1.7, n) * np.sign(rng.uniform(-1, 1, n)) for k, v in example.items()}
    sig = {k: 1e-4 * np.abs(v) for k, v in values.items()}
    got, _, _ = _sigmas("campbell", values, sig)
    names = ("A", "B", "F", "G")

    def elements(A, B, F, G):
        p, m = mp.hypot(A + G, B - F), mp.hypot(A - G, B + F)
        total, difference = mp.atan2(B - F, A + G), mp.atan2(-B - F, A - G)
        return {"angular_semimajor_axis": (p + m) / 2, "inclination": 2 * mp.degrees(mp.atan2(mp.sqrt(m), mp.sqrt(p))),
                "omega": mp.degrees(total + difference) / 2, "node": mp.degrees(total - difference) / 2}

    for k in range(n):
        x = [mp.mpf(values[name][k]) for name in names]
        for output in ("angular_semimajor_axis", "inclination", "omega", "node"):
            var = 0
            for j in range(4):
                d = mp.diff(lambda z: elements(*(x[:j] + [z] + x[j + 1:]))[output], x[j])
                var += (d * mp.mpf(sig[names[j]][k])) ** 2
            assert relative_error(got[output][k], mp.sqrt(var)) < 1e-8, (output, k)


def test_ephemeris_radial_velocity_at_a_quadrature_many_cycles_on():
    # e = 0: rv1 = K1 cos(M + w), M = 2 pi (t - T0) / P (Hilditch 2001, ch. 2; from memory), so
    # |d rv1 / dP| = K1 2 pi (t - T0) / P^2 at a quadrature (M + w = 90 deg), exactly; mpmath at 50 digits.
    # There rv1 has no curvature (f'' = 0) to show that a step of 1e-5 P turns the phase by 1e-5 N
    # after N cycles; the turn of the phase and the anomalies shows it, and the step is shortened.
    calc = get("ephemeris")
    period, t0, k1 = 2.7, 2455000.0, 40.0
    for cycles in (50, 3000):
        t = t0 + (cycles + 0.25) * period
        sp = period * 1e-9
        quantities = {"period": Measured.normal(period, sp), "eccentricity": Measured.exact(0.0),
                      "omega": Measured.exact(0.0), "t_periastron": Measured.exact(t0), "k1": Measured.exact(k1)}
        result = evaluate(calc, quantities, {"times": np.array([t]), "count": 1}, Options())
        want = k1 * 2 * mp.pi * (mp.mpf(t) - mp.mpf(t0)) / mp.mpf(period) ** 2 * mp.mpf(sp)
        assert relative_error(result.outputs["rv1"]["sigma"][0, 0], want) < 1e-8


def test_geometry_within_a_rounding_of_e_one_keeps_a_step():
    # periastron distance a (1 - e): its relative sigma from e alone is s_e / (1 - e) exactly (1 - e is
    # exact in doubles this near 1).  1e-5 of the distance to e = 1 is below the rounding of e there: the
    # step is held at 1024 roundings of e, not left to round to 0 (which gave a sigma of 0, or NaN).
    e = np.array([1 - 1e-12, 1 - 1e-15, np.nextafter(1.0, 0.0)])
    values = {"period": np.full(3, 118.3), "eccentricity": e, "m1": np.full(3, 8.4), "m2": np.full(3, 5.1)}
    for se in (1e-17, 1e-3):
        sig, val, _ = _sigmas("geometry", values, {"eccentricity": np.full(3, se)})
        for k in range(3):
            want = mp.mpf(se) / (1 - mp.mpf(e[k]))
            assert relative_error(sig["periastron_distance"][k] / val["periastron_distance"][k], want) < 1e-9


def test_collision_true_anomaly_sigma_from_a_phase_many_cycles_on_is_that_of_its_fraction():
    # nu from the phase by Kepler's equation; d nu / dM = (1 + e cos nu)^2 / (1 - e^2)^(3/2) (Murray &
    # Dermott 1999, ch. 2; from memory) and M = 2 pi phase.  A phase is a cyclic input: stepped by 1e-5 of
    # |x| a phase of 1e5 cycles was differenced over a whole cycle, and its sigma was not the fraction's
    e, sigma_phase = 0.64, 0.005
    common = {"mdot1": 2.4e-5, "mdot2": 1.1e-6, "vinf1": 2300.0, "vinf2": 1900.0, "eccentricity": e,
              "semimajor_axis": 14.0}
    for phase in (0.1, 7.1, -3.9, 1e5 + 0.1):
        got, val, _ = _sigmas("collision", {**common, "phase": np.array([phase])}, {"phase": sigma_phase})
        nu = np.radians(val["true_anomaly"][0])
        want = np.degrees(2 * np.pi * (1 + e * np.cos(nu)) ** 2 / (1 - e * e) ** 1.5) * sigma_phase
        assert relative_error(got["true_anomaly"][0], want) < 1e-8, phase
