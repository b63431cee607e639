"""sigma_los at the stars: the likelihood's interpolation from its angle grid against a direct solve
at every star's radius (same FAST orders), over the anisotropy prior of the shipped specs."""

import jax.numpy as jnp
import numpy as np
import pytest
from scipy.interpolate import CubicSpline

from halo.inference.interpolation import sigma_at_stars
from halo.inference.model import make_fit_data
from halo.physics.anisotropy import Constant
from halo.physics.dark import NFW
from halo.physics.jeans import FAST, sigma_los
from halo.physics.light import Plummer
from halo.physics.mass import MassModel, Stars

DISTANCE, R_E = 80.0, 0.05  # kpc
# the stated level of the spline interpolation on 32 angles (src/halo/inference/model.py notes,
# README): below the FAST solver's own 1e-4 (measured 2e-6 to 4e-5 over the prior)
TOL = 1e-4


def _star_angles(n=300, seed=1):
    # Plummer projected radii R = a sqrt(u / (1 - u)) (inverse of the enclosed fraction, common
    # practice), 0.03 to 30 half-light radii
    u = np.random.default_rng(seed).uniform(0.001, 0.999, n)
    return np.degrees(np.arctan(R_E * np.sqrt(u / (1 - u)) / DISTANCE))


@pytest.mark.parametrize("beta", [-38.0, -5.67, 0.0, 0.974])
def test_interpolated_sigma_at_stars_matches_direct_solve(beta):
    theta_deg = _star_angles()
    data = make_fit_data(np.zeros_like(theta_deg), np.ones_like(theta_deg), theta_deg)
    light = Plummer(R_E)
    model = MassModel((NFW(3e7, 0.6), Stars(light, 2e4)))
    anis = Constant(beta)
    # the product's path: solve on the data's grid (R = d tan theta), interpolate to the stars
    on_grid = sigma_los(model, light, anis, DISTANCE * jnp.tan(data.grid_theta), FAST)
    interpolated = np.asarray(sigma_at_stars(on_grid, data))
    direct = np.asarray(sigma_los(model, light, anis, DISTANCE * jnp.tan(data.theta), FAST))
    err = np.max(np.abs(interpolated / direct - 1))
    print(f"beta {beta}: interpolation error at the stars {err:.1e}")
    assert err < TOL


def test_interpolation_is_scipys_not_a_knot_spline():
    # reference: scipy.interpolate.CubicSpline (not-a-knot ends) through the same nodes in
    # (ln theta, ln sigma); a smooth profile, so the overshoot guard is not reached
    theta_deg = _star_angles(n=200, seed=3)
    data = make_fit_data(np.zeros_like(theta_deg), np.ones_like(theta_deg), theta_deg)
    x = np.log(np.asarray(data.grid_theta))
    ln_sig = 1.0 + 0.3 * np.sin(2.0 * x) - 0.1 * x
    got = np.log(np.asarray(sigma_at_stars(jnp.exp(jnp.asarray(ln_sig)), data)))
    want = CubicSpline(x, ln_sig)(np.log(np.asarray(data.theta)))
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-12)


def test_a_node_at_the_floor_cannot_make_the_spline_ring():
    # sigma_los = 0 at one angle (as where a truncated tracer has no light): every star's value
    # stays within 0.05 in ln sigma of the range of its two nodes (the spline alone rings by ~0.7
    # three angles away)
    theta_deg = _star_angles(n=300, seed=4)
    data = make_fit_data(np.zeros_like(theta_deg), np.ones_like(theta_deg), theta_deg)
    sig = np.full(data.grid_theta.shape, 5.0)
    sig[20] = 0.0
    got = np.log(np.asarray(sigma_at_stars(jnp.asarray(sig), data)))
    ln_nodes = np.log(np.maximum(sig, 1e-30))
    lo = np.minimum(ln_nodes[data.idx], ln_nodes[data.idx + 1])
    hi = np.maximum(ln_nodes[data.idx], ln_nodes[data.idx + 1])
    assert np.all(got >= lo - 0.05 - 1e-12) and np.all(got <= hi + 0.05 + 1e-12)
    far = (np.asarray(data.idx) < 17) | (np.asarray(data.idx) > 22)
    spline = CubicSpline(np.arange(len(sig)), ln_nodes)(np.asarray(data.idx) + np.asarray(data.w))
    assert np.max(np.abs(spline[far] - np.log(5.0))) > 0.3  # the unguarded spline does ring
