"""Shared fixtures of the test suite."""

from __future__ import annotations

import numpy as np
import pytest


def cents_between(est_hz, ref_hz):
    """Signed pitch difference ``1200 * log2(est / ref)`` in cents (NaN stays NaN)."""
    est = np.asarray(est_hz, dtype=np.float64)
    ref = np.asarray(ref_hz, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        return 1200.0 * np.log2(est / ref)


@pytest.fixture(scope="session")
def cents():
    """The :func:`cents_between` helper, as a fixture."""
    return cents_between
