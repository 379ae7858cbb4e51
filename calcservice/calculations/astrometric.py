"""Declarations: visual orbits, Thiele–Innes <-> Campbell elements, photocentric orbits."""

import numpy as np

from ..physics import astrometric as phys
from ..registry import ANGLE, ANY, POSITIVE, Calculation, Constraint, Domain, Input, Output, Warning, register
from .common import HILDITCH_2001, IAU_2012_B2, IAU_2015_B3, MASS_RATIO, SYMBOLS, cited, period

HEINTZ_1978 = "W. D. Heintz (1978), Double Stars, D. Reidel, Dordrecht (Thiele–Innes constants, orbital parallax)"
BINNENDIJK_1960 = "L. Binnendijk (1960), Properties of Double Stars, University of Pennsylvania Press, Philadelphia"
VAN_DE_KAMP_1967 = ("P. van de Kamp (1967), Principles of Astrometry, W. H. Freeman, San Francisco "
                    "(photocentric orbit, alpha = a (B - beta))")
IAU_2015_B2 = "IAU 2015 Resolution B2 (bolometric magnitude scales; the parsec as 648000/pi au)"
#: the sources of a formula: the parsec's definition for an angle to a length; Kepler's third law with GM_sun
PARSEC = (IAU_2015_B2,)
KEPLER = (HILDITCH_2001, IAU_2015_B3, IAU_2012_B2)

FRACTION_OPEN = Domain(0.0, 1.0, low_open=True, high_open=True)
LUMINOSITY_FRACTION = Domain(0.0, 1.0, high_open=True)
CLOSED_INCLINATION = Domain(0.0, 180.0)

SKY = {
    "sky_axes": "x towards north, y towards east; position angles count from north through east; the relative "
                "orbit of the secondary about the primary is x = A X + F Y, y = B X + G Y with X = cos E - e, "
                "Y = sqrt(1 - e^2) sin E (Thiele–Innes)",
    "parallax": "a [au] = a [mas] / parallax [mas] = a [mas] * distance [pc] / 1000 (definition of the parsec)",
    "kepler": "M1 + M2 = 4 pi^2 a^3 / (GM_sun P^2) with the IAU 2015 nominal GM_sun (not a^3/P^2 in years, "
              "which differs by 3.8e-5 because a Julian year is not the Gaussian year of 365.2568983 d)",
}

VISUAL_CONVENTIONS = {
    "mass_ratio": MASS_RATIO,
    "parallax": SKY["parallax"],
    "kepler": SKY["kepler"],
    "fractional_mass": "B = M2/(M1 + M2) = q/(1 + q), the fraction of the relative orbit described by the primary: "
                       "a1 = B a, a2 = (1 - B) a",
}

ORIENTATION_CONVENTIONS = {
    "sky_axes": SKY["sky_axes"],
    "omega": "argument of periastron of the RELATIVE orbit (secondary about primary), the visual-binary convention "
             "the Thiele–Innes constants use; omega_primary = omega - 180 deg is the spectroscopic omega of the "
             "primary's orbit (omega_relative = omega_primary + 180 deg)",
    "node": "position angle of the ascending node. The sky-projected orbit is the same for (omega, node) and "
            "(omega + 180, node + 180), so without radial velocities node is given in [0, 180) deg and omega "
            "follows; if radial velocities show that the secondary recedes at the other node, add 180 deg to both "
            "node and omega. Near node = 0 or 180 deg a node folded across the edge turns omega by 180 deg with "
            "it: the uncertainties (linear and Monte Carlo) are taken on the one orbit, the pair kept together, "
            "and the value is then given in these ranges",
    "inclination": "0 to 180 deg from the sense of motion on the sky: below 90 deg the position angle increases "
                   "(counter-clockwise on the sky, north through east), above 90 deg it decreases",
}


# ----------------------------------------------------------------------------- visual

def _visual_check(inputs, outputs):
    out = []
    q = outputs.get("mass_ratio")
    if q is not None and np.any(q > 1):
        out.append(Warning("primary_less_massive", "q = M2/M1 > 1: star 1 is the less massive star", q > 1))
    return out


