"""Opt-in calibration suite (``pytest --run-slow``): interval coverage over many seeded mocks.

Each mock draws a cored halo (core-NFW, n = 1) with M200 log-uniform in [10^8.5, 10^10] Msun,
c200 from the Dutton & Maccio (2014) relation with its 0.11 dex scatter, r_c log-uniform in
[20, 200] pc, and 100 stars from the equilibrium distribution function; the `cored` spec is
fitted (4 chains x 500 + 500; the sampler and derived quantities of `halo fit`, without the
evidence, the comparison and the figures). The 68% credible intervals of M(< r_1/2) and
log10 J(0.5 deg) must cover the truth 68 +- 10% of the time (a calibrated posterior covers at
the nominal rate on average when truths come from the prior; common practice).

HALO_CALIBRATION_N sets the number of mocks (default 50); the per-mock results are written to
HALO_CALIBRATION_OUT (a JSON file) when set.
"""

import json
import os

import jax.numpy as jnp
import numpy as np
import pytest

from halo.core.quantiles import quantiles
from halo.inference.model import make_fit_data, make_model
from halo.inference.sampling import run_nuts
from halo.inputs.catalogue import stars_from_table
from halo.inputs.satellite import parse_satellite
from halo.inputs.spec import load_spec
from halo.mock.catalogue import make_mock
from halo.physics.concentration import dutton_maccio14
from halo.physics.cosmology import rho_crit
from halo.physics.dark import CoreNFW
from halo.physics.jfactor import log10_j
from halo.results.derived import derive

SAT = {
    "name": "calibration",
    "ra_deg": 120.0,
    "dec_deg": 20.0,
    "distance_kpc": 50.0,
    "distance_err_kpc": 2.5,
    "r_half_pc": 40.0,
    "r_half_err_pc": 4.0,
    "ellipticity": 0.2,
    "stellar_mass_msun": 5000.0,
    "stellar_mass_err_msun": 1500.0,
}


@pytest.mark.slow
def test_interval_coverage():
    n = int(os.environ.get("HALO_CALIBRATION_N", "50"))
    rng = np.random.default_rng(2026)
    sat = parse_satellite(SAT)
    spec = load_spec("cored")
    rows = []
    for k in range(n):
        m200 = 10 ** rng.uniform(8.5, 10.0)
        c200 = float(dutton_maccio14(m200)) * 10 ** (0.11 * rng.standard_normal())
        r_c = 10 ** rng.uniform(np.log10(0.02), np.log10(0.2))
        dark = CoreNFW.from_m200_c200(m200, c200, rho_c=rho_crit(), r_c=r_c, n=1.0)
        mock = make_mock(sat, dark, n_stars=100, v_sys=0.0, error_range_kms=(1.0, 2.0), seed=k)
        stars = stars_from_table(mock.table, sat, source=f"calibration-{k}")
        model = make_model(spec, sat, make_fit_data(stars.v, stars.v_err, stars.radius_deg))
        mcmc = run_nuts(model, chains=4, warmup=500, draws=500, seed=k, progress=False)
        samples = {key: np.asarray(v) for key, v in mcmc.get_samples().items()}
        der = derive(spec, sat, samples, sigma_angles_deg=np.array([0.01]))
        d = {
            "m_half_msun": quantiles(der["m_half_msun"]),
            "log10_j": {"0.5": quantiles(der["log10_j"][:, 2])},
        }
        j_true = float(log10_j(dark, sat.distance_kpc, jnp.array(0.5)))
        print(
            f"mock {k}: M_1/2 truth {mock.truth['m_half_msun']:.3g}, posterior "
            f"{d['m_half_msun']['p16']:.3g}-{d['m_half_msun']['p84']:.3g}",
            flush=True,
        )
        rows.append(
            {
                "seed": k,
                "m200": m200,
                "c200": c200,
                "r_c": r_c,
                "m_half_true": mock.truth["m_half_msun"],
                "m_half": d["m_half_msun"],
                "j_true": j_true,
                "j": d["log10_j"]["0.5"],
            }
        )
    if os.environ.get("HALO_CALIBRATION_OUT"):
        with open(os.environ["HALO_CALIBRATION_OUT"], "w") as fh:
            json.dump(rows, fh, indent=1)
    cover_m = np.mean([r["m_half"]["p16"] <= r["m_half_true"] <= r["m_half"]["p84"] for r in rows])
    cover_j = np.mean([r["j"]["p16"] <= r["j_true"] <= r["j"]["p84"] for r in rows])
    print(f"68% coverage over {n} mocks: M(<r_1/2) {cover_m:.2f}, log10 J(0.5) {cover_j:.2f}")
    assert 0.58 <= cover_m <= 0.78
    assert 0.58 <= cover_j <= 0.78
