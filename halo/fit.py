"""The main job: fit every model to a catalogue, compare with stars only, write the results.

Output folder (contract in the design notes)::

    DIR/summary.json          settings, estimators, per-model diagnostics, parameters, derived
                              quantities, evidence, LOO and the comparison with stars only
    DIR/summary.ecsv          the same quantities as a table
    DIR/<model>/posterior.nc  arviz posterior, sample stats and pointwise log-likelihood (netCDF)
    DIR/figures/*.png

Every file is written atomically; the stars-only model is always fitted because every other model
is compared with it.
"""

import dataclasses
import datetime
import hashlib
import sys
import time
import warnings
from pathlib import Path

import numpy as np

from halo import __version__
from halo.derived import STANDARD_ANGLES, derive, quantiles
from halo.errors import InputError
from halo.estimators import ESTIMATOR_RADIUS, dispersion_ml, propagate
from halo.evidence import log_evidence
from halo.fileio import atomic_path, write_json
from halo.inference import make_fit_data, make_model
from halo.sampling import diagnostics, run_nuts
from halo.spec import load_spec

__all__ = ["FitSettings", "DEFAULT_MODELS", "fit", "verdict", "STARS_ONLY"]

DEFAULT_MODELS = ("nfw", "cored", "stars-only")
STARS_ONLY = "stars-only"


@dataclasses.dataclass(frozen=True)
class FitSettings:
    chains: int = 4
    warmup: int = 1000
    draws: int = 1000
    seed: int = 0
    progress: bool = True
    binaries: bool = False

    def as_dict(self):
        keys = ("chains", "warmup", "draws", "seed", "binaries")
        return {k: getattr(self, k) for k in keys}


def verdict(ln_bf, ln_bf_err=0.0):
    """Plain words for a ln Bayes factor (dark model over stars only).

    Scale of Kass & Raftery (1995, JASA 90, 773, sec. 3.2) on 2 ln B: < 2 not worth more than a
    bare mention, 2-6 positive, 6-10 strong, > 10 very strong.
    """
    two = 2.0 * abs(ln_bf)
    if two < 2:
        words = "no preference worth more than a bare mention"
    else:
        grade = "positive" if two < 6 else "strong" if two < 10 else "very strong"
        side = "dark matter" if ln_bf > 0 else "stars alone"
        words = f"{grade} evidence for {side}"
    if ln_bf_err and abs(ln_bf) < 3 * ln_bf_err:
        words += " (within the evidence uncertainty)"
    return words


def _say(msg, settings):
    if settings.progress:
        print(msg, file=sys.stderr, flush=True)


def _latent_sites(model):
    from numpyro import handlers

    tr = handlers.trace(handlers.seed(model, 0)).get_trace()
    return [k for k, s in tr.items() if s["type"] == "sample" and not s.get("is_observed", False)]


def _estimators(stars, satellite):
    fit = dispersion_ml(stars.v, stars.v_err)
    r_e = satellite.r_half_circ_kpc
    r_e_err = satellite.r_half_err_pc * 1e-3 * np.sqrt(1 - satellite.ellipticity)
    out = {"sigma_los_kms": fit.sigma, "sigma_los_err_kms": fit.sigma_err}
    for name in ("walker2009", "wolf2010", "errani2018"):
        if fit.sigma > 0:
            q = propagate(name, fit.sigma, r_e, fit.sigma_err, r_e_err, method="montecarlo")
        else:
            q = None
        out[f"{name}_msun"] = None if q is None else q["median"]
        out[name] = q
        out[f"{name}_radius_pc"] = ESTIMATOR_RADIUS[name] * r_e * 1e3
    return out


def _model_result(name, spec, satellite, stars, data, settings, sigma_angles, out_dir):
    import arviz as az

    mixture = None
    if settings.binaries:
        from halo.binaries import load_mixture

        mixture = load_mixture()
    model = make_model(spec, satellite, data, binaries=mixture)
    t0 = time.perf_counter()
    _say(
        f"[{name}] sampling: {settings.chains} chains x {settings.warmup} warmup + "
        f"{settings.draws} draws",
        settings,
    )
    mcmc = run_nuts(
        model,
        chains=settings.chains,
        warmup=settings.warmup,
        draws=settings.draws,
        seed=settings.seed,
        progress=settings.progress,
    )
    t_sample = time.perf_counter() - t0
    samples = {k: np.asarray(v) for k, v in mcmc.get_samples().items()}
    idata = az.from_numpyro(mcmc, log_likelihood=True)
    latent = _latent_sites(model)
    diag = diagnostics(idata, latent)
    if not diag.converged:
        _say(f"[{name}] WARNING: NOT CONVERGED: {'; '.join(diag.problems())}", settings)
    _say(f"[{name}] evidence (bridge sampling)", settings)
    ev = log_evidence(
        model,
        samples,
        latent,
        chains=settings.chains,
        seed=settings.seed,
        progress=settings.progress,
    )
    with warnings.catch_warnings(record=True) as caught:
        # arviz warns about large Pareto k; the summary reports them per model instead
        warnings.simplefilter("always")
        loo = az.loo(idata, pointwise=True)
    loo_warnings = [str(w.message).split(".")[0] for w in caught]
    binary_prob = _binary_probability(model, samples) if mixture is not None else None
    _say(f"[{name}] derived quantities", settings)
    der = derive(
        spec,
        satellite,
        samples,
        sigma_angles_deg=sigma_angles,
        rng=np.random.default_rng(settings.seed),
    )
    post_path = Path(out_dir) / name / "posterior.nc"
    post_path.parent.mkdir(parents=True, exist_ok=True)
    with atomic_path(post_path) as tmp:
        idata.to_netcdf(str(tmp))
    return {
        "spec": spec,
        "samples": samples,
        "latent": latent,
        "diagnostics": diag,
        "evidence": ev,
        "loo": loo,
        "derived": der,
        "time_s": time.perf_counter() - t0,
        "sampling_time_s": t_sample,
        "loo_warnings": loo_warnings,
        "binary_prob": binary_prob,
    }


