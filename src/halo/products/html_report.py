"""One self-contained HTML page for a fit output folder.

The page is read from the folder that :func:`halo.pipeline.fit.fit` wrote (``summary.json``,
``members.ecsv`` and ``figures/*.png``) and holds everything in one file: the figures are embedded
as base64 ``data:`` URIs, the style sheet is inline, there is no script and no reference to any
other file or address (a Content-Security-Policy meta tag forbids them), so the page can be mailed
or archived on its own and opened offline.

Every string taken from the summary is escaped with :func:`html.escape`.
"""

import base64
import datetime
import html
import json
import math
import re
from pathlib import Path

from halo.core.errors import InputError
from halo.core.fileio import atomic_path, read_input_text
from halo.inference.sampling import ESS_MIN, RHAT_MAX

__all__ = ["write_html_report"]

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
#: BFMI below this suggests the sampler explores the energy distribution poorly (Betancourt 2016,
#: arXiv:1604.00695, sec. 6.1; common practice)
BFMI_LOW = 0.3
_ANGLES = (("0.1", "0.1&deg;"), ("0.2", "0.2&deg;"), ("0.5", "0.5&deg;"))
_MSUN = "M<sub>&#9737;</sub>"
_RHALF = "r<sub>1/2</sub>"
_J_UNIT = "GeV<sup>2</sup> cm<sup>&minus;5</sup>"
_D_UNIT = "GeV cm<sup>&minus;2</sup>"

_CSS = """
:root { --ink: #1d232b; --mute: #5b6673; --line: #d6dbe1; --bg: #ffffff; --band: #f4f6f8;
        --bad: #b3141b; --badbg: #fdecec; --warn: #8a5a00; --warnbg: #fff6e0; --ok: #1f6f3a; }
* { box-sizing: border-box; }
body { margin: 0; background: var(--bg); color: var(--ink);
       font: 15px/1.5 "DejaVu Sans", "Helvetica Neue", Arial, sans-serif; }
main { max-width: 1060px; margin: 0 auto; padding: 24px 28px 60px; }
h1 { font-size: 1.7em; margin: 0 0 4px; }
h1 .kind { font-weight: 400; color: var(--mute); font-size: 0.7em; }
h2 { font-size: 1.3em; margin: 36px 0 10px; padding-bottom: 4px;
     border-bottom: 2px solid var(--line); }
h3 { font-size: 1.1em; margin: 26px 0 8px; }
p.sub { color: var(--mute); margin: 0 0 18px; }
nav { background: var(--band); border: 1px solid var(--line); border-radius: 6px;
      padding: 8px 14px; margin: 16px 0; font-size: 0.92em; }
nav a { margin-right: 14px; color: #1b4f8a; text-decoration: none; }
table { border-collapse: collapse; margin: 8px 0 14px; font-size: 0.93em; }
th, td { border: 1px solid var(--line); padding: 4px 9px; text-align: left; vertical-align: top; }
th { background: var(--band); font-weight: 600; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.bad, span.bad { color: var(--bad); font-weight: 700; }
span.ok { color: var(--ok); font-weight: 600; }
code, .hash { font-family: "DejaVu Sans Mono", Menlo, Consolas, monospace; font-size: 0.9em;
              word-break: break-all; }
.banner { border: 3px solid var(--bad); background: var(--badbg); color: var(--bad);
          border-radius: 6px; padding: 12px 16px; margin: 14px 0; }
.banner strong.head { display: block; font-size: 1.15em; letter-spacing: 0.02em; }
.banner p { margin: 6px 0; color: var(--ink); }
.banner table { background: var(--bg); color: var(--ink); }
.note { border-left: 4px solid var(--warn); background: var(--warnbg); padding: 8px 12px;
        margin: 10px 0; }
.verdict { font-weight: 600; }
ul.plain { margin: 6px 0; padding-left: 22px; }
figure { margin: 18px 0 26px; padding: 10px; border: 1px solid var(--line); border-radius: 6px; }
figure img { display: block; max-width: 100%; height: auto; margin: 0 auto; }
figcaption { color: var(--mute); font-size: 0.92em; margin-top: 8px; }
details { margin: 6px 0 12px; }
summary { cursor: default; color: var(--mute); }
footer { margin-top: 40px; color: var(--mute); font-size: 0.85em; border-top: 1px solid var(--line);
         padding-top: 8px; }
"""

