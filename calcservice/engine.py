"""The uncertainty engine: measured inputs in, measured outputs out.

It knows nothing about binaries.  Given a :class:`~calcservice.registry.Calculation`
and its inputs as :class:`Measured` arrays over N systems, it propagates uncertainty

* linearly, through a Jacobian taken by central differences with a step of ~1e-5 of each
  input's scale (one-sided where a step would leave an input's domain) and the input
  covariance built from sigmas and correlations, or
* by Monte Carlo: normal draws (split-normal for asymmetric errors, a Gaussian copula
  when correlated), the user's own samples paired index by index, isotropic
  orientations (cos i uniform); draws outside an input's domain or giving a
  non-finite output are rejected and counted; summaries are the median, the standard
  deviation and the central 68.27 % interval.

Either way the physics function is called once, on arrays of shape (N, P): P = 1 + 2 m
perturbed copies for m uncertain inputs (linear), or P = 1 + S draws (Monte Carlo,
column 0 being the nominal point).  Nothing loops over systems in Python.
"""

from __future__ import annotations

import secrets
from dataclasses import dataclass, field
from functools import cached_property, lru_cache
from typing import Any, Mapping

import numpy as np
from scipy.special import ndtr, ndtri

from .registry import Calculation, Warning

ONE_SIGMA_LOW = float(ndtr(-1.0))    # 0.158655...
ONE_SIGMA_HIGH = float(ndtr(1.0))    # 0.841344...
RELATIVE_STEP = 1e-5                 # central step ~ eps^(1/3) of the input's scale
TIME_STEP = 1e-4                     # days per day of a time input's sigma (at least 1 d)
LINEAR_TRUST_LIMIT = 0.2             # relative sigma above which linear propagation is suspect


class EngineError(ValueError):
    """An input problem the engine found, keyed by field like a validation error."""

    def __init__(self, errors: Mapping[str, list[str]], detail: str | None = None):
        super().__init__(detail or "; ".join(f"{k}: {' '.join(v)}" for k, v in errors.items()))
        self.errors = dict(errors)
        self.detail = detail


@dataclass
class Measured:
    """A quantity over N systems in its canonical unit.

    ``value`` is the nominal value (for samples, their median); ``sigma_minus`` and
    ``sigma_plus`` are the one-sigma errors (equal for a normal error, zero for an
    exact number); ``samples`` (N, S) are the user's own draws; ``isotropic`` marks an
    inclination drawn from random orientations.
    """

    value: np.ndarray
    sigma_minus: np.ndarray
    sigma_plus: np.ndarray
    samples: np.ndarray | None = None
    isotropic: bool = False

    @classmethod
    def exact(cls, value) -> "Measured":
        v = np.atleast_1d(np.asarray(value, dtype=float))
        z = np.zeros_like(v)
        return cls(v, z, z)

    @classmethod
    def normal(cls, value, sigma) -> "Measured":
        v = np.atleast_1d(np.asarray(value, dtype=float))
        s = _broadcast(np.asarray(sigma, dtype=float), v.shape).copy()
        return cls(v, s, s)

    @classmethod
    def from_samples(cls, samples) -> "Measured":
        s = np.atleast_2d(np.asarray(samples, dtype=float))
        med = np.median(s, axis=1)
        sd = s.std(axis=1, ddof=1) if s.shape[1] > 1 else np.zeros(s.shape[0])
        return cls(med, sd, sd, samples=s)

    @property
    def sigma(self) -> np.ndarray:
        """The symmetric sigma used by linear propagation (mean of the two sides)."""
        return 0.5 * (self.sigma_minus + self.sigma_plus)

    @cached_property
    def asymmetric(self) -> bool:
        return bool((self.sigma_minus != self.sigma_plus).any()) and self.samples is None

    @cached_property
    def uncertain(self) -> bool:
        return (self.isotropic or self.samples is not None
                or bool((self.sigma_plus > 0).any() or (self.sigma_minus > 0).any()))


