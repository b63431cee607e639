"""Figures of a fit (matplotlib, Agg): dispersion profile, mass profile, J(theta), corner plots."""

import numpy as np

from halo.core.fileio import atomic_path
from halo.physics.estimators import dispersion_ml
from halo.results.derived import CURVE_ANGLES, PROFILE_RADII_PC

__all__ = ["make_figures", "binned_dispersion", "corner_keys", "CORNER_MAX"]

_COLOURS = ("tab:blue", "tab:orange", "tab:green", "tab:red", "tab:purple", "tab:brown")


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def binned_dispersion(radius, v, v_err, per_bin=None):
    """Maximum-likelihood dispersion in radial bins of about equal numbers of stars.

    Returns (median radius, sigma, sigma_lo, sigma_hi) arrays per bin.
    """
    order = np.argsort(radius)
    n = len(radius)
    per_bin = per_bin or int(np.clip(n // 6, 8, 60))
    nb = max(1, n // per_bin)
    out = []
    for idx in np.array_split(order, nb):
        f = dispersion_ml(v[idx], v_err[idx])
        out.append((np.median(radius[idx]), f.sigma, f.sigma_lo, f.sigma_hi))
    return tuple(np.array(c) for c in zip(*out, strict=True))


def _band(ax, x, draws, colour, label):
    """Median line and 68% band over the draws (axis 0)."""
    q = np.percentile(draws, [16, 50, 84], axis=0)
    ax.fill_between(x, q[0], q[2], color=colour, alpha=0.3)
    ax.plot(x, q[1], color=colour, label=label)


def _save(fig, path):
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=110, bbox_inches="tight")


def _title(ax, text, summary, name=None):
    bad = [m for m, v in summary["models"].items() if not v["converged"] and (name in (None, m))]
    if bad:
        text += "\nNOT CONVERGED: " + ", ".join(bad)
    ax.set_title(text, color="red" if bad else "black", fontsize=10)


def _dispersion_figure(plt, ctx, stars, sigma_angles, path):
    """1. the binned dispersion of the stars and each model's band."""
    fig, ax = plt.subplots(figsize=(6, 4.2))
    rb, sb, lo, hi = binned_dispersion(ctx["pc"], np.asarray(stars.v), np.asarray(stars.v_err))
    ax.errorbar(rb, sb, yerr=[sb - lo, hi - sb], fmt="ko", label="data (binned, ML)", zorder=5)
    r_grid = np.tan(np.radians(sigma_angles)) * ctx["d0"] * 1e3
    for n in ctx["names"]:
        _band(ax, r_grid, ctx["results"][n]["derived"]["sigma_los_kms"], ctx["colours"][n], n)
    ax.set_xscale("log")
    ax.set_xlabel("projected radius R [pc] (circularised, at the catalogue distance)")
    ax.set_ylabel(r"$\sigma_{\rm los}$ [km/s]")
    ax.legend(fontsize=8)
    _title(ax, f"{ctx['sat_name']}: velocity dispersion (bands: 68%)", ctx["summary"])
    _save(fig, path)
    plt.close(fig)


def _estimator_points(ax, est):
    """The closed-form estimators at their radii, with their 68% intervals."""
    for key, mk in (("walker2009", "s"), ("wolf2010", "D"), ("errani2018", "^")):
        q = est.get(key)
        if q:
            r = est[f"{key}_radius_pc"]
            ax.errorbar(
                [r],
                [q["median"]],
                yerr=[[q["median"] - q["p16"]], [q["p84"] - q["median"]]],
                fmt=mk,
                color="k",
                mfc="white",
                label=key,
            )


def _mass_figure(plt, ctx, path):
    """2. each model's enclosed mass, the stars alone and the estimators."""
    results, names, summary = ctx["results"], ctx["names"], ctx["summary"]
    fig, ax = plt.subplots(figsize=(6, 4.2))
    radii = np.asarray(PROFILE_RADII_PC)
    for n in names:
        _band(
            ax, radii, results[n]["derived"]["mass_total_msun"], ctx["colours"][n], f"{n} (total)"
        )
    ms = results[names[0]]["derived"]["mass_stars_msun"]
    ax.plot(radii, np.median(ms, axis=0), "k--", label="stars")
    _estimator_points(ax, summary["estimators"])
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("r [pc]")
    ax.set_ylabel(r"M(<r) [M$_\odot$]")
    ax.legend(fontsize=7)
    _title(ax, f"{ctx['sat_name']}: enclosed mass (bands: 68%)", summary)
    _save(fig, path)
    plt.close(fig)


def _jfactor_figure(plt, ctx, dark, path):
    """3. J against the cone half-angle of each dark model (68% and 95% bands)."""
    fig, ax = plt.subplots(figsize=(6, 4.2))
    th = np.asarray(CURVE_ANGLES)
    for n in dark:
        j = ctx["results"][n]["derived"]["log10_j_curve"]
        q = np.percentile(j, [2.5, 16, 50, 84, 97.5], axis=0)
        colour = ctx["colours"][n]
        ax.fill_between(th, q[0], q[4], color=colour, alpha=0.15)
        ax.fill_between(th, q[1], q[3], color=colour, alpha=0.35)
        ax.plot(th, q[2], color=colour, label=n)
    ax.set_xscale("log")
    ax.set_xlabel(r"cone half-angle $\theta$ [deg]")
    ax.set_ylabel(r"log$_{10}$ J [GeV$^2$ cm$^{-5}$]")
    ax.legend(fontsize=8)
    _title(ax, f"{ctx['sat_name']}: J-factor (bands: 68% and 95%)", ctx["summary"])
    _save(fig, path)
    plt.close(fig)


def make_figures(results, stars, satellite, sigma_angles, folder, summary):
    """Write the figures; returns their paths."""
    from pathlib import Path

    plt = _plt()
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    d0 = satellite.distance_kpc
    names = list(summary["models"])
    ctx = {
        "results": results,
        "summary": summary,
        "names": names,
        "colours": dict(zip(names, _COLOURS * 3, strict=False)),
        "d0": d0,
        "pc": np.tan(np.radians(np.asarray(stars.radius_deg))) * d0 * 1e3,
        "sat_name": satellite.name,
    }
    paths = [folder / "dispersion_profile.png", folder / "mass_profile.png"]
    _dispersion_figure(plt, ctx, stars, sigma_angles, paths[0])
    _mass_figure(plt, ctx, paths[1])
    dark = [n for n in names if "log10_j_curve" in results[n]["derived"]]
    if dark:
        paths.append(folder / "jfactor.png")
        _jfactor_figure(plt, ctx, dark, paths[-1])
    for n in names:
        paths.append(folder / f"corner_{n}.png")
        _corner(plt, results[n], paths[-1], summary, n)
    return paths


#: the corner plot shows at most this many parameters (the figure names those left out)
CORNER_MAX = 8


def corner_keys(res):
    """(parameters the corner plot shows, parameters left out: beyond CORNER_MAX, or not
    scalar)."""
    scalar = [k for k in res["latent"] if np.ndim(res["samples"][k]) == 1]
    other = [k for k in res["latent"] if k not in scalar]
    return scalar[:CORNER_MAX], scalar[CORNER_MAX:] + other


def _corner_panel(ax, res, keys, i, j):
    """Panel (i, j) of the corner plot: a histogram on the diagonal, a 2-d histogram below."""
    k = len(keys)
    x = np.asarray(res["samples"][keys[j]])
    if i == j:
        ax.hist(x, bins=40, color="0.3", histtype="step")
        ax.set_yticks([])
    else:
        ax.hist2d(x, np.asarray(res["samples"][keys[i]]), bins=40, cmap="Greys")
    if i == k - 1:
        ax.set_xlabel(keys[j], fontsize=7)
    else:
        ax.set_xticklabels([])
    if j == 0 and i > 0:
        ax.set_ylabel(keys[i], fontsize=7)
    elif j > 0:
        ax.set_yticklabels([])
    ax.tick_params(labelsize=6)


def _corner(plt, res, path, summary, name):
    keys, left_out = corner_keys(res)
    k = len(keys)
    fig, axes = plt.subplots(k, k, figsize=(1.6 * k + 1, 1.6 * k + 1), squeeze=False)
    for i in range(k):
        for j in range(k):
            if j > i:
                axes[i, j].axis("off")
            else:
                _corner_panel(axes[i, j], res, keys, i, j)
    converged = summary["models"][name]["converged"]
    fig.suptitle(
        f"{name}" + ("" if converged else "  (NOT CONVERGED)"),
        color="black" if converged else "red",
    )
    if left_out:
        fig.text(
            0.98, 0.98, f"showing {k} of {k + len(left_out)} parameters; not shown: "
            + ", ".join(left_out), ha="right", va="top", fontsize=8, color="darkred", wrap=True,
        )  # fmt: skip
    _save(fig, path)
    plt.close(fig)
