"""The Milky Way mass models (halo.physics.milky_way) and orbits (halo.physics.orbits).

References: Bovy (2015, ApJS 216, 29; section 3.5, table 1) and galpy (Bovy 2015), a
general-purpose galactic dynamics library, whose ``MWPotential2014`` is that paper's model; the
singular isothermal sphere in closed form; energy conservation of a symplectic integrator.
"""

import jax.numpy as jnp
import numpy as np
import pytest

from halo.core.constants import G
from halo.core.errors import InputError
from halo.physics.milky_way import (
    circular_velocity,
    enclosed_mass,
    galactocentric_phase_space,
    milky_way,
    tidal_terms,
)
from halo.physics.orbits import N_STEPS_PER_GYR, energy, orbit, peri_apo

RADII = np.array([1.0, 8.0, 20.0, 50.0])


def test_circular_speed_at_the_sun_is_the_papers():
    # Bovy 2015 section 3.5: v_c(R0 = 8 kpc) = 220 km/s by construction
    assert float(circular_velocity(milky_way("bovy2015"), 8.0)) == pytest.approx(220.0, rel=1e-12)


def test_component_masses_match_the_papers_table():
    # Bovy 2015 table 1: bulge mass 4.5e9 Msun, disc mass 6.8e10 Msun [memory, two digits]
    bulge, disc, _ = milky_way("bovy2015").components
    assert float(bulge.mass_r(1e3)) == pytest.approx(4.5e9, rel=0.01)
    assert float(disc.mass) == pytest.approx(6.8e10, rel=0.01)


def test_against_galpy_mwpotential2014():
    import galpy.potential as galpy  # a test dependency (pyproject.toml [test])
    from galpy.util import conversion

    ro, vo = 8.0, 220.0
    mw = galpy.MWPotential2014
    gal = milky_way("bovy2015")
    # circular speed in the plane (galpy.potential.vcirc)
    ref = np.array([galpy.vcirc(mw, r / ro) * vo for r in RADII])
    np.testing.assert_allclose(np.asarray(circular_velocity(gal, RADII)), ref, rtol=1e-9)
    # enclosed mass of the spherical components (galpy.potential.mass); galpy's G and unit
    # conversions differ from astropy's in the 5th digit, hence rel 1e-4
    to_msun = conversion.mass_in_msol(vo, ro)
    for comp, ref_pot in ((gal.components[0], mw[0]),):
        ref_m = np.array([ref_pot.mass(r / ro) * to_msun for r in RADII])
        np.testing.assert_allclose(np.asarray(comp.mass_r(RADII)), ref_m, rtol=1e-4)
    halo_ref = np.array([mw[2].mass(r / ro) * to_msun for r in RADII])
    nfw_only = type(gal)((gal.components[2],))
    x = np.stack([RADII, 0 * RADII, 0 * RADII], -1)
    np.testing.assert_allclose(np.asarray(enclosed_mass(nfw_only, x)), halo_ref, rtol=1e-4)
    # the tidal term d2Phi/dR2 in the plane (galpy.potential.evaluateR2derivs)
    for r in (8.0, 20.0):
        d2_ref = galpy.evaluateR2derivs(mw, r / ro, 0.0) * vo**2 / ro**2
        _, d2 = tidal_terms(gal, jnp.array([r, 0.0, 0.0]))
        assert float(d2) == pytest.approx(d2_ref, rel=1e-8)


def test_isothermal_closed_forms():
    # singular isothermal sphere: v_c = 220 km/s flat, M(<r) = v_c^2 r / G, Omega^2 = v_c^2 / r^2,
    # d2Phi/dr2 = -v_c^2 / r^2 (Binney & Tremaine 2008 section 4.3.3 [memory])
    gal = milky_way("ISOTHERMAL220")
    np.testing.assert_allclose(np.asarray(circular_velocity(gal, RADII)), 220.0, rtol=1e-12)
    x = jnp.array([3.0, -4.0, 12.0])  # r = 13 kpc
    assert float(enclosed_mass(gal, x)) == pytest.approx(220.0**2 * 13.0 / G, rel=1e-12)
    om2, d2 = tidal_terms(gal, x)
    assert float(om2) == pytest.approx(220.0**2 / 169.0, rel=1e-12)
    assert float(d2) == pytest.approx(-(220.0**2) / 169.0, rel=1e-10)


