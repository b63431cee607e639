"""Fits at the edges finish and say what they are: velocity errors that swamp the dispersion
(unresolved: no dispersion error to print), a single chain (r-hat undefined: flagged as not
converged, not a crash), summary.ecsv's estimator rows (convergence does not apply) and the corner
plot of a model with more parameters than it shows (it names those left out).

The fit is one end-to-end `halo fit` of 12 stars with 30 km/s errors, one chain of 150 + 150,
the stars-only model, no binaries, no foreground.
"""

import json

import numpy as np
import pytest
from astropy.table import Table
from fit_setup import NO_EXTRAS, field_catalogue, fit_command, tiny_chains, write_testa

from halo.cli.app import main
from halo.products import plots


@pytest.fixture(scope="module")
def swamped(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("edge")
    sat = write_testa(tmp / "sat.toml", "Testa II")
    # errors of 30 km/s and a scatter no larger: the dispersion is not resolved
    cat = field_catalogue(tmp / "wide.ecsv", [f"s{i}" for i in range(12)], 3, 20.0, 30.0)
    out = tmp / "out"
    args = [*fit_command(cat, sat, out, "stars-only"), *tiny_chains(1), *NO_EXTRAS]
    return main([*args, "--quiet"]), out


def test_unresolved_single_chain_fit_finishes_and_says_so(swamped, capsys):
    code, out = swamped
    assert code == 0
    summary = json.loads((out / "summary.json").read_text())
    assert not summary["dispersion"]["resolved"]
    assert summary["estimators"]["sigma_los_err_kms"] is None
    m = summary["models"]["stars-only"]
    assert not m["converged"]
    assert any("r-hat undefined" in p for p in m["problems"])
    from halo.products.text_report import format_summary

    text = format_summary(summary, out)
    assert "(error undefined: unresolved)" in text
    assert "NOT CONVERGED" in text and "r-hat undefined (run at least 2 chains)" in text


def test_summary_table_estimator_rows_are_not_marked_converged(swamped, tmp_path):
    from halo.products.text_report import write_summary_table

    _, out = swamped
    summary = json.loads((out / "summary.json").read_text())
    # the same summary with a resolved dispersion's estimators (this fit has none)
    q = {"median": 3e5, "p16": 2e5, "p84": 4e5, "p2.5": 1e5, "p97.5": 5e5, "mean": 3e5}
    summary["estimators"]["walker2009"] = q
    write_summary_table(summary, tmp_path / "summary.ecsv")
    t = Table.read(tmp_path / "summary.ecsv", format="ascii.ecsv")
    est = np.asarray(t["model"] == "estimators")
    model = np.asarray(t["model"] == "stars-only")
    assert est.any() and model.any()
    mask = np.ma.getmaskarray(t["converged"])
    assert np.all(mask[est])  # not sampled: convergence does not apply
    assert not np.any(mask[model]) and not np.any(np.asarray(t["converged"])[model])


def test_text_summary_with_undefined_numbers(swamped):
    from halo.products.text_report import format_summary

    _, out = swamped
    summary = json.loads((out / "summary.json").read_text())
    loo = summary["models"]["stars-only"]["loo"]
    loo["pareto_k_max"] = None  # a NaN Pareto k is written as null
    loo["n_pareto_k_above_threshold"] = 1
    summary["estimators"]["sigma_los_err_kms"] = 1.0  # only the Pareto k is undefined here
    text = format_summary(summary, out)
    assert "max undefined" in text and "PSIS-LOO warning" in text


def test_corner_plot_shows_every_scalar_parameter_on_pages(tmp_path):
    from halo.products.plots_corner import write_corner

    rng = np.random.default_rng(0)
    names = [f"p{i}" for i in range(11)]
    res = {"latent": names + ["vec"], "samples": {k: rng.normal(size=200) for k in names}}
    res["samples"]["vec"] = rng.normal(size=(200, 3))
    saved = []
    pages = write_corner(plots._plt(), res, tmp_path, "m", True, None, lambda f, p: saved.append(p))
    assert [p.name for p in saved] == ["corner_m_1.png", "corner_m_2.png"]
    shown = [label for _, data in pages for label in data["parameters"]]
    assert shown == [f"p{i} [-]" for i in range(11)]  # all of them, at most 8 a page
    assert all(len(data["parameters"]) <= 8 for _, data in pages)
    assert pages[0][1]["not_shown"] == ["vec"]  # not scalar: named in the figure's data
