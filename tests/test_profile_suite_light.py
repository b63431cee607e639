"""Generic checks of every registered light profile, on the examples of tests/profile_setup.py.

Part of the profile suite (tests/test_profile_suite.py holds the checks shared with the dark
profiles and the registry test). scipy.integrate.quad (tight tolerances) on the profile's own
Sigma and nu: normalisation, enclosed light and the Abel projection
Sigma(R) = 2 Int_R^inf nu r dr / sqrt(r^2 - R^2) (common practice), which ties each Sigma/nu pair
together independently of how the module computes them; then half-light radii, from_r_half,
limits at infinity, gradients, jit and vmap.
"""

import math

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from light_setup import EVAL, GRADS, RADIAL, SCALAR, at, canon, everything, quad, scalar
from profile_setup import LIGHT_EXAMPLES, from_r_half_args

import halo  # noqa: F401  (float64)
from halo.physics.light import LIGHT_PROFILES

CASES = [
    pytest.param((name, kw), id=f"{name}-{key}")
    for name in sorted(LIGHT_PROFILES)
    for key, kw in LIGHT_EXAMPLES.get(name, {}).items()
]


# ----------------------------------------------------------------------------- helpers


#: everything over a batch of profiles (leading axis of every leaf)
_VEVAL = jax.jit(jax.vmap(everything, in_axes=(0, None)))


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
    return canon(LIGHT_PROFILES[name](**kw))


# ----------------------------------------------------------------------------- registry


# ----------------------------------------------------------------------------- generic suite


def test_total_and_enclosed_light_match_quadrature(profile):
    # scipy quad of 2 pi R Sigma and 4 pi r^2 nu: total light (to the edge or infinity) and L(<r)
    sig, nu = scalar(profile, "surface_density"), scalar(profile, "density")
    edge = float(profile.r_edge())
    rs = [*_radii(profile), edge if math.isfinite(edge) else np.inf]
    l2 = [quad(lambda s: 2 * np.pi * s * sig(s), 0.0, R, _breaks(profile)) for R in rs]
    l3 = [quad(lambda s: 4 * np.pi * s * s * nu(s), 0.0, R, _breaks(profile)) for R in rs]
    assert l2[-1] == pytest.approx(1.0, abs=1e-11) and l3[-1] == pytest.approx(1.0, abs=1e-11)
    got = EVAL(profile, jnp.asarray(rs[:-1]))
    np.testing.assert_allclose(got["enclosed_2d"], l2[:-1], rtol=1e-12)
    np.testing.assert_allclose(got["enclosed_3d"], l3[:-1], rtol=1e-12)


def test_surface_density_is_abel_projection_of_density(profile):
    # Sigma(R) = 2 Int_R^edge nu r dr / sqrt(r^2 - R^2) (line-of-sight projection of a spherical
    # density, common practice); r = R cosh t removes the singularity.
    # Untruncated profiles: cut at r = 1e5 R_e (Plummer tail beyond: < 1e-18 relative)
    nu = scalar(profile, "density")
    edge = min(float(profile.r_edge()), 1e5 * float(profile.r_half_2d()))
    rs = _radii(profile)
    proj = [
        2.0
        * quad(lambda t, R=R: nu(R * math.cosh(t)) * R * math.cosh(t), 0.0, math.acosh(edge / R))
        for R in rs
    ]
    np.testing.assert_allclose(EVAL(profile, jnp.asarray(rs))["surface_density"], proj, rtol=1e-11)


def test_half_light_radii_and_from_r_half(profile):
    out = EVAL(profile, jnp.asarray(_radii(profile)))
    r2, r3 = out["r_half_2d"], out["r_half_3d"]
    assert float(EVAL(profile, at(r2))["enclosed_2d"][0]) == pytest.approx(0.5, abs=1e-14)
    assert float(EVAL(profile, at(r3))["enclosed_3d"][0]) == pytest.approx(0.5, abs=1e-14)
    assert float(r3) > float(r2)  # projection moves light inwards
    p = type(profile).from_r_half(0.037, *from_r_half_args(_name(profile), type(profile)))
    assert float(EVAL(canon(p), at(1.0))["r_half_2d"]) == pytest.approx(0.037, rel=1e-13)


def test_positive_increasing_and_limits(profile):
    out = EVAL(profile, jnp.asarray(_radii(profile)))
    assert np.all(np.asarray(out["surface_density"]) > 0)
    assert np.all(np.asarray(out["density"]) > 0)
    for m in ("enclosed_2d", "enclosed_3d"):
        lum = np.asarray(out[m])
        assert np.all(np.diff(lum) > 0) and np.all((lum > 0) & (lum < 1))
    # at infinity: no light density, all the light, finite gradients (common practice)
    far = at(jnp.inf)
    out = EVAL(profile, far)
    np.testing.assert_array_equal(out["surface_density"], 0.0)
    np.testing.assert_array_equal(out["density"], 0.0)
    np.testing.assert_array_equal(out["enclosed_2d"], 1.0)
    np.testing.assert_array_equal(out["enclosed_3d"], 1.0)
    assert all(np.all(np.isfinite(v)) for v in jax.tree_util.tree_leaves(GRADS(profile, far)))


def test_gradients_match_finite_differences(profile):
    rs = _radii(profile)
    h = 1e-3 * np.minimum(rs, float(profile.r_edge()) - rs)
    grads = GRADS(profile, jnp.asarray(rs))
    val = {m: np.abs(np.asarray(v)) for m, v in EVAL(profile, jnp.asarray(rs)).items()}
    for m in RADIAL:
        fd = _fd(lambda r, m=m: EVAL(profile, r)[m], rs, h)
        # 1e-8 relative plus the difference quotient's rounding error ~ eps |f| / h
        _assert_close(grads[m, "r"], fd, 1e-8 * np.abs(fd) + 1e-14 * val[m] / h)
    for i, leaf in enumerate(jax.tree_util.tree_leaves(profile)):
        v = float(leaf)
        fd = _fd(
            lambda x, i=i: _finite_only(EVAL(_with_leaf(profile, i, x), jnp.asarray(rs))),
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
    cls, args = type(profile), (0.037, *from_r_half_args(_name(profile), type(profile)))

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
    jitted, eager = EVAL(profile, rs), everything(profile, rs)
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
        want = EVAL(one, rs)
        for m in RADIAL + SCALAR:
            np.testing.assert_allclose(got[m][k], want[m], rtol=1e-13, err_msg=m)
