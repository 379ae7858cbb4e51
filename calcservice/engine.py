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

Either way the physics function is called once per batch of systems: on arrays of shape
(P, N) for the linear method, P = 1 + 2 m stencil points for m uncertain inputs (row 0 the
nominal point; points first, so that each is a contiguous row of systems), or (N, 1 + S) for
Monte Carlo, S draws (column 0 the nominal point); physics is elementwise, so either serves.
Nothing loops over systems in Python.  For a single system the linear method's steps, stencil
and checks run on Python floats (:func:`_linear_one`), where numpy's per-call cost would
outweigh the arithmetic many times; tests hold it to the vector method (:func:`_linear`) over
every calculation.
"""

from __future__ import annotations

import math
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
_FLOAT = np.dtype(float)


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
    # one system: the outputs' names with their values and sigmas as Python floats (what the
    # arrays of ``outputs`` hold), for the renderer; None otherwise
    floats: tuple | None = None


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


def _call(calc: Calculation, arrays: Mapping[str, Any], statics: Mapping[str, Any], shape: tuple) -> dict[str, np.ndarray]:
    kwargs: dict[str, Any] = {i.name: None for i in calc.inputs}
    kwargs.update(statics)
    kwargs.update(arrays)
    raw = calc.function(**kwargs)          # under evaluate's np.errstate(all="ignore")
    out = {}
    for o in calc.outputs:
        y = raw.get(o.name)
        if y is None:
            continue
        if type(y) is not np.ndarray or y.dtype != _FLOAT or y.shape != shape:     # else as it is
            y = np.broadcast_to(np.asarray(y, dtype=float), shape)
        out[o.name] = y
    return out


def _series_shape(calc: Calculation, statics: Mapping[str, Any]) -> tuple:
    trail = ()
    for i in calc.inputs:
        if i.kind == "series" and statics.get(i.name) is not None:
            trail = trail + (len(statics[i.name]),)
    return trail


def _nominal_failures(calc, args: Mapping[str, Any], n: int) -> dict[int, dict[str, list[str]]]:
    """Rows whose nominal inputs (``args``, choices included) violate a declared constraint."""
    failed: dict[int, dict[str, list[str]]] = {}
    for c in calc.constraints:
        ok = _broadcast(np.asarray(c.test(**args), dtype=bool), (n,))
        for k in np.flatnonzero(~ok).tolist():
            for f in c.fields:
                failed.setdefault(k, {}).setdefault(f, []).append(c.message)
    return failed


def evaluate(calc: Calculation, quantities: Mapping[str, Measured], statics: Mapping[str, Any] | None = None,
             options: Options | None = None) -> Result:
    """Propagate the uncertainty of ``quantities`` through ``calc``.

    Floating-point warnings are off throughout: a physics function may meet inputs where it
    has no value (a NaN there is the answer, which the engine flags), and a perturbed or drawn
    input may leave the region where the formula is defined."""
    with np.errstate(all="ignore"):
        return _evaluate(calc, quantities, dict(statics or {}), options or Options())


def _evaluate(calc, quantities, statics, options) -> Result:
    n = max((len(q.value) for q in quantities.values()), default=1)
    trail = _series_shape(calc, statics)
    nominal = {k: _broadcast(q.value, (n,)) for k, q in quantities.items()}

    method = options.method
    switched = None
    if method == "linear" and any(q.isotropic or q.samples is not None for q in quantities.values()):
        method = "monte_carlo"
        switched = ("method_switched", "inputs given as samples or as 'isotropic' need Monte Carlo; "
                    "the Monte Carlo method was used")
    if method == "linear" and n == 1 and not trail:
        result = _linear_one(calc, quantities, statics, options)
    elif method == "linear":
        result = _linear(calc, quantities, statics, options, n, trail)
    else:
        result = _monte_carlo(calc, quantities, statics, options, n, trail)
    if switched:
        result.warnings.insert(0, Warning(*switched))

    result.nominal_inputs = nominal
    if calc.constraints or calc.check is not None:
        args = {i.name: statics.get(i.name, nominal.get(i.name)) for i in calc.inputs}
        if calc.constraints:
            for k, errs in _nominal_failures(calc, args, n).items():
                result.failed.setdefault(k, {}).update(errs)
        if calc.check is not None:
            nominal_out = {name: o["value"] for name, o in result.outputs.items()}
            result.warnings.extend(calc.check(inputs=args, outputs=nominal_out))
    return result


@lru_cache(maxsize=4096)
def _bounds(calc: Calculation, names: tuple[str, ...]) -> tuple[np.ndarray, np.ndarray]:
    """Closed bounds equivalent to the inputs' domains: x > a is x >= nextafter(a, inf) in floats."""
    doms = [calc.input(name).domain for name in names]
    low = np.array([np.nextafter(d.low, np.inf) if d.low_open else d.low for d in doms])
    high = np.array([np.nextafter(d.high, -np.inf) if d.high_open else d.high for d in doms])
    return low, high


