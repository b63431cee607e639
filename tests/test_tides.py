"""Jacobi radii (halo.physics.tides) against the closed forms of Binney & Tremaine (2008,
section 8.3, eqs. 8.106-8.108 [equation numbers from memory]) and King (1962, AJ 67, 471)."""

import jax.numpy as jnp
import numpy as np
import pytest

from halo.core.constants import G
from halo.core.pytree import pytree
from halo.physics.dark_closed import NFW
from halo.physics.light_plummer import Plummer
from halo.physics.mass import Stars
from halo.physics.milky_way import Galaxy, enclosed_mass, milky_way, tidal_terms
from halo.physics.tides import (
    R_J_FLOOR,
    jacobi_radius,
    jacobi_radius_point,
    tidal_density,
    truncated,
)


@pytree
class _PointMass:
    """Kepler potential of a point mass (the host of King 1962)."""

    m: float

    def potential(self, x):
        return -G * self.m / jnp.sqrt(jnp.sum(x**2))


def test_point_mass_host():
    # r_J = R (m / 3M)^(1/3) for a point-mass host (King 1962; B&T 2008 eq. 8.107 [memory])
    host, m, big_r = 1e12, 1e6, 50.0
    om2, d2 = tidal_terms(Galaxy((_PointMass(host),)), jnp.array([0.0, big_r, 0.0]))
    r_j = jacobi_radius_point(m, om2 - d2)
    assert float(r_j) == pytest.approx(big_r * (m / (3 * host)) ** (1 / 3), rel=1e-10)
    # the tidal density is three times the host's mean density inside R
    mean = host / (4 / 3 * np.pi * big_r**3)
    assert float(tidal_density(om2 - d2)) == pytest.approx(3 * mean, rel=1e-10)


def test_flat_rotation_curve():
    # flat rotation curve: Omega^2 - d2Phi/dR2 = 2 v_c^2 / R^2, so r_J = R (m / 2M(<R))^(1/3)
    # (B&T 2008 eq. 8.108 [memory]; the derivation from eq. 8.106 is two lines)
    gal = milky_way("isothermal220")
    big_r, m = 12.0, 15.0
    x = jnp.array([big_r, 0.0, 0.0])
    om2, d2 = tidal_terms(gal, x)
    r_j = float(jacobi_radius_point(m, om2 - d2))
    m_host = float(enclosed_mass(gal, x))
    assert r_j == pytest.approx(big_r * (m / (2 * m_host)) ** (1 / 3), rel=1e-10)
    assert r_j * 1e3 == pytest.approx(4.59, rel=0.01)  # a 15 Msun system at 12 kpc: 4.6 pc


def test_self_consistent_radius_of_an_extended_satellite():
    # for a Plummer sphere r^3 = G M(<r) / den is solved to double precision; far out the mass is
    # all inside and the point-mass value is recovered
    stars = Stars(Plummer(a=0.003), 3e5)
    den = 2 * 220.0**2 / 15.0**2
    r_j = float(jacobi_radius(stars, den))
    assert r_j**3 == pytest.approx(G * float(stars.mass(r_j)) / den, rel=1e-12)
    assert r_j == pytest.approx(float(jacobi_radius_point(3e5, den)), rel=1e-3)
    # an NFW halo: its own mass inside r_J, below the point-mass value of the mass inside 10 r_J
    halo = NFW(rho_s=1e8, r_s=0.5)
    r_j = float(jacobi_radius(halo, den))
    assert r_j**3 == pytest.approx(G * float(halo.mass(r_j)) / den, rel=1e-12)
    # truncation: the mass stops growing at r_J
    cut = truncated(halo, r_j)
    assert float(cut.mass(5 * r_j)) == pytest.approx(float(halo.mass(r_j)), rel=1e-12)
    assert float(cut.density(1.01 * r_j)) == 0.0


def test_no_tidal_limit_in_a_compressive_field():
    assert np.isnan(float(jacobi_radius_point(10.0, -1.0)))
    assert np.isnan(float(jacobi_radius(Stars(Plummer(a=0.003), 10.0), -1.0)))


def test_unbound_centre_gives_the_floor():
    # a Plummer sphere whose central density 3 M / (4 pi a^3) is below the tidal density
    # 3 den / (4 pi G) has no bound region: r_J is the documented floor
    stars = Stars(Plummer(a=0.05), 10.0)
    den = 2 * 220.0**2 / 5.0**2
    assert 3 * 10.0 / (4 * np.pi * 0.05**3) < float(tidal_density(den))
    assert float(jacobi_radius(stars, den)) == R_J_FLOOR
