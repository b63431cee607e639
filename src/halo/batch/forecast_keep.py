"""Future catalogues that keep the observed stars: the fit's own catalogue rows as measured, plus
new stars and/or new epochs of chosen stars, simulated at a posterior draw.

New stars come from the mock generator (:func:`halo.mock.files.mock_from_spec`) at the draw:
positions from its light profile, velocities from its halo, anisotropy, v_sys and binaries.

A new epoch at t_new of a kept star observed last at t_obs with velocity v_obs and error e_old:

    v_new = v_obs - eps_old + [orbit(t_new) - orbit(t_obs)] + eps_new,
    eps_old ~ N(0, e_old^2) (one per star), eps_new ~ N(0, e_new^2) (one per new epoch),

so that v_new - v_obs has variance e_old^2 + e_new^2 (plus the orbital change). The star is a
binary with probability its ``binary_prob`` of members.ecsv (the draw's f_binary where that is
missing or NaN; never for field stars, member_prob < 0.5), its orbit drawn from the spec's binary
population (:func:`halo.physics.binaries.sample_orbits`, ``los_velocity``).
New rows carry the catalogue's own columns; the values a new row has no measurement of are left
empty (a new epoch repeats its star's position and member_prob but not its [Fe/H]; a new star has
member_prob 1 when the catalogue has that column: it is a member by construction).

Approximation (common practice for a preposterior): the old measurement's noise eps_old is drawn
afresh, not conditioned on v_obs, and the orbit is drawn from the population, not conditioned on
the star's observed velocities.
"""

import datetime
import hashlib
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import Table, vstack

from halo.core.errors import InputError
from halo.inputs.catalogue import _read_table
from halo.inputs.columns import column_values, parse_column_overrides, resolve_columns
from halo.inputs.values import star_ids
from halo.physics.binaries import los_velocity, sample_orbits

__all__ = [
    "FitCatalogue",
    "fit_catalogue",
    "new_epoch_velocities",
    "observed",
    "kept_future",
    "mjd_of_iso_time",
]

_MJD_ZERO = datetime.datetime(1858, 11, 17, tzinfo=datetime.UTC)
_STD_UNIT = {"vlos": u.km / u.s, "vlos_err": u.km / u.s, "mjd": u.day, "ra": u.deg, "dec": u.deg}


def mjd_of_iso_time(text):
    """MJD [day] of an ISO time (the fit's ``created`` stamp; UTC when it has no zone)."""
    t = datetime.datetime.fromisoformat(text)
    t = t if t.tzinfo else t.replace(tzinfo=datetime.UTC)
    return (t - _MJD_ZERO).total_seconds() / 86400.0


class FitCatalogue:
    """The catalogue a fit used: ``path``, the raw ``table``, its column ``roles``, the checked
    ``values`` (deg, km/s, day), per-row star ``ids`` (str) and ``t_fit`` (the fit's MJD)."""

    def __init__(self, path, table, roles, values, ids, t_fit):
        self.path, self.table, self.roles, self.values = path, table, roles, values
        self.ids, self.t_fit = ids, t_fit

    @property
    def has_mjd(self):
        return "mjd" in self.roles

    def last_epoch(self):
        """The catalogue's last epoch [MJD], or None without an mjd column."""
        return float(np.max(self.values["mjd"])) if self.has_mjd else None

    def last_rows(self):
        """{star id: the row of its last epoch (its only row without an mjd column)}."""
        t = self.values["mjd"] if self.has_mjd else np.zeros(len(self.ids))
        last = {}
        for row in np.lexsort((np.arange(len(t)), t)):
            last[self.ids[row]] = int(row)
        return last


def _sha(path):
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def _locate(run_dir, summary, given):
    """The catalogue file of the fit: ``given`` (--catalogue) or summary.json's source."""
    want = summary["catalogue"]["sha256"]
    if given is not None:
        path = Path(given)
        if not path.is_file():
            raise InputError(f"--catalogue {path}: no such file")
        if _sha(path) != want:
            raise InputError(
                f"--catalogue {path}: not the catalogue the fit used (its sha256 differs from "
                f"{Path(run_dir) / 'summary.json'} catalogue.sha256)"
            )
        return path
    src = Path(summary["catalogue"]["source"])
    if not src.is_absolute() and not src.is_file():  # relative to where the fit ran
        src = next((p for p in (Path(run_dir).parent / src,) if p.is_file()), src)
    state = (
        "missing" if not src.is_file() else ("changed since the fit" if _sha(src) != want else "")
    )
    if state:
        raise InputError(
            f"{Path(run_dir) / 'summary.json'}: the fit's catalogue {src} is {state} (the fit "
            "folder holds no copy); give it with --catalogue FILE"
        )
    return src


