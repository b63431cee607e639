"""Survival times of a system of stars alone (halo.physics.survival).

References: Spitzer (1987, "Dynamical evolution of globular clusters", eq. 2-63 and its
numerical form t_rh = 6.5e8 yr / ln Lambda (M / 1e5 Msun)^1/2 (Msun / m) (r_h / pc)^3/2
[memory]); Baumgardt & Makino (2003, MNRAS 340, 227, eq. 7 [memory]); the evaporation rates
xi_e = 0.045 (tidally limited, Henon 1961) and 0.0074 (isolated; t_ev ~ 136 t_rh, Spitzer 1987)
[memory].
"""

import numpy as np
import pytest

from halo.core.constants import G
from halo.physics.orbits import TIME_UNIT_GYR
from halo.physics.survival import (
    METHOD_BM03,
    METHOD_EVAPORATION,
    crossing_time,
    dissolution_bm03,
    dissolution_time,
    evaporation_time,
    relaxation_time,
)


def test_relaxation_time_against_spitzers_numerical_form():
    # Spitzer 1987 eq. 2-63 in numbers [memory]: 6.5e8 yr / ln Lambda for M = 1e5 Msun, m = 1 Msun,
    # r_h = 1 pc; here M = 2e5 Msun, <m> = 0.5 Msun, r_h = 3 pc, Lambda = 0.4 N, N = 4e5
    m, mean, r_h = 2e5, 0.5, 3e-3
    ln_lambda = np.log(0.4 * m / mean)
    spitzer = 0.65 / ln_lambda * np.sqrt(m / 1e5) * (1 / mean) * 3.0**1.5  # [Gyr]
    assert float(relaxation_time(m, r_h, mean)) == pytest.approx(spitzer, rel=0.01)


def test_crossing_time_is_the_virial_one():
    # t_cr = r_h / sqrt(0.4 G M / r_h) (Spitzer 1987 section 1.2 [memory]): 1e5 Msun in 3 pc
    # has <v^2>^1/2 = 7.6 km/s and t_cr = 0.39 Myr
    v = np.sqrt(0.4 * G * 1e5 / 3e-3)
    assert v == pytest.approx(7.57, rel=0.01)
    assert float(crossing_time(1e5, 3e-3)) == pytest.approx(3e-3 / v * TIME_UNIT_GYR, rel=1e-12)


def test_bm03_scalings():
    # eq. 7 of Baumgardt & Makino 2003 [memory]: 1.91 Myr (N / ln 0.02N)^0.75 R_G/kpc
    # (V_G / 220 km/s)^-1 (1 - e)
    n = 1e5
    ref = 1.91e-3 * (n / np.log(0.02 * n)) ** 0.75 * 8.5
    assert float(dissolution_bm03(n, 8.5, 220.0)) == pytest.approx(ref, rel=1e-12)
    assert float(dissolution_bm03(n, 17.0, 220.0, 0.5)) == pytest.approx(ref, rel=1e-12)
    assert float(dissolution_bm03(n, 8.5, 110.0)) == pytest.approx(2 * ref, rel=1e-12)
    assert np.isnan(float(dissolution_bm03(30.0, 8.5, 220.0)))  # ln(0.02 N) < 0


def test_evaporation_by_tidal_filling():
    # t_ev = t_rh / xi_e: 22 t_rh when tidally limited (r_h / r_J >= 0.145), 135 t_rh isolated
    assert float(evaporation_time(1.0, 0.3)) == pytest.approx(1 / 0.045, rel=1e-12)
    assert float(evaporation_time(1.0, 0.0)) == pytest.approx(1 / 0.0074, rel=1e-12)


def test_method_choice_and_the_orbit_cap():
    # a few dozen stars lie below every calibration: the evaporation time is used
    t, method = dissolution_time(15.0, 3e-3, 6e-3, 12.0, 210.0, 17.5)
    t_rh = float(relaxation_time(15.0, 3e-3))
    assert int(method) == METHOD_EVAPORATION
    assert float(t) == pytest.approx(t_rh / 0.045, rel=1e-12)  # r_h / r_J = 0.5: tidal rate
    # a globular cluster uses Baumgardt & Makino
    t, method = dissolution_time(3e5, 4e-3, 0.1, 15.0, 200.0, 13.0)
    assert int(method) == METHOD_BM03
    assert float(t) == pytest.approx(float(dissolution_bm03(6e5, 15.0, 200.0)), rel=1e-12)
    # r_h beyond r_J: dissolved within one orbit 2 pi / Omega
    t, _ = dissolution_time(15.0, 8e-3, 4e-3, 12.0, 210.0, 17.5)
    assert float(t) == pytest.approx(2 * np.pi / 17.5 * TIME_UNIT_GYR, rel=1e-12)
