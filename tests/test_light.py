"""Light profiles: every registered profile against quadrature oracles, then per-profile checks.

The generic checks use scipy.integrate.quad (tight tolerances) on the profile's own Sigma and nu:
normalisation, enclosed light and the Abel projection
Sigma(R) = 2 Int_R^inf nu r dr / sqrt(r^2 - R^2) (common practice), which ties each Sigma/nu pair
together independently of how the module computes them.
"""

import functools
import math

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from scipy import integrate, optimize, special

import halo  # noqa: F401  (float64)
from halo.physics.light import LIGHT_PROFILES, Exponential, King, Plummer
from halo.physics.light_exponential import _k0

#: direct-constructor examples (kpc) for every registered profile
EXAMPLES = {
    "plummer": [dict(a=0.03)],
    "exponential": [dict(r_d=0.02)],
    "king": [dict(r_c=0.01, r_t=0.08), dict(r_c=0.002, r_t=0.2)],
}
#: extra positional arguments of ``from_r_half`` after r_half_2d
FROM_R_HALF_ARGS = {"plummer": (), "exponential": (), "king": (6.0,)}

CASES = [
    pytest.param((name, kw), id=f"{name}-{i}")
    for name in sorted(LIGHT_PROFILES)
    for i, kw in enumerate(EXAMPLES.get(name, []))
]
RADIAL = ("surface_density", "density", "enclosed_2d", "enclosed_3d")
SCALAR = ("r_half_2d", "r_half_3d", "r_edge")


# ----------------------------------------------------------------------------- helpers


def _quad(f, a, b, points=(), epsrel=1e-13):
    """scipy quad over [a, b] split at `points`, tight tolerances; returns the sum."""
    edges = [a] + sorted(p for p in points if a < p < b) + [b]
    total = 0.0
    for lo, hi in zip(edges[:-1], edges[1:], strict=True):
        total += integrate.quad(f, lo, hi, epsabs=0.0, epsrel=epsrel, limit=400)[0]
    return total


def _everything(p, r):
    """All methods of profile p: radial ones at r, scalar ones."""
    out = {m: getattr(p, m)(r) for m in RADIAL}
    out.update({m: getattr(p, m)() for m in SCALAR})
    return out


#: one compiled evaluator per (profile structure, shape of r)
_EVAL = jax.jit(_everything)


@jax.jit
def _GRADS(p, r):
    """d(method)/dr at each r and d(method)/d(parameters): one compiled function per structure."""
    out = {}
    for m in RADIAL:
        gp, gr = jax.vmap(jax.grad(lambda q, x, m=m: getattr(q, m)(x), (0, 1)), (None, 0))(p, r)
        out[m, "r"], out[m, "p"] = gr, gp
    for m in SCALAR:
        out[m, "p"] = jax.grad(lambda q, m=m: getattr(q, m)())(p)
    return out


#: _everything over a batch of profiles (leading axis of every leaf)
_VEVAL = jax.jit(jax.vmap(_everything, in_axes=(0, None)))

#: L(<r) alone, for the quadrature-order convergence checks (n_quad is static: one compile each)
_ENC3 = jax.jit(lambda p, r: p.enclosed_3d(r))


def _canon(p):
    """Leaves as float64 arrays (one compiled version per profile structure)."""
    return jax.tree_util.tree_map(lambda v: jnp.asarray(v, dtype=jnp.float64), p)


@functools.cache
def _call(m):
    return jax.jit(lambda p, r: getattr(p, m)(r))


N_R = 6  # every radius array has this shape, so each profile structure compiles once


def _at(r):
    """r broadcast to the common shape (N_R,), float64."""
    return jnp.broadcast_to(jnp.asarray(r, dtype=jnp.float64), (N_R,))


def _scalar(p, m):
    """Python float -> float version of p.m, for scipy quad."""
    f = _call(m)
    return lambda x: float(f(p, x))


def _radii(p):
    """Six radii spanning the profile, strictly inside its edge [kpc]."""
    rh = float(p.r_half_2d())
    edge = float(p.r_edge())
    if not math.isfinite(edge):
        return rh * np.array([1e-3, 0.1, 0.5, 1.0, 2.5, 6.0])
    return np.array([1e-3 * rh, 0.1 * rh, 0.5 * rh, rh, math.sqrt(rh * edge), 0.98 * edge])


