"""Small readers of engine results, and the reference values, shared by the physics tests."""

import numpy as np
import uncertainties



def nominal(result, name):
    return float(result.outputs[name]["value"][0])


def sigma(result, name):
    return float(result.outputs[name]["sigma"][0])


def codes(result):
    return {x.code for x in result.warnings}


def correlated_ufloats(values, corr):
    """``{name: (value, sigma)}`` with ``{(a, b): rho}`` as correlated values of the ``uncertainties``
    package: the reference the engine's linear method is checked against."""
    names = list(values)
    cov = np.diag([values[n][1] ** 2 for n in names])
    for (a, b), rho in corr.items():
        i, j = names.index(a), names.index(b)
        cov[i, j] = cov[j, i] = rho * values[a][1] * values[b][1]
    return dict(zip(names, uncertainties.correlated_values([values[n][0] for n in names], cov)))


def split_normal(mode, minus, plus, z):
    """A split normal (mode, half-widths minus and plus, each half weighted by its width: Wallis 2014, Statistical
    Science 29, 106) from standard normal z by its inverse CDF, which keeps any correlation of the z: the test
    rounds' reference for the service's documented draw model of asymmetric errors."""
    from scipy.special import ndtr, ndtri
    p = ndtr(z)
    total = minus + plus
    left = mode + minus * ndtri(np.clip(p * total / (2 * minus), 0, 1))
    right = mode + plus * ndtri(np.clip(0.5 + (p - minus / total) * total / (2 * plus), 0, 1))
    return np.where(p < minus / total, left, right)
