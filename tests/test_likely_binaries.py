"""Likely binaries are picked on the evidence of each star's velocities, not on the prior.

A mock with 70 members, about a quarter of them binaries, some observed at three epochs and the
others once, is put through the per-star probabilities of the model `halo fit` builds
(halo.pipeline.likelihoods, halo.inference.model with keep_terms, halo.results.members) at draws
with the true parameters and a binary fraction of 0.54. A single-epoch star's binary_prob then
sits near 0.54 whatever its velocity, so "binary_prob > 0.5" calls most stars binaries and the
estimators keep a handful; the Bayes factor (posterior odds over prior odds) flags the stars
whose velocities vary or stray, and the estimators keep the rest.
"""

import numpy as np
import pytest

from halo.inference.model import make_model
from halo.inputs.catalogue import stars_from_table
from halo.inputs.satellite import parse_satellite
from halo.inputs.spec import load_spec
from halo.mock.catalogue import make_mock
from halo.pipeline.likelihoods import Likelihoods
from halo.pipeline.model_run import latent_sites
from halo.pipeline.settings import FitSettings
from halo.products.report_sources import member_counts
from halo.results.estimators import estimators
from halo.results.members import binary_bayes_factor, star_probabilities, write_members

SAT = {
    "name": "Binary-rich",
    "ra_deg": 80.0,
    "dec_deg": 10.0,
    "distance_kpc": 40.0,
    "distance_err_kpc": 2.0,
    "r_half_pc": 30.0,
    "r_half_err_pc": 3.0,
    "stellar_mass_msun": 3.0e5,
    "stellar_mass_err_msun": 5.0e4,
}
F_B = 0.54


@pytest.fixture(scope="module")
def binary_mock(tmp_path_factory):
    sat = parse_satellite(SAT)
    mock = make_mock(
        sat,
        None,
        n_stars=70,
        v_sys=50.0,
        error_range_kms=(0.8, 1.2),
        seed=12,
        epochs_mjd=[58000.0, 58030.0, 58400.0],
        repeat_fraction=0.5,
        binary_fraction=0.25,
    )
    stars = stars_from_table(mock.table, sat, source="binary-mock")
    truth = dict(
        zip(np.asarray(mock.stars["id"]), np.asarray(mock.stars["is_binary"]), strict=True)
    )
    is_binary = np.array([truth[int(i)] for i in np.asarray(stars.id)])
    spec = load_spec("stars-only")
    binaries, data, epochs = Likelihoods(stars, FitSettings(progress=False), False).get(spec)
    terms = make_model(spec, sat, data, binaries=binaries, keep_terms=True)
    latent = latent_sites(make_model(spec, sat, data, binaries=binaries))
    n = 8
    draws = {
        "v_sys": np.full(n, 50.0),
        "distance": np.full(n, SAT["distance_kpc"]),
        "r_half_pc": np.full(n, SAT["r_half_pc"]),
        "m_star_d0": np.full(n, SAT["stellar_mass_msun"]),
        "beta_sym": np.zeros(n),
        "f_binary": np.full(n, F_B),
    }
    assert set(latent) == set(draws)
    probs = star_probabilities(terms, draws, latent)
    res = {
        "samples": draws,
        "binary_prob": probs["binary_prob"],
        "member_prob": None,
        "epochs": epochs,
    }
    out = tmp_path_factory.mktemp("binaries")
    write_members(out / "members.ecsv", stars, {"stars-only": res}, ["stars-only"], sat)
    return stars, sat, res, is_binary, out


def test_binary_prob_restates_the_prior_for_single_epoch_stars(binary_mock):
    stars, _, res, is_binary, _ = binary_mock
    single = (np.asarray(stars.n_epochs) == 1) & ~is_binary
    # the old rule's premise: binary_prob is about the binary fraction, not evidence
    assert np.median(res["binary_prob"][single]) > 0.45
    assert np.sum((res["binary_prob"] > 0.5) & ~is_binary) >= 8


def test_likely_binaries_are_flagged_on_evidence(binary_mock):
    stars, sat, res, is_binary, out = binary_mock
    bf = binary_bayes_factor(res)
    flagged = bf > 3.0
    assert flagged.sum() <= is_binary.sum()
    assert np.mean(is_binary[flagged]) > 0.8  # those flagged are binaries
    multi = np.asarray(stars.n_epochs) > 1
    assert not np.any(flagged & multi & ~is_binary)  # no steady multi-epoch star is flagged
    counts, why = member_counts(out)
    assert why is None and counts["binaries"] == int(flagged.sum())


def test_estimators_keep_the_likely_single_members(binary_mock):
    stars, sat, res, is_binary, _ = binary_mock
    est = estimators(stars, sat, None, binary_bayes_factor(res))
    assert est["n_stars_used"] >= stars.n_stars - is_binary.sum()
    assert "Bayes factor" in est["selection"]


def test_probabilities_of_the_padded_program_equal_the_catalogue_s_own(binary_mock):
    # star_probabilities runs the catalogue padded to its bucket as an argument of one compiled
    # program (catalogues of similar size share it); cut back to the real stars, the numbers
    # must be those of the model run on the catalogue as given, draw by draw
    from halo.results.members import _probabilities_of_draw

    stars, sat, res, _, _ = binary_mock
    spec = load_spec("stars-only")
    binaries, data, _ = Likelihoods(stars, FitSettings(progress=False), False).get(spec)
    terms = make_model(spec, sat, data, binaries=binaries, keep_terms=True)
    assert len(terms.compile_args[0]["data"].v) > stars.n_stars  # padded: 70 stars -> 128
    draws = {k: np.asarray(v, dtype=float).copy() for k, v in res["samples"].items()}
    draws["f_binary"] = np.linspace(0.2, 0.8, len(draws["f_binary"]))
    one = _probabilities_of_draw(terms)
    ref = np.mean(
        [one({k: v[i] for k, v in draws.items()})["p_binary"] for i in range(len(draws["v_sys"]))],
        axis=0,
    )
    got = star_probabilities(terms, draws, list(draws))["binary_prob"]
    assert got.shape == (stars.n_stars,)
    np.testing.assert_allclose(got, ref, rtol=1e-12, atol=1e-14)
