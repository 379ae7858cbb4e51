"""Declarations of every calculation; importing this package fills the registry.

To add a calculation, write its physics function under ``calcservice/physics/`` and its
declaration in one of these modules (or a new one, imported below).
"""

import importlib
import pkgutil

for _module in sorted(m.name for m in pkgutil.iter_modules(__path__)):
    importlib.import_module(f"{__name__}.{_module}")