register(Calculation(
    name="visual",
    path="/v1/astrometric/visual",
    title="Visual orbit with a parallax: dynamical masses",
    summary="Physical semi-major axis and total mass (Kepler's third law) of a resolved relative orbit given "
            "its parallax or distance; with a mass ratio or fractional mass the individual masses.",
    inputs=(
        period(example=7305.0),
        Input("angular_semimajor_axis", "mas", "angular semi-major axis of the relative orbit", POSITIVE,
              example=412.0),
        Input("parallax", "mas", "trigonometric parallax (give this or distance)", POSITIVE, required=False,
              example=48.3),
        Input("distance", "pc", "distance (give this or parallax)", POSITIVE, required=False, example=20.7),
        Input("mass_ratio", "", "mass ratio q = M2/M1 (give this or fractional_mass)", POSITIVE, required=False,
              example=0.72),
        Input("fractional_mass", "", "fractional mass B = M2/(M1 + M2), e.g. from the ratio of the absolute to "
              "the relative orbit (give this or mass_ratio)", FRACTION_OPEN, required=False, example=0.42),
    ),
    outputs=cited((
        Output("semimajor_axis", "au", "relative semi-major axis", "a = a'' / parallax"),
        Output("total_mass", "solMass", "total (dynamical) mass", "M1 + M2 = 4 pi^2 a^3 / (GM_sun P^2)"),
        Output("parallax", "mas", "parallax used", "parallax = 1000 / distance[pc]"),
        Output("distance", "pc", "distance used", "d = 1000 / parallax[mas]"),
        Output("m1", "solMass", "mass of the primary", "M1 = (1 - B) (M1 + M2)"),
        Output("m2", "solMass", "mass of the secondary", "M2 = B (M1 + M2)"),
        Output("mass_ratio", "", "mass ratio q = M2/M1", "q = B / (1 - B)"),
        Output("fractional_mass", "", "fractional mass B = M2/(M1 + M2)", "B = q / (1 + q)"),
        Output("a1", "au", "semi-major axis of the primary's orbit about the centre of mass", "a1 = B a"),
        Output("a2", "au", "semi-major axis of the secondary's orbit about the centre of mass", "a2 = (1 - B) a"),
    ), {"semimajor_axis": PARSEC, "total_mass": KEPLER, "parallax": PARSEC, "distance": PARSEC}, (HEINTZ_1978,)),
    function=phys.visual,
    jacobian=phys.visual_jacobian,
    references=(HILDITCH_2001, HEINTZ_1978, IAU_2015_B3, IAU_2012_B2, IAU_2015_B2),
    constants=("GM_sun", "au", "pc", "day"),
    conventions=VISUAL_CONVENTIONS
    | {"symbols": SYMBOLS["visual"]},
    exclusive=(("parallax", "distance"),),
    at_most_one=(("mass_ratio", "fractional_mass"),),
    check=_visual_check,
    example={"period": {"value": 7305.0, "sigma": 12.0}, "angular_semimajor_axis": {"value": 412.0, "sigma": 3.0},
             "parallax": {"value": 48.3, "sigma": 0.4}, "mass_ratio": {"value": 0.72, "sigma": 0.03}},
))


# ----------------------------------------------------------------------------- Thiele–Innes <-> Campbell

def _thiele_innes_input(name, example):
    return Input(name, "mas", f"Thiele–Innes constant {name}", ANY, example=example)


def _nonzero_orbit(A, B, F, G, **_):
    return (np.asarray(A) ** 2 + np.asarray(B) ** 2 + np.asarray(F) ** 2 + np.asarray(G) ** 2) > 0


def _campbell_check(inputs, outputs):
    i = outputs.get("inclination")
    if i is None:
        return []
    # within 1e-6 deg of face-on, a (1 - cos i) is ~1e-16 a: omega - node is lost in rounding
    face_on = (i < 1e-6) | (i > 180.0 - 1e-6)
    if np.any(face_on):
        return [Warning("face_on", "the orbit is face-on: only omega + node (omega - node when retrograde) is "
                        "determined; omega and node are given for one arbitrary split", face_on)]
    return []


