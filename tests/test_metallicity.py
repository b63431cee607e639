"""Metallicities: the catalogue's feh/feh_err columns, the mock's draws, and the fit of the mean
[Fe/H] and its intrinsic spread (halo.inference.metallicity, halo.results.metallicity).

References: the inverse-variance mean (common practice); the posterior of a normal mean with
known variances under a flat prior, N(sum w x / sum w, (sum w)^-1/2) with w = 1/variance
(Gelman et al. 2013, Bayesian Data Analysis 3rd ed., section 2.5); the null distribution of the
likelihood-ratio statistic for a variance on the boundary, the 50:50 mixture of chi^2_0 and
chi^2_1 (Chernoff 1954; Self & Liang 1987, case 5); Gaussian log densities and quantiles from
scipy.stats.
"""

import json

import numpy as np
import pytest
from astropy.table import Table
from scipy import stats

from halo.cli.app import main
from halo.core.errors import InputError
from halo.inference import metallicity as feh_model
from halo.inputs.catalogue import read_catalogue
from halo.inputs.satellite import parse_satellite, read_satellite
from halo.mock import metallicity as feh_mock
from halo.mock.catalogue import make_mock
from halo.pipeline.demo import demo_catalogue_path, demo_satellite_path
from halo.results.metallicity import fit_catalogues, fit_metallicity, metallicity_section

SAT = {
    "name": "Feh test",
    "ra_deg": 40.0,
    "dec_deg": 12.0,
    "distance_kpc": 60.0,
    "distance_err_kpc": 3.0,
    "r_half_pc": 50.0,
    "r_half_err_pc": 5.0,
    "stellar_mass_msun": 8000.0,
    "stellar_mass_err_msun": 2000.0,
}
CSV = """id,ra,dec,vlos,vlos_err,mjd,feh,feh_err
a,40.000,12.000,10.0,1.0,1,-2.00,0.20
a,40.000,12.000,11.0,1.0,2,-2.30,0.10
b,40.010,12.000,12.0,1.0,1,,
c,40.000,12.010,9.0,1.0,1,-1.50,0.10
c,40.000,12.010,9.5,1.0,2,-1.50,0.10
d,40.000,12.020,8.0,1.0,1,nan,nan
"""
QUICK = {"chains": 2, "warmup": 300, "draws": 500}


def _read(tmp_path, text, name="cat.csv"):
    path = tmp_path / name
    path.write_text(text)
    return read_catalogue(path, parse_satellite(dict(SAT)))


def test_epochs_combined_by_inverse_variance(tmp_path):
    stars = _read(tmp_path, CSV)
    # inverse-variance mean and its error (common practice): star a's two epochs
    w = np.array([1 / 0.2**2, 1 / 0.1**2])
    expect = np.sum(w * [-2.0, -2.3]) / w.sum()
    assert stars.feh[0] == pytest.approx(expect, rel=1e-12)
    assert stars.feh_err[0] == pytest.approx(w.sum() ** -0.5, rel=1e-12)
    # b and d not measured (empty cells, NaN); c's per-star value on both rows counted once
    assert np.isnan(stars.feh[[1, 3]]).all() and np.isnan(stars.feh_err[[1, 3]]).all()
    assert (stars.feh[2], stars.feh_err[2]) == (-1.5, 0.1)
    assert any("counted once" in n for n in stars.notes)
    assert stars.has_feh and "feh" in stars.to_table().colnames


def test_without_feh_columns_nothing_changes(tmp_path):
    text = "\n".join(line.rsplit(",", 2)[0] for line in CSV.splitlines()) + "\n"
    stars = _read(tmp_path, text)
    assert not stars.has_feh and np.isnan(stars.feh).all()
    assert "feh" not in stars.to_table().colnames
    assert metallicity_section(stars, None, 0) is None


@pytest.mark.parametrize(
    "old,new,needles",
    [
        ("-2.30,0.10", "-2.30,", ("row 2", "column 'feh_err'", "missing value")),
        ("-2.30,0.10", "-2.30,0", ("row 2", "column 'feh_err'", "must be positive")),
        ("-2.30,0.10", "-2.30,-0.1", ("row 2", "column 'feh_err'", "must be positive")),
        ("-2.30,0.10", "-99,0.10", ("row 2", "column 'feh'", "[-8, 2] dex")),
        ("-2.30,0.10", "-2.30,inf", ("row 2", "column 'feh_err'", "not finite")),
        ("-2.30,0.10", "-2.30,x", ("row 2", "column 'feh_err'", "not a number")),
    ],
)
def test_bad_feh_values_name_file_row_column(tmp_path, old, new, needles):
    with pytest.raises(InputError) as err:
        _read(tmp_path, CSV.replace(old, new))
    text = str(err.value)
    assert "\n" not in text and "cat.csv" in text
    for needle in needles:
        assert needle in text


