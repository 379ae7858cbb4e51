"""The uncertainty engine: measured inputs in, measured outputs out.

It knows nothing about binaries.  Given a :class:`~calcservice.registry.Calculation`
and its inputs as :class:`Measured` arrays over N systems, it propagates uncertainty

* linearly, through the calculation's declared Jacobian (``Calculation.jacobian``) or else a
  Jacobian taken by central differences with a step of ~1e-5 of each input's scale, shortened
  where the function bends within it (one-sided, of second order, where a step would leave an
  input's domain), and the input covariance built from sigmas and correlations, or
* by Monte Carlo: normal draws (split-normal for asymmetric errors, a Gaussian copula
  when correlated), the user's own samples paired index by index, isotropic
  orientations (cos i uniform), every system of a call from the same standard variates (so a
  system's seeded answer is the same alone or anywhere in a batch); draws outside an input's
  domain or giving a non-finite output are rejected and counted; summaries are the median, the standard
  deviation (NaN where a few draws carry most of the spread: :func:`heavy_tailed`, tested from
  ``MIN_DRAWS`` draws on) and the central 68.27 % interval.

Either way the physics function is called once per batch of systems: on arrays of shape
(P, N) for the linear method, P = 1 + 2 m stencil points for m uncertain inputs (row 0 the
nominal point; points first, so that each is a contiguous row of systems; P = 1 with a declared
Jacobian, which is called once beside it), or (N, 1 + S) for
Monte Carlo, S draws (column 0 the nominal point); physics is elementwise, so either serves.
Nothing loops over systems in Python; one system is the case N = 1.  The linear method's
stencil, bounds and wrap periods are compiled once per (calculation, inputs) into a
:class:`Plan`.

Asked for (:class:`Options`), the engine also gives the outputs' correlation matrix
(``Result.correlation``) and each output's uncertainty budget (``Result.budget``); see
:func:`_linear_budget` and :func:`_monte_carlo_budget` for what a share means in each method.
"""

from __future__ import annotations

import secrets
from dataclasses import dataclass, field
from functools import cached_property, lru_cache
from typing import Any, Mapping

import numpy as np
from scipy.special import ndtr, ndtri

from .registry import ANY, Calculation, Warning

ONE_SIGMA_LOW = float(ndtr(-1.0))    # 0.158655...
ONE_SIGMA_HIGH = float(ndtr(1.0))    # 0.841344...
_TINY = np.finfo(float).tiny           # the smallest normal float
RELATIVE_STEP = 1e-5                 # central step ~ eps^(1/3) of the input's scale
TIME_STEP = 1e-4                     # days per day of a time input's sigma (at least 1 d)
LINEAR_TRUST_LIMIT = 0.2             # relative sigma (an angle: second-order over first-order term)
                                     # above which linear propagation is suspect
_FLOAT = np.dtype(float)
DEGREES_PER_RADIAN = 180.0 / np.pi     # the scale on which an angle's sines and cosines vary
FINEST = 1024                          # the shortest step, in roundings (ulps) of the input


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
    samples_asked: bool = False     # samples was given (not the default): a caller told it is unused hears why
    seed: int | None = None
    correlations: Mapping[tuple[str, str], float] = field(default_factory=dict)
    keep_draws: bool = False
    covariance: bool = False        # give Result.correlation
    budget: bool = False            # give Result.budget


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
    # with Options.covariance: the correlation matrices of the scalar outputs that have a sigma
    # somewhere, (their names, array (N, m, m)), NaN where an output's sigma is zero or undefined in
    # a system; linear from J C J^T (an angle's derivatives taken on the circle), Monte Carlo from
    # the draws (an angle unwrapped about its nominal value); None for series outputs
    correlation: tuple[list[str], np.ndarray] | None = None
    # with Options.budget: output -> input name (or "a,b" for a correlated pair) -> share of the
    # output's variance (N,), scalar outputs only; see _linear_budget and _monte_carlo_budget
    budget: dict[str, dict[str, np.ndarray]] | None = None


def _broadcast(a, shape) -> np.ndarray:
    """``np.broadcast_to`` without its cost (tens of microseconds) when ``a`` has the shape already."""
    if type(a) is np.ndarray and a.shape == shape:
        return a
    return np.broadcast_to(a, shape)


def correlation_matrix(names: list[str], correlations: Mapping[tuple[str, str], float]) -> np.ndarray:
    """The correlation matrix over ``names``; 422 unless it is positive semi-definite (a correlation of
    exactly +-1, one input a linear function of another, is a matrix some inputs do have)."""
    m = len(names)
    r = np.eye(m)
    index = {n: k for k, n in enumerate(names)}
    correlated = False
    for (a, b), rho in correlations.items():
        if a in index and b in index:
            r[index[a], index[b]] = r[index[b], index[a]] = rho
            correlated = True
    if correlated:                      # the identity needs no test
        # an eigenvalue below 0 by more than the rounding of the matrix's entries: no inputs have it
        if np.linalg.eigvalsh(r)[0] < -64 * np.finfo(float).eps * m:
            raise EngineError({"correlations": ["the correlation matrix is not positive definite, nor semi-definite: "
                                                "no inputs can have these correlations"]})
    return r


def correlation_factor(r: np.ndarray) -> np.ndarray:
    """A matrix L with L L^T = r: Cholesky's where r is positive definite, else (a correlation of
    +-1) V diag(lambda)^(1/2) from r's eigenvectors and eigenvalues (those a rounding below 0 as 0)."""
    try:
        return np.linalg.cholesky(r)
    except np.linalg.LinAlgError:
        w, v = np.linalg.eigh(r)
        return v * np.sqrt(np.clip(w, 0.0, None))


def _wrap(d: np.ndarray, period) -> np.ndarray:
    """``d`` reduced to [-period/2, period/2) (``period`` a number, an array, or None for no wrap)."""
    if period is None:
        return d
    return (d + 0.5 * period) % period - 0.5 * period


def _folds(y: np.ndarray, ref: np.ndarray, period: float) -> np.ndarray:
    """How many periods the physics moved each of ``y`` by to bring it into its range, judged
    against ``ref`` (the nominal value): (y - ref) / period to the nearest whole number (0 where
    either is not finite)."""
    k = np.rint((y - ref) / period)
    return np.where(np.isfinite(k), k, 0.0)


def _arguments(calc: Calculation, arrays: Mapping[str, Any], statics: Mapping[str, Any]) -> dict[str, Any]:
    """The keyword arguments of the physics function (and of a declared Jacobian): every input,
    None where not given."""
    kwargs: dict[str, Any] = {i.name: None for i in calc.inputs}
    kwargs.update(statics)
    kwargs.update(arrays)
    return kwargs


def _call(calc: Calculation, arguments: Mapping[str, Any], shape: tuple) -> dict[str, np.ndarray]:
    """The physics function on ``arguments`` (see :func:`_arguments`): its outputs, in the declared
    order, as float arrays of ``shape``."""
    raw = calc.function(**arguments)     # under evaluate's np.errstate(all="ignore")
    out = {}
    for o in calc.outputs:
        y = raw.get(o.name)
        if y is None:
            continue
        if type(y) is not np.ndarray or y.dtype is not _FLOAT or y.shape != shape:     # else as it is
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
    if options.method not in ("linear", "monte_carlo"):
        # another word would draw Monte Carlo without a word (the request schema admits these two only)
        raise EngineError({"uncertainty.method": [f"must be 'linear' or 'monte_carlo', not {options.method!r}"]})
    quantities, unsure = _sigmas_checked(quantities, n)
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
        drawn = all(q.samples is None for q in quantities.values())
        if drawn and not (isinstance(options.samples, (int, np.integer)) and options.samples >= 2):
            # no spread from fewer (the request schema asks for MIN_DRAWS); numpy's own error named nothing
            raise EngineError({"uncertainty.samples": [f"must be a whole number >= 2, not {options.samples!r}"]})
        result = _monte_carlo(calc, quantities, statics, options, n, trail)
    if switched:
        result.warnings.insert(0, Warning(*switched))
    result.warnings.extend(_idle_correlations(quantities, options, n))
    result.warnings.extend(_nothing_to_correlate(quantities, options, n))

    result.nominal_inputs = nominal
    for k, errs in unsure.items():
        result.failed.setdefault(k, {}).update(errs)
    if calc.constraints or calc.check is not None:
        args = {i.name: statics.get(i.name, nominal.get(i.name)) for i in calc.inputs}
        if calc.constraints:
            for k, errs in _nominal_failures(calc, args, n).items():
                result.failed.setdefault(k, {}).update(errs)
        if calc.check is not None:
            nominal_out = {name: o["value"] for name, o in result.outputs.items()}
            result.warnings.extend(calc.check(inputs=args, outputs=nominal_out))
    return result


def _sigmas_checked(quantities: Mapping[str, Measured], n: int):
    """The quantities with each sigma below 0 or not finite set to 0, and those systems' errors by field: such a
    sigma is no error bar (a library caller's; the request schema refuses it), which the methods would otherwise
    take for an exact value or spread as NaN."""
    failed: dict[int, dict[str, list[str]]] = {}
    out = None
    for name, q in quantities.items():
        if q.sigma_minus.size == 1 and q.sigma_plus.size == 1:      # one system: a float's comparison, ~0.2 us
            if 0 <= q.sigma_minus.item() < np.inf and 0 <= q.sigma_plus.item() < np.inf:
                continue
        elif 0 <= min(q.sigma_minus.min(), q.sigma_plus.min()) and max(q.sigma_minus.max(), q.sigma_plus.max()) < np.inf:
            continue                                                # NaN fails both comparisons
        ok = (q.sigma_minus >= 0) & (q.sigma_minus < np.inf) & (q.sigma_plus >= 0) & (q.sigma_plus < np.inf)
        for k in np.flatnonzero(_broadcast(~ok, (n,))).tolist():
            failed.setdefault(k, {}).setdefault(name, []).append("sigma must be >= 0 and finite")
        out = dict(quantities) if out is None else out
        out[name] = Measured(q.value, np.where(ok, q.sigma_minus, 0.0), np.where(ok, q.sigma_plus, 0.0),
                             q.samples, q.isotropic)
    return (quantities if out is None else out), failed


