"""`halo calibrate`: the whole simulation-based calibration, from prior draws to
DIR/calibration.json, DIR/calibration.ecsv and DIR/rank_histograms.png.

DIR/mocks/ holds the mocks, their truths, the calibration's satellite file and the batch manifest;
DIR/fits/ is the batch's output folder (:func:`halo.batch.runner.run_batch`: a rerun fits only
what is missing). Ranks are collected from every finished fit; failed fits are listed and left
out, unconverged ones are kept and listed under ``unconverged`` (and printed as a warning).
"""

import sys

from astropy.table import Table

from halo.batch.runner import _check_out_dir, run_batch
from halo.batch.sbc import write_mocks
from halo.batch.sbc_figure import rank_figure
from halo.batch.sbc_ranks import (
    collect_ranks,
    false_dark_matter,
    parameter_statistics,
    rank_statistics,
)
from halo.core.errors import InputError
from halo.core.fileio import write_ecsv, write_json
from halo.core.vocabulary import DEFAULT_MODELS, STARS_ONLY

__all__ = ["run_calibration", "fit_models", "format_calibration", "CALIBRATION_JSON"]

CALIBRATION_JSON, CALIBRATION_ECSV = "calibration.json", "calibration.ecsv"
FIGURE = "rank_histograms.png"
FITS_FOLDER = "fits"


def fit_models(design, models=None):
    """(models the fits run, the model whose posterior is ranked): the spec itself, and for a
    stars-only spec the dark models of ``models`` (default halo's) for the Bayes factor."""
    spec = design.spec
    ref = design.spec_name
    if spec.has_dark:
        return [ref], spec.name
    dark = [m for m in (models or DEFAULT_MODELS) if m != STARS_ONLY]
    if not dark:
        raise InputError("--model: a stars-only calibration needs a model with a halo")
    return dark + [ref], spec.name


def _check_draws(settings, n_keep, n_bins):
    if n_keep < 1:
        raise InputError(f"--rank-draws: expected a positive number, got {n_keep!r}")
    if n_bins < 2 or (n_keep + 1) % n_bins:
        raise InputError(
            f"--bins: L + 1 = {n_keep + 1} (--rank-draws) must be a multiple of "
            f"the bins, got {n_bins!r}"
        )
    if settings.chains * settings.draws < n_keep:
        raise InputError(
            f"--rank-draws: {n_keep} is more than the {settings.chains} x "
            f"{settings.draws} posterior draws of a fit"
        )


def _ecsv(rows, keys, fdm_models):
    cols = {"name": [r["name"] for r in rows], "status": [r["status"] for r in rows]}
    cols["converged"] = [bool(r.get("converged", False)) for r in rows]
    for k in keys:
        cols[f"truth_{k}"] = [r["truth"][k] for r in rows]
        cols[f"rank_{k}"] = [r["ranks"][k] if "ranks" in r else -1 for r in rows]
    for k in next((r["parameter_ranks"] for r in rows if "parameter_ranks" in r), {}):
        cols[f"rank_parameter_{k}"] = [(r.get("parameter_ranks") or {}).get(k, -1) for r in rows]
    cols["foreground_fraction"] = [r["foreground_fraction"] for r in rows]
    cols["n_binaries"] = [r["n_binaries"] for r in rows]
    for m in fdm_models:
        cols[f"ln_b_{m}"] = [(r.get("ln_b") or {}).get(m) for r in rows]
        cols[f"ln_b_{m}"] = [float("nan") if v is None else v for v in cols[f"ln_b_{m}"]]
    t = Table(cols)
    t.meta["note"] = "one row per mock; rank -1 where the fit failed (see calibration.json)"
    return t


def _result(design, stats, rows, extra):
    fdm = false_dark_matter(rows) if not design.spec.has_dark else None
    failed = [{"name": r["name"], "error": r["error"]} for r in rows if r["status"] != "done"]
    return {
        "design": design.as_dict(),
        **extra,
        "n_done": sum(r["status"] == "done" for r in rows),
        "failed": failed,
        "unconverged": [r["name"] for r in rows if "ranks" in r and not r["converged"]],
        "quantities": stats,
        "sampled_parameters": parameter_statistics(
            rows, extra["n_rank_draws"], extra["n_bins"], seed=design.seed
        ),
        "false_dark_matter": fdm,
        "entries": rows,
    }


def _write_outputs(out_dir, result, ranked, design, models_run):
    """calibration.json, calibration.ecsv and rank_histograms.png."""
    keys, rows, stats = ranked
    write_json(out_dir / CALIBRATION_JSON, _clean(result))
    fdm_models = [m for m in models_run if m != design.spec_name]
    write_ecsv(
        out_dir / CALIBRATION_ECSV,
        _ecsv(rows, keys, fdm_models if not design.spec.has_dark else []),
    )
    title = f"SBC of '{design.spec.name}': {result['n_done']} mocks of {design.n_stars} stars"
    rank_figure(out_dir / FIGURE, stats, result["n_rank_draws"], result["n_bins"], title)


