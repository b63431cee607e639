"""Light (tracer) profiles, normalised to unit total luminosity.

Every profile gives, as pure JAX functions of its parameters (radii in kpc):

- ``surface_density(R)``  Sigma(R) [kpc^-2], with  Int 2 pi R Sigma dR = 1
- ``density(r)``          nu(r) [kpc^-3], with     Int 4 pi r^2 nu dr = 1
- ``enclosed_2d(R)``      fraction of the light inside projected radius R
- ``enclosed_3d(r)``      fraction of the light inside 3D radius r
- ``r_half_2d()``         projected half-light radius [kpc]
- ``r_half_3d()``         3D half-light radius [kpc]
- ``r_edge()``            radius beyond which nu = 0 [kpc] (inf when untruncated)

and a constructor ``from_r_half(r_half_2d, ...)`` from the projected half-light radius.
"""

import jax.numpy as jnp

from halo._pytree import pytree

__all__ = ["Plummer", "LIGHT_PROFILES"]


@pytree
class Plummer:
    """Plummer (1911) sphere with scale radius ``a`` [kpc].

    Notes
    -----
    Sigma(R) = (1 / pi a^2) (1 + R^2/a^2)^-2;  nu(r) = (3 / 4 pi a^3) (1 + r^2/a^2)^-5/2;
    L(<R) = R^2 / (R^2 + a^2);  L(<r) = r^3 / (r^2 + a^2)^3/2;  R_e = a;
    r_1/2 = a / sqrt(2^(2/3) - 1) (e.g. Dejonghe 1987, MNRAS 224, 13).
    """

    a: float

    @classmethod
    def from_r_half(cls, r_half_2d):
        return cls(a=r_half_2d)

    def surface_density(self, R):
        x2 = (R / self.a) ** 2
        return 1.0 / (jnp.pi * self.a**2) / (1.0 + x2) ** 2

    def density(self, r):
        x2 = (r / self.a) ** 2
        return 3.0 / (4.0 * jnp.pi * self.a**3) * (1.0 + x2) ** -2.5

    def enclosed_2d(self, R):
        return R**2 / (R**2 + self.a**2)

    def enclosed_3d(self, r):
        return r**3 / (r**2 + self.a**2) ** 1.5

    def r_half_2d(self):
        return self.a

    def r_half_3d(self):
        return self.a / jnp.sqrt(2.0 ** (2.0 / 3.0) - 1.0)

    def r_edge(self):
        return jnp.inf


#: name -> class, for satellite files and model specs
LIGHT_PROFILES = {"plummer": Plummer}
