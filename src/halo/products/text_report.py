"""Human-readable summaries of a fit: the ECSV table and the text printed at the end of a run."""

from astropy.table import MaskedColumn, Table

from halo.core.fileio import write_ecsv
from halo.core.vocabulary import ESTIMATOR_NAMES, QUANTILE_KEYS, STARS_ONLY, estimator_key
from halo.products.units import UNIT_NOTE, quantity_unit
from halo.products.verdict_text import verdict_lines

__all__ = ["summary_rows", "write_summary_table", "format_summary"]


def summary_rows(summary):
    """(model, quantity, Q) for every quantile summary in ``summary``."""
    rows = []
    for model, m in summary["models"].items():
        for k, q in m["parameters"].items():
            rows.append((model, f"parameters.{k}", q))
        d = m["derived"]
        for k in (
            "m_half_msun",
            "r_half_3d_pc",
            "ml_half_v",
            "dark_mass_half_msun",
            "log_slope_half",
            "angle_2rh_deg",
            "r_jacobi_pc",
        ):
            if d.get(k):
                rows.append((model, f"derived.{k}", d[k]))
        for group in ("log10_j", "log10_d", "log10_j_untruncated", "log10_d_untruncated"):
            for angle, q in (d.get(group) or {}).items():
                rows.append((model, f"derived.{group}.{angle}", q))
    for name in ESTIMATOR_NAMES:
        q = summary["estimators"].get(name)
        if q:
            rows.append(("estimators", estimator_key(name), q))
    return rows


def write_summary_table(summary, path):
    """summary.ecsv: one row per (model, quantity) with the quantiles, convergence and evidence."""
    rows = summary_rows(summary)
    t = Table()
    t["model"] = [r[0] for r in rows]
    t["quantity"] = [r[1] for r in rows]
    t["unit"] = [quantity_unit(r[0], r[1], summary) or "" for r in rows]
    for q in QUANTILE_KEYS:
        t[q] = [float("nan") if r[2] is None or r[2].get(q) is None else r[2][q] for r in rows]
    conv = {m: v["converged"] for m, v in summary["models"].items()}
    # the closed-form estimators are not sampled: convergence does not apply (masked)
    t["converged"] = MaskedColumn(
        [bool(conv.get(r[0], False)) for r in rows], mask=[r[0] not in conv for r in rows]
    )
    t.meta["unit_note"] = UNIT_NOTE
    t.meta["version"] = summary["version"]
    t.meta["created"] = summary["created"]
    t.meta["catalogue_sha256"] = summary["catalogue"]["sha256"]
    t.meta["comparison"] = {
        m: v.get("vs_stars_only") for m, v in summary["models"].items() if "vs_stars_only" in v
    }
    t.meta["evidence"] = {m: v["evidence"] for m, v in summary["models"].items()}
    if summary.get("jd_conventions"):  # what "2rh" means, the run's halo truncation
        t.meta["jd_conventions"] = summary["jd_conventions"]
    write_ecsv(path, t)


def _fmt_q(q, fmt="{:.3g}"):
    if not q:
        return "-"
    med, lo, hi = q.get("median"), q.get("p16"), q.get("p84")
    if None in (med, lo, hi):
        return "undefined"
    return f"{fmt.format(med)} (+{fmt.format(hi - med)} / -{fmt.format(med - lo)})"


def _run_lines(summary):
    """The satellite, the global dispersion and estimators, the settings and the dispersion."""
    lines = []
    sat = summary["satellite"]
    cat = summary["catalogue"]
    lines.append(f"{sat['name']}: {cat['n_stars']} stars ({cat['n_rows']} rows)")
    est = summary["estimators"]
    if est.get("sigma_los_kms") is not None:
        err = est.get("sigma_los_err_kms")
        # an unresolved dispersion (maximum at sigma = 0) has no symmetric error
        err = "(error undefined: unresolved)" if err is None else f"+- {err:.2f}"
        lines.append(
            f"closed-form global dispersion {est['sigma_los_kms']:.2f} {err} km/s"
            f" ({est.get('n_stars_used', cat['n_stars'])} stars: {est.get('selection', 'all')});"
            f" estimators: Walker09 {_g(est.get('walker2009_msun'))}, Wolf10 "
            f"{_g(est.get('wolf2010_msun'))}, Errani18 {_g(est.get('errani2018_msun'))} Msun"
        )
    st = summary.get("settings", {})
    if "foreground" in st:
        lines.append(
            f"binaries {'on' if st.get('binaries') else 'off'}; foreground "
            f"{'on' if st.get('foreground') else 'off'} ({st.get('foreground_reason', '')})"
        )
    disp = summary.get("dispersion")
    if disp:
        lines.append(("" if disp["resolved"] else "*** ") + disp["message"])
    return lines


