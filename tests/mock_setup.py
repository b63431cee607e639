"""Shared set-up of the mock tests: the Plummer test satellite and a helper that evaluates a
profile on a log grid."""

import jax.numpy as jnp
import numpy as np

A = 0.03  # Plummer scale radius [kpc]
M_STARS = 2e3  # [Msun]

SAT = {
    "name": "Mock I",
    "ra_deg": 150.0,
    "dec_deg": -30.0,
    "distance_kpc": 40.0,
    "r_half_pc": 30.0,
    "ellipticity": 0.0,
    "position_angle_deg": 0.0,
    "light_profile": "plummer",
    "stellar_mass_msun": M_STARS,
}


def on_grid(fn, x, n=600):
    """fn at x by linear interpolation in ln x of fn on n log-spaced points (relative error ~1e-5
    for these smooth profiles; one compiled shape for every call)."""
    grid = np.geomspace(x.min(), x.max(), n)
    return np.interp(np.log(x), np.log(grid), np.asarray(fn(jnp.asarray(grid))))
