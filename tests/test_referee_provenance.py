"""The constants a calculation's provenance lists are the constants its code uses: every constant that the
physics (its function, Jacobian and extra members) reads is listed, and every constant listed is read, or
enters by a stated definition (the parsec of a parallax, the Julian year of a unit in yr, the au and year
behind 1 au/yr, the solar radius of a warning on stellar radii).

The code is read, not run: the names each function refers to, followed into the calcservice functions it
calls, with module-level numbers (a coefficient built from GM_SUN and SECONDS_PER_DAY) traced through their
assignments to the constants of calcservice.constants.
"""

from __future__ import annotations

import ast
import re
import inspect
import sys
import types

import calcservice.constants as K
from calcservice.registry import calculations

#: the plain floats of calcservice.constants and the published constant each one is
FLOATS = {"GM_SUN": "GM_sun", "R_SUN": "R_sun", "L_SUN": "L_sun", "AU": "au", "PARSEC": "pc", "G": "G",
          "M_SUN": "M_sun", "M_H": "m_H", "M_U": "m_u", "K_B": "k_B", "C_LIGHT": "c", "JULIAN_YEAR": "julian_year",
          "AU_KM": "au", "C_LIGHT_KM_S": "c", "R_SUN_KM": "R_sun", "SECONDS_PER_DAY": "day",
          "DAYS_PER_JULIAN_YEAR": "julian_year", "KM_S_PER_AU_PER_YEAR": "au_per_julian_year"}
#: a derived constant lists the constants it is built from
SOURCES = {"au_per_julian_year": {"au", "julian_year"}}
#: constants listed without being read as a number, each for a stated reason
BY_DEFINITION = {
    "visual": {"pc"}, "photocentre": {"pc"}, "orbital-parallax": {"pc"},    # 1 au at 1 pc subtends 1 arcsec
    "shell-distance": {"pc"}, "shell-forecast": {"pc"},
    "mass-loss-period-change": {"julian_year"},     # the yr of s/yr and solMass/yr
    "collision": {"R_sun"},                          # stagnation point against the stellar radii (a warning)
}

_assignments: dict[str, dict[str, set[str]]] = {}


def _module_assignments(mod) -> dict[str, set[str]]:
    if mod.__name__ not in _assignments:
        found = {}
        for node in ast.parse(inspect.getsource(mod)).body:
            if isinstance(node, (ast.Assign, ast.AnnAssign)) and node.value is not None:
                names = {n.id for n in ast.walk(node.value) if isinstance(n, ast.Name)}
                for t in (node.targets if isinstance(node, ast.Assign) else [node.target]):
                    if isinstance(t, ast.Name):
                        found[t.id] = names
        _assignments[mod.__name__] = found
    return _assignments[mod.__name__]


def _constants_of_name(name, mod, seen) -> set[str]:
    if name in FLOATS and getattr(mod, name, None) is getattr(K, name):
        return {FLOATS[name]}
    out = set()
    if (mod.__name__, name) not in seen and name in _module_assignments(mod):
        seen.add((mod.__name__, name))
        for n in _module_assignments(mod)[name]:
            out |= _constants_of_name(n, mod, seen)
    return out


def _code_objects(co):
    yield co
    for c in co.co_consts:
        if isinstance(c, types.CodeType):
            yield from _code_objects(c)


def _ours(obj) -> bool:
    return isinstance(obj, types.FunctionType) and obj.__module__.startswith("calcservice")


def constants_read(fn, seen=None) -> set[str]:
    """The published constants ``fn`` reads, directly or through the calcservice functions it calls."""
    seen = set() if seen is None else seen
    if fn in seen:
        return set()
    seen.add(fn)
    mod = sys.modules[fn.__module__]
    names = {n for co in _code_objects(fn.__code__) for n in co.co_names}
    out = set()
    for n in names:
        obj = mod.__dict__.get(n)
        out |= _constants_of_name(n, mod, set())
        if _ours(obj):
            out |= constants_read(obj, seen)
        elif isinstance(obj, types.ModuleType) and obj.__name__.startswith("calcservice"):
            for m in names:      # attributes read from the module (kepler.eccentric_anomaly, phys.AU_IN_SOLAR_RADII)
                sub = getattr(obj, m, None)
                if _ours(sub):
                    out |= constants_read(sub, seen)
                out |= _constants_of_name(m, obj, set())
    return out


