"""J- and D-factors (halo.physics.jfactor) in the exact cone: check values, independent nested
quadratures, orders, gradients, jit and vmap.

The small-angle closed forms are compared in tests/test_jfactor_small_angle.py, the angular
profiles dJ/dOmega, dD/dOmega in tests/test_jfactor_los.py.
"""

import math

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from jfactor_setup import (
    CORED,
    DIST,
    R_S,
    RHO_S,
    Cored,
    Cusp,
    cone_ref,
    rho_cored,
    rho_cusp,
    rho_nfw,
)

from halo.core.constants import MSUN2_KPC5_TO_GEV2_CM5, MSUN_KPC2_TO_GEV_CM2
from halo.physics.dark import NFW
from halo.physics.jfactor import (
    d_factor,
    j_factor,
    log10_d,
    log10_d_draws,
    log10_j,
    log10_j_draws,
)


def test_check_halo_values():
    # regression snapshot, not a published value: check values computed once by an independent
    # high-precision quadrature of this halo [computed]; given to 4 decimals, so they are matched
    # to 1e-4 in log10 (< 1e-3 rel.); tests/test_jfactor.py's nested quadrature checks the method
    p = NFW(rho_s=RHO_S, r_s=R_S)
    lj = np.asarray(log10_j(p, DIST, jnp.array([0.1, 0.2, 0.5, 1.0, 30.0])))
    np.testing.assert_allclose(lj, [18.3806, 18.5029, 18.5814, 18.5997, 18.6055], atol=1e-4, rtol=0)
    ld = np.asarray(log10_d(p, DIST, jnp.array([0.1, 0.5])))
    np.testing.assert_allclose(ld, [17.2539, 18.1180], atol=1e-4, rtol=0)
    # unit conversion: log10 of the internal value times the constant
    assert float(log10_j(p, DIST, 0.5)) == pytest.approx(
        math.log10(float(j_factor(p, DIST, 0.5)) * MSUN2_KPC5_TO_GEV2_CM5), abs=1e-12
    )
    assert float(log10_d(p, DIST, 0.5)) == pytest.approx(
        math.log10(float(d_factor(p, DIST, 0.5)) * MSUN_KPC2_TO_GEV_CM2), abs=1e-12
    )


_REF_CASES = [
    (name, r_t)
    for name in ("nfw", "cored")
    for r_t in (math.inf, 2.0)  # r_t = 2 kpc: the halo is inside the 5 and 10 deg cones
]


@pytest.mark.parametrize(("name", "r_t"), _REF_CASES)
def test_exact_cone_against_nested_quadrature(name, r_t):
    # independent exact-cone reference: nested scipy.integrate.quad over (angle, line of sight)
    d = DIST
    prof = (NFW if name == "nfw" else CORED)(rho_s=RHO_S, r_s=R_S, r_t=r_t)
    rho = (rho_nfw if name == "nfw" else rho_cored)(RHO_S, R_S, r_t)
    for r in (0.01, 0.5, 1.9):  # the profile is the one written out for the reference
        assert float(prof.density(r)) == pytest.approx(rho(r), rel=1e-14)
    worst = 0.0
    for theta in (0.01, 0.1, 0.5, 1.0, 5.0, 10.0, 60.0):
        for power, fn in ((2, j_factor), (1, d_factor)):
            ref = cone_ref(rho, power, d, math.radians(theta), R_S, r_t)
            worst = max(worst, abs(float(fn(prof, d, theta)) / ref - 1.0))
    print(f"\n{name} r_t={r_t}: max relative error vs nested quad = {worst:.1e}")
    assert worst < 1e-9  # required 1e-3; measured <= 1e-12


def test_steep_cusp_central_tail():
    # rho ~ r^-1.3 at the centre: J converges slowly there (rho^2 A ~ r^-0.6); the power-law
    # continuation below r_lo keeps the result exact. Reference: nested scipy quad as above.
    d, gamma = 50.0, 1.3
    prof = Cusp(rho_s=1e7, r_s=1.0, gamma=gamma)
    rho = rho_cusp(1e7, 1.0, gamma)
    for theta in (0.05, 2.0):
        ref = cone_ref(rho, 2, d, math.radians(theta), 1.0)
        assert float(j_factor(prof, d, theta)) == pytest.approx(ref, rel=1e-7)
    # gamma >= 1.5: J diverges at the centre and the result says so
    assert math.isinf(float(j_factor(Cusp(1e7, 1.0, 1.6), d, 0.5)))


def test_angle_limits():
    p = NFW(rho_s=RHO_S, r_s=R_S)
    out = np.asarray(j_factor(p, DIST, jnp.array([0.0, -1.0, 90.0])))
    assert out[0] == 0.0 and np.isnan(out[1]) and np.isnan(out[2])