WIDTH = 2                           # the central three-point stencil: x - h and x + h beside x
LINEAR_CHUNK = 2048   # systems per pass of the linear method: its (systems x perturbations x outputs)
                      # arrays then stay in cache, however long the catalogue


@dataclass(frozen=True, eq=False)
class Plan:
    """The linear method compiled for one calculation and one set of inputs (those given, in the
    order of the rows of ``x``, and those perturbed), built once and cached.

    Column 1 + j of the stencil holds perturbed input j stepped by -h, column 1 + m + j by +h:
    each side's columns together, so that f(x - h) and f(x + h) are contiguous blocks.  The
    domains are held as closed bounds read from each input's :class:`~calcservice.registry.Domain`
    (x > a is x >= nextafter(a, inf) in floats), so one comparison tests a whole stencil."""

    calc: Calculation
    names: tuple[str, ...]
    perturbed: tuple[str, ...]
    rows: np.ndarray            # (m,) row of each perturbed input among ``names``
    time: np.ndarray            # (m, 1) which are dates
    any_time: bool
    low: np.ndarray             # (m, 1) closed domain bounds
    high: np.ndarray
    fill_rows: np.ndarray       # (WIDTH m,) input row of each stepped column
    fill_cols: np.ndarray       # (WIDTH m,) its column
    open_low: np.ndarray        # (m, 1) the open domain bounds (-inf, inf where a bound is closed or absent)
    open_high: np.ndarray
    radian: np.ndarray          # (m, 1) a radian in the unit of each angle or cyclic input (0 for others)
    _periods: dict = field(default_factory=dict, repr=False)

    def inside(self, values: np.ndarray) -> np.ndarray:
        """Whether each of ``values`` (..., m, n) lies in its perturbed input's domain."""
        return np.isfinite(values) & (values >= self.low) & (values <= self.high)

    def periods(self, given: tuple[str, ...], ndim: int) -> tuple[np.ndarray, np.ndarray, bool]:
        """The wrap period of each output of ``given`` (1 where it does not wrap), which wrap, and
        whether any does; shaped (outputs,) + (1,) * (ndim - 1) to broadcast against (outputs, ...)."""
        key = (given, ndim)
        if key not in self._periods:
            period = np.array([self.calc.output(name).period or np.nan for name in given])
            wraps = np.isfinite(period)
            shape = (len(given),) + (1,) * (ndim - 1)
            period, wraps = np.where(wraps, period, 1.0).reshape(shape), wraps.reshape(shape)
            period.flags.writeable = wraps.flags.writeable = False
            self._periods[key] = (period, wraps, bool(wraps.any()))
        return self._periods[key]

    def links(self, given: tuple[str, ...]) -> list[tuple[int, int, float, float]]:
        """The joint folds among the outputs ``given``: (row of the angle, row of the output it turns
        with, that output's period, the turn), see :class:`~calcservice.registry.Output`."""
        key = ("links", given)
        if key not in self._periods:
            self._periods[key] = [(k, given.index(o.turns_with[0]), self.calc.output(o.turns_with[0]).period,
                                   o.turns_with[1])
                                  for k, o in enumerate(self.calc.output(name) for name in given)
                                  if o.turns_with is not None and o.turns_with[0] in given]
        return self._periods[key]


@lru_cache(maxsize=4096)
def plan(calc: Calculation, names: tuple[str, ...], perturbed: tuple[str, ...]) -> Plan:
    """The compiled linear method of ``calc`` for inputs ``names`` of which ``perturbed`` are uncertain."""
    rows = np.array([names.index(name) for name in perturbed], dtype=np.intp)
    time = np.array([calc.input(name).time for name in perturbed], dtype=bool)[:, None]
    # a cyclic input (an angle) has no edge: a step or a sigma beyond a full turn is the same angle
    doms = [ANY if calc.input(name).period is not None else calc.input(name).domain for name in perturbed]
    low = np.array([np.nextafter(d.low, np.inf) if d.low_open else d.low for d in doms], dtype=float)[:, None]
    high = np.array([np.nextafter(d.high, -np.inf) if d.high_open else d.high for d in doms], dtype=float)[:, None]
    open_low = np.array([d.low if d.low_open else -np.inf for d in doms], dtype=float)[:, None]
    open_high = np.array([d.high if d.high_open else np.inf for d in doms], dtype=float)[:, None]
    # an angle in degrees or a cyclic input (a phase in cycles) varies on the scale of a radian of its turn
    radian = np.array([DEGREES_PER_RADIAN if calc.input(name).unit == "deg" else
                       (calc.input(name).period or 0.0) / (2.0 * np.pi) for name in perturbed], dtype=float)[:, None]
    p = Plan(calc, names, perturbed, rows, time, bool(time.any()), low, high, np.tile(rows, WIDTH),
             1 + np.arange(WIDTH * len(perturbed)), open_low, open_high, radian)
    for a in (p.rows, p.time, p.low, p.high, p.fill_rows, p.fill_cols, p.open_low, p.open_high, p.radian):
        a.flags.writeable = False
    return p


def _steps(x: np.ndarray, spread: np.ndarray, pl: Plan) -> np.ndarray:
    """The first difference step of each perturbed input (m, n), which :func:`_refine` then
    shortens where the function bends within it.

    A central difference errs by its truncation, ~ h^2 |f'''| / 6, and by the rounding of the
    function values over 2h, ~ eps |f| / h: for a function that varies on the scale of its input
    both are ~1e-10 of the derivative at h ~ eps^(1/3) |x| ~ 1e-5 |x| (Press et al., Numerical
    Recipes, sec. 5.7).  So the step is 1e-5 of the input's scale.  Where its domain has an open
    bound, where the formula has no value, that is the distance to the nearest one: the formula
    varies on that scale (e -> 1, i -> 0 or 180 deg, v -> c, x -> 0 of a mass or a distance), and a
    closed bound is an ordinary point of it (e = 0, a luminosity fraction of 0, stepped from by 1e-5
    of their distance to 1, on one side, :func:`_stencil`).  Elsewhere it is |x|, or the sigma where
    that is larger (a Thiele-Innes constant near 0, whose zero means nothing to the formula), and for
    an angle in degrees a radian, the scale of its sines and cosines, whatever its value (a node of
    0.01 deg is an ordinary point), as for a cyclic input a radian of its turn (a phase 1e5 cycles on
    varies as one near 0).  A step tied to a small sigma drowns in rounding: a period known to 1e-5
    of itself stepped by 1e-10 of it moves f by 1e-10 |f| beside a rounding of 1e-16 |f|.  Where the
    formula amplifies the step (a period by the cycles elapsed) :func:`_refine` sees the bend in
    the stencil and shortens it.

    A date's size (a JD ~ 2.5e6 d) says nothing about the scale on which a function of it varies:
    a time input is stepped by its sigma (at least 1 d) times 1e-4.  The step is then one that
    x + h represents exactly, so rounding does not bias the difference quotient (Numerical Recipes,
    sec. 5.7); it matters for dates, where ulp(JD) ~ 5e-10 d."""
    ax = np.abs(x)
    edge = np.minimum(x - pl.open_low, pl.open_high - x)                         # inf without open bounds
    scale = np.where(edge < np.inf, edge, np.maximum(spread, np.where(pl.radian > 0, pl.radian, ax)))
    # a subnormal scale (x = 5e-324 with no sigma) is 0 for this purpose: a step tied to it would underflow
    scale = np.where(scale >= _TINY, scale, 0.0)
    h = RELATIVE_STEP * np.where(scale > 0, scale, np.where(spread > 0, spread, 1.0))
    if pl.any_time:
        h = np.where(pl.time, TIME_STEP * np.maximum(spread, 1.0), h)
    return _representable(x, h)


def _representable(x: np.ndarray, h: np.ndarray) -> np.ndarray:
    """The step nearest ``h`` that x + h represents exactly (``h`` itself where x + h overflows), at
    least FINEST roundings of x: within 1e-10 of an open bound (e = 1 - 1e-12) 1e-5 of the distance
    to it is below the rounding of x, and a step of 0 would difference nothing."""
    h = np.maximum(h, FINEST * np.spacing(np.abs(x)))
    exact = (x + h) - x                  # > 0: h is far above the rounding of x, even for a date
    return np.where(exact < np.inf, exact, h)