def test_feh_needs_its_error_column(tmp_path):
    text = CSV.replace(",feh_err", "").replace(",0.20", "").replace(",0.10", "")
    text = text.replace("nan,nan", "nan").replace(",,\n", ",\n")
    with pytest.raises(InputError, match="column 'feh' .*needs a 'feh_err' column"):
        _read(tmp_path, text)


def _bad_demo_copy(tmp_path, value):
    """The demo catalogue as CSV with one feh_err replaced; (path, its 1-based data row)."""
    table = Table.read(demo_catalogue_path())
    table.meta.clear()
    row = int(np.flatnonzero(np.isfinite(table["feh"]))[4])
    table["feh_err"][row] = value
    path = tmp_path / "bad.csv"
    table.write(path, format="ascii.csv")
    return path, row + 1


@pytest.mark.parametrize("value", [0.0, -0.2, np.nan])
def test_halo_fit_refuses_a_bad_feh_err(capsys, tmp_path, value):
    path, row = _bad_demo_copy(tmp_path, value)
    out = tmp_path / "run"
    code = main(["fit", str(path), "demo", "--out", str(out), "--quiet"])
    _, err = capsys.readouterr()
    assert code == 2, err
    line = err.strip().splitlines()[-1]
    assert "Traceback" not in err and line.startswith("halo: error: ")
    assert str(path) in line and f"row {row}," in line and "column 'feh_err'" in line
    assert not out.exists()


def test_mock_metallicities_leave_the_kinematics_alone():
    sat = parse_satellite(dict(SAT))
    opts = {"n_stars": 40, "seed": 5, "method": "gaussian", "n_foreground": 6}
    opts |= {"epochs_mjd": (1.0, 2.0)}
    plain = make_mock(sat, **opts)
    mm = feh_mock.MockMetallicity(-1.8, 0.25, (0.1, 0.2))
    with_feh = make_mock(sat, metallicity=mm, **opts)
    for name in plain.table.colnames:
        assert np.array_equal(plain.table[name], with_feh.table[name]), name
    truth = with_feh.table.meta["truth"]["metallicity"]
    assert truth["mean_feh"] == -1.8 and truth["spread_dex"] == 0.25
    assert truth["field_feh_dex"] == list(feh_model.FIELD_FEH) == list(feh_mock.FIELD_FEH)
    assert len(with_feh.stars["feh_true"]) == 40


def test_mock_measurement_errors_are_what_they_say():
    """Two measurements per star: their pulls (a - b) / sqrt(e_a^2 + e_b^2) are N(0, 1) (KS test
    against scipy.stats.norm) and the members' true values N(mean, spread)."""
    n = 4000
    table = Table({"id": np.tile(np.arange(n), 2)})
    table, true = feh_mock.with_metallicities(
        table, {}, n - 500, feh_mock.MockMetallicity(-2.0, 0.3, (0.1, 0.3)), 9
    )
    feh, err = (np.asarray(table[c]).reshape(2, n) for c in ("feh", "feh_err"))
    pulls = (feh[0] - feh[1]) / np.hypot(err[0], err[1])
    assert stats.kstest(pulls, "norm").pvalue > 1e-3
    assert stats.kstest((true + 2.0) / 0.3, "norm").pvalue > 1e-3


def test_halo_mock_writes_feh_the_reader_takes(capsys, tmp_path):
    out = tmp_path / "m.ecsv"
    args = ["mock", "demo", "--out", str(out), "--model", "stars-only", "--n-stars", "30"]
    args += ["--method", "gaussian", "--feh", "-2.2,0.3", "--feh-errors", "0.15,0.25"]
    assert main(args) == 0, capsys.readouterr().err
    truth = json.loads(out.with_suffix(".ecsv.truth.json").read_text())
    assert truth["metallicity"]["mean_feh"] == -2.2
    stars = read_catalogue(out, read_satellite(demo_satellite_path()))
    assert stars.has_feh and np.all((stars.feh_err >= 0.15) & (stars.feh_err <= 0.25))
    code = main([*args[:2], "--out", str(tmp_path / "x.ecsv"), "--feh", "-2.2"])
    assert code == 2 and "--feh: expected MEAN,SPREAD" in capsys.readouterr().err