def _binary_probability(model, samples, batch=500):
    """Posterior mean probability that each star is a binary.

    Per draw, p_i = f_b L1_i / ((1 - f_b) L0_i + f_b L1_i), with L0 (L1) the star's likelihood
    as a single star (as a binary), obtained by re-evaluating the likelihood at f_binary = 0 and 1.
    """
    import jax.numpy as jnp
    from numpyro.infer.util import log_likelihood

    f_b = np.asarray(samples["f_binary"])
    out = []
    for k in range(0, len(f_b), batch):
        sub = {key: jnp.asarray(v[k : k + batch]) for key, v in samples.items()}
        ll = [
            np.asarray(
                log_likelihood(model, {**sub, "f_binary": jnp.full(len(sub["f_binary"]), x)})["v"]
            )
            for x in (0.0, 1.0)
        ]
        fb = f_b[k : k + batch, None]
        with np.errstate(divide="ignore"):
            a = np.log1p(-fb) + ll[0]
            b = np.log(fb) + ll[1]
        out.append(np.exp(b - np.logaddexp(a, b)))
    return np.concatenate(out).mean(axis=0)


def _write_members(path, stars, results, names, satellite):
    """members.ecsv: per star id, member_prob, binary_prob, radius used and epoch count."""
    from astropy.table import Table

    from halo.fileio import atomic_path

    dark = [n for n in names if n != STARS_ONLY]
    ref = dark[0] if dark else STARS_ONLY
    t = Table()
    t["id"] = np.asarray(stars.id).astype(str)
    mp = stars.member_prob
    t["member_prob"] = np.ones(stars.n_stars) if mp is None else np.asarray(mp, dtype=float)
    bp = results[ref]["binary_prob"]
    t["binary_prob"] = np.full(stars.n_stars, np.nan) if bp is None else bp
    t["radius_deg"] = np.asarray(stars.radius_deg)
    t["radius_pc"] = np.tan(np.radians(np.asarray(stars.radius_deg))) * satellite.distance_kpc * 1e3
    t["n_epochs"] = np.asarray(stars.n_epochs)
    t.meta["model"] = ref
    t.meta["note"] = (
        "member_prob: 1 (no foreground model yet) or the catalogue's member_prob column; "
        "binary_prob: posterior mean, NaN when binaries are not modelled; radius_pc: "
        "circularised, at the satellite file's distance"
    )
    with atomic_path(path) as tmp:
        t.write(str(tmp), format="ascii.ecsv", overwrite=True)


def _summarise_model(res, settings):
    der = res["derived"]
    params = {}
    for k in list(res["spec"].parameters) + [
        "m_star",
        "distance",
        "r_half_pc",
        "v_sys",
        "f_binary",
    ]:
        if k in res["samples"]:
            params[k] = quantiles(res["samples"][k])
    for k in res["latent"]:
        if k not in params:
            params[k] = quantiles(res["samples"][k])
    derived = {
        "m_half_msun": quantiles(der["m_half_msun"]),
        "r_half_3d_pc": quantiles(der["r_half_3d_pc"]),
        "m_re_msun": quantiles(der["m_re_msun"]),
        "m_1p8re_msun": quantiles(der["m_1p8re_msun"]),
        "ml_half_v": quantiles(der["ml_half_v"]) if "ml_half_v" in der else None,
    }
    if "log10_j" in der:
        keys = [f"{a:g}" for a in STANDARD_ANGLES] + ["2rh"]
        derived["log10_j"] = {k: quantiles(der["log10_j"][:, i]) for i, k in enumerate(keys)}
        derived["log10_d"] = {k: quantiles(der["log10_d"][:, i]) for i, k in enumerate(keys)}
        derived["angle_2rh_deg"] = quantiles(
            2 * der["r_half_3d_pc"] * 1e-3 / res["samples"]["distance"] * 180 / np.pi
        )
        derived["dark_mass_half_msun"] = quantiles(der["dark_mass_half_msun"])
        derived["log_slope_half"] = quantiles(der["log_slope_half"])
    from halo.derived import PROFILE_RADII_PC

    prof = {"radii_pc": list(PROFILE_RADII_PC)}
    for key in (
        "mass_total_msun",
        "mass_dark_msun",
        "mass_stars_msun",
        "density_total",
        "density_dark",
    ):
        if key in der:
            prof[key] = [quantiles(der[key][:, i]) for i in range(len(PROFILE_RADII_PC))]
    derived["profiles"] = prof
    diag = res["diagnostics"]
    loo = res["loo"]
    k = np.asarray(loo.pareto_k)
    # arviz's threshold for reliable PSIS (Vehtari et al. 2024, JMLR 25, 72)
    good_k = min(1 - 1 / np.log10(loo.n_samples), 0.7)
    return {
        "converged": bool(diag.converged),
        "problems": diag.problems(),
        "diagnostics": diag.as_dict(),
        "parameters": params,
        "derived": derived,
        "evidence": {
            "log_z": res["evidence"].log_z,
            "log_z_err": res["evidence"].log_z_err,
            "method": "bridge sampling (Meng & Wong 1996)",
        },
        "loo": {
            "elpd": float(loo.elpd),
            "se": float(loo.se),
            "pareto_k_max": float(np.max(k)),
            "pareto_k_threshold": float(good_k),
            "n_pareto_k_above_threshold": int(np.sum(k > good_k)),
            "warnings": res["loo_warnings"],
        },
        "time_s": res["time_s"],
    }


