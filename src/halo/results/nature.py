"""summary.json ``nature``: galaxy or star cluster? Dynamics, tides and survival, chemistry.

Three lines of evidence side by side, each with its numbers, errors and a one-line plain reading,
and no single label:

- ``dynamics``: the Bayes factor of each dark model against stars only (from ``models``);
- ``tides``: the Milky Way model and the point where its tides are judged
  (``tides.milky_way``, :mod:`halo.results.tidal_site`), and per model the Jacobi radius,
  r_1/2 / r_J and the outermost member / r_J (:mod:`halo.results.nature_draws`), with the J
  and D of dark models: the fit's own per-draw ``log10_j`` / ``log10_d`` (truncated at each
  draw's r_J unless switched off) and their untruncated values (:mod:`halo.results.truncation`);
- ``survival``: could the stars-only model, draw by draw, have survived two-body relaxation and
  the tidal field for its age (:mod:`halo.physics.survival`)? ``p_survives_age`` is the fraction
  of its draws that do;
- ``metallicity``: mean [Fe/H] and spread (:func:`halo.results.metallicity.metallicity_section`),
  when the catalogue has [Fe/H].
"""

import sys

import numpy as np

from halo.core.quantiles import quantiles
from halo.core.vocabulary import STARS_ONLY, angle_keys
from halo.physics.survival import BM03_N_RANGE, MEAN_STELLAR_MASS, METHOD_BM03
from halo.physics.tides import R_J_FLOOR
from halo.results.metallicity import metallicity_section
from halo.results.nature_draws import N_DRAWS, model_draws, outermost_member_deg, survival_draws
from halo.results.tidal_site import tidal_site

__all__ = ["CAUTION", "nature_section"]

CAUTION = (
    "classifications of the faintest systems are provisional: they rest on the inputs' errors "
    "(distance, proper motion, age, stellar mass, few stars) and on the Milky Way model"
)
JACOBI_FORMULA = (
    "r_J = (G M(<r_J) / (Omega^2 - d2Phi/dr2))^(1/3) (Binney & Tremaine 2008 section 8.3; King "
    "1962), M(<r_J) the model's own mass inside r_J, solved per draw"
)
SURVIVAL_SOURCES = {
    "relaxation": "Spitzer 1987 eq. 2-63, ln Lambda = ln(0.4 N) floored at 1",
    "dissolution": "Baumgardt & Makino 2003 (MNRAS 340, 227) eq. 7, where ln(0.02 N) >= 1",
    "evaporation": "t_rh / xi_e, xi_e 0.0074 (isolated) to 0.045 (tidally limited) by r_h / r_J",
    "density": "mean density inside r_1/2 against 3 (Omega^2 - d2Phi/dr2) / (4 pi G)",
    "mean_stellar_mass_msun": MEAN_STELLAR_MASS,
}


def _tides_reading(ratio):
    if not np.isfinite(ratio):
        return "no Jacobi radius: the Milky Way's field does not limit this satellite here"
    text = f"r_1/2 / r_J = {ratio:.2g}: "
    if ratio < 0.1:
        return text + "the stars lie well inside the Jacobi radius; tides do not limit them"
    if ratio < 0.5:
        return text + "the Jacobi radius is a few r_1/2 out; tides shape the outskirts"
    return text + "r_1/2 reaches the Jacobi radius; such a system is being tidally stripped"


def _tides_entry(d, derived=None, jd_truncation=None):
    entry = {
        "jacobi_radius_pc": quantiles(d["r_j"] * 1e3),
        "r_half_over_jacobi": quantiles(d["r_half_over_jacobi"]),
        "outermost_member_over_jacobi": quantiles(d["outermost_over_jacobi"]),
        "mass_inside_jacobi_msun": quantiles(d["mass_in_rj"]),
        "n_draws": int(len(d["r_j"])),
        # draws whose centre is not bound (central density below the tidal density): r_J floored
        "n_draws_unbound": int(np.sum(d["r_j"] <= R_J_FLOOR)),
        "formula": JACOBI_FORMULA,
    }
    if derived is not None and "log10_j_untruncated" in derived:
        # the same per-draw numbers as models.<m>.derived (every draw, not the subsample)
        for key in ("log10_j", "log10_d", "log10_j_untruncated", "log10_d_untruncated"):
            entry[key] = {k: quantiles(derived[key][:, i]) for i, k in enumerate(angle_keys())}
        entry["jd_truncation"] = (jd_truncation or {}).get("statement")
    q = entry["r_half_over_jacobi"]
    entry["reading"] = _tides_reading(np.nan if q is None else q["median"])
    return entry


def _survival_reading(p, t_q, age):
    if t_q is None:
        return "no dissolution time: the Milky Way's field sets no tidal limit at these points"
    span = f"{t_q['median']:.3g} Gyr (68%: {t_q['p16']:.3g}-{t_q['p84']:.3g})"
    if p is None:
        return f"dissolution time {span}; no age_gyr in the satellite file to compare"
    text = f"dissolution time {span} against an age of {age:.3g} Gyr (p = {p:.3f}): "
    if p < 0.05:
        return text + "stars alone would not survive; the stars-only hypothesis is disfavoured"
    if p > 0.5:
        return text + "stars alone would survive to this age"
    return text + "survival of stars alone is uncertain"


