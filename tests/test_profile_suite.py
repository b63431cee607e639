"""One suite that every dark profile, light profile and mass component must pass.

Parametrised over ``halo.physics.dark.DARK_PROFILES``, ``halo.physics.light.LIGHT_PROFILES`` and
the mass components of ``halo.physics.mass`` (``Stars``, ``MassModel``) built from them. Every
registered profile needs an entry in the example tables of tests/profile_setup.py:
``test_every_registered_profile_has_examples`` fails otherwise, so a new profile cannot be added
without being tested here. The light profiles' own generic checks (Abel projection, half-light
radii, from_r_half) are in tests/test_profile_suite_light.py, on the same table.

Checks (references are independent of how the module computes each quantity):

- cumulative from density: M(<r) = Int 4 pi r^2 rho dr, L(<r) = Int 4 pi r^2 nu dr and
  L(<R) = Int 2 pi R Sigma dR by scipy.integrate.quad (epsrel 1e-12, in ln r; common practice),
  to 1e-10 relative (the modules state 1e-12 or better for their own integrals);
- positivity and monotonicity, zero density and constant mass beyond ``r_edge``;
- jax gradients against central finite differences, for every parameter leaf and for r;
- jit against no jit, and vmap over batched parameters and over radii.
"""

import dataclasses
import math

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from profile_setup import (
    DARK_EXAMPLES,
    DARK_SHAPES,
    LIGHT_EXAMPLES,
    LIGHT_SHAPES,
    MODEL_EXAMPLES,
)
from scipy import integrate

from halo.physics.dark import DARK_PROFILES
from halo.physics.light import LIGHT_PROFILES
from halo.physics.mass import MassModel, Stars

# ------------------------------------------------------------------ example tables (kpc, Msun)

#: radii in units of each case's scale (dark: r_s; light: R_e); none near a truncation radius
RADII = np.array([1e-3, 1e-2, 0.1, 0.37, 1.0, 2.3, 6.0, 20.0, 100.0])

#: stellar mass used for the Stars / MassModel cases [Msun]
M_STAR = 3.0e4

#: MassModel.log_slope is a centred difference in ln r (step 1e-4): absolute round-off ~1e-11
MODEL_SLOPE_NOISE = 1e-10


@dataclasses.dataclass(frozen=True)
class Case:
    obj: object
    radii: np.ndarray
    #: methods evaluated on radii
    funcs: tuple
    #: (cumulative, density, dimension d, normalisation): cumulative = norm Int r^(d-1) density dr
    integrals: tuple
    #: methods that are densities (> 0 inside, 0 beyond the edge) and cumulatives (increasing)
    densities: tuple
    cumulatives: tuple
    #: radii [kpc] where a component's density drops to zero (MassModel has no r_edge of its own)
    edges: tuple
    #: absolute round-off of a method's values where larger than ~1e-14 relative
    noise: tuple = ()

    @property
    def edge(self):
        return max(self.edges)


def _f64(obj):
    """Every leaf as a float64 array, so that compiled functions are shared between tests."""
    return jax.tree_util.tree_map(lambda v: np.asarray(v, dtype=np.float64), obj)


_MASS = (("mass", "density", 3, 4 * math.pi),)


def _dark_case(name, key):
    kw = DARK_EXAMPLES[name][key]
    obj = DARK_PROFILES[name](**kw)
    funcs = ("density", "mass", "log_slope")
    return Case(
        _f64(obj), RADII * kw["r_s"], funcs, _MASS, ("density",), ("mass",), (float(obj.r_edge()),)
    )


def _light_case(name, key):
    obj = LIGHT_PROFILES[name](**LIGHT_EXAMPLES[name][key])
    return Case(
        _f64(obj),
        RADII * float(obj.r_half_2d()),
        ("density", "enclosed_3d", "surface_density", "enclosed_2d"),
        (
            ("enclosed_3d", "density", 3, 4 * math.pi),
            ("enclosed_2d", "surface_density", 2, 2 * math.pi),
        ),
        ("density", "surface_density"),
        ("enclosed_3d", "enclosed_2d"),
        (float(obj.r_edge()),),
    )


def _stars_case(name, key):
    light = LIGHT_PROFILES[name](**LIGHT_EXAMPLES[name][key])
    obj = Stars(light, M_STAR)
    r = RADII * float(light.r_half_2d())
    return Case(
        _f64(obj), r, ("density", "mass"), _MASS, ("density",), ("mass",), (float(light.r_edge()),)
    )