def _breaks(p):
    rh = float(p.r_half_2d())
    return [rh * f for f in (0.01, 0.1, 1.0, 3.0, 10.0, 30.0)]


def _with_leaf(p, i, v):
    leaves, treedef = jax.tree_util.tree_flatten(p)
    leaves[i] = jnp.asarray(v, dtype=jnp.float64)
    return jax.tree_util.tree_unflatten(treedef, leaves)


def _fd(f, x, h):
    """Five-point central difference (error O(h^4)) of f at x with step h (f may return a dict)."""
    fs = [jax.tree_util.tree_map(np.asarray, f(x + k * h)) for k in (2, 1, -1, -2)]
    return jax.tree_util.tree_map(lambda a, b, c, d: (8 * (b - c) - (a - d)) / (12 * h), *fs)


def _assert_close(got, want, tol):
    got, want = np.asarray(got), np.asarray(want)
    assert np.all(np.isfinite(got))
    bad = np.abs(got - want) > tol
    assert not bad.any(), (
        f"got {got[bad]}, want {want[bad]}, tol {np.broadcast_to(tol, bad.shape)[bad]}"
    )


def _finite_only(d):
    return {k: v for k, v in d.items() if np.all(np.isfinite(v))}


def _name(profile):
    return next(n for n, c in LIGHT_PROFILES.items() if isinstance(profile, c))


@pytest.fixture(params=CASES)
def profile(request):
    name, kw = request.param
    return _canon(LIGHT_PROFILES[name](**kw))


# ----------------------------------------------------------------------------- registry


def test_every_registered_profile_has_examples():
    for name in LIGHT_PROFILES:
        assert EXAMPLES.get(name), f"light profile {name!r} has no example in tests/test_light.py"
        assert name in FROM_R_HALF_ARGS, f"light profile {name!r} has no from_r_half example"


# ----------------------------------------------------------------------------- generic suite


def test_total_and_enclosed_light_match_quadrature(profile):
    # scipy quad of 2 pi R Sigma and 4 pi r^2 nu: total light (to the edge or infinity) and L(<r)
    sig, nu = _scalar(profile, "surface_density"), _scalar(profile, "density")
    edge = float(profile.r_edge())
    rs = [*_radii(profile), edge if math.isfinite(edge) else np.inf]
    l2 = [_quad(lambda s: 2 * np.pi * s * sig(s), 0.0, R, _breaks(profile)) for R in rs]
    l3 = [_quad(lambda s: 4 * np.pi * s * s * nu(s), 0.0, R, _breaks(profile)) for R in rs]
    assert l2[-1] == pytest.approx(1.0, abs=1e-11) and l3[-1] == pytest.approx(1.0, abs=1e-11)
    got = _EVAL(profile, jnp.asarray(rs[:-1]))
    np.testing.assert_allclose(got["enclosed_2d"], l2[:-1], rtol=1e-12)
    np.testing.assert_allclose(got["enclosed_3d"], l3[:-1], rtol=1e-12)


def test_surface_density_is_abel_projection_of_density(profile):
    # Sigma(R) = 2 Int_R^edge nu r dr / sqrt(r^2 - R^2) (line-of-sight projection of a spherical
    # density, common practice); r = R cosh t removes the singularity.
    # Untruncated profiles: cut at r = 1e5 R_e (Plummer tail beyond: < 1e-18 relative)
    nu = _scalar(profile, "density")
    edge = min(float(profile.r_edge()), 1e5 * float(profile.r_half_2d()))
    rs = _radii(profile)
    proj = [
        2.0
        * _quad(lambda t, R=R: nu(R * math.cosh(t)) * R * math.cosh(t), 0.0, math.acosh(edge / R))
        for R in rs
    ]
    np.testing.assert_allclose(_EVAL(profile, jnp.asarray(rs))["surface_density"], proj, rtol=1e-11)