def run_calibration(
    design,
    satellite_path,
    out_dir,
    *,
    settings,
    models=None,
    scheduler=None,
    workers=None,
    n_keep=99,
    n_bins=10,
    v_sys_prior=(0.0, 10.0),
    progress=True,
    command=None,
):
    """Run the calibration of ``design`` (:class:`halo.batch.sbc.SbcDesign`) into ``out_dir``;
    returns the calibration.json record."""
    import dataclasses
    from pathlib import Path

    settings = dataclasses.replace(settings, binaries=design.binaries, progress=False)
    _check_draws(settings, n_keep, n_bins)
    out_dir = _check_out_dir(Path(out_dir))
    models_run, ranked = fit_models(design, models)
    _say(progress, f"calibrate: drawing {design.n_mocks} truths from the prior and their mocks")
    manifest, sat, truths = write_mocks(
        design, satellite_path, out_dir, models_run, v_sys_prior=v_sys_prior
    )
    outcome = run_batch(
        manifest,
        out_dir / FITS_FOLDER,
        scheduler=scheduler,
        workers=workers,
        settings=settings,
        models=models_run,
        progress=progress,
    )
    _say(progress, "calibrate: ranking the truths among the posterior draws")
    keys, rows = collect_ranks(
        design.spec,
        sat,
        truths,
        outcome.records,
        out_dir / FITS_FOLDER,
        ranked,
        n_keep,
        design.binaries,
    )
    stats = rank_statistics(keys, rows, n_keep, n_bins, seed=design.seed)
    extra = {
        "command": command,
        "satellite": str(satellite_path),
        "fit_models": models_run,
        "ranked_model": ranked,
        "settings": settings.as_dict(),
        "n_rank_draws": n_keep,
        "n_bins": n_bins,
        "batch_wall_time_s": outcome.wall_time_s,
    }
    result = _result(design, stats, rows, extra)
    _write_outputs(out_dir, result, (keys, rows, stats), design, models_run)
    return result


def _say(progress, text):
    if progress:
        print(text, file=sys.stderr)


def _clean(obj):
    from halo.results.summary import clean

    return clean(obj)


def format_calibration(result, out_dir):
    """The lines `halo calibrate` prints: per quantity p-values and coverage, the
    false-dark-matter rate, failures and unconverged fits (loud)."""
    lines = [
        f"calibrate: {result['n_done']} of {result['design']['n_mocks']} mocks fitted "
        f"(ranks among L = {result['n_rank_draws']} draws)"
    ]
    lines += [f"  mocks: {v}" for v in result["design"].get("model_violations") or []]
    for q in result["quantities"].values():
        if not q.get("n"):
            continue
        c68, c95 = q["coverage"]["0.68"]["fraction"], q["coverage"]["0.95"]["fraction"]
        flag = "" if q["uniform_at_0.01"] else "  NOT UNIFORM (p <= 0.01)"
        bias = q["rank_bias"]
        lines.append(
            f"  {q['label']}: chi2 p = {q['chi2']['p_value']:.3g}, KS p = "
            f"{q['ks']['p_value']:.3g}, coverage 68% {c68:.2f}, 95% {c95:.2f}, rank bias "
            f"{bias['value']:+.3f} +- {bias['standard_error']:.3f}{flag}"
        )
    params = result.get("sampled_parameters") or {}
    if params:
        lines.append("  sampled parameters (diagnostics; KS p / 68% coverage, ! not uniform):")
        cells = [
            f"{k} {q['ks']['p_value']:.2g}/{q['coverage']['0.68']['fraction']:.2f}"
            + ("!" if not q["uniform_at_0.01"] else "")
            for k, q in params.items()
        ]
        lines += ["    " + ", ".join(cells[i : i + 4]) for i in range(0, len(cells), 4)]
    for m, f in (result.get("false_dark_matter") or {}).items():
        if f["n"]:
            lines.append(
                f"  false dark matter ({m}): ln B > 1 in {f['gt_1']['fraction']:.3f}, "
                f"ln B > 3 in {f['gt_3']['fraction']:.3f} of {f['n']}"
            )
    lines += [f"FAILED {f['name']}: {f['error']}" for f in result["failed"]]
    if result["unconverged"]:
        lines.append(
            "WARNING: NOT CONVERGED (their ranks are kept; check them): "
            + ", ".join(result["unconverged"])
        )
    lines.append(
        f"results in {out_dir}/: {CALIBRATION_JSON}, {CALIBRATION_ECSV}, {FIGURE}, mocks/, fits/"
    )
    return "\n".join(lines)
