"""Light profiles, one by one: Plummer, exponential and King against their published forms.

The generic checks every light profile must pass (normalisation, Abel projection, half-light
radii, gradients, jit, vmap) live in tests/test_profile_suite_light.py and
tests/test_profile_suite.py; this file holds the profile-specific physics.
"""

import math

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from light_setup import ENC3, EVAL, GRADS, N_R, RADIAL, at, canon, quad, scalar
from scipy import optimize, special

import halo  # noqa: F401  (float64)
from halo.physics.light import Exponential, King, Plummer
from halo.physics.light_exponential import _k0

# ----------------------------------------------------------------------------- Plummer


def test_plummer_formulas():
    a = 0.03
    p = canon(Plummer(a=a))
    r = np.array([0.001, 0.01, 0.03, 0.05, 0.1, 0.3])
    out = EVAL(p, jnp.asarray(r))
    # Plummer 1911, MNRAS 71, 460; Dejonghe 1987, MNRAS 224, 13: projected and 3D Plummer laws
    np.testing.assert_allclose(
        out["surface_density"], a**2 / (np.pi * (a**2 + r**2) ** 2), rtol=1e-14
    )
    np.testing.assert_allclose(
        out["density"], 3 * a**2 / (4 * np.pi * (a**2 + r**2) ** 2.5), rtol=1e-14
    )
    # r_1/2 / R_e = 1 / sqrt(2^(2/3) - 1) = 1.30477 (Dejonghe 1987; value [computed])
    assert float(out["r_half_3d"] / out["r_half_2d"]) == pytest.approx(1.30477, abs=5e-6)
    # independent root of the scipy-quad 3D light of the Plummer (1911) density
    half = optimize.brentq(
        lambda x: quad(lambda s: 3 * s * s * (1 + s * s) ** -2.5, 0, x) - 0.5, 0.5, 3, xtol=1e-15
    )
    assert float(out["r_half_3d"]) == pytest.approx(half * a, rel=1e-12)


# ----------------------------------------------------------------------------- exponential

XK = np.geomspace(1e-5, 50.0, 801)


_K0 = jax.jit(_k0, static_argnums=1)
_DK0 = jax.jit(jax.vmap(jax.grad(lambda x: _k0(x, 48))))


def test_k0_against_scipy_and_convergence():
    # K0(x) = Int_0^inf exp(-x cosh t) dt (Abramowitz & Stegun 1964, eq. 9.6.24) vs scipy.special.k0
    x = jnp.asarray(XK)
    errs = [np.abs(np.asarray(_K0(x, n)) / special.k0(XK) - 1).max() for n in (16, 24, 32, 48)]
    assert errs[0] > errs[1] > errs[2] > errs[3]  # converges with the quadrature order
    assert errs[2] < 1e-9 and errs[3] < 1e-13  # target 1e-9; default n_quad = 48
    # dK0/dx = -K1 (Abramowitz & Stegun 1964, eq. 9.6.27) vs scipy.special.k1
    assert np.abs(-np.asarray(_DK0(x)) / special.k1(XK) - 1).max() < 1e-13


def _exp_l3_reference(x):
    """(2/pi) Int_0^x s^2 K0(s) ds by scipy quad on scipy.special.k0."""
    return 2 / np.pi * quad(lambda s: s * s * special.k0(s), 0.0, x, (1e-3, 1.0, 10.0))


def test_exponential_over_wide_range():
    rd = 0.02
    p = canon(Exponential(r_d=rd))
    x = np.geomspace(1e-5, 50.0, 4 * N_R)
    r = x * rd
    out = [EVAL(p, jnp.asarray(chunk)) for chunk in r.reshape(4, N_R)]
    grads = [GRADS(p, jnp.asarray(chunk)) for chunk in r.reshape(4, N_R)]
    out = {m: np.concatenate([o[m] for o in out]) for m in RADIAL}
    g = {
        (m, w): np.concatenate([np.asarray(jax.tree_util.tree_leaves(o[m, w])[0]) for o in grads])
        for m in RADIAL
        for w in ("r", "p")
    }
    nu = special.k0(x) / (2 * np.pi**2 * rd**3)
    # deprojected exponential: nu = K0(r/r_d) / (2 pi^2 r_d^3) (Abel inversion; scipy.special.k0)
    np.testing.assert_allclose(out["density"], nu, rtol=1e-13)
    # L(<R) = P(2, R/r_d), regularised incomplete gamma (scipy.special.gammainc)
    np.testing.assert_allclose(out["enclosed_2d"], special.gammainc(2, x), rtol=1e-14)
    # L(<r) vs scipy quad of scipy.special.k0, converging with the quadrature order
    ref = np.array([_exp_l3_reference(v) for v in x])
    np.testing.assert_allclose(out["enclosed_3d"], ref, rtol=1e-13)
    errs = [
        np.abs(np.asarray(ENC3(canon(Exponential(rd, n_quad=n)), jnp.asarray(r))) / ref - 1).max()
        for n in (16, 24, 32)
    ]
    assert errs[0] > errs[1] > errs[2] > 1e-13 and errs[2] < 1e-9
    # gradients (r and r_d) from 1e-5 r_d to 50 r_d
    dnu_dr = -special.k1(x) / (2 * np.pi**2 * rd**4)  # dK0/dx = -K1 (Abramowitz & Stegun 9.6.27)
    np.testing.assert_allclose(g["density", "r"], dnu_dr, rtol=1e-12)
    # nu = r_d^-3 F(r/r_d)  =>  d nu/d r_d = -(3 nu + r d nu/dr) / r_d
    np.testing.assert_allclose(g["density", "p"], -(3 * nu + r * dnu_dr) / rd, rtol=1e-12)
    # dL/dr = 4 pi r^2 nu;  L = G(r/r_d)  =>  dL/dr_d = -(r/r_d) dL/dr
    dl = 4 * np.pi * r**2 * nu
    np.testing.assert_allclose(g["enclosed_3d", "r"], dl, rtol=1e-12)
    np.testing.assert_allclose(g["enclosed_3d", "p"], -x * dl, rtol=1e-12)