_CAVEATS = (
    (
        "Spherical symmetry",
        "The models are spherical. A flattened or irregular satellite enters only through its "
        "circularised half-light radius, so its mass and J- and D-factors can be biased by an "
        "amount these numbers do not include.",
    ),
    (
        "Dynamical equilibrium",
        "The Jeans equation assumes the stars are in a steady state. Tidal stripping, rotation, "
        "velocity gradients or a recent merger add motion that the models read as mass, and "
        "nothing in the fit can tell the difference.",
    ),
    (
        "The priors drive the Bayes factors",
        "A Bayes factor compares how well each model predicts the data averaged over its prior, "
        "so it changes when the prior ranges change (for instance the range of halo masses or "
        "concentrations allowed). It is not the probability that dark matter is present. Read "
        "it together with the priors (listed by the command halo models) and with the LOO "
        "comparison, which depends far less on them.",
    ),
    (
        "Binaries and foreground are models too",
        "Orbital motion of binary stars is removed statistically with an assumed orbit "
        "population (periods, mass ratios, eccentricities and a typical giant). If the real "
        "binaries differ, or if stars were observed only once, their motion can still inflate or "
        "be confused with the dispersion. Non-members are described by a broad velocity "
        "distribution (or the components in the satellite file) and a uniform background on the "
        "sky; field stars whose velocities lie close to the satellite's cannot be separated from "
        "members.",
    ),
    (
        "The mass-anisotropy degeneracy",
        "Line-of-sight velocities alone cannot tell whether a dispersion profile comes from the "
        "shape of the mass distribution or from the orbits' anisotropy. The mass inside about the "
        "half-light radius is robust to this; the inner density slope, the mass far outside the "
        "stars and J- and D-factors at large angles are not, and lean on the priors on the "
        "anisotropy and the halo shape.",
    ),
    (
        "Extrapolation and sampling",
        "J- and D-factors integrate the halo beyond the outermost stars, where the data say "
        "little. Every number is a posterior quantile from a finite number of draws: a model "
        "flagged as not converged should be rerun with more warmup, draws or chains before "
        "anything is quoted from it.",
    ),
)


def _e(x):
    """Escaped text of any value (None becomes an en dash)."""
    if x is None:
        return "&ndash;"
    return html.escape(str(x), quote=True)


def _slug(name):
    return re.sub(r"[^A-Za-z0-9_-]+", "-", str(name)).strip("-") or "x"


def _is_num(x):
    return isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x)


def _fixed(x, d=2):
    return f"{x:.{d}f}" if _is_num(x) else "&ndash;"


def _sig(x, n=3):
    """``x`` to ``n`` significant figures, as HTML (powers of ten written with <sup>)."""
    if not _is_num(x):
        return "&ndash;"
    if x == 0:
        return "0"
    k = math.floor(math.log10(abs(x)))
    if -3 <= k < 4:
        return f"{x:.{max(n - 1 - k, 0)}f}"
    m = x / 10.0**k
    if round(abs(m), n - 1) >= 10:
        m, k = m / 10, k + 1
    return f"{m:.{n - 1}f} &times; 10<sup>{k}</sup>"


def _scale(q):
    """Power of ten shared by a row (0 unless the median is >= 1e4 or below 1e-2)."""
    med = q.get("median") if isinstance(q, dict) else None
    if not _is_num(med) or med == 0:
        return 0
    k = math.floor(math.log10(abs(med)))
    return k if (k >= 4 or k < -2) else 0


def _decimals(x, n=3):
    """Decimals that give ``x`` ``n`` significant figures (at least 0)."""
    if not _is_num(x) or x == 0:
        return 2
    return max(n - 1 - math.floor(math.log10(abs(x))), 0)


def _q_cells(q, kind):
    """Median, 68% and 95% interval cells and the unit prefix for a quantile dict.

    ``kind``: "sig" (3 significant figures on the median, a shared power of ten), or "f2"/"f3"
    (fixed decimals, no scaling).
    """
    if not isinstance(q, dict) or not _is_num(q.get("median")):
        return ["&ndash;"] * 3, ""
    if kind == "sig":
        k = _scale(q)
        f = 10.0**k
        d = _decimals(q["median"] / f)
        prefix = f"10<sup>{k}</sup> " if k else ""
    else:
        f, d, prefix = 1.0, int(kind[1:]), ""

    def one(x):
        return f"{x / f:.{d}f}" if _is_num(x) else "&ndash;"

    cells = [
        one(q["median"]),
        f"{one(q.get('p16'))} &ndash; {one(q.get('p84'))}",
        f"{one(q.get('p2.5'))} &ndash; {one(q.get('p97.5'))}",
    ]
    return cells, prefix


