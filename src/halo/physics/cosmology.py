"""Cosmology helpers at the (M200, c200) boundary: critical density and virial radii.

astropy cosmologies are used here only, outside traced code; the results are plain floats.
"""

import math

from halo.core.constants import RHO_CRIT_UNIT

__all__ = ["default_cosmology", "rho_crit", "r200_from_m200", "hubble_h"]


def default_cosmology():
    """astropy's Planck18 (Planck Collaboration 2020, A&A 641, A6, table 2 last column)."""
    from astropy.cosmology import Planck18

    return Planck18


def rho_crit(cosmology=None, z=0.0):
    """Critical density rho_c(z) = 3 H(z)^2 / (8 pi G) [Msun kpc^-3] (127.05 for Planck18, z=0)."""
    cosmo = default_cosmology() if cosmology is None else cosmology
    return float(cosmo.critical_density(z).to(RHO_CRIT_UNIT).value)


def hubble_h(cosmology=None):
    """Dimensionless Hubble parameter h = H0 / (100 km/s/Mpc)."""
    cosmo = default_cosmology() if cosmology is None else cosmology
    return float(cosmo.H0.value) / 100.0


def r200_from_m200(m200, rho_c, delta=200.0):
    """Radius [kpc] enclosing mean density ``delta * rho_c``: (3 M / (4 pi delta rho_c))^(1/3).

    Works on floats and JAX arrays alike.
    """
    return (3.0 * m200 / (4.0 * math.pi * delta * rho_c)) ** (1.0 / 3.0)
