"""J and D (halo.physics.jfactor) of the Einasto and Zhao profiles in the exact cone, against the
independent nested scipy quadrature of tests/jfactor_setup.py with the densities written out here.
"""

import math

import pytest
from jfactor_setup import DIST, cone_ref

from halo.physics.dark import Einasto, Zhao
from halo.physics.jfactor import d_factor, j_factor

THETAS = (0.05, 0.5, 2.0, 10.0)  # deg
TOL = 1e-9  # relative, as for NFW and cored (tests/test_jfactor.py); measured < 1e-11 (-s)


def rho_einasto(rho_s, r_s, alpha, r_t=math.inf):
    # Einasto 1965; Navarro et al. 2004, MNRAS 349, 1039, eq. 5 (r_s = r_-2)
    def rho(r):
        if r > r_t:
            return 0.0
        return rho_s * math.exp(-(2.0 / alpha) * ((r / r_s) ** alpha - 1.0))

    return rho


def rho_zhao(rho_s, r_s, alpha, beta, gamma, r_t=math.inf):
    # Zhao 1996, MNRAS 278, 488, eq. 1: rho_s x^-gamma (1 + x^alpha)^-((beta - gamma) / alpha)
    def rho(r):
        if r > r_t:
            return 0.0
        x = r / r_s
        return rho_s * x**-gamma * (1.0 + x**alpha) ** (-(beta - gamma) / alpha)

    return rho


CASES = {
    "einasto-0.17": (
        lambda r_t: Einasto(3e7, 0.8, 0.17, r_t),
        lambda r_t: rho_einasto(3e7, 0.8, 0.17, r_t),
        0.8,
    ),
    "einasto-0.5": (
        lambda r_t: Einasto(3e7, 0.8, 0.5, r_t),
        lambda r_t: rho_einasto(3e7, 0.8, 0.5, r_t),
        0.8,
    ),
    "zhao-cored": (
        lambda r_t: Zhao(1e8, 0.5, 2.0, 5.0, 0.0, r_t),
        lambda r_t: rho_zhao(1e8, 0.5, 2.0, 5.0, 0.0, r_t),
        0.5,
    ),
    "zhao-cusp": (
        lambda r_t: Zhao(1e8, 0.5, 0.7, 4.0, 1.2, r_t),
        lambda r_t: rho_zhao(1e8, 0.5, 0.7, 4.0, 1.2, r_t),
        0.5,
    ),
}


@pytest.mark.parametrize("r_t", [math.inf, 2.0])
@pytest.mark.parametrize("name", list(CASES))
def test_einasto_zhao_exact_cone_against_nested_quadrature(name, r_t):
    make, make_rho, scale = CASES[name]
    prof, rho = make(r_t), make_rho(r_t)
    for r in (0.01, 0.5, 1.9):  # the profile is the one written out for the reference
        assert float(prof.density(r)) == pytest.approx(rho(r), rel=1e-13)
    worst = 0.0
    for theta in THETAS:
        for power, fn in ((2, j_factor), (1, d_factor)):
            ref = cone_ref(rho, power, DIST, math.radians(theta), scale, r_t)
            worst = max(worst, abs(float(fn(prof, DIST, theta)) / ref - 1.0))
    print(f"\n{name} r_t={r_t}: max relative error vs nested quad = {worst:.1e}")
    assert worst < TOL
