"""The top of the fit report: one loud banner when a model did not converge, the verdict block
(summary.json ``verdict``) with the nature of the satellite beside it, the banner of an
unresolved dispersion with its upper limits, and the comparison table, dark halo against stars
alone, with its convergence state."""

from halo.core.vocabulary import STARS_ONLY
from halo.products.report_cells import D_UNIT, J_UNIT, MSUN, RHALF, esc, fixed, sig_figs, slugify
from halo.products.verdict_text import nature_items

__all__ = [
    "nc_mark",
    "banners",
    "convergence_banner",
    "dispersion_banner",
    "verdict_block",
    "verdicts",
]


def nc_mark(m):
    """The mark beside a number of a model that did not converge ('' when it converged)."""
    if m.get("converged", True):
        return ""
    return ' <span class="nc-mark" title="this model did not converge">&#9888; not converged</span>'


def convergence_banner(summary):
    """One compact banner for every model that did not converge ('' when all did)."""
    items = []
    for name, m in summary["models"].items():
        if m["converged"]:
            continue
        probs = "; ".join(esc(p) for p in m.get("problems") or []) or "see the diagnostics"
        items.append(
            f'<li id="banner-nc-{slugify(name)}">Model {esc(name)} did NOT CONVERGE: {probs}</li>'
        )
    if not items:
        return ""
    return (
        '<div class="banner compact" id="banner-nc" role="alert">'
        '<strong class="head">NOT CONVERGED: these numbers are unreliable</strong>'
        f'<ul class="plain">{"".join(items)}</ul>'
        "<p>The numbers and evidence of a model that did not converge, and every comparison "
        "that involves it, are unreliable (marked &#9888; below): rerun with more warmup, "
        "draws or chains.</p></div>"
    )


def dispersion_banner(summary):
    """The banner of an unresolved dispersion, with the upper limits ('' when resolved)."""
    disp = summary.get("dispersion")
    if not (isinstance(disp, dict) and disp.get("resolved") is False):
        return ""
    return (
        '<div class="banner" id="banner-dispersion" role="alert">'
        '<strong class="head">The velocity dispersion is NOT RESOLVED</strong>'
        f"<p>{esc(disp.get('message'))}</p>"
        "<p>Quote the 95% upper limits below, not the medians.</p>"
        f"{_upper_limits_table(summary)}</div>"
    )


def banners(summary):
    """Both banners (the page shows them apart: convergence at the top, dispersion under the
    verdict)."""
    return convergence_banner(summary) + dispersion_banner(summary)


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


def _nature_html(summary):
    items = nature_items(summary)
    if not items:
        return ""
    rows = "".join(
        f'<tr id="nature-{slugify(label.replace(": ", "-"))}"><th scope="row">{esc(label)}</th>'
        f"<td>{esc(words)}</td></tr>"
        for label, words in items
    )
    return f'<table id="nature"><caption>Nature of the satellite</caption>{rows}</table>'


def _line_class(line):
    return "reading" if line.startswith("reading:") else "why" if line.startswith("why ") else ""


def verdict_block(summary):
    """The verdict box: summary.json ``verdict.text``, line by line, then the nature."""
    v = summary.get("verdict")
    if not (isinstance(v, dict) and v.get("text")):
        return '<div class="verdict-box" id="verdict-block"><p>No verdict in this run.</p></div>'
    first, *rest = v["text"].splitlines()
    cls = "ok" if v.get("converged") else "bad"
    lines = "".join(f'<li class="{_line_class(line)}">{esc(line)}</li>' for line in rest)
    return (
        f'<div class="verdict-box" id="verdict-block"><p class="verdict-head {cls}">'
        f'{esc(first)}</p><ul class="plain">{lines}</ul>{_nature_html(summary)}</div>'
    )


def _caution(name, m, models):
    bad = [] if m["converged"] else [name]
    ref = models.get(STARS_ONLY)
    if ref is not None and not ref.get("converged", True):
        bad.append(STARS_ONLY)
    if not bad:
        return f' <span class="ok">({esc(name)} and stars-only converged)</span>'
    return f' <span class="bad">({"; ".join(f"{esc(b)} not converged" for b in bad)})</span>'


def verdicts(summary):
    models = summary["models"]
    rows = []
    for name, m in models.items():
        c = m.get("vs_stars_only")
        if not isinstance(c, dict):
            continue
        rows.append(
            f'<tr id="verdict-{slugify(name)}"><th scope="row">{esc(name)}</th>'
            f'<td class="num">{fixed(c.get("ln_bayes_factor"))} &plusmn; '
            f"{fixed(c.get('ln_bayes_factor_err'))}</td>"
            f'<td class="num">{fixed(c.get("delta_elpd"), 1)} &plusmn; '
            f"{fixed(c.get('delta_elpd_se'), 1)}</td>"
            f'<td class="verdict">{esc(c.get("verdict"))}{_caution(name, m, models)}</td></tr>'
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
