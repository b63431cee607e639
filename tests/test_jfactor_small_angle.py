"""J- and D-factors of NFW haloes against the small-angle (cylinder) closed forms of Evans,
Sanders & Geringer-Sameth 2016, and the whole truncated halo inside the cone."""

import math

import mpmath
import numpy as np
import pytest
from jfactor_setup import DIST, R_S, RHO_S, rho_nfw
from scipy import integrate

from halo.physics.dark import NFW
from halo.physics.jfactor import d_factor, j_factor

# ------------------------------------------- Evans, Sanders & Geringer-Sameth 2016 closed forms


def _x_esg(y):
    """X(y) = arcsech(y) / sqrt(1 - y^2) (y < 1), arcsec(y) / sqrt(y^2 - 1) (y > 1), X(1) = 1."""
    y = np.asarray(y, float)
    lo = np.arccosh(1.0 / np.minimum(y, 1.0)) / np.sqrt(np.maximum(1.0 - y**2, 1e-300))
    hi = np.arccos(1.0 / np.maximum(y, 1.0)) / np.sqrt(np.maximum(y**2 - 1.0, 1e-300))
    return np.where(y < 1.0, lo, np.where(y > 1.0, hi, 1.0))


def _f_esg_closed(y):
    """Small-angle NFW J in units of rho_s^2 r_s^3 / d^2, y = d theta / r_s.

    Evans, Sanders & Geringer-Sameth 2016 (PRD 93, 103512), NFW J-factor:
    J = pi rho_s^2 r_s^3 / (3 d^2 Delta^4) [2 y (7 y - 4 y^3 + 3 pi Delta^4)
        + 6 (2 Delta^6 - 2 Delta^2 - y^4) X(y)],  Delta^2 = 1 - y^2
    [memory] for the printed form; confirmed below against a direct cylinder quadrature.
    """
    y = np.asarray(y, float)
    d2 = 1.0 - y**2
    bracket = 2 * y * (7 * y - 4 * y**3 + 3 * np.pi * d2**2) + 6 * (
        2 * d2**3 - 2 * d2 - y**4
    ) * _x_esg(y)
    return np.pi / (3.0 * d2**2) * bracket


def _esg_taylor_coefficients(order=7):
    """Taylor coefficients of the closed form about y = 1, where it is 0/0 in floating point.

    Derivatives by mpmath.taylor (60 digits, points off y = 1, one order more than kept: its
    highest coefficient is unreliable); the constant term as the mean of y = 1 +- 1e-8 minus the
    curvature term. Order 7: truncation error < 1e-13 for |y - 1| < 0.02.
    """

    def f(y):
        d2 = 1 - y**2
        x = mpmath.acosh(1 / y) / mpmath.sqrt(d2) if y < 1 else mpmath.asec(y) / mpmath.sqrt(-d2)
        b = 2 * y * (7 * y - 4 * y**3 + 3 * mpmath.pi * d2**2) + 6 * (2 * d2**3 - 2 * d2 - y**4) * x
        return mpmath.pi / (3 * d2**2) * b

    with mpmath.workdps(60):
        c = mpmath.taylor(f, 1, order + 1, singular=True)[: order + 1]
        h = mpmath.mpf("1e-8")
        c[0] = (f(1 + h) + f(1 - h)) / 2 - c[2] * h**2
        return np.array([float(v) for v in c])


_ESG_SERIES = _esg_taylor_coefficients()


def esg_j(y):
    """ESG 2016 NFW J / (rho_s^2 r_s^3 / d^2), with the series about y = 1 for |y - 1| < 0.02."""
    y = np.asarray(y, float)
    series = np.polynomial.polynomial.polyval(y - 1.0, _ESG_SERIES)
    return np.where(np.abs(y - 1.0) < 0.02, series, _f_esg_closed(np.where(y == 1.0, 2.0, y)))


def esg_d(y):
    """ESG 2016 NFW D / (rho_s r_s^3 / d^2) = 4 pi [ln(y / 2) + X(y)] (projected NFW mass)."""
    return 4.0 * np.pi * (np.log(np.asarray(y, float) / 2.0) + _x_esg(y))


