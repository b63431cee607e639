"""jd_factors.ecsv as likelihood code reads it: per-row converged and preferred flags (a script
selecting `converged & preferred` gets one row per cone), the preferred rows equal to
summary.json (quantiles, the 2rh row and the 95% upper bounds), names without dots, widths in
plain dex, a short header; `halo export` prints the headline log10 J(0.5 deg) per model.

The run folder is built by hand (no sampler): a posterior of NFW draws for two dark models, and a
summary.json whose derived entries are made by the fit's own code (halo.results.derived.derive,
then halo.results.summary's quantile summary and halo.results.dispersion.upper_limits)."""

import contextlib
import io
import json
import shutil
from pathlib import Path

import arviz as az
import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table
from export_setup import nfw_posterior, run_summary

from halo.cli.app import main
from halo.core.vocabulary import angle_keys
from halo.inputs.satellite import parse_satellite
from halo.inputs.spec import load_spec
from halo.products.jd_tables import fit_jd_table, preferred_model
from halo.results.derived import derive
from halo.results.dispersion import upper_limits
from halo.results.summary import _derived

NFW_TOML = Path(__file__).parents[1] / "models" / "nfw.toml"
#: (name, seed of its posterior, converged, ln B against stars only)
MODELS = (("nfw", 1, True, 2.5), ("steep", 2, False, 6.0), ("wide", 3, True, 1.0))
KEYS = ["0.1", "0.2", "0.3", "0.5", "2rh"]


def _entry(post, sat, converged, ln_b):
    samples = {k: np.asarray(v).ravel() for k, v in post.items()}
    der = derive(load_spec("nfw"), sat, samples, sigma_angles_deg=[0.05])
    return (
        {
            "converged": converged,
            "parameters": {},
            "derived": _derived({"derived": der}),
            "evidence": {"log_z": -100.0 + ln_b, "log_z_err": 0.1},
            "vs_stars_only": {"ln_bayes_factor": ln_b, "ln_bayes_factor_err": 0.14},
        },
        upper_limits({"derived": der}),
        der,
    )


@pytest.fixture(scope="module")
def exported(tmp_path_factory):
    """A run folder with three NFW-halo models (two of them from copies of the nfw spec), its
    export into OUT with the extra angle 0.3 deg, and what `halo export` printed."""
    root = tmp_path_factory.mktemp("contract")
    summary = run_summary()
    sat = parse_satellite(summary["satellite"])
    summary["dispersion"] = {"resolved": False}
    summary["upper_limits"] = {}
    summary["models"] = {}
    results = {"stars-only": {"derived": {}}}
    folder = root / "run"
    for name, seed, conv, ln_b in MODELS:
        post = nfw_posterior(seed)
        entry, limits, results[name] = _entry(post, sat, conv, ln_b)
        results[name] = {"derived": results[name]}
        spec = root / f"{name}.toml"
        shutil.copyfile(NFW_TOML, spec)
        entry["spec_source"] = str(spec)
        summary["models"][name] = entry
        summary["upper_limits"][name] = limits
        (folder / name).mkdir(parents=True)
        az.from_dict({"posterior": post}).to_netcdf(str(folder / name / "posterior.nc"))
    summary["models"]["stars-only"] = {"converged": True, "spec_source": "stars-only"}
    (folder / "summary.json").write_text(json.dumps(summary))
    out = root / "out"
    args = ["export", str(folder), "--out", str(out), "--angles-deg", "0.3"]
    args += ["--half-width-deg", "0.3", "--template-draws", "3"]
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        code = main(args)
    assert code == 0
    return out, summary, printed.getvalue(), fit_jd_table(summary, results, sat)


def test_script_selects_one_row_per_cone(exported):
    out = exported[0]
    # what a likelihood script does
    t = Table.read(out / "jd_factors.ecsv", format="ascii.ecsv")
    best = t[t["converged"] & t["preferred"]]
    assert list(best["angle_label"]) == KEYS
    # nfw: the converged model with the largest ln B ('steep' has more, but did not converge)
    assert set(best["model"]) == {"nfw"}
    assert sum(t["preferred"]) == len(KEYS) and not any(t["preferred"] & ~t["converged"])
    assert list(t[t["model"] == "steep"]["converged"]) == [False] * len(KEYS)
    assert "converged" in t.meta["preferred_rule"] and "ln Bayes factor" in t.meta["preferred_rule"]
    assert t.meta["preferred_over_next"]["next"] == "wide"
    assert t.meta["preferred_over_next"]["delta_ln_z"] == pytest.approx(1.5)
    assert t.meta["dispersion_resolved"] is False


