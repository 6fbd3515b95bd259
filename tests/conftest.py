"""Shared helpers for the test suite (small grids: the whole suite runs in minutes)."""

import os
import tempfile

import astropy.units as u
import numpy as np
import pytest

import rtrace

# The series cache's signing key goes to a folder of the test run's own, not the user's home.
os.environ.setdefault("RTRACE_KEY_DIR", tempfile.mkdtemp(prefix="rtrace-key-"))


def uniform_snapshot(shape, temperature, ne, cell_pc=0.01, dtype=np.float64, origin=None):
    """A snapshot with uniform temperature (K) and electron density (cm-3)."""
    t = np.full(shape, float(temperature))
    n = np.full(shape, float(ne))
    return rtrace.Snapshot.from_arrays(
        temperature=t * u.K, cell_size=cell_pc * u.pc, electron_density=n * u.cm**-3, dtype=dtype, origin=origin
    )


@pytest.fixture
def rng():
    return np.random.default_rng(12345)