def test_log_likelihood_against_scipy():
    rng = np.random.default_rng(1)
    x, e, p = rng.normal(-2, 0.4, 25), rng.uniform(0.1, 0.3, 25), rng.uniform(0.2, 1.0, 25)
    inputs, n = feh_model.feh_inputs(x, e, p)
    mu, s = -1.9, 0.27
    f_mean, f_sigma = feh_model.FIELD_FEH
    ref = np.log(
        p * stats.norm.pdf(x, mu, np.hypot(s, e))
        + (1 - p) * stats.norm.pdf(x, f_mean, np.hypot(f_sigma, e))
    ).sum()  # the mixture of the module notes, by scipy.stats.norm
    got = float(feh_model.log_likelihood(inputs, np.array([mu]), np.array([s]))[0])
    assert n == 25 and got == pytest.approx(ref, rel=1e-12)


def test_mean_is_the_conjugate_posterior_at_zero_spread():
    """Known variances, flat prior: mu | x ~ N(sum w x / sum w, (sum w)^-1/2), w = 1/e^2
    (Gelman et al. 2013, BDA3 section 2.5); all stars members, the spread fixed at 0."""
    rng = np.random.default_rng(3)
    e = rng.uniform(0.1, 0.3, 40)
    x = -2.1 + e * rng.standard_normal(40)
    samples, diag, _, _ = fit_metallicity(x, e, None, seed=2, fixed_spread=0.0)
    w = 1 / e**2
    mean, sd = np.sum(w * x) / w.sum(), w.sum() ** -0.5
    assert diag.converged, diag.problems()
    mc = sd / np.sqrt(diag.ess_bulk_min)  # Monte Carlo error of the posterior mean
    assert samples["mean_feh"].mean() == pytest.approx(mean, abs=5 * mc)
    assert samples["mean_feh"].std() == pytest.approx(sd, rel=0.08)


def test_zero_spread_test_follows_the_chi_bar_squared_null():
    """No spread, all members: 2 delta ln L is 0 about half the time (Chernoff 1954) and
    exceeds 2.71 with probability 0.5 P(chi^2_1 > 2.71) = 0.05 (Self & Liang 1987)."""
    rng = np.random.default_rng(8)
    stat = []
    for _ in range(200):
        e = rng.uniform(0.1, 0.3, 40)
        inputs, _ = feh_model.feh_inputs(-2.0 + e * rng.standard_normal(40), e)
        stat.append(feh_model.spread_test(inputs)["two_delta_ln_l"])
    stat = np.array(stat)
    assert 0.38 <= np.mean(stat < 1e-6) <= 0.62
    expect = 0.5 * stats.chi2.sf(2.71, 1)  # 0.050
    assert 3 <= np.sum(stat > 2.71) <= 19, (expect, np.sum(stat > 2.71))


def test_field_stars_do_not_make_a_spread():
    """Members of one metallicity and metal-rich field stars (N(-0.6, 0.3), not the field
    distribution the fit assumes) that the velocities could not rule out (membership
    0.05-0.9): with the membership probabilities the spread is not resolved; taken as members,
    the field stars make one every time."""
    rng = np.random.default_rng(5)
    with_p, without = [], []
    for _ in range(40):
        e = rng.uniform(0.1, 0.3, 65)
        x = np.r_[-2.0 + e[:50] * rng.standard_normal(50), rng.normal(-0.6, 0.3, 15)]
        x[50:] += e[50:] * rng.standard_normal(15)
        p = np.r_[np.full(50, 0.95), rng.uniform(0.05, 0.9, 15)]
        with_p.append(feh_model.spread_test(feh_model.feh_inputs(x, e, p)[0])["resolved"])
        without.append(feh_model.spread_test(feh_model.feh_inputs(x, e)[0])["resolved"])
    assert np.mean(with_p) <= 0.1 and np.mean(without) == 1.0


