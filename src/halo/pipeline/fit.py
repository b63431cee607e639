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
import json
import sys
import time
import warnings
from pathlib import Path

import numpy as np

from halo import __version__
from halo.core.errors import InputError
from halo.core.fileio import atomic_path, write_json
from halo.inference.evidence import log_evidence
from halo.inference.model import Foreground, make_fit_data, make_model
from halo.inference.sampling import diagnostics, run_nuts
from halo.inputs.spec import load_spec
from halo.physics.estimators import ESTIMATOR_RADIUS, dispersion_ml, propagate
from halo.results.derived import STANDARD_ANGLES, derive, quantiles

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
    binaries: bool = True
    foreground: bool | str = "auto"  # True, False or "auto" (see foreground_decision)
    n_orbits: int = 20_000  # Monte Carlo orbits per multi-epoch star

    def as_dict(self):
        keys = ("chains", "warmup", "draws", "seed", "binaries", "foreground")
        return {k: getattr(self, k) for k in keys}


#: a star further than this many robust widths from the median velocity is taken as a sign that
#: the catalogue reaches beyond the members (common practice: 5 sigma clipping)
FOREGROUND_CLIP = 5.0
#: ... and further than this [km/s], so that binaries of a cold system do not trigger it
FOREGROUND_MIN_OFFSET_KMS = 25.0


def foreground_decision(stars):
    """(on, reason): whether the catalogue reaches beyond the members.

    On when the catalogue carries a ``member_prob`` column with values below 1, or when any star
    lies more than FOREGROUND_CLIP robust widths sqrt(s^2 + err^2) (s = 1.4826 MAD of the
    velocities, common practice) and more than FOREGROUND_MIN_OFFSET_KMS from the median.
    """
    if stars.member_prob is not None and np.any(np.asarray(stars.member_prob) < 1):
        return True, "the catalogue's member_prob column has values below 1"
    v = np.asarray(stars.v, dtype=float)
    med = np.median(v)
    s = 1.4826 * np.median(np.abs(v - med))
    off = np.abs(v - med)
    far = (off > FOREGROUND_CLIP * np.sqrt(s**2 + np.asarray(stars.v_err) ** 2)) & (
        off > FOREGROUND_MIN_OFFSET_KMS
    )
    if far.any():
        return True, (
            f"{int(far.sum())} star(s) lie more than {FOREGROUND_CLIP:g} robust widths and "
            f"{FOREGROUND_MIN_OFFSET_KMS:g} km/s from the median velocity"
        )
    return False, (
        "every star lies within "
        f"{FOREGROUND_CLIP:g} robust widths or {FOREGROUND_MIN_OFFSET_KMS:g} km/s of the median "
        "velocity and there is no member_prob column: the catalogue looks like members only"
    )


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


def _estimators(stars, satellite, member_prob=None, binary_prob=None):
    """The classic mass estimators from the global dispersion of the likely single members.

    With a foreground model, stars with posterior member_prob < 0.5 are left out; with binaries,
    stars with binary_prob > 0.5 (velocity variables) too. The estimators assume neither.
    """
    use = np.ones(stars.n_stars, dtype=bool)
    why = []
    if member_prob is not None:
        use &= np.asarray(member_prob) >= 0.5
        why.append("member_prob >= 0.5")
    if binary_prob is not None:
        use &= np.asarray(binary_prob) <= 0.5
        why.append("binary_prob <= 0.5")
    if use.sum() < 3:
        use[:] = True
        why = ["all stars (fewer than 3 pass the selection)"]
    fit = dispersion_ml(np.asarray(stars.v)[use], np.asarray(stars.v_err)[use])
    r_e = satellite.r_half_circ_kpc
    r_e_err = satellite.r_half_err_pc * 1e-3 * np.sqrt(1 - satellite.ellipticity)
    out = {
        "sigma_los_kms": fit.sigma,
        "sigma_los_err_kms": fit.sigma_err,
        "n_stars_used": int(use.sum()),
        "selection": " and ".join(why) if why else "all stars",
    }
    for name in ("walker2009", "wolf2010", "errani2018"):
        if fit.sigma > 0:
            q = propagate(name, fit.sigma, r_e, fit.sigma_err, r_e_err, method="montecarlo")
        else:
            q = None
        out[f"{name}_msun"] = None if q is None else q["median"]
        out[name] = q
        out[f"{name}_radius_pc"] = ESTIMATOR_RADIUS[name] * r_e * 1e3
    return out


