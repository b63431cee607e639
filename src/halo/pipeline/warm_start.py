"""Warm start: the chains of a refit start at draws of an earlier posterior of the same model.

The earlier run folder is read through :mod:`halo.products.rundir`. When that run converged with
the same binary/foreground settings its covariance is kept as the (dense) mass matrix, so the
warmup only adapts the step size and needs a fraction of the requested iterations; otherwise the
chains start there but adapt the mass matrix over the full warmup. When the earlier run cannot
be read (or lacks a parameter of the model) the chains start cold with the full warmup: said on
stderr and recorded with its reason in the summary's ``warm_start`` (``fallback``, ``reason``).
"""

import dataclasses

import numpy as np

from halo.pipeline.settings import say
from halo.products.rundir import load_posterior, read_summary

__all__ = [
    "WARM_WARMUP_FRACTION",
    "WARM_WARMUP_MIN",
    "Start",
    "warm_init",
    "warm_plan",
    "warm_start",
]

#: warm start: the chains start at draws of an earlier posterior of the same model and keep its
#: covariance as their (dense) mass matrix, so the warmup only adapts the step size and needs
#: this fraction of the requested iterations (at least WARM_WARMUP_MIN)
WARM_WARMUP_FRACTION = 0.2
WARM_WARMUP_MIN = 150


@dataclasses.dataclass(frozen=True)
class Start:
    """How the chains start: warmup length, initial points, inverse mass matrix, whether warmup
    adapts it, and the record for the summary (``warm_start``; None for a fresh start)."""

    warmup: int
    init: dict | None = None
    inverse_mass_matrix: np.ndarray | None = None
    adapt_mass_matrix: bool = True
    record: dict | None = None


def warm_init(model, latent, prev_samples, chains, seed):
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


def _reason(exc):
    """A short line about why an earlier run could not be read."""
    text = str(exc).splitlines()[0] if str(exc) else ""
    return f"{exc.__class__.__name__}: {text}" if text else exc.__class__.__name__


def warm_plan(warm, name, settings, foreground_on):
    """How a warm start from the earlier output folder ``warm`` would go, from its summary:
    ("warm", None) with a short warmup and the earlier mass matrix; ("warm-full", why) starting
    there with the full warmup; ("fit", why) a cold start, the earlier run being unreadable."""
    try:
        prev = read_summary(warm)
        prev_ok = bool(prev["models"][name].get("converged", False))
        ps = prev["settings"]
        same = (ps.get("binaries"), ps.get("foreground")) == (
            settings.binaries,
            bool(foreground_on),
        )
    except (OSError, KeyError, ValueError, TypeError, AttributeError) as exc:
        return "fit", f"cannot read the earlier run's summary.json ({_reason(exc)})"
    if prev_ok and same:
        return "warm", None
    if not prev_ok:
        return "warm-full", "the earlier run did not converge"
    return "warm-full", "the earlier run had other binary/foreground settings"


def _earlier_points(warm, name, model, latent, settings):
    """(warm_init result, None) or (None, why the earlier posterior cannot start the chains)."""
    try:
        _, prev_samples = load_posterior(warm, name)
        got = warm_init(model, latent, prev_samples, settings.chains, settings.seed)
    except Exception as exc:  # noqa: BLE001 - any unreadable posterior: a cold start, said
        return None, f"cannot read its posterior ({_reason(exc)})"
    if got is None:
        return None, "its posterior lacks a parameter of this model or holds non-finite draws"
    return got, None


def _cold(warm, name, why, settings):
    """The :class:`Start` of a warm start that fell back to a cold start, said and recorded."""
    say(
        f"[{name}] WARNING: cannot warm-start from {warm}: {why}; cold start instead "
        f"(full warmup, {settings.warmup} iterations)",
        settings,
    )
    record = {
        "from": str(warm),
        "fallback": "cold start",
        "reason": why,
        "warmup": settings.warmup,
        "mass_matrix": "adapted",
    }
    return Start(settings.warmup, record=record)


def warm_start(warm, name, model, latent, settings, foreground_on):
    """The :class:`Start` of model ``name``: fresh (``warm`` None), from the earlier output
    folder ``warm``, or a cold start recorded with its reason when that folder is unusable."""
    if warm is None:
        return Start(settings.warmup)
    kind, why = warm_plan(warm, name, settings, foreground_on)
    if kind == "fit":
        return _cold(warm, name, why, settings)
    got, bad = _earlier_points(warm, name, model, latent, settings)
    if got is None:
        return _cold(warm, name, bad, settings)
    init, inv_mass = got
    if kind == "warm":
        warmup = min(
            settings.warmup, max(WARM_WARMUP_MIN, int(WARM_WARMUP_FRACTION * settings.warmup))
        )
        say(
            f"[{name}] warm start from {warm} ({warmup} warmup iterations, mass matrix "
            "of the earlier posterior)",
            settings,
        )
        record = {"from": str(warm), "warmup": warmup, "mass_matrix": "earlier posterior"}
        return Start(warmup, init, inv_mass, False, record)
    # an unconverged posterior, or one of another likelihood (binaries or foreground switched),
    # is no firm guide to the geometry: start there, but adapt the mass matrix over the full
    # warmup
    warmup = settings.warmup
    say(
        f"[{name}] warm start from {warm}; {why}: full warmup ({warmup}), mass matrix adapted",
        settings,
    )
    record = {"from": str(warm), "warmup": warmup, "mass_matrix": "adapted", "why": why}
    return Start(warmup, init, inv_mass, True, record)