def test_unknown_model_is_an_input_error():
    with pytest.raises(InputError, match="known: bovy2015"):
        milky_way("mw2099")


def test_galactocentric_position_of_the_sun_direction():
    # a source at 1 pc is at the Sun: astropy's frame puts it at x = -R0 (8.122 kpc, the stated
    # GRAVITY 2018 value) and z = z_sun (20.8 pc)
    pos, _ = galactocentric_phase_space(10.0, 20.0, 1e-6)
    assert np.hypot(pos[0, 0], pos[0, 1]) == pytest.approx(8.122, rel=1e-4)
    assert pos[0, 2] == pytest.approx(0.0208, abs=1e-4)


def test_energy_conserved_over_5_gyr():
    # symplectic, fourth order (Yoshida 1990): |dE/E| < 1e-6 over 5 Gyr at the default step, on
    # an eccentric, inclined orbit (pericentre ~3.5 kpc, apocentre ~21 kpc)
    gal = milky_way("bovy2015")
    x0, v0 = jnp.array([20.0, 0.0, 5.0]), jnp.array([30.0, 60.0, 40.0])
    n = int(5 * N_STEPS_PER_GYR)
    _, xs, vs = orbit(gal, x0, v0, -5.0, n, 100)
    e = np.asarray(energy(gal, xs, vs))
    assert np.max(np.abs(e / e[0] - 1.0)) < 1e-6
    r = np.linalg.norm(np.asarray(xs), axis=-1)
    assert 3.0 < r.min() < 4.0 and 20.0 < r.max() < 22.0


def test_circular_orbit_stays_circular():
    # a start at v_c(R) tangential in the plane of an axisymmetric model stays at R (analytic)
    gal = milky_way("bovy2015")
    for big_r in (8.0, 30.0):
        vc = float(circular_velocity(gal, big_r))
        x0 = jnp.array([[big_r, 0.0, 0.0]])
        v0 = jnp.array([[0.0, vc, 0.0]])
        r_peri, r_apo, _ = peri_apo(gal, x0, v0, -5.0, int(5 * N_STEPS_PER_GYR))
        assert float(r_peri[0]) == pytest.approx(big_r, rel=1e-6)
        assert float(r_apo[0]) == pytest.approx(big_r, rel=1e-6)


def test_turning_points_in_the_isothermal_sphere():
    # in a spherical potential the pericentre and apocentre are the roots of
    # E = L^2 / (2 r^2) + Phi(r) (Binney & Tremaine 2008 eq. 3.14 [memory]); with
    # Phi = v_c^2 ln r solved by scipy's brentq, against the integrated orbit's extremes
    from scipy.optimize import brentq

    gal = milky_way("isothermal220")
    x0, v0 = np.array([30.0, 0.0, 10.0]), np.array([40.0, 120.0, -30.0])
    e = 0.5 * v0 @ v0 + 220.0**2 * np.log(np.linalg.norm(x0))
    ell2 = np.sum(np.cross(x0, v0) ** 2)

    def f(r):
        return ell2 / (2 * r**2) + 220.0**2 * np.log(r) - e

    r_now = np.linalg.norm(x0)
    peri, apo = brentq(f, 1e-3, r_now), brentq(f, r_now, 1e3)
    r_peri, r_apo, _ = peri_apo(gal, x0[None], v0[None], -5.0, int(5 * N_STEPS_PER_GYR))
    # sampled at the steps: resolved to ~ (step x speed)^2 / r, below 1e-4 relative here
    assert float(r_peri[0]) == pytest.approx(peri, rel=1e-4)
    assert float(r_apo[0]) == pytest.approx(apo, rel=1e-4)
