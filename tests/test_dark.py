"""Dark profiles against published closed forms, mpmath, scipy and colossus.

The generic checks every profile must pass (mass from density, gradients, jit, vmap) live in
tests/test_profile_suite.py; this file holds the profile-specific physics.
"""

import math

import jax
import jax.numpy as jnp
import mpmath as mp
import numpy as np
import pytest
from scipy import integrate

from halo.physics import dark
from halo.physics.cosmology import rho_crit
from halo.physics.dark import NFW, Burkert, CoreNFW, Einasto, Zhao


@pytest.fixture(autouse=True)
def _mpmath_precision():
    """30 significant digits for the mpmath references of this file (mpmath's state is global)."""
    with mp.workdps(30):
        yield


RHO_C = rho_crit()  # Planck18, z = 0
X_GRID = np.logspace(-4.0, 3.0, 15)

# one example per profile for the (M200, c200) tests
SHAPES = {
    NFW: {},
    Burkert: {},
    CoreNFW: {"r_c": 0.4, "n": 0.8},
    Zhao: {"alpha": 2.0, "beta": 5.0, "gamma": 0.5},
    Einasto: {"alpha": 0.17},
}


def _rel(a, b):
    return np.max(np.abs(np.asarray(a, dtype=float) / np.asarray(b, dtype=float) - 1.0))


# ----------------------------------------------------------------------------------- NFW


def test_nfw_mass_vs_closed_form_mpmath():
    # Navarro, Frenk & White 1996, ApJ 462, 563: M(<r) = 4 pi rho_s r_s^3 [ln(1+x) - x/(1+x)],
    # evaluated with 30 digits (covers the small-x series branch and the closed form)
    p = NFW(rho_s=2.0e7, r_s=0.7)
    x = np.logspace(-8.0, 6.0, 57)
    ref = [
        4
        * mp.pi
        * mp.mpf(2.0e7)
        * mp.mpf(0.7) ** 3
        * (mp.log(1 + mp.mpf(t)) - mp.mpf(t) / (1 + mp.mpf(t)))
        for t in x
    ]
    assert _rel(p.mass(x * 0.7), [float(v) for v in ref]) < 1e-13


def test_nfw_m200_c200_vs_navarro_frenk_white():
    # NFW 1996, ApJ 462, 563 (and NFW 1997, ApJ 490, 493, eq. 2 [memory for the equation number]):
    # rho_s = delta_c rho_crit, delta_c = (200 / 3) c^3 / [ln(1 + c) - c / (1 + c)],
    # r_s = r200 / c, r200 = (3 M200 / (800 pi rho_crit))^(1/3)
    for m200, c in [(1e6, 30.0), (1e9, 12.0), (1e12, 6.0)]:
        p = NFW.from_m200_c200(m200, c)
        delta_c = 200.0 / 3.0 * c**3 / (math.log1p(c) - c / (1 + c))
        r200 = (3 * m200 / (800 * math.pi * RHO_C)) ** (1 / 3)
        assert float(p.rho_s) == pytest.approx(delta_c * RHO_C, rel=1e-13)
        assert float(p.r_s) == pytest.approx(r200 / c, rel=1e-14)
    # Planck18 critical density (Planck Collaboration 2020, A&A 641, A6) via astropy [computed]
    assert RHO_C == pytest.approx(127.0528, rel=1e-5)


@pytest.fixture(scope="module")
def colossus_profiles(tmp_path_factory):
    import colossus.settings

    colossus.settings.BASE_DIR = str(tmp_path_factory.mktemp("colossus"))
    colossus.settings.PERSISTENCE = ""
    from colossus.cosmology import cosmology
    from colossus.halo import profile_einasto, profile_nfw

    cosmo = cosmology.setCosmology("planck18")
    return cosmo, profile_nfw, profile_einasto


def test_nfw_and_einasto_m200_c200_vs_colossus(colossus_profiles):
    # colossus (Diemer 2018, ApJS 239, 35) NFW and Einasto profiles in the 200c definition; units
    # Msun/h, kpc/h, Msun h^2 / kpc^3. Its own rho_c is passed: only the profiles are compared.
    cosmo, profile_nfw, profile_einasto = colossus_profiles
    h = cosmo.h
    rho_c = cosmo.rho_c(0.0) * h**2
    m200, c = 3.0e9, 11.0
    ref = profile_nfw.NFWProfile(M=m200 * h, c=c, z=0.0, mdef="200c")
    ours = NFW.from_m200_c200(m200, c, rho_c=rho_c)
    assert float(ours.rho_s) == pytest.approx(ref.par["rhos"] * h**2, rel=1e-10)
    assert float(ours.r_s) == pytest.approx(ref.par["rs"] / h, rel=1e-10)
    ref = profile_einasto.EinastoProfile(M=m200 * h, c=c, z=0.0, mdef="200c", alpha=0.17)
    ours = Einasto.from_m200_c200(m200, c, rho_c=rho_c, alpha=0.17)
    assert float(ours.r_s) == pytest.approx(ref.par["rs"] / h, rel=1e-10)
    # colossus normalises by its own numerical enclosed mass: agreement to its accuracy
    assert float(ours.rho_s) == pytest.approx(ref.par["rhos"] * h**2, rel=1e-6)
    r = np.array([0.1, 1.0, 10.0])
    assert _rel(ours.mass(r), ref.enclosedMass(r * h) / h) < 1e-6