@dataclasses.dataclass(frozen=True)
class _Binaries:
    """The binary part of the likelihood: mixture scales, weights and binary-fraction prior."""

    scales: np.ndarray
    weights: np.ndarray
    fraction_range: tuple
    population: object


class _Likelihoods:
    """Per-population data for the fit (binary mixture and multi-epoch terms computed once)."""

    def __init__(self, stars, settings, foreground_on):
        self.stars, self.settings, self.foreground_on = stars, settings, foreground_on
        self._cache = {}

    def get(self, spec):
        from halo.inference.likelihood import epoch_terms
        from halo.physics.binaries import BinaryPopulation, fit_mixture, load_mixture

        stars, settings = self.stars, self.settings
        mp = stars.member_prob if self.foreground_on else None
        if spec is None or not settings.binaries:
            key = None
        else:
            key = (spec.binary_population(), spec.binary_fraction_range)
        if key in self._cache:
            return self._cache[key]
        if key is None:
            data = make_fit_data(stars.v, stars.v_err, stars.radius_deg, member_prob=mp)
            self._cache[key] = (None, data, None)
            return self._cache[key]
        pop, frac = key
        if pop == BinaryPopulation():
            mixture = load_mixture()
        else:
            _say("binary population differs from the default: fitting its mixture", settings)
            mixture = fit_mixture(pop, n=400_000)
        n_multi = int(np.sum(np.asarray(stars.n_epochs) > 1))
        if n_multi:
            _say(
                f"binary orbits at the epochs of {n_multi} multi-epoch star(s) "
                f"({settings.n_orbits} orbits each)",
                settings,
            )
        epochs = epoch_terms(stars, mixture, pop, n_orbits=settings.n_orbits)
        data = make_fit_data(stars.v, stars.v_err, stars.radius_deg, epochs=epochs, member_prob=mp)
        b = _Binaries(mixture.scales, mixture.weights, frac, pop)
        self._cache[key] = (b, data, epochs)
        return self._cache[key]


def load_posterior(run_dir, name):
    """(idata, samples) of model ``name`` in an earlier output folder (samples flattened over
    chains, chain-major, as numpyro's ``get_samples``)."""
    import arviz as az

    idata = az.from_netcdf(str(Path(run_dir) / name / "posterior.nc"))
    post = idata["posterior"]
    samples = {}
    for k in post.data_vars:
        a = np.asarray(post[k].values)
        samples[k] = a.reshape((-1,) + a.shape[2:])
    return idata, samples


#: warm start: the chains start at draws of an earlier posterior of the same model and keep its
#: covariance as their (dense) mass matrix, so the warmup only adapts the step size and needs
#: this fraction of the requested iterations (at least WARM_WARMUP_MIN)
WARM_WARMUP_FRACTION = 0.2
WARM_WARMUP_MIN = 150


def _warm_init(model, latent, prev_samples, chains, seed):
    """Warm start from an earlier posterior: (unconstrained starting points for ``chains``
    chains, inverse mass matrix = covariance of the unconstrained draws over the latent sites in
    sorted name order, as numpyro's dense mass matrix orders them), or None when the earlier run
    lacks one of the model's sites."""
    from halo.inference.evidence import unconstrained_draws

    if any(k not in prev_samples for k in latent):
        return None
    names = sorted(latent)
    n = len(prev_samples[names[0]])
    sub = {k: np.asarray(prev_samples[k]) for k in names}
    flat, layout = unconstrained_draws(model, sub, names)
    if not np.all(np.isfinite(flat)):
        return None
    pick = np.random.default_rng(seed).choice(n, size=chains, replace=n < chains)
    out, i = {}, 0
    for k, size in layout:
        shape = np.shape(sub[k])[1:]
        out[k] = flat[pick, i : i + size].reshape((chains,) + shape)
        i += size
    m = len(flat)
    cov = np.atleast_2d(np.cov(flat, rowvar=False))
    # the same light regularisation numpyro applies to its own warmup estimate (keeps the
    # matrix positive definite without blurring strong correlations)
    cov = m / (m + 5.0) * cov + 1e-3 * 5.0 / (m + 5.0) * np.eye(len(cov))
    return out, cov


