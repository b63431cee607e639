"""One model of a fit: sample it (fresh or warm-started) or reuse an earlier posterior, then its
evidence, LOO, per-star probabilities and derived quantities; writes ``<model>/posterior.nc``."""

import time
import warnings
from types import SimpleNamespace

import numpy as np

from halo.core.fileio import atomic_path
from halo.inference.evidence import log_evidence
from halo.inference.model import Foreground, make_model
from halo.inference.sampling import diagnostics, run_nuts
from halo.pipeline.settings import say
from halo.pipeline.warm_start import warm_start
from halo.products.rundir import load_posterior, posterior_path, read_summary
from halo.results.derived import derive
from halo.results.members import star_probabilities
from halo.results.truncation import derived_group, model_tides, shared_tides, truncation_entry

__all__ = ["latent_sites", "run_model"]


def latent_sites(model):
    """Names of the model's latent (unobserved) sample sites, in model order.

    The model is traced abstractly (``jax.eval_shape``): nothing is computed, so this costs a
    trace (0.2-0.5 s) instead of an op-by-op run of the Jeans solve (1-10 s, measured).
    """
    import jax
    from numpyro import handlers

    names = []

    def trace():
        tr = handlers.trace(handlers.seed(model, 0)).get_trace()
        names.extend(
            k for k, s in tr.items() if s["type"] == "sample" and not s.get("is_observed", False)
        )
        return 0.0

    jax.eval_shape(trace)
    return names


def _reuse(name, reuse, out_dir, settings):
    """(idata, samples, evidence) of model ``name`` from the earlier folder ``reuse`` (its
    posterior file is written anew into ``out_dir`` by :func:`run_model`, with this run's
    ``derived`` group)."""
    say(f"[{name}] unchanged inputs: reusing the posterior of {reuse}", settings)
    idata, samples = load_posterior(reuse, name)
    idata = idata.load() if hasattr(idata, "load") else idata  # the earlier file is closed
    prev = read_summary(reuse)["models"][name]
    ev = SimpleNamespace(**{k: prev["evidence"][k] for k in ("log_z", "log_z_err")})
    return idata, samples, ev


def _sample(name, model, latent, settings, start):
    """(idata, samples) of NUTS on ``model`` started as ``start`` says."""
    import arviz as az

    say(
        f"[{name}] sampling: {settings.chains} chains x {start.warmup} warmup + "
        f"{settings.draws} draws",
        settings,
    )
    mcmc = run_nuts(
        model,
        chains=settings.chains,
        warmup=start.warmup,
        draws=settings.draws,
        seed=settings.seed,
        progress=settings.progress,
        init_params=start.init,
        inverse_mass_matrix=start.inverse_mass_matrix,
        adapt_mass_matrix=start.adapt_mass_matrix,
    )
    samples = {k: np.asarray(v) for k, v in mcmc.get_samples().items()}
    return _real_stars(az.from_numpyro(mcmc, log_likelihood=True), model.n_stars), samples


def _real_stars(idata, n):
    """``idata`` with its per-star groups (pointwise log-likelihood, observed velocities) cut
    back to the ``n`` real stars: the sampler ran the catalogue padded to its bucket (padded stars
    contribute 0), so LOO and Pareto k are those of the real stars."""
    for group in ("log_likelihood", "observed_data"):
        if group in idata.children:
            ds = idata[group].to_dataset()
            idata[group] = ds.isel({d: slice(0, n) for d in ds.dims if d.startswith("v_dim")})
    return idata


def _loo(idata):
    """(PSIS-LOO, the first sentence of each warning arviz gave)."""
    import arviz as az

    with warnings.catch_warnings(record=True) as caught:
        # arviz warns about large Pareto k; the summary reports them per model instead
        warnings.simplefilter("always")
        loo = az.loo(idata, pointwise=True)
    return loo, [str(w.message).split(".")[0] for w in caught]


def _posterior(name, model, latent, ctx, reuse, warm):
    """(idata, samples, evidence or None, warm-start record, sampling time) of one model."""
    settings = ctx["settings"]
    if reuse is not None:
        idata, samples, ev = _reuse(name, reuse, ctx["out_dir"], settings)
        return idata, samples, ev, None, 0.0
    t0 = time.perf_counter()
    start = warm_start(warm, name, model, latent, settings, ctx["likes"].foreground_on)
    idata, samples = _sample(name, model, latent, settings, start)
    return idata, samples, None, start.record, time.perf_counter() - t0


