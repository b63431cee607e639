"""Mock stars of a flattened (oblate, axisymmetric) tracer in the spherical potential: a light
profile the fit, which is spherical, does not assume (robustness runs of ``halo calibrate``).

The tracer density is stratified on similar oblate spheroids,
nu(R, z) = nu_sph(m) / q with m^2 = R^2 + z^2 / q^2 (R, z cylindrical about the symmetry axis,
q <= 1 the intrinsic axis ratio), where nu_sph is the satellite's light profile with the
MAJOR-axis projected half-light radius. Seen at inclination i (0 face-on, 90 deg edge-on) its
image is stratified on similar ellipses of axis ratio q' = sqrt(cos^2 i + q^2 sin^2 i) with the
major-axis profile of nu_sph (Stark 1977, ApJ 213, 368), so the satellite file's ellipticity
e = 1 - q' and major-axis r_half describe it. Given the file's e and a chosen q <= 1 - e, the
inclination follows from sin^2 i = (1 - q'^2) / (1 - q^2) (face-on when e = 0).

Velocities are Gaussians with the second moments of the axisymmetric Jeans equations for a
velocity ellipsoid aligned with cylindrical coordinates, no mean rotation, and a constant
beta_z = 1 - sigma_z^2 / sigma_R^2 (b = 1 / (1 - beta_z)), in the spherical potential of the
mass model (dark halo + stars as in the spherical mock: the stars' own flattening is ignored in the
potential). From the cylindrical Jeans equations (Binney & Tremaine 2008, sect. 4.8.2, eqs.
4.222a-c, equation numbers recalled from memory; the same pair as in Cappellari 2008, MNRAS 390,
71, eqs. 8-9):

    nu sigma_z^2(R, z) = int_z^inf nu(R, z') dPhi/dz'(R, z') dz'
    nu <v_phi^2>(R, z) = b [nu sigma_z^2 + R d(nu sigma_z^2)/dR] + R nu dPhi/dR

with dPhi/dz = G M(<r) z / r^3, dPhi/dR = G M(<r) R / r^3. The z integral is a fixed
Gauss-Legendre rule in ln(w), z' = |z| + w, w from 1e-10 s to 1e6 s (s the star's scale, see
``_scale``); its relative error is below 1e-9 against scipy's adaptive quad
(tests/test_mock_flattened.py). d/dR is the exact derivative of that quadrature by JAX autodiff.
Where <v_phi^2> < 0 (no such isotropic oblate model exists there) v_phi is drawn with zero
dispersion and the count is recorded. The moments are those of an equilibrium model; the
Gaussian velocity distribution is not (as for the spherical ``"gaussian"`` mocks).
"""

import math
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from halo.core.constants import G
from halo.core.errors import InputError
from halo.mock.positions import Positions, sample_positions
from halo.mock.velocities import Velocities

__all__ = ["Flattening", "flattening_for", "flattened_phase_space", "jeans_moments"]

#: Gauss-Legendre rule in t = ln(w / s): panels over [ln 1e-10, ln 1e6], nodes per panel
_T_LO, _T_HI, _PANELS, _NODES = math.log(1e-10), math.log(1e6), 12, 24


class Flattening(NamedTuple):
    """Intrinsic axis ratio ``q`` (<= 1, oblate), inclination [deg] (0 face-on), the image's
    axis ratio and the constant ``beta_z`` of the velocity ellipsoid."""

    q: float
    inclination_deg: float
    apparent_axis_ratio: float
    beta_z: float = 0.0

    def as_dict(self):
        return {
            "intrinsic_axis_ratio": self.q,
            "inclination_deg": self.inclination_deg,
            "apparent_axis_ratio": self.apparent_axis_ratio,
            "apparent_ellipticity": 1.0 - self.apparent_axis_ratio,
            "beta_z": self.beta_z,
        }


def flattening_for(q, ellipticity, beta_z=0.0):
    """The :class:`Flattening` of intrinsic axis ratio ``q`` whose image has ``ellipticity``:
    sin^2 i = (1 - (1 - e)^2) / (1 - q^2) (module notes); InputError unless 0 < q <= 1 - e."""
    q, e = float(q), float(ellipticity)
    if not 0.0 < q <= 1.0 - e + 1e-12:
        raise InputError(
            f"--mock-flattening: the intrinsic axis ratio must be in (0, 1 - ellipticity] = "
            f"(0, {1.0 - e:g}] for the satellite's ellipticity {e:g}, got {q:g}"
        )
    q_app = 1.0 - e
    sin2 = 0.0 if q >= 1.0 else min(max((1.0 - q_app**2) / (1.0 - q**2), 0.0), 1.0)
    if not beta_z < 1.0:
        raise InputError(f"flattened mock: beta_z must be < 1, got {beta_z:g}")
    return Flattening(q, math.degrees(math.asin(math.sqrt(sin2))), q_app, float(beta_z))


def _rule():
    x, w = np.polynomial.legendre.leggauss(_NODES)
    edges = np.linspace(_T_LO, _T_HI, _PANELS + 1)
    half = 0.5 * np.diff(edges)
    t = (edges[:-1, None] + half[:, None] * (x[None, :] + 1.0)).ravel()
    return jnp.asarray(t), jnp.asarray((half[:, None] * w[None, :]).ravel())


def _scale(R, z, q, r_scale):
    """Length over which nu(R, z') falls along z': q max(R, r_scale) plus |z|."""
    return q * jnp.maximum(R, r_scale) + jnp.abs(z)


