"""The model sections of the fit report (headline numbers, evidence, LOO, all parameters) and
the closed-form estimators."""

from halo.products.report_cells import (
    ANGLES,
    D_UNIT,
    J_UNIT,
    MSUN,
    RHALF,
    esc,
    fixed,
    is_num,
    kv_table,
    plain_row,
    q_cells,
    q_row,
    sig_figs,
    slugify,
)
from halo.products.report_verdict import nc_mark

__all__ = ["model_section", "estimators"]


_HEAD = (
    "<tr><th>quantity</th><th>median</th><th>68% interval</th><th>95% interval</th>"
    "<th>unit</th></tr>"
)


def _derived_rows(slug, d):
    """Rows of the derived quantities: M(<r_1/2), r_1/2, M/L, and J and D per angle."""
    rows = [
        q_row(f"{slug}-m_half_msun", f"M(&lt;{RHALF})", d.get("m_half_msun"), MSUN),
        q_row(f"{slug}-r_half_3d_pc", f"{RHALF} (3D)", d.get("r_half_3d_pc"), "pc"),
        q_row(
            f"{slug}-ml_half_v",
            f"M/L<sub>V</sub>(&lt;{RHALF})",
            d.get("ml_half_v"),
            f"{MSUN}/L<sub>&#9737;,V</sub>",
        ),
    ]
    for group, sym, unit in (("log10_j", "J", J_UNIT), ("log10_d", "D", D_UNIT)):
        qs = d.get(group)
        if not isinstance(qs, dict):
            continue
        for key, label in ANGLES:
            rows.append(
                q_row(
                    f"{slug}-{group}-{key}",
                    f"log<sub>10</sub> {sym}({label})",
                    qs.get(key),
                    f"log<sub>10</sub> {unit}",
                    "f2",
                )
            )
        ang = d.get("angle_2rh_deg") or {}
        at = f" = {fixed(ang.get('median'), 3)}&deg;" if is_num(ang.get("median")) else ""
        rows.append(
            q_row(
                f"{slug}-{group}-2rh",
                f"log<sub>10</sub> {sym}(2 R<sub>e</sub>/d{at})",
                qs.get("2rh"),
                f"log<sub>10</sub> {unit}",
                "f2",
            )
        )
    return rows


def _fit_rows(slug, name, m, summary):
    """Rows of the fit itself: binary fraction, members, evidence, LOO and the upper limit."""
    rows = []
    if m.get("binary_fraction") is not None:
        rows.append(
            q_row(f"{slug}-binary_fraction", "binary fraction", m["binary_fraction"], "", "f3")
        )
    rows.append(
        plain_row(
            f"{slug}-effective_members",
            "effective members",
            fixed(m.get("effective_members"), 1),
            "stars (sum of membership probabilities)",
        )
    )
    ev = m["evidence"]
    rows.append(
        plain_row(
            f"{slug}-evidence",
            "evidence ln Z",
            f"{fixed(ev.get('log_z'))} &plusmn; {fixed(ev.get('log_z_err'))}",
            esc(ev.get("method", "")),
        )
    )
    loo = m["loo"]
    rows.append(
        plain_row(
            f"{slug}-loo",
            "PSIS-LOO ELPD",
            f"{fixed(loo.get('elpd'))} &plusmn; {fixed(loo.get('se'))}",
            f"max Pareto k {fixed(loo.get('pareto_k_max'))}",
        )
    )
    ul = (summary.get("upper_limits") or {}).get(name)
    if isinstance(ul, dict) and is_num(ul.get("m_half_msun_upper95")):
        rows.append(
            plain_row(
                f"{slug}-m_half_upper95",
                f"M(&lt;{RHALF}) 95% upper limit",
                sig_figs(ul["m_half_msun_upper95"]),
                MSUN,
            )
        )
    return rows


def _truncation_rows(slug, d):
    """The Jacobi radius and the untruncated J and D at 0.5 deg, beside the reported ones."""
    rows = []
    if isinstance(d.get("r_jacobi_pc"), dict):
        rows.append(
            q_row(f"{slug}-r_jacobi_pc", "Jacobi radius r<sub>J</sub>", d["r_jacobi_pc"], "pc")
        )
    for group, sym, unit in (("log10_j", "J", J_UNIT), ("log10_d", "D", D_UNIT)):
        q = (d.get(f"{group}_untruncated") or {}).get("0.5")
        if isinstance(q, dict):
            label = f"log<sub>10</sub> {sym}(0.5&deg;), untruncated"
            rows.append(
                q_row(f"{slug}-{group}_untruncated-0.5", label, q, f"log<sub>10</sub> {unit}", "f2")
            )
    return rows