def _star_probabilities(spec, satellite, data, binaries, foreground, samples, latent):
    """Per-star membership and binary probabilities (None without binaries and foreground)."""
    if binaries is None and foreground is None:
        return {"member_prob": None, "binary_prob": None}
    terms_model = make_model(
        spec, satellite, data, binaries=binaries, foreground=foreground, keep_terms=True
    )
    return star_probabilities(terms_model, samples, latent)


def _derived(name, spec, ctx, samples):
    """(derived quantities, jd_truncation entry) of one model: each draw paired with a draw of
    the fit's tidal field (:mod:`halo.results.truncation`), J and D truncated at its Jacobi
    radius unless the settings switch it off."""
    settings = ctx["settings"]
    progress = (lambda m: say(m, settings)) if settings.progress else None
    tides = shared_tides(ctx, ctx["satellite"], samples, settings, progress)
    truncate = getattr(settings, "tidal_truncation", True)
    n = len(np.asarray(samples["distance"]).ravel())
    per_draw, pair = model_tides(tides, name, n, truncate)
    say(f"[{name}] derived quantities", settings)
    rng = np.random.default_rng(settings.seed)
    der = derive(
        spec, ctx["satellite"], samples, sigma_angles_deg=ctx["sigma_angles"], rng=rng,
        tides=per_draw,
    )  # fmt: skip
    if pair is not None:
        der["tidal_pair"] = pair
    return der, truncation_entry(tides, truncate, der)


def _write_posterior(idata, der, jd_trunc, path):
    """posterior.nc: the sampler's groups and the ``derived`` group (r_J per draw)."""
    group = derived_group(der, idata["posterior"].sizes["chain"], jd_trunc)
    if group is not None:
        idata["derived"] = group
    elif "derived" in idata.children:  # a reused posterior's earlier r_J no longer applies
        idata = idata.drop_nodes("derived")
    with atomic_path(path) as tmp:
        idata.to_netcdf(str(tmp))


class _StageClock:
    """Wall time per stage [s] (``laps``: stage -> seconds since the previous lap)."""

    def __init__(self):
        self.t0 = self.last = time.perf_counter()
        self.laps = {}

    def lap(self, stage):
        now = time.perf_counter()
        self.laps[stage] = self.laps.get(stage, 0.0) + now - self.last
        self.last = now

    def total(self):
        return time.perf_counter() - self.t0


def run_model(name, spec, ctx, reuse=None, warm=None):
    """Fit one model (or, with ``reuse`` = an earlier output folder whose inputs were identical,
    take its posterior and evidence); ``warm`` = an earlier folder to start the chains from.

    ``ctx``: dict with ``satellite``, ``likes`` (:class:`halo.pipeline.likelihoods.Likelihoods`),
    ``settings``, ``sigma_angles`` and ``out_dir``. Returns the model's result dict.
    """
    satellite, settings = ctx["satellite"], ctx["settings"]
    clock = _StageClock()
    binaries, data, epochs = ctx["likes"].get(spec)
    foreground = Foreground(satellite.foreground) if ctx["likes"].foreground_on else None
    model = make_model(spec, satellite, data, binaries=binaries, foreground=foreground)
    latent = latent_sites(model)
    clock.lap("data")
    idata, samples, ev, start, t_sample = _posterior(name, model, latent, ctx, reuse, warm)
    diag = diagnostics(idata, latent)
    clock.lap("sampling")
    if not diag.converged:
        say(f"[{name}] WARNING: NOT CONVERGED: {'; '.join(diag.problems())}", settings)
    if ev is None:
        say(f"[{name}] evidence (bridge sampling)", settings)
        ev = log_evidence(
            model,
            samples,
            latent,
            chains=settings.chains,
            seed=settings.seed,
            progress=settings.progress,
        )
    clock.lap("evidence")
    loo, loo_warnings = _loo(idata)
    clock.lap("loo")
    probs = _star_probabilities(spec, satellite, data, binaries, foreground, samples, latent)
    clock.lap("star_probabilities")
    der, jd_trunc = _derived(name, spec, ctx, samples)
    clock.lap("derived")
    _write_posterior(idata, der, jd_trunc, posterior_path(ctx["out_dir"], name))
    clock.lap("posterior_file")
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
        "jd_truncation": jd_trunc,
        "time_s": clock.total(),
        "stage_times_s": clock.laps,
        "sampling_time_s": t_sample,
        "loo_warnings": loo_warnings,
        "binary_prob": probs["binary_prob"],
        "member_prob": probs["member_prob"],
        "data": data,
        "binaries": binaries,
        "epochs": epochs,
    }
