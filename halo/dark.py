"""Dark-matter density profiles.

Every profile gives, as pure JAX functions of its parameters (r in kpc):

- ``density(r)``    rho(r) [Msun kpc^-3]
- ``mass(r)``       M(<r) [Msun]
- ``log_slope(r)``  d ln rho / d ln r
- ``r_edge()``      truncation radius [kpc] beyond which rho = 0 (inf when untruncated)

built from ``(rho_s, r_s, ...)`` directly or with ``from_m200_c200(m200, c200, ...)`` in a given
astropy cosmology (Planck18 by default), where M200 is the mass inside the radius enclosing a mean
density of 200 times the critical density at redshift z.
"""

import jax.numpy as jnp

from halo._pytree import pytree

__all__ = ["NFW", "DARK_PROFILES"]


@pytree
class NFW:
    """Navarro, Frenk & White (1996, ApJ 462, 563) profile, optionally truncated at ``r_t``.

    rho = rho_s / (x (1 + x)^2), x = r / r_s;  M(<r) = 4 pi rho_s r_s^3 [ln(1 + x) - x / (1 + x)].
    With a finite ``r_t`` the density is zero beyond r_t and the mass constant there.
    """

    rho_s: float
    r_s: float
    r_t: float = jnp.inf

    def density(self, r):
        x = r / self.r_s
        rho = self.rho_s / (x * (1.0 + x) ** 2)
        return jnp.where(r <= self.r_t, rho, 0.0)

    def mass(self, r):
        x = jnp.minimum(r, self.r_t) / self.r_s
        # log1p(x) - x/(1+x) loses digits for x << 1: use the series there
        m_small = x**2 / 2.0 - 2.0 * x**3 / 3.0 + 3.0 * x**4 / 4.0 - 4.0 * x**5 / 5.0
        xs = jnp.where(x < 1e-3, 1.0, x)
        m_big = jnp.log1p(xs) - xs / (1.0 + xs)
        m = jnp.where(x < 1e-3, m_small, m_big)
        return 4.0 * jnp.pi * self.rho_s * self.r_s**3 * m

    def log_slope(self, r):
        x = r / self.r_s
        return jnp.where(r <= self.r_t, -1.0 - 2.0 * x / (1.0 + x), -jnp.inf)

    def r_edge(self):
        return self.r_t


#: name -> class, for model specs
DARK_PROFILES = {"nfw": NFW}