@dataclass
class Options:
    method: str = "linear"          # "linear" | "monte_carlo"
    samples: int = 10000
    seed: int | None = None
    correlations: Mapping[tuple[str, str], float] = field(default_factory=dict)
    keep_draws: bool = False


@dataclass
class Result:
    """Measured outputs over N systems; arrays have shape (N,) plus any series axis."""

    outputs: dict[str, dict[str, np.ndarray]]
    method: str
    samples: int | None = None
    seed: int | None = None
    rejected_fraction: np.ndarray | None = None
    warnings: list[Warning] = field(default_factory=list)
    failed: dict[int, dict[str, list[str]]] = field(default_factory=dict)   # system index -> errors
    draws: dict[str, np.ndarray] | None = None
    nominal_inputs: dict[str, Any] = field(default_factory=dict)


def _broadcast(a, shape) -> np.ndarray:
    """``np.broadcast_to`` without its cost (tens of microseconds) when ``a`` has the shape already."""
    if type(a) is np.ndarray and a.shape == shape:
        return a
    return np.broadcast_to(a, shape)


def correlation_matrix(names: list[str], correlations: Mapping[tuple[str, str], float]) -> np.ndarray:
    """The correlation matrix over ``names``; 422 unless it is positive definite."""
    m = len(names)
    r = np.eye(m)
    index = {n: k for k, n in enumerate(names)}
    correlated = False
    for (a, b), rho in correlations.items():
        if a in index and b in index:
            r[index[a], index[b]] = r[index[b], index[a]] = rho
            correlated = True
    if correlated:                      # the identity needs no test
        try:
            np.linalg.cholesky(r)
        except np.linalg.LinAlgError:
            raise EngineError({"correlations": ["the correlation matrix is not positive definite"]}) from None
    return r


def _wrap(d: np.ndarray, period) -> np.ndarray:
    """``d`` reduced to [-period/2, period/2) (``period`` a number, an array, or None for no wrap)."""
    if period is None:
        return d
    return (d + 0.5 * period) % period - 0.5 * period


@lru_cache(maxsize=1024)
def _periods(given: tuple) -> tuple[np.ndarray, np.ndarray]:
    """The wrap period of each output (1 where it does not wrap) and which outputs wrap."""
    period = np.array([np.nan if o.period is None else o.period for o in given])
    wraps = np.isfinite(period)
    period = np.where(wraps, period, 1.0)
    period.flags.writeable = wraps.flags.writeable = False
    return period, wraps


def _call(calc: Calculation, arrays: Mapping[str, Any], statics: Mapping[str, Any], shape: tuple) -> dict[str, np.ndarray]:
    kwargs: dict[str, Any] = {i.name: None for i in calc.inputs}
    kwargs.update(statics)
    kwargs.update(arrays)
    with np.errstate(all="ignore"):
        raw = calc.function(**kwargs)
    out = {}
    for o in calc.outputs:
        y = raw.get(o.name)
        if y is None:
            continue
        out[o.name] = _broadcast(np.asarray(y, dtype=float), shape)
    return out


def _series_shape(calc: Calculation, statics: Mapping[str, Any]) -> tuple:
    trail = ()
    for i in calc.inputs:
        if i.kind == "series" and statics.get(i.name) is not None:
            trail = trail + (len(statics[i.name]),)
    return trail


def _nominal_failures(calc, nominal: Mapping[str, np.ndarray], statics: Mapping[str, Any],
                      n: int) -> dict[int, dict[str, list[str]]]:
    """Rows whose nominal inputs (choices included) violate a declared constraint."""
    failed: dict[int, dict[str, list[str]]] = {}
    args = {i.name: statics.get(i.name, nominal.get(i.name)) for i in calc.inputs}
    for c in calc.constraints:
        with np.errstate(all="ignore"):
            ok = _broadcast(np.asarray(c.test(**args), dtype=bool), (n,))
        for k in np.flatnonzero(~ok):
            for f in c.fields:
                failed.setdefault(int(k), {}).setdefault(f, []).append(c.message)
    return failed