def _model_result(
    name, spec, satellite, stars, likes, settings, sigma_angles, out_dir, reuse=None, warm=None
):
    """Fit one model (or, with ``reuse`` = an earlier output folder whose inputs were identical,
    take its posterior and evidence); ``warm`` = an earlier folder to start the chains from."""
    import shutil
    from types import SimpleNamespace

    import arviz as az

    binaries, data, epochs = likes.get(spec)
    foreground = Foreground(satellite.foreground) if likes.foreground_on else None
    model = make_model(spec, satellite, data, binaries=binaries, foreground=foreground)
    latent = _latent_sites(model)
    t0 = time.perf_counter()
    start = None
    if reuse is not None:
        _say(f"[{name}] unchanged inputs: reusing the posterior of {reuse}", settings)
        idata, samples = load_posterior(reuse, name)
        prev = json.loads((Path(reuse) / "summary.json").read_text())["models"][name]
        ev = SimpleNamespace(**{k: prev["evidence"][k] for k in ("log_z", "log_z_err")})
        t_sample = 0.0
        post_path = Path(out_dir) / name / "posterior.nc"
        post_path.parent.mkdir(parents=True, exist_ok=True)
        with atomic_path(post_path) as tmp:
            shutil.copyfile(Path(reuse) / name / "posterior.nc", tmp)
    else:
        warmup, init, inv_mass, adapt = settings.warmup, None, None, True
        if warm is not None:
            try:
                prev = json.loads((Path(warm) / "summary.json").read_text())
                prev_ok = prev["models"][name].get("converged", False)
                ps = prev["settings"]
                same = (ps.get("binaries"), ps.get("foreground")) == (
                    settings.binaries,
                    bool(likes.foreground_on),
                )
                _, prev_samples = load_posterior(warm, name)
                got = _warm_init(model, latent, prev_samples, settings.chains, settings.seed)
            except (OSError, KeyError, ValueError):
                got = None
            if got is not None and prev_ok and same:
                init, inv_mass = got
                adapt = False
                warmup = min(
                    settings.warmup,
                    max(WARM_WARMUP_MIN, int(WARM_WARMUP_FRACTION * settings.warmup)),
                )
                start = {"from": str(warm), "warmup": warmup, "mass_matrix": "earlier posterior"}
                _say(
                    f"[{name}] warm start from {warm} ({warmup} warmup iterations, mass matrix "
                    "of the earlier posterior)",
                    settings,
                )
            elif got is not None:
                # an unconverged posterior, or one of another likelihood (binaries or foreground
                # switched), is no firm guide to the geometry: start there, but adapt the mass
                # matrix over the full warmup
                init, inv_mass = got
                start = {"from": str(warm), "warmup": warmup, "mass_matrix": "adapted"}
                why = (
                    "the earlier run did not converge"
                    if not prev_ok
                    else "the earlier run had other binary/foreground settings"
                )
                _say(
                    f"[{name}] warm start from {warm}; {why}: full warmup ({warmup}), mass "
                    "matrix adapted",
                    settings,
                )
        _say(
            f"[{name}] sampling: {settings.chains} chains x {warmup} warmup + "
            f"{settings.draws} draws",
            settings,
        )
        mcmc = run_nuts(
            model,
            chains=settings.chains,
            warmup=warmup,
            draws=settings.draws,
            seed=settings.seed,
            progress=settings.progress,
            init_params=init,
            inverse_mass_matrix=inv_mass,
            adapt_mass_matrix=adapt,
        )
        t_sample = time.perf_counter() - t0
        samples = {k: np.asarray(v) for k, v in mcmc.get_samples().items()}
        idata = az.from_numpyro(mcmc, log_likelihood=True)
    diag = diagnostics(idata, latent)
    if not diag.converged:
        _say(f"[{name}] WARNING: NOT CONVERGED: {'; '.join(diag.problems())}", settings)
    if reuse is None:
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
    probs = {"member_prob": None, "binary_prob": None}
    if binaries is not None or foreground is not None:
        terms_model = make_model(
            spec, satellite, data, binaries=binaries, foreground=foreground, keep_terms=True
        )
        probs = star_probabilities(terms_model, samples, latent)
    _say(f"[{name}] derived quantities", settings)
    der = derive(
        spec,
        satellite,
        samples,
        sigma_angles_deg=sigma_angles,
        rng=np.random.default_rng(settings.seed),
    )
    if reuse is None:
        post_path = Path(out_dir) / name / "posterior.nc"
        post_path.parent.mkdir(parents=True, exist_ok=True)
        with atomic_path(post_path) as tmp:
            idata.to_netcdf(str(tmp))
    return {
        "reused_from": None if reuse is None else str(reuse),
        "warm_start": start,
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
        "binary_prob": probs["binary_prob"],
        "member_prob": probs["member_prob"],
        "data": data,
        "binaries": binaries,
        "epochs": epochs,
    }


