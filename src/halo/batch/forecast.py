"""`halo forecast`: what more data would tell, simulated from the current posterior of a fit.

For each plan and each of K posterior draws (evenly spaced over the chains) a future catalogue is
simulated at that draw (a preposterior, common practice). By default it keeps the observed stars
(:mod:`halo.batch.forecast_keep`): the fit's own catalogue rows as measured, plus the plan's new
stars (drawn with :func:`halo.mock.files.mock_from_spec` at the draw's distance, half-light
radius, halo, anisotropy, stellar mass, v_sys and binary fraction) and the new epochs of the chosen
stars (``--epoch-stars``, default all) on the plan's dates. New rows' errors: uniform in
``new_errors`` [km/s] when given; else a new star's error is drawn from the catalogue's row errors
(with replacement) and a new epoch has its star's own error.

``resimulate=True`` (``--resimulate``) instead draws a whole new mock at the draw: as many members
as the fit found (the sum of its membership probabilities) plus the plan's new stars, the
catalogue's other stars as field stars, every row's error drawn from members.ecsv's
``v_mean_err_kms`` (or uniform in ``new_errors``); epochs are then observed for every star.

Plans (:mod:`halo.batch.forecast_plan`): ``+N``, ``epochs``, ``epochs@DATE,...``,
``+N:epochs[@...]``. New stars are observed on every date of their plan (a bare plan: a year,
365.25 d, after the catalogue's last epoch, or after the fit's date without an mjd column). The
future catalogues are fitted on the batch runner (:func:`halo.batch.runner.run_batch`) with the
fit's models; per plan the forecast reports the distribution of ln B (the chosen model against
stars only), of the 16-84% interval widths of log10 M(<r_1/2) and log10 J(0.5 deg) [dex], and of
the binary fraction's posterior median.
"""

import json
from pathlib import Path

import numpy as np

from halo.batch.calibration import thin_draws
from halo.batch.forecast_keep import fit_catalogue, kept_future, mjd_of_iso_time, observed
from halo.batch.forecast_plan import YEAR_DAYS, Plan, parse_epoch_stars, parse_plan
from halo.batch.sbc import _entry_toml, _mock_values, _truth_satellite, satellite_toml
from halo.core.errors import InputError
from halo.core.fileio import write_ecsv, write_text
from halo.mock.files import mock_from_spec
from halo.products.rundir import load_posterior, read_run
from halo.results.summary import clean

__all__ = ["Plan", "parse_plan", "write_forecast_mocks", "YEAR_DAYS"]


def _spec_ref(spec):
    """What a manifest names a spec by: a shipped one by its name, any other by its path."""
    return spec.name if spec.source == f"models/{spec.name}.toml" else spec.source


def _pick_model(specs, model, run_dir):
    if model is None:
        return next(iter(specs))
    if model not in specs:
        raise InputError(
            f"--model: {model!r} is not a dark model of {run_dir} (there: {', '.join(specs)})"
        )
    return model


def _members(run_dir):
    """The fit's members.ecsv (astropy Table)."""
    from astropy.table import Table

    path = Path(run_dir) / "members.ecsv"
    if not path.is_file():
        raise InputError(f"{path}: no such file (not a halo fit output folder?)")
    return Table.read(path, format="ascii.ecsv")


def _catalogue_now(members):
    """(members, field stars, per-star errors [km/s]) of the fit's members.ecsv."""
    n_members = max(2, int(round(float(np.nansum(members["member_prob"])))))
    errs = np.asarray(members["v_mean_err_kms"], dtype=float)
    return n_members, max(0, len(members) - n_members), errs[np.isfinite(errs)]


def _mock_at(spec_ref, spec, sat, draw, rng, n_stars, errors, epochs, n_field=0):
    """A mock (astropy Table) of ``n_stars`` members (+ ``n_field`` field stars) at ``draw``."""
    mock, _, _ = mock_from_spec(
        _truth_satellite(sat, draw),
        spec_ref,
        _mock_values(spec, draw),
        n_stars=n_stars,
        v_sys=draw["v_sys"],
        error_range_kms=errors or (0.0, 0.0),
        seed=int(rng.integers(2**31)),
        n_foreground=n_field,
        epochs_mjd=epochs,
        binary_fraction=draw.get("f_binary", 0.0),
        binary_population=spec.binary_population(),
    )
    mock.table.meta.clear()
    return mock.table