def fit_catalogue(run_dir, summary, given=None, columns=None):
    """:class:`FitCatalogue` of the fit in ``run_dir``; ``columns``: ("role=NAME", ...) overrides
    as the fit took them (the fit folder does not record them)."""
    path = _locate(run_dir, summary, given)
    table, _, _ = _read_table(path)
    where = f"{path}:"
    roles = resolve_columns(table.colnames, parse_column_overrides(columns or ()), where)
    values, _ = column_values(table, roles, where)
    if "id" in roles:
        ids = np.array(star_ids(table[roles["id"]], roles["id"], where), dtype=str)
    else:
        ids = np.array([str(r + 1) for r in range(len(table))], dtype=str)
    return FitCatalogue(path, table, roles, values, ids, mjd_of_iso_time(summary["created"]))


def new_epoch_velocities(rng, v_obs, e_old, e_new, dt_days, p_binary, population):
    """New-epoch velocities [km/s] of kept stars, shape (n_stars, n_dates) (module notes).

    ``v_obs``, ``e_old``, ``p_binary``: per star; ``e_new`` per star or per new epoch
    (n_stars, n_dates); ``dt_days``: (n_stars, n_dates)
    times of the new epochs after each star's observed one. Returns (velocities, is_binary)."""
    v_obs, e_old, e_new = (np.asarray(a, dtype=float) for a in (v_obs, e_old, e_new))
    dt = np.asarray(dt_days, dtype=float).reshape(v_obs.size, -1)
    e_new = np.broadcast_to(e_new.reshape(v_obs.size, -1), dt.shape)
    is_binary = rng.uniform(size=v_obs.size) < np.asarray(p_binary, dtype=float)
    orbits = sample_orbits(population, v_obs.size, rng)
    change = los_velocity(orbits, dt.T).T - los_velocity(orbits, 0.0)[:, None]
    change = np.where(is_binary[:, None], change, 0.0)
    eps_old = e_old * rng.standard_normal(v_obs.size)
    eps_new = e_new * rng.standard_normal(dt.shape)
    return v_obs[:, None] - eps_old[:, None] + change + eps_new, is_binary


def observed(table, errs, rng):
    """The noiseless mock ``table`` with each row's error drawn from ``errs`` and its noise."""
    e = rng.choice(errs, size=len(table), replace=True)
    v = u.Quantity(table["vlos"]).to_value(u.km / u.s)
    table["vlos"] = u.Quantity(v + rng.normal(0.0, e), u.km / u.s)
    table["vlos_err"] = u.Quantity(e, u.km / u.s)
    table.meta.clear()
    return table


def _set(table, name, role, std_values, like):
    """table[name] = ``std_values`` (in the role's standard unit) in the unit of ``like``."""
    unit = getattr(like, "unit", None)
    v = np.asarray(std_values, dtype=float)
    if unit is not None and role in _STD_UNIT:
        table[name] = u.Quantity(v, _STD_UNIT[role]).to(unit)
    else:
        table[name] = v


def _base(cat, need_mjd):
    """The catalogue's rows as measured, with an id column (row numbers) and an mjd column (the
    fit's date) added when missing and needed; (table, id column, mjd column)."""
    base = cat.table.copy(copy_data=True)
    base.meta.clear()
    id_col = cat.roles.get("id", "id")
    if "id" not in cat.roles:
        base[id_col] = cat.ids
    mjd_col = cat.roles.get("mjd", "mjd" if need_mjd else None)
    if need_mjd and "mjd" not in cat.roles:
        base[mjd_col] = np.full(len(base), cat.t_fit)
    return base, id_col, mjd_col


