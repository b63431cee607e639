"""Milky Way mass models for a satellite's orbit and tides, selectable by name.

Models (:data:`MILKY_WAY_MODELS`, :func:`milky_way`):

- ``bovy2015``: the three-component model of Bovy (2015, ApJS 216, 29, section 3.5 and table 1):
  a spherical power-law bulge with a Gaussian cutoff, rho ∝ r^-1.8 exp(-(r / 1.9 kpc)^2); a
  Miyamoto & Nagai (1975) disc with a = 3 kpc, b = 0.28 kpc; an NFW (1996) halo with r_s = 16 kpc.
  Each amplitude is fixed, as in the paper, by the component's share of the radial force in the
  plane at R0 = 8 kpc (bulge 0.05, disc 0.60, halo 0.35), the circular speed there being
  v0 = 220 km/s. The paper's table 1 gives the resulting bulge mass 4.5e9 Msun and disc mass
  6.8e10 Msun [memory]; the paper gives no uncertainty of the enclosed mass, so none is propagated.
- ``isothermal220``: a singular isothermal sphere with a flat rotation curve of 220 km/s
  (Phi = v_c^2 ln r, Binney & Tremaine 2008, eq. 4.103 [memory]; the IAU standard circular speed
  of 220 km/s, Kerr & Lynden-Bell 1986): the simplest model, a bracket for the first.

Every model has ``potential(x)`` [(km/s)^2] of a galactocentric position x = (x, y, z) [kpc]
(z towards the north Galactic pole, disc in the x-y plane). Derived here, by automatic
differentiation of the closed-form potentials (exact to rounding):

- :func:`acceleration` -grad Phi; :func:`circular_velocity` v_c(R) = sqrt(R dPhi/dR) in the plane;
- :func:`enclosed_mass` the spherical-equivalent mass r^2 (r_hat . grad Phi) / G along the
  direction of x (exact for the spherical components, the disc by its radial pull there);
- :func:`tidal_terms` Omega^2 = (r_hat . grad Phi) / r and d2Phi/dr2 = r_hat . H . r_hat (H the
  Hessian of Phi), whose difference Omega^2 - d2Phi/dr2 enters the Jacobi radius
  (:mod:`halo.physics.tides`); :func:`mean_density` 3 M(<r) / (4 pi r^3).

:func:`galactocentric_phase_space` turns ra, dec, distance, proper motion and line-of-sight
velocity into galactocentric positions and velocities with astropy's Galactocentric frame, whose
parameters (:data:`GALCEN_FRAME`) are stated in every output.
"""

import dataclasses
import functools
import math

import jax
import jax.numpy as jnp
from jax.scipy.special import gammainc, gammaincc

from halo.core.constants import G
from halo.core.errors import InputError
from halo.core.pytree import pytree, static

__all__ = [
    "MILKY_WAY_MODELS",
    "DEFAULT_MILKY_WAY",
    "GALCEN_FRAME",
    "milky_way",
    "acceleration",
    "circular_velocity",
    "enclosed_mass",
    "tidal_terms",
    "tidal_field",
    "mean_density",
    "galactocentric_phase_space",
]


def _radius(x):
    return jnp.sqrt(jnp.sum(x**2, axis=-1))


@pytree
class PowerCutoffBulge:
    """Spherical rho = amp r^-alpha exp(-(r / r_c)^2) [Msun kpc^-3], r in kpc.

    M(<r) = 2 pi amp r_c^(3 - alpha) gamma(3/2 - alpha/2, (r/r_c)^2) (lower incomplete gamma);
    Phi = -G M(<r) / r - 2 pi G amp r_c^(2 - alpha) Gamma(1 - alpha/2, (r/r_c)^2) (upper);
    alpha < 2.
    """

    amp: float
    r_c: float
    alpha: float = static(1.8)

    def mass_r(self, r):
        a = 1.5 - 0.5 * self.alpha
        full = math.gamma(a) * gammainc(a, (r / self.r_c) ** 2)
        return 2.0 * math.pi * self.amp * self.r_c ** (3.0 - self.alpha) * full

    def vc2_plane(self, big_r):
        return G * self.mass_r(big_r) / big_r

    def potential(self, x):
        r = _radius(x)
        a = 1.0 - 0.5 * self.alpha
        outer = math.gamma(a) * gammaincc(a, (r / self.r_c) ** 2)
        outer = 2.0 * math.pi * G * self.amp * self.r_c ** (2.0 - self.alpha) * outer
        return -G * self.mass_r(r) / r - outer


@pytree
class MiyamotoNagaiDisc:
    """Phi = -G M / sqrt(R^2 + (a + sqrt(z^2 + b^2))^2) (Miyamoto & Nagai 1975, PASJ 27, 533)."""

    mass: float
    a: float
    b: float

    def vc2_plane(self, big_r):
        """R dPhi/dR at z = 0: G M R^2 / (R^2 + (a + b)^2)^(3/2)."""
        return G * self.mass * big_r**2 / (big_r**2 + (self.a + self.b) ** 2) ** 1.5

    def potential(self, x):
        big_r2 = x[..., 0] ** 2 + x[..., 1] ** 2
        zb = jnp.sqrt(x[..., 2] ** 2 + self.b**2)
        return -G * self.mass / jnp.sqrt(big_r2 + (self.a + zb) ** 2)