def _mocks(truth, k, seed):
    """``k`` catalogues of 30-100 stars: membership probabilities (80% at 0.99, the others
    uniform in 0.05-0.95), each star's class drawn from its probability, [Fe/H] from the mock."""
    rng = np.random.default_rng(seed)
    out = []
    for i in range(k):
        n = int(rng.integers(30, 100))
        p = np.where(rng.uniform(size=n) < 0.8, 0.99, rng.uniform(0.05, 0.95, n))
        member = rng.uniform(size=n) < p
        table, _ = feh_mock.with_metallicities(
            Table({"id": np.arange(n)}),
            {},
            int(member.sum()),
            feh_mock.MockMetallicity(-2.0, truth, (0.1, 0.3)),
            seed * 1000 + i,
        )
        # members first (ids below the member count), field stars after
        out.append((np.asarray(table["feh"]), np.asarray(table["feh_err"]), p[np.argsort(~member)]))
    return out


def _calibration(truth, k, seed):
    """(fraction of 68% central intervals of the spread holding the truth, the same for the
    mean, fraction resolved, fraction of 95% upper limits >= truth), K mocks in one run."""
    samples, diag, inputs, _ = fit_catalogues(_mocks(truth, k, seed), seed=seed, **QUICK)
    assert diag.rhat_max < 1.05 and diag.divergences == 0, diag
    s, mu = samples["spread_feh"], samples["mean_feh"]
    lo, hi = np.percentile(s, [16, 84], axis=0)
    cover_s = np.mean((lo <= truth) & (truth <= hi))
    lo, hi = np.percentile(mu, [16, 84], axis=0)
    cover_mu = np.mean((lo <= -2.0) & (-2.0 <= hi))
    resolved = np.mean([feh_model.spread_test(inputs, i)["resolved"] for i in range(k)])
    upper = np.mean(np.percentile(s, 95, axis=0) >= truth)
    return cover_s, cover_mu, resolved, upper


def test_calibration_ten_mocks():
    cover_s, cover_mu, resolved, _ = _calibration(0.3, 10, 21)
    assert cover_s >= 0.4 and cover_mu >= 0.4 and resolved == 1.0
    cover_s, cover_mu, resolved, upper = _calibration(0.0, 10, 22)
    assert cover_mu >= 0.4 and resolved <= 0.2 and upper == 1.0


@pytest.mark.slow
def test_calibration_hundred_mocks():
    """100 mocks per case (binomial sd of a 68% rate: 4.7%). Spread 0.3 dex: its 68% interval
    holds the truth 68 +- 10% of the time, the mean's too. Spread 0: a central interval cannot
    hold a truth on the prior's edge, so the checks are the false-resolution rate (expected
    2.3%, Self & Liang 1987), the 95% upper limit and the mean's coverage (at least 58%: the
    spread's posterior mass above 0 widens the mean's interval, so it may over-cover)."""
    cover_s, cover_mu, resolved, upper = _calibration(0.3, 100, 31)
    assert 0.58 <= cover_s <= 0.78 and 0.58 <= cover_mu <= 0.78, (cover_s, cover_mu)
    assert resolved >= 0.95 and upper >= 0.9, (resolved, upper)
    cover_s, cover_mu, resolved, upper = _calibration(0.0, 100, 32)
    assert cover_mu >= 0.58 and resolved <= 0.08 and upper == 1.0, (cover_mu, resolved)


def test_section_upper_limit_at_zero_spread_and_resolved_spread():
    rng = np.random.default_rng(4)
    e = rng.uniform(0.1, 0.3, 60)
    stars = type("Stars", (), {"feh": -2.0 + e * rng.standard_normal(60), "feh_err": e})
    out = metallicity_section(stars, np.full(60, 0.95), 1)
    assert out["converged"] and not out["resolved"] and out["n_stars"] == 60
    assert 0.0 < out["spread_upper_95_dex"] < 0.3
    assert "no resolved spread" in out["reading"] and "\n" not in out["reading"]
    assert out["mean_feh"]["p16"] < -2.0 + 0.1 and out["mean_feh"]["p84"] > -2.0 - 0.1
    json.dumps(out)  # plain JSON values
    stars.feh = -2.0 + np.hypot(0.4, e) * rng.standard_normal(60)
    out = metallicity_section(stars, None, 1)
    assert out["resolved"] and out["spread_upper_95_dex"] is None
    assert out["spread_dex"]["p2.5"] < 0.4 < out["spread_dex"]["p97.5"]
    assert "Willman & Strader 2012" in out["reading"] and "not a rule" in out["reading"]
