"""Metallicities of a mock: members' [Fe/H] from a Gaussian of known mean and intrinsic spread,
field stars' from a broad Gaussian, each row (epoch) measured with its own error.

The draws use their own random stream (``numpy.random.default_rng([seed, FEH_STREAM])``), so
that adding metallicities to a mock leaves its positions, velocities, binaries and field stars
exactly as they were.
"""

import math
from typing import NamedTuple

import numpy as np

from halo.core.errors import InputError

__all__ = [
    "FEH_STREAM",
    "FIELD_FEH",
    "MockMetallicity",
    "metallicity_options",
    "with_metallicities",
]

#: second word of the metallicity draws' seed (their stream is independent of the kinematics')
FEH_STREAM = 0xFE4
#: (mean, sigma) [dex] of the field stars' [Fe/H]: the broad stand-in the fit assumes
#: (halo.inference.metallicity.FIELD_FEH; common practice)
FIELD_FEH = (-1.0, 1.0)


class MockMetallicity(NamedTuple):
    """What a mock's metallicities are drawn from [dex]: the members' ``mean`` and intrinsic
    ``spread``, each measurement's error uniform in ``error_range``, the ``fraction`` of stars
    with a measured [Fe/H] (the others NaN: not measured), the ``field`` (mean, sigma)."""

    mean: float = -2.0
    spread: float = 0.3
    error_range: tuple = (0.1, 0.3)
    fraction: float = 1.0
    field: tuple = FIELD_FEH

    def checked(self, where="mock"):
        """A copy with floats; InputError (naming ``where``) on a non-physical value."""
        lo, hi = (float(v) for v in self.error_range)
        mean, spread, fraction = float(self.mean), float(self.spread), float(self.fraction)
        f_mean, f_sigma = (float(v) for v in self.field)
        if not (math.isfinite(mean) and -8.0 <= mean <= 2.0):
            raise InputError(f"{where}: mean [Fe/H] must be in [-8, 2] dex, got {self.mean!r}")
        if not (math.isfinite(spread) and spread >= 0):
            raise InputError(f"{where}: [Fe/H] spread must be >= 0 dex, got {self.spread!r}")
        if not (math.isfinite(hi) and 0 < lo <= hi):
            raise InputError(
                f"{where}: [Fe/H] errors must be 0 < low <= high dex, got {self.error_range!r}"
            )
        if not 0.0 < fraction <= 1.0:
            raise InputError(f"{where}: [Fe/H] fraction must be in (0, 1], got {self.fraction!r}")
        if not (math.isfinite(f_mean) and math.isfinite(f_sigma) and f_sigma > 0):
            raise InputError(
                f"{where}: field [Fe/H] (mean, sigma > 0) expected, got {self.field!r}"
            )
        return MockMetallicity(mean, spread, (lo, hi), fraction, (f_mean, f_sigma))

    def truth(self):
        return {
            "mean_feh": self.mean,
            "spread_dex": self.spread,
            "error_range_dex": list(self.error_range),
            "fraction_measured": self.fraction,
            "field_feh_dex": list(self.field),
            "per_epoch": True,
            "stream": [FEH_STREAM],
        }


def metallicity_options(feh=None, feh_errors="0.1,0.3"):
    """``halo mock --feh MEAN,SPREAD [--feh-errors LO,HI]`` as a :class:`MockMetallicity`, or
    None without ``--feh``; InputError naming the flag on bad text."""
    if feh is None:
        return None
    pairs = []
    for text, flag in ((feh, "--feh"), (feh_errors, "--feh-errors")):
        try:
            values = [float(v) for v in str(text).split(",")]
        except ValueError:
            values = []
        if len(values) != 2 or not all(math.isfinite(v) for v in values):
            what = "MEAN,SPREAD" if flag == "--feh" else "LO,HI"
            raise InputError(f"{flag}: expected {what} in dex, got {text!r}")
        pairs.append(values)
    (mean, spread), err = pairs
    try:
        return MockMetallicity(mean, spread, tuple(err)).checked()
    except InputError as exc:
        raise InputError(str(exc).replace("mock:", "--feh/--feh-errors:", 1)) from None


def with_metallicities(table, truth, n_members, options, seed):
    """(``table`` with ``feh`` and ``feh_err`` columns [dex, no unit attached], per-member true
    [Fe/H]).

    Members are the rows with ``id`` < ``n_members`` (the field stars' ids follow them). Each
    star's true [Fe/H] is drawn once (members N(mean, spread), field N(field mean, sigma)); each
    of its rows is a measurement with an error uniform in ``error_range`` and Gaussian noise. A
    ``fraction`` of the stars, at random, is measured; the others are NaN on every row. Records
    ``truth["metallicity"]``.
    """
    opts = options.checked()
    rng = np.random.default_rng([int(seed), FEH_STREAM])
    ids = np.asarray(table["id"], dtype=int)
    n_all = int(ids.max()) + 1
    member_true = opts.mean + opts.spread * rng.standard_normal(n_members)
    field_true = opts.field[0] + opts.field[1] * rng.standard_normal(max(n_all - n_members, 0))
    true = np.concatenate([member_true, field_true])
    measured = rng.uniform(size=n_all) < opts.fraction
    err = rng.uniform(opts.error_range[0], opts.error_range[1], len(ids))
    feh = true[ids] + err * rng.standard_normal(len(ids))
    seen = measured[ids]
    table["feh"] = np.where(seen, feh, np.nan)
    table["feh_err"] = np.where(seen, err, np.nan)
    # no unit on the columns: FITS and VOTable have no "dex"; the reader takes them as dex
    table["feh"].description = "[Fe/H] [dex] (NaN: not measured)"
    table["feh_err"].description = "1-sigma error of feh [dex]"
    truth["metallicity"] = opts.truth()
    return table, member_true