def _resimulated(spec_ref, spec, sat, draw, plan, ctx, rng):
    """One future catalogue (astropy Table) of ``plan`` at posterior ``draw``: a whole new mock,
    errors uniform in ``new_errors`` or drawn from members.ecsv's."""
    n_members, n_field, errs = ctx["now"]
    epochs = [ctx["t0"], *ctx["dates"][plan.text]] if plan.epochs else None
    errors = ctx["new_errors"]
    table = _mock_at(
        spec_ref, spec, sat, draw, rng, n_members + plan.n_add, errors, epochs, n_field
    )
    return table if errors else observed(table, errs, rng)


def _kept(spec_ref, spec, sat, draw, plan, ctx, rng):
    """One future catalogue of ``plan`` at ``draw`` keeping the observed stars."""
    cat, dates, errors = ctx["catalogue"], ctx["dates"][plan.text], ctx["new_errors"]
    new = None
    if plan.n_add:
        epochs = list(dates) if (cat.has_mjd or plan.epochs) else None
        new = _mock_at(spec_ref, spec, sat, draw, rng, plan.n_add, errors, epochs)
        new = new if errors else observed(new, cat.values["vlos_err"], rng)
    opts = {
        "stars": ctx["stars"],
        "members": ctx["member_probs"],
        "f_binary": draw.get("f_binary", 0.0),
        "population": spec.binary_population(),
        "new_errors": errors,
    }
    return kept_future(cat, plan, dates, new, opts, rng)


def _draws(run_dir, model, n_draws):
    _, samples = load_posterior(run_dir, model)
    flat = {k: np.asarray(v, dtype=float) for k, v in samples.items() if np.ndim(v) == 1}
    n = flat["distance"].size
    if not 1 <= n_draws <= n:
        raise InputError(f"--draws-per-plan: expected 1 to {n} (the fit's draws), got {n_draws}")
    return [
        {k: float(v) for k, v in zip(flat, col, strict=True)}
        for col in zip(*(thin_draws(v[None, :], n_draws)[0] for v in flat.values()), strict=True)
    ]


def _check_dates(cat, stars, plan, dates):
    """Refuse a plan date on which a chosen star already has an epoch."""
    if cat is None or not cat.has_mjd or not plan.epochs:
        return
    chosen = np.isin(cat.ids, stars)
    clash = np.isin(cat.values["mjd"][chosen], dates)
    if clash.any():
        sid = cat.ids[chosen][clash][0]
        day = cat.values["mjd"][chosen][clash][0]
        raise InputError(
            f"--plan {plan.text}: star {sid!r} already has an epoch at MJD {day:g} in {cat.path}"
        )


def _context(run_dir, summary, members, options):
    """What every future catalogue needs: the catalogue (kept mode), chosen stars, dates."""
    resimulate = options.get("resimulate", False)
    ids = [str(i).strip() for i in members["id"]]
    if resimulate and options.get("epoch_stars") is not None:
        raise InputError("--epoch-stars: not with --resimulate (no observed star is kept)")
    cat = (
        None
        if resimulate
        else fit_catalogue(run_dir, summary, options.get("catalogue"), options.get("columns"))
    )
    stars = parse_epoch_stars(options.get("epoch_stars"), ids)
    last = None if cat is None else cat.last_epoch()
    t_fit = cat.t_fit if cat is not None else None
    if last is not None:
        t0, rule = last, f"a year (365.25 d) after the catalogue's last epoch (MJD {last:.2f})"
    else:
        t_fit = mjd_of_iso_time(summary["created"]) if t_fit is None else t_fit
        t0 = t_fit
        rule = f"a year (365.25 d) after the fit's date (MJD {t0:.2f}; the catalogue has no mjd)"
    if resimulate:
        rule = f"{rule}; --resimulate: every star's first epoch at MJD {t0:.2f}"
    return {
        "catalogue": cat,
        "stars": ids if stars is None else stars,
        "chosen_stars": "all" if stars is None else stars,
        "t0": t0,
        "bare_epoch_rule": rule,
        "now": _catalogue_now(members),
        "new_errors": options.get("new_errors"),
        "member_probs": _member_probs(members),
    }


