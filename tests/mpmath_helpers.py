"""What the tests against 50-digit mpmath references share: the working precision and the relative error."""

import mpmath as mp
import pytest


def precision(digits: int):
    """An autouse fixture holding mpmath at ``digits`` significant digits for every test of the module that
    binds it (``working_precision = precision(50)``), whatever another module set: mpmath's precision is global."""
    @pytest.fixture(autouse=True)
    def working_precision():
        with mp.workdps(digits):
            yield
    return working_precision


def relative_error(value, reference) -> float:
    """|value - reference| / |reference| of a double against an mpmath reference (|value| where the reference is 0)."""
    reference = mp.mpf(reference)
    return float(abs((mp.mpf(float(value)) - reference) / reference)) if reference != 0 else abs(float(value))
