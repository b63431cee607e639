"""What the sampled distance does to the luminosity, the stellar mass and the estimators' errors.

The satellite file's absolute magnitude (so L_V) and stellar mass hold at its distance d0; at a
distance d the same apparent flux means L_V (d/d0)^2 (inverse-square law, common practice), and a
stellar mass inferred from that light scales alike. The angular size is the measured quantity:
r_half = theta_half d, and r_half_err_pc is the error at fixed distance, so the distance error
enters once (through d).
"""

import numpy as np
import pytest
from numpyro import handlers

from halo.core.vocabulary import luminosity_v
from halo.inference.model import make_fit_data, make_model
from halo.inputs.catalogue import stars_from_table
from halo.inputs.satellite import parse_satellite
from halo.inputs.spec import load_spec, parse_spec
from halo.mock.catalogue import make_mock
from halo.results.derived import derive
from halo.results.estimators import estimators

SAT = {
    "name": "Distance test",
    "ra_deg": 40.0,
    "dec_deg": 12.0,
    "distance_kpc": 60.0,
    "distance_err_kpc": 3.0,
    "r_half_pc": 50.0,
    "r_half_err_pc": 5.0,
    "absolute_magnitude_v": -4.5,
    "absolute_magnitude_v_err": 0.0,
    "stellar_ml_v": [1.0, 1.0],
}
#: a halo in (rho_s, r_s) form, so that the draws below can be scaled by dynamical similarity
SPEC = parse_spec(
    {
        "dark_profile": "nfw",
        "anisotropy": "constant",
        "parameters": {
            "rho_s": {"prior": "log-uniform", "low": 1e5, "high": 1e10},
            "r_s": {"prior": "log-uniform", "low": 0.01, "high": 10.0},
            "beta": {"prior": "fixed", "value": 0.0},
        },
    },
    "nfw-rs",
    "<test>",
)


def _draws(scale):
    """Draws of a satellite seen at ``scale`` x d0 with the same angular size and dispersion:
    every length x scale and every mass x scale (G M / r fixed), so rho_s x scale^-2; the stars
    weigh next to nothing."""
    n = 4
    d0, re0 = SAT["distance_kpc"], SAT["r_half_pc"] * 1e-3
    return {
        "distance": np.full(n, d0 * scale),
        "r_e_kpc": np.full(n, re0 * scale),
        "rho_s": np.geomspace(2e7, 8e7, n) / scale**2,
        "r_s": np.full(n, 0.4 * scale),
        "m_star": np.full(n, 1e-3),
    }


def test_ml_scales_as_one_over_distance():
    sat = parse_satellite(SAT)
    angles = np.array([0.02, 0.05])
    near = derive(SPEC, sat, _draws(1.0), sigma_angles_deg=angles)
    far = derive(SPEC, sat, _draws(1.2), sigma_angles_deg=angles)
    # the mass scales as d (dynamical similarity) ...
    np.testing.assert_allclose(far["m_half_msun"] / near["m_half_msun"], 1.2, rtol=1e-6)
    # ... and the luminosity as d^2, so M/L as 1/d
    np.testing.assert_allclose(far["ml_half_v"] / near["ml_half_v"], 1.0 / 1.2, rtol=1e-6)
    lum0 = luminosity_v(SAT["absolute_magnitude_v"])
    np.testing.assert_allclose(near["ml_half_v"], near["m_half_msun"] / (0.5 * lum0), rtol=1e-12)


@pytest.mark.parametrize(
    "mass_form",
    [
        {"stellar_mass_msun": 5000.0, "stellar_mass_err_msun": 1000.0},
        {"absolute_magnitude_v": -4.5, "absolute_magnitude_v_err": 0.2, "stellar_ml_v": [1, 3]},
    ],
)
def test_model_stellar_mass_scales_as_distance_squared(mass_form):
    base = {k: v for k, v in SAT.items() if k not in ("absolute_magnitude_v", "stellar_ml_v")}
    base.pop("absolute_magnitude_v_err")
    sat = parse_satellite({**base, **mass_form})
    data = make_fit_data([1.0, 2.0, -1.0], [1.0, 1.0, 1.0], [0.01, 0.02, 0.03])
    model = make_model(load_spec("stars-only"), sat, data)
    fixed = {"distance": 72.0, "m_star_d0": 5000.0, "ml_v": 2.0, "abs_mag_v": -4.5}
    tr = handlers.trace(handlers.substitute(handlers.seed(model, 0), data=fixed)).get_trace()
    m0 = 5000.0 if "stellar_mass_msun" in mass_form else 2.0 * luminosity_v(-4.5)
    assert float(tr["m_star"]["value"]) == pytest.approx(m0 * 1.2**2, rel=1e-12)
    r_e = float(tr["r_e_kpc"]["value"])
    assert r_e == pytest.approx(float(tr["r_half_pc"]["value"]) * 1e-3 * 1.2, rel=1e-12)


def test_estimator_errors_grow_with_the_distance_error():
    sat = parse_satellite({**SAT, "distance_err_kpc": 0.0})
    mock = make_mock(
        sat, None, n_stars=60, v_sys=0.0, error_range_kms=(0.5, 1.0), seed=3, stellar_mass=2e5
    )
    stars = stars_from_table(mock.table, sat, source="distance-mock")
    std = {}
    for err in (0.0, 12.0):
        out = estimators(stars, parse_satellite({**SAT, "distance_err_kpc": err}))
        std[err] = out["wolf2010"]["std"] / out["wolf2010"]["mean"]
    # an independent factor d / d0 of relative width b = 0.2: the relative variance of a product
    # of independent factors is (1 + a^2)(1 + b^2) - 1 (a: the rest), exact for any shapes
    assert std[12.0] > std[0.0]
    assert std[12.0] ** 2 == pytest.approx((1 + std[0.0] ** 2) * (1 + 0.2**2) - 1, rel=0.02)