register(Calculation(
    name="campbell",
    path="/v1/astrometric/campbell",
    title="Thiele–Innes constants to Campbell elements",
    summary="Angular semi-major axis, inclination, argument of periastron and node of a relative orbit from its "
            "Thiele–Innes constants, with their (correlated) uncertainties.",
    inputs=(
        _thiele_innes_input("A", 151.2),
        _thiele_innes_input("B", 268.9),
        _thiele_innes_input("F", -287.4),
        _thiele_innes_input("G", 93.6),
    ),
    outputs=cited((
        Output("angular_semimajor_axis", "mas", "angular semi-major axis of the relative orbit",
               "a = (p + m)/2, p = |(A + G, B - F)|, m = |(A - G, B + F)|"),
        Output("inclination", "deg", "inclination, 0-180 deg (above 90 deg retrograde)", "tan^2(i/2) = m / p"),
        Output("omega", "deg", "argument of periastron of the relative orbit",
               "omega = [atan2(B - F, A + G) + atan2(-B - F, A - G)] / 2, with node in [0, 180)", period=360.0,
               turns_with=("node", 180.0)),
        Output("node", "deg", "position angle of the ascending node, in [0, 180) deg",
               "node = [atan2(B - F, A + G) - atan2(-B - F, A - G)] / 2 (mod 180)", period=180.0),
        Output("omega_primary", "deg", "argument of periastron of the primary's orbit (spectroscopic omega)",
               "omega_primary = omega - 180 deg", period=360.0, turns_with=("node", 180.0)),
    ), {}, (HEINTZ_1978, BINNENDIJK_1960)),
    function=phys.campbell,
    references=(HEINTZ_1978, BINNENDIJK_1960),
    conventions=ORIENTATION_CONVENTIONS
    | {"symbols": SYMBOLS["campbell"]},
    constraints=(Constraint(("A", "B", "F", "G"), "the Thiele–Innes constants are all zero: they give a = 0",
                            _nonzero_orbit),),
    check=_campbell_check,
    example={"A": {"value": 151.2, "sigma": 0.8}, "B": {"value": 268.9, "sigma": 0.9},
             "F": {"value": -287.4, "sigma": 0.9}, "G": {"value": 93.6, "sigma": 0.8},
             "correlations": [{"between": ["A", "G"], "rho": 0.35}, {"between": ["B", "F"], "rho": -0.2}]},
))

register(Calculation(
    name="thiele-innes",
    path="/v1/astrometric/thiele-innes",
    title="Campbell elements to Thiele–Innes constants",
    summary="Thiele–Innes constants A, B, F, G of a relative orbit from its angular semi-major axis, inclination, "
            "argument of periastron and node, with their correlated uncertainties.",
    inputs=(
        Input("angular_semimajor_axis", "mas", "angular semi-major axis of the relative orbit", POSITIVE,
              example=327.0),
        Input("inclination", "deg", "orbital inclination (0 to 180 deg, above 90 deg retrograde)",
              CLOSED_INCLINATION, example=63.0),
        Input("omega", "deg", "argument of periastron of the relative orbit (give this or omega_primary)", ANGLE,
              required=False, example=212.0, period=360.0),
        Input("omega_primary", "deg", "argument of periastron of the primary's orbit, the spectroscopic omega "
              "(give this or omega); converted with omega = omega_primary + 180 deg", ANGLE, required=False,
              example=32.0, period=360.0),
        Input("node", "deg", "position angle of the ascending node", ANGLE, example=118.0, period=360.0),
    ),
    outputs=cited((
        Output("A", "mas", "Thiele–Innes constant A",
               "A = a (cos w cos W - sin w sin W cos i), w = omega, W = node"),
        Output("B", "mas", "Thiele–Innes constant B",
               "B = a (cos w sin W + sin w cos W cos i), w = omega, W = node"),
        Output("F", "mas", "Thiele–Innes constant F",
               "F = a (-sin w cos W - cos w sin W cos i), w = omega, W = node"),
        Output("G", "mas", "Thiele–Innes constant G",
               "G = a (-sin w sin W + cos w cos W cos i), w = omega, W = node"),
    ), {}, (HEINTZ_1978, BINNENDIJK_1960)),
    function=phys.thiele_innes,
    references=(HEINTZ_1978, BINNENDIJK_1960),
    conventions=ORIENTATION_CONVENTIONS
    | {"symbols": SYMBOLS["thiele-innes"]},
    exclusive=(("omega", "omega_primary"),),
    example={"angular_semimajor_axis": {"value": 327.0, "sigma": 2.0}, "inclination": {"value": 63.0, "sigma": 0.7},
             "omega": {"value": 212.0, "sigma": 1.5}, "node": {"value": 118.0, "sigma": 0.6}},
))


# ----------------------------------------------------------------------------- photocentre

