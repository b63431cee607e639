"""Zhao and Einasto profiles against mpmath (hypergeometric and incomplete-gamma closed forms)."""

import jax
import mpmath as mp
import numpy as np
import pytest
from dark_setup import X_GRID, rel

from halo.physics.dark import NFW, Einasto, Zhao


@pytest.fixture(autouse=True)
def _mpmath_precision():
    """30 significant digits for the mpmath references of this file (mpmath's state is global)."""
    with mp.workdps(30):
        yield


# ---------------------------------------------------------------------------------- Zhao

ZHAO_SHAPES = [
    (alpha, beta, gamma)
    for gamma in (0.0, 0.5, 1.0, 1.5)
    for alpha in (0.5, 1.0, 2.0, 3.0)
    for beta in (3.0, 4.0, 5.0, 7.0)
]


def _zhao_ref(x, alpha, beta, gamma):
    # Zhao 1996, MNRAS 278, 488: Int_0^x t^(2-g) (1 + t^a)^(-(b-g)/a) dt =
    # x^(3-g) / (3-g) 2F1((3-g)/a, (b-g)/a; (3-g+a)/a; -x^a) (standard Euler-integral identity)
    x, a, b, g = (mp.mpf(v) for v in (x, alpha, beta, gamma))
    return x ** (3 - g) / (3 - g) * mp.hyp2f1((3 - g) / a, (b - g) / a, (3 - g + a) / a, -(x**a))


@pytest.fixture(scope="module")
def zhao_reference():
    return np.array([[float(_zhao_ref(x, *s)) for x in X_GRID] for s in ZHAO_SHAPES])


def _zhao_errors(reference, order):
    s = np.array(ZHAO_SHAPES)
    p = Zhao(
        rho_s=1.0 / (4 * np.pi),
        r_s=1.0,
        alpha=s[:, :1],
        beta=s[:, 1:2],
        gamma=s[:, 2:],
        order=order,
    )
    return np.abs(np.asarray(jax.jit(p.mass)(X_GRID[None, :])) / reference - 1.0)


def test_zhao_mass_vs_mpmath(zhao_reference):
    # measured: max relative error 5e-14 over this grid with the default order (24 per panel)
    err = _zhao_errors(zhao_reference, Zhao.__dataclass_fields__["order"].default)
    assert err.max() < 1e-12


def test_zhao_quadrature_converges_with_order(zhao_reference):
    # measured max errors: order 8: 2e-3, 12: 3e-5, 16: 4e-7, 20: 1e-8, 24: 5e-14, 32: 2e-14
    errs = [_zhao_errors(zhao_reference, n).max() for n in (8, 12, 16, 24, 32)]
    assert errs[0] > errs[1] > errs[2] > errs[3]
    assert errs[0] < 1e-2 and errs[2] < 1e-6 and errs[3] < 1e-12 and errs[4] < 1e-12


def _zhao_unit_mass(alpha, beta, gamma, x):
    return Zhao(rho_s=1 / (4 * np.pi), r_s=1.0, alpha=alpha, beta=beta, gamma=gamma).mass(x)


def test_zhao_mass_gradient_in_shape_vs_mpmath():
    # derivatives of the hypergeometric closed form (Zhao 1996) in alpha, beta, gamma by mpmath
    # (measured: < 1e-14 relative at random points of the tested shape range)
    grad = jax.jit(jax.grad(_zhao_unit_mass, argnums=(0, 1, 2)))
    for x, shape in [(0.01, (0.7, 4.5, 1.2)), (1.3, (2.5, 3.5, 0.3)), (200.0, (1.0, 6.0, 0.8))]:
        got = grad(*shape, x)
        for i in range(3):

            def f(v, i=i, x=x, shape=shape):
                s = list(shape)
                s[i] = v
                return _zhao_ref(x, *s)

            ref = float(mp.diff(f, mp.mpf(shape[i])))
            assert float(got[i]) == pytest.approx(ref, rel=1e-12)


def test_zhao_131_is_nfw():
    # Zhao 1996: (alpha, beta, gamma) = (1, 3, 1) is the NFW profile
    r = np.logspace(-4.0, 3.0, 29)
    a = Zhao(rho_s=2.0e7, r_s=0.7, alpha=1.0, beta=3.0, gamma=1.0)
    b = NFW(rho_s=2.0e7, r_s=0.7)

    @jax.jit
    def all3(p):
        return p.density(r), p.mass(r), p.log_slope(r)

    (da, ma, sa), (db, mb, sb) = all3(a), all3(b)
    assert rel(da, db) < 1e-13
    assert rel(ma, mb) < 1e-13
    assert np.max(np.abs(np.asarray(sa) - np.asarray(sb))) < 1e-13


# ------------------------------------------------------------------------------- Einasto


def test_einasto_mass_vs_mpmath():
    # Einasto 1965 / Navarro et al. 2004, MNRAS 349, 1039; mass by Cardone et al. 2005, MNRAS 358,
    # 1325: M = 4 pi rho_s r_s^3 e^(2/a) (a/2)^(3/a) / a * gamma_l(3/a, (2/a) x^a), evaluated with
    # mpmath's incomplete gamma (30 digits); one point also by direct mpmath quadrature
    def ref(x, a):
        x, a = mp.mpf(x), mp.mpf(a)
        return mp.exp(2 / a) * (a / 2) ** (3 / a) / a * mp.gammainc(3 / a, 0, 2 / a * x**a)

    for alpha in (0.08, 0.12, 0.17, 0.25, 0.5, 1.0, 2.0):
        p = Einasto(rho_s=1 / (4 * np.pi), r_s=1.0, alpha=alpha)
        assert rel(p.mass(X_GRID), [float(ref(x, alpha)) for x in X_GRID]) < 5e-14
    direct = mp.quad(lambda t: t**2 * mp.exp(-(2 / mp.mpf(0.17)) * (t**0.17 - 1)), [0, 1, 3])
    assert float(ref(3.0, 0.17)) == pytest.approx(float(direct), rel=1e-20)


def test_einasto_alpha_gradient_vs_mpmath():
    # JAX differentiates gammainc in its first argument; checked against mpmath derivatives of the
    # closed form (measured worst 1e-12 over alpha in [0.08, 2], x in [1e-4, 1e3])
    def ref(x, a):
        return mp.exp(2 / a) * (a / 2) ** (3 / a) / a * mp.gammainc(3 / a, 0, 2 / a * x**a)

    g = jax.jit(jax.grad(lambda a, x: Einasto(rho_s=1 / (4 * np.pi), r_s=1.0, alpha=a).mass(x)))
    for alpha in (0.08, 0.17, 0.5, 2.0):
        for x in (1e-4, 0.3, 1.0, 5.0, 1e3):
            d = mp.diff(lambda a, x=x: ref(mp.mpf(x), a), mp.mpf(alpha))
            assert float(g(alpha, x)) == pytest.approx(float(d), rel=1e-10)