OFFSETS = np.array([-1.0, 1.0])     # the central three-point stencil, in steps h
OFFSETS_LIST = OFFSETS.tolist()
WIDTH = len(OFFSETS)
_TRUE = np.ones(1, dtype=bool)      # "this system", as the mask of a one-system warning
_TRUE.flags.writeable = False


@dataclass(frozen=True)
class _Stencil:
    """Where the perturbed inputs of one calculation sit, built once per set of inputs: their rows
    among the inputs, which are times, their closed domains, and the stencil columns they fill
    (column 1 + k m + j holds perturbed input j stepped by OFFSETS[k]: each offset's columns side
    by side, so that f(x + h) - f(x - h) is one subtraction of contiguous blocks)."""

    rows: np.ndarray            # (m,) index of each perturbed input among the inputs
    time: np.ndarray            # (m, 1) which are dates
    any_time: bool
    low: np.ndarray             # (m, 1) closed domain bounds
    high: np.ndarray
    fill_rows: np.ndarray       # (WIDTH m,) input row of each stepped column
    fill_cols: np.ndarray       # (WIDTH m,) its column
    time_list: list             # the same as plain Python values, for one system (_linear_one)
    low_list: list
    high_list: list


@lru_cache(maxsize=4096)
def _stencil(calc: Calculation, names: tuple[str, ...], perturbed: tuple[str, ...]) -> _Stencil:
    rows = np.array([names.index(name) for name in perturbed], dtype=np.intp)
    time = np.array([calc.input(name).time for name in perturbed], dtype=bool)[:, None]
    low, high = _bounds(calc, perturbed)
    s = _Stencil(rows, time, bool(time.any()), low[:, None], high[:, None], np.tile(rows, WIDTH),
                 1 + np.arange(WIDTH * len(perturbed)), time[:, 0].tolist(), low.tolist(), high.tolist())
    for a in (s.rows, s.time, s.low, s.high, s.fill_rows, s.fill_cols):
        a.flags.writeable = False
    return s


@lru_cache(maxsize=4096)
def _output_periods(calc: Calculation, names: tuple[str, ...], ndim: int) -> tuple[np.ndarray, np.ndarray, bool]:
    """The wrap period of each output (1 where it does not wrap), which wrap, and whether any does;
    shaped (outputs,) + (1,) * (ndim - 1) to broadcast against (outputs, systems, ...) arrays."""
    period = np.array([np.nan if calc.output(name).period is None else calc.output(name).period for name in names])
    wraps = np.isfinite(period)
    shape = (len(names),) + (1,) * (ndim - 1)
    period, wraps = np.where(wraps, period, 1.0).reshape(shape), wraps.reshape(shape)
    period.flags.writeable = wraps.flags.writeable = False
    return period, wraps, bool(wraps.any())


def _steps(x: np.ndarray, spread: np.ndarray, st: _Stencil) -> np.ndarray:
    """The difference step of each perturbed input (m, n).

    A date's size (a JD ~ 2.5e6 d) says nothing about the scale on which a function of it
    varies: a time input is stepped by its sigma (at least 1 d).  Other inputs are stepped by
    their sigma held within [1e-3 |x|, |x|]: a step tied to |x| alone is far too coarse where a
    function amplifies it (a period's step grows by the number of elapsed cycles), one tied to a
    tiny sigma alone would drown in rounding.  The step is then one that x + h represents
    exactly, so rounding does not bias the difference quotient (Press et al., Numerical Recipes,
    sec. 5.7); it matters for dates, where ulp(JD) ~ 5e-10 d."""
    ax = np.abs(x)
    scale = np.where(ax > 0, np.minimum(np.maximum(spread, 1e-3 * ax), ax), spread)
    h = RELATIVE_STEP * np.where(scale > 0, scale, 1.0)
    if st.any_time:
        h = np.where(st.time, TIME_STEP * np.maximum(spread, 1.0), h)
    exact = (x + h) - x
    return np.where((exact > 0) & (exact < np.inf), exact, h)