def _truncation_lines(m):
    """How the J and D above were computed: cut at each draw's Jacobi radius, or untruncated."""
    t, d = m.get("jd_truncation") or {}, m["derived"]
    if not t.get("truncated"):
        return ["  (J, D: untruncated haloes)"] if t else []
    unc_j = (d.get("log10_j_untruncated") or {}).get("0.5")
    unc_d = (d.get("log10_d_untruncated") or {}).get("0.5")
    med = [q.get("median") if q else None for q in (unc_j, unc_d)]
    text = ", ".join(f"{k} {v:.2f}" for k, v in zip(("J", "D"), med, strict=True) if v is not None)
    return [
        f"  (J, D: halo truncated at each draw's Jacobi radius, r_J "
        f"{_fmt_q(d.get('r_jacobi_pc'))} pc, Milky Way model {t.get('milky_way_model')};",
        f"   untruncated log10 {text} at 0.5 deg)",
    ]


def _headline_lines(m):
    """A model's mass, M/L, J and D at 0.5 deg, binary fraction and members."""
    lines = []
    d = m["derived"]
    lines.append(f"  M(<r_1/2)      {_fmt_q(d['m_half_msun'])} Msun")
    if d.get("ml_half_v"):
        lines.append(f"  M/L_V(<r_1/2)  {_fmt_q(d['ml_half_v'])}")
    if d.get("log10_j"):
        lines.append(f"  log10 J(0.5)   {_fmt_q(d['log10_j']['0.5'], '{:.2f}')} GeV^2 cm^-5")
        lines.append(f"  log10 D(0.5)   {_fmt_q(d['log10_d']['0.5'], '{:.2f}')} GeV cm^-2")
        lines += _truncation_lines(m)
    if m.get("binary_fraction"):
        lines.append(f"  binary fraction {_fmt_q(m['binary_fraction'], '{:.2f}')}")
    if m.get("effective_members") is not None:
        lines.append(f"  members        {m['effective_members']:.1f} (effective)")
    return lines


def _n(x, fmt=".2f"):
    """A number of the summary, or "undefined" where summary.json holds null (a NaN or an
    infinity, e.g. r-hat or Pareto k of a single chain)."""
    return "undefined" if x is None else format(x, fmt)


def _state(m, summary):
    """The convergence state beside a graded word: of the model and of stars-only."""
    ref = summary["models"].get(STARS_ONLY, {})
    bad = [n for n, x in ((None, m), (STARS_ONLY, ref)) if not x.get("converged", True)]
    if not bad:
        return "[both converged]"
    return "[NOT CONVERGED: " + ", ".join("this model" if n is None else n for n in bad) + "]"


def _comparison_lines(m, ul, summary):
    """A model's upper limits, evidence, comparison with stars only, LOO warning and problems."""
    lines = []
    if ul:
        lines.append(
            f"  M(<r_1/2) < {_n(ul.get('m_half_msun_upper95'), '.3g')} Msun (95% upper limit)"
        )
        if "log10_j_upper95" in ul:
            lines.append(
                f"  log10 J(0.5) < {_n(ul['log10_j_upper95'].get('0.5'))} (95% upper limit)"
            )
    ev = m["evidence"]
    lines.append(f"  ln Z           {_n(ev.get('log_z'))} +- {_n(ev.get('log_z_err'))}")
    c = m.get("vs_stars_only")
    if c:
        lines.append(
            f"  vs stars-only: ln B = {_n(c.get('ln_bayes_factor'))} +- "
            f"{_n(c.get('ln_bayes_factor_err'))}, delta ELPD = {_n(c.get('delta_elpd'), '.1f')} "
            f"+- {_n(c.get('delta_elpd_se'), '.1f')}: {c.get('verdict', '')} {_state(m, summary)}"
        )
    loo = m["loo"]
    if loo.get("n_pareto_k_above_threshold") or loo.get("pareto_k_max") is None:
        lines.append(
            f"  PSIS-LOO warning: {loo.get('n_pareto_k_above_threshold') or 0} stars with Pareto "
            f"k > {_n(loo.get('pareto_k_threshold'))} (max {_n(loo.get('pareto_k_max'))}): "
            "their LOO terms are unreliable"
        )
    for p in m.get("problems", []):
        lines.append(f"  *** {p}")
    return lines


def format_summary(summary, out_dir=None):
    """The closing text of ``halo fit``: per model headline numbers, comparison and warnings."""
    lines = verdict_lines(summary)
    lines += [""] if lines else []
    lines += _run_lines(summary)
    for name, m in summary["models"].items():
        flag = "" if m["converged"] else "   *** NOT CONVERGED ***"
        lines.append("")
        lines.append(f"model {name}{flag}")
        lines += _headline_lines(m)
        lines += _comparison_lines(m, (summary.get("upper_limits") or {}).get(name), summary)
    lines.append("")
    lines.append(
        "Bayes factors depend on the prior ranges (e.g. of M200): read them with the priors "
        "in `halo models`."
    )
    for w in summary.get("warnings", []):
        lines.append(f"warning: {w}")
    if out_dir is not None:
        lines.append("")
        lines.append(
            f"results in {out_dir}/: report.html, summary.json, summary.ecsv, members.ecsv, "
            "<model>/posterior.nc, figures/"
        )
    return "\n".join(lines)


def _g(x):
    return "-" if x is None else f"{x:.3g}"
