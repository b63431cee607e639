"""Mass components beyond a bare dark profile: stars that follow the light, and sums.

Any object with ``mass(r)`` [Msun] and ``density(r)`` [Msun kpc^-3] is a mass component.
"""

import jax.numpy as jnp

from halo.core.pytree import pytree

__all__ = ["Stars", "MassModel"]


@pytree
class Stars:
    """Stellar mass that follows the light: M*(<r) = m_star * L(<r) / L.

    Parameters
    ----------
    light : a light profile from :mod:`halo.physics.light` (unit normalised)
    m_star : total stellar mass [Msun]
    """

    light: object
    m_star: float

    def mass(self, r):
        return self.m_star * self.light.enclosed_3d(r)

    def density(self, r):
        return self.m_star * self.light.density(r)

    def r_edge(self):
        return self.light.r_edge()


@pytree
class MassModel:
    """Sum of mass components (e.g. a dark halo plus the stars)."""

    components: tuple

    def mass(self, r):
        return sum(c.mass(r) for c in self.components)

    def density(self, r):
        return sum(c.density(r) for c in self.components)

    def log_slope(self, r, dr_rel=1e-4):
        """Total log-slope d ln rho / d ln r by a centred difference in ln r (relative step)."""
        up = jnp.log(self.density(r * jnp.exp(dr_rel)))
        dn = jnp.log(self.density(r * jnp.exp(-dr_rel)))
        return (up - dn) / (2.0 * dr_rel)