def _cylinder_ref(y, power):
    """(1 / (rho_s^p r_s^3 / d^2)) Int_cylinder(R < y r_s) rho^p dV for NFW, by scipy quad.

    A sphere of radius x (units r_s) has the fraction 1 - sqrt(1 - y^2 / x^2) of its area
    inside the cylinder when x > y (common practice).
    """
    rho = rho_nfw(1.0, 1.0)

    def shell(x):
        return 4.0 * math.pi * x * x * rho(x) ** power

    inside = integrate.quad(shell, 0.0, y, epsabs=0, epsrel=1e-12, limit=200)[0]
    outside = sum(
        integrate.quad(
            lambda x: shell(x) * (1.0 - math.sqrt(1.0 - (y / x) ** 2)),
            lo_,
            hi_,
            epsabs=0,
            epsrel=1e-12,
            limit=200,
        )[0]
        for lo_, hi_ in ((y, 2 * y), (2 * y, 20 * y), (20 * y, math.inf))
    )
    return inside + outside


@pytest.mark.parametrize("y", [0.01, 0.3, 0.97, 0.99, 1.0, 1.005, 1.03, 3.0, 40.0])
def test_esg_closed_forms_match_cylinder_quadrature(y):
    # Evans, Sanders & Geringer-Sameth 2016 (PRD 93, 103512): NFW J(y) [memory for the printed
    # form] and D = 4 pi rho_s r_s^3/d^2 [ln(y/2) + X(y)] (the projected NFW mass, Bartelmann 1996,
    # A&A 313, 697 [memory]); both confirmed here against a direct cylinder quadrature (scipy).
    assert float(esg_j(y)) == pytest.approx(_cylinder_ref(y, 2), rel=1e-10)
    assert float(esg_d(y)) == pytest.approx(_cylinder_ref(y, 1), rel=1e-10)


def test_esg_series_joins_closed_form():
    # the series about y = 1 (mpmath.taylor) and the float64 closed form agree where they meet
    for y in (0.98, 1.02):
        series = np.polynomial.polynomial.polyval(y - 1.0, _ESG_SERIES)
        assert series == pytest.approx(float(_f_esg_closed(y)), rel=3e-12)


ANGLES = np.array([0.01, 0.03, 0.1, 0.3, 0.5, 1.0, 2.0, 3.0, 5.0, 7.0, 10.0, 15.0, 20.0, 30.0])


def _cone_over_cylinder(rho_s, r_s, d):
    p = NFW(rho_s=rho_s, r_s=r_s)
    y = d * np.radians(ANGLES) / r_s
    j = np.asarray(j_factor(p, d, ANGLES)) / (rho_s**2 * r_s**3 / d**2) / esg_j(y) - 1.0
    dd = np.asarray(d_factor(p, d, ANGLES)) / (rho_s * r_s**3 / d**2) / esg_d(y) - 1.0
    return j, dd


def test_nfw_exact_cone_vs_esg_small_angle():
    # Evans, Sanders & Geringer-Sameth 2016 (PRD 93, 103512) closed forms (cylinder = small-angle
    # approximation) against the exact cone, check halo, 0.01 to 10 deg.
    j, dd = _cone_over_cylinder(RHO_S, R_S, DIST)
    small = ANGLES <= 10.0
    assert np.max(np.abs(j[small])) < 2e-5  # measured 1.3e-5
    assert np.max(np.abs(dd[small])) < 1e-3  # measured 6.5e-4 (at 10 deg)