def _model_case(dark_name, dark_key, light_name, light_key):
    kw = DARK_EXAMPLES[dark_name][dark_key]
    halo = DARK_PROFILES[dark_name](**kw)
    stars = Stars(LIGHT_PROFILES[light_name](**LIGHT_EXAMPLES[light_name][light_key]), M_STAR)
    return Case(
        _f64(MassModel((halo, stars))),
        RADII * kw["r_s"],
        ("density", "mass", "log_slope"),
        _MASS,
        ("density",),
        ("mass",),
        (float(halo.r_edge()), float(stars.r_edge())),
        (("log_slope", MODEL_SLOPE_NOISE),),
    )


def _cases():
    out = []
    for name in DARK_PROFILES:
        for key in DARK_EXAMPLES.get(name, {}):
            out.append(pytest.param(("dark", name, key), id=f"dark-{name}-{key}"))
    for name in LIGHT_PROFILES:
        for i, key in enumerate(LIGHT_EXAMPLES.get(name, {})):
            out.append(pytest.param(("light", name, key), id=f"light-{name}-{key}"))
            if i == 0:
                out.append(pytest.param(("stars", name, key), id=f"stars-{name}-{key}"))
    for d, dk, l, lk in MODEL_EXAMPLES:
        if d in DARK_PROFILES and l in LIGHT_PROFILES:
            out.append(pytest.param(("model", d, dk, l, lk), id=f"model-{d}-{dk}+{l}-{lk}"))
    return out


_BUILD = {"dark": _dark_case, "light": _light_case, "stars": _stars_case, "model": _model_case}


@pytest.fixture(params=_cases())
def case(request):
    kind, *args = request.param
    return _BUILD[kind](*args)


@pytest.fixture(params=[c for c in _cases() if c.values[0][0] in ("dark", "model")])
def slope_case(request):
    """The cases with a ``log_slope`` method (dark profiles and mass models)."""
    kind, *args = request.param
    return _BUILD[kind](*args)


def _evaluate(obj, r, funcs):
    return {f: getattr(obj, f)(r) for f in funcs}


#: one compiled evaluator shared by all tests (cached per profile structure and radius shape)
_ev = jax.jit(_evaluate, static_argnums=2)


# ------------------------------------------------------------------------------- registry


def test_every_registered_profile_has_examples():
    # adding a profile to a registry without an example here must break the build
    missing = [f"dark:{n}" for n in DARK_PROFILES if not DARK_EXAMPLES.get(n)]
    missing += [f"dark shape:{n}" for n in DARK_PROFILES if n not in DARK_SHAPES]
    missing += [f"light:{n}" for n in LIGHT_PROFILES if not LIGHT_EXAMPLES.get(n)]
    missing += [f"light shape:{n}" for n in LIGHT_PROFILES if n not in LIGHT_SHAPES]
    assert not missing, f"profiles without an entry in tests/profile_setup.py: {missing}"
    # and every example builds the class it is filed under
    for table, registry in ((DARK_EXAMPLES, DARK_PROFILES), (LIGHT_EXAMPLES, LIGHT_PROFILES)):
        for name in registry:
            for kw in table[name].values():
                assert isinstance(registry[name](**kw), registry[name])
    for d, dk, l, lk in MODEL_EXAMPLES:
        assert dk in DARK_EXAMPLES[d] and lk in LIGHT_EXAMPLES[l]


def test_declared_parameters_match_the_constructors():
    # what the inputs stage derives from a profile class must be a consistent declaration: every
    # declared dark shape parameter is a constructor field (under its field name), those that may
    # be left out have the constructor's default, and the checks name declared parameters only
    for name, cls in DARK_PROFILES.items():
        fields = {f.name: f for f in dataclasses.fields(cls)}
        declared = set(cls.shape_parameters)
        for s in cls.shape_parameters:
            assert cls.field_names.get(s, s) in fields, (name, s)
        for s, default in cls.optional.items():
            assert s in declared and fields[cls.field_names.get(s, s)].default == default, (name, s)
        assert set(cls.field_names) <= declared, name
        assert set(cls.positive) <= declared and set(cls.unit_interval) <= declared, name
        shape = {cls.field_names.get(k, k) for k in declared} | {"rho_s", "r_s"}
        assert set(DARK_SHAPES[name]) <= shape, name
    for name, cls in LIGHT_PROFILES.items():
        assert set(cls.satellite_keys) == set(cls.shape_parameters), name
        assert set(LIGHT_SHAPES[name]) == set(cls.shape_parameters), name


