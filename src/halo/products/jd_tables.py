"""The tables of an export: jd_factors.ecsv (quantiles of log10 J and log10 D per model and cone,
with per-row ``converged`` and ``preferred`` flags, for likelihood code) and <model>_draws.ecsv
(log10 J and log10 D per posterior draw); the headline lines ``halo export`` prints.

Column names hold no dots (``log10_j_p2_5`` for the 2.5th percentile, ``log10_j_0_1`` for the
0.1 deg cone of a draws table), so that expression languages and SQL take them as they are.

The columns without a suffix are the reported values: J and D of the halo truncated at each
draw's Jacobi radius when the fit truncated (its default), else untruncated; the
``log10_*_untruncated_*`` columns beside them are the same draws untruncated (equal to the
reported ones when nothing was cut). Meta ``halo_truncation`` and ``jd_truncation`` say which."""

import math

import numpy as np

from halo import __version__
from halo.core.errors import InputError
from halo.core.fileio import write_ecsv
from halo.core.quantiles import quantiles
from halo.core.vocabulary import (
    ANGLE_2RH_CONVENTION,
    QUANTILE_KEYS,
    STANDARD_ANGLES,
    STARS_ONLY,
    angle_key,
    angle_keys,
)
from halo.products.jd_truncation import short_statement, truncation_of

__all__ = [
    "export_angles",
    "draws_table",
    "jd_rows",
    "jd_table",
    "preferred_model",
    "headline_lines",
    "fit_jd_table",
    "write_fit_jd_table",
    "column_key",
    "CONVENTIONS",
    "USAGE",
    "UPPER_PERCENTILE",
]

#: percentile of log10 J and log10 D given as the upper bound (column log10_*_upper95)
UPPER_PERCENTILE = 95.0

CONVENTIONS = (
    "J = Int dOmega Int_los rho^2 dl, D = Int dOmega Int_los rho dl in the exact cone of "
    "half-angle half_angle_deg (no small-angle approximation), each draw at its own distance."
)


def _set_truncation_meta(t, summary, names):
    """meta ``halo_truncation`` (the run's statement) and ``conventions``; the per-row flag is
    the column ``jd_truncated``, when the table has a ``model`` column."""
    entries = {m: truncation_of(summary, m) for m in names}
    t.meta["halo_truncation"] = short_statement(next(iter(entries.values())))
    t.meta["conventions"] = f"{CONVENTIONS} Truncation: see halo_truncation and jd_truncated."
    return entries


#: what the columns are for (the header's few lines)
USAGE = [
    "One row per model and cone; select converged & preferred for one row per cone.",
    "angle_label: half-angle in deg, or 2rh (see convention_2rh; half_angle_deg: its median).",
    "log10_*: quantiles, mean, std [dex] of log10 J, D; *_upper95: the 95% upper bound (quote "
    "it when the dispersion is not resolved); j_mean, d_mean: linear means.",
]


def column_key(label):
    """A label inside a column name, without dots: "p2.5" -> "p2_5", "0.1" -> "0_1"."""
    return str(label).replace(".", "_")


def _units():
    import astropy.units as u

    return (("j", u.GeV**2 / u.cm**5), ("d", u.GeV / u.cm**2))


def export_angles(angles_deg):
    """The standard cone half-angles and the extra ones (checked), one per printed label."""
    extra = [] if angles_deg is None else list(np.atleast_1d(np.asarray(angles_deg, dtype=float)))
    for a in extra:
        if not (math.isfinite(a) and 0.0 < a < 90.0):
            raise InputError(f"--angles-deg: cone half-angles must be in (0, 90) deg, got {a:g}")
    by_label = {}
    for a in sorted(set(STANDARD_ANGLES) | set(float(x) for x in extra)):
        by_label.setdefault(angle_key(a), a)
    return list(by_label.values())