def test_small_angle_error_where_it_exceeds_1e3():
    """Where does the cylinder (small-angle) form differ from the exact cone by > 1e-3?

    Measured (relative difference exact cone / cylinder - 1):
    - d = 76 kpc, r_s = 0.5 kpc: J never (<= 1.4e-5 up to 30 deg, tending to + (r_s/d)^2 / 3,
      the 1/l^2 weighting over the halo); D from ~12 deg on (-6.5e-4 at 10, -1.2e-3 at 15 deg).
    - d = 20 kpc, r_s = 2 kpc (a near, extended halo): D already at 1 deg (-1.1e-3), J from
      ~15 deg on (+1.1e-3).
    The difference grows with the angle (cone widening, tan theta vs theta) and with r_s / d.
    """
    j, dd = _cone_over_cylinder(RHO_S, R_S, DIST)
    print("\ntheta [deg]   J_cone/J_cyl - 1   D_cone/D_cyl - 1   (d = 76 kpc, r_s = 0.5 kpc)")
    for t, a, b in zip(ANGLES, j, dd, strict=True):
        print(f"{t:8.2f}   {a:+.2e}   {b:+.2e}")
    assert np.all(np.abs(j) < 2e-5)
    assert j[-1] == pytest.approx((R_S / DIST) ** 2 / 3.0, rel=0.1)
    assert np.all(np.abs(dd[ANGLES <= 10.0]) < 1e-3) and np.all(np.abs(dd[ANGLES >= 15.0]) > 1e-3)

    j, dd = _cone_over_cylinder(RHO_S, 2.0, 20.0)
    assert np.all(np.abs(dd[ANGLES < 1.0]) < 1e-3) and np.all(np.abs(dd[ANGLES >= 1.0]) > 1e-3)
    assert np.all(np.abs(j[ANGLES <= 10.0]) < 1e-3) and np.all(np.abs(j[ANGLES >= 15.0]) > 1e-3)


def _i2k(c, k):
    """Int_0^c x^(2k) / (1 + x)^4 dx for k = 0, 1, 2 (closed forms with u = 1 + x)."""
    u = 1.0 + c
    if k == 0:
        return (1.0 - u**-3) / 3.0
    if k == 1:
        return c**3 / (3.0 * u**3)
    return (u - 4.0 * math.log(u) - 6.0 / u + 2.0 / u**2 - 1.0 / (3.0 * u**3)) - (
        1.0 - 6.0 + 2.0 - 1.0 / 3.0
    )


@pytest.mark.parametrize(
    ("d", "r_s", "c", "theta"), [(76.0, 0.5, 10.0, 5.0), (10.0, 1.0, 5.0, 40.0)]
)
def test_total_j_truncated_nfw(d, r_s, c, theta):
    """Whole truncated NFW inside the cone.

    Small-angle total: J = (4 pi / 3) rho_s^2 r_s^3 [1 - (1 + c)^-3] / d^2 (common practice,
    elementary: (1 / d^2) Int_0^(c r_s) 4 pi r^2 rho^2 dr of the NFW 1996 density = unit x I_0).
    Geometric correction (derived here): for a shell wholly inside the cone A(r) = (4 pi r / d)
    artanh(r / d) = (4 pi r^2 / d^2) [1 + (r/d)^2 / 3 + (r/d)^4 / 5 + ...], so
    J = (4 pi rho_s^2 r_s^3 / d^2) [I_0 + eps^2 I_2 / 3 + eps^4 I_4 / 5 + ...], eps = r_s / d,
    I_2k = Int_0^c x^2k / (1 + x)^4 dx; I_0 is the small-angle total.
    """
    rho_s = 1e8
    assert theta > math.degrees(math.asin(c * r_s / d))  # the cone encloses the whole halo
    p = NFW(rho_s=rho_s, r_s=r_s, r_t=c * r_s)
    j = float(j_factor(p, d, theta))
    unit = 4.0 * math.pi * rho_s**2 * r_s**3 / d**2
    small_angle = unit * _i2k(c, 0)
    eps2 = (r_s / d) ** 2
    series = unit * (_i2k(c, 0) + eps2 * _i2k(c, 1) / 3.0 + eps2**2 * _i2k(c, 2) / 5.0)
    assert j == pytest.approx(series, rel=2e-5)  # next term eps^6 I_6 / 7: 1.5e-5 at eps = 0.1
    if r_s / d < 0.01:
        assert j == pytest.approx(small_angle, rel=1e-3)  # correction ~1e-5 for a satellite
        assert j == pytest.approx(series, rel=1e-10)
    else:
        assert abs(j / small_angle - 1.0) > 1e-3  # a near halo needs the correction (1.9e-3)
    # independent of the angle once the halo is inside
    assert float(j_factor(p, d, theta * 1.5)) == pytest.approx(j, rel=1e-12)
