"""What every dark profile shares: declared parameters, r200 / M200 / c200, (M200, c200) input.

``DarkProfile.from_m200_c200(m200, c200, ...)`` builds a profile in a given astropy cosmology
(Planck18 by default), M200 being the mass inside the radius that encloses a mean density of 200
times the critical density at redshift z; ``r200``, ``m200`` and ``c200`` go the other way by a
differentiable root find.
"""

import functools
import math

import jax
import jax.numpy as jnp

from halo.core.numerics import bisect
from halo.physics.cosmology import r200_from_m200, rho_crit

__all__ = ["DarkProfile", "FOUR_PI"]

FOUR_PI = 4.0 * math.pi


class DarkProfile:
    """What every dark profile shares (fields ``rho_s``, ``r_s``, shape fields, ``r_t``).

    A profile declares its shape parameters (those besides ``rho_s, r_s`` or ``m200, c200``) by
    the names that model specs and the command line use; the inputs stage derives its checks and
    the constructor call from these class attributes:

    - ``shape_parameters``: the names, in order;
    - ``optional``: name -> default for those that may be left out;
    - ``field_names``: name -> constructor field, where they differ;
    - ``positive``: names whose values must be > 0;
    - ``unit_interval``: names whose values must lie in [0, 1].
    """

    shape_parameters = ("r_t",)
    optional = {"r_t": math.inf}
    field_names = {}
    positive = ("r_t",)
    unit_interval = ()

    @classmethod
    def from_m200_c200(cls, m200, c200, cosmology=None, z=0.0, *, rho_c=None, delta=200.0, **shape):
        """Profile with M(<r200) = ``m200`` and r200 / r_s = ``c200``.

        Parameters
        ----------
        m200 : mass inside r200 [Msun]
        c200 : concentration r200 / r_s
        cosmology : astropy cosmology for the critical density (Planck18 when None)
        z : redshift of the critical density
        rho_c : critical density [Msun kpc^-3]; when given, ``cosmology`` and ``z`` are not used
        delta : overdensity with respect to critical (200)
        **shape : the other fields of the profile (shape parameters, ``r_t``)

        Notes
        -----
        r200 = (3 M200 / (4 pi delta rho_c))^(1/3), r_s = r200 / c200, and rho_s = M200 / M_1(r200)
        with M_1 the mass of the same profile at rho_s = 1. JAX-traceable in ``m200``, ``c200`` and
        the shape parameters: the cosmology only enters through the float rho_c, computed here by
        astropy outside traced code.
        """
        rho_c = rho_crit(cosmology, z) if rho_c is None else rho_c
        r200 = r200_from_m200(m200, rho_c, delta)
        r_s = r200 / c200
        unit = cls(rho_s=1.0, r_s=r_s, **shape)
        return cls(rho_s=m200 / unit.mass(r200), r_s=r_s, **shape)

    def r_edge(self):
        """Truncation radius [kpc] (inf when untruncated)."""
        return self.r_t

    def r200(self, rho_c, delta=200.0, n_bisect=52):
        """Radius [kpc] inside which the mean density is ``delta * rho_c`` [Msun kpc^-3].

        Notes
        -----
        Solves g(ln r) = ln M(<r) - ln(4 pi delta rho_c r^3 / 3) = 0 (g decreases for any density
        that does not grow outwards) by ``n_bisect`` bisections of ln r in ln r_s +- 25 (bracket
        width 50 / 2^n_bisect, 1e-14 for 52), then one Newton step that carries the derivatives
        (implicit function theorem: exact first derivatives at the root). NaN when the root is not
        bracketed (e.g. a cored halo whose central density is below delta rho_c).
        """
        return _r_delta(self, rho_c, delta, n_bisect)

    def m200(self, rho_c, delta=200.0):
        """Mass [Msun] inside :meth:`r200`: (4 pi / 3) delta rho_c r200^3."""
        return FOUR_PI / 3.0 * delta * rho_c * self.r200(rho_c, delta) ** 3

    def c200(self, rho_c, delta=200.0):
        """Concentration r200 / r_s."""
        return self.r200(rho_c, delta) / self.r_s


@functools.partial(jax.jit, static_argnames=("n_bisect",))
def _r_delta(prof, rho_c, delta, n_bisect):
    """Jitted root find behind :meth:`DarkProfile.r200` (see there)."""
    const = jax.lax.stop_gradient(prof)
    ln_target = jnp.log(FOUR_PI / 3.0 * delta * rho_c)

    def g(prof, ln_r):
        return jnp.log(prof.mass(jnp.exp(ln_r))) - ln_target - 3.0 * ln_r

    lo = jnp.log(const.r_s) - 25.0
    hi = jnp.log(const.r_s) + 25.0
    ok = (g(const, lo) > 0.0) & (g(const, hi) < 0.0)
    # the root lies below mid unless g(mid) > 0 (NaN counts as below)
    lo, hi = bisect(lambda mid: ~(g(const, mid) > 0.0), lo, hi, n_bisect)
    ln_r = jax.lax.stop_gradient(0.5 * (lo + hi))
    r = jnp.exp(ln_r)
    # d g / d ln r = d ln M / d ln r - 3
    dg = FOUR_PI * r**3 * prof.density(r) / prof.mass(r) - 3.0
    ln_r = ln_r - g(prof, ln_r) / dg
    return jnp.where(ok, jnp.exp(ln_r), jnp.nan)