def test_preferred_rows_equal_summary_json(exported):
    out, summary = exported[:2]
    t = Table.read(out / "jd_factors.ecsv", format="ascii.ecsv")
    best = t[t["converged"] & t["preferred"]]
    name = best["model"][0]
    der = summary["models"][name]["derived"]
    limits = summary["upper_limits"][name]
    assert angle_keys() == ["0.1", "0.2", "0.5", "2rh"]
    for row in best:
        key = row["angle_label"]
        if key not in angle_keys():
            continue  # 0.3 deg: an extra export angle, not in summary.json
        for kind in ("j", "d"):
            q = der[f"log10_{kind}"][key]
            for k, v in q.items():
                col = f"log10_{kind}_{k.replace('.', '_')}"
                assert row[col] == pytest.approx(v, rel=1e-13, abs=0), (key, col)
            up = limits[f"log10_{kind}_upper95"][key]
            assert row[f"log10_{kind}_upper95"] == pytest.approx(up, rel=1e-13, abs=0)
    # the 2rh row: twice the circularised projected half-light radius over the distance, the
    # median of the per-draw angle as summary.json's angle_2rh_deg
    two = best[best["angle_label"] == "2rh"][0]
    assert two["half_angle_deg"] == pytest.approx(der["angle_2rh_deg"]["median"], rel=1e-14)
    assert "circularised projected" in t.meta["convention_2rh"]


def test_names_units_and_short_header(exported):
    out = exported[0]
    t = Table.read(out / "jd_factors.ecsv", format="ascii.ecsv")
    assert "half_angle_deg" in t.colnames and "angle_deg" not in t.colnames
    assert not [c for c in t.colnames if "." in c]
    assert {"log10_j_p2_5", "log10_j_p97_5", "log10_j_upper95", "log10_d_upper95"} <= set(
        t.colnames
    )
    for kind in ("j", "d"):
        assert t[f"log10_{kind}_std"].unit == u.dex  # a width: plain dex
        assert t[f"log10_{kind}_median"].unit.physical_unit != u.dimensionless_unscaled
    assert t["converged"].dtype == bool and t["preferred"].dtype == bool
    # the usage lines name every column family
    usage = " ".join(t.meta["usage"])
    for word in ("converged & preferred", "angle_label", "half_angle_deg", "log10_", "std"):
        assert word in usage
    assert "upper95" in usage and "j_mean" in usage
    # the header: one datatype line per column (name, unit), then a few lines of metadata
    header = [ln for ln in (out / "jd_factors.ecsv").read_text().splitlines() if ln[:1] == "#"]
    meta = header[header.index("# meta: !!omap") : -1]
    assert len(t.meta["usage"]) <= 4 and len(meta) <= 16, len(meta)
    assert len(header) == len(meta) + len(t.colnames) + 4
    # an SQL-like expression on the names, through numpy: no quoting needed
    assert np.all(np.isfinite(t["log10_j_p2_5"]))


def test_export_prints_headline_per_model(exported):
    _, summary, text = exported[:3]
    lines = [ln for ln in text.splitlines() if "log10 J(0.5 deg)" in ln]
    assert len(lines) == len(MODELS)
    for (name, _, conv, _), line in zip(MODELS, lines, strict=True):
        q = summary["models"][name]["derived"]["log10_j"]["0.5"]
        assert line.startswith(f"{name}: log10 J(0.5 deg) = {q['median']:.2f} +- {q['std']:.2f}")
        assert ("NOT CONVERGED" in line) != conv
        assert ("preferred" in line) == (name == "nfw")
    assert "template: half-width" in text and "of the whole halo's J" in text


def test_fit_writes_the_same_table(exported):
    """halo fit's jd_factors.ecsv (from the per-draw J and D behind summary.json) has the export's
    columns, flags and values for the cones both hold."""
    out, _, _, fitted = exported
    t = Table.read(out / "jd_factors.ecsv", format="ascii.ecsv")
    assert fitted.colnames == t.colnames
    common = t[t["angle_label"] != "0.3"]
    assert len(fitted) == len(common)
    for a, b in zip(fitted, common, strict=True):
        for col in t.colnames:
            if t[col].dtype.kind == "f":
                assert a[col] == pytest.approx(b[col], rel=1e-13), col
            else:
                assert a[col] == b[col], col
    assert fitted.meta["preferred_rule"] == t.meta["preferred_rule"]


def test_preferred_rule_without_converged_or_evidence():
    models = {
        "a": {"converged": False, "vs_stars_only": {"ln_bayes_factor": 1.0}},
        "b": {"converged": False, "vs_stars_only": {"ln_bayes_factor": 3.0}},
    }
    best, rule, margin = preferred_model({"models": models}, ["a", "b"])
    assert best == "b" and "none converged" in rule and margin["next"] == "a"
    models = {"a": {"converged": True}, "b": {"converged": True}}
    best, rule, margin = preferred_model({"models": models}, ["a", "b"])
    assert best == "a" and "first dark model" in rule and margin is None
