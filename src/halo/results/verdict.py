"""The verdict of a fit in one block (summary.json ``verdict``): the fitted dispersion (or its
upper limit) and v_sys, M/L_V inside r_1/2 with its 95% lower bound, ln B and its grade, the
stars-only binary fraction when it runs to its prior's upper edge, the convergence state beside
every graded word, and why the closed-form and fitted dispersions differ.

:func:`build_verdict` is a pure function of the summary dict (plus the binary-fraction prior and
the dispersion steps of :func:`dispersion_steps`), so every number it quotes is one of the
summary's own."""

import numpy as np

from halo.core.vocabulary import STARS_ONLY
from halo.inference.resolution import dispersion_resolution
from halo.results.comparison import grade

__all__ = [
    "EDGE_FRACTION",
    "STELLAR_ML_V_MAX",
    "dispersion_steps",
    "pick_model",
    "build_verdict",
]

#: the binary fraction "runs to the prior edge" when its 97.5th percentile lies within this
#: fraction of the prior's width of the upper bound (a choice of this program)
EDGE_FRACTION = 0.05

#: V-band M/L of an old, metal-poor stellar population: about 1-3 Msun/Lsun (common practice);
#: a 95% lower bound above this upper end asks for mass beyond the stars
STELLAR_ML_V_MAX = 3.0


def dispersion_steps(res):
    """A constant dispersion at the fit's median v_sys, step by step from the closed-form
    treatment to the fitted one (summary.json ``verdict.dispersion_steps``): every star with the
    same weight, no binary term (``all_stars_kms``); stars weighted by their membership
    probability, no binary term (``members_kms``, None without a membership model). The last
    step, with binary orbits marginalised, is summary.json ``dispersion``."""
    v, e = np.asarray(res["data"].v), np.asarray(res["data"].v_err)
    v_sys = float(np.median(res["samples"]["v_sys"]))
    out = {"all_stars_kms": dispersion_resolution(v, e, v_sys)["sigma_median_kms"]}
    mp = res["member_prob"]
    out["members_kms"] = (
        None if mp is None else dispersion_resolution(v, e, v_sys, weights=mp)["sigma_median_kms"]
    )
    out["v_sys_kms"] = v_sys
    return out


def pick_model(summary):
    """The dark model the verdict reads: the highest evidence among the converged dark models,
    else among all dark models; None when only stars-only was fitted."""
    dark = {n: m for n, m in summary["models"].items() if n != STARS_ONLY}
    if not dark:
        return None
    pool = {n: m for n, m in dark.items() if m.get("converged")} or dark

    def log_z(n):
        z = (pool[n].get("evidence") or {}).get("log_z")
        return -np.inf if z is None else z

    return max(pool, key=log_z)


def _convergence(summary, names):
    bad = [n for n in names if not summary["models"][n].get("converged")]
    if not bad:
        return True, bad, "converged" if len(names) == 1 else f"{' and '.join(names)} converged"
    return False, bad, f"not converged: {', '.join(bad)}"


def _q3(q, *keys):
    if not isinstance(q, dict):
        return None
    return {k: q.get(k) for k in ("median", "p16", "p84", *keys)}


def _pm(q, fmt):
    med, lo, hi = q["median"], q["p16"], q["p84"]
    if None in (med, lo, hi):
        return "undefined"
    return f"{med:{fmt}} (+{hi - med:{fmt}}/-{med - lo:{fmt}})"


def _dispersion(summary):
    d = summary.get("dispersion") or {}
    out = {
        "resolved": d.get("resolved"),
        "median_kms": d.get("sigma_median_kms"),
        "p16_kms": d.get("sigma_p16_kms"),
        "p84_kms": d.get("sigma_p84_kms"),
        "upper95_kms": d.get("sigma_upper95_kms"),
        "two_delta_ln_l": d.get("two_delta_ln_l"),
    }
    if out["median_kms"] is None:
        return out, "fitted dispersion: not computed"
    if out["resolved"]:
        q = {"median": out["median_kms"], "p16": out["p16_kms"], "p84": out["p84_kms"]}
        words = f"fitted dispersion {_pm(q, '.2f')} km/s, resolved"
    else:
        words = f"fitted dispersion NOT RESOLVED: sigma_los < {out['upper95_kms']:.2f} km/s (95%)"
    if out["two_delta_ln_l"] is not None:
        words += f" (2 delta ln L = {out['two_delta_ln_l']:.1f} against sigma = 0)"
    return out, words


