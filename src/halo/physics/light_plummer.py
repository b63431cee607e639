"""Plummer (1911) light profile: every quantity in closed form (see :mod:`halo.physics.light`)."""

import jax.numpy as jnp

from halo.core.pytree import pytree
from halo.physics.light_base import LightProfile, finite

__all__ = ["Plummer"]


@pytree
class Plummer(LightProfile):
    """Plummer (1911) sphere with scale radius ``a`` [kpc].

    Parameters
    ----------
    a : float
        Scale radius [kpc], equal to the projected half-light radius.

    Notes
    -----
    Sigma(R) = (1 / pi a^2) (1 + R^2/a^2)^-2;  nu(r) = (3 / 4 pi a^3) (1 + r^2/a^2)^-5/2;
    L(<R) = R^2 / (R^2 + a^2);  L(<r) = r^3 / (r^2 + a^2)^3/2;  R_e = a;
    r_1/2 = a / sqrt(2^(2/3) - 1) = 1.30477 a.  All closed forms (exact to rounding).

    References
    ----------
    Plummer H. C. 1911, MNRAS 71, 460; Dejonghe H. 1987, MNRAS 224, 13.
    """

    a: float

    @classmethod
    def from_r_half(cls, r_half_2d):
        return cls(a=r_half_2d)

    def surface_density(self, R):
        fin, R = finite(R)
        x2 = (R / self.a) ** 2
        return jnp.where(fin, 1.0 / (jnp.pi * self.a**2) / (1.0 + x2) ** 2, 0.0)

    def density(self, r):
        fin, r = finite(r)
        x2 = (r / self.a) ** 2
        return jnp.where(fin, 3.0 / (4.0 * jnp.pi * self.a**3) * (1.0 + x2) ** -2.5, 0.0)

    def enclosed_2d(self, R):
        fin, R = finite(R)
        return jnp.where(fin, R**2 / (R**2 + self.a**2), 1.0)

    def enclosed_3d(self, r):
        fin, r = finite(r)
        return jnp.where(fin, r**3 / (r**2 + self.a**2) ** 1.5, 1.0)

    def r_half_2d(self):
        return self.a

    def r_half_3d(self):
        return self.a / jnp.sqrt(2.0 ** (2.0 / 3.0) - 1.0)

    def r_edge(self):
        return jnp.inf