def _propagate(calc, names, x, spread, st: _Stencil, r, statics, trail):
    """Nominal outputs and their linear sigmas for a block of systems: ``x`` (inputs, n) holds the
    inputs' values, ``spread`` (m, n) the symmetric sigmas of the perturbed ones.  Returns the
    outputs given and f0, sigma of shape (outputs, n) + trail.

    The physics sees arrays of shape (points, n) + trail: the stencil's points first, so that
    each point is a contiguous row of systems and f(x + h) - f(x - h) one subtraction of blocks."""
    n = x.shape[1]
    m = len(st.rows)
    p = 1 + WIDTH * m
    cols = np.repeat(x[:, None, :], p, axis=1)                                      # (Q, p, n)
    if m:
        xj = x[st.rows]                                                              # (m, n)
        h = _steps(xj, spread, st)
        block = xj[None, :, :] + h[None, :, :] * OFFSETS[:, None, None]              # (WIDTH, m, n)
        inside = np.isfinite(block) & (block >= st.low) & (block <= st.high)
        if not inside.all():
            block[~inside] = np.nan
        cols[st.fill_rows, st.fill_cols, :] = block.reshape(WIDTH * m, n)
    ones = (1,) * len(trail)
    ys = _call(calc, {name: cols[k].reshape((p, n) + ones) if trail else cols[k] for k, name in enumerate(names)},
               statics, (p, n) + trail)
    given = tuple(ys)
    if not given:
        return given, None, None
    nout = len(given)
    f0 = np.empty((nout, n) + trail)
    diff = np.empty((nout, m, n) + trail)
    for k, y in enumerate(ys.values()):
        f0[k] = y[0]
        np.subtract(y[1 + m:], y[1:1 + m], out=diff[k])                              # f(x + h) - f(x - h)
    if not m:
        return given, f0, np.zeros_like(f0)

    def sides():
        return np.array([y[1:1 + m] for y in ys.values()]), np.array([y[1 + m:] for y in ys.values()])

    return given, f0, _sigmas(calc, given, f0, diff, sides, h, spread, r)


def _sigmas(calc, given, f0, diff, sides, h, spread, r, all_uncertain: bool = False) -> np.ndarray:
    """Linear sigmas (outputs, n) + trail from the stencil's differences ``diff`` = f(x + h) -
    f(x - h), (outputs, m, n) + trail, with the steps ``h`` and symmetric sigmas ``spread`` (m, n)
    of the m perturbed inputs and their correlation ``r`` (None: uncorrelated).  ``sides()`` gives
    f(x - h) and f(x + h) apart, for one-sided differences where a central one is not finite.
    ``all_uncertain``: the caller knows every spread is > 0 (no exact input to zero out)."""
    nout, m, n = diff.shape[:3]
    ones = (1,) * (diff.ndim - 3)
    period, wraps, any_wrap = _output_periods(calc, given, diff.ndim)
    if any_wrap:
        diff = np.where(wraps, _wrap(diff, period), diff)
    h = h.reshape((1, m, n) + ones)
    jac = diff / (2.0 * h)                                                           # (outputs, m, n) + trail
    if not np.isfinite(jac).all():
        # one-sided differences where a step left the domain (first order in h, which is
        # ~1e-5 of the input's scale there: far below what a linear sigma can resolve)
        below, above = sides()
        ref = f0[:, None]
        up, down = above - ref, below - ref                                          # f(x +- h) - f(x)
        if any_wrap:
            up, down = np.where(wraps, _wrap(up, period), up), np.where(wraps, _wrap(down, period), down)
        jac = np.where(np.isfinite(jac), jac, np.where(np.isfinite(up), up / h, -down / h))
    sig = spread.reshape((1, m, n) + ones)
    exact = None if all_uncertain else ~(sig > 0)
    if exact is not None and exact.any():
        # an exact input in a row does not count, even if its derivative is undefined there
        jac = np.where(exact, 0.0, jac)
    if r is None or np.count_nonzero(r) == m:
        # uncorrelated inputs: the quadratic form is a sum of squares, added input by input
        terms = jac * sig
        terms *= terms
        var = terms[:, 0].copy()
        for j in range(1, m):
            var += terms[:, j]
        return np.sqrt(var)
    cov = spread.T[:, :, None] * r[None, :, :] * spread.T[:, None, :]               # (n, m, m)
    var = np.einsum("ojn...,njk,okn...->on...", jac, cov, jac)
    return np.sqrt(np.maximum(var, 0.0))


# the linear method's warnings, one place for both its paths
def _untrustworthy(name: str, where) -> Warning:
    return Warning("linear_untrustworthy", "{subject}: relative sigma above " f"{LINEAR_TRUST_LIMIT:.0%}; first-order "
                   "propagation may be poor; consider the Monte Carlo method", where, name)