def test_convergence_with_orders():
    # the result converges as every quadrature order grows (reference: nested quad)
    cases = [(NFW(RHO_S, R_S), rho_nfw(RHO_S, R_S)), (Cored(RHO_S, R_S), rho_cored(RHO_S, R_S))]
    orders = [
        dict(n_inner=8, n_deep=4, n_outer=8, n_far=4),
        dict(n_inner=16, n_deep=8, n_outer=16, n_far=8),
        dict(n_inner=32, n_deep=12, n_outer=32, n_far=12),
        dict(),  # defaults 64, 24, 64, 16
    ]
    for prof, rho in cases:
        errs = []
        for kw in orders:
            e = 0.0
            for theta in (0.1, 10.0):
                ref = cone_ref(rho, 2, DIST, math.radians(theta), R_S)
                e = max(e, abs(float(j_factor(prof, DIST, theta, **kw)) / ref - 1.0))
            errs.append(e)
        assert all(b <= a or b < 1e-12 for a, b in zip(errs[:-1], errs[1:], strict=True)), errs
        assert errs[-1] < 1e-10 and errs[0] > 1e-6, errs


@pytest.mark.parametrize("r_t", [math.inf, 5.0, 0.3])  # 0.3 kpc: halo inside the 0.5 deg cone
def test_gradients_vs_finite_differences(r_t):
    def f(params, fn):
        rho_s, r_s, r_t_, d, theta = params
        return fn(NFW(rho_s=rho_s, r_s=r_s, r_t=r_t_), d, theta)

    x0 = np.array([RHO_S, R_S, r_t, DIST, 0.5])
    for fn in (j_factor, d_factor):
        g = np.asarray(jax.grad(f)(jnp.asarray(x0), fn)) / float(f(jnp.asarray(x0), fn))
        assert np.all(np.isfinite(g))
        for i in range(len(x0)):
            if not np.isfinite(x0[i]):
                assert g[i] == 0.0  # untruncated: no dependence on r_t
                continue
            h = 1e-5 * x0[i]
            xp, xm = x0.copy(), x0.copy()
            xp[i] += h
            xm[i] -= h
            fd = math.log(float(f(jnp.asarray(xp), fn)) / float(f(jnp.asarray(xm), fn))) / (2 * h)
            assert g[i] == pytest.approx(fd, rel=1e-6, abs=1e-10), (fn, i)  # d ln J / dx
    # no NaN-gradient trap at theta = 0 (J = 0 there)
    x0[-1] = 0.0
    g0 = np.asarray(jax.grad(f)(jnp.asarray(x0), j_factor))
    assert np.all(np.isfinite(g0))


def test_jit_matches_no_jit():
    p = NFW(rho_s=RHO_S, r_s=R_S, r_t=3.0)
    th = jnp.array([0.05, 0.5, 4.0])
    fast = np.asarray(j_factor(p, DIST, th))
    with jax.disable_jit():
        slow = np.asarray(j_factor(p, DIST, th))
    np.testing.assert_allclose(fast, slow, rtol=1e-12)


def test_vmap_over_draws_and_angles():
    rng = np.random.default_rng(1)
    n = 5
    rho_s = 10 ** rng.uniform(7, 9, n)
    r_s = 10 ** rng.uniform(-1, 0.3, n)
    d = rng.uniform(30, 150, n)
    angles = np.array([0.1, 0.2, 0.5, 1.0])
    batch = NFW(rho_s=jnp.asarray(rho_s), r_s=jnp.asarray(r_s))  # r_t stays a scalar (inf)
    lj = np.asarray(log10_j_draws(batch, d, angles))
    ld = np.asarray(log10_d_draws(batch, d, angles))
    assert lj.shape == ld.shape == (n, 4)
    for i in range(n):
        p = NFW(rho_s=rho_s[i], r_s=r_s[i])
        np.testing.assert_allclose(lj[i], np.asarray(log10_j(p, d[i], angles)), rtol=1e-13)
        np.testing.assert_allclose(ld[i], np.asarray(log10_d(p, d[i], angles)), rtol=1e-13)
    # plain jax.vmap over a fully batched pytree gives the same
    full = NFW(rho_s=jnp.asarray(rho_s), r_s=jnp.asarray(r_s), r_t=jnp.full(n, jnp.inf))
    vm = jax.vmap(lambda p, dk: log10_j(p, dk, angles))(full, jnp.asarray(d))
    np.testing.assert_allclose(np.asarray(vm), lj, rtol=1e-13)
    # other batch shapes, one shared distance
    b2 = NFW(rho_s=jnp.asarray(rho_s[:4]).reshape(2, 2), r_s=R_S)
    assert log10_j_draws(b2, DIST, angles).shape == (2, 2, 4)
