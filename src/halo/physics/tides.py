"""Tidal (Jacobi) radius of a satellite in a Milky Way model.

The Jacobi radius of a satellite of mass m on a circular orbit at galactocentric radius R is
(Binney & Tremaine 2008, section 8.3, eq. 8.106 [equation number from memory]; King 1962,
AJ 67, 471, for a point-mass host)::

    r_J = ( G m / (Omega^2 - d2Phi/dR2) )^(1/3)

Omega^2 = (dPhi/dR) / R and d2Phi/dR2 along the satellite's direction (the tidal tensor's radial
entry, :func:`halo.physics.milky_way.tidal_terms`). For a point-mass host this is
r_J = R (m / 3M)^(1/3) (B&T 2008 eq. 8.107 [memory]), for a flat rotation curve
r_J = R (m / 2M)^(1/3), M = M(<R) (tests/test_tides.py checks both). For an extended satellite
m is its own mass inside r_J: :func:`jacobi_radius` solves
r^3 = G M_sat(<r) / (Omega^2 - d2Phi/dR2) by bisection in ln r. Judged at pericentre when an
orbit is known (King 1962's instantaneous limit there), else at the present distance.
"""

import dataclasses
from functools import partial

import jax
import jax.numpy as jnp

from halo.core.constants import G
from halo.core.numerics import bisect

__all__ = ["R_J_FLOOR", "jacobi_radius_point", "jacobi_radius", "truncated", "tidal_density"]

#: ln r bracket of the self-consistent solution [ln kpc]: 1e-7 kpc to 1e4 kpc
R_J_FLOOR = 1e-7
_LN_LO, _LN_HI = jnp.log(R_J_FLOOR), jnp.log(1e4)


def jacobi_radius_point(mass, denominator):
    """r_J = (G m / (Omega^2 - d2Phi/dR2))^(1/3) [kpc] for a satellite of mass ``mass`` [Msun];
    ``denominator`` Omega^2 - d2Phi/dR2 [(km/s / kpc)^2] (NaN when not positive: no tidal limit
    in a field that compresses)."""
    denominator = jnp.asarray(denominator, float)
    ok = denominator > 0
    return jnp.where(ok, (G * mass / jnp.where(ok, denominator, 1.0)) ** (1.0 / 3.0), jnp.nan)


@partial(jax.jit, static_argnames=("n_bisect",))
def jacobi_radius(model, denominator, n_bisect=60):
    """Self-consistent Jacobi radius [kpc] of an extended satellite ``model`` (any object with
    ``mass(r)`` [Msun]): the root of g(ln r) = ln(G M(<r) / denominator) - 3 ln r.

    g decreases wherever M grows slower than r^3 (any density that does not grow outwards), so
    the root is unique; ``n_bisect`` bisections of ln r in [ln 1e-7, ln 1e4] kpc locate it to a
    relative width of 25.3 / 2^n_bisect (2e-17 for 60, below double precision). NaN when the
    denominator is not positive. When even the centre is not bound (the satellite's central
    density below :func:`tidal_density`: g < 0 at the lowest radius) the result is the bracket's
    floor, 1e-7 kpc (:data:`R_J_FLOOR`): no region of the satellite lies inside a Jacobi surface.
    """
    den = jnp.asarray(denominator, float)
    ok = den > 0
    ln_den = jnp.log(jnp.where(ok, den, 1.0))

    def g(ln_r):
        return jnp.log(G * model.mass(jnp.exp(ln_r))) - ln_den - 3.0 * ln_r

    lo, hi = bisect(lambda mid: ~(g(mid) > 0.0), _LN_LO, _LN_HI, n_bisect)
    r = jnp.where(g(_LN_HI) < 0.0, jnp.exp(0.5 * (lo + hi)), jnp.nan)
    return jnp.where(ok, jnp.where(g(_LN_LO) > 0.0, r, R_J_FLOOR), jnp.nan)


def truncated(dark, r_j):
    """The dark profile ``dark`` truncated at r_J (density zero beyond, mass constant): its own
    truncation radius ``r_t`` replaced by min(r_t, r_J)."""
    return dataclasses.replace(dark, r_t=jnp.minimum(dark.r_t, r_j))


def tidal_density(denominator):
    """The mean density [Msun kpc^-3] a satellite must have inside a radius r for r to lie inside
    its Jacobi radius: 3 (Omega^2 - d2Phi/dR2) / (4 pi G) (from r_J^3 = G m / denominator; for a
    point-mass host this is 3 x the host's mean density inside R)."""
    return 3.0 * jnp.asarray(denominator, float) / (4.0 * jnp.pi * G)
