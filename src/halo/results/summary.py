"""The summary of a fit (the summary.json schema of the design notes), built from the per-model
results: settings, estimators, per-model diagnostics, parameters, derived quantities, evidence,
LOO and the comparison with stars only."""

import datetime
import hashlib
from pathlib import Path

import numpy as np

from halo import __version__
from halo.core.quantiles import quantiles
from halo.core.vocabulary import JD_CONVENTIONS, STARS_ONLY, angle_keys
from halo.results.comparison import compare
from halo.results.derived import PROFILE_RADII_PC
from halo.results.dispersion import resolution, upper_limits
from halo.results.estimators import estimators
from halo.results.members import binary_bayes_factor
from halo.results.verdict import build_verdict, dispersion_steps

__all__ = ["model_summary", "build_summary", "clean"]

#: nuisance parameters reported beside the spec's own
_NUISANCES = ("m_star", "distance", "r_half_pc", "v_sys", "f_binary")
#: profiles reported at PROFILE_RADII_PC
_PROFILES = (
    "mass_total_msun",
    "mass_dark_msun",
    "mass_stars_msun",
    "density_total",
    "density_dark",
)


def _parameters(res):
    """Quantiles of the spec's parameters, the nuisances, then every other latent site."""
    params = {}
    for k in list(res["spec"].parameters) + list(_NUISANCES):
        if k in res["samples"]:
            params[k] = quantiles(res["samples"][k])
    for k in res["latent"]:
        if k not in params:
            params[k] = quantiles(res["samples"][k])
    return params


def _derived(res):
    """Quantiles of the derived quantities, J and D by angle key, and the profiles."""
    der = res["derived"]
    derived = {
        "m_half_msun": quantiles(der["m_half_msun"]),
        "r_half_3d_pc": quantiles(der["r_half_3d_pc"]),
        "m_re_msun": quantiles(der["m_re_msun"]),
        "m_1p8re_msun": quantiles(der["m_1p8re_msun"]),
        "ml_half_v": quantiles(der["ml_half_v"]) if "ml_half_v" in der else None,
        # one-sided 95% lower bound (5th percentile) of M/L_V, quoted by the verdict
        "ml_half_v_lower95": (
            float(np.percentile(der["ml_half_v"], 5)) if "ml_half_v" in der else None
        ),
    }
    if "log10_j" in der:
        keys = angle_keys()
        derived["log10_j"] = {k: quantiles(der["log10_j"][:, i]) for i, k in enumerate(keys)}
        derived["log10_d"] = {k: quantiles(der["log10_d"][:, i]) for i, k in enumerate(keys)}
        for kind in ("log10_j_untruncated", "log10_d_untruncated"):  # beside the reported ones
            if kind in der:
                derived[kind] = {k: quantiles(der[kind][:, i]) for i, k in enumerate(keys)}
        derived["angle_2rh_deg"] = quantiles(der["angle_2rh_deg"])
        derived["dark_mass_half_msun"] = quantiles(der["dark_mass_half_msun"])
        derived["log_slope_half"] = quantiles(der["log_slope_half"])
    if "r_jacobi_pc" in der:
        derived["r_jacobi_pc"] = quantiles(der["r_jacobi_pc"])
    prof = {"radii_pc": list(PROFILE_RADII_PC)}
    for key in _PROFILES:
        if key in der:
            prof[key] = [quantiles(der[key][:, i]) for i in range(len(PROFILE_RADII_PC))]
    derived["profiles"] = prof
    return derived


def _loo(res):
    loo = res["loo"]
    k = np.asarray(loo.pareto_k)
    # arviz's threshold for reliable PSIS (Vehtari et al. 2024, JMLR 25, 72)
    good_k = min(1 - 1 / np.log10(loo.n_samples), 0.7)
    return {
        "elpd": float(loo.elpd),
        "se": float(loo.se),
        "pareto_k_max": float(np.max(k)),
        "pareto_k_threshold": float(good_k),
        "n_pareto_k_above_threshold": int(np.sum(k > good_k)),
        "warnings": res["loo_warnings"],
    }


def model_summary(res):
    """The summary.json entry of one model result (see halo.pipeline.model_run)."""
    diag = res["diagnostics"]
    return {
        "converged": bool(diag.converged),
        "problems": diag.problems(),
        "diagnostics": diag.as_dict(),
        "parameters": _parameters(res),
        "derived": _derived(res),
        # whether (and where) J and D are tidally truncated (halo.results.truncation)
        "jd_truncation": res.get("jd_truncation"),
        "evidence": {
            "log_z": res["evidence"].log_z,
            "log_z_err": res["evidence"].log_z_err,
            "method": "bridge sampling (Meng & Wong 1996)",
        },
        "loo": _loo(res),
        "time_s": res["time_s"],
        "sampling_time_s": res["sampling_time_s"],
        "stage_times_s": res.get("stage_times_s"),
        "binary_fraction": (
            quantiles(res["samples"]["f_binary"]) if "f_binary" in res["samples"] else None
        ),
        "effective_members": float(
            res["data"].n_stars if res["member_prob"] is None else np.sum(res["member_prob"])
        ),
    }