def _q_row(row_id, label, q, unit, kind="sig"):
    cells, prefix = _q_cells(q, kind)
    unit_html = (prefix + unit).strip() or "&ndash;"
    tds = "".join(f'<td class="num">{c}</td>' for c in cells)
    return f'<tr id="{row_id}"><th scope="row">{label}</th>{tds}<td>{unit_html}</td></tr>'


def _plain_row(row_id, label, value, unit=""):
    return (
        f'<tr id="{row_id}"><th scope="row">{label}</th><td class="num" colspan="3">{value}</td>'
        f"<td>{unit or '&ndash;'}</td></tr>"
    )


def _kv_table(rows, table_id=None):
    """Two-column table of (label HTML, value HTML)."""
    ident = f' id="{table_id}"' if table_id else ""
    body = "".join(f'<tr><th scope="row">{k}</th><td>{v}</td></tr>' for k, v in rows)
    return f"<table{ident}>{body}</table>"


# --------------------------------------------------------------------------------------- loading


def _load_summary(run_dir):
    run_dir = Path(run_dir)
    path = run_dir / "summary.json"
    if not run_dir.is_dir():
        raise InputError(f"{run_dir}: no such folder (expected a halo fit output folder)")
    text = read_input_text(path, "no such file (not a halo fit output folder?)")
    try:
        summary = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"{path}: malformed JSON (line {exc.lineno}: {exc.msg})") from None
    if not isinstance(summary, dict):
        raise InputError(f"{path}: expected a JSON object at the top level")
    _require(path, summary, "", _SUMMARY_KEYS)
    _require(path, summary["satellite"], "satellite.", {"name": str})
    for name, m in summary["models"].items():
        if not isinstance(m, dict):
            raise InputError(f"{path}: missing or malformed key 'models.{name}'")
        _require(path, m, f"models.{name}.", _MODEL_KEYS)
    return summary


#: keys the report reads, with their JSON types (top level and per model)
_SUMMARY_KEYS = {"satellite": dict, "models": dict, "catalogue": dict, "settings": dict,
                 "created": str}  # fmt: skip
_MODEL_KEYS = {"converged": bool, "derived": dict, "diagnostics": dict, "evidence": dict,
               "loo": dict}  # fmt: skip


def _require(path, obj, prefix, kinds):
    """InputError naming the first of ``kinds`` (key -> type) missing from ``obj`` or of
    another type."""
    for key, kind in kinds.items():
        if not isinstance(obj.get(key), kind):
            raise InputError(f"{path}: missing or malformed key '{prefix}{key}'")


def _figure_list(run_dir, summary):
    figs = summary.get("figures")
    if isinstance(figs, list):
        return [str(f) for f in figs]
    return sorted(str(p.relative_to(run_dir)) for p in (run_dir / "figures").glob("*.png"))


def _embed(run_dir, rel):
    """(data URI, None) for a PNG inside ``run_dir``, or (None, reason it cannot be embedded)."""
    root = run_dir.resolve()
    p = (run_dir / rel).resolve()
    if not p.is_relative_to(root):
        return None, "outside the run folder"
    try:
        data = p.read_bytes()
    except FileNotFoundError:
        return None, "file not found"
    except OSError as exc:
        return None, f"cannot read ({exc.__class__.__name__})"
    if not data.startswith(PNG_SIGNATURE):
        return None, "not a PNG file"
    return "data:image/png;base64," + base64.b64encode(data).decode("ascii"), None


def _members(run_dir):
    """A few counts from members.ecsv, or a reason why it could not be read."""
    path = run_dir / "members.ecsv"
    if not path.is_file():
        return None, "members.ecsv is missing from the run folder"
    try:
        import numpy as np
        from astropy.table import Table

        t = Table.read(str(path), format="ascii.ecsv")
        out = {"n": len(t)}
        if "member_prob" in t.colnames:
            mp = np.asarray(t["member_prob"], dtype=float)
            out["sum_member"] = float(np.nansum(mp))
            out["non_members"] = int(np.sum(mp < 0.5))
        if "binary_prob" in t.colnames:
            bp = np.asarray(t["binary_prob"], dtype=float)
            if np.isfinite(bp).any():
                out["binaries"] = int(np.sum(bp > 0.5))
        if "n_epochs" in t.colnames:
            out["multi_epoch"] = int(np.sum(np.asarray(t["n_epochs"]) > 1))
        return out, None
    except Exception as exc:  # noqa: BLE001 - any unreadable table is reported, not fatal
        return None, f"members.ecsv could not be read ({exc.__class__.__name__})"