def _method_note(frac_bm, n_med, frac_over):
    lo, hi = BM03_N_RANGE
    if frac_bm == 0:
        note = (
            f"N ~ {n_med:.3g} stars lies below every N-body calibration (ln(0.02 N) < 1): the "
            "evaporation time in relaxation times and the tidal filling r_h / r_J were used"
        )
    else:
        note = f"Baumgardt & Makino (2003) for {100 * frac_bm:.0f}% of the draws"
        if not lo <= n_med <= hi:
            note += f", extrapolated outside its calibration ({lo}-{hi} stars)"
    if frac_over > 0:
        note += (
            f"; {100 * frac_over:.0f}% of the draws have r_h >= r_J and dissolve within one "
            "orbit (2 pi / Omega)"
        )
    return note


def _survival_entry(s, satellite):
    p = float(np.mean(s["survives"])) if "survives" in s else None
    t_q = quantiles(s["dissolution_time_gyr"])
    frac_bm = float(np.mean(s["method"] == METHOD_BM03))
    frac_over = float(np.mean(s["filling"] >= 1.0))
    n_stars = s["n_stars"]
    return {
        "crossing_time_myr": quantiles(s["crossing_time_gyr"] * 1e3),
        "relaxation_time_gyr": quantiles(s["relaxation_time_gyr"]),
        "dissolution_time_gyr": t_q,
        "p_survives_age": p,
        "age_gyr": satellite.age_gyr,
        "age_err_gyr": satellite.age_err_gyr,
        "method": {"baumgardt_makino_2003": frac_bm, "evaporation": 1.0 - frac_bm},
        "method_note": _method_note(frac_bm, float(np.median(n_stars)), frac_over),
        "fraction_tidally_overfilling": frac_over,
        "n_stars_assumed": quantiles(n_stars),
        "tidal_filling_r_half_over_jacobi": quantiles(s["filling"]),
        "half_mass_density_msun_kpc3": quantiles(s["half_mass_density"]),
        "milky_way_mean_density_msun_kpc3": quantiles(s["mw_density"]),
        "density_over_tidal": quantiles(s["density_ratio"]),
        "model": STARS_ONLY,
        "sources": dict(SURVIVAL_SOURCES),
        "reading": _survival_reading(p, t_q, satellite.age_gyr),
    }


def _dynamics(models_summary):
    """ln B of each dark model against stars only, read on Kass & Raftery's (1995) scale."""
    out = {}
    for name, m in (models_summary or {}).items():
        vs = m.get("vs_stars_only")
        if not vs or vs.get("ln_bayes_factor") is None:
            continue
        ln_b = vs["ln_bayes_factor"]
        if ln_b > 3:
            text = "the velocities favour a dark halo over stars alone"
        elif ln_b < -3:
            text = "the velocities favour stars alone"
        else:
            text = "the velocities do not decide between a dark halo and stars alone"
        out[name] = {
            "ln_bayes_factor": ln_b,
            "ln_bayes_factor_err": vs.get("ln_bayes_factor_err"),
            "reading": f"ln B = {ln_b:+.1f}: {text} (|ln B| > 3 strong; Kass & Raftery 1995)",
        }
    return out


def _seed_and_progress(settings):
    """(seed, progress callable or None) from an int seed or fit settings (seed, progress)."""
    if isinstance(settings, int | np.integer):
        return int(settings), None
    loud = getattr(settings, "progress", False)
    return int(settings.seed), (
        lambda msg: print(msg, file=sys.stderr, flush=True)
    ) if loud else None


def nature_section(stars, satellite, results, specs, settings, models_summary=None, **options):
    """summary.json ``nature`` (see the module docstring).

    ``results``/``specs``: {model name: result / spec} of the fit, stars-only among them;
    ``settings``: the fit settings (their seed; progress lines on stderr when they ask for
    progress) or an int seed; ``models_summary``: summary.json ``models`` (for the dynamics
    line); ``options``: ``milky_way`` (a Milky Way model name; else the satellite file's
    ``milky_way_model``, else the default), ``tides`` (the fit's shared tidal field,
    :func:`halo.results.truncation.shared_tides`: reused with the fit's pairing, so that r_J
    here is the one behind the reported J and D).
    """
    seed, progress = _seed_and_progress(settings)
    rng = np.random.default_rng([seed, 12])
    shared = options.get("tides") or {}
    if shared.get("site") is not None and not options.get("milky_way"):
        site, mw = shared["site"], shared["entry"]
    else:
        site, mw = tidal_site(
            satellite,
            results[STARS_ONLY]["samples"],
            rng,
            model=options.get("milky_way") or getattr(satellite, "milky_way_model", None),
            progress=progress,
        )
        shared = {}
    ref = next((n for n in specs if n != STARS_ONLY), STARS_ONLY)
    member_prob = results[ref].get("member_prob")
    r_out = outermost_member_deg(stars, member_prob)
    tides, draws = {"milky_way": mw}, {}
    for name, spec in specs.items():
        if progress is not None:
            progress(f"nature: Jacobi radius of {name}")
        der = results[name].get("derived") or {}
        pair = der.get("tidal_pair") if shared else None
        # with the fit's pairing every draw is used: r_J here is the r_J behind its J and D
        n = N_DRAWS if pair is None else len(pair)
        draws[name] = model_draws(
            spec, satellite, results[name]["samples"], site, rng, r_out_deg=r_out, pair=pair,
            n_draws=n,
        )  # fmt: skip
        tides[name] = _tides_entry(draws[name], der, results[name].get("jd_truncation"))
    s = survival_draws(draws[STARS_ONLY], satellite.age_gyr, satellite.age_err_gyr, rng)
    s["n_stars"] = draws[STARS_ONLY]["mass_total"] / MEAN_STELLAR_MASS
    out = {
        "dynamics": _dynamics(models_summary),
        "tides": tides,
        "survival": _survival_entry(s, satellite),
        "caution": CAUTION,
    }
    met = metallicity_section(stars, member_prob, seed)
    if met is not None:
        out["metallicity"] = met
    return out
