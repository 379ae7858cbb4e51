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