def test_half_light_radii_and_from_r_half(profile):
    out = _EVAL(profile, jnp.asarray(_radii(profile)))
    r2, r3 = out["r_half_2d"], out["r_half_3d"]
    assert float(_EVAL(profile, _at(r2))["enclosed_2d"][0]) == pytest.approx(0.5, abs=1e-14)
    assert float(_EVAL(profile, _at(r3))["enclosed_3d"][0]) == pytest.approx(0.5, abs=1e-14)
    assert float(r3) > float(r2)  # projection moves light inwards
    p = type(profile).from_r_half(0.037, *FROM_R_HALF_ARGS[_name(profile)])
    assert float(_EVAL(_canon(p), _at(1.0))["r_half_2d"]) == pytest.approx(0.037, rel=1e-13)


def test_positive_increasing_and_limits(profile):
    out = _EVAL(profile, jnp.asarray(_radii(profile)))
    assert np.all(np.asarray(out["surface_density"]) > 0)
    assert np.all(np.asarray(out["density"]) > 0)
    for m in ("enclosed_2d", "enclosed_3d"):
        lum = np.asarray(out[m])
        assert np.all(np.diff(lum) > 0) and np.all((lum > 0) & (lum < 1))
    # at infinity: no light density, all the light, finite gradients (common practice)
    far = _at(jnp.inf)
    out = _EVAL(profile, far)
    np.testing.assert_array_equal(out["surface_density"], 0.0)
    np.testing.assert_array_equal(out["density"], 0.0)
    np.testing.assert_array_equal(out["enclosed_2d"], 1.0)
    np.testing.assert_array_equal(out["enclosed_3d"], 1.0)
    assert all(np.all(np.isfinite(v)) for v in jax.tree_util.tree_leaves(_GRADS(profile, far)))


def test_gradients_match_finite_differences(profile):
    rs = _radii(profile)
    h = 1e-3 * np.minimum(rs, float(profile.r_edge()) - rs)
    grads = _GRADS(profile, jnp.asarray(rs))
    val = {m: np.abs(np.asarray(v)) for m, v in _EVAL(profile, jnp.asarray(rs)).items()}
    for m in RADIAL:
        fd = _fd(lambda r, m=m: _EVAL(profile, r)[m], rs, h)
        # 1e-8 relative plus the difference quotient's rounding error ~ eps |f| / h
        _assert_close(grads[m, "r"], fd, 1e-8 * np.abs(fd) + 1e-14 * val[m] / h)
    for i, leaf in enumerate(jax.tree_util.tree_leaves(profile)):
        v = float(leaf)
        fd = _fd(
            lambda x, i=i: _finite_only(_EVAL(_with_leaf(profile, i, x), jnp.asarray(rs))),
            v,
            1e-4 * v,
        )
        for m in RADIAL:
            g = jax.tree_util.tree_leaves(grads[m, "p"])[i]
            _assert_close(g, fd[m], 1e-8 * np.abs(fd[m]) + 1e-10 * val[m] / v)
        for m in SCALAR:
            g = jax.tree_util.tree_leaves(grads[m, "p"])[i]
            if m not in fd:  # r_edge = inf
                assert float(g) == 0.0
                continue
            _assert_close(g, fd[m], 1e-8 * abs(fd[m]) + 1e-12)


def test_from_r_half_gradients(profile):
    cls, args = type(profile), (0.037, *FROM_R_HALF_ARGS[_name(profile)])

    @jax.jit
    def f(a):
        p = cls.from_r_half(*a)
        return jnp.stack(jax.tree_util.tree_leaves(p) + [p.r_half_2d()])

    jac = jax.jacfwd(f)(jnp.asarray(args, dtype=jnp.float64))
    for j in range(len(args)):
        e = np.eye(len(args))[j]
        fd = _fd(
            lambda x, e=e, j=j: f(jnp.asarray(args) + (x - args[j]) * e), args[j], 1e-4 * args[j]
        )
        _assert_close(jac[:, j], fd, 1e-8 * np.abs(fd) + 1e-13)


def test_jit_matches_eager(profile):
    rs = jnp.asarray(_radii(profile))
    jitted, eager = _EVAL(profile, rs), _everything(profile, rs)
    for m in RADIAL + SCALAR:
        np.testing.assert_allclose(jitted[m], eager[m], rtol=1e-13, err_msg=m)


