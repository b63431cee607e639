"""The tables of an export: jd_factors.ecsv (quantiles of log10 J and log10 D per model and cone)
and <model>_draws.ecsv (log10 J and log10 D per posterior draw)."""

import math

import numpy as np

from halo import __version__
from halo.core.errors import InputError
from halo.core.quantiles import quantiles
from halo.core.vocabulary import (
    HALO_TRUNCATION,
    JD_CONVENTIONS,
    QUANTILE_KEYS,
    STANDARD_ANGLES,
    angle_key,
)

__all__ = ["export_angles", "draws_table", "jd_rows", "jd_table", "CONVENTIONS"]

CONVENTIONS = (
    "J(theta) = Int_cone dOmega Int_los rho^2 dl and D(theta) = Int_cone dOmega Int_los rho dl "
    "in a cone of half-angle angle_deg around the satellite centre (solid angle "
    "2 pi (1 - cos theta)), "
    "computed for the exact cone (no small-angle approximation). Each posterior draw uses its own "
    "distance, so the distance uncertainty is propagated. log10_* columns summarise log10 J or "
    "log10 D (median, 16/84 and 2.5/97.5 percentiles, mean and standard deviation of log10, "
    "i.e. a log-normal summary); j_mean and d_mean are posterior means of J and D (linear). "
    + HALO_TRUNCATION
)


def _units():
    import astropy.units as u

    return (("j", u.GeV**2 / u.cm**5), ("d", u.GeV / u.cm**2))


def export_angles(angles_deg):
    """The standard cone half-angles and the extra ones (checked), one per printed label."""
    extra = [] if angles_deg is None else list(np.atleast_1d(np.asarray(angles_deg, dtype=float)))
    for a in extra:
        if not (math.isfinite(a) and 0.0 < a < 90.0):
            raise InputError(f"angles_deg: cone half-angles must be in (0, 90) deg, got {a:g}")
    by_label = {}
    for a in sorted(set(STANDARD_ANGLES) | set(float(x) for x in extra)):
        by_label.setdefault(angle_key(a), a)
    return list(by_label.values())


def draws_table(name, draws, jd, angles, summary):
    """<model>_draws.ecsv: chain, draw, distance and log10 J, log10 D per cone for every draw."""
    import astropy.units as u
    from astropy.table import Table

    t = Table()
    t["chain"] = draws["chain"]
    t["draw"] = draws["draw"]
    t["distance"] = draws["distance"]
    t["distance"].unit = u.kpc
    for i, a in enumerate(angles):
        for kind, unit in _units():
            col = f"log10_{kind}_{angle_key(a)}"
            t[col] = jd[f"log10_{kind}"][:, i]
            t[col].unit = u.dex(unit)
            t[col].description = f"log10 {kind.upper()} in a cone of {angle_key(a)} deg"
    t.meta["model"] = name
    t.meta["catalogue_sha256"] = summary["catalogue"]["sha256"]
    t.meta["converged"] = bool(summary["models"][name]["converged"])
    t.meta["conventions"] = CONVENTIONS
    t.meta["halo_truncation"] = JD_CONVENTIONS["halo_truncation"]
    return t


def jd_rows(name, jd, angles):
    """One row per cone: quantiles of log10 J and log10 D, linear means and the finite draws."""
    rows = []
    for i, a in enumerate(angles):
        row = {"model": name, "angle": a}
        n_ok = 0
        for kind in ("j", "d"):
            x = jd[f"log10_{kind}"][:, i]
            ok = np.isfinite(x)
            n_ok = int(np.sum(ok)) if kind == "j" else min(n_ok, int(np.sum(ok)))
            qd = quantiles(x)
            row[f"log10_{kind}"] = {k: math.nan for k in QUANTILE_KEYS} if qd is None else qd
            row[f"{kind}_mean"] = float(np.mean(10.0 ** x[ok])) if ok.any() else math.nan
        row["n"] = n_ok
        rows.append(row)
    return rows


def jd_table(rows, angles, summary, specs, satellite):
    """jd_factors.ecsv: the rows of :func:`jd_rows` of every model, with the run's provenance."""
    import astropy.units as u
    from astropy.table import Table

    t = Table()
    t["model"] = [r["model"] for r in rows]
    t["angle_deg"] = np.array([r["angle"] for r in rows], float)
    t["angle_deg"].unit = u.deg
    t["angle_deg"].description = "cone half-angle"
    for kind, unit in _units():
        lin = f"{kind}_mean"
        for q in QUANTILE_KEYS:
            col = f"log10_{kind}_{q}"
            t[col] = np.array([r[f"log10_{kind}"][q] for r in rows], float)
            t[col].unit = u.dex(unit)
            t[col].description = f"{q} of log10 {kind.upper()} over the posterior draws"
        t[lin] = np.array([r[lin] for r in rows], float)
        t[lin].unit = unit
        t[lin].description = f"posterior mean of {kind.upper()} (linear)"
    t["n_draws"] = np.array([r["n"] for r in rows], int)
    t["n_draws"].description = "posterior draws with finite values"
    t.meta["satellite"] = satellite.name
    t.meta["ra_deg"] = satellite.ra_deg
    t.meta["dec_deg"] = satellite.dec_deg
    t.meta["catalogue_sha256"] = summary["catalogue"]["sha256"]
    t.meta["created"] = summary["created"]
    t.meta["version"] = summary["version"]
    t.meta["export_version"] = __version__
    t.meta["converged"] = {m: bool(summary["models"][m]["converged"]) for m in specs}
    t.meta["angles_deg"] = [float(a) for a in angles]
    t.meta["conventions"] = CONVENTIONS
    t.meta["halo_truncation"] = JD_CONVENTIONS["halo_truncation"]
    return t