def draws_table(name, draws, jd, summary):
    """<model>_draws.ecsv: chain, draw, distance, the 2rh angle and log10 J, log10 D per cone."""
    import astropy.units as u
    from astropy.table import Table

    t = Table()
    t["chain"] = draws["chain"]
    t["draw"] = draws["draw"]
    t["distance"] = draws["distance"]
    t["distance"].unit = u.kpc
    t["half_angle_2rh_deg"] = jd["angle_2rh_deg"]
    t["half_angle_2rh_deg"].unit = u.deg
    if "r_cut" in draws:  # the draw's truncation radius (its Jacobi radius; inf: none)
        t["r_cut_pc"] = np.asarray(draws["r_cut"], float) * 1e3
        t["r_cut_pc"].unit = u.pc
    for suffix in ("", "_untruncated"):
        for i, label in enumerate(jd["labels"]):
            for kind, unit in _units():
                col = f"log10_{kind}{suffix}_{column_key(label)}"
                t[col] = jd[f"log10_{kind}{suffix}"][:, i]
                t[col].unit = u.dex(unit)
    t.meta["model"] = name
    t.meta["converged"] = bool(summary["models"][name]["converged"])
    t.meta["columns"] = (
        "log10_j_<cone>, log10_d_<cone>: log10 J, D per draw (reported: see halo_truncation); "
        "log10_j_untruncated_<cone>, ...: the same draw untruncated; <cone> = half-angle in deg "
        "with '_' for '.', or 2rh (the cone of half_angle_2rh_deg); r_cut_pc: the draw's "
        "truncation radius (inf: none)"
    )
    t.meta["catalogue_sha256"] = summary["catalogue"]["sha256"]
    _set_truncation_meta(t, summary, [name])
    t.meta["convention_2rh"] = ANGLE_2RH_CONVENTION
    return t


def _summary_of(x):
    """(quantiles with NaN when nothing is finite, 95% upper bound, linear mean, finite count)."""
    ok = np.isfinite(x)
    qd = quantiles(x)
    if qd is None:
        return {k: math.nan for k in QUANTILE_KEYS}, math.nan, math.nan, 0
    upper = float(np.percentile(x[ok], UPPER_PERCENTILE))
    return qd, upper, float(np.mean(10.0 ** x[ok])), int(np.sum(ok))


def jd_rows(name, jd):
    """One row per cone of :func:`halo.products.jd_draws.jd_draws`'s output ``jd``."""
    rows = []
    for i, label in enumerate(jd["labels"]):
        row = {
            "model": name,
            "label": label,
            "half_angle": jd["half_angle_deg"][i],
        }
        counts = []
        for kind in ("j", "d"):
            qd, upper, mean, n = _summary_of(np.asarray(jd[f"log10_{kind}"][:, i], float))
            row[f"log10_{kind}"], row[f"{kind}_upper"], row[f"{kind}_mean"] = qd, upper, mean
            counts.append(n)
            unc = jd.get(f"log10_{kind}_untruncated", jd[f"log10_{kind}"])
            qd, upper, _, _ = _summary_of(np.asarray(unc[:, i], float))
            row[f"log10_{kind}_untruncated"], row[f"{kind}_untruncated_upper"] = qd, upper
        row["n"] = min(counts)
        rows.append(row)
    return rows


def _ln_b(entry):
    v = (entry.get("vs_stars_only") or {}).get("ln_bayes_factor")
    return None if v is None or not math.isfinite(v) else float(v)


def preferred_model(summary, names):
    """(preferred dark model, the rule as a sentence, {"next", "delta_ln_z", "err"} or None).

    The preferred model is the dark model with the largest ln Bayes factor against stars only
    (the same evidence for every model, so the largest evidence) among the converged ones, or
    among all when none converged; the first listed when the run has no evidence.
    """
    models = summary["models"]
    scored = [n for n in names if _ln_b(models[n]) is not None]
    if not scored:
        return names[0], "no evidence in the run: preferred is the first dark model listed", None
    conv = [n for n in scored if models[n].get("converged")]
    pool = sorted(conv or scored, key=lambda n: -_ln_b(models[n]))
    rule = "the converged dark model with the largest ln Bayes factor against stars only"
    if not conv:
        rule = rule.replace("converged dark", "dark") + " (none converged)"
    margin = None
    if len(pool) > 1:
        a, b = models[pool[0]], models[pool[1]]
        ea = (a.get("evidence") or {}).get("log_z_err") or 0.0
        eb = (b.get("evidence") or {}).get("log_z_err") or 0.0
        margin = {
            "next": pool[1],
            "delta_ln_z": _ln_b(a) - _ln_b(b),
            "err": float(math.hypot(ea, eb)),
        }
    return pool[0], rule, margin


def _add_quantile_columns(t, rows, kind, unit, suffix=""):
    import astropy.units as u

    for q in QUANTILE_KEYS:
        col = f"log10_{kind}{suffix}_{column_key(q)}"
        t[col] = np.array([r[f"log10_{kind}{suffix}"][q] for r in rows], float)
        t[col].unit = u.dex if q == "std" else u.dex(unit)
    col = f"log10_{kind}{suffix}_upper95"
    t[col] = np.array([r[f"{kind}{suffix}_upper"] for r in rows], float)
    t[col].unit = u.dex(unit)
    if not suffix:
        t[f"{kind}_mean"] = np.array([r[f"{kind}_mean"] for r in rows], float)
        t[f"{kind}_mean"].unit = unit