def star_probabilities(terms_model, samples, latent, batch=256):
    """Posterior mean per-star probabilities of membership and of being a binary.

    Per draw, with the per-star terms of :mod:`halo.inference.likelihood`:
    member: p L_member / (p L_member + (1 - p) L_fg); binary (given membership):
    f_b L_binary / ((1 - f_b) L_single + f_b L_binary). Averaged over the draws. Returns a dict
    with ``member_prob`` and ``binary_prob`` (None when the part is not modelled).
    """
    import jax
    import jax.numpy as jnp
    from numpyro import handlers

    names = (
        "ll_single",
        "ll_binary",
        "ll_member",
        "ll_foreground",
        "log_prior_member",
        "log_prior_non",
    )

    def one(params):
        tr = handlers.trace(handlers.substitute(handlers.seed(terms_model, 0), data=params))
        t = tr.get_trace()
        out = {k: t[k]["value"] for k in names if k in t}
        if "ll_binary" in out:
            fb = params["f_binary"]
            a = jnp.log1p(-fb) + out["ll_single"]
            b = jnp.log(fb) + out["ll_binary"]
            out["p_binary"] = jnp.exp(b - jnp.logaddexp(a, b))
        if "ll_foreground" in out:
            a = out["log_prior_member"] + out["ll_member"]
            b = out["log_prior_non"] + out["ll_foreground"]
            out["p_member"] = jnp.exp(a - jnp.logaddexp(a, b))
        return {k: out[k] for k in ("p_binary", "p_member") if k in out}

    fn = jax.jit(jax.vmap(one))
    n = len(next(iter(samples.values())))
    sums = {}
    for k in range(0, n, batch):
        sub = {key: jnp.asarray(samples[key][k : k + batch]) for key in latent}
        res = fn(sub)
        for key, val in res.items():
            sums[key] = sums.get(key, 0.0) + np.asarray(val).sum(axis=0)
    return {
        "member_prob": sums["p_member"] / n if "p_member" in sums else None,
        "binary_prob": sums["p_binary"] / n if "p_binary" in sums else None,
    }