def _member_probs(members):
    bp = members["binary_prob"] if "binary_prob" in members.colnames else None
    return {
        str(i).strip(): (float(m), float(bp[k]) if bp is not None else np.nan)
        for k, (i, m) in enumerate(zip(members["id"], members["member_prob"], strict=True))
    }


def _columns_toml(cat):
    """The manifest's column overrides so that the fits read the catalogue's own names."""
    if cat is None:
        return ""
    odd = {r: n for r, n in cat.roles.items() if n != r}
    if not odd:
        return ""
    return "columns = { " + ", ".join(f"{r} = {json.dumps(n)}" for r, n in odd.items()) + " }\n"


def write_forecast_mocks(run_dir, out_dir, plans, n_draws, model=None, seed=0, **options):
    """Write DIR/mocks/: the future catalogues of every plan, the fit's satellite file and the
    batch manifest. ``options``: resimulate, catalogue, epoch_stars, new_errors (module notes).
    Returns (manifest, meta, per-entry (name, plan) pairs)."""
    summary, sat, specs = read_run(run_dir)
    model = _pick_model(specs, model, run_dir)
    spec = specs[model]
    spec_ref = _spec_ref(spec)
    ctx = _context(run_dir, summary, _members(run_dir), options)
    ctx["dates"] = {p.text: p.dates or (ctx["t0"] + YEAR_DAYS,) for p in plans}
    for p in plans:
        _check_dates(ctx["catalogue"], ctx["stars"], p, ctx["dates"][p.text])
    folder = Path(out_dir) / "mocks"
    write_text(folder / "satellite.toml", satellite_toml(sat.as_dict()))
    draws = _draws(run_dir, model, n_draws)
    rng = np.random.default_rng(seed)
    models = [_spec_ref(specs[m]) if m in specs else m for m in summary["models"]]
    make = _resimulated if options.get("resimulate") else _kept
    entries, text = [], []
    cols = _columns_toml(ctx["catalogue"])
    for i, plan in enumerate(plans):
        for k, draw in enumerate(draws):
            name = f"p{i + 1}-{plan.slug}-{k:03d}"
            write_ecsv(folder / f"{name}.ecsv", make(spec_ref, spec, sat, draw, plan, ctx, rng))
            text.append(_entry_toml(name, models, seed + k).rstrip("\n") + "\n" + cols + "\n")
            entries.append((name, plan))
    manifest = folder / "manifest.toml"
    write_text(manifest, "".join(text))
    return manifest, clean(_meta(model, models, ctx, plans, options)), entries


def _dated(plan, cat, options):
    """Whether the plan's new rows carry dates (an epochs plan, or new stars in a catalogue with
    an mjd column)."""
    return plan.epochs or (not options.get("resimulate") and cat is not None and cat.has_mjd)


def _meta(model, models, ctx, plans, options):
    cat = ctx["catalogue"]
    n_members, n_field, _ = ctx["now"]
    return {
        "model": model,
        "models": models,
        "mode": "resimulate" if options.get("resimulate") else "keep observed stars",
        "catalogue": None if cat is None else str(cat.path),
        "n_members_now": n_members,
        "n_field_now": n_field,
        "n_stars_now": n_members + n_field if cat is None else int(len(set(cat.ids))),
        "new_errors_kms": None if not ctx["new_errors"] else list(ctx["new_errors"]),
        "bare_epoch_rule": ctx["bare_epoch_rule"],
        "plan_details": {
            p.text: {
                "dates_mjd": list(ctx["dates"][p.text]) if _dated(p, cat, options) else [],
                "epoch_stars": ctx["chosen_stars"] if p.epochs else [],
                "dates_given": bool(p.dates),
            }
            for p in plans
        },
    }