def _mass_to_light(m, state):
    der = m.get("derived") or {}
    q = _q3(der.get("ml_half_v"))
    if q is None:
        return None, "M/L_V: no luminosity in the satellite file"
    q["lower95"] = der.get("ml_half_v_lower95")
    words = f"M/L_V(<r_1/2) = {_pm(q, '.3g')} Msun/Lsun"
    if q["lower95"] is not None:
        words += f", > {q['lower95']:.3g} at 95%"
        q["above_stellar"] = bool(q["lower95"] > STELLAR_ML_V_MAX)
        if q["above_stellar"]:
            words += f" (above the ~1-{STELLAR_ML_V_MAX:g} of old stars) [{state}]"
    return q, words


def _bayes(m, state):
    c = m.get("vs_stars_only") or {}
    ln_b = c.get("ln_bayes_factor")
    if ln_b is None:
        return None, "ln B: not computed"
    words, side = grade(ln_b)
    out = {
        "ln_bayes_factor": ln_b,
        "ln_bayes_factor_err": c.get("ln_bayes_factor_err"),
        "grade": words,
        "favours": side,
        "words": c.get("verdict"),
    }
    err = out["ln_bayes_factor_err"]
    pm = "" if err is None else f" +- {err:.2f}"
    return out, f"ln B = {ln_b:+.2f}{pm}: {c.get('verdict')} [{state}]"


def _binary_flag(summary, dark, fraction_range, state):
    stars = summary["models"].get(STARS_ONLY) or {}
    q = stars.get("binary_fraction")
    if not isinstance(q, dict) or fraction_range is None:
        return None, None
    if q.get("p97.5") is None or q.get("median") is None:  # undefined (e.g. one draw)
        return None, None
    lo, hi = (float(x) for x in fraction_range)
    out = _q3(q, "p97.5")
    out["prior"] = [lo, hi]
    out["at_prior_edge"] = bool(q["p97.5"] >= hi - EDGE_FRACTION * (hi - lo))
    out["most_binaries"] = bool(q["median"] > 0.5)
    out["flag"] = None
    if dark is not None:
        dq = summary["models"][dark].get("binary_fraction") or {}
        out["dark_median"] = dq.get("median")
    if not out["at_prior_edge"]:
        return out, None
    other = "" if out.get("dark_median") is None else f"; {dark}: {out['dark_median']:.2f}"
    if out["most_binaries"]:
        out["flag"] = "stars alone need most stars to be binaries"
    else:
        out["flag"] = "stars alone push the binary fraction to its prior's upper edge"
    words = (
        f"{out['flag']}: binary fraction {_pm(q, '.2f')} under stars alone, prior "
        f"{lo:g}-{hi:g}{other} [{state}]"
    )
    return out, words


def _reading(disp, ml, bayes, binary, state):
    """One reading that combines the dispersion, M/L and ln B."""
    if disp.get("resolved") is False:
        return (
            "the dispersion is not resolved: these data cannot tell a dark-matter-dominated "
            "galaxy from a star cluster; quote the upper limits"
        )
    if bayes is None:
        return "no dark model fitted: nothing to compare stars alone with"
    side, strong = bayes["favours"], bayes["grade"] != "none"
    ml_high = ml is not None and ml.get("above_stellar")
    if strong and side == "dark matter" and ml_high:
        return f"a dark-matter-dominated galaxy [{state}]"
    if strong and side == "dark matter":
        why = "no M/L" if ml is None else "its M/L_V lower bound is within stellar values"
        return f"dark matter favoured by ln B, but {why} [{state}]"
    if strong and side == "stars alone":
        tail = ""
        if binary and binary.get("flag"):
            tail = ", but only if most stars are binaries: more epochs would tell"
        return f"consistent with stars alone (a star cluster){tail} [{state}]"
    return f"undecided between a dark halo and stars alone [{state}]"