@pytree
class NFWHalo:
    """Phi = -4 pi G rho_s r_s^3 ln(1 + r / r_s) / r (Navarro, Frenk & White 1996)."""

    rho_s: float
    r_s: float

    def vc2_plane(self, big_r):
        """G M(<R) / R, M(<r) = 4 pi rho_s r_s^3 [ln(1 + x) - x / (1 + x)]."""
        x = big_r / self.r_s
        mass = 4.0 * math.pi * self.rho_s * self.r_s**3 * (math.log1p(x) - x / (1.0 + x))
        return G * mass / big_r

    def potential(self, x):
        r = _radius(x)
        return -4.0 * math.pi * G * self.rho_s * self.r_s**3 * jnp.log1p(r / self.r_s) / r


@pytree
class IsothermalSphere:
    """Singular isothermal sphere: Phi = v_c^2 ln(r / 1 kpc), M(<r) = v_c^2 r / G."""

    v_c: float

    def potential(self, x):
        return self.v_c**2 * jnp.log(_radius(x))


@pytree
class Galaxy:
    """A Milky Way model: the sum of its components' potentials."""

    components: tuple
    name: str = static("")

    def potential(self, x):
        return sum(c.potential(x) for c in self.components)


def _grad(gal, x):
    return jax.grad(lambda y: gal.potential(y))(x)


@jax.jit
def acceleration(gal, x):
    """-grad Phi [(km/s)^2 / kpc] at the positions x [..., 3] (kpc)."""
    flat = jnp.reshape(x, (-1, 3))
    return -jnp.reshape(jax.vmap(lambda y: _grad(gal, y))(flat), jnp.shape(x))


@jax.jit
def circular_velocity(gal, big_r):
    """v_c(R) = sqrt(R dPhi/dR) [km/s] in the plane z = 0 at the radii ``big_r`` [kpc]."""
    big_r = jnp.asarray(big_r, float)
    x = jnp.stack([big_r, jnp.zeros_like(big_r), jnp.zeros_like(big_r)], axis=-1)
    return jnp.sqrt(-jnp.sum(acceleration(gal, x) * x, axis=-1))


def _radial_terms(gal, x):
    """(r, r_hat . grad Phi, r_hat . H . r_hat) at one position x (3,)."""
    r = _radius(x)
    u = x / r
    g = _grad(gal, x)
    h = jax.hessian(lambda y: gal.potential(y))(x)
    return r, jnp.dot(u, g), jnp.dot(u, h @ u)


@jax.jit
def tidal_field(gal, x):
    """Everything the tides need at positions x [..., 3] (kpc), in one compiled call: a dict of
    ``omega2`` Omega^2 = (r_hat . grad Phi) / r and ``d2phi`` d2Phi/dr2 = r_hat . H . r_hat
    [(km/s / kpc)^2], ``enclosed_mass`` r^2 (r_hat . grad Phi) / G [Msun] (spherical equivalent)
    and ``mean_density`` 3 M(<r) / (4 pi r^3) [Msun kpc^-3]."""
    flat = jnp.reshape(jnp.asarray(x, float), (-1, 3))
    r, dphi, d2 = jax.vmap(lambda y: _radial_terms(gal, y))(flat)
    shape = jnp.shape(x)[:-1]
    mass = r**2 * dphi / G
    out = {
        "omega2": dphi / r,
        "d2phi": d2,
        "enclosed_mass": mass,
        "mean_density": 3.0 * mass / (4.0 * math.pi * r**3),
    }
    return {k: jnp.reshape(v, shape) for k, v in out.items()}


def enclosed_mass(gal, x):
    """Spherical-equivalent enclosed mass r^2 (r_hat . grad Phi) / G [Msun] at x [..., 3] (kpc)."""
    return tidal_field(gal, x)["enclosed_mass"]


def tidal_terms(gal, x):
    """(Omega^2, d2Phi/dr2) [(km/s / kpc)^2] at positions x [..., 3]: Omega^2 = (dPhi/dr) / r
    along r_hat and d2Phi/dr2 = r_hat . H . r_hat (the tidal tensor's radial entry)."""
    f = tidal_field(gal, x)
    return f["omega2"], f["d2phi"]


def mean_density(gal, x):
    """Mean density inside the sphere through x, 3 M(<r) / (4 pi r^3) [Msun kpc^-3]."""
    return tidal_field(gal, x)["mean_density"]


