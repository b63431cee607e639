"""Catalogue sky geometry: offsets from the centre against an independent rotation, across
RA = 0 and over the poles, elliptical and circularised radii, angular radii in kpc.

References used here: rotation of unit vectors to the centre's frame and the zenithal
equidistant projection (common practice); R = D tan(theta).
"""

import math

import astropy.units as u
import jax
import jax.numpy as jnp
import numpy as np
import pytest
from astropy.coordinates import SkyCoord
from catalog_setup import SAT, base_table

from halo.inputs.catalogue import stars_from_table
from halo.inputs.sky import angle_to_kpc, projected_offsets


# ----------------------------------------------------------------------------- radii
def _offsets_by_rotation(ra, dec, ra0, dec0):
    """xi, eta [deg] by rotating unit vectors to the frame with the centre on the x axis and north
    on z (common practice); zenithal equidistant: radius = arc length, direction = position angle.
    """
    a, d, a0, d0 = map(np.deg2rad, (ra, dec, ra0, dec0))
    x, y, z = np.cos(d) * np.cos(a), np.cos(d) * np.sin(a), np.sin(d)
    x, y = x * np.cos(a0) + y * np.sin(a0), -x * np.sin(a0) + y * np.cos(a0)  # R_z(-a0)
    x, z = x * np.cos(d0) + z * np.sin(d0), -x * np.sin(d0) + z * np.cos(d0)  # R_y(d0)
    rho = np.rad2deg(np.arctan2(np.hypot(y, z), x))
    phi = np.arctan2(y, z)
    return rho * np.sin(phi), rho * np.cos(phi)


@pytest.mark.parametrize("ra0,dec0", [(150.0, 20.0), (10.0, 89.9), (359.95, -30.0), (0.2, -89.7)])
def test_offsets_against_rotation(ra0, dec0):
    rng = np.random.default_rng(5)
    c = SkyCoord(ra0 * u.deg, dec0 * u.deg).directional_offset_by(
        rng.uniform(0, 360, 200) * u.deg, rng.uniform(0, 1.0, 200) * u.deg
    )
    ra, dec = c.ra.deg, c.dec.deg
    off = projected_offsets(ra, dec, ra0, dec0)
    xi, eta = _offsets_by_rotation(ra, dec, ra0, dec0)
    np.testing.assert_allclose(off.xi_deg, xi, atol=1e-11)
    np.testing.assert_allclose(off.eta_deg, eta, atol=1e-11)
    np.testing.assert_allclose(off.radius_deg, np.hypot(xi, eta), atol=1e-11)  # e = 0


def test_offsets_where_flat_differences_fail():
    # across RA = 0: 0.1 deg of RA at dec -30 is 0.1 cos 30 deg to the east
    off = projected_offsets([0.05], [-30.0], 359.95, -30.0)
    assert off.xi_deg[0] == pytest.approx(0.1 * math.cos(math.radians(30.0)), rel=1e-5)
    assert (0.05 - 359.95) * math.cos(math.radians(30.0)) < -300  # the flat difference
    # over the pole: two points at dec 89.9 on opposite meridians are 0.2 deg apart, due north
    off = projected_offsets([190.0], [89.9], 10.0, 89.9)
    assert off.eta_deg[0] == pytest.approx(0.2, abs=1e-12) and abs(off.xi_deg[0]) < 1e-12
    flat = 180.0 * math.cos(math.radians(89.9))  # 0.314 deg, and in the wrong direction
    assert abs(flat - 0.2) > 0.1


def test_elliptical_radius_on_the_axes():
    e, pa = 0.5, 30.0
    centre = SkyCoord(150.0 * u.deg, 20.0 * u.deg)
    # (position angle, separation, hand-computed R_ell): major axis at PA 30 and 210; minor
    # axis at 120 and 300 scaled by 1 / (1 - e); 45 deg off: sqrt(cos^2 45 + sin^2 45 / 0.25)
    cases = [(30, 0.1, 0.1), (210, 0.1, 0.1), (120, 0.05, 0.1), (300, 0.05, 0.1),
             (75, 0.1, 0.1 * math.sqrt(2.5)), (0, 0.0, 0.0)]  # fmt: skip
    c = centre.directional_offset_by(
        [p for p, _, _ in cases] * u.deg, [s for _, s, _ in cases] * u.deg
    )
    off = projected_offsets(c.ra.deg, c.dec.deg, 150.0, 20.0, e, pa)
    want = np.array([r for _, _, r in cases])
    np.testing.assert_allclose(off.radius_ell_deg, want, rtol=1e-10, atol=1e-14)
    np.testing.assert_allclose(off.radius_deg, want * math.sqrt(1 - e), rtol=1e-10, atol=1e-14)


def test_radius_kpc_exact_tan_and_traceable():
    t = base_table()
    s = stars_from_table(t, SAT)
    d = 50.0
    want = d * np.tan(np.deg2rad(s.radius_deg))  # R = D tan(theta)
    np.testing.assert_allclose(s.radius_kpc(d), want, rtol=1e-15)
    np.testing.assert_allclose(
        s.radius_kpc(d, elliptical=True), d * np.tan(np.deg2rad(s.radius_ell_deg)), rtol=1e-15
    )
    assert angle_to_kpc(1.0, 100.0) == pytest.approx(100.0 * math.tan(math.pi / 180))
    # the small-angle form is within theta^2 / 3 (here < 1e-6)
    np.testing.assert_allclose(s.radius_kpc(d), d * np.deg2rad(s.radius_deg), rtol=1e-6)
    f = jax.jit(lambda dist: jnp.sum(s.radius_kpc(dist)))
    assert float(f(jnp.asarray(d))) == pytest.approx(want.sum(), rel=1e-14)
    assert float(jax.grad(f)(jnp.asarray(d))) == pytest.approx(want.sum() / d, rel=1e-14)
