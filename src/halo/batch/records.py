"""The batch tables: DIR/batch.json (one record per manifest entry) and DIR/batch.ecsv (one row
per entry and model), both rewritten atomically after every finished entry.

A record: ``name``, ``status`` ("done", "failed" or "pending": not run yet), ``error`` (one line
or null), ``hash`` (the input digests of :func:`halo.batch.hashing.entry_hash`), ``folder``,
``wall_time_s`` (the worker's time for the entry), ``attempts`` (runs of this entry, reruns
included), ``worker``, ``converged`` (every model of the entry), ``n_stars`` and ``models``:
{model: {converged, rhat_max, ess_bulk_min, divergences, m_half_msun: Q, log10_j: {angle: Q},
log10_d: {angle: Q}, ln_bayes_factor, ln_bayes_factor_err, delta_elpd}}, read from the entry's
summary.json (Q the quantile summary of the design notes; angles 0.1, 0.2, 0.5 deg and 2rh).
"""

import json
import math

from astropy.table import Table

from halo.core.fileio import write_ecsv, write_json
from halo.core.vocabulary import JD_CONVENTIONS, QUANTILE_KEYS, STARS_ONLY, angle_keys
from halo.results.summary import clean

__all__ = ["headline", "write_batch", "read_batch", "table_rows", "BATCH_JSON", "BATCH_ECSV"]

BATCH_JSON, BATCH_ECSV = "batch.json", "batch.ecsv"
_DIAGNOSTICS = ("rhat_max", "ess_bulk_min", "divergences")
_COMPARISON = ("ln_bayes_factor", "ln_bayes_factor_err", "delta_elpd")


def _model_headline(m):
    derived, diag, vs = m.get("derived", {}), m.get("diagnostics", {}), m.get("vs_stars_only", {})
    out = {"converged": bool(m.get("converged", False))}
    out.update({k: diag.get(k) for k in _DIAGNOSTICS})
    out["m_half_msun"] = derived.get("m_half_msun")
    # whether the J and D below are truncated at each draw's Jacobi radius (None: no halo)
    out["jd_truncated"] = (m.get("jd_truncation") or {}).get("truncated")
    for kind in ("log10_j", "log10_d"):
        if derived.get(kind):
            out[kind] = {a: derived[kind][a] for a in angle_keys() if a in derived[kind]}
    out.update({k: vs[k] for k in _COMPARISON if k in vs})
    return out


def headline(summary):
    """The numbers a batch keeps of one fit's summary (dict of summary.json)."""
    models = {n: _model_headline(m) for n, m in summary["models"].items()}
    return {
        "converged": all(m["converged"] for m in models.values()),
        "n_stars": summary.get("catalogue", {}).get("n_stars"),
        "models": models,
    }


def _columns():
    """(name, description) of the batch.ecsv columns, in order."""
    cols = [
        ("name", "manifest entry"),
        ("status", "done, failed or pending (not run yet)"),
        ("model", "model of this row (empty when the entry has no result)"),
        ("converged", "this model's chains converged (never trust a row where false)"),
        ("entry_converged", "every model of the entry converged (ln B rests on two of them)"),
        ("rhat_max", "largest split r-hat"),
        ("ess_bulk_min", "smallest bulk effective sample size"),
        ("divergences", "divergent transitions"),
    ]
    cols += [(f"m_half_msun_{q}", f"M(<r_1/2) {q} [Msun]") for q in QUANTILE_KEYS]
    for kind, unit in (("log10_j", "GeV^2 cm^-5"), ("log10_d", "GeV cm^-2")):
        for a in angle_keys():
            where = "2 r_h" if a == "2rh" else f"{a} deg"
            text = f"{kind} [{unit}] within {where}"
            cols += [(f"{kind}_{a}_{q}", f"{text}: {q}") for q in QUANTILE_KEYS]
    cols += [
        ("jd_truncated", "1: log10_j, log10_d truncated at each draw's Jacobi radius; 0: not"),
        ("ln_b", "ln Bayes factor against stars only"),
        ("ln_b_err", "its bridge-sampling error"),
        ("delta_elpd", "ELPD (LOO) difference against stars only"),
        ("wall_time_s", "the worker's wall time for the entry [s]"),
        ("attempts", "runs of this entry, reruns included"),
        ("error", "one-line error of a failed entry"),
        ("hash", "sha256 of the entry's inputs (catalogue, satellite, models, settings)"),
    ]
    return cols


def _q(value, q):
    return math.nan if not value or value.get(q) is None else float(value[q])


def _num(value):
    return math.nan if value is None else float(value)


def _row(rec, model, m):
    row = {"name": rec["name"], "status": rec["status"], "model": model}
    row["converged"] = bool(m.get("converged", False))
    row["entry_converged"] = bool(rec.get("converged", False))
    row.update({k: _num(m.get(k)) for k in _DIAGNOSTICS})
    row.update({f"m_half_msun_{q}": _q(m.get("m_half_msun"), q) for q in QUANTILE_KEYS})
    for kind in ("log10_j", "log10_d"):
        per = m.get(kind) or {}
        for a in angle_keys():
            row.update({f"{kind}_{a}_{q}": _q(per.get(a), q) for q in QUANTILE_KEYS})
    row["jd_truncated"] = _num(m.get("jd_truncated"))
    row["ln_b"] = _num(m.get("ln_bayes_factor"))
    row["ln_b_err"] = _num(m.get("ln_bayes_factor_err"))
    row["delta_elpd"] = _num(m.get("delta_elpd"))
    row["wall_time_s"] = _num(rec.get("wall_time_s"))
    row["attempts"] = int(rec.get("attempts", 0))
    row["error"] = rec.get("error") or ""
    row["hash"] = (rec.get("hash") or {}).get("entry", "")
    return row


def table_rows(records):
    """batch.ecsv rows: each entry's models in its order (stars-only last), or one empty row."""
    rows = []
    for rec in records:
        models = rec.get("models") or {}
        names = [n for n in models if n != STARS_ONLY] + [n for n in models if n == STARS_ONLY]
        if rec["status"] != "done" or not names:
            rows.append(_row(rec, "", {}))
        rows += [_row(rec, n, models[n]) for n in names] if rec["status"] == "done" else []
    return rows


def write_batch(out_dir, records):
    """Write DIR/batch.json and DIR/batch.ecsv atomically (JSON first: the record a rerun reads)."""
    write_json(out_dir / BATCH_JSON, clean(records))
    cols = _columns()
    rows = table_rows(records)
    table = Table({c: [r[c] for r in rows] for c, _ in cols})  # every entry has a row
    for c, text in cols:
        table[c].description = text
    table.meta["conventions"] = {
        **JD_CONVENTIONS,
        "halo_truncation": (
            "per entry and model, column jd_truncated: 1 when J and D are truncated at each "
            "posterior draw's own Jacobi radius (the fits' default; the entry's summary.json "
            "jd_conventions.halo_truncation names the Milky Way model and where the tides are "
            "judged), 0 when untruncated (no tidal radius)"
        ),
    }
    table.meta["note"] = "one row per entry and model; NaN where a value does not apply"
    write_ecsv(out_dir / BATCH_ECSV, table)


def read_batch(out_dir):
    """{name: record} of an earlier DIR/batch.json ({} when there is none or it is unreadable:
    every entry then runs again, which loses nothing)."""
    path = out_dir / BATCH_JSON
    try:
        records = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
    if not isinstance(records, list):
        return {}
    return {r["name"]: r for r in records if isinstance(r, dict) and isinstance(r.get("name"), str)}
