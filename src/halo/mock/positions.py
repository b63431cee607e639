"""Star positions drawn from the light profile: radii by inverse transform, isotropic directions.

The line of sight is the z axis; (x, y) is the plane of the sky.
"""

import functools
import math
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from halo.core.numerics import bisect
from halo.mock.blocks import blockwise

__all__ = ["Positions", "log_radius_grid", "sample_positions"]

_LN10 = math.log(10.0)


class Positions(NamedTuple):
    """Star positions [kpc] relative to the centre; z is along the line of sight."""

    x: np.ndarray
    y: np.ndarray
    z: np.ndarray
    r: np.ndarray  #: 3D radius
    R: np.ndarray  #: projected radius sqrt(x^2 + y^2)


def log_radius_grid(light, lo_dex, hi_dex, n):
    """``n`` evenly spaced ln r [r in kpc] from 10**lo_dex to 10**hi_dex projected half-light
    radii, the top capped at the profile's edge."""
    r_e = float(light.r_half_2d())
    ln_top = min(math.log(r_e) + hi_dex * _LN10, math.log(float(light.r_edge())))
    return np.linspace(math.log(r_e) + lo_dex * _LN10, ln_top, n)


@functools.partial(jax.jit, static_argnames=("n_iter",))
def _invert_enclosed(light, ln_lo, ln_hi, target, n_iter):
    """ln r with enclosed_3d(r) = target, by ``n_iter`` bisections of [ln_lo, ln_hi]."""
    lo, hi = bisect(lambda mid: light.enclosed_3d(jnp.exp(mid)) > target, ln_lo, ln_hi, n_iter)
    return 0.5 * (lo + hi)


def sample_positions(light, n, rng, *, lo_dex=-6.0, hi_dex=6.0, n_grid=512, n_bisect=44):
    """Draw ``n`` stars from a unit-normalised light profile (spherical, isotropic directions).

    Parameters
    ----------
    light : a light profile from :mod:`halo.physics.light`
    n : number of stars
    rng : numpy.random.Generator
    lo_dex, hi_dex : radii are drawn between 10**lo_dex and 10**hi_dex projected half-light radii
        (and inside the profile's edge); the light outside (1e-12 of it for a Plummer profile with
        the defaults) is put at those limits
    n_grid : log-spaced radii used to bracket each star's radius
    n_bisect : bisection steps inside the bracket (width / 2**n_bisect: ~1e-15 in ln r)

    Returns
    -------
    :class:`Positions` [kpc]

    Notes
    -----
    r = L^-1(U) with U uniform and L(<r) the enclosed light fraction (inverse transform sampling,
    common practice), solved by bracketing on a log grid then bisection; cos(theta) uniform in
    [-1, 1] and phi uniform in [0, 2 pi) give isotropic directions.
    """
    ln_grid = log_radius_grid(light, lo_dex, hi_dex, n_grid)
    frac = np.maximum.accumulate(np.asarray(light.enclosed_3d(jnp.exp(ln_grid))))
    target = np.clip(rng.uniform(size=n), frac[0], frac[-1])
    k = np.clip(np.searchsorted(frac, target), 1, n_grid - 1)
    invert = functools.partial(_invert_enclosed, n_iter=n_bisect)
    r = np.exp(blockwise(invert, (light,), ln_grid[k - 1], ln_grid[k], target))
    cos_t = rng.uniform(-1.0, 1.0, size=n)
    phi = rng.uniform(0.0, 2.0 * np.pi, size=n)
    sin_t = np.sqrt(1.0 - cos_t**2)
    x, y, z = r * sin_t * np.cos(phi), r * sin_t * np.sin(phi), r * cos_t
    return Positions(x=x, y=y, z=z, r=r, R=np.hypot(x, y))
