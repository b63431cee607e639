"""What the light profiles share: declared parameters and cancellation-free series.

- :class:`LightProfile`: the class attributes by which a profile declares its shape parameters
  (those of ``from_r_half`` after the half-light radius) and the satellite-file keys that hold
  them; the inputs stage derives its checks and the constructor call from them;
- :func:`finite`, :func:`power_series`, :func:`gammainc_int`: guards and series used by several
  profiles.
"""

import math

import jax.numpy as jnp
import numpy as np

__all__ = ["LightProfile", "finite", "power_series", "gammainc_int", "N_BISECT"]

#: bisection steps for the half-light solvers: bracket width / 2^60 is below double precision
N_BISECT = 60


class LightProfile:
    """Declarations shared by every light profile.

    - ``shape_parameters``: arguments of ``from_r_half`` after ``r_half_2d``, in order;
    - ``satellite_keys``: shape parameter -> the satellite-file key that gives it (required there
      when the file names this profile).
    """

    shape_parameters = ()
    satellite_keys = {}


def finite(r):
    """(isfinite(r), r with infinities replaced by 0): keeps gradients finite at r = inf."""
    fin = jnp.isfinite(r)
    return fin, jnp.where(fin, r, 0.0)


def gammainc_int(n, y):
    """Regularised lower incomplete gamma P(n, y) for integer n >= 1, y >= 0.

    Series y^n e^-y Sum_k y^k / (n + k)! for y < 1 (17 terms, relative error < 1e-16, no
    cancellation for small y), closed form 1 - e^-y Sum_{k<n} y^k / k! for y >= 1.
    """
    small = y < 1.0
    ys = jnp.where(small, y, 0.5)
    yb = jnp.where(small, 2.0, y)
    coef = np.array([1.0 / math.factorial(n + k) for k in range(17)])
    ser = ys**n * jnp.exp(-ys) * power_series(coef, ys)
    poly = sum(yb**k / math.factorial(k) for k in range(n))
    big = 1.0 - jnp.exp(-yb) * poly
    return jnp.where(small, ser, big)


def power_series(coef, y):
    """Sum_k coef[k] y^k as one vectorised op (keeps the compiled graph small).

    The k = 0 term is kept out of the power: d(y^0)/dy evaluates to 0 * inf = nan at y = 0.
    """
    k = np.arange(1, len(coef), dtype=float)
    return coef[0] + jnp.sum(coef[1:] * y[..., None] ** k, axis=-1)