def clean(obj):
    """JSON-safe copy: NaN and inf become None, numpy scalars become floats."""
    if isinstance(obj, dict):
        return {str(k): clean(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [clean(v) for v in obj]
    if isinstance(obj, np.generic):
        obj = obj.item()
    if isinstance(obj, float) and not np.isfinite(obj):
        return None
    return obj


def _head(stars, satellite, settings, foreground, ref):
    """The run-wide part: version, inputs, settings and the estimators."""
    fg_on, fg_reason = foreground
    return {
        "version": __version__,
        "created": datetime.datetime.now(datetime.UTC).isoformat(timespec="seconds"),
        "satellite": satellite.as_dict(),
        "catalogue": {
            "sha256": stars.sha256,
            "n_rows": int(stars.n_rows),
            "n_stars": int(stars.n_stars),
            "source": str(stars.source),
        },
        "settings": {**settings.as_dict(), "foreground": fg_on, "foreground_reason": fg_reason},
        "estimators": estimators(stars, satellite, ref["member_prob"], binary_bayes_factor(ref)),
        "models": {},
        "notes": list(stars.notes),
        "warnings": list(stars.warnings),
    }


def _few_orbits_note(stars, epochs):
    """A note when multi-epoch stars have few effective Monte Carlo orbits, else None."""
    few = [] if epochs is None else epochs.ess
    if not len(few):
        return None
    k = int(np.sum((np.asarray(stars.n_epochs) > 1) & (np.asarray(few) < 20)))
    if not k:
        return None
    return (
        f"{k} multi-epoch star(s) have fewer than 20 effective Monte Carlo orbits behind their "
        "binary term (their velocity changes are extreme for the orbit population); see "
        "binary_mc_ess in members.ecsv"
    )


def _models(results, names, specs):
    """({name: summary entry}, warnings of the models that did not converge)."""
    entries, warnings = {}, []
    for n in names:
        entry = model_summary(results[n])
        entry["spec_source"] = str(specs[n].source)
        entry["priors"] = dict(specs[n].parameters)  # the spec's priors (ln B depends on them)
        entry["reused_from"] = results[n]["reused_from"]
        entry["warm_start"] = results[n]["warm_start"]
        if n != STARS_ONLY:
            entry["vs_stars_only"] = compare(results[n], results[STARS_ONLY])
        entries[n] = entry
        if not entry["converged"]:
            warnings.append(f"model {n} NOT CONVERGED: {'; '.join(entry['problems'])}")
    return entries, warnings


def _jd_conventions(results, names):
    """The run's J/D conventions: what "2rh" means and this run's truncation statement."""
    out = dict(JD_CONVENTIONS)
    stated = [results[n].get("jd_truncation") for n in names if n != STARS_ONLY]
    stated = [t["statement"] for t in stated if t]
    if stated:
        out["halo_truncation"] = stated[0]  # one tidal field and one setting per fit
    return out


def build_summary(stars, satellite, settings, foreground, results, specs, satellite_path=None):
    """The summary dict (JSON-safe) of the model ``results`` ({name: result}, stars-only among
    them) fitted with ``settings``; ``foreground`` = (on, reason); ``specs`` {name: spec} in the
    order of the output."""
    names = list(specs)
    ref = next((n for n in names if n != STARS_ONLY), STARS_ONLY)
    summary = _head(stars, satellite, settings, foreground, results[ref])
    if stars.member_prob is not None and not foreground[0]:
        summary["warnings"].append(
            "the catalogue's member_prob column is ignored: the foreground is switched off"
        )
    summary["dispersion"] = resolution(results[ref])
    resolved = summary["dispersion"]["resolved"]
    if not resolved:
        summary["warnings"].append(summary["dispersion"]["message"])
    summary["upper_limits"] = None if resolved else {n: upper_limits(results[n]) for n in names}
    note = _few_orbits_note(stars, results[STARS_ONLY]["epochs"])
    if note is not None:
        summary["notes"].append(note)
    if satellite_path is not None:
        summary["satellite_sha256"] = hashlib.sha256(Path(satellite_path).read_bytes()).hexdigest()
    summary["models"], warnings = _models(results, names, specs)
    summary["jd_conventions"] = _jd_conventions(results, names)
    summary["warnings"].extend(warnings)
    binaries = results[STARS_ONLY]["binaries"]
    summary["verdict"] = build_verdict(
        clean(summary),
        None if binaries is None else specs[STARS_ONLY].binary_fraction_range,
        dispersion_steps(results[ref]),
    )
    return clean(summary)
