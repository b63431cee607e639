"""Dark profiles built from (M200, c200): closed forms, colossus, the differentiable root find."""

import math

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from dark_setup import RHO_C, SHAPES, rel

from halo.physics.cosmology import rho_crit
from halo.physics.dark import NFW, Burkert, Einasto


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
    assert rel(ours.mass(r), ref.enclosedMass(r * h) / h) < 1e-6


# ---------------------------------------------------------------------- all dark profiles


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
    assert rel(batch(jnp.array([1e6, 1e8, 1e10])), [1e6, 1e8, 1e10]) < 1e-13


def test_r200_not_bracketed_is_nan():
    # a cored halo whose central density is below 200 rho_c never reaches that mean density
    p = Burkert(rho_s=100.0 * RHO_C, r_s=1.0)
    assert math.isnan(float(p.r200(RHO_C)))
