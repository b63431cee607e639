"""The observer's figures: their data (figures/<name>.json), not only that a PNG exists.

Product path: `halo mock` draws a cored dwarf with 30% field stars, `halo fit` fits it with tiny
chains; the membership-weighted dispersion profile (halo.results.profile) read from
figures/dispersion_profile.json must lie within 2 sigma of the true profile in every bin, and the
all-stars, unweighted estimate of the same run must fail that test (contamination is what the
weights remove). True profile: halo's Jeans solution (halo.physics.jeans.sigma_los) of the model
in the mock's truth file, itself checked against the analytic Plummer-sphere dispersion
sigma_los^2(R) = 3 pi G M / (64 a) (1 + R^2/a^2)^(-1/2) (Dejonghe 1987, MNRAS 224, 13; recalled
from memory).

The mock's velocities are Gaussians with the Jeans dispersions (--method gaussian): the
distribution-function mock of this model has outer dispersions below the Jeans solution (3000
stars: 5.59 +- 0.20 against 6.35 km/s at R ~ 170 pc; the Gaussian mock 6.58 +- 0.24), a mismatch
outside the figures. Per bin the 2 sigma interval misses the truth about 7% of the time at 20
stars (measured below, nominal 4.6%), so six bins all pass in about 6 of 10 realisations; seed 9
is the first seed tried with these settings, and its profile with the true memberships passes too.
"""

import json
import math

import numpy as np
import pytest
from fit_setup import DWARF
from scipy import stats

from halo.cli.app import main
from halo.core.constants import G
from halo.inputs.satellite import parse_satellite
from halo.mock.catalogue import make_mock
from halo.physics.estimators import dispersion_ml
from halo.products.plots_corner import contour_levels
from halo.products.plots_epochs import epoch_pairs
from halo.products.plots_members import _ellipse
from halo.results.profile import kish_n_eff, true_profile, weighted_profile

MODEL = ["--model", "cored", "--set", "m200=2e9", "--set", "c200=16", "--set", "r_c=0.08"]
MODEL += ["--set", "n=1", "--set", "beta=0"]


def _within(prof, truth, k=2.0):
    """Per bin: the true value within k times the 68% half-interval on its side."""
    s, lo, hi = (np.asarray(prof[c]) for c in ("sigma_kms", "sigma_lo_kms", "sigma_hi_kms"))
    t = np.asarray(truth)
    half = np.where(t > s, hi - s, s - lo)
    return np.abs(t - s) <= k * half


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("figures")
    sat = tmp / "dwarf.toml"
    sat.write_text("\n".join(f"{k} = {json.dumps(v)}" for k, v in DWARF.items()) + "\n")
    cat = tmp / "mock.ecsv"
    # 120 members + 52 field stars: 30% of the catalogue
    mock = ["mock", str(sat), "--out", str(cat), *MODEL, "--n-stars", "120"]
    mock += ["--n-foreground", "52", "--v-sys", "-40", "--seed", "9", "--method", "gaussian"]
    assert main(mock) == 0
    out = tmp / "out"
    fit = ["fit", str(cat), str(sat), "--out", str(out), "--model", "nfw", "--no-binaries"]
    fit += ["--chains", "2", "--warmup", "120", "--draws", "120", "--quiet"]
    assert main(fit) == 0
    truth = json.loads((tmp / "mock.ecsv.truth.json").read_text())
    return out, truth


def _figure(out, name):
    return json.loads((out / "figures" / f"{name}.json").read_text())


def test_weighted_profile_within_two_sigma_of_truth(run):
    out, truth = run
    d = _figure(out, "dispersion_profile")
    w = d["weighted"]
    true = true_profile(truth, w["radius_pc"])  # recomputed from the truth file, not the figure
    assert np.allclose(true, d["truth"]["sigma_at_bins_kms"], rtol=1e-9)
    ok = _within(w, true)
    print(
        "weighted bins: R [pc]", np.round(w["radius_pc"], 1), "sigma", np.round(w["sigma_kms"], 2),
        "truth", np.round(true, 2), "n_eff", np.round(w["n_eff"], 1),
    )  # fmt: skip
    assert len(w["sigma_kms"]) >= 3 and ok.all()
    u = d["unweighted_all_stars"]
    u_true = true_profile(truth, u["radius_pc"])
    print("unweighted: R", np.round(u["radius_pc"], 1), "sigma", np.round(u["sigma_kms"], 2))
    assert not _within(u, u_true).all()  # the same test fails without the weights
    assert u["sigma_kms"][-1] > 3 * w["sigma_kms"][-1]
    assert d["membership_modelled"] and d["weights_model"] == "nfw"


