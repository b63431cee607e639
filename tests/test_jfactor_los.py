"""Angular profiles dJ/dOmega and dD/dOmega against line-of-sight quadrature and the cone."""

import math

import jax
import jax.numpy as jnp
import pytest
from jfactor_setup import DIST, R_S, RHO_S, Cored, los_ref, rho_nfw
from scipy import integrate

from halo.physics.dark import NFW
from halo.physics.jfactor import d_factor, dd_domega, dj_domega, j_factor


@pytest.mark.parametrize("r_t", [math.inf, 2.0])
def test_dj_domega_line_of_sight_and_cone_integral(r_t):
    prof = NFW(rho_s=RHO_S, r_s=R_S, r_t=r_t)
    rho = rho_nfw(RHO_S, R_S, r_t)
    # line-of-sight integral against scipy quad (independent)
    for a in (1e-4, 0.01, 0.3, 1.0, 2.0, 20.0):
        for power, fn in ((2, dj_domega), (1, dd_domega)):
            ref = los_ref(rho, power, DIST, math.radians(a), R_S, r_t)
            got = float(fn(prof, DIST, a))
            assert got == pytest.approx(ref, rel=1e-10, abs=0 if ref else 1e-300)
    # 2 pi Int_0^theta sin(t) dJ/dOmega(t) dt = J(theta): quad in ln t (the NFW centre diverges)
    for fn, dfn in ((j_factor, dj_domega), (d_factor, dd_domega)):
        g = jax.jit(
            lambda lt, dfn=dfn: (
                2
                * jnp.pi
                * jnp.sin(jnp.exp(lt))
                * jnp.exp(lt)
                * dfn(prof, DIST, jnp.degrees(jnp.exp(lt)))
            )
        )
        for theta in (0.01, 0.1, 1.0, 10.0):
            th = math.radians(theta)
            kinks = sorted(
                math.log(k)
                for k in (math.asin(R_S / DIST), math.asin(min(r_t / DIST, 1.0)))
                if k < th
            )
            edges = [math.log(th) - 40.0, *kinks, math.log(th)]
            val = sum(
                integrate.quad(
                    lambda lt, g=g: float(g(lt)), lo_, hi_, epsabs=0, epsrel=1e-10, limit=200
                )[0]
                for lo_, hi_ in zip(edges[:-1], edges[1:], strict=True)
            )
            assert val == pytest.approx(float(fn(prof, DIST, theta)), rel=1e-6)


def test_dj_domega_at_the_centre():
    p = NFW(rho_s=RHO_S, r_s=R_S)
    for fn in (dj_domega, dd_domega):
        v0 = float(fn(p, DIST, 0.0))
        assert math.isfinite(v0) and v0 == float(fn(p, DIST, 1e-8))  # value at theta_min_deg
    assert math.isfinite(float(jax.grad(lambda t: dj_domega(p, DIST, t))(0.0)))
    # a cored profile is flat at the centre
    c = Cored(rho_s=RHO_S, r_s=R_S)
    assert float(dj_domega(c, DIST, 0.0)) == pytest.approx(
        float(dj_domega(c, DIST, 1e-6)), rel=1e-6
    )
    assert math.isnan(float(dj_domega(p, DIST, 95.0)))
