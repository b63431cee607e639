"""Metallicities in a catalogue: the optional ``feh`` and ``feh_err`` columns [dex], checked, and
each star's epochs combined.

A row may lack a metallicity (an empty cell, a masked value or NaN: not measured); a row with a
``feh`` needs a positive ``feh_err``. A star's [Fe/H] is the inverse-variance mean of its rows'
measurements (NaN when none was measured):

    feh = sum w_i feh_i / sum w_i,  feh_err = (sum w_i)^-1/2,  w_i = 1 / feh_err_i^2

A value given per star and repeated on every epoch row (the same feh and feh_err on each) is
one measurement, counted once (a note says so); measurements of one star that disagree beyond
their errors (chi^2 p-value below :data:`DISAGREE_P`) raise a warning.
"""

from typing import NamedTuple

import numpy as np
from scipy import stats

from halo.core.errors import InputError
from halo.inputs.values import check_range, fail

__all__ = ["FEH_RANGE_DEX", "DISAGREE_P", "StarFeh", "check_feh", "merge_feh"]

#: accepted [Fe/H] values [dex]: beyond them a value is a sentinel (-99, 99) or a slip
FEH_RANGE_DEX = (-8.0, 2.0)
#: chi^2 p-value below which a star's [Fe/H] measurements disagree (a warning)
DISAGREE_P = 1e-3


def check_feh(values, roles, where):
    """InputError on: ``feh`` without ``feh_err`` (or the reverse), a ``feh`` outside
    :data:`FEH_RANGE_DEX`, a row with a ``feh`` and a missing or non-positive ``feh_err``."""
    has_feh, has_err = "feh" in values, "feh_err" in values
    if has_feh != has_err:
        given, missing = ("feh", "feh_err") if has_feh else ("feh_err", "feh")
        raise InputError(
            f"{where} column '{roles[given]}' ({given}) needs a '{missing}' column beside it"
        )
    if not has_feh:
        return
    feh, err = values["feh"], values["feh_err"]
    given = np.isfinite(feh)
    lo, hi = FEH_RANGE_DEX
    check_range(
        feh,
        ~given | ((feh >= lo) & (feh <= hi)),
        f"[Fe/H] must be in [{lo:g}, {hi:g}] dex (leave a cell empty or NaN when not measured)",
        roles["feh"],
        where,
    )
    no_err = given & ~np.isfinite(err)
    if no_err.any():
        i = int(np.argmax(no_err))
        fail(where, i, roles["feh_err"], f"missing value where '{roles['feh']}' is given")
    with np.errstate(invalid="ignore"):
        ok = ~given | (err > 0)
    check_range(err, ok, "must be positive", roles["feh_err"], where)


def _unique_rows(star, feh, err):
    """Indices of the rows with a measured feh, a (star, feh, feh_err) repeated only once."""
    rows = np.flatnonzero(np.isfinite(feh))
    if rows.size == 0:
        return rows
    triples = np.stack([star[rows].astype(float), feh[rows], err[rows]], axis=1)
    _, first = np.unique(triples, axis=0, return_index=True)
    return rows[np.sort(first)]


class StarFeh(NamedTuple):
    """Per star ``feh`` and ``feh_err`` [dex] (NaN: not measured), ``notes``, ``warnings``."""

    feh: np.ndarray
    feh_err: np.ndarray
    notes: list
    warnings: list


def merge_feh(values, star, n_stars):
    """:class:`StarFeh` from the checked column values by role (``feh``, ``feh_err`` when the
    catalogue has them) and each row's star index."""
    nan = np.full(n_stars, np.nan)
    if "feh" not in values:
        return StarFeh(nan, nan.copy(), [], [])
    feh, err = values["feh"], values["feh_err"]
    rows = _unique_rows(star, feh, err)
    s, x, w = star[rows], feh[rows], 1.0 / err[rows] ** 2
    sum_w = np.bincount(s, w, minlength=n_stars)
    n_meas = np.bincount(s, minlength=n_stars)
    seen = n_meas > 0
    mean, out_err = nan.copy(), nan.copy()
    mean[seen] = np.bincount(s, w * x, minlength=n_stars)[seen] / sum_w[seen]
    out_err[seen] = 1.0 / np.sqrt(sum_w[seen])
    notes, warns = [], []
    n_repeated = int(np.isfinite(feh).sum()) - rows.size
    if n_repeated:
        notes.append(
            f"feh: {n_repeated} row(s) repeat their star's feh and feh_err (a per-star value): "
            "counted once"
        )
    chi2 = np.bincount(s, w * (x - mean[s]) ** 2, minlength=n_stars)
    multi = n_meas > 1
    p = np.ones(n_stars)
    p[multi] = stats.chi2.sf(chi2[multi], n_meas[multi] - 1)
    bad = p < DISAGREE_P
    if bad.any():
        warns.append(
            f"feh: the measurements of {int(bad.sum())} star(s) disagree beyond their errors "
            f"(chi^2 p < {DISAGREE_P:g}): their inverse-variance mean is used"
        )
    notes.append(f"feh measured for {int(seen.sum())} of {n_stars} stars")
    return StarFeh(mean, out_err, notes, warns)
