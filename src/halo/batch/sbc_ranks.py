"""The ranks of a calibration: each mock's truth among its fit's posterior draws, and their
uniformity, coverage and the false-dark-matter rate (statistics of :mod:`halo.batch.calibration`).

The ranked quantities are computed from the truth and from each kept posterior draw by the same
function, :func:`halo.results.derived.derive` (the quantities every fit reports), so a truth and
its draws are always the same thing: M(<r_1/2) (total mass inside the 3D half-light radius, at
each draw's own distance and r_1/2), log10 J within 0.5 deg (models with a halo), and the sampled
``f_binary`` and ``v_sys``. The posterior draws (chains flattened, chain-major) are thinned to L
evenly spaced ones (:func:`halo.batch.calibration.thin_draws`; Talts et al. 2018, sect. 5.1).
"""

import numpy as np

from halo.batch.calibration import (
    chi_square_uniformity,
    exceedance_rate,
    interval_coverage,
    ks_uniformity,
    rank_bias,
    rank_histogram,
    sbc_ranks,
    thin_draws,
)
from halo.batch.sbc import sampled_sites
from halo.core.vocabulary import STANDARD_ANGLES, STARS_ONLY
from halo.products.rundir import load_posterior
from halo.results.derived import derive

__all__ = [
    "QUANTITIES",
    "quantities_of",
    "draw_values",
    "collect_ranks",
    "rank_statistics",
    "parameter_statistics",
]

#: key -> (label, unit) of the ranked quantities
QUANTITIES = {
    "m_half_msun": ("M(<r_1/2)", "Msun"),
    "log10_j_0.5deg": ("log10 J(0.5 deg)", "GeV^2 cm^-5"),
    "f_binary": ("binary fraction", ""),
    "v_sys_kms": ("v_sys", "km/s"),
}
_J_INDEX = STANDARD_ANGLES.index(0.5)
#: posterior sites derive() needs besides the spec's parameters
_SITES = ("distance", "r_e_kpc", "m_star", "abs_mag_v")


def quantities_of(spec, binaries):
    """The quantity keys ranked for a fit of ``spec`` (J only with a halo, f_binary only with
    binaries in the model)."""
    keys = ["m_half_msun"] + (["log10_j_0.5deg"] if spec.has_dark else [])
    return keys + (["f_binary"] if binaries else []) + ["v_sys_kms"]


def draw_values(spec, satellite, samples, keys):
    """{key: array (n,)} of the ranked quantities for draws ``samples`` ({site: array (n,)})."""
    needed = {k: np.asarray(v, dtype=float).ravel() for k, v in samples.items()}
    n = needed["distance"].size
    der = derive(spec, satellite, needed, sigma_angles_deg=[0.01], batch=min(n, 256))
    out = {"m_half_msun": np.asarray(der["m_half_msun"], dtype=float)}
    if "log10_j_0.5deg" in keys:
        out["log10_j_0.5deg"] = np.asarray(der["log10_j"], dtype=float)[:, _J_INDEX]
    if "f_binary" in keys:
        out["f_binary"] = needed["f_binary"]
    out["v_sys_kms"] = needed["v_sys"]
    return {k: out[k] for k in keys}


def _thinned(samples, n_keep):
    """Every site of flattened posterior ``samples`` thinned to ``n_keep`` draws."""
    return {
        k: thin_draws(np.asarray(v, dtype=float)[None, :], n_keep)[0]
        for k, v in samples.items()
        if np.ndim(v) == 1
    }


def _entry_draws(run_dir, model, n_keep):
    _, samples = load_posterior(run_dir, model)
    if samples["distance"].size < n_keep:
        raise ValueError(f"{run_dir}: {samples['distance'].size} draws, fewer than L = {n_keep}")
    return _thinned(samples, n_keep)


def _ln_b(record, dark_models):
    models = record.get("models") or {}
    return {m: models.get(m, {}).get("ln_bayes_factor") for m in dark_models}