def evaluate(calc: Calculation, quantities: Mapping[str, Measured], statics: Mapping[str, Any] | None = None,
             options: Options | None = None) -> Result:
    """Propagate the uncertainty of ``quantities`` through ``calc``."""
    statics = dict(statics or {})
    options = options or Options()
    n = max((len(q.value) for q in quantities.values()), default=1)
    trail = _series_shape(calc, statics)
    nominal = {k: _broadcast(q.value, (n,)) for k, q in quantities.items()}

    method = options.method
    switched = None
    if method == "linear" and any(q.isotropic or q.samples is not None for q in quantities.values()):
        method = "monte_carlo"
        switched = ("method_switched", "inputs given as samples or as 'isotropic' need Monte Carlo; "
                    "the Monte Carlo method was used")
    if method == "linear":
        result = _linear(calc, quantities, statics, options, n, trail)
    else:
        result = _monte_carlo(calc, quantities, statics, options, n, trail)
    if switched:
        result.warnings.insert(0, Warning(*switched))

    for k, errs in _nominal_failures(calc, nominal, statics, n).items():
        result.failed.setdefault(k, {}).update(errs)
    result.nominal_inputs = nominal
    if calc.check is not None:
        nominal_out = {name: o["value"] for name, o in result.outputs.items()}
        args = {i.name: statics.get(i.name, nominal.get(i.name)) for i in calc.inputs}
        with np.errstate(all="ignore"):
            result.warnings.extend(calc.check(inputs=args, outputs=nominal_out))
    return result


@lru_cache(maxsize=4096)
def _bounds(calc: Calculation, names: tuple[str, ...]) -> tuple[np.ndarray, np.ndarray]:
    """Closed bounds equivalent to the inputs' domains: x > a is x >= nextafter(a, inf) in floats."""
    doms = [calc.input(name).domain for name in names]
    low = np.array([np.nextafter(d.low, np.inf) if d.low_open else d.low for d in doms])
    high = np.array([np.nextafter(d.high, -np.inf) if d.high_open else d.high for d in doms])
    return low, high


def _within(calc: Calculation, names, x: np.ndarray) -> np.ndarray:
    """``Domain.contains`` for several inputs at once: column j of ``x`` against input ``names[j]``."""
    low, high = _bounds(calc, tuple(names))
    return np.isfinite(x) & (x >= low) & (x <= high)        # comparisons with NaN do not warn


def _side_by_side(arrays: list) -> np.ndarray:
    """Equal-shaped (n,) arrays as the columns of an (n, k) array (one C call, unlike np.stack)."""
    return np.array(arrays, dtype=float).T


def _last(a: np.ndarray) -> np.ndarray:
    """The first axis moved to the end (np.moveaxis(a, 0, -1) without its overhead)."""
    return a.transpose(tuple(range(1, a.ndim)) + (0,))


OFFSETS = np.array([-1.0, 1.0])     # the central three-point stencil, in steps h
WIDTH = len(OFFSETS)


@lru_cache(maxsize=4096)
def _layout(calc: Calculation, names: tuple[str, ...], perturbed: tuple[str, ...]):
    """Where the perturbed inputs sit: their indices among the inputs, which are times, and the
    stencil columns (1 + WIDTH j + k holds input j stepped by OFFSETS[k])."""
    j = [names.index(name) for name in perturbed]
    time = np.array([calc.input(name).time for name in perturbed], dtype=bool)
    stepped = 1 + WIDTH * np.arange(len(perturbed))[:, None] + np.arange(WIDTH)[None, :]   # (m, WIDTH)
    return j, np.array(j, dtype=np.intp)[:, None], time, stepped