def _compare(res, ref):
    ln_bf = res["evidence"].log_z - ref["evidence"].log_z
    err = float(np.hypot(res["evidence"].log_z_err, ref["evidence"].log_z_err))
    a = np.asarray(res["loo"].elpd_i).ravel()
    b = np.asarray(ref["loo"].elpd_i).ravel()
    diff = a - b
    return {
        "ln_bayes_factor": float(ln_bf),
        "ln_bayes_factor_err": err,
        "delta_elpd": float(np.sum(diff)),
        "delta_elpd_se": float(np.sqrt(len(diff) * np.var(diff))),
        "verdict": verdict(ln_bf, err),
    }


def _clean(obj):
    """JSON-safe copy: NaN and inf become None, numpy scalars become floats."""
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_clean(v) for v in obj]
    if isinstance(obj, np.generic):
        obj = obj.item()
    if isinstance(obj, float) and not np.isfinite(obj):
        return None
    return obj


def _sigma_angles(stars):
    th = np.asarray(stars.radius_deg)
    th = th[th > 0]
    return np.geomspace(th.min(), th.max(), 24)


def fit(stars, satellite, out_dir, models=DEFAULT_MODELS, settings=None, satellite_path=None):
    """Fit ``models`` (spec names or paths) to ``stars`` (:class:`halo.catalog.StarData`).

    Writes the output folder and returns the summary dict.
    """
    settings = FitSettings() if settings is None else settings
    out_dir = Path(out_dir)
    names = list(dict.fromkeys(models))
    if STARS_ONLY not in names:
        names.append(STARS_ONLY)
    specs = {n: load_spec(n) for n in names}
    names = [s.name for s in specs.values()]
    specs = {s.name: s for s in specs.values()}
    if len(set(names)) != len(names):
        raise InputError("--model: two specs share the same name")
    data = make_fit_data(stars.v, stars.v_err, stars.radius_deg)
    sig_angles = _sigma_angles(stars)
    results = {}
    for n in [STARS_ONLY] + [m for m in names if m != STARS_ONLY]:
        results[n] = _model_result(
            n, specs[n], satellite, stars, data, settings, sig_angles, out_dir
        )
    summary = {
        "version": __version__,
        "created": datetime.datetime.now(datetime.UTC).isoformat(timespec="seconds"),
        "satellite": satellite.as_dict(),
        "catalogue": {
            "sha256": stars.sha256,
            "n_rows": int(stars.n_rows),
            "n_stars": int(stars.n_stars),
            "source": str(stars.source),
        },
        "settings": settings.as_dict(),
        "estimators": _estimators(stars, satellite),
        "models": {},
        "notes": list(stars.notes),
        "warnings": list(stars.warnings),
    }
    if satellite_path is not None:
        summary["satellite_sha256"] = hashlib.sha256(Path(satellite_path).read_bytes()).hexdigest()
    for n in names:
        entry = _summarise_model(results[n], settings)
        if n != STARS_ONLY:
            entry["vs_stars_only"] = _compare(results[n], results[STARS_ONLY])
        summary["models"][n] = entry
        if not entry["converged"]:
            summary["warnings"].append(f"model {n} NOT CONVERGED: {'; '.join(entry['problems'])}")
    summary = _clean(summary)
    from halo.plots import make_figures
    from halo.report import write_summary_table

    _say("writing figures", settings)
    figures = make_figures(results, stars, satellite, sig_angles, out_dir / "figures", summary)
    summary["figures"] = [str(p.relative_to(out_dir)) for p in figures]
    write_summary_table(summary, out_dir / "summary.ecsv")
    _write_members(out_dir / "members.ecsv", stars, results, names, satellite)
    write_json(out_dir / "summary.json", summary)
    return summary