def collect_ranks(spec, satellite, truths, records, fits_dir, model, n_keep, binaries):
    """Per mock: its truth values, ranks among ``n_keep`` thinned posterior draws of ``model``,
    convergence and ln B of every dark model fitted. Returns (keys, rows) in mock order; a mock
    whose fit failed has ``status`` "failed" and no ranks."""
    keys = quantities_of(spec, binaries)
    sites = sampled_sites(spec, satellite, binaries)
    truth_draws = {
        k: np.array([t["prior_draw"][k] for t in truths]) for k in truths[0]["prior_draw"]
    }
    truth_vals = draw_values(spec, satellite, truth_draws, keys)
    rows = []
    for i, (t, rec) in enumerate(zip(truths, records, strict=True)):
        row = {"name": t["name"], "status": rec["status"], "error": rec.get("error")}
        row["truth"] = {k: float(truth_vals[k][i]) for k in keys}
        row["foreground_fraction"] = t["foreground_fraction"]
        row["n_binaries"] = t["n_binaries"]
        row["parameter_truth"] = {k: float(t["prior_draw"][k]) for k in sites}
        if rec["status"] == "done":
            thinned = _entry_draws(fits_dir / t["name"], model, n_keep)
            draws = draw_values(spec, satellite, thinned, keys)
            row["ranks"] = {
                k: int(sbc_ranks([row["truth"][k]], draws[k][None, :])[0]) for k in keys
            }
            row["posterior"] = {
                k: {"median": float(np.median(draws[k])), "sd": float(np.std(draws[k], ddof=1))}
                for k in keys
            }
            # diagnostics: every sampled parameter's own rank (which one a failed quantity
            # inherits its miscalibration from)
            row["parameter_ranks"] = {
                k: int(sbc_ranks([row["parameter_truth"][k]], thinned[k][None, :])[0])
                for k in sites
                if k in thinned
            }
            row["converged"] = bool(rec.get("converged"))
            row["ln_b"] = _ln_b(rec, [m for m in rec.get("models") or {} if m != STARS_ONLY])
        rows.append(row)
    return keys, rows


def _q_stats(ranks, n_keep, n_bins, seed):
    chi2, p_chi2 = chi_square_uniformity(ranks, n_keep, n_bins)
    ks, p_ks = ks_uniformity(ranks, n_keep, seed=seed)
    cov = interval_coverage(ranks, n_keep)
    bias, bias_se = rank_bias(ranks, n_keep)
    return {
        "n": int(ranks.size),
        "ranks": [int(r) for r in ranks],
        "histogram": [int(c) for c in rank_histogram(ranks, n_keep, n_bins)],
        "chi2": {
            "statistic": chi2,
            "p_value": p_chi2,
            "dof": n_bins - 1,
            "valid": bool(ranks.size / n_bins >= 5),
        },
        "ks": {"statistic": ks, "p_value": p_ks},
        "uniform_at_0.01": bool(min(p_chi2, p_ks) > 0.01),
        "coverage": {
            f"{lv:g}": {"fraction": f, "expected": e, "standard_error": se}
            for lv, (f, e, se) in cov.items()
        },
        "rank_bias": {"value": bias, "standard_error": bias_se},
    }


def rank_statistics(keys, rows, n_keep, n_bins, seed=0):
    """{key: label, unit, n, ranks, histogram, chi2, ks, uniform_at_0.01, coverage} over the
    finished mocks."""
    done = [r for r in rows if "ranks" in r]
    out = {}
    for k in keys:
        label, unit = QUANTITIES[k]
        ranks = np.array([r["ranks"][k] for r in done], dtype=int)
        stats = _q_stats(ranks, n_keep, n_bins, seed) if ranks.size else {"n": 0}
        out[k] = {"label": label, "unit": unit, **stats}
        z = [_z(r, k) for r in done if "posterior" in r]
        z = np.array([v for v in z if np.isfinite(v)])
        if z.size:  # (posterior median - truth) / posterior sd: where results move to
            out[k]["z"] = {
                "mean": float(z.mean()),
                "sd": float(z.std(ddof=1)) if z.size > 1 else None,
            }
    return out


def _z(row, key):
    post = row["posterior"][key]
    return (post["median"] - row["truth"][key]) / post["sd"] if post["sd"] > 0 else np.nan


def parameter_statistics(rows, n_keep, n_bins, seed=0):
    """{site: n, ranks, histogram, chi2, ks, uniform_at_0.01, coverage} of every sampled
    parameter of the ranked model (diagnostics beside the reported quantities)."""
    done = [r for r in rows if "parameter_ranks" in r]
    sites = [k for k in (done[0]["parameter_ranks"] if done else {})]
    out = {}
    for k in sites:
        ranks = np.array([r["parameter_ranks"][k] for r in done], dtype=int)
        out[k] = _q_stats(ranks, n_keep, n_bins, seed)
    return out


def false_dark_matter(rows):
    """{model: {n, ln_b, gt_1, gt_3}} of the dark models fitted to stars-only truths: the
    fraction of mocks with ln B above 1 and 3 and its Clopper-Pearson 95% interval."""
    models = sorted({m for r in rows for m in (r.get("ln_b") or {})})
    out = {}
    for m in models:
        vals = np.array([r["ln_b"][m] for r in rows if (r.get("ln_b") or {}).get(m) is not None])
        rates = exceedance_rate(vals) if vals.size else {}
        out[m] = {"n": int(vals.size), "ln_b": [float(v) for v in vals]}
        for t, (frac, lo, hi) in rates.items():
            out[m][f"gt_{t:g}"] = {"fraction": frac, "lower_95": lo, "upper_95": hi}
    return out
