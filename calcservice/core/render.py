"""The engine's result as the wire contract's dicts: one system's response, or the parts of a
batch's rows (results, warnings, uncertainty) picked by system from one engine call."""

from __future__ import annotations

from functools import lru_cache
from typing import Mapping

import numpy as np

from .. import __version__
from ..constants import constants_used
from ..engine import Result
from ..registry import Calculation, Warning
from ..units import factor
from .parse import Parsed
from .problems import invalid
from .schemas import SMALLEST_NORMAL


def provenance(calc: Calculation) -> dict:
    """Version, formulas, constants, references and conventions of a calculation: built from the
    declaration once, copied per answer (a caller may change its copy)."""
    formulas, constants, references, conventions, sources = _provenance_parts(calc)
    return {
        "version": __version__,
        "calculation": calc.name,
        "formulas": dict(formulas),
        "formula_sources": {k: list(v) for k, v in sources.items()},
        "constants": {k: dict(v) for k, v in constants.items()},
        "references": list(references),
        "conventions": dict(conventions),
    }


@lru_cache(maxsize=None)
def _provenance_parts(calc: Calculation) -> tuple:
    # each formula's sources as 0-based indices into the references
    sources = {o.name: tuple(calc.references.index(r) for r in o.references) for o in calc.outputs if o.references}
    return ({o.name: o.formula for o in calc.outputs if o.formula}, constants_used(calc.constants),
            tuple(calc.references), dict(calc.conventions), sources)


def clean_array(a: np.ndarray) -> list:
    """An array as (nested) lists of JSON-safe floats: non-finite numbers become None."""
    a = np.asarray(a, dtype=float)
    finite = np.isfinite(a)
    if finite.all():
        return a.tolist()
    obj = a.astype(object)
    obj[~finite] = None
    return obj.tolist()


def in_unit(values: np.ndarray, k, names: list[str], units: list[str]) -> np.ndarray:
    """``values`` times the factor ``k`` to the units asked for; a 422 naming ``units.NAME`` where a finite
    number leaves a double there (an answer in '1e-308 au' of 1e10 au), or a normal one falls below
    the smallest normal double (1e-300 au in '1e10 au': 0 or a number that lost its digits), never a
    silent null or 0.  ``names`` and ``units`` give the output and its unit of each leading row of ``values``."""
    with np.errstate(over="ignore", under="ignore", invalid="ignore"):
        out = values * k
        lost, shrunk = beyond_range(values, out)
    if lost.any() or shrunk.any():
        over = lost.any()
        row = np.nonzero((lost if over else shrunk).reshape(len(names), -1).any(axis=1))[0][0]
        raise invalid(unit_range_error(names[row], units[row], over))
    return out


