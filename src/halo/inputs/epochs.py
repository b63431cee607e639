"""Epochs merged into stars: rows sharing an id (and differing in mjd) are one star; its
velocity is the inverse-variance mean of its epochs, with chi2 and p-value of their scatter.

v = sum w_i v_i / sum w_i, v_err = (sum w_i)^-1/2, w_i = 1 / err_i^2;
chi2 = sum w_i (v_i - v)^2, p_var = P(chi2_{n-1} > chi2) (scipy.stats.chi2.sf): a small p_var
flags a velocity-variable star (binary) under Gaussian errors (common practice).
"""

from typing import NamedTuple

import astropy.units as u
import numpy as np
from astropy.coordinates import SkyCoord
from scipy import stats

from halo.core.errors import InputError
from halo.inputs.values import star_ids as _read_ids

__all__ = ["MIN_STARS", "Epochs", "merge_epochs"]

MIN_STARS = 3
_SAME_STAR_ARCSEC = 1.0  # epochs of one star further apart than this raise a warning


class Epochs(NamedTuple):
    """Rows grouped into stars (see :func:`merge_epochs`).

    ``star`` index of each row's star, ``first_row`` of each star, ``star_ids`` (str), ``order``
    the rows sorted by (star, mjd, row), ``merged`` per-star arrays (v, v_err, n_epochs, chi2,
    chi2_dof, p_var), ``baseline`` [day], ``member`` mean member_prob per star (or None),
    ``notes`` and ``warnings`` (lines of text).
    """

    star: np.ndarray
    first_row: np.ndarray
    star_ids: np.ndarray
    order: np.ndarray
    merged: dict
    baseline: np.ndarray
    member: np.ndarray | None
    notes: list
    warnings: list


def merge_epochs(table, roles, values, where, min_stars=MIN_STARS):
    """Group the rows of ``table`` into stars: :class:`Epochs`.

    ``values`` are the checked columns by role (ra, dec, vlos, vlos_err, optional mjd and
    member_prob). InputError on a repeated (id, mjd), an id repeated without an mjd column, or
    fewer than ``min_stars`` stars (a batch added to a workspace may hold fewer than
    :data:`MIN_STARS`: the workspace checks its whole catalogue).
    """
    n_rows = len(table)
    v, err = values["vlos"], values["vlos_err"]
    mjd, prob = values.get("mjd"), values.get("member_prob")
    _check_unnamed_epochs(values, roles, where)
    star, first_row, ids = _stars(table, roles, where)
    rows = np.arange(n_rows)
    key = np.lexsort((rows, rows if mjd is None else mjd, star))
    _check_repeats(star[key], rows[key], None if mjd is None else mjd[key], ids, roles, where)
    n_stars = len(ids)
    if n_stars < min_stars:
        raise InputError(
            f"{where} only {n_stars} star(s) after merging epochs of {n_rows} row(s); "
            f"at least {min_stars} are needed"
        )
    merged = _merge(v, err, star, n_stars)
    starts = np.flatnonzero(np.r_[True, star[key][1:] != star[key][:-1]])
    baseline = np.zeros(n_stars)
    if mjd is not None:
        baseline = np.maximum.reduceat(mjd[key], starts) - np.minimum.reduceat(mjd[key], starts)
    notes, warns = [], []
    multi = merged["n_epochs"] > 1
    if multi.any():
        notes.append(
            f"{n_rows} rows merged into {n_stars} stars ({int(multi.sum())} with several epochs)"
        )
        warns += _apart(values["ra"], values["dec"], star, first_row, ids)
    member = None
    if prob is not None:
        member = _mean_member_prob(prob, star, key, starts, merged["n_epochs"], notes)
    return Epochs(star, first_row, ids, key, merged, baseline, member, notes, warns)


def _apart(ra, dec, star, first_row, ids):
    """A warning (list of one line, or empty) about stars whose epochs lie apart on the sky."""
    sep = SkyCoord(ra * u.deg, dec * u.deg).separation(
        SkyCoord(ra[first_row[star]] * u.deg, dec[first_row[star]] * u.deg)
    )
    apart = sep.to_value(u.arcsec) > _SAME_STAR_ARCSEC
    if not apart.any():
        return []
    bad = np.unique(star[apart])
    return [
        f"{len(bad)} star(s) have epochs more than {_SAME_STAR_ARCSEC:g} arcsec apart "
        f"(up to {sep.to_value(u.arcsec).max():.3g} arcsec; first: "
        f"'{ids[bad[0]]}'): their first row's position is used"
    ]