def test_vmap_over_batched_profiles(profile):
    leaves, treedef = jax.tree_util.tree_flatten(profile)
    scales = np.array([1.0, 1.25, 0.8])
    batched = jax.tree_util.tree_unflatten(
        treedef, [jnp.asarray(float(v) * scales ** (i + 1)) for i, v in enumerate(leaves)]
    )
    rs = jnp.asarray(_radii(profile))
    got = _VEVAL(batched, rs)
    for k, s in enumerate(scales):
        one = jax.tree_util.tree_unflatten(
            treedef, [v * s ** (i + 1) for i, v in enumerate(leaves)]
        )
        want = _EVAL(one, rs)
        for m in RADIAL + SCALAR:
            np.testing.assert_allclose(got[m][k], want[m], rtol=1e-13, err_msg=m)


# ----------------------------------------------------------------------------- Plummer


def test_plummer_formulas():
    a = 0.03
    p = _canon(Plummer(a=a))
    r = np.array([0.001, 0.01, 0.03, 0.05, 0.1, 0.3])
    out = _EVAL(p, jnp.asarray(r))
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
        lambda x: _quad(lambda s: 3 * s * s * (1 + s * s) ** -2.5, 0, x) - 0.5, 0.5, 3, xtol=1e-15
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
    return 2 / np.pi * _quad(lambda s: s * s * special.k0(s), 0.0, x, (1e-3, 1.0, 10.0))


def test_exponential_over_wide_range():
    rd = 0.02
    p = _canon(Exponential(r_d=rd))
    x = np.geomspace(1e-5, 50.0, 4 * N_R)
    r = x * rd
    out = [_EVAL(p, jnp.asarray(chunk)) for chunk in r.reshape(4, N_R)]
    grads = [_GRADS(p, jnp.asarray(chunk)) for chunk in r.reshape(4, N_R)]
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
        np.abs(np.asarray(_ENC3(_canon(Exponential(rd, n_quad=n)), jnp.asarray(r))) / ref - 1).max()
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
    out = _EVAL(_canon(Exponential(r_d=1.0)), _at(1.0))
    # R_e / r_d: root of 1 - e^-x (1 + x) = 1/2 (exponential law; scipy brentq)
    re = optimize.brentq(lambda x: -math.expm1(-x) - x * math.exp(-x) - 0.5, 1, 2, xtol=1e-16)
    assert float(out["r_half_2d"]) == pytest.approx(re, rel=1e-15)
    # r_1/2 / r_d: root of the scipy-quad 3D light, and scipy root of the module's own L(<r)
    r3 = optimize.brentq(lambda x: _exp_l3_reference(x) - 0.5, 2.0, 2.5, xtol=1e-15)
    assert float(out["r_half_3d"]) == pytest.approx(r3, rel=1e-13)
    enc = _scalar(_canon(Exponential(r_d=1.0)), "enclosed_3d")
    r3_own = optimize.brentq(lambda x: enc(x) - 0.5, 2.0, 2.5, xtol=1e-15)
    assert float(out["r_half_3d"]) == pytest.approx(r3_own, rel=1e-13)
    # r_1/2 / R_e = 1.32483, R_e = 1.67835 r_d (values [computed], independent quadrature)
    assert float(out["r_half_3d"] / out["r_half_2d"]) == pytest.approx(1.32483, abs=5e-6)
    assert float(out["r_half_2d"]) == pytest.approx(1.67835, abs=5e-6)


def test_exponential_centre():
    p = _canon(Exponential(r_d=0.02))
    r = jnp.array([0.0, 0.0, 0.0, 1e-9, 1e-7, 1e-5], dtype=jnp.float64)
    out = _EVAL(p, r)
    assert np.isinf(out["density"][0]) and float(out["enclosed_3d"][0]) == 0.0
    assert np.all(np.diff(np.asarray(out["enclosed_3d"])) >= 0)
    g = _GRADS(p, r)
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
    out = _EVAL(_canon(King(r_c=rc, r_t=rt)), jnp.asarray(r))
    # eq. 14 with k from eq. 18 (unit total light: the closed form gives L(<r_t) = 1 exactly)
    # (the direct eq. 14 reference cancels near r_t: 1e-11)
    np.testing.assert_allclose(out["surface_density"], [sig(v) for v in r], rtol=1e-11)
    l_edge = _EVAL(_canon(King(rc, rt)), _at(rt * (1 - 1e-15)))["enclosed_2d"][0]
    assert float(l_edge) == pytest.approx(1.0, abs=1e-13)
    # eq. 27 (direct arccos form, accurate away from r_t)
    np.testing.assert_allclose(out["density"][:4], [nu(v) for v in r[:4]], rtol=1e-12)
    # Abel deprojection of eq. 14: nu = -(1/pi) Int_r^r_t Sigma'(R) dR / sqrt(R^2 - r^2);
    # R = r cosh t removes the singularity
    abel = [
        -_quad(lambda t, v=v: dsig(v * math.cosh(t)), 0.0, math.acosh(rt / v)) / np.pi for v in r
    ]
    np.testing.assert_allclose(out["density"], abel, rtol=1e-11)


