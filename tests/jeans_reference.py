"""Independent reference for the projected velocity dispersion: the single-integral kernel form
of Mamon & Lokas (2005, MNRAS 363, 705, appendix), evaluated by nested adaptive scipy quadrature
(numpy only, no halo code). Shared by tests/test_jeans.py and benchmarks/bench_jeans.py.
"""

import numpy as np
from scipy import integrate

G = 4.300917270036279e-06  # kpc (km/s)^2 / Msun (CODATA 2018 via astropy.constants)


def beta_np(kind, p):
    if kind == "constant":
        return lambda r: p["beta"] + 0.0 * r, lambda r: r ** (2 * p["beta"])
    if kind == "om":
        ra = p["r_a"]
        return lambda r: r**2 / (r**2 + ra**2), lambda r: 1 + (r / ra) ** 2
    b0, bi, ra, eta = p["beta_0"], p["beta_inf"], p["r_a"], p["eta"]

    def beta(r):
        y = (r / ra) ** eta
        return (b0 + bi * y) / (1 + y)

    def f(r):
        return r ** (2 * b0) * (1 + (r / ra) ** eta) ** (2 * (bi - b0) / eta)

    return beta, f


def kernel(u, R, beta, f):
    """K(u) = (f(s)/s) Int_R^s (1 - beta R^2/r^2) r / (f(r) sqrt(r^2 - R^2)) dr, s = u R,
    with r = R cosh(tau) (Mamon & Lokas 2005, appendix, general form before closed forms)."""
    s = u * R
    tmax = np.arccosh(u)

    def g(tau):
        r = R * np.cosh(tau)
        return (1 - beta(r) * (R / r) ** 2) * r / f(r)

    val, _ = integrate.quad(g, 0, tmax, epsabs=0, epsrel=1e-11, limit=200)
    return f(s) / s * val


def nfw_mass_np(rho_s, r_s):
    return lambda r: 4 * np.pi * rho_s * r_s**3 * (np.log1p(r / r_s) - r / (r + r_s))


def burkert_mass_np(rho_s, r_s):
    # Burkert 1995 profile; mass closed form of Mori & Burkert 2000 (ApJ 538, 559)
    def m(r):
        x = r / r_s
        return np.pi * rho_s * r_s**3 * (np.log((1 + x) ** 2 * (1 + x**2)) - 2 * np.arctan(x))

    return m


def sigma_los_reference(R, mass, a, beta, f, m_star=0.0):
    """sigma_los^2 = 2 G Int_R^inf K(r/R) nu M dr / r / Sigma (Mamon & Lokas 2005), Plummer
    tracer of scale a, mass(r) plus optional stars following the light."""

    def nu(r):
        return 3 / (4 * np.pi * a**3) * (1 + (r / a) ** 2) ** -2.5

    def mtot(r):
        return mass(r) + m_star * r**3 / (r**2 + a**2) ** 1.5

    def integrand(y):  # r = R e^y
        r = R * np.exp(y)
        return kernel(np.exp(y), R, beta, f) * nu(r) * mtot(r)

    y_max = np.log(1e4 * max(a, R) / R)
    pts = [np.log(max(a / R, 1.0001) * k) for k in (1.0, 3.0, 10.0)]
    pts = [p for p in pts if 0 < p < y_max]
    val, _ = integrate.quad(integrand, 0, y_max, epsabs=0, epsrel=1e-10, limit=400, points=pts)
    sigma = 1 / (np.pi * a**2) / (1 + (R / a) ** 2) ** 2
    return np.sqrt(2 * G * val / sigma)