def _normalised(gal_unit, fractions, r0, v0):
    """Scale each unit-amplitude component so that its v_c^2(R0) is fraction * v0^2."""
    comps = []
    for comp, frac in zip(gal_unit, fractions, strict=True):
        vc2 = float(comp.vc2_plane(r0))  # closed form (tests/test_milky_way.py: = v_c^2 by grad)
        scale = frac * v0**2 / vc2
        field = {"PowerCutoffBulge": "amp", "MiyamotoNagaiDisc": "mass", "NFWHalo": "rho_s"}
        key = field[type(comp).__name__]
        comps.append(dataclasses.replace(comp, **{key: getattr(comp, key) * scale}))
    return tuple(comps)


@functools.cache
def _bovy2015():
    """Bovy (2015, ApJS 216, 29), section 3.5 and table 1 (see the module docstring)."""
    unit = (
        PowerCutoffBulge(amp=1.0, r_c=1.9, alpha=1.8),
        MiyamotoNagaiDisc(mass=1.0, a=3.0, b=0.28),
        NFWHalo(rho_s=1.0, r_s=16.0),
    )
    return Galaxy(_normalised(unit, (0.05, 0.60, 0.35), 8.0, 220.0), name="bovy2015")


def _isothermal220():
    return Galaxy((IsothermalSphere(v_c=220.0),), name="isothermal220")


#: name -> (constructor, one-line description with its source)
MILKY_WAY_MODELS = {
    "bovy2015": (
        _bovy2015,
        "Bovy 2015 (ApJS 216, 29, table 1): power-law bulge with cutoff (alpha 1.8, r_c 1.9 kpc), "
        "Miyamoto-Nagai disc (a 3 kpc, b 0.28 kpc), NFW halo (r_s 16 kpc); v_c(8 kpc) = 220 km/s",
    ),
    "isothermal220": (
        _isothermal220,
        "singular isothermal sphere, flat rotation curve v_c = 220 km/s (Kerr & Lynden-Bell 1986)",
    ),
}

#: the model used when none is named
DEFAULT_MILKY_WAY = "bovy2015"


def milky_way(name=DEFAULT_MILKY_WAY):
    """The Milky Way model ``name`` (case-insensitive), a :class:`Galaxy`; InputError if unknown."""
    key = str(name).lower()
    if key not in MILKY_WAY_MODELS:
        raise InputError(
            f"Milky Way model {name!r} is unknown (known: {', '.join(MILKY_WAY_MODELS)})"
        )
    return MILKY_WAY_MODELS[key][0]()


#: astropy Galactocentric frame parameters (astropy's "v4.0" set, stated explicitly):
#: R0 8.122 kpc (GRAVITY Collaboration 2018), z_sun 20.8 pc (Bennett & Bovy 2019), solar motion
#: (12.9, 245.6, 7.78) km/s (Drimmel & Poggio 2018)
GALCEN_FRAME = {
    "galcen_distance_kpc": 8.122,
    "z_sun_pc": 20.8,
    "galcen_v_sun_kms": [12.9, 245.6, 7.78],
    "roll_deg": 0.0,
}


def galactocentric_phase_space(ra_deg, dec_deg, distance_kpc, pm_ra=None, pm_dec=None, vlos=None):
    """Galactocentric positions [kpc] (and velocities [km/s] when the proper motion [mas/yr] and
    line-of-sight velocity [km/s] are given) of arrays of draws, by astropy's Galactocentric frame
    with :data:`GALCEN_FRAME`. Returns (pos (n, 3), vel (n, 3) or None); numpy arrays."""
    import astropy.coordinates as coord
    import astropy.units as u
    import numpy as np

    f = GALCEN_FRAME
    frame = coord.Galactocentric(
        galcen_distance=f["galcen_distance_kpc"] * u.kpc,
        z_sun=f["z_sun_pc"] * u.pc,
        galcen_v_sun=coord.CartesianDifferential(f["galcen_v_sun_kms"] * u.km / u.s),
        roll=f["roll_deg"] * u.deg,
    )
    dist = np.atleast_1d(np.asarray(distance_kpc, float))
    kw = {}
    if pm_ra is not None:
        kw = dict(
            pm_ra_cosdec=np.broadcast_to(pm_ra, dist.shape) * u.mas / u.yr,
            pm_dec=np.broadcast_to(pm_dec, dist.shape) * u.mas / u.yr,
            radial_velocity=np.broadcast_to(vlos, dist.shape) * u.km / u.s,
        )
    ra = np.broadcast_to(ra_deg, dist.shape) * u.deg
    dec = np.broadcast_to(dec_deg, dist.shape) * u.deg
    icrs = coord.SkyCoord(ra=ra, dec=dec, distance=dist * u.kpc, frame="icrs", **kw)
    gc = icrs.transform_to(frame)
    pos = np.stack([gc.x.to_value(u.kpc), gc.y.to_value(u.kpc), gc.z.to_value(u.kpc)], -1)
    if pm_ra is None:
        return pos, None
    vel = [gc.v_x.to_value(u.km / u.s), gc.v_y.to_value(u.km / u.s), gc.v_z.to_value(u.km / u.s)]
    return pos, np.stack(vel, -1)