# ------------------------------------------------------------------------------- Burkert


def test_burkert_mass_vs_mori_burkert():
    # Mori & Burkert 2000, ApJ 538, 559 (same as Burkert 1995, ApJ 447, L25, with M_0 = pi/2
    # rho_s r_s^3 [memory for the equation numbers]):
    # M = pi rho_s r_s^3 [ln((1+x)^2 (1+x^2)) - 2 arctan x], with 30 digits (x >= 1e-6: the
    # cancellation in the reference costs < 18 of them; exercises the small-x series too)
    p = Burkert(rho_s=3.0e7, r_s=0.4)
    x = np.logspace(-6.0, 4.0, 61)

    def ref(t):
        t = mp.mpf(t)
        return (
            mp.pi
            * mp.mpf(3.0e7)
            * mp.mpf(0.4) ** 3
            * (mp.log((1 + t) ** 2 * (1 + t**2)) - 2 * mp.atan(t))
        )

    assert _rel(p.mass(x * 0.4), [float(ref(t)) for t in x]) < 1e-13


def test_burkert_and_core_nfw_mass_vs_quad():
    # mass as Int 4 pi r^2 rho dr by scipy quad (epsrel 1e-13), in ln r
    for p in [
        Burkert(rho_s=3.0e7, r_s=0.4),
        CoreNFW(rho_s=1.0e7, r_s=1.0, r_c=0.3, n=0.6),
        CoreNFW(rho_s=1.0e7, r_s=1.0, r_c=0.3, n=1.0),
    ]:
        rho = jax.jit(p.density)
        radii = np.array([1e-3, 0.05, 0.4, 2.0, 30.0])
        mass = np.asarray(jax.jit(p.mass)(radii))
        for r, m in zip(radii, mass, strict=True):
            val, _ = integrate.quad(
                lambda u, rho=rho: 4 * math.pi * math.exp(3 * u) * float(rho(math.exp(u))),
                math.log(r) - 40.0,
                math.log(r),
                epsabs=0.0,
                epsrel=1e-13,
                limit=200,
            )
            assert m == pytest.approx(val, rel=1e-11)


# ------------------------------------------------------------------------------ core-NFW


def test_core_nfw_density_is_derivative_of_mass():
    # Read, Agertz & Collins 2016, MNRAS 459, 2573, eqs. 16-17: M = M_NFW(<r) tanh(r/r_c)^n; the
    # density (their eq. 18) must equal dM/dr / (4 pi r^2): derivative of eqs. 16-17 by mpmath
    rho_s, r_s, r_c, n = 1.0e7, 1.0, 0.3, 0.6
    p = CoreNFW(rho_s=rho_s, r_s=r_s, r_c=r_c, n=n)

    def m_ref(r):
        x = r / r_s
        return 4 * mp.pi * rho_s * r_s**3 * (mp.log(1 + x) - x / (1 + x)) * mp.tanh(r / r_c) ** n

    def ln_rho_ref(u):
        r = mp.exp(u)
        return mp.log(mp.diff(m_ref, r) / (4 * mp.pi * r**2))

    r = np.logspace(-4.0, 2.5, 14)
    dens = [float(mp.diff(m_ref, mp.mpf(t)) / (4 * mp.pi * mp.mpf(t) ** 2)) for t in r]
    assert _rel(p.density(r), dens) < 1e-13
    assert _rel(p.mass(r), [float(m_ref(mp.mpf(t))) for t in r]) < 1e-13
    slope = [float(mp.diff(ln_rho_ref, mp.log(t))) for t in r]
    assert np.max(np.abs(np.asarray(p.log_slope(r)) - slope)) < 1e-11


