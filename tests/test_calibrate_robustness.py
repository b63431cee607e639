"""Robustness mocks of `halo calibrate`: binaries and field stars the fitted model does not assume.

`--mock-binary-periods MEAN,SIGMA` changes the mocks' binary periods only (the fits keep the
spec's population); `--mock-field OFFSET:SIGMA:WEIGHT[,...]` the field stars' velocity
components. Checked against scipy's normal distribution: the log-normal period distribution
(Duquennoy & Mayor 1991's form, common practice) and Gaussian field components.
"""

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table
from scipy import stats

import halo.batch.sbc_report as sbc_report
from halo.batch.sbc import SbcDesign, _one_mock, calibration_satellite, prior_draws, write_mocks
from halo.cli.app import main
from halo.core.errors import InputError
from halo.pipeline.demo import demo_satellite_path

TINY = ["--chains", "2", "--warmup", "50", "--draws", "50", "--workers", "2", "--quiet"]


def _sat():
    return calibration_satellite(demo_satellite_path(), v_sys_prior=(87.0, 5.0))[0]


def test_mock_binary_periods_follow_the_given_log_normal():
    # long periods (mean 10^6 d) so that the Roche-lobe cut of short periods does not enter
    design = SbcDesign("nfw", 1, 400, seed=3, foreground_max=0.0, mock_periods=(6.0, 0.5))
    assert design.spec.binary_population().log_period_mean != 6.0  # the fits keep the spec's
    sat = _sat()
    draw = {k: float(v[0]) for k, v in prior_draws(design.spec, sat, 1, 3).items()}
    draw["f_binary"] = 1.0
    mock, _, _ = _one_mock(design, sat, draw, np.random.default_rng(1), 0)
    log_p = np.log10(np.asarray(mock.stars["binary_period_days"], float))
    log_p = log_p[np.isfinite(log_p)]
    assert log_p.size > 300
    assert stats.kstest(log_p, stats.norm(6.0, 0.5).cdf).pvalue > 1e-3


def test_mock_field_components_reach_the_catalogue_and_the_record(tmp_path):
    design = SbcDesign("nfw", 2, 200, seed=4, foreground_max=0.9, mock_field=((0.0, 5.0, 1.0),))
    _, _, truths = write_mocks(
        design, demo_satellite_path(), tmp_path, ["nfw"], v_sys_prior=(87.0, 5.0)
    )
    z = []
    for t in truths:
        table = Table.read(tmp_path / "mocks" / f"{t['name']}.ecsv")
        field = np.isin(np.asarray(table["id"]), t["foreground_ids"])
        v = u.Quantity(table["vlos"]).to_value(u.km / u.s)[field]
        err = u.Quantity(table["vlos_err"]).to_value(u.km / u.s)[field]
        z.append((v - t["v_sys_kms"]) / np.sqrt(5.0**2 + err**2))
    z = np.concatenate(z)
    assert z.size > 50
    # one Gaussian of sigma 5 km/s about v_sys, convolved with each star's error
    assert stats.kstest(z, stats.norm.cdf).pvalue > 1e-3
    record = design.as_dict()
    assert record["mock_field"] == [[0.0, 5.0, 1.0]]
    assert "components" in record["model_violations"][0]


def test_the_default_design_is_unchanged_and_says_what_the_fit_does_not_assume():
    design = SbcDesign("nfw", 1, 20)
    assert design.mock_population == design.spec.binary_population()
    assert design.mock_field is None and design.as_dict()["mock_binary_periods"] is None
    assert design.as_dict()["model_violations"] == [
        "field stars from the mock generator's field, not the fit's one Gaussian"
    ]
    with pytest.raises(InputError, match="--mock-binary-periods"):
        SbcDesign("nfw", 1, 20, mock_periods=(5.0, -1.0))


def test_the_cli_options_reach_the_mocks(tmp_path, monkeypatch, capsys):
    seen = {}

    def spy(design, *args, **kwargs):
        seen["design"] = design
        raise InputError("stopped after the design (test)")

    monkeypatch.setattr(sbc_report, "write_mocks", spy)
    args = ["calibrate", "nfw", "--out", str(tmp_path / "o"), "--mocks", "2", *TINY]
    args += ["--mock-binary-periods", "3.5,1.2", "--mock-field", "20:30:0.7,-40:80:0.3"]
    code = main(args)
    assert code == 2 and "stopped after the design" in capsys.readouterr().err
    design = seen["design"]
    assert design.mock_population.log_period_mean == 3.5
    assert design.mock_population.log_period_sigma == 1.2
    assert design.mock_field == ((20.0, 30.0, 0.7), (-40.0, 80.0, 0.3))
    assert any("N(3.5, 1.2)" in v for v in design.violations())