def _photocentre_check(inputs, outputs):
    m2 = outputs.get("m2")
    m1 = inputs.get("primary_mass")
    beta = inputs.get("luminosity_fraction")
    if m2 is None or m1 is None:
        return []
    dark = np.ones(np.shape(m2), dtype=bool) if beta is None else np.broadcast_to(np.asarray(beta) == 0, np.shape(m2))
    heavy = dark & (m2 > m1)
    if np.any(heavy):
        return [Warning("companion_more_massive", "a dark companion comes out more massive than the primary: if it "
                        "is not seen it may be a compact object or itself a close pair", heavy)]
    return []


register(Calculation(
    name="photocentre",
    path="/v1/astrometric/photocentre",
    title="Photocentric orbit: companion mass",
    summary="The astrometric mass function of an unresolved pair's photocentric orbit and, given the primary's "
            "mass and the companion's share of the light, the companion mass and the relative orbit's size.",
    inputs=(
        Input("photocentre_semimajor_axis", "mas", "angular semi-major axis of the photocentre's orbit", POSITIVE,
              example=3.71),
        Input("parallax", "mas", "trigonometric parallax (give this or distance)", POSITIVE, required=False,
              example=21.4),
        Input("distance", "pc", "distance (give this or parallax)", POSITIVE, required=False, example=46.7),
        period(example=612.0),
        Input("primary_mass", "solMass", "mass of the primary (star 1)", POSITIVE, example=1.08),
        Input("luminosity_fraction", "", "the companion's fraction of the light in the observed band, "
              "beta = L2/(L1 + L2); 0 for a dark companion", LUMINOSITY_FRACTION, required=False, default=0.0,
              example=0.0),
    ),
    outputs=cited((
        Output("astrometric_mass_function", "solMass", "astrometric mass function",
               "f_ast = 4 pi^2 alpha^3 / (GM_sun P^2) = (M1 + M2) (B - beta)^3"),
        Output("m2", "solMass", "companion mass",
               "root with B > beta of (B - beta)^3 / (1 - B) = f_ast / M1, M2 = B M1 / (1 - B)"),
        Output("semimajor_axis", "au", "semi-major axis of the relative orbit", "a^3 = GM_sun (M1 + M2) P^2 / (4 pi^2)"),
        Output("total_mass", "solMass", "total mass", "M1 + M2"),
        Output("mass_ratio", "", "mass ratio q = M2/M1", "q = M2 / M1"),
        Output("fractional_mass", "", "fractional mass B = M2/(M1 + M2)", "B"),
        Output("a1", "au", "semi-major axis of the primary's orbit about the centre of mass", "a1 = B a"),
        Output("photocentre_semimajor_axis_au", "au", "semi-major axis of the photocentre's orbit",
               "alpha = alpha'' / parallax = a (B - beta)"),
        Output("parallax", "mas", "parallax used", "parallax = 1000 / distance[pc]"),
        Output("distance", "pc", "distance used", "d = 1000 / parallax[mas]"),
    ), {"astrometric_mass_function": (VAN_DE_KAMP_1967, IAU_2015_B3, IAU_2012_B2), "semimajor_axis": KEPLER,
        "a1": (HEINTZ_1978,), "photocentre_semimajor_axis_au": (VAN_DE_KAMP_1967, IAU_2015_B2), "parallax": PARSEC,
        "distance": PARSEC}, (VAN_DE_KAMP_1967,)),
    function=phys.photocentre,
    jacobian=phys.photocentre_jacobian,
    references=(VAN_DE_KAMP_1967, HEINTZ_1978, HILDITCH_2001, IAU_2015_B3, IAU_2012_B2, IAU_2015_B2),
    constants=("GM_sun", "au", "pc", "day"),
    conventions={
        "mass_ratio": MASS_RATIO,
        "parallax": SKY["parallax"],
        "kepler": SKY["kepler"],
        "photocentre": "alpha = a (B - beta), B = M2/(M1 + M2), beta = L2/(L1 + L2): the photocentre moves with the "
                       "primary, so B > beta; for every beta < 1 exactly one such companion mass fits, and beta = 0 "
                       "(a dark companion) gives the smallest one. A companion with beta > B (photocentre moving "
                       "with the secondary) is the other branch and is not solved here",
    }
    | {"symbols": SYMBOLS["photocentre"]},
    exclusive=(("parallax", "distance"),),
    check=_photocentre_check,
    example={"photocentre_semimajor_axis": {"value": 3.71, "sigma": 0.05}, "parallax": {"value": 21.4, "sigma": 0.03},
             "period": {"value": 612.0, "sigma": 4.0}, "primary_mass": {"value": 1.08, "sigma": 0.05},
             "luminosity_fraction": 0.0},
))
