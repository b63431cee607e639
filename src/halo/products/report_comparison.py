"""The comparison section of the fit report: ln B and delta ELPD against stars alone, the priors
the Bayes factor depends on (each spec's own, and the nuisance priors every model shares), and
the closed-form estimators with why their dispersion differs from the fitted one."""

import json

from halo.products.report_cells import esc, kv_table, slugify
from halo.products.report_models import estimators
from halo.products.report_verdict import verdicts

__all__ = ["comparison_section", "priors_html"]

#: prior settings shown as words, not as key=value
_HIDDEN = ("prior", "doc", "unit")


def _value(v):
    return f"{v:g}" if isinstance(v, float) else json.dumps(v)


def _prior_words(p):
    """'log-uniform(low=1e5, high=1e11)' of one spec parameter's prior table."""
    if not isinstance(p, dict):
        return esc(p)
    bits = ", ".join(f"{esc(k)}={esc(_value(v))}" for k, v in p.items() if k not in _HIDDEN)
    return f"<code>{esc(p.get('prior'))}({bits})</code>"


def _spec_priors(summary):
    head = "<tr><th>model</th><th>parameter</th><th>prior</th><th>unit</th><th>meaning</th></tr>"
    rows = []
    for name, m in summary["models"].items():
        for k, p in (m.get("priors") or {}).items():
            p = p if isinstance(p, dict) else {}
            rows.append(
                f'<tr id="prior-{slugify(name)}-{slugify(k)}"><td>{esc(name)}</td>'
                f"<td><code>{esc(k)}</code></td><td>{_prior_words(p)}</td>"
                f"<td>{esc(p.get('unit', ''))}</td><td>{esc(p.get('doc', ''))}</td></tr>"
            )
    if not rows:
        return "<p>The priors of the specs are not recorded in this run's summary.</p>"
    return f'<table id="priors">{head}{"".join(rows)}</table>'


def _pm(sat, key, err, unit):
    if sat.get(key) is None:
        return None
    tail = "" if sat.get(err) is None else f" &plusmn; {esc(sat[err])}"
    return f"Normal({esc(sat[key])}{tail}) {unit}, truncated positive"


def _shared_priors(summary):
    sat = summary.get("satellite") or {}
    comp = summary.get("comparison") or {}
    rows = []
    if sat.get("v_sys_kms") is not None and sat.get("v_sys_err_kms") is not None:
        rows.append(("v_sys", f"Normal({esc(sat['v_sys_kms'])}, {esc(sat['v_sys_err_kms'])}) km/s"))
    else:
        rows.append(("v_sys", "uniform about the velocity peak of the inner stars (km/s)"))
    for key, err, label, unit in (
        ("distance_kpc", "distance_err_kpc", "distance", "kpc"),
        ("r_half_pc", "r_half_err_pc", "r_half (projected, major axis)", "pc"),
        ("stellar_mass_msun", "stellar_mass_err_msun", "stellar mass", "M<sub>&#9737;</sub>"),
        ("absolute_magnitude_v", "absolute_magnitude_v_err", "absolute magnitude M_V", "mag"),
    ):
        words = _pm(sat, key, err, unit)
        if key == "absolute_magnitude_v" and sat.get("stellar_mass_msun") is not None:
            continue  # the magnitude gives the luminosity of M/L, not a prior, then
        if words:
            rows.append((label, words))
    b = comp.get("binaries")
    if isinstance(b, dict) and b.get("fraction_range"):
        lo, hi = b["fraction_range"]
        rows.append(("binary fraction", f"uniform({esc(lo)}, {esc(hi)})"))
        rows.append(("binary orbits", f"<code>{esc(json.dumps(b.get('population')))}</code>"))
    elif "binaries" in comp:
        rows.append(("binary fraction", "binaries not modelled"))
    if "foreground" in comp:
        rows.append(("foreground", esc(comp["foreground"] or "not modelled")))
    return kv_table(rows, "shared-priors")


def priors_html(summary):
    """The priors the Bayes factor depends on: each spec's own, then the shared nuisances."""
    return (
        "<h3>Priors the Bayes factor depends on</h3>"
        "<p>The evidence integrates the likelihood over the prior: ln B changes with the prior "
        "ranges below (when the data pin a parameter well inside its range, a range twice as wide "
        "lowers ln Z by about ln 2). Nuisance priors are the same for every model.</p>"
        + _spec_priors(summary)
        + "<h4>Shared by every model</h4>"
        + _shared_priors(summary)
    )


def comparison_section(summary):
    """ln B table, the priors and the closed-form estimators."""
    v = summary.get("verdict") or {}
    why = v.get("explanation")
    why_html = f'<p class="note" id="why-dispersions">{esc(why)}</p>' if why else ""
    return (
        verdicts(summary)
        + priors_html(summary)
        + "<h3>Closed-form estimators</h3>"
        + estimators(summary)
        + why_html
    )
