"""sigma_los from the likelihood's angle grid to the stars: the not-a-knot cubic spline of
ln sigma_los in ln theta on equally spaced ln theta, its node slopes a fixed matrix times the
node values, kept within a small margin of each interval's two nodes (measured error and the
alternatives tried: halo.inference.model's notes, tests/test_interpolation_at_stars.py)."""

import functools

import jax.numpy as jnp
import numpy as np
from scipy.interpolate import CubicSpline

__all__ = ["sigma_at_stars"]


@functools.lru_cache(maxsize=8)
def _spline_slope_matrix(n):
    """K (n x n): node slopes (per grid step) of the not-a-knot cubic spline through n equally
    spaced values y are K @ y (the spline is linear in y; columns from scipy's CubicSpline)."""
    x = np.arange(float(n))
    return CubicSpline(x, np.eye(n), axis=0)(x, 1)


# how far (in ln sigma) the cubic may leave the range of its two nodes: the true curve exceeds
# them near an extremum by ~ h^2 |y''| / 8 < 1e-2 on the default grid; more is ringing, e.g. next to
# an angle where sigma_los drops to its floor
_OVERSHOOT = 0.05


def sigma_at_stars(sig_grid, data):
    """Cubic-spline interpolation of ln sigma_los in ln theta from the grid to the stars.

    Cubic Hermite form with the not-a-knot spline's node slopes, the result kept within
    ``_OVERSHOOT`` of its two nodes' range; see the module notes for its measured error.
    """
    ls = jnp.log(jnp.maximum(sig_grid, 1e-30))
    m = jnp.asarray(_spline_slope_matrix(int(ls.shape[0]))) @ ls
    k, s = data.idx, data.w
    y0, y1, m0, m1 = ls[k], ls[k + 1], m[k], m[k + 1]
    s2, s3 = s * s, s * s * s
    h00, h10, h01, h11 = 2 * s3 - 3 * s2 + 1, s3 - 2 * s2 + s, 3 * s2 - 2 * s3, s3 - s2
    ln_sig = h00 * y0 + h10 * m0 + h01 * y1 + h11 * m1
    lo, hi = jnp.minimum(y0, y1) - _OVERSHOOT, jnp.maximum(y0, y1) + _OVERSHOOT
    return jnp.exp(jnp.clip(ln_sig, lo, hi))