def _differentiate(pl: Plan, x, sm, sp, spread, r, statics, trail, keep_terms: bool):
    """Nominal outputs and their first-order variance for a block of systems: ``x`` (inputs, n)
    holds the inputs' values, ``sm``, ``sp`` and ``spread`` (m, n) the perturbed ones' sigmas (below,
    above, and their mean), ``r`` their correlation matrix (None for the identity).

    Returns the outputs given, f0 (outputs, n) + trail, var (outputs, n) + trail, ``terms``
    (outputs, m, n) + trail, each input's first-order term df/dx_j sigma_j (only with ``keep_terms``,
    else None), ``curvature`` (outputs, n) + trail for wrapping outputs: the norm over the inputs of
    the second-order term over one sigma, |f''| sigma^2 / 2, from the two one-sided differences
    (zero for outputs that do not wrap; None when none wraps), and ``crosses`` (m, n): where an
    input's 1-sigma interval leaves its domain.  The terms come from the calculation's declared
    Jacobian where it has one (:func:`_declared_terms`), else from the central-difference stencil
    (:func:`_stencil_terms`); everything after them is one path."""
    n = x.shape[1]
    m = len(pl.rows)
    if pl.calc.jacobian is not None and not trail:       # register() allows no series input beside one
        given, f0, terms, crosses = _declared_terms(pl, x, sm, sp, spread, statics)
        one_sided = curvature = None
    else:
        given, f0, terms, one_sided, curvature, crosses = _stencil_terms(pl, x, sm, sp, spread, statics, trail)
    if not given:
        return given, None, None, None, None, crosses
    if not m:
        return given, f0, np.zeros_like(f0), np.zeros((len(given), 0, n) + trail), None, crosses
    counts = spread > 0
    exact = np.count_nonzero(counts) < counts.size
    if exact:
        # an exact input in a row does not count, even where f' is undefined
        counts = counts.reshape((1, m, n) + (1,) * len(trail))
        terms = np.where(counts, terms, 0.0)
    var = _quadratic(terms, r)
    if one_sided is not None and not np.isfinite(var).all():
        terms = one_sided(terms)
        if exact:
            terms = np.where(counts, terms, 0.0)
        var = _quadratic(terms, r)
    return given, f0, var, terms if keep_terms else None, curvature, crosses


def _declared_terms(pl: Plan, x, sm, sp, spread, statics):
    """The outputs given, f0 (outputs, n), the terms df/dx_j sigma_j (outputs, m, n) from the
    calculation's declared Jacobian, and ``crosses`` (m, n), for a block of systems: one physics
    call at the nominal point and one call of the Jacobian there (None for the terms when no
    output is given or no input is uncertain).

    A derivative that is not finite at a nominal point is kept as it is: a declared Jacobian is
    exact, so an infinite slope there means first-order propagation has no answer at that point,
    which the engine then reports (``sigma_undefined``) rather than the step-dependent finite
    slope a one-sided difference would make of it.  Where a domain's edge is an ordinary point of
    the formula (x = 0 for (1 - x^2)^{1/2} on 0 <= x < 1, whose slope is 0 there) the declared value
    is the derivative that one-sided differences only approximate, to first order in their step."""
    n = x.shape[1]
    m = len(pl.rows)
    crosses = None
    if m:
        crosses = ~pl.inside(x[pl.rows] + np.array([-sm, sp])).all(axis=0)
    arguments = _arguments(pl.calc, {name: x[k] for k, name in enumerate(pl.names)}, statics)
    ys = _call(pl.calc, arguments, (n,))
    given = tuple(ys)
    if not given:
        return given, None, None, crosses
    f0 = np.array(list(ys.values()))                                                # (outputs, n)
    if not m:
        return given, f0, None, crosses
    logarithmic = pl.calc.jacobian(ys, **arguments)
    zero = np.zeros(n)                   # an input absent from an output's mapping: it does not depend on it
    try:
        # each derivative an array shaped like the inputs (n,), as the declaration promises: any
        # other shape is a declaration's bug, which numpy refuses here (a 0-d array or a wrong size)
        terms = np.concatenate([logarithmic[name].get(wrt, zero) for name in given for wrt in pl.perturbed],
                               dtype=float).reshape(len(given), m, n)                # (outputs, m, n)
    except KeyError:
        missing = [name for name in given if name not in logarithmic]
        raise ValueError(f"{pl.calc.name}: the declared Jacobian gives no derivatives of {', '.join(missing)}") \
            from None
    terms *= f0[:, None, :]              # df/dx = f d ln f / dx, for every output and input at once
    terms *= spread
    return given, f0, terms, crosses


def _stencil(pl: Plan, x, xj, h, statics, trail, sel=None, centre=None):
    """The outputs given, their values (outputs, p, n) + trail on the stencil of steps ``h`` about
    ``x`` of the perturbed inputs ``sel`` (indices among them; all by default: ``xj`` and ``h`` are
    then (len(sel), n)), with any joint fold between outputs (``Output.turns_with``) undone at each
    point, and ``flips`` (2, len(sel), n) or None.  ``centre``, the outputs at ``x`` (outputs, 1, n) +
    trail where a stencil is taken again, spares the physics that point.

    A step that leaves its input's domain is taken on the other side at twice the length instead
    (x - h -> x + 2h, x + h -> x - 2h; ``flips`` marks them) for a one-sided difference of second
    order (see :func:`_differences`); NaN where that too leaves it."""
    n = x.shape[1]
    rows = pl.rows if sel is None else pl.rows[sel]
    m = len(rows)
    first = 0 if centre is not None and m else 1          # the column of the first stepped point
    p = first + WIDTH * m
    cols = np.repeat(x[:, None, :], p, axis=1)                                      # (Q, p, n)
    flips = None
    if m:
        low, high = (pl.low, pl.high) if sel is None else (pl.low[sel], pl.high[sel])
        block = xj + np.array([-h, h])                                               # (2, m, n)
        inside = np.isfinite(block) & (block >= low) & (block <= high)
        if not inside.all():
            far = xj + np.array([2.0 * h, -2.0 * h])
            flips = ~inside & inside[::-1] & np.isfinite(far) & (far >= low) & (far <= high)
            block = np.where(inside, block, np.where(flips, far, np.nan))
        fill_rows = pl.fill_rows if sel is None else np.tile(rows, WIDTH)
        fill_cols = pl.fill_cols if sel is None and first else first + np.arange(WIDTH * m)
        cols[fill_rows, fill_cols, :] = block.reshape(WIDTH * m, n)
    ones = (1,) * len(trail)
    ys = _call(pl.calc, _arguments(pl.calc, {name: cols[k].reshape((p, n) + ones) if trail else cols[k]
                                             for k, name in enumerate(pl.names)}, statics), (p, n) + trail)
    given = tuple(ys)
    if not given or not m:
        return given, (np.array(list(ys.values())) if given else None), flips
    y = np.array(list(ys.values()))                                                  # (outputs, p, n) + trail
    if not first:
        y = np.concatenate([centre, y], axis=1)
    for k, partner, partner_period, turn in pl.links(given):
        # a stencil point where the physics folded the partner (a node stepped across 0) has this
        # angle turned with it: undo the joint fold, so the pair is differenced on one branch
        y[k, 1:] -= turn * _folds(y[partner, 1:], y[partner, :1], partner_period)
    return given, y, flips


def _differences(pl: Plan, given, y, m: int, flips=None):
    """f(x + h) - f(x) and f(x) - f(x - h) over a stencil's values ``y`` (outputs, m, n) + trail each,
    a wrapping output's on the circle at each step (so a branch cut between the points is no jump),
    f(x + 2h) - f(x) and f(x) - f(x - 2h) where the stencil took the point beyond the domain's edge
    on the other side (``flips``; NaN elsewhere, None when there are none), and the wrap periods of
    the outputs (see :meth:`Plan.periods`).  Where a side was flipped its near difference is NaN."""
    ahead, behind = y[:, 1 + m:], y[:, 1:1 + m]                                     # f(x + h), f(x - h)
    period, wraps, any_wrap = pl.periods(given, ahead.ndim)
    ref = y[:, :1]
    up, down = ahead - ref, ref - behind
    if any_wrap:
        up = np.where(wraps, _wrap(up, period), up)
        down = np.where(wraps, _wrap(down, period), down)
    far_up = far_down = None
    if flips is not None:
        shape = (2, 1, m, y.shape[2]) + (1,) * (y.ndim - 3)
        low_edge, high_edge = flips.reshape(shape)       # x - h left the domain / x + h left it
        far_up = np.where(low_edge, -down, np.nan)         # the x - h column holds f(x + 2h)
        far_down = np.where(high_edge, -up, np.nan)        # the x + h column holds f(x - 2h)
        down = np.where(low_edge, np.nan, down)
        up = np.where(high_edge, np.nan, up)
    return up, down, far_up, far_down, period, wraps, any_wrap


RESOLVED = 1e6       # a difference this many roundings of its output above them is a derivative to ~1e-6
KINK_STEPS = 16      # the longer step that tells a kink from an extremum (see _stencil_terms)
BEND = 1e-4          # the bend (or an angle's turn in rad) over a step above which it is shortened (see _refine)
BENT = 1e-5          # the bend (or turn) it is shortened to
REFINEMENTS = 2      # how many times at most
SHORTEST = 1.0 / 4096    # the most a step is shortened at once