def _write_members(path, stars, results, names, satellite):
    """members.ecsv: per star id, member_prob, binary_prob, radius used and epoch count."""
    from astropy.table import Table

    dark = [n for n in names if n != STARS_ONLY]
    ref = dark[0] if dark else STARS_ONLY
    res = results[ref]
    t = Table()
    t["id"] = np.asarray(stars.id).astype(str)
    mp = res["member_prob"]
    if mp is None:
        mp = np.ones(stars.n_stars) if stars.member_prob is None else stars.member_prob
    t["member_prob"] = np.asarray(mp, dtype=float)
    if stars.member_prob is not None:
        t["member_prob_prior"] = np.asarray(stars.member_prob, dtype=float)
    bp = res["binary_prob"]
    t["binary_prob"] = np.full(stars.n_stars, np.nan) if bp is None else bp
    t["radius_deg"] = np.asarray(stars.radius_deg)
    t["radius_pc"] = np.tan(np.radians(np.asarray(stars.radius_deg))) * satellite.distance_kpc * 1e3
    t["n_epochs"] = np.asarray(stars.n_epochs)
    t["v_mean_kms"] = np.asarray(stars.v)
    t["v_mean_err_kms"] = np.asarray(stars.v_err)
    if res.get("epochs") is not None:
        t["binary_mc_ess"] = np.asarray(res["epochs"].ess)
    for n in names:
        if n == ref:
            continue
        if results[n]["member_prob"] is not None:
            t[f"member_prob_{n}"] = results[n]["member_prob"]
    t.meta["model"] = ref
    t.meta["note"] = (
        f"member_prob: posterior membership probability under model '{ref}' (1 when the "
        "foreground is not modelled, or the catalogue's member_prob when given and not modelled); "
        "member_prob_prior: the catalogue's column; binary_prob: posterior probability of being a "
        "binary if a member (NaN when binaries are not modelled); radius_pc: circularised, at the "
        "satellite file's distance; v_mean_kms: inverse-variance weighted mean over the epochs; "
        "binary_mc_ess: effective number of Monte Carlo orbits behind the multi-epoch binary term"
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
    from halo.results.derived import PROFILE_RADII_PC

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
        "sampling_time_s": res["sampling_time_s"],
        "binary_fraction": (
            quantiles(res["samples"]["f_binary"]) if "f_binary" in res["samples"] else None
        ),
        "effective_members": float(
            res["data"].n_stars if res["member_prob"] is None else np.sum(res["member_prob"])
        ),
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


def _foreground_setting(stars, settings):
    if settings.foreground == "auto":
        return foreground_decision(stars)
    if settings.foreground:
        return True, "switched on by the user"
    return False, "switched off by the user"


def _resolution(res):
    """Whether the data resolve the dispersion (membership and v_sys from the fit ``res``)."""
    from halo.inference.likelihood import dispersion_resolution

    b = res["binaries"]
    out = dispersion_resolution(
        np.asarray(res["data"].v),
        np.asarray(res["data"].v_err),
        float(np.median(res["samples"]["v_sys"])),
        weights=res["member_prob"],
        binaries=b,
        epochs=res["epochs"],
        fraction_range=(0.0, 1.0) if b is None else b.fraction_range,
    )
    if out["resolved"]:
        out["message"] = (
            f"velocity dispersion resolved: {out['sigma_median_kms']:.2f} "
            f"(+{out['sigma_p84_kms'] - out['sigma_median_kms']:.2f}/"
            f"-{out['sigma_median_kms'] - out['sigma_p16_kms']:.2f}) km/s"
        )
    else:
        out["message"] = (
            "the velocity dispersion is NOT RESOLVED by these data (sigma = 0 is allowed: "
            f"2 delta ln L = {out['two_delta_ln_l']:.2f} < 4); quote upper limits: sigma_los < "
            f"{out['sigma_upper95_kms']:.2f} km/s (95%) and the models' 95% upper limits on "
            "the mass (upper_limits in summary.json)"
        )
    return out


def _upper_limits(res):
    der = res["derived"]
    out = {"m_half_msun_upper95": float(np.percentile(der["m_half_msun"], 95))}
    if "log10_j" in der:
        keys = [f"{a:g}" for a in STANDARD_ANGLES] + ["2rh"]
        out["log10_j_upper95"] = {
            k: float(np.percentile(der["log10_j"][:, i], 95)) for i, k in enumerate(keys)
        }
        out["log10_d_upper95"] = {
            k: float(np.percentile(der["log10_d"][:, i], 95)) for i, k in enumerate(keys)
        }
    return out


def fit(
    stars,
    satellite,
    out_dir,
    models=DEFAULT_MODELS,
    settings=None,
    satellite_path=None,
    reuse=None,
    warm=None,
):
    """Fit ``models`` (spec names or paths) to ``stars`` (:class:`halo.inputs.catalogue.StarData`).

    ``reuse``: {model name: earlier output folder} whose results are taken as they are (the
    caller guarantees identical inputs); ``warm``: {model name: earlier output folder} whose
    posterior starts the chains. Writes the output folder and returns the summary dict.
    """
    reuse, warm = reuse or {}, warm or {}
    settings = FitSettings() if settings is None else settings
    out_dir = Path(out_dir)
    loaded = [load_spec(n) for n in dict.fromkeys(models)]
    if STARS_ONLY not in [s.name for s in loaded]:
        loaded.append(load_spec(STARS_ONLY))
    names = [s.name for s in loaded]
    specs = {s.name: s for s in loaded}
    if len(set(names)) != len(names):
        raise InputError("--model: two specs share the same name")
    fg_on, fg_reason = _foreground_setting(stars, settings)
    _say(f"foreground {'ON' if fg_on else 'off'}: {fg_reason}", settings)
    _say(f"binaries {'ON' if settings.binaries else 'off'}", settings)
    likes = _Likelihoods(stars, settings, fg_on)
    sig_angles = _sigma_angles(stars)
    results = {}
    for n in [STARS_ONLY] + [m for m in names if m != STARS_ONLY]:
        results[n] = _model_result(
            n,
            specs[n],
            satellite,
            stars,
            likes,
            settings,
            sig_angles,
            out_dir,
            reuse=reuse.get(n),
            warm=warm.get(n),
        )
    ref = next((n for n in names if n != STARS_ONLY), STARS_ONLY)
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
        "settings": {**settings.as_dict(), "foreground": fg_on, "foreground_reason": fg_reason},
        "estimators": _estimators(
            stars, satellite, results[ref]["member_prob"], results[ref]["binary_prob"]
        ),
        "models": {},
        "notes": list(stars.notes),
        "warnings": list(stars.warnings),
    }
    if stars.member_prob is not None and not fg_on:
        summary["warnings"].append(
            "the catalogue's member_prob column is ignored: the foreground is switched off"
        )
    summary["dispersion"] = _resolution(results[ref])
    if not summary["dispersion"]["resolved"]:
        summary["warnings"].append(summary["dispersion"]["message"])
        _say("WARNING: " + summary["dispersion"]["message"], settings)
    summary["upper_limits"] = (
        {n: _upper_limits(results[n]) for n in names}
        if not summary["dispersion"]["resolved"]
        else None
    )
    few = [] if results[STARS_ONLY]["epochs"] is None else results[STARS_ONLY]["epochs"].ess
    if len(few) and np.any((np.asarray(stars.n_epochs) > 1) & (np.asarray(few) < 20)):
        k = int(np.sum((np.asarray(stars.n_epochs) > 1) & (np.asarray(few) < 20)))
        summary["notes"].append(
            f"{k} multi-epoch star(s) have fewer than 20 effective Monte Carlo orbits behind their "
            "binary term (their velocity changes are extreme for the orbit population); see "
            "binary_mc_ess in members.ecsv"
        )
    if satellite_path is not None:
        summary["satellite_sha256"] = hashlib.sha256(Path(satellite_path).read_bytes()).hexdigest()
    for n in names:
        entry = _summarise_model(results[n], settings)
        entry["spec_source"] = str(specs[n].source)
        entry["reused_from"] = results[n]["reused_from"]
        entry["warm_start"] = results[n]["warm_start"]
        if n != STARS_ONLY:
            entry["vs_stars_only"] = _compare(results[n], results[STARS_ONLY])
        summary["models"][n] = entry
        if not entry["converged"]:
            summary["warnings"].append(f"model {n} NOT CONVERGED: {'; '.join(entry['problems'])}")
    summary = _clean(summary)
    from halo.products.plots import make_figures
    from halo.products.text_report import write_summary_table

    _say("writing figures", settings)
    figures = make_figures(results, stars, satellite, sig_angles, out_dir / "figures", summary)
    summary["figures"] = [str(p.relative_to(out_dir)) for p in figures]
    write_summary_table(summary, out_dir / "summary.ecsv")
    _write_members(out_dir / "members.ecsv", stars, results, names, satellite)
    write_json(out_dir / "summary.json", summary)
    from halo.products.html_report import write_html_report

    write_html_report(out_dir)
    return summary
