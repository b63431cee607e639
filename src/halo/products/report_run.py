"""How the run went, in the fit report: convergence diagnostics, the inputs and settings, and
the run's notes and warnings."""

import json
from pathlib import Path

from halo.inference.sampling import ESS_MIN, RHAT_MAX
from halo.products.report_cells import esc, fixed, is_num, kv_table, slugify
from halo.products.report_sources import member_counts
from halo.results.members import LIKELY_BINARY_BAYES_FACTOR

__all__ = ["diagnostics", "inputs", "notes", "BFMI_LOW"]

#: BFMI below this suggests the sampler explores the energy distribution poorly (Betancourt 2016,
#: arXiv:1604.00695, sec. 6.1; common practice)
BFMI_LOW = 0.3


def _start(m):
    """How a model's chains started: fresh, warm from an earlier run, or reused as they were."""
    if m.get("reused_from"):
        return f"reused from {esc(Path(m['reused_from']).name)} (inputs unchanged)"
    w = m.get("warm_start")
    if not w:
        return "fresh"
    if w.get("fallback"):
        return (
            f"cold start ({esc(w.get('warmup'))} warmup): the warm start from "
            f"{esc(Path(str(w.get('from', ''))).name)} failed: {esc(w.get('reason', ''))}"
        )
    matrix = {
        "earlier posterior": "its mass matrix",
        "adapted": "mass matrix adapted (that run had not converged)",
    }.get(w.get("mass_matrix"), "")
    return (
        f"warm start from {esc(Path(str(w.get('from', ''))).name)}: {esc(w.get('warmup'))} "
        f"warmup{', ' + matrix if matrix else ''}"
    )


def diagnostics(summary):
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

        status = "converged" if m["converged"] else "&#9888; not converged"
        probs = "; ".join(esc(p) for p in m.get("problems") or []) or "&ndash;"
        rows.append(
            f'<tr id="diag-{slugify(name)}"><th scope="row">{esc(name)}</th>'
            f'<td class="{"" if m["converged"] else "bad"}">{status}</td>'
            + cell(fixed(rhat, 3), not (is_num(rhat) and rhat < RHAT_MAX))
            + cell(fixed(ess, 0), not (is_num(ess) and ess > ESS_MIN))
            + cell(fixed(tail, 0), not (is_num(tail) and tail > ESS_MIN))
            + cell(esc(div), not (is_num(div) and div == 0))
            + cell(fixed(bfmi), is_num(bfmi) and bfmi < BFMI_LOW)
            + f"<td>{probs}</td><td>{_start(m)}</td></tr>"
        )
    return (
        f'<table id="diagnostics">{head}{"".join(rows)}</table>'
        f"<p>A model counts as converged when r-hat &lt; {RHAT_MAX:g}, bulk ESS &gt; "
        f"{ESS_MIN:.0f} and there are no divergent transitions. Tail ESS at or below "
        f"{ESS_MIN:.0f} and BFMI below {BFMI_LOW:g} are marked as well.</p>"
    )


def _data_rows(summary):
    """The catalogue, its hashes and the version of halo that fitted it."""
    cat = summary["catalogue"]
    sha = cat.get("sha256")
    sat_sha = summary.get("satellite_sha256")
    not_file = "<em>not recorded (not read from a file)</em>"
    return [
        ("catalogue source", f"<code>{esc(cat.get('source'))}</code>"),
        ("catalogue SHA-256", f'<span class="hash">{esc(sha)}</span>' if sha else not_file),
        ("catalogue rows", esc(cat.get("n_rows"))),
        ("stars (after merging epochs)", esc(cat.get("n_stars"))),
        (
            "satellite file SHA-256",
            f'<span class="hash">{esc(sat_sha)}</span>' if sat_sha else not_file,
        ),
        ("halo version", esc(summary.get("version"))),
    ]


#: settings printed first, in this order (the others follow as they are)
_FIRST_SETTINGS = (
    "chains",
    "warmup",
    "draws",
    "seed",
    "binaries",
    "foreground",
    "foreground_reason",
)


def _settings_rows(st):
    srows = []
    for key in ("chains", "warmup", "draws", "seed"):
        if key in st:
            srows.append((key, esc(st[key])))
    if "binaries" in st:
        srows.append(("binaries", "on" if st["binaries"] else "off"))
    if "foreground" in st:
        srows.append(("foreground", "on" if st["foreground"] else "off"))
    if "foreground_reason" in st:
        srows.append(("foreground: why", esc(st["foreground_reason"])))
    for key, val in st.items():
        if key not in _FIRST_SETTINGS:
            srows.append((esc(key), esc(val)))
    return srows


def _satellite_rows(sat):
    sat_rows = []
    for key, val in sat.items():
        if isinstance(val, list | dict):
            val = json.dumps(val)
        sat_rows.append((f"<code>{esc(key)}</code>", esc(val)))
    return sat_rows


def _members_html(run_dir):
    """The members table, or a note saying why members.ecsv could not be read."""
    mem, why = member_counts(run_dir)
    if mem is None:
        return f'<p class="note">{esc(why)}</p>'
    mrows = [("stars in members.ecsv", esc(mem["n"]))]
    if "sum_member" in mem:
        mrows.append(("sum of membership probabilities", fixed(mem["sum_member"], 1)))
        mrows.append(("likely non-members (member_prob &lt; 0.5)", esc(mem["non_members"])))
    if "binaries" in mem:
        label = f"likely binaries (binary Bayes factor &gt; {LIKELY_BINARY_BAYES_FACTOR:g})"
        mrows.append((label, esc(mem["binaries"])))
    if "multi_epoch" in mem:
        mrows.append(("stars with several epochs", esc(mem["multi_epoch"])))
    return kv_table(mrows, "members")


def inputs(summary, run_dir):
    """The Inputs section: data, settings, satellite and members."""
    return (
        "<h3>Data</h3>"
        + kv_table(_data_rows(summary), "inputs")
        + "<h3>Settings</h3>"
        + kv_table(_settings_rows(summary["settings"]), "settings")
        + "<h3>Satellite</h3>"
        + kv_table(_satellite_rows(summary["satellite"]), "satellite")
        + "<h3>Members</h3>"
        + _members_html(run_dir)
    )


def notes(summary):
    """The run's warnings and notes; a model's non-convergence is left to the banner at the top
    (said once)."""
    parts = []
    for key, title in (("warnings", "Warnings"), ("notes", "Notes")):
        items = [x for x in summary.get(key) or [] if "NOT CONVERGED" not in str(x)]
        if items:
            lis = "".join(f"<li>{esc(x)}</li>" for x in items)
            parts.append(f'<h3>{title}</h3><ul class="plain" id="{key}">{lis}</ul>')
        else:
            parts.append(f"<h3>{title}</h3><p>None.</p>")
    return "".join(parts)