def _bend(up, down, f0, period, wraps, m: int, n: int) -> tuple[np.ndarray | None, np.ndarray | None]:
    """Where some output bends, or some angle turns, by more than BEND over an input's step (m, n),
    and by how many times BEND at most there (None, None where none does).

    The bend is |up - down| / |up + down|, the second difference over the first, ~ h |f''| / 2 |f'|.
    It counts only where the output moves the same way on both sides by more than BEND of its own
    scale (|f|, or period / 2 pi for an angle) and stands above the rounding of the three values:
    near an extremum the bend is large because f' is small, not because the step is long, and a
    shorter step there only adds rounding.  The turn of an angle output is |up + down| / 2 in radians:
    a step that turns a phase, an anomaly or a position angle by more than BEND rad is long beside the
    radian on which it varies, even where the output itself does not show it (rv = K cos(nu + w) at
    a quadrature, f'' = 0, stepped in a period after many cycles)."""
    # one cheap pass over all the differences (a function that varies on the scale of its inputs has
    # no bend above BEND): a bend above BEND with up and down of one sign has |up / down - 1| > BEND;
    # then the few candidates alone
    excess = None
    t = up / down
    t -= 1.0
    np.abs(t, out=t)
    candidates = t > BEND
    if candidates.any():
        flat = np.flatnonzero(candidates)
        shape = (up.shape[0], m, n, up[0, 0, 0].size)                 # (outputs, m, n, series points)
        o, j, k, s = np.unravel_index(flat, shape)
        u, d = up.reshape(-1)[flat], down.reshape(-1)[flat]
        size = np.abs(np.broadcast_to(f0, (shape[0], 1) + up.shape[2:]).reshape(shape[0], n, shape[3])[o, k, s])
        ones = (1,) * (up.ndim - 1)
        angular = np.broadcast_to(wraps, shape[:1] + ones).reshape(-1)[o]
        scale = np.where(angular, np.broadcast_to(period, shape[:1] + ones).reshape(-1)[o] / (2.0 * np.pi), size)
        first, second = np.abs(u + d), np.abs(u - d)
        bent = (second > BEND * first) & (first > BEND * scale) & (u * d > 0)
        bent &= second > 1024 * np.finfo(float).eps * scale
        if bent.any():
            excess = np.zeros((m, n))
            np.maximum.at(excess, (j[bent], k[bent]), second[bent] / (BEND * first[bent]))
    turning = np.flatnonzero(np.broadcast_to(wraps, up.shape[:1] + (1,) * (up.ndim - 1)).reshape(-1))
    if len(turning):
        radians = 2.0 * np.pi / np.broadcast_to(period, up.shape[:1] + (1,) * (up.ndim - 1))[turning]
        turn = np.abs(up[turning] + down[turning]) * (0.5 * radians / BEND)         # (angles, m, n) + trail
        turn = np.where(np.isfinite(turn), turn, 0.0).reshape(len(turning), m, n, -1).max(axis=(0, 3))
        if (turn > 1.0).any():
            excess = turn if excess is None else np.maximum(excess, turn)
    if excess is None:
        return None, None
    need = excess > 1.0
    return (need, excess) if need.any() else (None, None)


def _refine(pl: Plan, given, x, xj, h, diffs, f0, statics, trail):
    """The steps, shortened where the function bends within them, and the differences over them.

    A central difference is exact for a parabola: its truncation, h^2 |f'''| / 6, is ~ (h / L)^2 of
    the derivative for a function that varies on a scale L, which the bend (:func:`_bend`, ~ h / 2L)
    shows.  The first step, 1e-5 of the input's scale (:func:`_steps`), bends by ~1e-5 |p - 1| / 2
    for a power x^p; a period stepped by 1e-5 of itself moves the phase after N cycles by 1e-5 N,
    and the stencil bends by as much.  Where some output bends by more than BEND (a truncation of
    ~ BEND^2 of the derivative), the input's step is shortened to bend by about BENT, in another
    physics call over the systems and inputs concerned (1 + 2 of them points), at most REFINEMENTS
    times.  Near an extremum of one output (f' ~ 0) the bend says nothing of the step and is not
    counted (see :func:`_bend`).  The bend is the largest over all the outputs and series points,
    and an angle output that turns by more than BEND rad over the step counts as bent: so an output
    at an inflection of its own (f'' = 0, where it cannot show the bend) is shortened with the others;
    one alone at an inflection, beside no angle, keeps the first step, ~(h / L)^2 off."""
    up, down, far_up, far_down, period, wraps, _ = diffs
    m, n = h.shape
    for _ in range(REFINEMENTS):
        need, bend = _bend(up, down, f0, period, wraps, m, n)
        if need is None:
            break
        sel = np.flatnonzero(need.any(axis=1))
        systems = np.flatnonzero(need.any(axis=0))
        where = np.ix_(sel, systems)
        shrink = np.clip(BENT / (BEND * np.where(need, bend, 1.0)), SHORTEST, 1.0)
        short = _representable(xj, h * shrink)[where]
        centre = np.take(f0, systems, axis=2)
        _, y2, flips2 = _stencil(pl, x[:, systems], xj[where], short, statics, trail, sel, centre)
        up2, down2, far_up2, far_down2, _, _, _ = _differences(pl, given, y2, len(sel), flips2)
        take = need[where]
        mask = take.reshape((1,) + take.shape + (1,) * len(trail))
        at = (slice(None), sel[:, None], systems[None, :])
        up[at] = np.where(mask, up2, up[at])
        down[at] = np.where(mask, down2, down[at])
        if far_up2 is not None or far_up is not None:
            if far_up is None:
                far_up, far_down = np.full_like(up, np.nan), np.full_like(up, np.nan)
            far_up[at] = np.where(mask, np.nan if far_up2 is None else far_up2, far_up[at])
            far_down[at] = np.where(mask, np.nan if far_down2 is None else far_down2, far_down[at])
        h = h.copy()
        h[where] = np.where(take, short, h[where])
    return h, (up, down, far_up, far_down) + diffs[4:]


def _stencil_terms(pl: Plan, x, sm, sp, spread, statics, trail):
    """The outputs given, f0 (outputs, n) + trail, the terms df/dx_j sigma_j (outputs, m, n) + trail
    by central differences, a function that fills the terms a step outside the domain left
    undefined with one-sided differences, the ``curvature`` of wrapping outputs (see
    :func:`_differentiate`) and ``crosses`` (m, n), for a block of systems.  The physics sees
    arrays of shape (points, n) + trail: the stencil's points first, so that each point is a
    contiguous row of systems; everything after it stays within the block, so a long catalogue's
    (outputs x m x n) arrays are never held.  The steps are :func:`_steps`', shortened where the
    function bends within them by :func:`_refine`.

    An input within its sigma of an open bound of its domain (x > 0 below its sigma) is stepped by
    1e-5 of its distance to the bound (:func:`_steps`); where every output's difference over that
    step is lost in the output's own rounding (within ``RESOLVED`` roundings: an x of 1e-300 that
    no output sees), its terms are taken again over the step of 1e-5 sigma, in a second physics call
    over the systems that need it, so the sigma is continuous in x through the bound instead of 0."""
    n = x.shape[1]
    m = len(pl.rows)
    crosses = xj = h = None
    if m:
        xj = x[pl.rows]                                                              # (m, n)
        h = _steps(xj, spread, pl)
        crosses = ~pl.inside(xj + np.array([-sm, sp])).all(axis=0)
    given, y, flips = _stencil(pl, x, xj, h, statics, trail)
    if not given:
        return given, None, None, None, None, crosses
    f0 = y[:, 0]
    if not m:
        return given, f0, None, None, None, crosses
    ones = (1,) * len(trail)
    h, diffs = _refine(pl, given, x, xj, h, _differences(pl, given, y, m, flips), y[:, :1], statics, trail)
    up, down, far_up, far_down, period, wraps, any_wrap = diffs
    hh = h.reshape((1, m, n) + ones)
    # the Jacobian times each input's sigma in one product: (f(x+h) - f(x-h)) sigma / 2h
    scale = (spread / (2.0 * h)).reshape((1, m, n) + ones)
    terms = (up + down) * scale

    def floor():
        return RESOLVED * np.finfo(float).eps * (np.abs(y[:, :1]) + np.where(wraps, period, 0.0))

    wide = RELATIVE_STEP * spread
    # steps held by an open bound well below sigma (h is rounded to what x + h represents: not h < wide)
    narrow = (h < 0.5 * wide) & ~pl.time                                             # (m, n): within sigma / 2
    if narrow.any():
        # the step is lost where no output resolves it (an output that resolves it shows the step is
        # one the formula sees; those that do not then do not depend on x to first order)
        seen = (np.abs(up + down) > floor()).reshape(len(given), m, n, -1).any(axis=(0, 3))   # (m, n)
        lost = narrow & ~seen
        need = lost.any(axis=0)                                                      # (n,)
        if need.any():
            h2 = np.where(lost, wide, h)[:, need]
            _, y2, flips2 = _stencil(pl, x[:, need], xj[:, need], h2, statics, trail)
            up2, down2 = _differences(pl, given, y2, m, flips2)[:2]
            terms2 = (up2 + down2) * (spread[:, need] / (2.0 * h2)).reshape((1, m, -1) + ones)
            again = lost[:, need].reshape((1, m, -1) + ones) & np.isfinite(terms2)
            terms[:, :, need] = np.where(again, terms2, terms[:, :, need])

    # an output that moves the same way on both sides of x (up and down of opposite signs, each
    # well above rounding) sits at an extremum or a kink of the function between the steps: an
    # extremum's one-sided differences grow with the square of the step, a kink's (|x|, or the
    # (|x|)^(1/2) of an inclination at a face-on orbit) at most linearly.  Taken again over
    # KINK_STEPS times the step, in a second physics call over the systems concerned, a growth below
    # KINK_STEPS^2 / 4 is a kink: there f has no derivative, the term is NaN and the sigma
    # undefined (sigma_undefined), not the central difference's meaningless ~0.
    kink = None
    turning = up * down < 0                                                          # (outputs, m, n) + trail
    if turning.any():
        least = floor()
        turning &= (np.abs(up) > least) & (np.abs(down) > least)
        turning &= (spread > 0).reshape((1, m, n) + ones)                             # an exact input adds no term
    if turning.any():
        need = turning.reshape(len(given), m, n, -1).any(axis=(0, 1, 3))
        h3 = KINK_STEPS * h[:, need]
        _, y3, flips3 = _stencil(pl, x[:, need], xj[:, need], h3, statics, trail)
        up3, down3 = _differences(pl, given, y3, m, flips3)[:2]
        slow = KINK_STEPS ** 2 / 4
        sub = turning[:, :, need]
        kink = np.zeros_like(turning)
        kink[:, :, need] = sub & (np.abs(up3) < slow * np.abs(up[:, :, need])) & \
            (np.abs(down3) < slow * np.abs(down[:, :, need]))
        if kink.any():
            terms = np.where(kink, np.nan, terms)
        else:
            kink = None

    def one_sided(terms):
        # one-sided differences where a step left the domain: of second order, (4 (f(x+h) - f(x)) -
        # (f(x+2h) - f(x))) / 2h, where the point beyond the edge was taken twice as far on the other
        # side (:func:`_stencil`), so that an edge that is an ordinary point of the formula (e = 0)
        # gets its derivative to ~ (h / L)^2, as inside; else of first order; a kink stays NaN
        sig = spread.reshape((1, m, n) + ones)
        filled = np.where(np.isfinite(up), up, down)
        if far_up is not None:
            filled = np.where(np.isfinite(far_up), 2.0 * up - 0.5 * far_up,
                              np.where(np.isfinite(far_down), 2.0 * down - 0.5 * far_down, filled))
        filled = filled / hh * sig
        return np.where(np.isfinite(terms) if kink is None else np.isfinite(terms) | kink, terms, filled)

    curvature = None
    if any_wrap:
        # rounding of the three values sets a floor below which the two sides cannot differ
        noise = 8 * np.finfo(float).eps * (np.abs(y[:, :1]) + period)
        gap = np.maximum(np.abs(up - down) - noise, 0.0)
        ratio = spread.reshape((1, m, n) + ones) / hh
        bend = np.where(wraps, 0.5 * gap * ratio * ratio, 0.0)
        curvature = np.sqrt((bend * bend).sum(axis=1))
    return given, f0, terms, one_sided, curvature, crosses