def _propagate(calc, quantities, statics, perturbed, r, values, spread, rows: slice, trail):
    """Nominal outputs and their linear sigmas for the systems ``rows``: the outputs given, f0 and
    sigma of shape (systems,) + trail + (outputs,).  ``spread`` (systems, perturbed) holds the
    symmetric sigmas of the perturbed inputs."""
    n = rows.stop - rows.start
    m = len(perturbed)
    p = 1 + WIDTH * m
    offsets = OFFSETS
    names = list(quantities)
    x = _side_by_side([values[name][rows] for name in names])                     # (n, Q)
    cols = np.repeat(x[:, None, :], p, axis=1)                                     # (n, p, Q)
    h = None
    if m:
        j, column_of, time, stepped = _layout(calc, tuple(names), tuple(perturbed))
        xj = x[:, j]
        sj = spread[rows]                                                          # (n, m)
        # a date's size (a JD ~ 2.5e6 d) says nothing about the scale on which a function of it
        # varies: a time input is stepped by its sigma (at least 1 d).  Other inputs are stepped
        # by their sigma held within [1e-3 |x|, |x|]: a step tied to |x| alone is far too coarse
        # where a function amplifies it (a period's step grows by the number of elapsed cycles),
        # one tied to a tiny sigma alone would drown in rounding.
        ax = np.abs(xj)
        scale = np.where(ax > 0, np.clip(sj, 1e-3 * ax, ax), sj)
        h = np.where(time, TIME_STEP * np.maximum(sj, 1.0), RELATIVE_STEP * np.where(scale > 0, scale, 1.0))
        # a step that x + h represents exactly, so rounding does not bias the difference quotient
        # (Press et al., Numerical Recipes, sec. 5.7); matters for dates, where ulp(JD) ~ 5e-10 d
        exact_h = (xj + h) - xj
        h = np.where(np.isfinite(exact_h) & (exact_h > 0), exact_h, h)
        block = xj[:, None, :] + h[:, None, :] * offsets[None, :, None]           # (n, WIDTH, m)
        block[~_within(calc, perturbed, block)] = np.nan
        cols[:, stepped, column_of] = block.transpose(0, 2, 1)
    arrays = {name: cols[:, :, k].reshape((n, p) + (1,) * len(trail)) for k, name in enumerate(names)}
    ys = _call(calc, arrays, statics, (n, p) + trail)
    given = [o for o in calc.outputs if o.name in ys]
    if not given:
        return given, None, None
    # every output at once, on a trailing axis: a handful of array operations per call
    # instead of a dozen per output and uncertain input (the cost of a small request)
    nout = len(given)
    period, wraps = _periods(tuple(given))
    # outputs first, so that the stencil below runs along contiguous rows
    f0 = _last(np.array([ys[o.name][:, 0] for o in given]))           # (n,) + trail + (nout,)
    if not m:
        return given, f0, np.zeros_like(f0)
    sig = spread[rows]
    lead = (slice(None),) * 3 + (None,) * len(trail)
    if n < 64:                          # a few systems: fewest numpy calls
        y = np.array([ys[o.name] for o in given])                     # (nout, n, p) + trail
        d = y[:, :, 1:].reshape((nout, n, m, WIDTH) + trail) - y[:, :, :1, None]   # f(x+kh) - f(x)
    else:                               # many: no stacked copy of every output
        d = np.empty((nout, n, m, WIDTH) + trail)
        for k, o in enumerate(given):
            y = ys[o.name]
            np.subtract(y[:, 1:].reshape((n, m, WIDTH) + trail), y[:, :1, None], out=d[k])
    if wraps.any():
        per = period.reshape((nout,) + (1,) * (d.ndim - 1))
        d = np.where(wraps.reshape(per.shape), _wrap(d, per), d)
    h = h[(None,) + lead[1:]]                                          # (1, n, m) + trail
    below, above = d[:, :, :, 0], d[:, :, :, 1]                      # f(x-h) - f(x), f(x+h) - f(x)
    jac = (above - below) / (2.0 * h)                                # (nout, n, m) + trail
    central = np.isfinite(jac)
    if not central.all():
        # one-sided differences where a step left the domain (first order in h, which is
        # ~1e-5 of the input's scale there: far below what a linear sigma can resolve)
        jac = np.where(central, jac, np.where(np.isfinite(above), above / h, -below / h))
    exact = ~(sig > 0)
    if exact.any():
        # an exact input in a row does not count, even if its derivative is undefined there
        jac = np.where(exact[(None,) + lead[1:]], 0.0, jac)
    if np.count_nonzero(r) == m and (central.all() or np.isfinite(jac).all()):
        # uncorrelated inputs: the quadratic form is a sum of squares
        var = np.square(jac * sig[(None,) + lead[1:]]).sum(axis=2)
    else:
        cov = sig[:, :, None] * r[None, :, :] * sig[:, None, :]      # (n, m, m)
        var = np.einsum("onj...,njk,onk...->on...", jac, cov, jac)
    return given, f0, _last(np.sqrt(np.maximum(var, 0.0)))