def _why_differ(summary, steps, disp):
    """Words and numbers: why the closed-form and fitted dispersions differ."""
    est = summary.get("estimators") or {}
    cf = est.get("sigma_los_kms")
    out = {
        "closed_form_kms": cf,
        "closed_form_err_kms": est.get("sigma_los_err_kms"),
        "closed_form_n_stars": est.get("n_stars_used"),
        "closed_form_selection": est.get("selection"),
        "all_stars_kms": (steps or {}).get("all_stars_kms"),
        "members_kms": (steps or {}).get("members_kms"),
        "fitted_kms": disp.get("median_kms"),
    }
    if cf is None or out["fitted_kms"] is None:
        return out, None
    bits = [
        f"closed-form {cf:.2f} km/s ({out['closed_form_n_stars']} stars kept by a hard cut: "
        f"{out['closed_form_selection']}; free mean, no binary motion)",
    ]
    if out["all_stars_kms"] is not None:
        n = summary["catalogue"]["n_stars"]
        bits.append(f"all {n} stars alike, any field stars included, {out['all_stars_kms']:.2f}")
    if out["members_kms"] is not None:
        bits.append(f"weighted by membership {out['members_kms']:.2f}")
    st = summary.get("settings") or {}
    last = "binary orbits marginalised" if st.get("binaries") else "no binary term"
    bits.append(f"{last} (the fit's treatment) {out['fitted_kms']:.2f}")
    text = (
        "why the dispersions differ (constant sigma at the fitted v_sys, per-star errors "
        "deconvolved): " + "; ".join(bits) + ". The Jeans models fit sigma_los(R), not one value."
    )
    return out, text


def build_verdict(summary, fraction_range=None, steps=None):
    """The ``verdict`` entry of the summary dict ``summary`` (models, dispersion and estimators
    filled in); ``fraction_range``: the binary-fraction prior (None with binaries off);
    ``steps``: :func:`dispersion_steps` of the reference fit."""
    dark = pick_model(summary)
    names = [STARS_ONLY] if dark is None else [dark, STARS_ONLY]
    names = [n for n in names if n in summary["models"]]
    ok, bad, state = _convergence(summary, names)
    m = summary["models"][dark] if dark else summary["models"][STARS_ONLY]
    disp, disp_words = _dispersion(summary)
    v_sys = _q3((m.get("parameters") or {}).get("v_sys"))
    ml, ml_words = _mass_to_light(m, state)
    bayes, bayes_words = (None, None) if dark is None else _bayes(m, state)
    binary, binary_words = _binary_flag(summary, dark, fraction_range, state)
    why, why_words = _why_differ(summary, steps, disp)
    reading = _reading(disp, ml, bayes, binary, state)
    head = f"VERDICT ({dark or STARS_ONLY} against stars alone; {state})"
    if not ok:
        head = head[:-1] + ", so its numbers are unreliable)"
    vs = "v_sys undefined" if v_sys is None else f"v_sys {_pm(v_sys, '.2f')} km/s"
    lines = [head, f"{disp_words}; {vs}", ml_words]
    lines += [w for w in (bayes_words, binary_words) if w]
    lines.append(f"reading: {reading}")
    if why_words:
        lines.append(why_words)
    return {
        "text": "\n".join(lines),
        "model": dark,
        "converged": ok,
        "not_converged": bad,
        "convergence": state,
        "reading": reading,
        "dispersion": disp,
        "v_sys_kms": v_sys,
        "ml_half_v": ml,
        "bayes_factor": bayes,
        "stars_only_binary_fraction": binary,
        "dispersion_steps": why,
        "explanation": why_words,
    }