def _ordered_sum(parts: np.ndarray, axis: int = 0) -> np.ndarray:
    """The sum of ``parts`` over ``axis``, added one after another in their order.

    numpy's reductions (``sum`` over an axis, ``einsum``) add in an order that depends on the
    array's shape and strides: pairwise in blocks of 8 along a contiguous axis, one by one along a
    strided one, so a system's sigma alone (n = 1) and in a batch differed in its last bits once a
    calculation had 8 or more uncertain inputs.  A loop over the inputs (never over systems) keeps
    one order whatever n is (``np.add.accumulate`` would too, but runs a strided loop over a batch)."""
    count = parts.shape[axis]
    if not count:
        return np.zeros(parts.shape[:axis] + parts.shape[axis + 1:])
    lead = (slice(None),) * axis
    total = parts[lead + (0,)].copy()
    for j in range(1, count):
        total += parts[lead + (j,)]
    return total


def _pairs(r: np.ndarray | None) -> list[tuple[int, int, float]]:
    """The correlated pairs (j < k) of the inputs' correlation matrix, in order, with their rho."""
    if r is None:
        return []
    return [(j, k, float(r[j, k])) for j in range(len(r)) for k in range(j + 1, len(r)) if r[j, k] != 0]


def _quadratic(terms: np.ndarray, r: np.ndarray | None) -> np.ndarray:
    """sigma_f^2 = t R t^T = sum_j t_j^2 + sum_{j<k} 2 rho_jk t_j t_k over the inputs' first-order terms
    t (outputs, m, n) + trail, summed in the order of the inputs whatever n is (:func:`_ordered_sum`),
    so that a system gets the same sigma alone or in a batch."""
    var = _ordered_sum(terms * terms, axis=1)
    pairs = _pairs(r)
    for j, k, rho in pairs:
        product = terms[:, j] * terms[:, k]
        var += rho * (product + product)
    return np.maximum(var, 0.0) if pairs else var


def _output_covariance(terms: np.ndarray, r: np.ndarray | None) -> np.ndarray:
    """The outputs' covariance J C J^T (n, outputs, outputs) from the terms t (outputs, m, n): the
    products t_j t_j^T, then the correlated pairs' rho_jk (t_j t_k^T + t_k t_j^T), added in order as
    each sigma is by :func:`_quadratic` (the diagonal is its variance, bit for bit).  Built a row of
    outputs at a time, which keeps the working arrays (n, outputs) small."""
    t = np.ascontiguousarray(np.moveaxis(terms, (1, 2), (0, 1)))                    # (m, n, outputs)
    m, n, k = t.shape
    if not m:
        return np.zeros((n, k, k))
    pairs = _pairs(r)
    cov = np.empty((n, k, k))
    for o in range(k):
        row = t[0] * t[0][:, o:o + 1]
        for j in range(1, m):
            row += t[j] * t[j][:, o:o + 1]
        for j, i, rho in pairs:
            row += rho * (t[j] * t[i][:, o:o + 1] + t[i] * t[j][:, o:o + 1])
        cov[:, o, :] = row
    return cov


def _linear(calc, quantities, statics, options, n, trail) -> Result:
    """First-order propagation: sigma_f^2 = J C J^T with J the declared or else the central-difference
    Jacobian and C the input covariance (sigma_i rho_ij sigma_j, asymmetric errors by the mean of their two sides)."""
    names = tuple(quantities)
    qs = quantities.values()
    x = np.array([_broadcast(q.value, (n,)) for q in qs], dtype=float)              # (Q, n)
    sides = np.array([[_broadcast(q.sigma_minus, (n,)) for q in qs],
                      [_broadcast(q.sigma_plus, (n,)) for q in qs]], dtype=float)   # (2, Q, n)
    uncertain = (sides > 0).any(axis=(0, 2)).nonzero()[0]
    perturbed = tuple(names[k] for k in uncertain.tolist())
    m = len(perturbed)
    pl = plan(calc, names, perturbed)
    r = correlation_matrix(list(perturbed), options.correlations) if options.correlations else None
    if r is not None and np.count_nonzero(r) == m:
        r = None                                                                     # the identity
    sm, sp = sides[:, pl.rows]                                                       # (m, n) each
    spread = 0.5 * (sm + sp)                                                         # Measured.sigma, for all at once
    keep = (options.covariance and not trail) or options.budget
    if n <= LINEAR_CHUNK:
        parts = [_differentiate(pl, x, sm, sp, spread, r, statics, trail, keep)]
    else:
        parts = [_differentiate(pl, *(a[:, k:k + LINEAR_CHUNK] for a in (x, sm, sp, spread)), r, statics, trail,
                                keep)
                 for k in range(0, n, LINEAR_CHUNK)]
    given = parts[0][0]

    def joined(k: int, axis: int):
        if parts[0][k] is None or len(parts) == 1:
            return parts[0][k]
        return np.concatenate([part[k] for part in parts], axis=axis)

    result = Result(outputs={}, method="linear")
    warnings, failed = result.warnings, result.failed
    if given:
        f0, var, terms, curvature = joined(1, 1), joined(2, 1), joined(3, 2), joined(4, 1)
        sigma = np.sqrt(var)
        period, wraps, any_wrap = pl.periods(given, f0.ndim)
        if any_wrap:
            f0 = np.where(wraps, f0 % period, f0)
        rel = np.abs(sigma / f0)
        loose = (LINEAR_TRUST_LIMIT < rel) & (rel < np.inf)                           # (outputs, n) + trail
        if curvature is not None:
            # an angle's size says nothing of its error: there the two one-sided differences
            # are compared instead (a branch or kink between them, or strong curvature)
            loose = np.where(wraps, curvature > LINEAR_TRUST_LIMIT * sigma, loose)
        # f0 + sigma is finite exactly where both are (sigma >= 0 or NaN)
        flagged = np.count_nonzero(loose) or np.count_nonzero(np.isfinite(f0 + sigma)) < f0.size
        if flagged:
            finite = np.isfinite(f0)
            defined = np.isfinite(sigma) | ~finite
            per_row = (len(given), n, -1)
            bad = ~finite.reshape(per_row).all(axis=2)                               # (outputs, n)
            loose = loose.reshape(per_row).any(axis=2)
            undefined = ~defined.reshape(per_row).all(axis=2)
        for k, name in enumerate(given):
            result.outputs[name] = {"value": f0[k], "sigma": sigma[k]}
            if not flagged:
                continue
            for row in np.flatnonzero(bad[k]).tolist():
                failed.setdefault(row, {}).setdefault("_inputs", []).append(
                    f"these inputs give no finite value of {name}")
            if loose[k].any():
                warnings.append(_untrustworthy(name, loose[k], bool(wraps.flat[k])))
            if undefined[k].any():
                warnings.append(_not_linear(name, undefined[k]))
        if options.covariance and not trail:         # over scalar outputs only: a series has no single value
            result.correlation = _correlation(list(given), _output_covariance(terms, r))   # (n, outputs, outputs)
        elif options.covariance:
            warnings.extend(_no_covariance(name) for name in given)
        if options.budget:
            result.budget = _linear_budget(given, perturbed, terms, var, r, trail, warnings)

    if m:
        crosses = joined(5, 1)
        asymmetric = sm != sp
        if np.count_nonzero(crosses) or np.count_nonzero(asymmetric):
            for j, name in enumerate(perturbed):
                if crosses[j].any():
                    warnings.append(_crosses(calc, name, crosses[j]))
                if asymmetric[j].any() and quantities[name].samples is None:
                    warnings.append(_asymmetric(name))
    return result


