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
Radii may be arrays; parameters broadcast against them. Each class declares the shape
parameters of its ``from_r_half`` and the satellite-file keys that hold them (see
:class:`halo.physics.light_base.LightProfile`). The profiles live in
:mod:`halo.physics.light_plummer`, :mod:`halo.physics.light_exponential` and
:mod:`halo.physics.light_king`; this module is their registry.
"""

from halo.physics.light_base import LightProfile
from halo.physics.light_exponential import Exponential
from halo.physics.light_king import King
from halo.physics.light_plummer import Plummer

__all__ = ["Plummer", "Exponential", "King", "LightProfile", "LIGHT_PROFILES"]

#: name -> class, for satellite files and model specs
LIGHT_PROFILES = {"plummer": Plummer, "exponential": Exponential, "king": King}