LINEAR_CHUNK = 2048   # systems per pass of the linear method: its (systems x perturbations x outputs)
                      # arrays then stay in cache, however long the catalogue


def _linear(calc, quantities, statics, options, n, trail) -> Result:
    perturbed = [name for name, q in quantities.items() if q.uncertain]
    m = len(perturbed)
    r = correlation_matrix(perturbed, options.correlations)
    values = {name: _broadcast(q.value, (n,)) for name, q in quantities.items()}
    sm = _side_by_side([_broadcast(quantities[nm].sigma_minus, (n,)) for nm in perturbed]) if m else None
    sp = _side_by_side([_broadcast(quantities[nm].sigma_plus, (n,)) for nm in perturbed]) if m else None
    spread = 0.5 * (sm + sp) if m else np.zeros((n, 0))        # Measured.sigma, for all at once
    parts = [_propagate(calc, quantities, statics, perturbed, r, values, spread, slice(a, min(a + LINEAR_CHUNK, n)),
                        trail) for a in range(0, n, LINEAR_CHUNK)]
    given = parts[0][0]
    if len(parts) == 1:
        f0, sigma = parts[0][1], parts[0][2]
    elif given:
        f0 = np.concatenate([p[1] for p in parts])
        sigma = np.concatenate([p[2] for p in parts])

    outputs: dict[str, dict[str, np.ndarray]] = {}
    warnings: list[Warning] = []
    failed: dict[int, dict[str, list[str]]] = {}
    if given:
        nout = len(given)
        period, wraps = _periods(tuple(given))
        if wraps.any():
            f0 = np.where(wraps, f0 % period, f0)
        with np.errstate(all="ignore"):
            rel = np.abs(sigma / f0)
        per_row = (n, -1, nout)
        bad = (~np.isfinite(f0)).reshape(per_row).any(axis=1)              # (n, nout)
        loose = ((rel > LINEAR_TRUST_LIMIT) & np.isfinite(rel)).reshape(per_row).any(axis=1)
        undefined = (~np.isfinite(sigma) & np.isfinite(f0)).reshape(per_row).any(axis=1)
        bad_any, loose_any, undefined_any = bad.any(axis=0), loose.any(axis=0), undefined.any(axis=0)
        for k, o in enumerate(given):
            outputs[o.name] = {"value": f0[..., k], "sigma": sigma[..., k]}
            if bad_any[k]:
                for row in np.flatnonzero(bad[:, k]):
                    failed.setdefault(int(row), {}).setdefault("_inputs", []).append(
                        f"these inputs give no finite value of {o.name}")
            if o.period is None and loose_any[k]:
                warnings.append(Warning("linear_untrustworthy",
                                        "{subject}: relative sigma above " f"{LINEAR_TRUST_LIMIT:.0%}; first-order "
                                        "propagation may be poor; consider the Monte Carlo method", loose[:, k],
                                        o.name))
            if undefined_any[k]:
                warnings.append(Warning("sigma_undefined", "the uncertainty of {subject} could not be propagated "
                                        "linearly at these inputs; use the Monte Carlo method", undefined[:, k],
                                        o.name))

    if m:
        doms = [calc.input(name).domain for name in perturbed]
        x = _side_by_side([values[nm] for nm in perturbed])
        ends = _within(calc, perturbed, np.array([x - sm, x + sp]))         # (2, n, m)
        crosses = ~(ends[0] & ends[1])                                      # (n, m)
        crosses_any = crosses.any(axis=0)
        asymmetric = (sm != sp).any(axis=0)
        for j, name in enumerate(perturbed):
            if crosses_any[j]:
                warnings.append(Warning("interval_crosses_domain",
                                        f"the 1-sigma interval of {name} crosses its physical domain "
                                        f"({doms[j].describe()}); consider the Monte Carlo method, which truncates "
                                        "draws to the domain", crosses[:, j]))
            if asymmetric[j] and quantities[name].samples is None:
                warnings.append(Warning("asymmetric_linearised",
                                        "{subject}: asymmetric errors; linear propagation used the mean of "
                                        "sigma_minus and sigma_plus; the Monte Carlo method draws a split normal",
                                        None, name))
    return Result(outputs=outputs, method="linear", warnings=warnings, failed=failed)