def _truncation_note(slug, m):
    """The run's statement of how J and D were computed (truncated at r_J, or untruncated)."""
    t = m.get("jd_truncation")
    if not isinstance(t, dict) or not t.get("statement"):
        return []
    return [f'<p class="note" id="{slug}-jd-truncation">J and D: {esc(t["statement"])}</p>']


def _loo_notes(loo):
    """Notes on unreliable leave-one-out terms and the LOO warnings."""
    parts = []
    n_bad = loo.get("n_pareto_k_above_threshold")
    if is_num(n_bad) and n_bad > 0:
        parts.append(
            f'<p class="note">PSIS-LOO: {int(n_bad)} star(s) have Pareto k above '
            f"{fixed(loo.get('pareto_k_threshold'))} (max {fixed(loo.get('pareto_k_max'))}); "
            "their leave-one-out terms, and the &Delta;ELPD, are unreliable.</p>"
        )
    for w in loo.get("warnings") or []:
        parts.append(f'<p class="note">PSIS-LOO: {esc(w)}</p>')
    return parts


def _parameters_table(slug, params):
    """All sampled parameters' quantiles, folded away (empty when there are none)."""
    if not (isinstance(params, dict) and params):
        return ""
    prow = "".join(
        q_row(f"{slug}-par-{slugify(k)}", f"<code>{esc(k)}</code>", q, "", "sig")
        for k, q in params.items()
    )
    return (
        "<details><summary>All parameters (posterior quantiles)</summary>"
        f'<table class="params">{_HEAD}{prow}</table></details>'
    )


def model_section(name, m, summary):
    """One model's section: headline table, LOO notes and the folded parameter table."""
    slug = slugify(name)
    status = '<span class="ok">converged</span>' if m["converged"] else nc_mark(m).strip()
    rows = _derived_rows(slug, m["derived"]) + _truncation_rows(slug, m["derived"])
    rows += _fit_rows(slug, name, m, summary)
    parts = [
        f'<section id="model-{slug}"><h3>Model {esc(name)} &mdash; {status}</h3>',
        f"<p>Spec: <code>{esc(m.get('spec_source'))}</code>",
    ]
    if is_num(m.get("time_s")):
        parts.append(f"; fit time {m['time_s']:.0f} s")
    parts.append(f'.</p><table class="headline">{_HEAD}{"".join(rows)}</table>')
    parts += _truncation_note(slug, m)
    parts += _loo_notes(m["loo"])
    parts.append(_parameters_table(slug, m.get("parameters")))
    parts.append("</section>")
    return "".join(parts)


def estimators(summary):
    est = summary.get("estimators")
    if not isinstance(est, dict):
        return "<p>No closed-form estimators in this run.</p>"
    sig = est.get("sigma_los_kms")
    err = est.get("sigma_los_err_kms")
    sig_txt = f"{fixed(sig)} &plusmn; {fixed(err)} km/s" if is_num(err) else f"{fixed(sig)} km/s"
    rows = [
        (
            "global dispersion &sigma;<sub>los</sub>",
            f"{sig_txt} ({esc(est.get('n_stars_used'))} stars; {esc(est.get('selection'))})",
        )
    ]
    for key, label in (
        ("walker2009", "Walker et al. (2009)"),
        ("wolf2010", "Wolf et al. (2010)"),
        ("errani2018", "Errani et al. (2018)"),
    ):
        q = est.get(key)
        r = est.get(f"{key}_radius_pc")
        if isinstance(q, dict) and is_num(q.get("median")):
            cells, prefix = q_cells(q, "sig")
            val = f"{cells[0]} (68%: {cells[1]}) {prefix}{MSUN}"
        else:
            val = "&ndash; (no resolved dispersion)"
        rows.append((f"{label}, M(&lt;{sig_figs(r)} pc)", val))
    return kv_table(rows, "estimators") + (
        "<p>Closed-form estimators from the global dispersion; they assume no binaries, no "
        "foreground and a flat dispersion profile, and serve as a cross-check of the models.</p>"
    )
