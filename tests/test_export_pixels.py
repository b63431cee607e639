"""halo.products.tan_pixels: exact solid angles of TAN pixels and pixel averages of a cusp,
against scipy's adaptive quadrature."""

import math

import numpy as np
import pytest
from scipy import integrate

from halo.core.constants import DEG
from halo.products.tan_pixels import pixel_average_radial, tan_pixel_solid_angles


def test_pixel_average_of_a_cusp_against_scipy():
    """1/theta (the NFW J cusp) on a 9 x 9 grid: pixel integrals against scipy dblquad."""
    p, n = 0.02, 9
    h = 0.5 * p * DEG
    a = math.atan(h)
    cone = integrate.quad(lambda t: 2 * math.pi * math.sin(t) / t, 0, a, epsabs=0, epsrel=1e-13)[0]
    values, omega = pixel_average_radial(lambda th: 1.0 / (np.asarray(th) * DEG), cone, n, p)
    m = n // 2

    def g(y, x):
        return 1.0 / math.atan(math.hypot(x, y)) / (1 + x * x + y * y) ** 1.5

    centre = (
        8
        * integrate.dblquad(
            lambda r, phi: r / math.atan(r) / (1 + r * r) ** 1.5,
            0,
            math.pi / 4,
            0,
            lambda phi: h / math.cos(phi),
            epsabs=0,
            epsrel=1e-12,
        )[0]
    )
    assert values[m, m] * omega[m, m] == pytest.approx(centre, rel=1e-9)
    for i, j in [(1, 0), (1, 1), (2, 1), (0, 4), (4, 4)]:
        x0, y0 = (2 * i - 1) * h, (2 * j - 1) * h
        ref = integrate.dblquad(g, x0, x0 + 2 * h, y0, y0 + 2 * h, epsabs=0, epsrel=1e-12)[0]
        assert values[m + j, m + i] * omega[m + j, m + i] == pytest.approx(ref, rel=1e-9)
    # symmetric grid
    np.testing.assert_allclose(values, values[::-1, ::-1], rtol=1e-14)
    np.testing.assert_allclose(values, values.T, rtol=1e-14)


def test_tan_pixel_solid_angles():
    # a cube face seen from the cube's centre is a gnomonic square of half-side 1 and subtends
    # 4 pi / 6 (common practice: six faces by symmetry)
    n = 101
    omega = tan_pixel_solid_angles(n, 2.0 / n / DEG)
    assert np.sum(omega) == pytest.approx(4 * math.pi / 6, rel=1e-13)
    # single pixels against scipy dblquad of the TAN Jacobian (Calabretta & Greisen 2002, A&A 395,
    # 1077: tangent-plane coordinates tan(theta) (cos phi, sin phi), dOmega = dA / (1 + rho^2)^1.5)
    p = 0.5
    omega = tan_pixel_solid_angles(21, p)
    h = 0.5 * p * DEG
    for i, j in [(0, 0), (10, 10), (7, -3)]:
        ref = integrate.dblquad(
            lambda y, x: (1 + x * x + y * y) ** -1.5,
            (2 * i - 1) * h,
            (2 * i + 1) * h,
            (2 * j - 1) * h,
            (2 * j + 1) * h,
            epsabs=0,
            epsrel=1e-13,
        )[0]
        assert omega[10 + j, 10 + i] == pytest.approx(ref, rel=1e-11)
