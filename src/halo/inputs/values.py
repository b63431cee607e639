"""Values of one catalogue column: numbers in the role's unit and star ids, checked, with
one-line errors naming the file, the 1-based data row and the column."""

import math

import astropy.units as u
import numpy as np
from astropy.time import Time

from halo.core.errors import InputError

__all__ = ["fail", "numbers", "check_range", "star_ids"]


def fail(where, row, name, text):
    """Raise the one-line InputError of a bad value at 0-based ``row`` of column ``name``."""
    raise InputError(f"{where} row {row + 1}, column '{name}': {text}")


def _text(x):
    return x.decode(errors="replace") if isinstance(x, bytes) else str(x)


def _floats(col, name, where, missing_ok=False):
    """(float64 values of a column, the unit it carries or None); InputError on a missing,
    non-numeric or non-finite value (``missing_ok``: a missing value or NaN is NaN, not an
    error; infinities still are)."""
    unit = None
    if isinstance(col, Time):
        data, unit = col.mjd, u.day
    elif isinstance(col, u.Quantity):
        data, unit = col.value, col.unit
    else:
        data, unit = col, getattr(col, "unit", None)
    mask = np.ma.getmaskarray(data)
    raw = np.asarray(np.ma.getdata(data))
    if raw.ndim != 1:
        raise InputError(f"{where} column '{name}' must hold one value per row")
    if raw.dtype.kind in "iuf":
        vals = raw.astype(np.float64)
        if missing_ok:  # a missing value is NaN; only infinities are errors
            vals[mask] = np.nan
            mask = np.zeros_like(mask)
        with np.errstate(invalid="ignore"):
            bad = mask | ~np.isfinite(vals)
        if missing_ok:
            bad &= ~np.isnan(vals)
        if bad.any():
            i = int(np.argmax(bad))
            fail(where, i, name, "missing value" if mask[i] else f"not finite ({float(vals[i])!r})")
        return vals, unit
    if raw.dtype.kind == "b":
        raise InputError(f"{where} column '{name}' holds true/false values, not numbers")
    vals = np.empty(len(raw))
    for i, x in enumerate(raw):
        if missing_ok and (mask[i] or not _text(x).strip()):
            vals[i] = np.nan
            continue
        if mask[i]:
            fail(where, i, name, "missing value")
        try:
            vals[i] = float(x.decode() if isinstance(x, bytes) else x)
        except (TypeError, ValueError, UnicodeDecodeError):
            fail(where, i, name, f"not a number ({str(x)[:40]!r})")
        if not (math.isfinite(vals[i]) or (missing_ok and math.isnan(vals[i]))):
            fail(where, i, name, f"not finite ({float(vals[i])!r})")
    return vals, unit


def numbers(col, role, name, where, target, missing_ok=False):
    """(float64 values in ``target`` units (astropy), whether the column carried a unit);
    ``missing_ok``: missing values and NaN come out as NaN (a value not measured)."""
    vals, unit = _floats(col, name, where, missing_ok)
    if unit is None or unit == u.dimensionless_unscaled:
        return vals, False
    if role == "mjd" and str(unit).lower() in ("mjd", "day", "days", "d"):
        return vals, True
    try:
        vals = u.Unit(unit).to(target, vals)
    except (u.UnitsError, ValueError, TypeError):
        raise InputError(
            f"{where} column '{name}' ({role}) has unit '{unit}', which does not convert to "
            f"{target.to_string() or 'a plain number'}"
        ) from None
    return np.asarray(vals, dtype=np.float64), True


def check_range(vals, ok, text, name, where):
    """InputError at the first value where ``ok`` is False."""
    if not ok.all():
        i = int(np.argmax(~ok))
        fail(where, i, name, f"{text}, got {vals[i]:.10g}")


def star_ids(col, name, where):
    """Star ids as stripped strings; InputError on a missing one."""
    mask = np.ma.getmaskarray(col)
    raw = np.asarray(np.ma.getdata(col))
    if raw.ndim != 1:
        raise InputError(f"{where} column '{name}' must hold one value per row")
    out = []
    for i, x in enumerate(raw):
        s = "" if mask[i] else (x.decode(errors="replace") if isinstance(x, bytes) else str(x))
        s = s.strip()
        if not s:
            fail(where, i, name, "missing id")
        out.append(s)
    return np.array(out, dtype=str)