def test_the_scan_sees_a_constant_through_a_derived_coefficient():
    from calcservice.physics import spectroscopic
    # MASS_FUNCTION_COEFFICIENT = SECONDS_PER_DAY * 1e9 / (TWO_PI * GM_SUN)
    assert constants_read(spectroscopic.mass_function) == {"day", "GM_sun"}


def test_each_calculation_lists_exactly_the_constants_it_uses():
    wrong = {}
    for name, calc in calculations().items():
        read = set()
        for fn in (calc.function, calc.jacobian, calc.extra):
            if fn is not None:
                read |= constants_read(fn)
        for derived, sources in SOURCES.items():
            if derived in read:
                read |= sources
        listed = set(calc.constants)
        missing = read - listed
        unused = listed - read - BY_DEFINITION.get(name, set())
        if missing or unused:
            wrong[name] = {"read but not listed": sorted(missing), "listed but not read": sorted(unused)}
    assert wrong == {}


def test_the_reasons_by_definition_still_hold():
    calcs = calculations()
    for name, extra in BY_DEFINITION.items():
        calc = calcs[name]
        assert extra <= set(calc.constants), name
        units = {i.unit for i in calc.inputs} | {o.unit for o in calc.outputs}
        if "pc" in extra:
            assert "pc" in units and "mas" in units, name
        if "julian_year" in extra:
            assert any("yr" in unit for unit in units), name


#: a convention and what a calculation must have (inputs or outputs, any of) for it to apply
CONVENTION_NEEDS = {
    "radial_velocity": {"k1", "rv1"},
    "time": {"t_periastron", "formation_epoch", "times", "observation_date"},
    "light_travel_time": {"light_travel_time"},
    "position_angle": {"position_angle"},
    "node": {"node"},
    "inclination": {"inclination"},
    "parallax": {"parallax"},
    "kepler": {"total_mass"},
    "sky_axes": {"A", "node"},
    "mass_ratio": {"mass_ratio"},
    "phase": {"phase", "mid_eclipse_phase1"},
}


def test_each_calculation_states_only_the_conventions_that_apply_to_it():
    stray = {}
    for name, calc in calculations().items():
        names = {i.name for i in calc.inputs} | {o.name for o in calc.outputs}
        for key, text in calc.conventions.items():
            needs = CONVENTION_NEEDS.get(key)
            if needs is not None and not needs & names:
                stray.setdefault(name, []).append(key)
            # a semi-amplitude named in a convention is an input of the calculation
            for k in ("k1", "k2"):
                if re.search(rf"\b{k}\b", text, re.IGNORECASE) and k not in names:
                    stray.setdefault(name, []).append(f"{key} names {k}")
    assert stray == {}


def test_each_calculation_defines_the_symbols_of_its_formulas():
    # the formulas write P, K1, e, i, Mdot1, a''...: the "symbols" convention says which input or output each is
    problems = {}
    for name, calc in calculations().items():
        text = calc.conventions.get("symbols", "")
        names = {i.name for i in calc.inputs} | {o.name for o in calc.outputs}
        named = set(re.findall(r"= ([a-z][a-z0-9_]*[a-z0-9])\b", text))
        stale = {n for n in named if "_" in n or n in names} - names
        words = set(re.findall(r"[A-Za-z][A-Za-z0-9_]*", text))
        missing = {i.name for i in calc.inputs if i.required and i.kind == "quantity"} - words
        if stale or missing or not text:
            problems[name] = {"not inputs or outputs": sorted(stale), "required inputs not named": sorted(missing)}
    assert problems == {}
