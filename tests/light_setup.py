"""Shared evaluators of the light-profile tests (tests/test_light.py, test_profile_suite_light.py).

Every radius array has the shape (N_R,), so each profile structure compiles once per evaluator.
"""

import functools

import jax
import jax.numpy as jnp
from scipy import integrate

RADIAL = ("surface_density", "density", "enclosed_2d", "enclosed_3d")
SCALAR = ("r_half_2d", "r_half_3d", "r_edge")


def quad(f, a, b, points=(), epsrel=1e-13):
    """scipy quad over [a, b] split at `points`, tight tolerances; returns the sum."""
    edges = [a] + sorted(p for p in points if a < p < b) + [b]
    total = 0.0
    for lo, hi in zip(edges[:-1], edges[1:], strict=True):
        total += integrate.quad(f, lo, hi, epsabs=0.0, epsrel=epsrel, limit=400)[0]
    return total


def everything(p, r):
    """All methods of profile p: radial ones at r, scalar ones."""
    out = {m: getattr(p, m)(r) for m in RADIAL}
    out.update({m: getattr(p, m)() for m in SCALAR})
    return out


#: one compiled evaluator per (profile structure, shape of r)
EVAL = jax.jit(everything)


@jax.jit
def GRADS(p, r):
    """d(method)/dr at each r and d(method)/d(parameters): one compiled function per structure."""
    out = {}
    for m in RADIAL:
        gp, gr = jax.vmap(jax.grad(lambda q, x, m=m: getattr(q, m)(x), (0, 1)), (None, 0))(p, r)
        out[m, "r"], out[m, "p"] = gr, gp
    for m in SCALAR:
        out[m, "p"] = jax.grad(lambda q, m=m: getattr(q, m)())(p)
    return out


#: L(<r) alone, for the quadrature-order convergence checks (n_quad is static: one compile each)
ENC3 = jax.jit(lambda p, r: p.enclosed_3d(r))


def canon(p):
    """Leaves as float64 arrays (one compiled version per profile structure)."""
    return jax.tree_util.tree_map(lambda v: jnp.asarray(v, dtype=jnp.float64), p)


@functools.cache
def _call(m):
    return jax.jit(lambda p, r: getattr(p, m)(r))


N_R = 6  # every radius array has this shape, so each profile structure compiles once


def at(r):
    """r broadcast to the common shape (N_R,), float64."""
    return jnp.broadcast_to(jnp.asarray(r, dtype=jnp.float64), (N_R,))


def scalar(p, m):
    """Python float -> float version of p.m, for scipy quad."""
    f = _call(m)
    return lambda x: float(f(p, x))
