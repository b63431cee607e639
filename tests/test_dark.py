"""Checks every dark profile must pass beyond the profile suite: log slope, truncation, registry.

The generic checks (mass from density, gradients, jit, vmap) live in tests/test_profile_suite.py,
the profile-specific physics in tests/test_dark_closed.py and tests/test_dark_special.py, the
(M200, c200) conversion in tests/test_dark_m200.py; the examples come from tests/profile_setup.py.
"""

import math

import jax
import numpy as np
import pytest
from dark_setup import SHAPES

from halo.physics import dark
from halo.physics.dark import NFW, Burkert, CoreNFW, Einasto, Zhao

# ---------------------------------------------------------------------- all dark profiles


@pytest.mark.parametrize("cls", list(SHAPES), ids=lambda c: c.__name__)
def test_log_slope_vs_finite_differences(cls):
    # d ln rho / d ln r of the profile's own density by a fourth-order central difference in ln r
    # (h = 1e-3: truncation ~1e-13, round-off ~1e-13; common practice)
    p = cls(rho_s=1.0e7, r_s=0.8, **SHAPES[cls])
    r = np.logspace(-3.0, 2.0, 11)
    h = 1e-3

    def ln_rho(k):
        return np.log(np.asarray(p.density(r * np.exp(k * h))))

    ref = (8 * (ln_rho(1) - ln_rho(-1)) - (ln_rho(2) - ln_rho(-2))) / (12 * h)
    assert np.max(np.abs(np.asarray(p.log_slope(r)) - ref)) < 1e-10


@pytest.mark.parametrize("cls", list(SHAPES), ids=lambda c: c.__name__)
def test_truncation_and_centre(cls):
    # sharp truncation: rho = 0 and M constant beyond r_t (common practice); M(0) = 0 with
    # finite gradients (double-where guards)
    p = cls(rho_s=1.0e7, r_s=0.8, r_t=2.0, **SHAPES[cls])
    full = cls(rho_s=1.0e7, r_s=0.8, **SHAPES[cls])
    r = np.array([0.0, 0.5, 1.99, 2.0, 2.01, 10.0])

    @jax.jit
    def run(p, full):
        mass_grad = jax.grad(lambda q: q.mass(0.0))(full)
        return p.density(r), p.mass(r), full.density(r), full.mass(r), mass_grad

    dens_t, mass_t, dens, mass, mass_grad = (
        jax.tree_util.tree_map(np.asarray, v) for v in run(p, full)
    )
    np.testing.assert_array_equal(dens_t[1:4], dens[1:4])
    np.testing.assert_array_equal(dens_t[4:], 0.0)
    np.testing.assert_allclose(mass_t[:4], mass[:4], rtol=1e-15)
    np.testing.assert_allclose(mass_t[4:], mass[3], rtol=1e-15)
    assert float(p.r_edge()) == 2.0 and math.isinf(float(full.r_edge()))
    assert mass[0] == 0.0
    assert all(np.isfinite(v) for v in jax.tree_util.tree_leaves(mass_grad))


def test_registry():
    assert dark.DARK_PROFILES == {
        "nfw": NFW,
        "burkert": Burkert,
        "core-nfw": CoreNFW,
        "zhao": Zhao,
        "einasto": Einasto,
    }
