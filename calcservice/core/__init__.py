"""The calculation core, without HTTP: the wire contract parsed for N systems, the engine called,
the result rendered to dicts.  The HTTP edge (:mod:`calcservice.api`), the command line and the
library all come through here, so a calculation behaves the same everywhere.

    >>> from calcservice.core import compute, compute_batch
    >>> compute("sb1", {"period": 3.4172, "k1": {"value": 61.4, "sigma": 0.9}, "eccentricity": 0})
    >>> compute_batch("sb1", {"columns": {"period": [3.41, 12.9], "k1": [61.4, 18.2], "eccentricity": 0}})

Modules, from the top down: :mod:`.single` (one system) and :mod:`.batch` (many) call
:mod:`.parse` (request to :class:`~calcservice.engine.Measured` arrays, with :mod:`.schemas`),
the engine, then :mod:`.render` (result to dicts); :mod:`.problems` is the error every layer raises.
"""

from .batch import compute_batch
from .parse import find
from .problems import Problem
from .single import compute

__all__ = ["compute", "compute_batch", "find", "Problem"]
