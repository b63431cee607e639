"""The top of the fit report: the loud banners (a model not converged, a dispersion not
resolved, with its upper limits) and the verdict table, dark halo against stars alone."""

from halo.products.report_cells import D_UNIT, J_UNIT, MSUN, RHALF, esc, fixed, sig_figs, slugify

__all__ = ["banners", "verdicts"]


def banners(summary):
    out = []
    for name, m in summary["models"].items():
        if m["converged"]:
            continue
        probs = "".join(f"<li>{esc(p)}</li>" for p in m.get("problems") or [])
        out.append(
            f'<div class="banner" id="banner-nc-{slugify(name)}" role="alert">'
            f'<strong class="head">Model {esc(name)} did NOT CONVERGE</strong>'
            "<p>Its numbers, its evidence and every comparison that involves it are unreliable. "
            "Rerun with more warmup, draws or chains before quoting anything from it.</p>"
            f'<ul class="plain">{probs}</ul></div>'
        )
    disp = summary.get("dispersion")
    if isinstance(disp, dict) and disp.get("resolved") is False:
        out.append(
            '<div class="banner" id="banner-dispersion" role="alert">'
            '<strong class="head">The velocity dispersion is NOT RESOLVED</strong>'
            f"<p>{esc(disp.get('message'))}</p>"
            "<p>Quote the 95% upper limits below, not the medians.</p>"
            f"{_upper_limits_table(summary)}</div>"
        )
    return "".join(out)


def _upper_limits_table(summary):
    disp = summary.get("dispersion") or {}
    rows = [
        "<tr><th>model</th><th>quantity</th><th>95% upper limit</th><th>unit</th></tr>",
        '<tr id="ul-sigma_los"><td>all (constant dispersion)</td><td>&sigma;<sub>los</sub></td>'
        f'<td class="num">{sig_figs(disp.get("sigma_upper95_kms"))}</td><td>km/s</td></tr>',
    ]
    for name, ul in (summary.get("upper_limits") or {}).items():
        if not isinstance(ul, dict):
            continue
        rows.append(
            f'<tr id="ul-{slugify(name)}-m_half_msun"><td>{esc(name)}</td><td>M(&lt;{RHALF})</td>'
            f'<td class="num">{sig_figs(ul.get("m_half_msun_upper95"))}</td><td>{MSUN}</td></tr>'
        )
        for group, sym, unit in (
            ("log10_j_upper95", "J", J_UNIT),
            ("log10_d_upper95", "D", D_UNIT),
        ):
            for angle, val in (ul.get(group) or {}).items():
                a = "2 R<sub>e</sub>/d" if angle == "2rh" else f"{esc(angle)}&deg;"
                rows.append(
                    f'<tr id="ul-{slugify(name)}-{group}-{slugify(angle)}"><td>{esc(name)}</td>'
                    f"<td>log<sub>10</sub> {sym}({a})</td>"
                    f'<td class="num">{fixed(val)}</td><td>log<sub>10</sub> {unit}</td></tr>'
                )
    return f'<table class="limits">{"".join(rows)}</table>'


def verdicts(summary):
    models = summary["models"]
    rows = []
    for name, m in models.items():
        c = m.get("vs_stars_only")
        if not isinstance(c, dict):
            continue
        caution = []
        if not m["converged"]:
            caution.append(f"{esc(name)} not converged")
        ref = next((v for k, v in models.items() if "vs_stars_only" not in v), None)
        if ref is not None and not ref.get("converged", True):
            caution.append("stars-only not converged")
        warn = f' <span class="bad">({"; ".join(caution)})</span>' if caution else ""
        rows.append(
            f'<tr id="verdict-{slugify(name)}"><th scope="row">{esc(name)}</th>'
            f'<td class="num">{fixed(c.get("ln_bayes_factor"))} &plusmn; '
            f"{fixed(c.get('ln_bayes_factor_err'))}</td>"
            f'<td class="num">{fixed(c.get("delta_elpd"), 1)} &plusmn; '
            f"{fixed(c.get('delta_elpd_se'), 1)}</td>"
            f'<td class="verdict">{esc(c.get("verdict"))}{warn}</td></tr>'
        )
    if not rows:
        return (
            "<p>No dark-halo model was fitted, so there is nothing to compare with stars only.</p>"
        )
    head = (
        "<tr><th>dark model</th><th>ln B (vs stars-only)</th>"
        "<th>&Delta;ELPD (PSIS-LOO)</th><th>verdict</th></tr>"
    )
    return (
        f'<table id="verdicts">{head}{"".join(rows)}</table>'
        "<p>ln B is the log Bayes factor of the dark model over the stars-only model (bridge-"
        "sampling evidences; the error combines both). The words follow the scale of Kass &amp; "
        "Raftery (1995) on 2 ln B: below 2 not worth more than a bare mention, 2&ndash;6 "
        "positive, 6&ndash;10 strong, above 10 very strong. &Delta;ELPD is the difference in "
        "expected log predictive density from leave-one-out cross-validation, with its standard "
        "error; positive favours the dark model.</p>"
    )