# ------------------------------------------------------------------- cumulative from density


def _quad_cumulative(dens, radii, dim, norm, edges):
    """norm Int_0^r s^(dim-1) dens(s) ds = norm Int s^dim dens(s) d ln s at sorted ``radii``.

    scipy quad (epsrel 1e-12) from r_0 e^-40 to r_0 and between consecutive radii, summed; pieces
    are split at truncation radii. The lower limit leaves out < e^-60 of the integral for inner
    slopes shallower than -1.5.
    """
    bounds = np.log(np.concatenate([[radii[0] * math.exp(-40.0)], radii]))
    total, out = 0.0, []
    for lo, hi in zip(bounds[:-1], bounds[1:], strict=True):
        points = [math.log(e) for e in edges if lo < math.log(e) < hi] or None
        val, _ = integrate.quad(
            lambda u: math.exp(dim * u) * float(dens(math.exp(u))),
            lo,
            hi,
            points=points,
            epsabs=0.0,
            epsrel=1e-12,
            limit=400,
        )
        total += val
        out.append(norm * total)
    return np.array(out)


def test_cumulative_matches_quadrature_of_density(case):
    out = _ev(case.obj, case.radii, case.funcs)
    for cum, dens, dim, norm in case.integrals:

        def f_dens(r, dens=dens):
            # radius broadcast to the shape of case.radii: reuses the compiled evaluator
            return _ev(case.obj, np.full(case.radii.shape, r), case.funcs)[dens][0]

        ref = _quad_cumulative(f_dens, case.radii, dim, norm, case.edges)
        np.testing.assert_allclose(
            out[cum], ref, rtol=1e-10, atol=0, err_msg=f"{cum} vs quad of {dens}"
        )


# ---------------------------------------------------------------------------------- positivity


def test_positivity_monotonicity_and_edge(case):
    r = np.sort(np.concatenate([case.radii, case.radii * 1.7]))
    a, b = _ev(case.obj, case.radii, case.funcs), _ev(case.obj, case.radii * 1.7, case.funcs)
    order = np.argsort(np.concatenate([case.radii, case.radii * 1.7]))
    out = {f: np.concatenate([a[f], b[f]])[order] for f in case.funcs}
    inside = r < case.edge
    for f in case.densities:
        v = out[f]
        assert np.all(v[inside] > 0.0) and np.all(np.isfinite(v[inside])), f
        assert np.all(v[~inside] == 0.0), f
    for f in case.cumulatives:
        v = out[f]
        assert np.all(v > 0.0) and np.all(np.isfinite(v)), f
        assert np.all(np.diff(v) >= 0.0), f
        # strictly increasing inside the edge until it reaches its total in float64
        unsaturated = inside[1:] & (v[1:] < v[-1] * (1.0 - 1e-13))
        assert np.all(np.diff(v)[unsaturated] > 0.0), f
        if np.any(~inside):
            assert np.allclose(v[~inside], v[~inside][0], rtol=1e-14, atol=0), f
    if "log_slope" in case.funcs:
        s = out["log_slope"][inside]
        assert np.all(np.isfinite(s)) and np.all(s <= 1e-12)


def test_log_slope_matches_density(slope_case):
    # d ln rho / d ln r by a fourth-order central difference of the density (h = 1e-3: truncation
    # and round-off ~1e-12; common practice), away from truncation radii
    case = slope_case
    near = np.any([np.abs(case.radii / e - 1.0) < 0.05 for e in case.edges], axis=0)
    use = (case.radii < case.edge) & ~near
    h = 1e-3

    def ln_rho(k):
        return np.log(
            np.asarray(_ev(case.obj, case.radii * np.exp(k * h), case.funcs)["density"])[use]
        )

    ref = (8 * (ln_rho(1) - ln_rho(-1)) - (ln_rho(2) - ln_rho(-2))) / (12 * h)
    got = np.asarray(_ev(case.obj, case.radii, case.funcs)["log_slope"])[use]
    # analytic slopes agree to ~1e-11; MassModel's own centred difference (step 1e-4) to ~1e-8
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-7)


# ------------------------------------------------------------------------------------- gradients


def _flat(obj):
    leaves, treedef = jax.tree_util.tree_flatten(obj)
    return [np.asarray(v, dtype=np.float64) for v in leaves], treedef