def _undefined(name: str, where) -> Warning:
    return Warning("sigma_undefined", "the uncertainty of {subject} could not be propagated linearly at these "
                   "inputs; use the Monte Carlo method", where, name)


def _crosses(calc: Calculation, name: str, where) -> Warning:
    return Warning("interval_crosses_domain", f"the 1-sigma interval of {name} crosses its physical domain "
                   f"({calc.input(name).domain.describe()}); consider the Monte Carlo method, which truncates "
                   "draws to the domain", where)


def _asymmetric(name: str) -> Warning:
    return Warning("asymmetric_linearised", "{subject}: asymmetric errors; linear propagation used the mean of "
                   "sigma_minus and sigma_plus; the Monte Carlo method draws a split normal", None, name)


def _step(x: float, s: float, time: bool) -> float:
    """:func:`_steps` for one input of one system, on floats (the same operations, so the same bits)."""
    ax = abs(x)
    scale = min(max(s, 1e-3 * ax), ax) if ax > 0 else s
    h = RELATIVE_STEP * (scale if scale > 0 else 1.0)
    if time:
        h = TIME_STEP * max(s, 1.0)
    exact = (x + h) - x
    return exact if 0 < exact < math.inf else h


def _linear_one(calc, quantities, statics, options) -> Result:
    """The linear method for one system without a series axis.

    The same method as :func:`_propagate` and :func:`_linear`, which it must match to rounding
    (tests hold the two together over every calculation): the steps, the stencil and the checks
    on Python floats, where for a few dozen numbers each numpy call would cost more than all of
    its arithmetic; the differences and the quadratic form through the same :func:`_sigmas`."""
    names = tuple(quantities)
    qs = list(quantities.values())
    x = [float(q.value[0]) for q in qs]
    sm_all = [float(q.sigma_minus[0]) for q in qs]
    sp_all = [float(q.sigma_plus[0]) for q in qs]
    rows = [k for k in range(len(qs)) if sm_all[k] > 0 or sp_all[k] > 0]
    perturbed = tuple(names[k] for k in rows)
    m = len(rows)
    st = _stencil(calc, names, perturbed)
    r = correlation_matrix(list(perturbed), options.correlations) if options.correlations else None
    sm = [sm_all[k] for k in rows]
    sp = [sp_all[k] for k in rows]
    spread = [0.5 * (a + b) for a, b in zip(sm, sp)]
    p = 1 + WIDTH * m
    grid = [[v] * p for v in x]                                     # (inputs, points): the stencil
    h = []
    for j, k in enumerate(rows):
        hj = _step(x[k], spread[j], st.time_list[j])
        h.append(hj)
        for c, off in enumerate(OFFSETS_LIST):
            v = x[k] + hj * off
            grid[k][1 + c * m + j] = v if st.low_list[j] <= v <= st.high_list[j] and v - v == 0 else math.nan
    cols = np.array(grid)[:, :, None]                                                # (inputs, points, 1)
    ys = _call(calc, {name: cols[i] for i, name in enumerate(names)}, statics, (p, 1))
    given = tuple(ys)
    outputs: dict[str, dict[str, np.ndarray]] = {}
    warnings: list[Warning] = []
    failed: dict[int, dict[str, list[str]]] = {}
    floats = None
    if given:
        nout = len(given)
        y = np.concatenate(list(ys.values())).reshape(nout, p)                     # (outputs, points)
        values = y[:, :1]                                                            # (outputs, 1 system)
        if m:
            diff = (y[:, 1 + m:] - y[:, 1:1 + m])[:, :, None]                       # f(x + h) - f(x - h)
            sigmas = _sigmas(calc, given, values, diff, lambda: (y[:, 1:1 + m, None], y[:, 1 + m:, None]),
                             np.array(h)[:, None], np.array(spread)[:, None], r, min(spread) > 0)
        else:
            sigmas = np.zeros_like(values)
        period, wraps, any_wrap = _output_periods(calc, given, 2)
        if any_wrap:
            values = np.where(wraps, values % period, values)
        for name, value, sigma in zip(given, values, sigmas):
            outputs[name] = {"value": value, "sigma": sigma}
        floats = (given, values[:, 0].tolist(), sigmas[:, 0].tolist())
        # the checks on plain floats: a dozen numbers
        for name, f0, sigma, wrap in zip(given, floats[1], floats[2], wraps[:, 0].tolist()):
            finite = f0 - f0 == 0
            if not finite:
                failed.setdefault(0, {}).setdefault("_inputs", []).append(f"these inputs give no finite value of {name}")
            # |sigma / f0| > limit, where numpy's quotient is finite (f0 = 0 gives inf or nan there)
            if not wrap and f0 != 0 and LINEAR_TRUST_LIMIT < abs(sigma / f0) < math.inf:
                warnings.append(_untrustworthy(name, _TRUE))
            if finite and not sigma - sigma == 0:
                warnings.append(_undefined(name, _TRUE))
    for j, k in enumerate(rows):
        lo, hi = x[k] - sm[j], x[k] + sp[j]
        name = perturbed[j]
        if not (lo - lo == 0 and hi - hi == 0 and st.low_list[j] <= lo <= st.high_list[j]
                and st.low_list[j] <= hi <= st.high_list[j]):
            warnings.append(_crosses(calc, name, _TRUE))
        if sm[j] != sp[j] and quantities[name].samples is None:
            warnings.append(_asymmetric(name))
    return Result(outputs=outputs, method="linear", warnings=warnings, failed=failed, floats=floats)