def test_exponential_half_light_constants():
    out = EVAL(canon(Exponential(r_d=1.0)), at(1.0))
    # R_e / r_d: root of 1 - e^-x (1 + x) = 1/2 (exponential law; scipy brentq)
    re = optimize.brentq(lambda x: -math.expm1(-x) - x * math.exp(-x) - 0.5, 1, 2, xtol=1e-16)
    assert float(out["r_half_2d"]) == pytest.approx(re, rel=1e-15)
    # r_1/2 / r_d: root of the scipy-quad 3D light, and scipy root of the module's own L(<r)
    r3 = optimize.brentq(lambda x: _exp_l3_reference(x) - 0.5, 2.0, 2.5, xtol=1e-15)
    assert float(out["r_half_3d"]) == pytest.approx(r3, rel=1e-13)
    enc = scalar(canon(Exponential(r_d=1.0)), "enclosed_3d")
    r3_own = optimize.brentq(lambda x: enc(x) - 0.5, 2.0, 2.5, xtol=1e-15)
    assert float(out["r_half_3d"]) == pytest.approx(r3_own, rel=1e-13)
    # r_1/2 / R_e = 1.32483, R_e = 1.67835 r_d (values [computed], independent quadrature)
    assert float(out["r_half_3d"] / out["r_half_2d"]) == pytest.approx(1.32483, abs=5e-6)
    assert float(out["r_half_2d"]) == pytest.approx(1.67835, abs=5e-6)


def test_exponential_centre():
    p = canon(Exponential(r_d=0.02))
    r = jnp.array([0.0, 0.0, 0.0, 1e-9, 1e-7, 1e-5], dtype=jnp.float64)
    out = EVAL(p, r)
    assert np.isinf(out["density"][0]) and float(out["enclosed_3d"][0]) == 0.0
    assert np.all(np.diff(np.asarray(out["enclosed_3d"])) >= 0)
    g = GRADS(p, r)
    for m in RADIAL[2:]:  # density has a log cusp; the enclosed light is smooth at r = 0
        assert np.all(np.isfinite(g[m, "r"])) and np.all(np.isfinite(g[m, "p"].r_d))


# ----------------------------------------------------------------------------- King


def _king_np(rc, rt):
    """Independent numpy King (1962, AJ 67, 471): k (eq. 18), Sigma (14), Sigma', nu (eq. 27)."""
    xt = (rt / rc) ** 2
    a = 1 / math.sqrt(1 + xt)
    k = 1 / (np.pi * rc**2 * (math.log(1 + xt) - 4 * (math.sqrt(1 + xt) - 1) * a + xt * a * a))

    def sig(R):
        return k * ((1 + (R / rc) ** 2) ** -0.5 - a) ** 2 if R < rt else 0.0

    def dsig(R):
        u = 1 + (R / rc) ** 2
        return -2 * k * (u**-0.5 - a) * u**-1.5 * R / rc**2

    def nu(r):
        z = math.sqrt((1 + (r / rc) ** 2) / (1 + xt))
        return (
            k / (np.pi * rc * (1 + xt) ** 1.5 * z * z) * (math.acos(z) / z - math.sqrt(1 - z * z))
        )

    return k, sig, dsig, nu


KING_C = [1.5, 10.0, 300.0]
KING_R = np.array([1e-4, 0.01, 0.2, 0.5, 0.9, 0.999])  # in units of r_t


