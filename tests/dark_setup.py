"""Shared constants of the dark-profile tests (tests/test_dark*.py)."""

import numpy as np
from profile_setup import DARK_SHAPES

from halo.physics.cosmology import rho_crit
from halo.physics.dark import DARK_PROFILES

RHO_C = rho_crit()  # Planck18, z = 0
X_GRID = np.logspace(-4.0, 3.0, 15)

#: one example per profile for the (M200, c200), log-slope and truncation tests, by class
SHAPES = {DARK_PROFILES[name]: shape for name, shape in DARK_SHAPES.items()}


def rel(a, b):
    return np.max(np.abs(np.asarray(a, dtype=float) / np.asarray(b, dtype=float) - 1.0))