def jd_table(rows, summary, names, satellite):
    """jd_factors.ecsv: the rows of :func:`jd_rows` of the models ``names``, flagged, with the
    run's provenance and a few lines on what each column is for (meta ``usage``)."""
    import astropy.units as u
    from astropy.table import Table

    best, rule, margin = preferred_model(summary, list(names))
    conv = {m: bool(summary["models"][m]["converged"]) for m in names}
    t = Table()
    t["model"] = [r["model"] for r in rows]
    t["angle_label"] = [r["label"] for r in rows]
    t["half_angle_deg"] = np.array([r["half_angle"] for r in rows], float)
    t["half_angle_deg"].unit = u.deg
    t["converged"] = np.array([conv[r["model"]] for r in rows], bool)
    t["preferred"] = np.array([r["model"] == best for r in rows], bool)
    for kind, unit in _units():
        _add_quantile_columns(t, rows, kind, unit)
    for kind, unit in _units():  # the same draws untruncated, beside the reported values
        _add_quantile_columns(t, rows, kind, unit, "_untruncated")
    t["n_draws"] = np.array([r["n"] for r in rows], int)
    entries = _set_truncation_meta(t, summary, names)
    # True: log10_j, log10_d of this row are of the halo cut at each draw's Jacobi radius
    t["jd_truncated"] = np.array([bool(entries[r["model"]].get("truncated")) for r in rows])
    t.meta["usage"] = list(USAGE)
    t.meta["preferred_rule"] = rule
    if margin is not None:
        t.meta["preferred_over_next"] = margin
    resolved = (summary.get("dispersion") or {}).get("resolved")
    if resolved is not None:
        t.meta["dispersion_resolved"] = bool(resolved)
    t.meta["convention_2rh"] = ANGLE_2RH_CONVENTION
    t.meta["run"] = {
        "satellite": satellite.name,
        "ra_deg": satellite.ra_deg,
        "dec_deg": satellite.dec_deg,
        "catalogue_sha256": summary["catalogue"]["sha256"],
        "created": summary["created"],
        "version": summary["version"],
        "export_version": __version__,
    }
    return t


def fit_jd_table(summary, results, satellite):
    """jd_factors.ecsv of a fit, from the per-draw J and D its summary.json was made of
    (``results[name]["derived"]``: 0.1, 0.2, 0.5 deg and 2rh); None without a dark model."""
    names = [n for n in summary["models"] if n != STARS_ONLY]
    names = [n for n in names if "log10_j" in results[n]["derived"]]
    if not names:
        return None
    rows = []
    for n in names:
        der = results[n]["derived"]
        a = np.asarray(der["angle_2rh_deg"], float)
        jd = {
            "labels": angle_keys(),
            "half_angle_deg": list(STANDARD_ANGLES) + [float(np.median(a[np.isfinite(a)]))],
            "log10_j": np.asarray(der["log10_j"]),
            "log10_d": np.asarray(der["log10_d"]),
        }
        for kind in ("log10_j_untruncated", "log10_d_untruncated"):
            if kind in der:
                jd[kind] = np.asarray(der[kind])
        rows += jd_rows(n, jd)
    return jd_table(rows, summary, names, satellite)


def write_fit_jd_table(path, summary, results, satellite):
    """Write :func:`fit_jd_table` atomically to ``path`` (nothing when no model has a halo)."""
    table = fit_jd_table(summary, results, satellite)
    if table is not None:
        write_ecsv(path, table)


def headline_lines(table, label="0.5"):
    """One line per model: log10 J in the ``label`` cone, median +- std [dex], its 95% upper
    bound, the convergence state and whether the model is the preferred one."""
    lines = []
    cut = "jd_truncated" in table.colnames
    for row in table[table["angle_label"] == label]:
        state = "converged" if row["converged"] else "NOT CONVERGED"
        pref = ", preferred" if row["preferred"] else ""
        if cut:  # what the number is of: the halo cut at each draw's r_J, or the whole halo
            state = ("truncated at r_J, " if row["jd_truncated"] else "untruncated, ") + state
        lines.append(
            f"{row['model']}: log10 J({label} deg) = {row['log10_j_median']:.2f} +- "
            f"{row['log10_j_std']:.2f} dex (median +- std; 95% upper "
            f"{row['log10_j_upper95']:.2f}) [GeV^2 cm^-5], {state}{pref}"
        )
    return lines
