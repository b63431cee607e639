"""Numerical building blocks shared by the physics and the mock generator.

- :func:`gauss_legendre` / :func:`gauss_legendre01`: Gauss-Legendre nodes and weights (numpy,
  cached) on [-1, 1] and on [0, 1]; an n-point rule integrates polynomials of degree 2n - 1
  exactly (Abramowitz & Stegun 1964, 25.4.29).
- :func:`bisect`: fixed-count bisection (jit- and vmap-friendly: no data-dependent loop), the
  bracket shrinks to width / 2^n_iter.
- :func:`safe_positive`, :func:`safe_log` (with :data:`LOG_FLOOR`, which stands for ln 0): the
  "double where" guards that keep gradients finite where a branch is not taken (JAX FAQ,
  "gradients contain NaN where using where", common practice).
"""

import functools

import jax
import jax.numpy as jnp
import numpy as np

__all__ = [
    "gauss_legendre",
    "gauss_legendre01",
    "bisect",
    "safe_positive",
    "safe_log",
    "LOG_FLOOR",
]


@functools.cache
def gauss_legendre(n):
    """n-point Gauss-Legendre nodes and weights on [-1, 1] (numpy float64, cached)."""
    x, w = np.polynomial.legendre.leggauss(n)
    x.setflags(write=False)
    w.setflags(write=False)
    return x, w


@functools.cache
def gauss_legendre01(n):
    """n-point Gauss-Legendre nodes and weights on [0, 1] (numpy float64, cached)."""
    x, w = gauss_legendre(n)
    t, v = 0.5 * (x + 1.0), 0.5 * w
    t.setflags(write=False)
    v.setflags(write=False)
    return t, v


def bisect(above, lo, hi, n_iter):
    """Fixed-count bisection for a monotone predicate.

    ``above(mid)`` is True where the root lies below ``mid`` (so ``hi`` moves to ``mid``); ``lo``
    and ``hi`` are arrays (any shape) bracketing the root. Returns the final ``(lo, hi)``, whose
    width is the starting width / 2^n_iter. Traced code: ``n_iter`` is a Python int.
    """

    def step(_, bracket):
        a, b = bracket
        mid = 0.5 * (a + b)
        up = above(mid)
        return jnp.where(up, a, mid), jnp.where(up, mid, b)

    return jax.lax.fori_loop(0, n_iter, step, (lo, hi))


#: stands for ln 0 (e.g. beyond a truncated tracer's edge) so that differences stay finite
LOG_FLOOR = -700.0


def safe_positive(x):
    """(x > 0, x where positive else 1): the argument a branch taken only where x > 0 may use."""
    ok = x > 0.0
    return ok, jnp.where(ok, x, 1.0)


def safe_log(x):
    """ln x where x > 0, else LOG_FLOOR, with finite gradients everywhere."""
    ok, xs = safe_positive(x)
    return jnp.where(ok, jnp.log(xs), LOG_FLOOR)
