"""`halo forecast`: the future catalogues of every plan fitted on the batch runner, and per plan
the distributions of ln B, of the interval widths of M(<r_1/2) and J(0.5 deg) and of the binary
fraction; DIR/forecast.json, DIR/forecast.ecsv and DIR/lnb_vs_n.png.

A plan's P(|ln B| > 3) is the fraction of its finished fits with |ln B| > 3 (unconverged fits are
kept and listed: a loud flag, never silently dropped). The decisive plan is the first in the
order given whose P(|ln B| > 3) >= 0.9.
"""

import dataclasses
import json
import math
import sys
from pathlib import Path

import numpy as np
from astropy.table import Table

from halo.batch.forecast import write_forecast_mocks
from halo.batch.runner import _check_out_dir, run_batch
from halo.core.fileio import write_ecsv, write_json
from halo.results.summary import clean

__all__ = ["run_forecast", "format_forecast", "DECISIVE_LN_B", "DECISIVE_PROBABILITY"]

DECISIVE_LN_B, DECISIVE_PROBABILITY = 3.0, 0.9
_QS = (0.05, 0.16, 0.5, 0.84, 0.95)


def _width(q, log=False):
    if not q or q.get("p84") is None or q.get("p16") is None:
        return math.nan
    if log:
        return math.log10(q["p84"] / q["p16"]) if q["p16"] > 0 else math.nan
    return float(q["p84"] - q["p16"])


def _row(name, plan, rec, fits, model, n_now):
    row = {"name": name, "plan": plan.text, "n_stars": n_now + plan.n_add}
    row.update(epochs=plan.epochs, status=rec["status"], converged=bool(rec.get("converged")))
    m = (rec.get("models") or {}).get(model, {})
    row["ln_b"] = math.nan if m.get("ln_bayes_factor") is None else m["ln_bayes_factor"]
    row["m_half_width_dex"] = _width(m.get("m_half_msun"), log=True)
    row["log10_j_width_dex"] = _width((m.get("log10_j") or {}).get("0.5"))
    row["f_binary_median"] = math.nan
    summary = Path(fits) / name / "summary.json"
    if rec["status"] == "done" and summary.is_file():
        params = json.loads(summary.read_text())["models"][model]["parameters"]
        row["f_binary_median"] = (params.get("f_binary") or {}).get("median", math.nan)
    return row


def _dist(values):
    v = np.asarray([x for x in values if x is not None and np.isfinite(x)], dtype=float)
    if not v.size:
        return {"n": 0}
    return {"n": int(v.size), **{f"q{round(q * 100):02d}": float(np.quantile(v, q)) for q in _QS}}


def _plan_summary(plan, rows, details):
    mine = [r for r in rows if r["plan"] == plan.text and r["status"] == "done"]
    ln_b = np.array([r["ln_b"] for r in mine if np.isfinite(r["ln_b"])])
    p = float(np.mean(np.abs(ln_b) > DECISIVE_LN_B)) if ln_b.size else None
    return {
        "plan": plan.text,
        "n_add": plan.n_add,
        "second_epoch": plan.epochs,
        **details,
        "n_fits": len(mine),
        "ln_b": _dist(ln_b),
        "p_abs_ln_b_gt_3": p,
        "m_half_width_dex": _dist(r["m_half_width_dex"] for r in mine),
        "log10_j_0.5deg_width_dex": _dist(r["log10_j_width_dex"] for r in mine),
        "f_binary_median": _dist(r["f_binary_median"] for r in mine),
        "unconverged": [r["name"] for r in mine if not r["converged"]],
    }


def _failed(rows, records):
    return [
        {"name": r["name"], "error": rec.get("error")}
        for r, rec in zip(rows, records, strict=True)
        if r["status"] != "done"
    ]


def _figure(path, rows, plans, n_now, model):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from halo.core.fileio import atomic_path

    fig, ax = plt.subplots(figsize=(6, 4))
    for i, plan in enumerate(plans):
        mine = [r for r in rows if r["plan"] == plan.text and np.isfinite(r["ln_b"])]
        x = np.full(len(mine), n_now + plan.n_add) + (0.15 * i if plan.epochs else 0)
        marker = "s" if plan.epochs else "o"
        ax.plot(x, [r["ln_b"] for r in mine], marker, alpha=0.6, label=f"plan {plan.text}")
    for y in (-DECISIVE_LN_B, DECISIVE_LN_B):
        ax.axhline(y, color="0.5", ls="--", lw=1)
    ax.set_xlabel("stars in the future catalogue (members + field)")
    ax.set_ylabel(f"ln B ({model} vs stars only)")
    ax.set_title(f"forecast from the current posterior ({model})", fontsize=10)
    ax.legend(fontsize=8)
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=120)
    plt.close(fig)


