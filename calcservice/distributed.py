"""Catalogues past one machine: the engine over dask arrays (the optional ``dask`` extra).

The service is stateless, so one machine's catalogue work scales out by running more workers
behind a load balancer (see DEPLOYMENT.md).  For a catalogue too large for one process (or one
request), :func:`evaluate_dask` runs a calculation over chunked dask arrays: each chunk of systems
is one call of :func:`calcservice.engine.evaluate` (the physics function once on that chunk's
arrays), scheduled by dask on threads, processes or a ``dask.distributed`` cluster.  Nothing
here is home-made scheduling: it is ``dask.array.map_blocks``.

Example (a local cluster; ``Client("tcp://scheduler:8786")`` for a real one)::

    import dask.array as da
    from dask.distributed import Client, LocalCluster
    from calcservice.distributed import evaluate_dask

    client = Client(LocalCluster(n_workers=2))
    n = 10_000_000
    values = {"period": da.random.uniform(2, 400, n, chunks=250_000),
              "k1": da.random.uniform(15, 90, n, chunks=250_000),
              "k2": da.random.uniform(40, 140, n, chunks=250_000),
              "eccentricity": 0.3, "inclination": 70.0}
    sigmas = {"period": 0.01, "k1": 0.3, "k2": 0.4, "eccentricity": 0.01, "inclination": 1.0}
    out = evaluate_dask("sb2", values, sigmas)
    m1, m1_sigma = out.outputs["m1"]["value"], out.outputs["m1"]["sigma"]   # lazy dask arrays
    m1.mean().compute()                      # or out.compute() for numpy arrays of everything

Inputs are in each input's canonical unit (the calculation's declaration says which: days,
km/s, degrees, ...); a scalar means "the same for every system"; a ``(sigma_minus, sigma_plus)``
pair of arrays gives asymmetric errors.  A system whose inputs fail a domain or a declared
constraint, or whose sigma is below 0 or not finite, has NaN in every output and True in ``failed``.  Monte Carlo chunks all draw with ``seed``: the engine
draws every system of a call from the same standard variates, so a system's numbers are those of the
in-process engine (or of one request) with that seed, whatever the chunking.
Series inputs (e.g. ephemeris times) are not supported here: use the batch endpoint.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

from .engine import Measured, Options, evaluate
from .registry import Calculation, get


@dataclass
class DaskOutputs:
    """Lazy outputs: ``outputs[name]["value" | "sigma" | "low" | "high"]`` and ``failed``, dask arrays
    over the systems."""

    outputs: dict[str, dict[str, Any]]
    failed: Any

    def compute(self, **kwargs) -> tuple[dict[str, dict[str, np.ndarray]], np.ndarray]:
        """Everything in one pass of the scheduler: (outputs as numpy arrays, failed)."""
        import dask
        outputs, failed = dask.compute(self.outputs, self.failed, **kwargs)
        return outputs, failed


def _as_dask(x, chunks):
    import dask.array as da
    if isinstance(x, da.Array):
        return x.rechunk(chunks)
    return da.from_array(np.broadcast_to(np.asarray(x, dtype=float), (sum(chunks[0]),)), chunks=chunks)


def evaluate_dask(name: str | Calculation, values: Mapping[str, Any], sigmas: Mapping[str, Any] | None = None,
                  *, statics: Mapping[str, Any] | None = None, method: str = "linear", samples: int = 10_000,
                  seed: int = 0, correlations: Mapping[tuple[str, str], float] | None = None) -> DaskOutputs:
    """Run calculation ``name`` over dask arrays of systems, one engine call per chunk.

    ``values``: input name -> dask array (1-D, one entry per system), numpy array or number, in the
    input's canonical unit.  ``sigmas``: input name -> 1-sigma error(s) of the same forms, or a pair
    (sigma_minus, sigma_plus).  ``statics``: choice and integer inputs (one value for all systems).
    ``method``, ``samples``, ``seed`` and ``correlations`` ({(a, b): rho}) as for the engine's
    :class:`~calcservice.engine.Options`.
    """
    import dask.array as da

    calc = get(name) if isinstance(name, str) else calc_or_raise(name)
    sigmas = dict(sigmas or {})
    statics = dict(statics or {})
    unknown = (set(values) | set(sigmas) | set(statics)) - {i.name for i in calc.inputs}
    if unknown:
        raise ValueError(f"{calc.name} has no input(s) {', '.join(sorted(unknown))}")
    # a correlation of an input not given would have no effect, without a word (the engine refuses a method or a
    # count of draws it does not take)
    absent = sorted({nm for pair in (correlations or {}) for nm in pair} - set(values))
    if absent:
        raise ValueError(f"correlations name {', '.join(absent)}, not among the inputs given in values")
    if any(i.kind == "series" for i in calc.inputs if i.name in values or i.name in statics):
        raise ValueError("series inputs are not supported on dask arrays; use the batch endpoint")
    arrays = [v for v in values.values() if isinstance(v, da.Array)]
    if not arrays:
        raise ValueError("give at least one input as a dask array (the systems to spread over workers)")
    chunks = arrays[0].chunks[:1]

    names = list(values)
    columns, layout = [], []            # layout: (name, part) for each column handed to the blocks
    for nm in names:
        columns.append(_as_dask(values[nm], chunks))
        layout.append((nm, "value"))
        s = sigmas.get(nm)
        if s is None:
            continue
        if isinstance(s, tuple):
            columns += [_as_dask(s[0], chunks), _as_dask(s[1], chunks)]
            layout += [(nm, "sigma_minus"), (nm, "sigma_plus")]
        else:
            columns.append(_as_dask(s, chunks))
            layout.append((nm, "sigma"))
    options = dict(method=method, samples=samples, correlations=dict(correlations or {}))

    # which outputs (and summaries) the inputs determine: one system, computed here
    probe = _block(*[np.asarray(c[:1].compute()) for c in columns], calc=calc, layout=layout, statics=statics,
                   options=options, seed=seed, summaries=None)
    keys = probe                        # [(output, "value" | "sigma" | ...), ...]
    stacked = da.map_blocks(_block, *columns, calc=calc, layout=layout, statics=statics, options=options,
                            seed=seed, summaries=keys, dtype=float, new_axis=1,
                            chunks=(chunks[0], (len(keys) + 1,)), meta=np.empty((0, 0)))
    outputs: dict[str, dict[str, Any]] = {}
    for j, (out, key) in enumerate(keys):
        outputs.setdefault(out, {})[key] = stacked[:, j]
    return DaskOutputs(outputs, stacked[:, len(keys)] > 0)


def calc_or_raise(calc) -> Calculation:
    if not isinstance(calc, Calculation):
        raise TypeError("name must be a calculation name or a registry.Calculation")
    return calc


def _block(*columns, calc: Calculation, layout, statics, options, seed, summaries, block_info=None):
    """One chunk of systems through the engine: a (systems, outputs x summaries + 1) array whose
    last column flags the failed systems; with ``summaries=None`` the list of (output, summary) instead."""
    keys = summaries
    parts: dict[str, dict[str, np.ndarray]] = {}
    for (nm, part), col in zip(layout, columns):
        parts.setdefault(nm, {})[part] = np.asarray(col, dtype=float)
    quantities = {}
    for nm, p in parts.items():
        v = p["value"]
        if "sigma" in p:
            quantities[nm] = Measured.normal(v, p["sigma"])
        elif "sigma_minus" in p:
            quantities[nm] = Measured(v, p["sigma_minus"], p["sigma_plus"])
        else:
            quantities[nm] = Measured.exact(v)
    result = evaluate(calc, quantities, statics, Options(seed=seed, **options))
    if keys is None:
        return [(o.name, key) for o in calc.outputs if o.name in result.outputs for key in result.outputs[o.name]]
    n = len(next(iter(parts.values()))["value"])
    out = np.full((n, len(keys) + 1), np.nan)
    for j, (o, key) in enumerate(keys):
        if o in result.outputs:
            out[:, j] = result.outputs[o][key]
    failed = np.zeros(n, dtype=bool)
    failed[list(result.failed)] = True
    out[failed, :-1] = np.nan
    out[:, -1] = failed
    return out