def _draw(calc, quantities, options, n, s) -> tuple[dict[str, np.ndarray], int]:
    """Draws of every quantity, shape (n, s); returns them and the seed used."""
    seed = options.seed if options.seed is not None else secrets.randbelow(2**31)
    rng = np.random.default_rng(seed)
    drawn = [name for name, q in quantities.items()
             if q.samples is None and not q.isotropic and q.uncertain]
    r = correlation_matrix(drawn, options.correlations)
    z = rng.standard_normal((n, s, len(drawn)))
    if len(drawn) > 1 and not np.allclose(r, np.eye(len(drawn))):
        z = z @ np.linalg.cholesky(r).T
    out = {}
    for name, q in quantities.items():
        x = _broadcast(q.value, (n,))[:, None]
        if q.samples is not None:
            out[name] = _broadcast(q.samples, (n, s))
        elif q.isotropic:
            cos_i = rng.uniform(0.0, 1.0, size=(n, s))
            out[name] = np.degrees(np.arccos(cos_i))
        elif name in drawn:
            zj = z[:, :, drawn.index(name)]
            sm = _broadcast(q.sigma_minus, (n,))[:, None]
            sp = _broadcast(q.sigma_plus, (n,))[:, None]
            if np.all(sm == sp):
                out[name] = x + sm * zj
            else:
                # split normal by its inverse CDF; z keeps any correlation (Gaussian copula)
                u = ndtr(zj)
                tot = sm + sp
                pl = np.where(tot > 0, sm / np.where(tot > 0, tot, 1.0), 0.5)
                with np.errstate(all="ignore"):
                    low = x + sm * ndtri(np.clip(u * tot / (2 * sm), 0, 1))
                    high = x + sp * ndtri(np.clip(0.5 + (u - pl) * tot / (2 * sp), 0, 1))
                out[name] = np.where(u < pl, low, high)
                out[name] = np.where(tot > 0, out[name], x)
        else:
            out[name] = _broadcast(x, (n, s))
    return out, seed


def quantiles(y: np.ndarray, valid: np.ndarray, qs) -> list[np.ndarray]:
    """Linear-interpolation quantiles along axis 1 over the valid draws only."""
    ys = np.sort(np.where(valid.reshape(valid.shape + (1,) * (y.ndim - 2)), y, np.nan), axis=1)
    count = valid.sum(axis=1).reshape((-1, 1) + (1,) * (y.ndim - 2))
    res = []
    for q in qs:
        pos = q * np.maximum(count - 1, 0)
        lo = np.floor(pos).astype(np.intp)
        hi = np.minimum(lo + 1, np.maximum(count - 1, 0)).astype(np.intp)
        frac = pos - lo
        a = np.take_along_axis(ys, lo, axis=1)
        b = np.take_along_axis(ys, hi, axis=1)
        v = (a + (b - a) * frac)[:, 0]
        res.append(np.where(count[:, 0] > 0, v, np.nan))
    return res


