"""NFW, Burkert and core-NFW profiles against published closed forms, mpmath and scipy."""

import math

import jax
import mpmath as mp
import numpy as np
import pytest
from dark_setup import rel
from scipy import integrate

from halo.physics.dark import NFW, Burkert, CoreNFW


@pytest.fixture(autouse=True)
def _mpmath_precision():
    """30 significant digits for the mpmath references of this file (mpmath's state is global)."""
    with mp.workdps(30):
        yield


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
    assert rel(p.mass(x * 0.7), [float(v) for v in ref]) < 1e-13


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

    assert rel(p.mass(x * 0.4), [float(ref(t)) for t in x]) < 1e-13


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
    assert rel(p.density(r), dens) < 1e-13
    assert rel(p.mass(r), [float(m_ref(mp.mpf(t))) for t in r]) < 1e-13
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