def _pressure(mass_model, light, q, R, z, s):
    """int_|z|^inf nu_sph(m') dPhi/dz' dz' [Msun-free units: nu_sph km^2/s^2] for one star
    (nu sigma_z^2 up to the factor 1/q that cancels in sigma_z^2)."""
    t, wt = _rule()
    w = s * jnp.exp(t)
    zp = jnp.abs(z) + w
    r2 = R**2 + zp**2
    r = jnp.sqrt(r2)
    dphi_dz = G * mass_model.mass(r) * zp / (r2 * r)
    nu = light.density(jnp.sqrt(R**2 + (zp / q) ** 2))
    return jnp.sum(wt * w * nu * dphi_dz)


@jax.jit
def _moments(mass_model, light, q, beta_z, r_scale, R, z):
    s = _scale(R, z, q, r_scale)
    p = jax.vmap(lambda a, b, c: _pressure(mass_model, light, q, a, b, c))(R, z, s)
    dp = jax.vmap(jax.grad(lambda a, b, c: _pressure(mass_model, light, q, a, b, c)))(R, z, s)
    nu = light.density(jnp.sqrt(R**2 + (z / q) ** 2))
    r = jnp.sqrt(R**2 + z**2)
    dphi_dr = G * mass_model.mass(r) * R / r**3
    b = 1.0 / (1.0 - beta_z)
    sigma_z2 = p / nu
    vphi2 = b * (sigma_z2 + R * dp / nu) + R * dphi_dr
    return sigma_z2, b * sigma_z2, vphi2


def jeans_moments(mass_model, light, flattening, R, z, block=512):
    """(sigma_z^2, sigma_R^2, <v_phi^2>) [km^2/s^2] at cylindrical (R, z) [kpc] (module notes);
    ``light`` the spherical profile nu_sph (major-axis half-light radius)."""
    R, z = np.asarray(R, dtype=float), np.asarray(z, dtype=float)
    r_scale = float(light.r_half_2d())
    out = [[], [], []]
    for k in range(0, R.size, block):
        parts = _moments(
            mass_model, light, flattening.q, flattening.beta_z, r_scale,
            jnp.asarray(R[k : k + block]), jnp.asarray(z[k : k + block]),
        )  # fmt: skip
        for o, p in zip(out, parts, strict=True):
            o.append(np.asarray(p))
    return tuple(np.concatenate(o) if o else np.zeros(0) for o in out)


def _spherical_about_los(X, Y, Z, vX, vY, vZ):
    """Velocity components along r-hat, theta-hat and phi-hat with the polar axis the line of
    sight Z (as :class:`halo.mock.velocities.Velocities` has them)."""
    r = np.sqrt(X**2 + Y**2 + Z**2)
    Rs = np.hypot(X, Y)
    safe_r, safe_R = np.where(r > 0, r, 1.0), np.where(Rs > 0, Rs, 1.0)
    cos_t, sin_t = np.where(r > 0, Z / safe_r, 1.0), Rs / safe_r
    cos_p, sin_p = np.where(Rs > 0, X / safe_R, 1.0), np.where(Rs > 0, Y / safe_R, 0.0)
    v_r = (X * vX + Y * vY + Z * vZ) / safe_r
    v_theta = cos_t * (cos_p * vX + sin_p * vY) - sin_t * vZ
    v_phi = -sin_p * vX + cos_p * vY
    return Velocities(v_r=v_r, v_theta=v_theta, v_phi=v_phi)


def flattened_phase_space(mass_model, light, flattening, n, rng):
    """Positions and velocities of ``n`` stars of the flattened tracer, in the frame of the sky:
    x along the image's major axis, y its minor axis, z the line of sight.

    Returns (:class:`halo.mock.positions.Positions`, :class:`halo.mock.velocities.Velocities`
    with the polar axis along the line of sight, number of stars where <v_phi^2> < 0).
    """
    sph = sample_positions(light, n, rng)
    q, inc = flattening.q, math.radians(flattening.inclination_deg)
    xg, yg, zg = sph.x, sph.y, q * sph.z  # m(x, y, q z) = |(x, y, z)|
    R = np.hypot(xg, yg)
    sigma_z2, sigma_R2, vphi2 = jeans_moments(mass_model, light, flattening, R, zg)
    n_negative = int(np.sum(vphi2 < 0))
    v_R = np.sqrt(sigma_R2) * rng.standard_normal(n)
    v_z = np.sqrt(sigma_z2) * rng.standard_normal(n)
    v_phi = np.sqrt(np.maximum(vphi2, 0.0)) * rng.standard_normal(n)
    cos_p = np.where(R > 0, xg / np.where(R > 0, R, 1.0), 1.0)
    sin_p = np.where(R > 0, yg / np.where(R > 0, R, 1.0), 0.0)
    vx, vy = v_R * cos_p - v_phi * sin_p, v_R * sin_p + v_phi * cos_p
    # rotate about the line of nodes (x) by the inclination: sky (X, Y), line of sight Z
    c, s = math.cos(inc), math.sin(inc)
    X, Y, Z = xg, yg * c - zg * s, yg * s + zg * c
    vX, vY, vZ = vx, vy * c - v_z * s, vy * s + v_z * c
    pos = Positions(x=X, y=Y, z=Z, r=np.sqrt(X**2 + Y**2 + Z**2), R=np.hypot(X, Y))
    return pos, _spherical_about_los(X, Y, Z, vX, vY, vZ), n_negative