# -------------------------------------------------------------------------------------- sections


def _when(created):
    try:
        t = datetime.datetime.fromisoformat(created)
    except (TypeError, ValueError):
        return _e(created)
    if t.tzinfo is not None:
        t = t.astimezone(datetime.UTC)
        return _e(t.strftime("%Y-%m-%d %H:%M:%S UTC"))
    return _e(t.strftime("%Y-%m-%d %H:%M:%S"))


def _banners(summary):
    out = []
    for name, m in summary["models"].items():
        if m["converged"]:
            continue
        probs = "".join(f"<li>{_e(p)}</li>" for p in m.get("problems") or [])
        out.append(
            f'<div class="banner" id="banner-nc-{_slug(name)}" role="alert">'
            f'<strong class="head">Model {_e(name)} did NOT CONVERGE</strong>'
            "<p>Its numbers, its evidence and every comparison that involves it are unreliable. "
            "Rerun with more warmup, draws or chains before quoting anything from it.</p>"
            f'<ul class="plain">{probs}</ul></div>'
        )
    disp = summary.get("dispersion")
    if isinstance(disp, dict) and disp.get("resolved") is False:
        out.append(
            '<div class="banner" id="banner-dispersion" role="alert">'
            '<strong class="head">The velocity dispersion is NOT RESOLVED</strong>'
            f"<p>{_e(disp.get('message'))}</p>"
            "<p>Quote the 95% upper limits below, not the medians.</p>"
            f"{_upper_limits_table(summary)}</div>"
        )
    return "".join(out)


def _upper_limits_table(summary):
    disp = summary.get("dispersion") or {}
    rows = [
        "<tr><th>model</th><th>quantity</th><th>95% upper limit</th><th>unit</th></tr>",
        '<tr id="ul-sigma_los"><td>all (constant dispersion)</td><td>&sigma;<sub>los</sub></td>'
        f'<td class="num">{_sig(disp.get("sigma_upper95_kms"))}</td><td>km/s</td></tr>',
    ]
    for name, ul in (summary.get("upper_limits") or {}).items():
        if not isinstance(ul, dict):
            continue
        rows.append(
            f'<tr id="ul-{_slug(name)}-m_half_msun"><td>{_e(name)}</td><td>M(&lt;{_RHALF})</td>'
            f'<td class="num">{_sig(ul.get("m_half_msun_upper95"))}</td><td>{_MSUN}</td></tr>'
        )
        for group, sym, unit in (
            ("log10_j_upper95", "J", _J_UNIT),
            ("log10_d_upper95", "D", _D_UNIT),
        ):
            for angle, val in (ul.get(group) or {}).items():
                a = "2 r<sub>1/2</sub>/d" if angle == "2rh" else f"{_e(angle)}&deg;"
                rows.append(
                    f'<tr id="ul-{_slug(name)}-{group}-{_slug(angle)}"><td>{_e(name)}</td>'
                    f"<td>log<sub>10</sub> {sym}({a})</td>"
                    f'<td class="num">{_fixed(val)}</td><td>log<sub>10</sub> {unit}</td></tr>'
                )
    return f'<table class="limits">{"".join(rows)}</table>'