def _p_binary(stars, members, f_binary):
    """Per star: its binary_prob (the draw's f_binary where missing or NaN), 0 for field stars."""
    out = []
    for s in stars:
        member, binary = members.get(s, (1.0, np.nan))
        out.append(0.0 if member < 0.5 else (f_binary if not np.isfinite(binary) else binary))
    return np.asarray(out, dtype=float)


def _epoch_rows(cat, base, cols, stars, dates, opts, rng):
    """Rows of the new epochs of ``stars`` at ``dates`` (copies of each star's last row with
    the new vlos, vlos_err and mjd; [Fe/H] not measured again)."""
    last = cat.last_rows()
    rows = np.array([last[s] for s in stars], dtype=int)
    dates = np.asarray(dates, dtype=float)
    t_obs = cat.values["mjd"][rows] if cat.has_mjd else np.full(rows.size, cat.t_fit)
    e_old = cat.values["vlos_err"][rows]
    shape = (rows.size, dates.size)
    e_new = e_old[:, None] * np.ones(shape)
    if opts["new_errors"] is not None:
        e_new = rng.uniform(*opts["new_errors"], size=shape)
    p_bin = _p_binary(stars, opts["members"], opts["f_binary"])
    v, _ = new_epoch_velocities(
        rng,
        cat.values["vlos"][rows],
        e_old,
        e_new,
        dates[None, :] - t_obs[:, None],
        p_bin,
        opts["population"],
    )
    out = base[np.repeat(rows, dates.size)]
    for role, val in (("vlos", v), ("vlos_err", e_new), ("mjd", np.tile(dates, rows.size))):
        _set(out, cols[role], role, np.ravel(val), base[cols[role]])
    for role in ("feh", "feh_err"):
        if role in cat.roles:
            out[cat.roles[role]] = np.full(len(out), np.nan)
    return out


def _new_ids(base, id_col, n):
    col = base[id_col]
    if col.dtype.kind in "iu":
        return int(np.max(col)) + 1 + np.arange(n)
    taken = set(np.asarray(col).astype(str))
    ids, k = [], 0
    while len(ids) < n:
        k += 1
        if f"new-{k:04d}" not in taken:
            ids.append(f"new-{k:04d}")
    return np.array(ids)


def _new_star_rows(cat, base, cols, mock_table, dates):
    """Rows of the new stars (a mock table at the draw) in the catalogue's columns and units."""
    star = np.asarray(mock_table["id"], dtype=int)
    uniq = np.unique(star)
    ids = _new_ids(base, cols["id"], uniq.size)[np.searchsorted(uniq, star)]
    out = Table()
    out[cols["id"]] = ids
    for role in ("ra", "dec", "vlos", "vlos_err"):
        std = u.Quantity(mock_table[role]).to_value(_STD_UNIT[role])
        _set(out, cols[role], role, std, base[cols[role]])
    if cols["mjd"] is not None:
        mjd = mock_table["mjd"] if "mjd" in mock_table.colnames else np.full(len(out), dates[0])
        _set(out, cols["mjd"], "mjd", mjd, base[cols["mjd"]])
    if "member_prob" in cat.roles:  # members by construction
        out[cat.roles["member_prob"]] = np.ones(len(out))
    return out


def kept_future(cat, plan, dates, new_table, opts, rng):
    """One future catalogue keeping the observed stars: the catalogue's rows as measured, the
    new epochs of ``opts["stars"]`` at ``dates`` (when the plan has epochs) and the rows of
    ``new_table`` (the new stars' mock, or None).

    ``opts``: stars, members ({id: (member_prob, binary_prob)}), f_binary, population,
    new_errors ((lo, hi) [km/s] or None)."""
    need_mjd = cat.has_mjd or plan.epochs
    base, id_col, mjd_col = _base(cat, need_mjd)
    cols = {r: cat.roles.get(r, r) for r in ("ra", "dec", "vlos", "vlos_err")}
    cols.update(id=id_col, mjd=mjd_col)
    parts = [base]
    if plan.epochs:
        parts.append(_epoch_rows(cat, base, cols, opts["stars"], dates, opts, rng))
    if new_table is not None:
        parts.append(_new_star_rows(cat, base, cols, new_table, dates))
    out = vstack(parts, join_type="outer", metadata_conflicts="silent")
    out.meta.clear()
    return out
