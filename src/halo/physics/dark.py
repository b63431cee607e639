"""Dark-matter density profiles.

Every profile gives, as pure JAX functions of its parameters (r in kpc):

- ``density(r)``    rho(r) [Msun kpc^-3]
- ``mass(r)``       M(<r) [Msun]
- ``log_slope(r)``  d ln rho / d ln r
- ``r_edge()``      truncation radius [kpc] beyond which rho = 0 (inf when untruncated)
- ``r200(rho_c)``, ``m200(rho_c)``, ``c200(rho_c)``  radius [kpc], mass [Msun] and concentration
  r200 / r_s of the sphere of mean density 200 rho_c (differentiable root find)

built from ``(rho_s, r_s, ...)`` directly or with ``from_m200_c200(m200, c200, ...)`` in a given
astropy cosmology (Planck18 by default), where M200 is the mass inside the radius enclosing a mean
density of 200 times the critical density at redshift z. Every profile has an optional sharp
truncation radius ``r_t`` [kpc] (rho = 0 and M constant beyond it). Radii are finite and >= 0;
at r = 0, M = 0 (with finite gradients) and rho is the central density (inf for a cusp).

Each profile class also declares its shape parameters by their spec / command-line names (see
:class:`halo.physics.dark_base.DarkProfile`). The profiles live in :mod:`halo.physics.dark_closed`
(closed-form masses: NFW, Burkert, core-NFW) and :mod:`halo.physics.dark_special` (quadrature or
special functions: Zhao, Einasto); this module is their registry.
"""

from halo.physics.dark_base import DarkProfile
from halo.physics.dark_closed import NFW, Burkert, CoreNFW
from halo.physics.dark_special import Einasto, Zhao

__all__ = ["NFW", "Burkert", "CoreNFW", "Zhao", "Einasto", "DarkProfile", "DARK_PROFILES"]

#: name -> class, for model specs
DARK_PROFILES = {
    "nfw": NFW,
    "burkert": Burkert,
    "core-nfw": CoreNFW,
    "zhao": Zhao,
    "einasto": Einasto,
}