def _verdicts(summary):
    models = summary["models"]
    rows = []
    for name, m in models.items():
        c = m.get("vs_stars_only")
        if not isinstance(c, dict):
            continue
        caution = []
        if not m["converged"]:
            caution.append(f"{_e(name)} not converged")
        ref = next((v for k, v in models.items() if "vs_stars_only" not in v), None)
        if ref is not None and not ref.get("converged", True):
            caution.append("stars-only not converged")
        warn = f' <span class="bad">({"; ".join(caution)})</span>' if caution else ""
        rows.append(
            f'<tr id="verdict-{_slug(name)}"><th scope="row">{_e(name)}</th>'
            f'<td class="num">{_fixed(c.get("ln_bayes_factor"))} &plusmn; '
            f"{_fixed(c.get('ln_bayes_factor_err'))}</td>"
            f'<td class="num">{_fixed(c.get("delta_elpd"), 1)} &plusmn; '
            f"{_fixed(c.get('delta_elpd_se'), 1)}</td>"
            f'<td class="verdict">{_e(c.get("verdict"))}{warn}</td></tr>'
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


def _model_section(name, m, summary):
    slug = _slug(name)
    d = m["derived"]
    status = (
        '<span class="ok">converged</span>'
        if m["converged"]
        else '<span class="bad">NOT CONVERGED</span>'
    )
    head = (
        "<tr><th>quantity</th><th>median</th><th>68% interval</th><th>95% interval</th>"
        "<th>unit</th></tr>"
    )
    rows = [
        _q_row(f"{slug}-m_half_msun", f"M(&lt;{_RHALF})", d.get("m_half_msun"), _MSUN),
        _q_row(f"{slug}-r_half_3d_pc", f"{_RHALF} (3D)", d.get("r_half_3d_pc"), "pc"),
        _q_row(
            f"{slug}-ml_half_v",
            f"M/L<sub>V</sub>(&lt;{_RHALF})",
            d.get("ml_half_v"),
            f"{_MSUN}/L<sub>&#9737;,V</sub>",
        ),
    ]
    for group, sym, unit in (("log10_j", "J", _J_UNIT), ("log10_d", "D", _D_UNIT)):
        qs = d.get(group)
        if not isinstance(qs, dict):
            continue
        for key, label in _ANGLES:
            rows.append(
                _q_row(
                    f"{slug}-{group}-{key}",
                    f"log<sub>10</sub> {sym}({label})",
                    qs.get(key),
                    f"log<sub>10</sub> {unit}",
                    "f2",
                )
            )
        ang = d.get("angle_2rh_deg") or {}
        at = f" = {_fixed(ang.get('median'), 3)}&deg;" if _is_num(ang.get("median")) else ""
        rows.append(
            _q_row(
                f"{slug}-{group}-2rh",
                f"log<sub>10</sub> {sym}(2 {_RHALF}/d{at})",
                qs.get("2rh"),
                f"log<sub>10</sub> {unit}",
                "f2",
            )
        )
    if m.get("binary_fraction") is not None:
        rows.append(
            _q_row(f"{slug}-binary_fraction", "binary fraction", m["binary_fraction"], "", "f3")
        )
    rows.append(
        _plain_row(
            f"{slug}-effective_members",
            "effective members",
            _fixed(m.get("effective_members"), 1),
            "stars (sum of membership probabilities)",
        )
    )
    ev = m["evidence"]
    rows.append(
        _plain_row(
            f"{slug}-evidence",
            "evidence ln Z",
            f"{_fixed(ev.get('log_z'))} &plusmn; {_fixed(ev.get('log_z_err'))}",
            _e(ev.get("method", "")),
        )
    )
    loo = m["loo"]
    rows.append(
        _plain_row(
            f"{slug}-loo",
            "PSIS-LOO ELPD",
            f"{_fixed(loo.get('elpd'))} &plusmn; {_fixed(loo.get('se'))}",
            f"max Pareto k {_fixed(loo.get('pareto_k_max'))}",
        )
    )
    ul = (summary.get("upper_limits") or {}).get(name)
    if isinstance(ul, dict) and _is_num(ul.get("m_half_msun_upper95")):
        rows.append(
            _plain_row(
                f"{slug}-m_half_upper95",
                f"M(&lt;{_RHALF}) 95% upper limit",
                _sig(ul["m_half_msun_upper95"]),
                _MSUN,
            )
        )
    parts = [
        f'<section id="model-{slug}"><h3>Model {_e(name)} &mdash; {status}</h3>',
        f"<p>Spec: <code>{_e(m.get('spec_source'))}</code>",
    ]
    if _is_num(m.get("time_s")):
        parts.append(f"; fit time {m['time_s']:.0f} s")
    parts.append(f'.</p><table class="headline">{head}{"".join(rows)}</table>')
    n_bad = loo.get("n_pareto_k_above_threshold")
    if _is_num(n_bad) and n_bad > 0:
        parts.append(
            f'<p class="note">PSIS-LOO: {int(n_bad)} star(s) have Pareto k above '
            f"{_fixed(loo.get('pareto_k_threshold'))} (max {_fixed(loo.get('pareto_k_max'))}); "
            "their leave-one-out terms, and the &Delta;ELPD, are unreliable.</p>"
        )
    for w in loo.get("warnings") or []:
        parts.append(f'<p class="note">PSIS-LOO: {_e(w)}</p>')
    params = m.get("parameters")
    if isinstance(params, dict) and params:
        prow = "".join(
            _q_row(f"{slug}-par-{_slug(k)}", f"<code>{_e(k)}</code>", q, "", "sig")
            for k, q in params.items()
        )
        parts.append(
            "<details><summary>All parameters (posterior quantiles)</summary>"
            f'<table class="params">{head}{prow}</table></details>'
        )
    parts.append("</section>")
    return "".join(parts)


def _estimators(summary):
    est = summary.get("estimators")
    if not isinstance(est, dict):
        return "<p>No closed-form estimators in this run.</p>"
    sig = est.get("sigma_los_kms")
    err = est.get("sigma_los_err_kms")
    sig_txt = (
        f"{_fixed(sig)} &plusmn; {_fixed(err)} km/s" if _is_num(err) else f"{_fixed(sig)} km/s"
    )
    rows = [
        (
            "global dispersion &sigma;<sub>los</sub>",
            f"{sig_txt} ({_e(est.get('n_stars_used'))} stars; {_e(est.get('selection'))})",
        )
    ]
    for key, label in (
        ("walker2009", "Walker et al. (2009)"),
        ("wolf2010", "Wolf et al. (2010)"),
        ("errani2018", "Errani et al. (2018)"),
    ):
        q = est.get(key)
        r = est.get(f"{key}_radius_pc")
        if isinstance(q, dict) and _is_num(q.get("median")):
            cells, prefix = _q_cells(q, "sig")
            val = f"{cells[0]} (68%: {cells[1]}) {prefix}{_MSUN}"
        else:
            val = "&ndash; (no resolved dispersion)"
        rows.append((f"{label}, M(&lt;{_sig(r)} pc)", val))
    return _kv_table(rows, "estimators") + (
        "<p>Closed-form estimators from the global dispersion; they assume no binaries, no "
        "foreground and a flat dispersion profile, and serve as a cross-check of the models.</p>"
    )


def _start(m):
    """How a model's chains started: fresh, warm from an earlier run, or reused as they were."""
    if m.get("reused_from"):
        return f"reused from {_e(Path(m['reused_from']).name)} (inputs unchanged)"
    w = m.get("warm_start")
    if not w:
        return "fresh"
    matrix = {
        "earlier posterior": "its mass matrix",
        "adapted": "mass matrix adapted (that run had not converged)",
    }.get(w.get("mass_matrix"), "")
    return (
        f"warm start from {_e(Path(str(w.get('from', ''))).name)}: {_e(w.get('warmup'))} "
        f"warmup{', ' + matrix if matrix else ''}"
    )


def _diagnostics(summary):
    head = (
        "<tr><th>model</th><th>status</th><th>r-hat max</th><th>bulk ESS min</th>"
        "<th>tail ESS min</th><th>divergences</th><th>BFMI min</th><th>problems</th>"
        "<th>chains</th></tr>"
    )
    rows = []
    for name, m in summary["models"].items():
        g = m["diagnostics"]
        rhat, ess, tail = g.get("rhat_max"), g.get("ess_bulk_min"), g.get("ess_tail_min")
        div, bfmi = g.get("divergences"), g.get("bfmi_min")

        def cell(text, bad):
            return f'<td class="num{" bad" if bad else ""}">{text}</td>'

        status = "converged" if m["converged"] else "NOT CONVERGED"
        probs = "; ".join(_e(p) for p in m.get("problems") or []) or "&ndash;"
        rows.append(
            f'<tr id="diag-{_slug(name)}"><th scope="row">{_e(name)}</th>'
            f'<td class="{"" if m["converged"] else "bad"}">{status}</td>'
            + cell(_fixed(rhat, 3), not (_is_num(rhat) and rhat < RHAT_MAX))
            + cell(_fixed(ess, 0), not (_is_num(ess) and ess > ESS_MIN))
            + cell(_fixed(tail, 0), not (_is_num(tail) and tail > ESS_MIN))
            + cell(_e(div), not (_is_num(div) and div == 0))
            + cell(_fixed(bfmi), _is_num(bfmi) and bfmi < BFMI_LOW)
            + f"<td>{probs}</td><td>{_start(m)}</td></tr>"
        )
    return (
        f'<table id="diagnostics">{head}{"".join(rows)}</table>'
        f"<p>A model counts as converged when r-hat &lt; {RHAT_MAX:g}, bulk ESS &gt; "
        f"{ESS_MIN:.0f} and there are no divergent transitions. Tail ESS at or below "
        f"{ESS_MIN:.0f} and BFMI below {BFMI_LOW:g} are marked as well.</p>"
    )


def _inputs(summary, run_dir):
    cat = summary["catalogue"]
    sha = cat.get("sha256")
    sat_sha = summary.get("satellite_sha256")
    not_file = "<em>not recorded (not read from a file)</em>"
    rows = [
        ("catalogue source", f"<code>{_e(cat.get('source'))}</code>"),
        ("catalogue SHA-256", f'<span class="hash">{_e(sha)}</span>' if sha else not_file),
        ("catalogue rows", _e(cat.get("n_rows"))),
        ("stars (after merging epochs)", _e(cat.get("n_stars"))),
        (
            "satellite file SHA-256",
            f'<span class="hash">{_e(sat_sha)}</span>' if sat_sha else not_file,
        ),
        ("halo version", _e(summary.get("version"))),
    ]
    st = summary["settings"]
    srows = []
    for key in ("chains", "warmup", "draws", "seed"):
        if key in st:
            srows.append((key, _e(st[key])))
    if "binaries" in st:
        srows.append(("binaries", "on" if st["binaries"] else "off"))
    if "foreground" in st:
        srows.append(("foreground", "on" if st["foreground"] else "off"))
    if "foreground_reason" in st:
        srows.append(("foreground: why", _e(st["foreground_reason"])))
    for key, val in st.items():
        if key not in (
            "chains",
            "warmup",
            "draws",
            "seed",
            "binaries",
            "foreground",
            "foreground_reason",
        ):
            srows.append((_e(key), _e(val)))
    sat = summary["satellite"]
    sat_rows = []
    for key, val in sat.items():
        if isinstance(val, list | dict):
            val = json.dumps(val)
        sat_rows.append((f"<code>{_e(key)}</code>", _e(val)))
    mem, why = _members(run_dir)
    if mem is None:
        mem_html = f'<p class="note">{_e(why)}</p>'
    else:
        mrows = [("stars in members.ecsv", _e(mem["n"]))]
        if "sum_member" in mem:
            mrows.append(("sum of membership probabilities", _fixed(mem["sum_member"], 1)))
            mrows.append(("likely non-members (member_prob &lt; 0.5)", _e(mem["non_members"])))
        if "binaries" in mem:
            mrows.append(("likely binaries (binary_prob &gt; 0.5)", _e(mem["binaries"])))
        if "multi_epoch" in mem:
            mrows.append(("stars with several epochs", _e(mem["multi_epoch"])))
        mem_html = _kv_table(mrows, "members")
    return (
        "<h3>Data</h3>"
        + _kv_table(rows, "inputs")
        + "<h3>Settings</h3>"
        + _kv_table(srows, "settings")
        + "<h3>Satellite</h3>"
        + _kv_table(sat_rows, "satellite")
        + "<h3>Members</h3>"
        + mem_html
    )


def _notes(summary):
    parts = []
    for key, title in (("warnings", "Warnings"), ("notes", "Notes")):
        items = summary.get(key) or []
        if items:
            lis = "".join(f"<li>{_e(x)}</li>" for x in items)
            parts.append(f'<h3>{title}</h3><ul class="plain" id="{key}">{lis}</ul>')
        else:
            parts.append(f"<h3>{title}</h3><p>None.</p>")
    return "".join(parts)


def _caption(rel, summary):
    stem = Path(rel).stem
    name = _e(summary["satellite"].get("name"))
    if stem == "dispersion_profile":
        return (
            f"{name}: line-of-sight velocity dispersion against projected radius. Points: "
            "maximum-likelihood dispersion of the stars in radial bins; lines and bands: each "
            "model's median and 68% interval."
        )
    if stem == "mass_profile":
        return (
            f"{name}: enclosed mass M(&lt;r) of each model (median and 68% band), the stars alone "
            "(dashed) and the closed-form estimators at their radii."
        )
    if stem == "jfactor":
        return (
            f"{name}: J-factor against the half-angle of the cone for each dark model (median, "
            "68% and 95% bands)."
        )
    if stem.startswith("corner_"):
        model = _e(stem[len("corner_") :])
        return (
            f"Posterior of model {model}: histograms of each sampled parameter on the diagonal "
            "and pairwise two-dimensional histograms below it."
        )
    return f"Figure {_e(rel)}."


def _figures(summary, run_dir):
    parts = []
    problems = []
    figs = _figure_list(run_dir, summary)
    for i, rel in enumerate(figs, 1):
        uri, why = _embed(run_dir, rel)
        if uri is None:
            problems.append(f"<li><code>{_e(rel)}</code>: {_e(why)}</li>")
            continue
        parts.append(
            f'<figure id="fig-{i}"><img src="{uri}" alt="{_e(rel)}">'
            f"<figcaption><strong>Figure {i}.</strong> {_caption(rel, summary)} "
            f'<span class="hash">({_e(rel)})</span></figcaption></figure>'
        )
    if problems:
        parts.insert(
            0,
            '<div class="banner" id="banner-figures" role="alert">'
            '<strong class="head">Some figures could not be embedded</strong>'
            f'<ul class="plain">{"".join(problems)}</ul></div>',
        )
    if not figs:
        parts.append("<p>This run lists no figures.</p>")
    return "".join(parts)


def _caveats():
    items = "".join(f"<dt><strong>{t}</strong></dt><dd>{_e(x)}</dd>" for t, x in _CAVEATS)
    return f'<dl id="caveats-list">{items}</dl>'


def _render(summary, run_dir):
    name = summary["satellite"]["name"]
    dark = [n for n, m in summary["models"].items() if "vs_stars_only" in m]
    sections = [
        ("verdict", "Verdict: dark halo or stars alone", _verdicts(summary)),
        (
            "models",
            "Models",
            "".join(_model_section(n, m, summary) for n, m in summary["models"].items()),
        ),
        ("estimators", "Closed-form estimators", _estimators(summary)),
        ("diagnostics", "Convergence diagnostics", _diagnostics(summary)),
        ("inputs", "Inputs", _inputs(summary, run_dir)),
        ("notes", "Notes and warnings", _notes(summary)),
        ("figures", "Figures", _figures(summary, run_dir)),
        ("caveats", "Caveats", _caveats()),
    ]
    nav = "".join(f'<a href="#sec-{k}">{t}</a>' for k, t, _ in sections)
    body = "".join(f'<section id="sec-{k}"><h2>{t}</h2>{h}</section>' for k, t, h in sections)
    written = datetime.datetime.now(datetime.UTC).strftime("%Y-%m-%d %H:%M:%S UTC")
    sub = (
        f"Run of {_when(summary['created'])} &middot; halo {_e(summary.get('version'))} &middot; "
        f"{len(dark)} dark model(s) compared with stars only &middot; report written {written}"
    )
    csp = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en"><head><meta charset="utf-8">'
        f'<meta http-equiv="Content-Security-Policy" content="{csp}">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>halo fit report: {_e(name)} ({_when(summary['created'])})</title>"
        f"<style>{_CSS}</style></head>"
        f'<body><main><header><h1 id="title">{_e(name)} <span class="kind">fit report</span></h1>'
        f'<p class="sub">{sub}</p></header>'
        f"{_banners(summary)}<nav>{nav}</nav>{body}"
        f"<footer>Written by halo {_e(summary.get('version'))} from "
        "<code>summary.json</code>, <code>members.ecsv</code> and the figures of the run "
        "folder. Self-contained: no scripts, no external resources.</footer>"
        "</main></body></html>\n"
    )


def write_html_report(run_dir, path=None):
    """Write one self-contained HTML report of a fit output folder.

    Parameters
    ----------
    run_dir : path of a folder written by :func:`halo.pipeline.fit.fit` (``summary.json``,
        ``members.ecsv``, ``figures/*.png``)
    path : where to write the page (default ``run_dir/report.html``); written atomically

    Returns
    -------
    Path of the written report.

    Raises
    ------
    halo.core.errors.InputError
        When the folder or its summary.json is missing, unreadable or lacks a required key.
    """
    run_dir = Path(run_dir)
    summary = _load_summary(run_dir)
    page = _render(summary, run_dir)
    out = Path(path) if path is not None else run_dir / "report.html"
    with atomic_path(out) as tmp:
        tmp.write_text(page, encoding="utf-8")
    return out