def _correlation(names: list[str], cov: np.ndarray) -> tuple[list[str], np.ndarray] | None:
    """Correlation matrices (n, k, k) from covariances, over the outputs with a positive finite
    sigma in some system (NaN in a system where an output's sigma is zero or undefined)."""
    sd = np.sqrt(np.diagonal(cov, axis1=1, axis2=2))                                # (n, k)
    has = (sd > 0) & np.isfinite(sd)
    keep = np.flatnonzero(has.any(axis=0))
    if not len(keep):
        return None
    cov, sd, has = cov[:, keep][:, :, keep], sd[:, keep], has[:, keep]
    safe = np.where(has, sd, np.nan)
    corr = np.clip(cov / (safe[:, :, None] * safe[:, None, :]), -1.0, 1.0)
    diagonal = np.arange(len(keep))
    corr[:, diagonal, diagonal] = np.where(has, 1.0, np.nan)
    return [names[k] for k in keep.tolist()], corr


def _linear_budget(given, perturbed, terms, var, r, trail, warnings) -> dict[str, dict[str, np.ndarray]]:
    """Each scalar output's variance split by input: (df/dx_i sigma_i)^2 / var, and for each
    correlated pair a term 2 rho_ij (df/dx_i sigma_i)(df/dx_j sigma_j) / var keyed "i,j" (it may be
    negative); the terms sum to 1.  Asymmetric errors enter by the mean of their two sides, as in
    the propagation itself.  NaN where the output's variance is zero or undefined."""
    budget: dict[str, dict[str, np.ndarray]] = {}
    pairs = [] if r is None else [(j, k) for j in range(len(perturbed)) for k in range(j + 1, len(perturbed))
                                  if r[j, k] != 0]
    for o, name in enumerate(given):
        if trail:
            warnings.append(_no_budget(name))
            continue
        v = var[o]
        ok = (v > 0) & np.isfinite(v)
        if not ok.any():
            continue
        inv = np.where(ok, 1.0 / np.where(ok, v, 1.0), np.nan)
        t = terms[o]
        entry = {a: t[j] * t[j] * inv for j, a in enumerate(perturbed)}
        for j, k in pairs:
            # + 0.0: a pair whose term is 0 (one input does not move the output) reads 0.0, not -0.0
            entry[f"{perturbed[j]},{perturbed[k]}"] = 2.0 * r[j, k] * t[j] * t[k] * inv + 0.0
        budget[name] = entry
    return budget


# the engine's warnings, each written once
def _untrustworthy(name: str, where, angle: bool = False) -> Warning:
    if angle:
        return Warning("linear_untrustworthy", "{subject}: the finite differences on either side disagree (a branch "
                       "or a kink of the angle within the steps, or a second-order term above "
                       f"{LINEAR_TRUST_LIMIT:.0%} of the first-order one); the linear sigma may be meaningless; "
                       "consider the Monte Carlo method", where, name)
    return Warning("linear_untrustworthy", "{subject}: relative sigma above " f"{LINEAR_TRUST_LIMIT:.0%}; first-order "
                   "propagation may be poor; consider the Monte Carlo method", where, name)


def _not_linear(name: str, where) -> Warning:
    return Warning("sigma_undefined", "the uncertainty of {subject} could not be propagated linearly at these "
                   "inputs; use the Monte Carlo method", where, name)


def _no_sigma(name: str, where) -> Warning:
    return Warning("sigma_undefined", "{subject}: the standard deviation of the draws is dominated by a few extreme "
                   "draws (a distribution without a finite variance, e.g. masses from random orientations); "
                   "sigma is not given: use the median and the 68.27 % interval (low, high)", where, name)


def _idle_correlations(quantities: Mapping[str, Measured], options: Options, n: int) -> list[Warning]:
    """A warning for each correlation that cannot act in some systems: one of its inputs is exact
    there (no sigma) or drawn from isotropic orientations, which no other input's draws follow."""
    out = []
    for (a, b), rho in options.correlations.items():
        absent = [name for name in (a, b) if name not in quantities]
        if absent and rho != 0:         # a batch's correlation, for systems that lack one of its inputs
            out.append(Warning("correlation_without_effect", f"the correlation of {a} and {b} has no effect: "
                               f"{' and '.join(absent)} {'is' if len(absent) == 1 else 'are'} not given",
                               np.ones(n, dtype=bool), None))
        if rho == 0 or absent:
            continue
        idle = np.zeros(n, dtype=bool)
        for name in (a, b):
            q = quantities[name]
            if q.isotropic:
                idle[:] = True
            elif q.samples is None:
                idle |= _broadcast((q.sigma_minus == 0) & (q.sigma_plus == 0), (n,))
        if idle.any():
            out.append(Warning("correlation_without_effect", f"the correlation of {a} and {b} has no effect: one of "
                               "them is given without an uncertainty (or as isotropic orientations, drawn on their "
                               "own)", idle, None))
    return out


def _nothing_to_correlate(quantities: Mapping[str, Measured], options: Options, n: int) -> list[Warning]:
    """covariance or budget asked for in systems whose inputs are all exact: no output has an uncertainty,
    so the answer has no correlation or budget there, which says so rather than leave the option unanswered."""
    asked = [name for name, on in (("covariance", options.covariance), ("budget", options.budget)) if on]
    if not asked:
        return []
    exact = np.ones(n, dtype=bool)
    for q in quantities.values():
        if q.isotropic or q.samples is not None:
            return []
        exact &= _broadcast((q.sigma_minus == 0) & (q.sigma_plus == 0), (n,))
    if not exact.any():
        return []
    return [Warning("no_uncertainty", "{subject}: every input is given without an uncertainty, so no output has one "
                    "and there is no correlation matrix or uncertainty budget to give", exact, name) for name in asked]


def _few_draws(s: int, sampled: list[str]) -> list[Warning]:
    """The warning that ``s`` draws are too few to summarise, naming the inputs whose samples fixed them."""
    message = (" only {s} draws (fewer than {m}): the median, sigma and the 68.27 % interval (low, high) are rough, "
               "and whether sigma exists (sigma_undefined) is not tested; give at least {m} draws for a summary to "
               "rely on").format(s=s, m=MIN_DRAWS)
    if not sampled:
        return [Warning("few_draws", "the Monte Carlo drew" + message)]
    return [Warning("few_draws", "the samples of {subject} hold" + message, None, name) for name in sampled]


def _few_kept(s: int, where) -> Warning:
    return Warning("few_draws", f"fewer than {MIN_DRAWS} of the {s} Monte Carlo draws were kept (inside the inputs' "
                   "physical domains, with a finite result): the median, sigma and the 68.27 % interval (low, "
                   "high) are rough, and whether sigma exists (sigma_undefined) is not tested", where)


def _no_covariance(name: str) -> Warning:
    return Warning("covariance_not_given", "{subject}: no correlation with the other outputs is given for this output "
                   "(a series output, a value at each point, as for the budget)", None, name)


def _no_budget(name: str) -> Warning:
    return Warning("budget_not_given", "{subject}: no uncertainty budget is given for this output (a series output, "
                   "or Monte Carlo draws of correlated, sampled or isotropic inputs, which have no share of their "
                   "own to hold fixed)", None, name)


def _crosses(calc: Calculation, name: str, where) -> Warning:
    return Warning("interval_crosses_domain", f"the 1-sigma interval of {name} crosses its physical domain "
                   f"({calc.input(name).domain.describe()}); consider the Monte Carlo method, which truncates "
                   "draws to the domain", where)


def _asymmetric(name: str) -> Warning:
    return Warning("asymmetric_linearised", "{subject}: asymmetric errors; linear propagation used the mean of "
                   "sigma_minus and sigma_plus; the Monte Carlo method draws a split normal", None, name)


def _draw(calc, quantities, options, n, s) -> tuple[dict[str, np.ndarray], int]:
    """Draws of every quantity, shape (n, s); returns them and the seed used.

    Every system of a call draws from the same standard variates (common random numbers, each
    system's scaled by its own value and sigmas): a system's answer with a seed is the same alone
    or in any batch, at any place in it, and a catalogue split into slices with one seed gives
    the numbers one request would."""
    seed = options.seed if options.seed is not None else secrets.randbelow(2**31)
    rng = np.random.default_rng(seed)
    drawn = [name for name, q in quantities.items()
             if q.samples is None and not q.isotropic and q.uncertain]
    r = correlation_matrix(drawn, options.correlations)
    z = rng.standard_normal((1, s, len(drawn)))
    if len(drawn) > 1 and not np.allclose(r, np.eye(len(drawn))):
        z = z @ correlation_factor(r).T
    out = {}
    for name, q in quantities.items():
        x = _broadcast(q.value, (n,))[:, None]
        if q.samples is not None:
            out[name] = _broadcast(q.samples, (n, s))
        elif q.isotropic:
            cos_i = rng.uniform(0.0, 1.0, size=(1, s))
            out[name] = _broadcast(np.degrees(np.arccos(cos_i)), (n, s))
        elif name in drawn:
            zj = z[:, :, drawn.index(name)]
            sm = _broadcast(q.sigma_minus, (n,))[:, None]
            sp = _broadcast(q.sigma_plus, (n,))[:, None]
            if np.all(sm == sp):
                out[name] = x + sm * zj
            else:
                # split normal by its inverse CDF; z keeps any correlation (Gaussian copula)
                u = ndtr(zj)
                wm, wp = _scaled_halves(sm, sp)
                tot = wm + wp
                pl = np.where(tot > 0, wm / np.where(tot > 0, tot, 1.0), 0.5)
                low = x + sm * ndtri(np.clip(u * tot / (2 * wm), 0, 1))
                high = x + sp * ndtri(np.clip(0.5 + (u - pl) * tot / (2 * wp), 0, 1))
                out[name] = np.where(u < pl, low, high)
                out[name] = np.where(tot > 0, out[name], x)
        else:
            out[name] = _broadcast(x, (n, s))
    return out, seed


