"""The main job: fit every model to a catalogue, compare with stars only, write the results.

Output folder (contract in the design notes)::

    DIR/summary.json          settings, estimators, per-model diagnostics, parameters, derived
                              quantities, evidence, LOO and the comparison with stars only
    DIR/summary.ecsv          the same quantities as a table
    DIR/<model>/posterior.nc  arviz posterior, sample stats and pointwise log-likelihood (netCDF)
    DIR/jd_factors.ecsv       log10 J and D per dark model and cone, converged and preferred flags
    DIR/figures/*.png

Every file is written atomically; the stars-only model is always fitted because every other model
is compared with it. One model's run is :mod:`halo.pipeline.model_run`, the summary is built by
:mod:`halo.results.summary`.
"""

import dataclasses
import time
from pathlib import Path

import numpy as np

from halo.core import interrupt
from halo.core.errors import InputError
from halo.core.fileio import write_json
from halo.core.vocabulary import DEFAULT_MODELS, STARS_ONLY
from halo.inputs.spec import load_spec
from halo.inputs.spec_anisotropy import with_anisotropy
from halo.pipeline.likelihoods import Likelihoods
from halo.pipeline.model_run import run_model
from halo.pipeline.settings import FitSettings, foreground_setting, say
from halo.results.members import write_members
from halo.results.nature import nature_section
from halo.results.summary import build_summary, clean

__all__ = ["FitSettings", "DEFAULT_MODELS", "fit"]


def _specs(models, anisotropy=None):
    """{name: spec} of ``models`` (names or paths) in the order given, stars-only added last;
    ``anisotropy``: a kind that replaces every spec's own (stars-only's too, so that the
    comparison is like with like)."""
    loaded = [load_spec(n) for n in dict.fromkeys(models)]
    if STARS_ONLY not in [s.name for s in loaded]:
        loaded.append(load_spec(STARS_ONLY))
    loaded = [with_anisotropy(s, anisotropy) for s in loaded]
    names = [s.name for s in loaded]
    if len(set(names)) != len(names):
        raise InputError("--model: two specs share the same name")
    return shared_binaries({s.name: s for s in loaded})


def _binary_key(spec):
    return spec.binary_population(), spec.binary_fraction_range


def shared_binaries(specs):
    """``specs`` with one binary population and binary-fraction prior for every model.

    A Bayes factor compares two likelihoods of the same data only when both models treat the
    binaries alike: the dark specs must agree among themselves (else InputError naming their
    files), and the stars-only comparator takes their ``[binaries]`` table when its own is the
    default (a stars-only spec with another table of its own is refused too).
    """
    dark = [s for s in specs.values() if s.name != STARS_ONLY]
    if not dark:
        return specs
    keys = {_binary_key(s) for s in dark}
    if len(keys) > 1:
        files = ", ".join(str(s.source) for s in dark)
        raise InputError(
            f"{files}: the models' [binaries] tables differ (orbit population or fraction "
            "prior); every model of a comparison must share them"
        )
    ref, stars = dark[0], specs[STARS_ONLY]
    if _binary_key(stars) != _binary_key(ref):
        if stars.binaries:
            raise InputError(
                f"{stars.source}, {ref.source}: the [binaries] tables of the stars-only and the "
                "dark models differ; every model of a comparison must share them"
            )
        specs = {**specs, STARS_ONLY: dataclasses.replace(stars, binaries=dict(ref.binaries))}
    return specs


def shared_settings(specs, settings, foreground, satellite):
    """What every model of the comparison shares (summary.json ``comparison``): the binary
    population and binary-fraction prior (None with binaries off) and the foreground treatment."""
    fg = None
    if foreground[0]:
        comps = satellite.foreground
        fg = "one Gaussian, free mean and width" if comps is None else [list(c) for c in comps]
    out = {"binaries": None, "foreground": fg}
    if settings.binaries:
        pop, frac = _binary_key(specs[STARS_ONLY])
        out["binaries"] = {
            "population": dataclasses.asdict(pop),
            "fraction_range": list(frac),
            "spec_table": dict(specs[STARS_ONLY].binaries),
        }
    out["note"] = (
        "every model, stars-only included, uses this binary population, binary-fraction prior "
        "and foreground treatment"
    )
    return out


def _sigma_angles(stars):
    th = np.asarray(stars.radius_deg)
    th = th[th > 0]
    return np.geomspace(th.min(), th.max(), 24)


def _write_outputs(out_dir, summary, results, stars, satellite, ctx):
    """Figures, summary.ecsv, members.ecsv, summary.json and the HTML report."""
    from halo.products.html_report import write_html_report
    from halo.products.jd_tables import write_fit_jd_table
    from halo.products.plots import make_figures
    from halo.products.text_report import write_summary_table

    say("writing figures", ctx["settings"])
    t0 = time.perf_counter()
    figures = make_figures(
        results, stars, satellite, ctx["sigma_angles"], out_dir / "figures", summary
    )
    summary["figures"] = [str(p.relative_to(out_dir)) for p in figures]
    # wall time per stage [s]: each model's own stages are under models.<name>.stage_times_s
    summary["stage_times_s"] = {
        "before_models": ctx["t_models"] - ctx["t_start"],
        "models": {n: r["time_s"] for n, r in results.items()},
        "summary": t0 - ctx["t_summary"] - ctx["nature_s"],
        "nature": ctx["nature_s"],
        "figures": time.perf_counter() - t0,
    }
    write_summary_table(summary, out_dir / "summary.ecsv")
    write_members(out_dir / "members.ecsv", stars, results, list(summary["models"]), satellite)
    write_fit_jd_table(out_dir / "jd_factors.ecsv", summary, results, satellite)
    write_json(out_dir / "summary.json", summary)
    write_html_report(out_dir)


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
    t_start = time.perf_counter()
    reuse, warm = reuse or {}, warm or {}
    settings = FitSettings() if settings is None else settings
    out_dir = Path(out_dir)
    specs = _specs(models, settings.anisotropy)
    fg_on, fg_reason = foreground_setting(stars, settings)
    say(f"foreground {'ON' if fg_on else 'off'}: {fg_reason}", settings)
    say(f"binaries {'ON' if settings.binaries else 'off'}", settings)
    ctx = {
        "satellite": satellite,
        "likes": Likelihoods(stars, settings, fg_on),
        "settings": settings,
        "sigma_angles": _sigma_angles(stars),
        "out_dir": out_dir,
        "t_start": t_start,
        "t_models": time.perf_counter(),
    }
    results = {}
    for n in [STARS_ONLY] + [m for m in specs if m != STARS_ONLY]:
        interrupt.check()
        results[n] = run_model(n, specs[n], ctx, reuse=reuse.get(n), warm=warm.get(n))
        interrupt.check()
    ctx["t_summary"] = time.perf_counter()
    summary = build_summary(
        stars, satellite, settings, (fg_on, fg_reason), results, specs, satellite_path
    )
    summary["comparison"] = clean(shared_settings(specs, settings, (fg_on, fg_reason), satellite))
    t_nature = time.perf_counter()
    nature = nature_section(
        stars, satellite, results, specs, settings, summary["models"], tides=ctx.get("tides")
    )
    summary["nature"] = clean(nature)
    ctx["nature_s"] = time.perf_counter() - t_nature
    if not summary["dispersion"]["resolved"]:
        say("WARNING: " + summary["dispersion"]["message"], settings)
    interrupt.check()
    _write_outputs(out_dir, summary, results, stars, satellite, ctx)
    interrupt.check()
    return summary