def test_star_figures_data(run):
    out, truth = run
    summary = json.loads((out / "summary.json").read_text())
    names = {f.split("/")[-1] for f in summary["figures"]}
    for stem in ("velocity_radius", "velocity_histogram", "sky_map", "dispersion_profile"):
        assert f"{stem}.png" in names and (out / "figures" / f"{stem}.json").is_file()
    assert "epoch_changes.png" not in names  # one epoch: no such figure
    vr = _figure(out, "velocity_radius")
    field = np.asarray(vr["true_field"])
    assert field.sum() == 52
    # the fit ranks the true field stars below the members
    assert np.mean(np.asarray(vr["member_prob"])[field]) < 0.2
    h = _figure(out, "velocity_histogram")
    full = h["full"]
    mem = np.trapezoid(full["member_counts"], full["grid_kms"]) / full["bin_width_kms"]
    fld = np.trapezoid(full["field_counts"], full["grid_kms"]) / full["bin_width_kms"]
    assert mem == pytest.approx(h["n_member_expected"], rel=0.01)
    assert mem + fld == pytest.approx(h["n_stars"], rel=0.05)  # field tails beyond the data
    assert sum(full["counts"]) == h["n_stars"]


def test_corner_pages_hold_every_parameter(run):
    out, _ = run
    for model in ("nfw", "stars-only"):
        pages = sorted((out / "figures").glob(f"corner_{model}*.json"))
        data = [json.loads(p.read_text()) for p in pages]
        shown = [label for d in data for label in d["parameters"]]
        assert shown == data[0]["all_parameters"]
        assert shown[0] == "log10 M(<r_1/2) [Msun]"
        assert all("[" in label for label in shown)  # a unit (or [-]) on every label
        assert all(len(d["parameters"]) <= 8 for d in data)
    nfw = [label for p in sorted((out / "figures").glob("corner_nfw*.json"))
           for label in json.loads(p.read_text())["parameters"]]  # fmt: skip
    assert nfw.index("log10 M200 [Msun]") < nfw.index("v_sys [km/s]")  # physical first


def test_report_embeds_the_new_figures(run):
    out, _ = run
    page = (out / "report.html").read_text()
    for stem in ("velocity_histogram", "sky_map", "velocity_radius"):
        assert f"figures/{stem}.png" in page
    assert "weighted by p_member (1 - p_binary)" in page


def test_true_profile_matches_analytic_plummer():
    # stars only, isotropic Plummer sphere: sigma_los^2 = 3 pi G M / (64 a) / sqrt(1 + R^2/a^2)
    # (Dejonghe 1987; recalled from memory)
    sat = parse_satellite({**DWARF, "ellipticity": 0.0})
    mock = make_mock(sat, None, n_stars=20, seed=1, method="gaussian")
    t = mock.truth
    a, m = t["light"]["a"], t["stellar_mass_msun"]
    r_pc = np.array([5.0, 20.0, 50.0, 150.0])
    analytic = np.sqrt(3 * math.pi * G * m / (64 * a) / np.sqrt(1 + (r_pc * 1e-3 / a) ** 2))
    assert np.allclose(true_profile(t, r_pc), analytic, rtol=2e-3)
    assert true_profile({"light_profile": "plummer"}, r_pc) is None  # incomplete record


def test_weighted_estimator_reduces_to_ordinary_ml():
    rng = np.random.default_rng(3)
    r = rng.uniform(1, 100, 90)
    err = rng.uniform(1, 2, 90)
    v = rng.normal(0, 4, 90) + err * rng.standard_normal(90)
    ones = weighted_profile(r, v, err, np.ones(90), n_bins=3)
    halves = weighted_profile(r, v, err, np.full(90, 0.5), n_bins=3)
    order = np.argsort(r)
    for b, idx in enumerate(np.array_split(order, 3)):
        f = dispersion_ml(v[idx], err[idx])  # unweighted ML (common practice)
        assert ones["sigma_kms"][b] == pytest.approx(f.sigma, abs=1e-6)
        assert ones["sigma_lo_kms"][b] == pytest.approx(f.sigma_lo, abs=1e-6)
        # equal weights do not change the estimate or, with Kish's n_eff, the interval
        assert halves["sigma_hi_kms"][b] == pytest.approx(f.sigma_hi, abs=1e-6)
    assert kish_n_eff(np.full(10, 0.3)) == pytest.approx(10.0)


def test_weighted_intervals_cover_with_field_stars():
    # 300 bins of 40 members (sigma 3 km/s) and 17 field stars (N(v_sys + 30, 40^2)), weights the
    # exact membership probabilities of that mixture: the 68% / 95% intervals must not miss the
    # truth more often than 32% / 5% of the time (the frequentist reading of the intervals) beyond
    # binomial noise; measured 22% / 3% (600 bins: 24.5% / 3.2%; true memberships 30.5% / 5.2%):
    # the weighted intervals are slightly conservative
    rng = np.random.default_rng(11)
    miss1 = miss2 = 0
    n = 300
    for _ in range(n):
        e = rng.uniform(1, 3, 57)
        true_v = np.concatenate([rng.normal(0, 3, 40), rng.normal(30, 40, 17)])
        v = true_v + e * rng.standard_normal(57)
        lm = stats.norm.pdf(v, 0, np.sqrt(9 + e**2)) * 40
        lf = stats.norm.pdf(v, 30, np.sqrt(1600 + e**2)) * 17
        p = weighted_profile(np.ones(57), v, e, lm / (lm + lf), n_bins=1)
        s, lo, hi = p["sigma_kms"][0], p["sigma_lo_kms"][0], p["sigma_hi_kms"][0]
        dev = (3 - s) / (hi - s) if s < 3 else (s - 3) / (s - lo)
        miss1, miss2 = miss1 + (dev > 1), miss2 + (dev > 2)
    print(f"weighted intervals: miss 68% {miss1 / n:.3f}, miss 95% {miss2 / n:.3f}")
    # binomial 99% upper bounds about the nominal 0.317 and 0.046 (n = 300): 0.39 and 0.08
    assert 0.15 < miss1 / n < 0.39 and miss2 / n < 0.08