def split_normal_within(value: np.ndarray, sigma_minus: np.ndarray, sigma_plus: np.ndarray, low: float,
                        high: float) -> np.ndarray:
    """The probability that a draw of :func:`_draw`'s split normal (mode ``value``, half-widths
    ``sigma_minus`` and ``sigma_plus``, each half weighted by its width) lies in [low, high]: the CDF
    whose inverse :func:`_draw` takes; a normal's where the two are equal."""
    sm, sp = _scaled_halves(sigma_minus, sigma_plus)
    total = sm + sp

    def cdf(x: float) -> np.ndarray:
        with np.errstate(divide="ignore", invalid="ignore"):
            left = 2 * sm / total * ndtr((x - value) / sigma_minus)
            right = sm / total + 2 * sp / total * (ndtr((x - value) / sigma_plus) - 0.5)
        return np.where(x < value, left, right)

    return cdf(high) - cdf(low)


def _scaled_halves(sigma_minus, sigma_plus) -> tuple[np.ndarray, np.ndarray]:
    """A split normal's half-widths divided by a power of two near the larger: the halves' weights and the inverse
    CDF's ratios are formed from these, exactly the same numbers where nothing overflows, and finite where
    2 sigma_plus or their sum would overflow (a sigma_plus of 1e308 drew every draw at the mode)."""
    _, exponent = np.frexp(np.maximum(sigma_minus, sigma_plus))
    scale = np.ldexp(1.0, exponent - 1)
    return sigma_minus / scale, sigma_plus / scale


def quantiles(y: np.ndarray, valid: np.ndarray, qs) -> list[np.ndarray]:
    """Linear-interpolation quantiles along axis 1 over the valid draws only, with numpy's arithmetic to
    the last bit: ``np.percentile``'s default (Hyndman & Fan 1996, method 7: position q (n - 1), and the
    interpolation a + (b - a) t written b - (b - a)(1 - t) from t = 1/2 on), and for q = 1/2 ``np.median``'s
    mean of the two middle draws of an even count, so that a caller's numpy on the same draws gives the
    same numbers."""
    ys = np.sort(np.where(valid.reshape(valid.shape + (1,) * (y.ndim - 2)), y, np.nan), axis=1)
    count = valid.sum(axis=1).reshape((-1, 1) + (1,) * (y.ndim - 2))
    res = []
    for q in qs:
        pos = np.maximum(count - 1, 0) * q
        lo = np.floor(pos).astype(np.intp)
        hi = np.minimum(lo + 1, np.maximum(count - 1, 0)).astype(np.intp)
        t = pos - lo
        a = np.take_along_axis(ys, lo, axis=1)
        b = np.take_along_axis(ys, hi, axis=1)
        with np.errstate(over="ignore", invalid="ignore"):
            v = np.where(t >= 0.5, b - (b - a) * (1 - t), a + (b - a) * t)
            if q == 0.5:
                middle = (a + b) / 2
                v = np.where((t == 0.5) & np.isfinite(middle), middle, v)
        res.append(np.where(count[:, 0] > 0, v[:, 0], np.nan))
    return res


COVARIANCE_BLOCK = 4_000_000   # draws x outputs held at once while the draws' covariance is summed
TAIL_SHARE = 0.5         # the limit of the heavy-tail threshold for many draws (see heavy_tailed)
TAIL_MARGIN = 0.49       # its margin at MIN_DRAWS draws, shrinking to 0 at TAIL_MARGIN_END draws
TAIL_MARGIN_END = 1e6
# Fewest draws that summarise a distribution: the ends of the 68.27 % interval are its 15.9th and
# 84.1st percentiles, which 100 normal draws place within about 0.15 sigma (the standard error of a
# quantile, sqrt(p (1 - p) / N) / f) with some 16 draws beyond each, and their standard deviation
# within 7 % (1 / sqrt(2 (N - 1))).  The heavy-tail test needs them too: its top sqrt(s) draws are
# then 10, which for a lognormal of sigma 1 hold more than 99 % of the squared deviations in 0.1 %
# of runs, for 1/sin^3 i (isotropic orientations) in about 4 runs in 5 (see heavy_tailed); with
# fewer, the skewed and the variance-free cannot be told apart.  A request may not ask for fewer;
# the user's own samples may be fewer (their length is theirs), and so may the draws kept after
# rejection: these are answered with a few_draws warning and without the heavy-tail test.
MIN_DRAWS = 100


def _run(calc, quantities, draws, statics, n, s, trail) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """The physics on the nominal point (column 0) and the draws: the outputs (n, 1 + s) + trail and
    which draws are valid (n, s): inside every input's domain, with every output finite."""
    valid = np.ones((n, s), dtype=bool)
    arrays = {}
    for name, q in quantities.items():
        d = draws[name]
        spec = calc.input(name)
        inside = spec.domain.contains(d)
        if spec.period is not None and not inside.all():
            # a cyclic input (an angle) drawn past its range is the same angle a whole number of turns back
            d = np.where(inside, d, spec.domain.low + np.mod(d - spec.domain.low, spec.period))
            inside = spec.domain.contains(d)
        valid &= inside
        d = np.where(inside, d, np.nan)
        col0 = _broadcast(q.value, (n,))[:, None]
        arrays[name] = np.concatenate([col0, d], axis=1).reshape((n, s + 1) + (1,) * len(trail))
    ys = _call(calc, _arguments(calc, arrays, statics), (n, s + 1) + trail)
    for y in ys.values():
        valid &= np.isfinite(y[:, 1:]).reshape(n, s, -1).all(axis=2)
    return ys, valid


def _draws_of(calc: Calculation, name: str, ys: Mapping[str, np.ndarray]) -> np.ndarray:
    """The draws of output ``name`` (n, s) + trail; a wrapping one unwrapped about its nominal value
    (each draw within half a period of it), so that its spread is taken on the circle, after undoing
    a joint fold with the output it turns with (``Output.turns_with``)."""
    output = calc.output(name)
    y = ys[name]
    d = y[:, 1:]
    if output.turns_with is not None and output.turns_with[0] in ys:
        partner, turn = output.turns_with
        yp = ys[partner]
        d = d - turn * _folds(yp[:, 1:], yp[:, :1], calc.output(partner).period)
    if output.period is not None:
        nominal = y[:, :1]
        ref = np.where(np.isfinite(nominal), nominal, 0.0)
        d = ref + _wrap(d - ref, output.period)
    return d


