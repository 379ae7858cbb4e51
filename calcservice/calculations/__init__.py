"""Declarations of every calculation; importing this package fills the registry.

To add a calculation, write its physics function under ``calcservice/physics/`` and its
declaration in one of these modules (or a new one: it is imported automatically, after
the areas below, which set the order of ``GET /v1/calculations``).
"""

import importlib
import pkgutil

_FIRST = ["spectroscopic", "astrometric", "combined", "orbit", "winds"]

for _module in _FIRST + sorted(m.name for m in pkgutil.iter_modules(__path__) if m.name not in _FIRST):
    if _module != "common":
        importlib.import_module(f"{__name__}.{_module}")