def _monte_carlo(calc, quantities, statics, options, n, trail) -> Result:
    sample_lengths = {q.samples.shape[1] for q in quantities.values() if q.samples is not None}
    if len(sample_lengths) > 1:
        raise EngineError({name: ["all sample inputs of one request must have the same length"]
                           for name, q in quantities.items() if q.samples is not None})
    s = sample_lengths.pop() if sample_lengths else int(options.samples)
    for name, q in quantities.items():
        if q.samples is not None and any(name in pair for pair in options.correlations):
            raise EngineError({"correlations": [f"{name} is given as samples, which carry their own "
                                                "correlations; do not also correlate it"]})
    draws, seed = _draw(calc, quantities, options, n, s)
    valid = np.ones((n, s), dtype=bool)
    arrays = {}
    for name, q in quantities.items():
        d = draws[name]
        inside = calc.input(name).domain.contains(d)
        valid &= inside
        d = np.where(inside, d, np.nan)
        col0 = _broadcast(q.value, (n,))[:, None]
        arrays[name] = np.concatenate([col0, d], axis=1).reshape((n, s + 1) + (1,) * len(trail))
    ys = _call(calc, arrays, statics, (n, s + 1) + trail)
    for y in ys.values():
        valid &= np.isfinite(y[:, 1:]).reshape(n, s, -1).all(axis=2)
    nvalid = valid.sum(axis=1)
    rejected = 1.0 - nvalid / s

    outputs: dict[str, dict[str, np.ndarray]] = {}
    failed: dict[int, dict[str, list[str]]] = {}
    for k in np.flatnonzero(nvalid == 0):
        failed[int(k)] = {"_inputs": ["every Monte Carlo draw fell outside the inputs' physical domains or "
                                      "gave a non-finite result"]}
    kept = {}
    for o in calc.outputs:
        if o.name not in ys:
            continue
        y = ys[o.name]
        nominal = y[:, :1]
        d = y[:, 1:]
        if o.period is not None:
            ref = np.where(np.isfinite(nominal), nominal, 0.0)
            d = ref + _wrap(d - ref, o.period)
        mask = valid.reshape(valid.shape + (1,) * len(trail))
        med, low, high = quantiles(d, valid, (0.5, ONE_SIGMA_LOW, ONE_SIGMA_HIGH))
        with np.errstate(all="ignore"):
            cnt = np.maximum(nvalid.reshape((-1,) + (1,) * len(trail)), 1)
            mean = np.where(mask, d, 0.0).sum(axis=1) / cnt
            var = np.where(mask, (d - mean[:, None]) ** 2, 0.0).sum(axis=1) / np.maximum(cnt - 1, 1)
        if o.period is not None:
            shift = np.floor(med / o.period) * o.period
            med, low, high = med - shift, low - shift, high - shift
        outputs[o.name] = {"value": med, "sigma": np.sqrt(var), "low": low, "high": high}
        if options.keep_draws:
            kept[o.name] = np.where(mask, d, np.nan)
    warnings = []
    heavy = rejected > 0.05
    if np.any(heavy):
        warnings.append(Warning("draws_rejected", "more than 5 % of the Monte Carlo draws fell outside the inputs' "
                                "physical domains or gave no finite result; the summary describes the "
                                "truncated distribution", heavy))
    return Result(outputs=outputs, method="monte_carlo", samples=s, seed=seed, rejected_fraction=rejected,
                  warnings=warnings, failed=failed, draws=kept if options.keep_draws else None)