def test_core_nfw_limits():
    # n = 0 is NFW (Read et al. 2016, eq. 16); n = 1 has a flat core of density 1.5 rho_s r_s / r_c
    # (limit r -> 0 of eq. 18: f rho_NFW -> rho_s r_s / r_c and the second term -> half of it)
    r = np.logspace(-3.0, 2.0, 11)
    a = CoreNFW(rho_s=1.0e7, r_s=1.0, r_c=0.3, n=0.0)
    b = NFW(rho_s=1.0e7, r_s=1.0)
    for f in ("density", "mass", "log_slope"):
        assert np.allclose(getattr(a, f)(r), getattr(b, f)(r), rtol=1e-14, atol=0)
    c = CoreNFW(rho_s=1.0e7, r_s=1.0, r_c=0.3, n=1.0)
    assert float(c.density(1e-7)) == pytest.approx(1.5e7 / 0.3, rel=1e-6)
    assert float(c.density(0.0)) == pytest.approx(1.5e7 / 0.3, rel=1e-14)
    assert abs(float(c.log_slope(1e-5))) < 1e-4
    # centre of a partial core: rho ~ r^(n-1)
    d = CoreNFW(rho_s=1.0e7, r_s=1.0, r_c=0.3, n=0.6)
    assert float(d.log_slope(1e-6)) == pytest.approx(-0.4, abs=1e-5)
    assert float(d.log_slope(0.0)) == pytest.approx(-0.4, rel=1e-14)


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
    assert _rel(da, db) < 1e-13
    assert _rel(ma, mb) < 1e-13
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
        assert _rel(p.mass(X_GRID), [float(ref(x, alpha)) for x in X_GRID]) < 5e-14
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
def test_from_m200_c200(cls):
    # definition of M200 / c200 w.r.t. 200 x critical (common practice): M(<r200) = M200,
    # mean density inside r200 = 200 rho_c, r200 / r_s = c200
    m200, c200 = 2.0e9, 14.0
    p = cls.from_m200_c200(m200, c200, **SHAPES[cls])
    r200 = float(p.r_s) * c200
    assert float(p.mass(r200)) == pytest.approx(m200, rel=1e-13)
    assert float(p.mass(r200)) / (4 / 3 * math.pi * r200**3) == pytest.approx(
        200 * RHO_C, rel=1e-13
    )
    # helpers (differentiable root find) recover the inputs
    assert float(p.r200(RHO_C)) == pytest.approx(r200, rel=1e-13)
    assert float(p.m200(RHO_C)) == pytest.approx(m200, rel=1e-13)
    assert float(p.c200(RHO_C)) == pytest.approx(c200, rel=1e-13)
    # another cosmology and redshift enter only through rho_crit
    from astropy.cosmology import WMAP9

    q = cls.from_m200_c200(m200, c200, cosmology=WMAP9, z=0.5, **SHAPES[cls])
    rc = rho_crit(WMAP9, 0.5)
    assert float(q.m200(rc)) == pytest.approx(m200, rel=1e-13)
    assert float(q.r_s) == pytest.approx(
        (3 * m200 / (800 * math.pi * rc)) ** (1 / 3) / c200, rel=1e-14
    )


@pytest.mark.parametrize("cls", list(SHAPES), ids=lambda c: c.__name__)
def test_from_m200_c200_traceable_and_differentiable(cls):
    # traceable in m200, c200 and the shape parameters: jit, grad (vs central differences), vmap
    def rho_s(lm, c, shape):
        return cls.from_m200_c200(10.0**lm, c, rho_c=RHO_C, **shape).rho_s

    def m200_back(lm, c):
        return cls.from_m200_c200(10.0**lm, c, rho_c=RHO_C, **SHAPES[cls]).m200(RHO_C)

    args = {"lm": 8.5, "c": 17.0, **SHAPES[cls]}

    def split(a):
        return a["lm"], a["c"], {k: a[k] for k in SHAPES[cls]}

    rho_s_jit = jax.jit(rho_s)
    value = float(rho_s_jit(*split(args)))
    grads = jax.jit(jax.grad(lambda a: rho_s(*split(a))))(args)
    for key, x in args.items():
        h = 1e-5 * abs(x)
        fd = (
            float(rho_s_jit(*split({**args, key: x + h})))
            - float(rho_s_jit(*split({**args, key: x - h})))
        ) / (2 * h)
        assert float(grads[key]) == pytest.approx(fd, rel=1e-7, abs=1e-9 * value / abs(x)), key
    # d M200 / d log10 M200 = ln(10) M200 through the root find; d M200 / d c200 = 0
    g = jax.jit(jax.grad(m200_back, argnums=(0, 1)))(8.5, 17.0)
    assert float(g[0]) == pytest.approx(math.log(10) * 10**8.5, rel=1e-10)
    assert abs(float(g[1])) < 1e-10 * 10**8.5
    batch = jax.jit(
        jax.vmap(lambda m: cls.from_m200_c200(m, 17.0, rho_c=RHO_C, **SHAPES[cls]).m200(RHO_C))
    )
    assert _rel(batch(jnp.array([1e6, 1e8, 1e10])), [1e6, 1e8, 1e10]) < 1e-13


def test_r200_not_bracketed_is_nan():
    # a cored halo whose central density is below 200 rho_c never reaches that mean density
    p = Burkert(rho_s=100.0 * RHO_C, r_s=1.0)
    assert math.isnan(float(p.r200(RHO_C)))


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