def _spread(d: np.ndarray, mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The mean and the variance (ddof 1) of the draws ``d`` (n, s) + trail where ``mask``.

    Taken about one of the draws (the first valid one), the shifted-data algorithm (Chan, Golub &
    LeVeque 1983, Am. Stat. 37, 242): draws that are all equal (an output no uncertain input moves)
    then have a variance of exactly 0, not the square of the rounding of their sum."""
    mask = np.broadcast_to(mask, d.shape)
    cnt = np.maximum(mask.sum(axis=1), 1)
    ref = np.take_along_axis(d, np.argmax(mask, axis=1)[:, None], axis=1)
    dev = np.where(mask, d - ref, 0.0)
    shift = dev.sum(axis=1) / cnt
    var = np.where(mask, (dev - shift[:, None]) ** 2, 0.0).sum(axis=1) / np.maximum(cnt - 1, 1)
    return ref[:, 0] + shift, var


def tail_threshold(count) -> np.ndarray:
    """The share of the squared deviations above which the top ceil(sqrt(s)) of ``count`` draws make
    the spread heavy-tailed (see :func:`heavy_tailed`): 1/2 + 0.49 (1 - log10(count / 100) / 4)^(1/2),
    from 0.99 at 100 draws to 1/2 at 10^6 and beyond."""
    decades = np.log10(np.maximum(count, MIN_DRAWS) / MIN_DRAWS) / np.log10(TAIL_MARGIN_END / MIN_DRAWS)
    return TAIL_SHARE + TAIL_MARGIN * np.sqrt(np.clip(1.0 - decades, 0.0, 1.0))


def heavy_tailed(d: np.ndarray, mask: np.ndarray, median: np.ndarray) -> np.ndarray:
    """Where the spread of the draws is carried by a few of them, so that their standard deviation
    describes those draws rather than the distribution (n,) + trail.  Meaningful from ``MIN_DRAWS``
    draws on: below, one draw of a normal often carries half the spread, and the engine does not ask.

    The statistic: the share of the sum of squared deviations from the median held by the top
    k = ceil(sqrt(s)) of them (s draws).  Why sqrt(s), and why the share tends to 1/2: k grows
    without bound while k/s -> 0 (the usual choice of how many order statistics describe a tail,
    as in Hill's estimator).  If |X - median| has a Pareto tail of index a, the squared
    deviations Y have index a/2, and the i-th largest of s of them is ~ (s/i)^(2/a).  At the
    boundary of a finite variance, a = 2, the top k then sum to ~ s ln k and all s to ~ s ln s, so
    with k = sqrt(s) the share tends to ln k / ln s = 1/2; a tail without a finite variance
    (a < 2: the sums are dominated by their largest terms) takes it to 1, and a finite variance
    (a > 2, or a lighter tail: normal, uniform, lognormal, chi-square) to 0.  So with many draws
    the test is "the top sqrt(s) hold more than half", ``TAIL_SHARE``.

    With fewer draws a skewed distribution with every moment still looks heavy-tailed in its top
    sqrt(s): the lognormal of sigma 1, the heaviest the test must pass, has at the top 10 % of 100
    draws a local tail index phi(z) / (1 - Phi(z)) = 1.75 < 2 (z = 1.28), 2.25 at the top 3.2 % of
    1000 draws and 3.4 at the top 0.1 % of 10^6.  The threshold therefore carries a margin that
    shrinks with the decades of draws, :func:`tail_threshold`: 0.99 at 100 draws, 0.93 at 1000,
    0.85 at 10^4, 0.75 at 10^5, 1/2 from 10^6.  Measured (20,000 seeded trials up to 1000 draws,
    fewer above): the lognormal of sigma 1 exceeds it in at most ~0.3 % of trials at any count
    (its 99.9th percentiles of the share: 0.990 at 100, 0.913 at 1000, 0.69 at 10^4, 0.39 at 10^5,
    0.20 at 10^6), a normal, a uniform and a chi-square of 3 degrees of freedom never (their
    maxima 0.86 at 100 draws and falling); a Cauchy exceeds it in ~95 % of trials at 1000 draws
    (its 5th percentile 0.934), more than 99 % from 2000, and masses from isotropic inclinations,
    1/sin^3 i with cos i uniform, in ~83 % at 100 draws and nearly always from 300.

    Rejected draws (outside ``mask``) count as deviations of 0; the threshold is taken at each
    system's number of kept draws."""
    s = d.shape[1]
    k = min(s, int(np.ceil(np.sqrt(s))))
    dev = np.where(mask, d - median[:, None], 0.0)
    sq = dev * dev
    top = np.partition(sq, s - k, axis=1)[:, s - k:].sum(axis=1)
    total = sq.sum(axis=1)
    kept = np.maximum(mask.sum(axis=1), 1)
    # draws that differ only by rounding (an output none of the uncertain inputs moves) are not a tail
    rounding = (64 * np.finfo(float).eps * median) ** 2 * kept
    return (top > tail_threshold(kept) * total) & (total > rounding)


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
    ys, valid = _run(calc, quantities, draws, statics, n, s, trail)
    nvalid = valid.sum(axis=1)
    rejected = (s - nvalid) / s          # a count over the draws, one rounding: 33 of 500 is 0.066 (1 - 0.934 is not)

    result = Result(outputs={}, method="monte_carlo", samples=s, seed=seed, rejected_fraction=rejected)
    if options.samples_asked and s != options.samples and any(q.samples is not None for q in quantities.values()):
        result.warnings.append(Warning(
            "samples_from_inputs", f"uncertainty.samples = {options.samples} is not used: the inputs given as "
                                   f"samples hold {s} draws each, which are used as they are, index by index"))
    for k in np.flatnonzero(nvalid == 0):
        result.failed[int(k)] = {"_inputs": ["every Monte Carlo draw fell outside the inputs' physical domains or "
                                             "gave a non-finite result"]}
    mask = valid.reshape(valid.shape + (1,) * len(trail))
    enough = (nvalid >= MIN_DRAWS).reshape((n,) + (1,) * len(trail))      # where the heavy-tail test can tell
    kept, scalar = {}, {}
    for o in calc.outputs:
        if o.name not in ys:
            continue
        d = _draws_of(calc, o.name, ys)
        med, low, high = quantiles(d, valid, (0.5, ONE_SIGMA_LOW, ONE_SIGMA_HIGH))
        _, var = _spread(d, mask)
        heavy = heavy_tailed(d, mask, med) & enough if s >= MIN_DRAWS else np.zeros(med.shape, dtype=bool)
        if heavy.any():
            var = np.where(heavy, np.nan, var)
            result.warnings.append(_no_sigma(o.name, heavy.reshape(n, -1).any(axis=1)))
        result.outputs[o.name] = {"value": med, "sigma": np.sqrt(var), "low": low, "high": high}
        if options.keep_draws:
            kept[o.name] = np.where(mask, d, np.nan)
        if not trail:
            scalar[o.name] = (d, var)
    _into_range(calc, result.outputs)
    if options.keep_draws:
        result.draws = kept
    if options.covariance and scalar:
        result.correlation = _draw_correlation(scalar, valid)
    elif options.covariance and trail:
        result.warnings.extend(_no_covariance(o.name) for o in calc.outputs if o.name in ys)
    if options.budget:
        result.budget = _monte_carlo_budget(calc, quantities, statics, options, draws, valid, ys, scalar,
                                            n, s, trail, result.warnings)
    if s < MIN_DRAWS:
        result.warnings[:0] = _few_draws(s, [name for name, q in quantities.items() if q.samples is not None])
    elif not enough.all():
        result.warnings.insert(0, _few_kept(s, (nvalid < MIN_DRAWS) & (nvalid > 0)))
    heavy = rejected > 0.05
    if np.any(heavy):
        result.warnings.append(Warning("draws_rejected", "more than 5 % of the Monte Carlo draws fell outside the "
                                       "inputs' physical domains or gave no finite result; the summary describes "
                                       "the truncated distribution", heavy))
    return result


def _into_range(calc: Calculation, outputs: dict[str, dict[str, np.ndarray]]) -> None:
    """A wrapping output's median brought into [0, period), its interval moved with it (so ``low``
    may lie below 0 or ``high`` above the period: the interval straddles the edge); an angle that
    turns with another (``Output.turns_with``) turns with it by as many turns as that one was moved
    by periods, so the pair stays one orbit."""
    turns = {o.name: np.floor(outputs[o.name]["value"] / o.period) for o in calc.outputs
             if o.name in outputs and o.period is not None and o.turns_with is None}
    for o in calc.outputs:
        if o.name not in outputs or o.period is None:
            continue
        entry = outputs[o.name]
        shift = 0.0
        if o.turns_with is not None and o.turns_with[0] in turns:
            shift = turns[o.turns_with[0]] * o.turns_with[1]
        shift = shift + np.floor((entry["value"] - shift) / o.period) * o.period
        for key in ("value", "low", "high"):
            entry[key] = entry[key] - shift


def _draw_correlation(scalar: Mapping[str, tuple[np.ndarray, np.ndarray]], valid: np.ndarray):
    """The outputs' correlation over the valid draws (Pearson, per system).  A wrapping output enters
    unwrapped about its nominal value, as its sigma does (the correlation in the plane tangent to
    the circle there); an output whose sigma is undefined gets NaN."""
    names = list(scalar)
    n, s = valid.shape
    cov = np.empty((n, len(names), len(names)))
    means = [_spread(d, valid)[0] for d, _ in scalar.values()]
    rows = max(1, COVARIANCE_BLOCK // (s * len(names)))     # systems per block: a bounded copy of the draws
    for a in range(0, n, rows):
        v = valid[a:a + rows]
        centred = np.stack([np.where(v, d[a:a + rows] - mean[a:a + rows, None], 0.0)
                            for (d, _), mean in zip(scalar.values(), means)], axis=2)     # (rows, s, outputs)
        cov[a:a + rows] = np.einsum("nsi,nsj->nij", centred, centred)
    cov /= np.maximum(valid.sum(axis=1) - 1, 1)[:, None, None]
    undefined = np.array([~np.isfinite(var) for _, var in scalar.values()]).T       # (n, k)
    diagonal = np.arange(len(names))
    cov[:, diagonal, diagonal] = np.where(undefined, np.nan, cov[:, diagonal, diagonal])
    return _correlation(names, cov)


def _monte_carlo_budget(calc, quantities, statics, options, draws, valid, ys, scalar, n, s, trail, warnings):
    """Each scalar output's variance shared among its inputs, estimated by holding each drawn input
    at its nominal value while the others keep their draws (common random numbers, so that the
    difference is not lost in sampling noise): share_i = (var - var with i held) / var.

    For a function additive in its inputs this is the linear share (df/dx_i sigma_i)^2 / var; with
    interactions the shares need not sum to 1, and an input that hardly matters may get a share
    slightly below 0 from sampling noise.  Asymmetric errors are drawn as split normals, as in the
    Monte Carlo itself.  Not given (a ``budget_not_given`` warning naming the output) for series
    outputs, and where some uncertain input is correlated with another, given as samples or as an
    isotropic inclination, none of which has a share of its own that holding it fixed would measure.
    One extra run of the physics per drawn input."""
    drawn = [name for name, q in quantities.items() if q.uncertain]
    correlated = any(a in drawn and b in drawn and rho != 0 for (a, b), rho in options.correlations.items())
    given = [o.name for o in calc.outputs if o.name in ys]
    if trail or correlated or any(quantities[name].samples is not None or quantities[name].isotropic
                                  for name in drawn):
        warnings.extend(_no_budget(name) for name in given)
        return None
    budget: dict[str, dict[str, np.ndarray]] = {name: {} for name in scalar}
    for held in drawn:
        fixed = dict(draws)
        fixed[held] = np.broadcast_to(_broadcast(quantities[held].value, (n,))[:, None], (n, s))
        ys_held, valid_held = _run(calc, quantities, fixed, statics, n, s, trail)
        both = valid & valid_held
        for name, (d, var) in scalar.items():
            _, full = _spread(d, both)
            _, rest = _spread(_draws_of(calc, name, ys_held), both)
            share = np.where(full > 0, (full - rest) / np.where(full > 0, full, 1.0), np.nan)
            budget[name][held] = np.where(np.isfinite(var), share, np.nan)
    # an output with no spread in any system (an input it does not depend on) has no budget, as in the linear method
    return {name: shares for name, shares in budget.items()
            if any(np.isfinite(share).any() for share in shares.values())}
