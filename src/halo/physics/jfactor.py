"""J- and D-factors of spherical dark haloes in an exact cone, and their angular profiles.

For a halo at distance d seen inside a cone of half-angle theta around its centre,

    J(theta) = Int_cone dOmega Int_los rho^2 dl,      D(theta) = Int_cone dOmega Int_los rho dl,

the cone having the solid angle 2 pi (1 - cos theta) (common practice). No small-angle (cylinder)
approximation is made. Any object with ``density(r)`` [Msun kpc^-3] and ``r_edge()`` [kpc] (the
profiles of :mod:`halo.physics.dark`) can be used; objects without ``r_edge`` (e.g. a
:class:`halo.physics.mass.MassModel`) are taken as untruncated.

Public functions (angles in degrees, distances in kpc):

- ``j_factor`` / ``d_factor``        J [Msun^2 kpc^-5] and D [Msun kpc^-2]
- ``log10_j`` / ``log10_d``          log10 J [GeV^2 cm^-5] and log10 D [GeV cm^-2]
- ``dj_domega`` / ``dd_domega``      line-of-sight integrals at an angle from the centre [per sr]
- ``log10_j_draws`` / ``log10_d_draws``  many parameter draws (batched pytree) at several angles

All are pure JAX functions (jit, grad and vmap apply); quadrature orders are static keyword
arguments (for the cone integrals: the fields of :class:`halo.physics.jfactor_cone.ConeOrders`).
With the default orders the relative error of J and D is < 1e-12 for NFW and Burkert haloes
(against nested scipy quadrature, 0.01-60 deg) and < 3e-7 for Einasto and Zhao haloes (against
quadrupled orders); see the function docstrings and tests/test_jfactor*.py.

The cone integrals live in :mod:`halo.physics.jfactor_cone`, the angular profiles in
:mod:`halo.physics.jfactor_los` and the per-draw tables in :mod:`halo.physics.jfactor_draws`;
this module gathers them.
"""

from halo.physics.jfactor_cone import d_factor, j_factor, log10_d, log10_j
from halo.physics.jfactor_draws import log10_d_draws, log10_j_draws
from halo.physics.jfactor_los import dd_domega, dj_domega

__all__ = [
    "j_factor",
    "d_factor",
    "log10_j",
    "log10_d",
    "dj_domega",
    "dd_domega",
    "log10_j_draws",
    "log10_d_draws",
]