@pytest.mark.parametrize("c", KING_C)
def test_king_against_king1962(c):
    rc, rt = 0.01, 0.01 * c
    k, sig, dsig, nu = _king_np(rc, rt)
    r = rt * KING_R
    out = EVAL(canon(King(r_c=rc, r_t=rt)), jnp.asarray(r))
    # eq. 14 with k from eq. 18 (unit total light: the closed form gives L(<r_t) = 1 exactly)
    # (the direct eq. 14 reference cancels near r_t: 1e-11)
    np.testing.assert_allclose(out["surface_density"], [sig(v) for v in r], rtol=1e-11)
    l_edge = EVAL(canon(King(rc, rt)), at(rt * (1 - 1e-15)))["enclosed_2d"][0]
    assert float(l_edge) == pytest.approx(1.0, abs=1e-13)
    # eq. 27 (direct arccos form, accurate away from r_t)
    np.testing.assert_allclose(out["density"][:4], [nu(v) for v in r[:4]], rtol=1e-12)
    # Abel deprojection of eq. 14: nu = -(1/pi) Int_r^r_t Sigma'(R) dR / sqrt(R^2 - r^2);
    # R = r cosh t removes the singularity
    abel = [
        -quad(lambda t, v=v: dsig(v * math.cosh(t)), 0.0, math.acosh(rt / v)) / np.pi for v in r
    ]
    np.testing.assert_allclose(out["density"], abel, rtol=1e-11)


@pytest.mark.parametrize("c", KING_C)
def test_king_enclosed_3d_and_convergence(c):
    # scipy quad of 4 pi r^2 nu with nu from the independent numpy King (1962) eq. 27
    rc, rt = 0.01, 0.01 * c
    _, _, _, nu = _king_np(rc, rt)
    r = rt * KING_R
    brk = [rc * f for f in (0.1, 1.0, 10.0, 100.0)]
    ref = np.array([quad(lambda s: 4 * np.pi * s * s * nu(s), 0.0, v, brk) for v in r])
    errs = [
        np.abs(np.asarray(ENC3(canon(King(rc, rt, n_quad=n)), jnp.asarray(r))) / ref - 1).max()
        for n in (12, 16, 32, 48)
    ]
    assert errs[2] < 1e-13 and errs[3] < 1e-13  # default n_quad = 32
    assert errs[0] > 10 * errs[2]  # converges with the quadrature order


def test_king_edge_is_exact_and_smooth():
    p = canon(King(r_c=0.01, r_t=0.08))
    rt = 0.08
    beyond = jnp.array([rt, rt * (1 + 1e-12), 0.2, 1.0, 10.0, jnp.inf], dtype=jnp.float64)
    out = EVAL(p, beyond)
    np.testing.assert_array_equal(out["surface_density"], 0.0)
    np.testing.assert_array_equal(out["density"], 0.0)
    np.testing.assert_array_equal(out["enclosed_2d"], 1.0)
    np.testing.assert_array_equal(out["enclosed_3d"], 1.0)
    near = jnp.array(
        [0.0, 1e-9, rt * (1 - 1e-12), rt * (1 - 1e-9), rt * (1 - 1e-6), rt * (1 - 1e-3)],
        dtype=jnp.float64,
    )
    out = EVAL(p, near)
    assert np.all(np.asarray(out["density"]) > 0) and np.all(np.asarray(out["surface_density"]) > 0)
    # nu ~ (r_t - r)^3/2 and Sigma ~ (r_t - R)^2 at the edge (King 1962, eqs. 14 and 27)
    d = np.asarray(out["density"][3:])
    assert d[0] / d[1] == pytest.approx(10**-4.5, rel=1e-5)
    for r in (near, beyond):
        assert all(np.all(np.isfinite(v)) for v in jax.tree_util.tree_leaves(GRADS(p, r)))


@pytest.mark.parametrize("c", KING_C)
def test_king_half_light_radii_vs_brentq(c):
    rc, rt = 0.01, 0.01 * c
    out = EVAL(canon(King(r_c=rc, r_t=rt)), at(1.0))
    k, sig, _, nu = _king_np(rc, rt)
    a = 1 / math.sqrt(1 + c * c)

    def l2(R):  # King 1962, eq. 18
        x = (R / rc) ** 2
        return np.pi * rc**2 * k * (math.log1p(x) - 4 * a * (math.sqrt(1 + x) - 1) + a * a * x)

    re = optimize.brentq(lambda R: l2(R) - 0.5, 1e-9, rt, xtol=1e-17, rtol=1e-15)
    assert float(out["r_half_2d"]) == pytest.approx(re, rel=1e-13)
    # 3D: brentq on scipy quad of the independent numpy eq. 27
    brk = [rc * f for f in (0.1, 1.0, 10.0, 100.0)]
    r3 = optimize.brentq(
        lambda r: quad(lambda s: 4 * np.pi * s * s * nu(s), 0, r, brk) - 0.5, re, rt, xtol=1e-16
    )
    assert float(out["r_half_3d"]) == pytest.approx(r3, rel=1e-12)


def test_king_from_r_half_concentration():
    # R_e / r_c depends on c only: from_r_half(R_e, c) round-trips and r_t / r_c = c
    for c in (1.5, 6.0, 300.0):
        p = King.from_r_half(0.03, c)
        assert float(p.r_t / p.r_c) == pytest.approx(c, rel=1e-14)
        assert float(EVAL(canon(p), at(1.0))["r_half_2d"]) == pytest.approx(0.03, rel=1e-13)