def run_forecast(
    run_dir,
    out_dir,
    plans,
    *,
    settings,
    n_draws=20,
    model=None,
    scheduler=None,
    workers=None,
    progress=True,
    command=None,
    **options,
):
    """Forecast ``plans`` (:class:`halo.batch.forecast.Plan`) for fit folder ``run_dir``;
    ``options`` (resimulate, catalogue, epoch_stars, new_errors) go to
    :func:`halo.batch.forecast.write_forecast_mocks`; returns the forecast.json record."""
    out_dir = _check_out_dir(Path(out_dir))
    seed = settings.seed
    manifest, meta, entries = write_forecast_mocks(
        run_dir, out_dir, plans, n_draws, model, seed, **options
    )
    if progress:
        print(f"forecast: fitting {len(entries)} future catalogues", file=sys.stderr)
    settings = dataclasses.replace(settings, progress=False)
    fits = out_dir / "fits"
    outcome = run_batch(
        manifest, fits, scheduler=scheduler, workers=workers, settings=settings, progress=progress
    )
    n_now = meta["n_stars_now"]
    details = meta.pop("plan_details")
    rows = [
        _row(n, p, rec, fits, meta["model"], n_now)
        for (n, p), rec in zip(entries, outcome.records, strict=True)
    ]
    per_plan = [_plan_summary(p, rows, details[p.text]) for p in plans]
    decisive = next(
        (s["plan"] for s in per_plan if (s["p_abs_ln_b_gt_3"] or 0) >= DECISIVE_PROBABILITY), None
    )
    result = {
        "command": command,
        "run": str(run_dir),
        **meta,
        "draws_per_plan": n_draws,
        "settings": settings.as_dict(),
        "plans": per_plan,
        "decisive_plan": decisive,
        "decisive_rule": "first plan with P(|ln B| > 3) >= 0.9",
        "failed": _failed(rows, outcome.records),
        "entries": rows,
    }
    write_json(out_dir / "forecast.json", clean(result))
    write_ecsv(
        out_dir / "forecast.ecsv", Table(rows=[list(r.values()) for r in rows], names=list(rows[0]))
    )
    _figure(out_dir / "lnb_vs_n.png", rows, plans, n_now, meta["model"])
    return result


def _plan_line(s):
    """What a plan observes: its dates and stars (None for a plan of new stars only)."""
    dates = ", ".join(f"{d:.2f}" for d in s.get("dates_mjd") or [])
    if not s["second_epoch"]:
        return f"    new stars observed at MJD {dates}" if dates else None
    stars = s["epoch_stars"]
    who = "all stars" if stars == "all" else f"{len(stars)} star(s): {', '.join(stars[:8])}"
    who += ", ..." if stars != "all" and len(stars) > 8 else ""
    also = f"; {s['n_add']} new stars on these dates" if s["n_add"] else ""
    return f"    new epochs at MJD {dates} for {who}{also}"


def format_forecast(result, out_dir):
    kept = result.get("catalogue")
    how = f"keeping the observed stars of {kept}" if kept else "whole catalogues resimulated"
    lines = [
        f"forecast from {result['run']} ({result['model']} vs stars only, "
        f"{result['n_stars_now']} stars now; {how}):"
    ]
    for s in result["plans"]:
        lb, p = s["ln_b"], s["p_abs_ln_b_gt_3"]
        med = f"{lb['q50']:.2f} [{lb['q16']:.2f}, {lb['q84']:.2f}]" if lb.get("n") else "n/a"
        prob = "n/a" if p is None else f"{p:.2f}"
        lines.append(f"  plan {s['plan']}: ln B {med}, P(|ln B| > 3) = {prob} ({s['n_fits']} fits)")
        what = _plan_line(s)
        lines += [what] if what else []
        if s["unconverged"]:
            lines.append(f"    WARNING: NOT CONVERGED: {', '.join(s['unconverged'])}")
    if any(s["second_epoch"] and not s["dates_given"] for s in result["plans"]):
        lines.append(f"  (a bare 'epochs': {result['bare_epoch_rule']})")
    d = result["decisive_plan"]
    lines.append(f"first plan reaching |ln B| > 3 with 90% probability: {d or 'none'}")
    lines += [f"FAILED {f['name']}: {f['error']}" for f in result["failed"]]
    lines.append(
        f"results in {out_dir}/: forecast.json, forecast.ecsv, lnb_vs_n.png, mocks/, fits/"
    )
    return "\n".join(lines)
