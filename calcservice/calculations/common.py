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

#: q as a ratio of masses, where no semi-amplitudes are given (astrometry, geometry)
MASS_RATIO = "q = M2/M1; star 1 is the primary"


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
    return Input(name, "km/s", f"radial-velocity semi-amplitude of star {star} (below the speed of light)", SPEED,
                 example=example)


def relativistic_speeds(inputs, names) -> list:
    """A warning for each speed input of ``names`` above 0.1 c in some system."""
    out = []
    for name in names:
        v = inputs.get(name)
        if v is None:
            continue
        fast = np.asarray(v) > RELATIVISTIC_FRACTION * C_LIGHT_KM_S
        if np.any(fast):
            out.append(Warning("relativistic_speed", f"{name} above 0.1 c: the Newtonian formulas used here lose "
                               "accuracy (relative corrections of order (v/c)^2, 1 % at 0.1 c and growing)",
                               fast, subject=name))
    return out


def with_speed_check(check, names):
    """``check`` followed by the relativistic-speed warnings on the inputs ``names``."""
    def combined(inputs, outputs):
        return [*(check(inputs, outputs) if check is not None else ()), *relativistic_speeds(inputs, names)]
    return combined