def test_contour_levels_of_a_gaussian():
    # bivariate unit normal: the HPD region of mass p is r^2 < -2 ln(1 - p), where the density
    # is f_max (1 - p) (the chi-square law with 2 degrees of freedom; common practice)
    x = np.linspace(-6, 6, 801)
    xx, yy = np.meshgrid(x, x)
    h = np.exp(-0.5 * (xx**2 + yy**2))
    lv = contour_levels(h)
    assert lv[0] / h.max() == pytest.approx(0.32, abs=0.005)
    assert lv[1] / h.max() == pytest.approx(0.05, abs=0.005)


def test_half_light_ellipse_follows_the_mock_stars():
    sat = parse_satellite({**DWARF, "ellipticity": 0.5, "position_angle_deg": 60.0})
    xi, eta, a, b = _ellipse(sat)
    far = np.argmax(np.hypot(xi, eta))
    pa = np.degrees(np.arctan2(xi[far], eta[far])) % 180.0
    assert pa == pytest.approx(60.0, abs=1.0) and b / a == pytest.approx(0.5)
    # the mock's stars: principal axis of their tangent-plane offsets at the same angle
    mock = make_mock(sat, None, n_stars=3000, seed=2, method="gaussian")
    s = mock.stars
    cov = np.cov(np.vstack([np.asarray(s["xi"]), np.asarray(s["eta"])]))
    vec = np.linalg.eigh(cov)[1][:, -1]
    assert np.degrees(np.arctan2(vec[0], vec[1])) % 180.0 == pytest.approx(60.0, abs=4.0)


def test_epoch_changes_of_constant_stars_are_half_normal():
    sat = parse_satellite(DWARF)
    mock = make_mock(sat, None, n_stars=400, seed=4, method="gaussian", epochs_mjd=[0.0, 300.0])
    from halo.inputs.catalogue import stars_from_table

    pairs = epoch_pairs(stars_from_table(mock.table, sat, source="mock"))
    ratio = np.abs(pairs["dv"]) / pairs["sigma_dv"]
    assert ratio.size == 400
    assert stats.kstest(ratio, stats.halfnorm.cdf).pvalue > 0.01  # scipy.stats.halfnorm


def test_epoch_figure_marks_the_variable_members(tmp_path):
    from halo.inputs.catalogue import stars_from_table
    from halo.products.plots_base import plt_agg
    from halo.products.plots_epochs import epochs_figure

    sat = parse_satellite(DWARF)
    mock = make_mock(
        sat, None, n_stars=300, seed=6, method="gaussian", epochs_mjd=[0.0, 200.0],
        binary_fraction=0.5, error_range_kms=(0.2, 0.5),
    )  # fmt: skip
    stars = stars_from_table(mock.table, sat, source="mock")
    # probabilities standing in for a fit's: binary when the epochs disagree (chi2 p < 0.01)
    variable = np.asarray(stars.p_var) < 0.01
    res = {"binary_prob": np.where(variable, 0.9, 0.2), "samples": {"f_binary": np.full(50, 0.3)}}
    ctx = {
        "results": {"m": res},
        "summary": {"models": {"m": {"converged": True}}},
        "sat_name": "mock",
        "stars": {"model": "m", "member_prob": np.ones(stars.n_stars)},
    }
    binary_ids = np.flatnonzero(np.asarray(mock.stars["is_binary"])).tolist()
    data = epochs_figure(
        plt_agg(), ctx, stars, tmp_path / "epoch_changes.png", {"binary_ids": binary_ids}
    )
    saved = json.loads((tmp_path / "epoch_changes.json").read_text())
    assert saved["likely_binary"] == data["likely_binary"]
    likely = np.asarray(saved["likely_binary"])
    true_bin = np.asarray(saved["true_binary"])
    # Bayes factor (0.9 / 0.1) / (0.3 / 0.7) = 21 > 3 exactly for the variable stars
    assert likely.sum() == variable.sum() > 5
    assert np.all(np.asarray(saved["ratio"])[likely] > 2.5)  # chi2_1 p < 0.01: |dv|/sigma > 2.58
    # the mock has no other source of variability: false alarms are 1% of the ~160 single stars
    assert true_bin[likely].mean() > 0.8
    assert sum(saved["hist_counts"]) == len(saved["ratio"]) == stars.n_stars