def _mean_member_prob(prob, star, key, starts, n_epochs, notes):
    """member_prob per star, the mean over its epochs (a note when they differ)."""
    member = np.bincount(star, prob, minlength=len(n_epochs)) / n_epochs
    spread = np.maximum.reduceat(prob[key], starts) - np.minimum.reduceat(prob[key], starts)
    if (spread > 0).any():
        notes.append(
            f"member_prob differs between the epochs of {int((spread > 0).sum())} star(s): "
            "their mean is used"
        )
    return member


def _merge(v, err, star, n_stars):
    """Inverse-variance mean of each star's epochs, its error, chi2 about it and the p-value."""
    w = 1.0 / err**2
    ref = np.zeros(n_stars)
    ref[star] = v  # one epoch's velocity per star: single epochs come out exact, chi2 = 0
    dv = v - ref[star]
    sum_w = np.bincount(star, w, minlength=n_stars)
    mean_dv = np.bincount(star, w * dv, minlength=n_stars) / sum_w
    vbar = ref + mean_dv
    chi2 = np.bincount(star, w * (dv - mean_dv[star]) ** 2, minlength=n_stars)
    n_ep = np.bincount(star, minlength=n_stars)
    dof = n_ep - 1
    p_var = np.full(n_stars, np.nan)
    multi = dof > 0
    p_var[multi] = stats.chi2.sf(chi2[multi], dof[multi])
    return dict(
        v=vbar,
        v_err=1.0 / np.sqrt(sum_w),
        n_epochs=n_ep,
        chi2=chi2,
        chi2_dof=dof,
        p_var=p_var,
    )


def _check_unnamed_epochs(values, roles, where):
    """Without an id column each row is a star: refuse epochs of one star (rows at exactly the
    same ra and dec, with an mjd column) that would otherwise count as several stars."""
    mjd = values.get("mjd")
    if "id" in roles or mjd is None:
        return
    pos = np.stack([values["ra"], values["dec"]], axis=1)
    _, first, inverse = np.unique(pos, axis=0, return_index=True, return_inverse=True)
    inverse = inverse.ravel()
    later = np.flatnonzero(first[inverse] != np.arange(len(inverse)))
    if len(later):
        r, r0 = int(later[0]), int(first[inverse[later[0]]])
        raise InputError(
            f"{where} rows {r0 + 1} and {r + 1} have the same ra and dec (mjd {mjd[r0]:g} and "
            f"{mjd[r]:g}) but there is no id column: add one (or map it with --column id=NAME) "
            "so that the epochs of a star are merged"
        )


def _stars(table, roles, where):
    """(star index of each row, first row of each star, star ids), stars in order of appearance."""
    rows = np.arange(len(table))
    if "id" not in roles:
        return rows, rows, np.array([str(r + 1) for r in rows], dtype=str)
    ids = _read_ids(table[roles["id"]], roles["id"], where)
    uniq, first, inverse = np.unique(ids, return_index=True, return_inverse=True)
    order = np.argsort(first)
    rank = np.empty(len(uniq), dtype=int)
    rank[order] = np.arange(len(uniq))
    return rank[inverse.ravel()], first[order], uniq[order]


def _check_repeats(star, row, mjd, star_ids, roles, where):
    """Reject rows repeating (id, mjd), or an id without an mjd column; inputs sorted by star."""
    same = star[1:] == star[:-1]
    if mjd is not None:
        same &= mjd[1:] == mjd[:-1]
    if not same.any():
        return
    later = np.maximum(row[1:], row[:-1])[same]
    k = int(np.argmin(later))
    r, r0 = later[k], np.minimum(row[1:], row[:-1])[same][k]
    sid = star_ids[star[1:][same][k]]
    if mjd is None:
        raise InputError(
            f"{where} row {r + 1}, column '{roles['id']}': id '{sid}' repeats row {r0 + 1} and "
            "there is no mjd column to make them separate epochs"
        )
    raise InputError(
        f"{where} row {r + 1}, columns '{roles['id']}', '{roles['mjd']}': same id '{sid}' and "
        f"mjd {float(mjd[1:][same][k])!r} as row {r0 + 1}"
    )