def beyond_range(values: np.ndarray, out: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Where ``out`` (``values`` in another unit) left a double: a finite number beyond its range, and a
    normal one below the smallest normal double."""
    return (np.isfinite(values) & ~np.isfinite(out),
            (np.abs(out) < SMALLEST_NORMAL) & (np.abs(values) >= SMALLEST_NORMAL))


def unit_range_error(name: str, unit: str, over: bool) -> dict[str, list[str]]:
    """The field error of an output whose answer leaves a double in the unit asked for it."""
    if over:
        return {f"units.{name}": [f"{name} in {unit!r} is beyond the range of a double: ask for a larger unit"]}
    return {f"units.{name}": [f"{name} in {unit!r} is below the smallest normal double (about 2.2e-308), where "
                              "its digits are lost: ask for a smaller unit"]}


@lru_cache(maxsize=4096)
def output_factors(calc: Calculation, names: tuple[str, ...], units: tuple) -> tuple[tuple, tuple]:
    """The unit of each output as asked for (else its canonical one) and the factor to it."""
    asked = dict(units)
    out_units = tuple(asked.get(name, calc.output(name).unit) for name in names)
    factors = tuple(factor(calc.output(name).unit, unit) if unit != calc.output(name).unit else 1.0
                    for name, unit in zip(names, out_units))
    return out_units, factors


def output_entries(calc: Calculation, result: Result, units: Mapping[str, str]) -> list[tuple[str, bool, list[dict]]]:
    """Each output as (name, is_series, [its entry {"value", "sigma", ..., "unit"} for each system]),
    in the unit asked for: converted and cleaned once for all systems of an engine call."""
    names = tuple(result.outputs)
    out_units, factors = output_factors(calc, names, tuple(sorted(units.items())))
    table: list = [None] * len(names)
    # the single-valued outputs with one set of members as one flat array: one conversion and one
    # clean for a dozen outputs, not a few dozen array operations
    alike: dict[tuple, list[int]] = {}
    for i, name in enumerate(names):
        members = result.outputs[name]             # the engine gives "value" first
        if members["value"].ndim == 1:
            alike.setdefault(tuple(members), []).append(i)
    for keys, outputs in alike.items():
        n = len(result.outputs[names[outputs[0]]]["value"])
        block = np.concatenate([result.outputs[names[i]][key] for i in outputs for key in keys])
        scale = [factors[i] for i in outputs]
        if any(k != 1.0 for k in scale):                  # an output unit asked for
            block = in_unit(block, np.repeat(scale, len(keys) * n), [names[i] for i in outputs],
                            [out_units[i] for i in outputs])
        for i, columns in zip(outputs, clean_array(block.reshape(len(outputs), len(keys), n))):
            table[i] = (names[i], False, _entries(keys, columns, out_units[i]))
    for i, name in enumerate(names):
        if table[i] is None:                  # a series output: each system's entry holds lists
            members = result.outputs[name]
            columns = [clean_array(in_unit(np.asarray(members[key], dtype=float), factors[i], [name],
                                           [out_units[i]])) for key in members]
            table[i] = (name, True, _entries(tuple(members), columns, out_units[i]))
    return table


def _entries(keys: tuple, columns: list[list], unit: str) -> list[dict]:
    if keys == ("value", "sigma"):
        return [{"value": v, "sigma": s, "unit": unit} for v, s in zip(*columns)]
    return [{**dict(zip(keys, numbers)), "unit": unit} for numbers in zip(*columns)]


def warning_entries(warnings: list[Warning], applies: tuple[bool, ...]) -> list[dict]:
    """The warnings that apply to one system, those of one code and message that differ only in
    the field they are about reported once, naming every such field."""
    grouped: dict[tuple[str, str], list[str]] = {}
    for w, hit in zip(warnings, applies):
        if hit:
            subjects = grouped.setdefault((w.code, w.message), [])
            if w.subject is not None and w.subject not in subjects:
                subjects.append(w.subject)
    return [{"code": code, "message": message.replace("{subject}", ", ".join(subjects)), "fields": subjects}
            if subjects else {"code": code, "message": message} for (code, message), subjects in grouped.items()]


def warning_mask(w: Warning, n: int) -> np.ndarray:
    """The systems (of an engine call over ``n``) a warning applies to."""
    if w.where is None:
        return np.ones(n, dtype=bool)
    return np.resize(np.asarray(w.where, dtype=bool).reshape(-1), n)


def uncertainty_of(result: Result, index: int) -> dict:
    """How system ``index``'s uncertainty was found: the method, and for Monte Carlo its draws."""
    if result.method == "linear":
        return {"method": "linear"}
    return {"method": "monte_carlo", "samples": result.samples, "seed": result.seed,
            "rejected_fraction": float(result.rejected_fraction[index])}


class Rendering:
    """What every system of one engine call shares, computed once (outputs converted and cleaned,
    warnings, extras); the methods pick one system's part."""

    def __init__(self, parsed: Parsed, result: Result):
        calc = parsed.calc
        self.parsed, self.result = parsed, result
        self.n = parsed.count
        table = output_entries(calc, result, parsed.output_units)
        scalars = [(name, entries) for name, is_series, entries in table if not is_series]
        for name, entries in scalars:
            if result.budget and name in result.budget:
                terms = list(result.budget[name])
                shares = clean_array(np.stack([result.budget[name][t] for t in terms], axis=-1)) if terms else []
                for entry, row in zip(entries, shares or [[]] * len(entries)):
                    entry["budget"] = dict(zip(terms, row))
        self.series_outputs = [(name, entries) for name, is_series, entries in table if is_series]
        # every system's results at once: one zip per system rather than a loop over the outputs
        names = [name for name, _ in scalars]
        self.scalars = ([dict(zip(names, row)) for row in zip(*[entries for _, entries in scalars])] if scalars
                        else [{} for _ in range(self.n)])
        self.extras = (calc.extra(parsed.quantities, parsed.statics, parsed.options, time_format=parsed.time_format)
                       if calc.extra else None)
        self.series = {calc.input(name).label or name: {"value": clean_array(parsed.times.get(name, values)),
                                                        "unit": calc.input(name).unit}
                       for name, values in parsed.series.items()}
        masks = [warning_mask(w, self.n).tolist() for w in result.warnings]
        self.applies = list(zip(*masks)) if masks else [()] * self.n
        self._warnings: dict[tuple, list[dict]] = {}

    def results(self, index: int) -> dict:
        """System ``index``'s results: each output's entry, series outputs under ``series``, extras."""
        results = self.scalars[index]
        if self.series_outputs:
            results["series"] = {**self.series, **{name: entries[index] for name, entries in self.series_outputs}}
        if self.extras:
            results.update(self.extras[index])
        return results

    def warnings(self, index: int) -> list[dict]:
        """System ``index``'s warnings, built once per distinct set (a catalogue's systems share a few)."""
        applies = self.applies[index]
        entries = self._warnings.get(applies)
        if entries is None:
            entries = self._warnings[applies] = warning_entries(self.result.warnings, applies)
        return list(entries)

    def uncertainty(self, index: int) -> dict:
        return uncertainty_of(self.result, index)

    def rows(self, shared: dict, time_format: str, echo: bool) -> list[dict]:
        """Every system's row of a rows batch: its results and warnings, its uncertainty where it
        differs from the batch's ``shared`` one, its inputs when ``echo`` asks for them."""
        whole = self.series_outputs or self.extras
        results = [self.results(k) for k in range(self.n)] if whole else self.scalars
        rows = [{"results": r, "warnings": self.warnings(k)} for k, r in enumerate(results)]
        if self.result.correlation is not None:
            for k, row in enumerate(rows):
                row["correlation"] = self.correlation(k)
        # a linear result's uncertainty is the same for every system: compared with the batch's once
        linear = self.result.method == "linear"
        first = self._own_uncertainty(0, shared) if linear else None
        for k, row in enumerate(rows):
            own = dict(first) if linear else self._own_uncertainty(k, shared)
            if own:
                row["uncertainty"] = own
        if echo:
            for k, row in enumerate(rows):
                row["inputs"] = self.parsed.echo(k)
                if self.parsed.time_format != time_format:
                    row["time_format"] = self.parsed.time_format
        return rows

    def _own_uncertainty(self, index: int, shared: dict) -> dict:
        """What of system ``index``'s uncertainty differs from the batch's ``shared`` one."""
        return {key: v for key, v in self.uncertainty(index).items() if shared.get(key) != v}

    def correlation(self, index: int) -> dict:
        """System ``index``'s correlation matrix of its outputs (null where an output has no sigma)."""
        names, matrices = self.result.correlation
        return {"outputs": list(names), "matrix": clean_array(matrices[index])}

    def response(self, index: int = 0) -> dict:
        """One system's full answer, as a single request gets it."""
        out = {
            "calculation": self.parsed.calc.name,
            "results": self.results(index),
            "uncertainty": self.uncertainty(index),
            "inputs": self.parsed.echo(index),
            "warnings": self.warnings(index),
            "provenance": provenance(self.parsed.calc),
        }
        if self.result.correlation is not None:
            out["correlation"] = self.correlation(index)
        if self.parsed.time_format == "mjd":
            out["time_format"] = "mjd"
        return out
