"""The verdict block as text (printed first by ``halo fit`` and ``halo demo``) and the nature of
the satellite beside it (summary.json ``nature``: tides, survival, metallicity) when present.

:func:`nature_items` gives (label, words) pairs shared by the terminal and the HTML report."""

__all__ = ["verdict_lines", "nature_items", "nature_lines"]


def _q(q, fmt=".3g", unit=""):
    """'median (+up/-down) unit' of a quantile summary, or None when it is missing."""
    if not isinstance(q, dict) or None in (q.get("median"), q.get("p16"), q.get("p84")):
        return None
    med, lo, hi = q["median"], q["p16"], q["p84"]
    return f"{med:{fmt}} (+{hi - med:{fmt}}/-{med - lo:{fmt}}){unit}"


def _milky_way(mw):
    bits = []
    if mw.get("model"):
        bits.append(f"Milky Way model {mw['model']}")
    if mw.get("galactocentric_distance_kpc") is not None:
        bits.append(f"at {mw['galactocentric_distance_kpc']:.3g} kpc from its centre")
    if mw.get("enclosed_mass_msun") is not None:
        bits.append(f"enclosed mass {mw['enclosed_mass_msun']:.3g} Msun")
    return ", ".join(bits)


def _tides(tides):
    items = []
    mw = tides.get("milky_way")
    if isinstance(mw, dict):
        items.append(("tides: host", _milky_way(mw)))
    for name, t in tides.items():
        if name == "milky_way" or not isinstance(t, dict):
            continue
        bits = []
        r_j = _q(t.get("jacobi_radius_pc"), ".3g", " pc")
        if r_j:
            bits.append(f"Jacobi radius {r_j}")
        ratio = _q(t.get("r_half_over_jacobi"), ".2g")
        if ratio:
            bits.append(f"r_1/2 / r_J = {ratio}")
        if bits:
            items.append((f"tides: {name}", "; ".join(bits)))
    return items


def _survival(s):
    bits = []
    for key, label in (
        ("relaxation_time_gyr", "relaxation time"),
        ("dissolution_time_gyr", "dissolution time"),
    ):
        words = _q(s.get(key), ".3g", " Gyr")
        if words:
            bits.append(f"{label} {words}")
    if s.get("p_survives_age") is not None:
        bits.append(f"P(survives its age) = {s['p_survives_age']:.2f}")
    return [("survival", "; ".join(bits))] if bits else []


def _metallicity(m):
    bits = []
    mean = _q(m.get("mean_feh"), ".2f", " dex")
    if mean:
        bits.append(f"mean [Fe/H] {mean}")
    if m.get("resolved"):
        spread = _q(m.get("spread_dex"), ".2f", " dex")
        if spread:
            bits.append(f"spread {spread}, resolved")
    elif m.get("spread_upper_95_dex") is not None:
        bits.append(f"spread NOT RESOLVED: < {m['spread_upper_95_dex']:.2f} dex (95%)")
    return [("metallicity", "; ".join(bits))] if bits else []


def nature_items(summary):
    """(label, words) of summary.json ``nature`` (empty when the summary has none)."""
    nature = summary.get("nature")
    if not isinstance(nature, dict):
        return []
    items = []
    if isinstance(nature.get("tides"), dict):
        items += _tides(nature["tides"])
    if isinstance(nature.get("survival"), dict):
        items += _survival(nature["survival"])
    if isinstance(nature.get("metallicity"), dict):
        items += _metallicity(nature["metallicity"])
    return items


def nature_lines(summary):
    """The nature of the satellite as indented lines (empty when the summary has none)."""
    items = nature_items(summary)
    if not items:
        return []
    return ["nature of the satellite:"] + [f"  {label}: {words}" for label, words in items]


def verdict_lines(summary):
    """The verdict block, then the nature beside it; empty for a summary without a verdict
    (written by an earlier version)."""
    v = summary.get("verdict")
    if not isinstance(v, dict) or not v.get("text"):
        return nature_lines(summary)
    first, *rest = v["text"].splitlines()
    rule = "=" * min(100, max(40, len(first)))
    lines = [rule, first] + [f"  {line}" for line in rest]
    if not v.get("converged", True):
        bad = ", ".join(v.get("not_converged") or [])
        lines.insert(1, f"*** NOT CONVERGED: {bad}: rerun with more warmup, draws or chains ***")
    lines += nature_lines(summary)
    return lines + [rule]
