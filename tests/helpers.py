"""Small helpers shared by the tests."""

import numpy as np


def rel_err(actual, expected, scale=None):
    """Largest error relative to the largest magnitude of the expected signal."""
    actual = np.asarray(actual, dtype=float)
    expected = np.asarray(expected, dtype=float)
    scale = np.max(np.abs(expected)) if scale is None else scale
    return float(np.max(np.abs(actual - expected)) / scale)
