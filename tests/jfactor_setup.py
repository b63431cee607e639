"""Test profiles and independent references shared by the J-factor tests (tests/test_jfactor*.py).

The references are nested scipy quadratures over (angle, line of sight) of densities written out
here, independent of how halo.physics.jfactor computes the integrals.
"""

import math

import jax.numpy as jnp
from scipy import integrate

import halo.physics.dark
from halo.core.pytree import pytree

# check halo of the project reference list: rho_s = 1e8 Msun/kpc^3, r_s = 0.5 kpc, d = 76 kpc
RHO_S, R_S, DIST = 1.0e8, 0.5, 76.0


# ----------------------------------------------------------------------------- test profiles


@pytree
class Cored:
    """Cored test profile rho = rho_s / ((1 + x)(1 + x^2)) (the Burkert 1995 form), defined here
    so that the tests do not depend on another module when halo.physics.dark has no Burkert."""

    rho_s: float
    r_s: float
    r_t: float = jnp.inf

    def density(self, r):
        x = r / self.r_s
        return jnp.where(r <= self.r_t, self.rho_s / ((1.0 + x) * (1.0 + x**2)), 0.0)

    def r_edge(self):
        return self.r_t


@pytree
class Cusp:
    """rho = rho_s x^-gamma (1 + x)^(gamma - 3): a steep inner cusp for the central-tail check."""

    rho_s: float
    r_s: float
    gamma: float

    def density(self, r):
        x = r / self.r_s
        return self.rho_s * x**-self.gamma * (1.0 + x) ** (self.gamma - 3.0)

    def r_edge(self):
        return jnp.inf


CORED = getattr(halo.physics.dark, "Burkert", Cored)


def rho_nfw(rho_s, r_s, r_t=math.inf):
    def rho(r):
        if r > r_t:
            return 0.0
        x = r / r_s
        return rho_s / (x * (1.0 + x) ** 2)

    return rho


def rho_cored(rho_s, r_s, r_t=math.inf):
    def rho(r):
        if r > r_t:
            return 0.0
        x = r / r_s
        return rho_s / ((1.0 + x) * (1.0 + x * x))

    return rho


def rho_cusp(rho_s, r_s, gamma):
    def rho(r):
        x = r / r_s
        return rho_s * x**-gamma * (1.0 + x) ** (gamma - 3.0)

    return rho


# ------------------------------------------------- independent reference: nested scipy quad


def los_ref(rho, power, d, a, scale, r_t=math.inf):
    """Int_0^inf rho^power dl along the direction at angle a [rad] from the centre.

    u = l - d cos a, r = sqrt(b^2 + u^2); far side u in [0, u_max], near side u in [0, d cos a];
    split at u = b, 10 b, scale, 10 scale (adaptive Gauss-Kronrod, scipy.integrate.quad).
    """
    b, c = d * math.sin(a), d * math.cos(a)
    if r_t <= b:
        return 0.0
    u_max = math.sqrt(r_t**2 - b**2) if math.isfinite(r_t) else math.inf

    def g(u):
        return rho(math.sqrt(b * b + u * u)) ** power

    total = 0.0
    for hi in (u_max, min(c, u_max)):
        edges = [0.0, *sorted(p for p in {b, 10 * b, scale, 10 * scale} if p < hi), hi]
        for lo_, hi_ in zip(edges[:-1], edges[1:], strict=True):
            total += integrate.quad(g, lo_, hi_, epsabs=0, epsrel=1e-11, limit=200)[0]
    return total


def cone_ref(rho, power, d, theta, scale, r_t=math.inf):
    """2 pi Int_0^theta sin(a) Int_0^inf rho^power dl da, exact cone (no small-angle form)."""

    def h(a):
        return 2.0 * math.pi * math.sin(a) * los_ref(rho, power, d, a, scale, r_t)

    kinks = [math.asin(min(scale / d, 1.0))]
    if math.isfinite(r_t):
        kinks.append(math.asin(min(r_t / d, 1.0)))  # edge of the truncated halo
    edges = [0.0, *sorted(k for k in kinks if k < theta), theta]
    return sum(
        integrate.quad(h, lo_, hi_, epsabs=0, epsrel=1e-10, limit=200)[0]
        for lo_, hi_ in zip(edges[:-1], edges[1:], strict=True)
    )