LINEAR_CHUNK = 2048   # systems per pass of the linear method: its (systems x perturbations x outputs)
                      # arrays then stay in cache, however long the catalogue


def _linear(calc, quantities, statics, options, n, trail) -> Result:
    names = tuple(quantities)
    qs = quantities.values()
    x = np.array([_broadcast(q.value, (n,)) for q in qs], dtype=float)              # (Q, n)
    sides = np.array([[_broadcast(q.sigma_minus, (n,)) for q in qs],
                      [_broadcast(q.sigma_plus, (n,)) for q in qs]], dtype=float)   # (2, Q, n)
    uncertain = np.flatnonzero((sides > 0).any(axis=(0, 2)))
    perturbed = tuple(names[k] for k in uncertain.tolist())
    m = len(perturbed)
    st = _stencil(calc, names, perturbed)
    r = correlation_matrix(list(perturbed), options.correlations) if options.correlations else None
    sm, sp = sides[0, st.rows], sides[1, st.rows]                                   # (m, n)
    spread = 0.5 * (sm + sp)                                                         # Measured.sigma, for all at once
    parts = [_propagate(calc, names, x[:, a:a + LINEAR_CHUNK], spread[:, a:a + LINEAR_CHUNK], st, r, statics, trail)
             for a in range(0, n, LINEAR_CHUNK)]
    given = parts[0][0]
    if len(parts) == 1:
        f0, sigma = parts[0][1], parts[0][2]
    elif given:
        f0 = np.concatenate([p[1] for p in parts], axis=1)
        sigma = np.concatenate([p[2] for p in parts], axis=1)

    outputs: dict[str, dict[str, np.ndarray]] = {}
    warnings: list[Warning] = []
    failed: dict[int, dict[str, list[str]]] = {}
    if given:
        period, wraps, any_wrap = _output_periods(calc, given, f0.ndim)
        if any_wrap:
            f0 = np.where(wraps, f0 % period, f0)
        rel = np.abs(sigma / f0)
        loose = (rel > LINEAR_TRUST_LIMIT) & np.isfinite(rel)                        # (outputs, n) + trail
        finite = np.isfinite(f0)
        defined = np.isfinite(sigma) | ~finite
        flagged = loose.any() or not finite.all() or not defined.all()
        if flagged:
            per_row = (len(given), n, -1)
            bad = ~finite.reshape(per_row).all(axis=2)                               # (outputs, n)
            loose = loose.reshape(per_row).any(axis=2)
            undefined = ~defined.reshape(per_row).all(axis=2)
        for k, name in enumerate(given):
            outputs[name] = {"value": f0[k], "sigma": sigma[k]}
            if not flagged:
                continue
            if bad[k].any():
                for row in np.flatnonzero(bad[k]).tolist():
                    failed.setdefault(row, {}).setdefault("_inputs", []).append(
                        f"these inputs give no finite value of {name}")
            if not wraps.flat[k] and loose[k].any():
                warnings.append(_untrustworthy(name, loose[k]))
            if undefined[k].any():
                warnings.append(_undefined(name, undefined[k]))

    if m:
        xj = x[st.rows]
        ends = np.array([xj - sm, xj + sp])                                          # (2, m, n)
        crosses = ~(np.isfinite(ends) & (ends >= st.low) & (ends <= st.high)).all(axis=0)
        asymmetric = sm != sp
        if crosses.any() or asymmetric.any():
            for j, name in enumerate(perturbed):
                if crosses[j].any():
                    warnings.append(_crosses(calc, name, crosses[j]))
                if asymmetric[j].any() and quantities[name].samples is None:
                    warnings.append(_asymmetric(name))
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
