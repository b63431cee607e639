"""The systemic-velocity prior is centred on the satellite, not on the median of a rich field.

The issue's case: 25 members at 210 km/s among 60 field stars near 30 km/s (uniform over a disc of
5 half-light radii, the mock's default field). The median of all stars lies in the field, so a
prior of +-100 km/s about it excludes the true v_sys; centred on the velocity peak of the inner
stars (halo.inference.systemic) the fit recovers it. A satellite file may also give the prior.
"""

import numpy as np
import pytest
from numpyro import handlers

from halo.core.errors import InputError
from halo.inference.model import make_fit_data, make_model
from halo.inference.systemic import prior_centres, systemic_centre
from halo.inputs.catalogue import stars_from_table
from halo.inputs.satellite import parse_satellite
from halo.inputs.spec import load_spec
from halo.mock.catalogue import make_mock
from halo.physics.cosmology import rho_crit
from halo.physics.dark import NFW
from halo.pipeline.fit import FitSettings, fit

SAT = {
    "name": "Fast satellite",
    "ra_deg": 150.0,
    "dec_deg": 20.0,
    "distance_kpc": 50.0,
    "distance_err_kpc": 2.5,
    "r_half_pc": 40.0,
    "r_half_err_pc": 4.0,
    "stellar_mass_msun": 1.0e4,
    "stellar_mass_err_msun": 3.0e3,
}
V_SYS = 210.0


def _field_catalogue():
    sat = parse_satellite(SAT)
    dark = NFW.from_m200_c200(1e9, 15.0, rho_c=rho_crit())
    mock = make_mock(
        sat,
        dark,
        n_stars=25,
        v_sys=V_SYS,
        error_range_kms=(1.0, 2.0),
        seed=7,
        method="gaussian",
        n_foreground=60,
        foreground_components=((30.0 - V_SYS, 25.0, 1.0),),  # field at 30 km/s
    )
    return sat, stars_from_table(mock.table, sat, source="fast-satellite")


def test_prior_centre_is_the_satellite_not_the_field_median():
    sat, stars = _field_catalogue()
    data = make_fit_data(stars.v, stars.v_err, stars.radius_deg)
    assert np.median(stars.v) < V_SYS - 100  # the old centre: the true v_sys outside the prior
    centre, (fg_lo, fg_hi) = prior_centres(sat, data)
    assert abs(centre - V_SYS) < 10
    assert fg_lo < 30 - 100 and fg_hi > V_SYS + 100  # the field's prior covers the field
    # members only: the centre is the peak, next to the median
    rng = np.random.default_rng(1)
    v = rng.normal(-40.0, 6.0, 80)
    assert abs(systemic_centre(v, rng.uniform(0, 1, 80)) - np.median(v)) < 3.0


def test_fit_recovers_v_sys_among_a_rich_field(tmp_path):
    sat, stars = _field_catalogue()
    settings = FitSettings(chains=2, warmup=200, draws=200, seed=1, progress=False, binaries=False)
    summary = fit(stars, sat, tmp_path / "out", ["stars-only"], settings)
    assert summary["settings"]["foreground"] is True
    q = summary["models"]["stars-only"]["parameters"]["v_sys"]
    assert q["p2.5"] < V_SYS < q["p97.5"]
    assert abs(q["median"] - V_SYS) < 5


def test_satellite_file_gives_a_gaussian_v_sys_prior():
    sat = parse_satellite({**SAT, "v_sys_kms": 200.0, "v_sys_err_kms": 5.0})
    data = make_fit_data([1.0, 2.0, -1.0], [1.0, 1.0, 1.0], [0.01, 0.02, 0.03])
    tr = handlers.trace(handlers.seed(make_model(load_spec("stars-only"), sat, data), 0))
    fn = tr.get_trace()["v_sys"]["fn"]
    assert float(fn.loc) == 200.0 and float(fn.scale) == 5.0
    # without an error the file's value centres the uniform prior
    sat = parse_satellite({**SAT, "v_sys_kms": 200.0})
    fn = handlers.trace(handlers.seed(make_model(load_spec("stars-only"), sat, data), 0))
    fn = fn.get_trace()["v_sys"]["fn"]
    assert (float(fn.low), float(fn.high)) == (100.0, 300.0)
    with pytest.raises(InputError, match="'v_sys_err_kms' needs 'v_sys_kms'"):
        parse_satellite({**SAT, "v_sys_err_kms": 5.0})