@pytest.mark.parametrize("c", KING_C)
def test_king_enclosed_3d_and_convergence(c):
    # scipy quad of 4 pi r^2 nu with nu from the independent numpy King (1962) eq. 27
    rc, rt = 0.01, 0.01 * c
    _, _, _, nu = _king_np(rc, rt)
    r = rt * KING_R
    brk = [rc * f for f in (0.1, 1.0, 10.0, 100.0)]
    ref = np.array([_quad(lambda s: 4 * np.pi * s * s * nu(s), 0.0, v, brk) for v in r])
    errs = [
        np.abs(np.asarray(_ENC3(_canon(King(rc, rt, n_quad=n)), jnp.asarray(r))) / ref - 1).max()
        for n in (12, 16, 32, 48)
    ]
    assert errs[2] < 1e-13 and errs[3] < 1e-13  # default n_quad = 32
    assert errs[0] > 10 * errs[2]  # converges with the quadrature order


def test_king_edge_is_exact_and_smooth():
    p = _canon(King(r_c=0.01, r_t=0.08))
    rt = 0.08
    beyond = jnp.array([rt, rt * (1 + 1e-12), 0.2, 1.0, 10.0, jnp.inf], dtype=jnp.float64)
    out = _EVAL(p, beyond)
    np.testing.assert_array_equal(out["surface_density"], 0.0)
    np.testing.assert_array_equal(out["density"], 0.0)
    np.testing.assert_array_equal(out["enclosed_2d"], 1.0)
    np.testing.assert_array_equal(out["enclosed_3d"], 1.0)
    near = jnp.array(
        [0.0, 1e-9, rt * (1 - 1e-12), rt * (1 - 1e-9), rt * (1 - 1e-6), rt * (1 - 1e-3)],
        dtype=jnp.float64,
    )
    out = _EVAL(p, near)
    assert np.all(np.asarray(out["density"]) > 0) and np.all(np.asarray(out["surface_density"]) > 0)
    # nu ~ (r_t - r)^3/2 and Sigma ~ (r_t - R)^2 at the edge (King 1962, eqs. 14 and 27)
    d = np.asarray(out["density"][3:])
    assert d[0] / d[1] == pytest.approx(10**-4.5, rel=1e-5)
    for r in (near, beyond):
        assert all(np.all(np.isfinite(v)) for v in jax.tree_util.tree_leaves(_GRADS(p, r)))


@pytest.mark.parametrize("c", KING_C)
def test_king_half_light_radii_vs_brentq(c):
    rc, rt = 0.01, 0.01 * c
    out = _EVAL(_canon(King(r_c=rc, r_t=rt)), _at(1.0))
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
        lambda r: _quad(lambda s: 4 * np.pi * s * s * nu(s), 0, r, brk) - 0.5, re, rt, xtol=1e-16
    )
    assert float(out["r_half_3d"]) == pytest.approx(r3, rel=1e-12)


def test_king_from_r_half_concentration():
    # R_e / r_c depends on c only: from_r_half(R_e, c) round-trips and r_t / r_c = c
    for c in (1.5, 6.0, 300.0):
        p = King.from_r_half(0.03, c)
        assert float(p.r_t / p.r_c) == pytest.approx(c, rel=1e-14)
        assert float(_EVAL(_canon(p), _at(1.0))["r_half_2d"]) == pytest.approx(0.03, rel=1e-13)
