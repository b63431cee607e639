"""The text the command line prints: model listings, predictions, workspace status and history,
and one-line reports of what a command wrote. Pure functions of the library's results (dicts and
spec objects); the closing text of a fit is :func:`halo.products.text_report.format_summary`."""

__all__ = [
    "models_json",
    "format_models",
    "format_prediction",
    "format_mock_written",
    "format_added",
    "format_status",
    "format_history",
    "format_export",
]


def _fmt(x, nd=4):
    if x is None:
        return "-"
    return f"{x:.{nd}g}"


def models_json(specs):
    """{name: description, profiles and parameters} of the model specs (``halo models --json``)."""
    return {
        s.name: {
            "description": s.description,
            "dark_profile": s.dark_profile,
            "anisotropy": s.anisotropy,
            "parameters": s.parameters,
        }
        for s in specs
    }


def format_models(specs):
    """The listing of ``halo models``: each spec, its profiles and its parameters' priors."""
    lines = []
    for s in specs:
        lines.append(f"{s.name}: {s.description}")
        lines.append(f"  dark profile: {s.dark_profile}; anisotropy: {s.anisotropy}")
        for name, p in s.parameters.items():
            bits = [f"{k}={v}" for k, v in p.items() if k not in ("prior", "doc", "unit")]
            unit = f" [{p['unit']}]" if "unit" in p else ""
            lines.append(f"  {name:<12s}{unit:<14s} {p['prior']}({', '.join(bits)})")
            if "doc" in p:
                lines.append(f"  {'':<26s} {p['doc']}")
        lines.append(
            "  also: stellar_mass [Msun] (from the satellite file), and in fits the systemic "
            "velocity, distance and half-light radius"
        )
        lines.append("")
    lines += _anisotropy_kinds()
    return "\n".join(lines)


def _anisotropy_kinds():
    """The kinds `--anisotropy KIND` puts in place of a spec's anisotropy, with their priors."""
    from halo.inputs.spec_anisotropy import ANISOTROPY_PRIORS

    lines = ["anisotropy kinds (fit, refit, predict, mock: --anisotropy KIND replaces a spec's):"]
    for kind, params in ANISOTROPY_PRIORS.items():
        lines.append(f"  {kind}")
        for name, p in params.items():
            bits = [f"{k}={v}" for k, v in p.items() if k not in ("prior", "doc", "unit")]
            unit = f" [{p['unit']}]" if "unit" in p else ""
            lines.append(f"    {name:<10s}{unit:<14s} {p['prior']}({', '.join(bits)})")
    return lines


def format_prediction(res, sat):
    """The tables of ``halo predict``: dispersion and mass per radius, J and D per angle."""
    lines = [
        f"model {res['model']} for {sat.name} (d = {sat.distance_kpc:g} kpc)",
        "parameters: " + ", ".join(f"{k}={_fmt(v)}" for k, v in res["parameters"].items()),
        "",
        f"{'R [pc]':>10s} {'sigma_los [km/s]':>17s} {'M(<r) [Msun]':>14s}",
    ]
    for r, s, m in zip(
        res["radii_pc"], res["sigma_los_kms"], res["mass_enclosed_msun"], strict=True
    ):
        lines.append(f"{r:10.2f} {s:17.4f} {m:14.4e}")
    lines.append("")
    lines.append(
        f"{'theta [deg]':>11s} {'log10 J [GeV^2 cm^-5]':>22s} {'log10 D [GeV cm^-2]':>20s}"
    )
    for i, a in enumerate(res["angles_deg"]):
        j = res["log10_j"][i] if res["log10_j"] else None
        d = res["log10_d"][i] if res["log10_d"] else None
        lines.append(f"{a:11.4f} {_fmt(j, 6):>22s} {_fmt(d, 6):>20s}")
    lines.append("")
    for k, v in res["derived"].items():
        lines.append(f"{k}: {_fmt(v, 5)}")
    return "\n".join(lines)


def format_mock_written(path, truth_path, n_stars, n_foreground):
    """The line ``halo mock`` prints."""
    extra = f" + {n_foreground} foreground" if n_foreground else ""
    return f"wrote {path} ({n_stars} stars{extra}) and its truth {truth_path}"


def format_added(r):
    """The line ``halo add`` prints about the catalogue version it made (or did not need)."""
    if not r["changed"]:
        return f"nothing new: catalogue version {r['seq']} already holds every row"
    return (
        f"catalogue version {r['seq']} ({r['sha256'][:12]}): {r['added']} rows added, "
        f"{r['replaced']} replaced; {r['n_rows']} rows, {r['n_stars']} stars"
    )


def format_status(st):
    """The text of ``halo status``: the catalogue, runs and models, what is stale and next."""
    cat = st["catalogue"]
    lines = [
        f"workspace {st['workspace']}: "
        + (
            "no catalogue"
            if cat is None
            else f"catalogue version {cat['seq']} ({cat['n_stars']} stars, {cat['n_rows']} rows)"
        )  # fmt: skip
        + f", {st['runs']} run(s), models {', '.join(st['models'])}"
    ]
    if st.get("up_to_date"):
        lines.append(f"up to date (run {st['last_run']['seq']})")
    for line in st.get("notes", []):
        lines.append(f"note: {line}")
    for line in st["stale"]:
        lines.append(f"stale: {line}")
    texts = st.get("next_text", {})
    for name, action in st.get("next", {}).items():
        lines.append(f"next refit: {name}: {texts.get(name, action)}")
    return "\n".join(lines)


def _history_row(r, name, h):
    m = h["m_half_msun"]
    j = h.get("log10_j_0.5")
    lb = h.get("ln_bayes_factor")
    flag = "" if h["converged"] else "  NOT CONVERGED"
    return (
        f"{r['run']:>4} {r['catalogue_version']:>7} {r['n_stars']:>6} {name:>12} "
        f"{m['median']:>10.3g} [{m['p16']:.2g}, {m['p84']:.2g}]"
        f"{'' if j is None else format(j['median'], '14.2f'):>14} "
        f"{'' if lb is None else format(lb, '12.2f'):>12} "
        f"{h.get('effective_members') or float('nan'):>8.1f}{flag}"
    )


def format_history(rows):
    """The table of ``halo history``: per run and model the mass, J, ln B and members."""
    if not rows:
        return "no runs yet: `halo refit` fits the latest catalogue version"
    lines = [
        f"{'run':>4} {'version':>7} {'stars':>6} {'model':>12} {'M(<r_1/2) [Msun]':>24} "
        f"{'log10 J(0.5)':>14} {'ln B':>12} {'members':>8}"
    ]
    for r in rows:
        for name, h in r["models"].items():
            lines.append(_history_row(r, name, h))
    return "\n".join(lines)


def format_export(run, out, written):
    """What ``halo export`` wrote, one path a line."""
    return "\n".join([f"exported run {run} to {out}:"] + [f"  {p}" for p in written])
