"""`halo forecast`: what more data would tell, simulated from the current posterior of a fit.

For each plan and each of K posterior draws (evenly spaced over the chains) a future catalogue is
simulated at that draw (a preposterior, common practice): the satellite at the draw's distance
and half-light radius, the draw's halo, anisotropy, stellar mass, v_sys and binary fraction
(:func:`halo.mock.files.mock_from_spec`), as many members as the fit found (the sum of its
membership probabilities) plus the plan's new stars, drawn from the light profile, and the
catalogue's other stars as field stars (the mock generator's field). Every row's error is drawn
from the fitted catalogue's per-star errors (``v_mean_err_kms`` of members.ecsv, with
replacement) and its noise added with it. A plan "epochs" observes every star again a year
(365.25 d) later.

Plans: ``+N`` (N more stars), ``epochs`` (a second epoch for all), ``+N:epochs`` (both). The
future catalogues are fitted on the batch runner (:func:`halo.batch.runner.run_batch`) with the
fit's models; per plan the forecast reports the distribution of ln B (the chosen model against
stars only), of the 16-84% interval widths of log10 M(<r_1/2) and log10 J(0.5 deg) [dex], and of
the binary fraction's posterior median.
"""

import dataclasses
import re
from pathlib import Path

import numpy as np

from halo.batch.calibration import thin_draws
from halo.batch.sbc import _entry_toml, _mock_values, _truth_satellite, satellite_toml
from halo.core.errors import InputError
from halo.core.fileio import write_ecsv, write_text
from halo.mock.files import mock_from_spec
from halo.products.rundir import load_posterior, read_run
from halo.results.summary import clean

__all__ = ["Plan", "parse_plan", "write_forecast_mocks", "YEAR_DAYS"]

YEAR_DAYS = 365.25
_PLAN = re.compile(r"(?:\+(\d{1,5}))?(?::?(epochs))?")


@dataclasses.dataclass(frozen=True)
class Plan:
    """``n_add`` more stars and/or ``epochs``: a second epoch for every star a year later."""

    text: str
    n_add: int
    epochs: bool

    @property
    def slug(self):
        return f"add{self.n_add}" + ("-epochs" if self.epochs else "")


def parse_plan(text):
    """A :class:`Plan` of ``+N``, ``epochs`` or ``+N:epochs`` (InputError naming --plan)."""
    m = _PLAN.fullmatch(text.strip())
    if not m or not (m.group(1) or m.group(2)) or (m.group(1) and int(m.group(1)) < 1):
        raise InputError(f"--plan: expected +N, epochs or +N:epochs (N >= 1), got {text!r}")
    return Plan(text.strip(), int(m.group(1) or 0), bool(m.group(2)))


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


def _catalogue_now(run_dir):
    """(members, field stars, per-star errors [km/s]) of the fit's members.ecsv."""
    from astropy.table import Table

    path = Path(run_dir) / "members.ecsv"
    if not path.is_file():
        raise InputError(f"{path}: no such file (not a halo fit output folder?)")
    t = Table.read(path, format="ascii.ecsv")
    n_members = max(2, int(round(float(np.nansum(t["member_prob"])))))
    errs = np.asarray(t["v_mean_err_kms"], dtype=float)
    return n_members, max(0, len(t) - n_members), errs[np.isfinite(errs)]


def _observed(table, errs, rng):
    """The noiseless mock ``table`` with each row's error drawn from ``errs`` and its noise."""
    import astropy.units as u

    e = rng.choice(errs, size=len(table), replace=True)
    v = u.Quantity(table["vlos"]).to_value(u.km / u.s)
    table["vlos"] = u.Quantity(v + rng.normal(0.0, e), u.km / u.s)
    table["vlos_err"] = u.Quantity(e, u.km / u.s)
    table.meta.clear()
    return table


def _future(spec_ref, spec, sat, draw, plan, now, rng):
    """One future catalogue (astropy Table) of ``plan`` at posterior ``draw``."""
    n_members, n_field, errs = now
    mock, _, _ = mock_from_spec(
        _truth_satellite(sat, draw),
        spec_ref,
        _mock_values(spec, draw),
        n_stars=n_members + plan.n_add,
        v_sys=draw["v_sys"],
        error_range_kms=(0.0, 0.0),
        seed=int(rng.integers(2**31)),
        n_foreground=n_field,
        epochs_mjd=[60000.0, 60000.0 + YEAR_DAYS] if plan.epochs else None,
        binary_fraction=draw.get("f_binary", 0.0),
        binary_population=spec.binary_population(),
    )
    return _observed(mock.table, errs, rng)


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


def write_forecast_mocks(run_dir, out_dir, plans, n_draws, model=None, seed=0):
    """Write DIR/mocks/: the future catalogues of every plan, the fit's satellite file and the
    batch manifest. Returns (manifest, meta) with meta the model, models, n_members now and
    per-entry (name, plan) pairs."""
    summary, sat, specs = read_run(run_dir)
    model = _pick_model(specs, model, run_dir)
    spec = specs[model]
    spec_ref = _spec_ref(spec)
    now = _catalogue_now(run_dir)
    folder = Path(out_dir) / "mocks"
    write_text(folder / "satellite.toml", satellite_toml(sat.as_dict()))
    draws = _draws(run_dir, model, n_draws)
    rng = np.random.default_rng(seed)
    models = [_spec_ref(specs[m]) if m in specs else m for m in summary["models"]]
    entries, text = [], []
    for plan in plans:
        for k, draw in enumerate(draws):
            name = f"{plan.slug}-{k:03d}"
            table = _future(spec_ref, spec, sat, draw, plan, now, rng)
            write_ecsv(folder / f"{name}.ecsv", table)
            text.append(_entry_toml(name, models, seed + k))
            entries.append((name, plan))
    manifest = folder / "manifest.toml"
    write_text(manifest, "".join(text))
    meta = {"model": model, "models": models, "n_members_now": now[0], "n_field_now": now[1]}
    return manifest, clean(meta), entries
