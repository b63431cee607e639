"""The headline table of the fit report: one row per model with the numbers an observer quotes
(M(<r_1/2), M/L_V, log10 J(0.5 deg), binary fraction, ln B), a non-converged model marked in
its row."""

from halo.products.report_cells import J_UNIT, MSUN, RHALF, esc, fixed, is_num, sig_figs, slugify
from halo.products.report_verdict import nc_mark

__all__ = ["headline_table"]


def _cell(q, fmt="sig"):
    """'median [p16, p84]' of a quantile summary, or a dash."""
    if not isinstance(q, dict) or not all(is_num(q.get(k)) for k in ("median", "p16", "p84")):
        return "&ndash;"

    def f(x):
        return sig_figs(x) if fmt == "sig" else fixed(x, 2)

    return f'{f(q["median"])} <span class="ci">[{f(q["p16"])}, {f(q["p84"])}]</span>'


def _row(name, m):
    d = m.get("derived") or {}
    c = m.get("vs_stars_only") or {}
    ln_b = c.get("ln_bayes_factor")
    b_txt = (
        "&ndash;"
        if not is_num(ln_b)
        else f"{fixed(ln_b, 1)} &plusmn; {fixed(c.get('ln_bayes_factor_err'), 1)}"
    )
    status = '<span class="ok">converged</span>' if m["converged"] else nc_mark(m)
    cells = (
        _cell(d.get("m_half_msun")),
        _cell(d.get("ml_half_v")),
        _cell((d.get("log10_j") or {}).get("0.5"), "f2"),
        _cell(m.get("binary_fraction"), "f2"),
        b_txt,
    )
    tds = "".join(f'<td class="num">{x}</td>' for x in cells)
    head = f'<tr id="headline-{slugify(name)}"><th scope="row">{esc(name)}</th>'
    return f"{head}{tds}<td>{status}</td></tr>"


def headline_table(summary):
    """One row per model: median [16th, 84th percentile] of the quantities quoted most."""
    head = (
        f"<tr><th>model</th><th>M(&lt;{RHALF}) [{MSUN}]</th>"
        f"<th>M/L<sub>V</sub>(&lt;{RHALF}) [{MSUN}/L<sub>&#9737;,V</sub>]</th>"
        f"<th>log<sub>10</sub> J(0.5&deg;) [{J_UNIT}]</th><th>binary fraction</th>"
        "<th>ln B vs stars-only</th><th>convergence</th></tr>"
    )
    rows = "".join(_row(n, m) for n, m in summary["models"].items())
    return (
        f'<table id="headline">{head}{rows}</table>'
        '<p class="sub">Median [16th, 84th percentile] of the posterior; every number of each '
        "model, with its 95% interval, in its section below.</p>"
    )