def test_gradients_match_finite_differences(case):
    leaves, treedef = _flat(case.obj)
    funcs = case.funcs
    n_leaf, n = len(leaves), len(case.radii)

    def fn(leaves, r):
        out = _evaluate(jax.tree_util.tree_unflatten(treedef, leaves), r, funcs)
        v = jnp.concatenate([jnp.ravel(out[f]) for f in funcs])
        # e.g. log slopes beyond a truncation radius are -inf: compare the finite entries only
        return jnp.where(jnp.isfinite(v), v, 0.0)

    @jax.jit
    def value_and_derivatives(leaves, r):
        # forward mode along each parameter leaf and along r (all radii at once: f acts pointwise)
        eye = jnp.eye(n_leaf + 1)
        t_leaves = [eye[:, i] for i in range(n_leaf)]
        t_r = jnp.outer(eye[:, n_leaf], jnp.ones_like(r))
        d = jax.vmap(lambda tl, tr: jax.jvp(fn, (leaves, r), (tl, tr))[1])(t_leaves, t_r)
        return fn(leaves, r), d

    def value(leaves, r):
        return np.asarray(value_and_derivatives(leaves, r)[0])

    r = case.radii
    base, d = (np.asarray(v) for v in value_and_derivatives(leaves, r))
    assert np.all(np.isfinite(d))
    # absolute round-off of each entry: ~1e-14 relative, more for MassModel's numerical slope
    noise = dict(case.noise)
    abs_noise = np.concatenate([np.full(n, noise.get(f, 0.0)) for f in funcs]) + 1e-14 * np.abs(
        base
    )
    h = 1e-5
    checked = 0
    for i, p in enumerate(leaves):
        if not np.isfinite(p):  # an untruncated r_t = inf has no finite difference
            continue
        step = h * (abs(float(p)) if p != 0 else 1.0)
        up = [v.copy() for v in leaves]
        dn = [v.copy() for v in leaves]
        up[i] = up[i] + step
        dn[i] = dn[i] - step
        fd = (value(up, r) - value(dn, r)) / (2 * step)
        # FD truncation error ~h^2 (relative), round-off ~noise / step
        tol = 1e-6 * np.abs(fd) + 1e-8 * np.abs(base) / (step / h) + 2 * abs_noise / step
        bad = np.abs(d[i] - fd) > tol
        assert not np.any(bad), f"leaf {i}: jax {d[i][bad]} vs finite differences {fd[bad]}"
        checked += 1
    assert checked >= 1

    # radius: d f / d r against a central difference with step h r
    rr = np.tile(r, len(funcs))
    fd = (value(leaves, r * (1 + h)) - value(leaves, r * (1 - h))) / (2 * h * rr)
    tol = 1e-6 * np.abs(fd) + 1e-8 * np.abs(base) / rr + 2 * abs_noise / (h * rr)
    bad = np.abs(d[n_leaf] - fd) > tol
    assert not np.any(bad), f"d/dr: jax {d[n_leaf][bad]} vs finite differences {fd[bad]}"


# ---------------------------------------------------------------------------------- jit and vmap


def _same(a, b, rtol, atol=0.0):
    a, b = np.asarray(a), np.asarray(b)
    fin = np.isfinite(a)
    assert np.array_equal(fin, np.isfinite(b)) and np.array_equal(a[~fin], b[~fin], equal_nan=True)
    np.testing.assert_allclose(a[fin], b[fin], rtol=rtol, atol=atol)


def test_jit_matches_eager(case):
    eager = _evaluate(case.obj, case.radii, case.funcs)
    jitted = _ev(case.obj, case.radii, case.funcs)
    noise = dict(case.noise)
    for f in case.funcs:
        _same(jitted[f], eager[f], rtol=1e-12, atol=noise.get(f, 0.0))


def test_vmap_over_parameters_and_radii(case):
    leaves, treedef = _flat(case.obj)
    factors = (1.0, 1.02, 0.97)
    objs = [jax.tree_util.tree_unflatten(treedef, [v * k for v in leaves]) for k in factors]
    batch = jax.tree_util.tree_map(lambda *xs: jnp.stack(xs), *objs)
    funcs = case.funcs

    # outer vmap over parameter sets, inner vmap over scalar radii
    def one(o, r):
        return _evaluate(o, r, funcs)

    batched = jax.jit(jax.vmap(jax.vmap(one, in_axes=(None, 0)), in_axes=(0, None)))(
        batch, case.radii
    )
    noise = dict(case.noise)
    for k, o in enumerate(objs):
        ref = _ev(o, case.radii, funcs)
        for f in funcs:
            _same(batched[f][k], ref[f], rtol=1e-12, atol=noise.get(f, 0.0))
