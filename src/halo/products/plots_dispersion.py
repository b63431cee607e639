"""The dispersion-profile figure: the members' dispersion in radial bins, each star weighted by
its membership and binary probabilities (:func:`halo.results.profile.weighted_profile`), beside
the unweighted dispersion of all stars (faint), each model's 68% band and, for a mock, the true
profile; below it each star's velocity offset, the stars the weights exclude shown faint."""

import numpy as np

from halo.products.plots_base import save_data, save_png, title
from halo.results.profile import true_profile, weighted_profile

__all__ = ["dispersion_figure", "TRUE_PROFILE_SOURCE"]

#: where the truth curve comes from
TRUE_PROFILE_SOURCE = (
    "Jeans solution (halo.physics.jeans.sigma_los) of the light profile, dark halo, stellar mass "
    "and anisotropy in the mock's truth record"
)
#: stars below this weight are drawn faint (excluded) in the lower panel
FAINT_BELOW = 0.5


def _band(ax, x, draws, colour, label):
    q = np.percentile(np.asarray(draws), [16, 50, 84], axis=0)
    ax.fill_between(x, q[0], q[2], color=colour, alpha=0.3)
    ax.plot(x, q[1], color=colour, label=label)
    return {"median": q[1], "p16": q[0], "p84": q[2]}


def _points(ax, prof, **style):
    r, s = np.asarray(prof["radius_pc"]), np.asarray(prof["sigma_kms"])
    if r.size == 0:
        return
    lo, hi = np.asarray(prof["sigma_lo_kms"]), np.asarray(prof["sigma_hi_kms"])
    xerr = [r - np.asarray(prof["radius_lo_pc"]), np.asarray(prof["radius_hi_pc"]) - r]
    ax.errorbar(r, s, yerr=[s - lo, hi - s], xerr=xerr, **style)


def _off_scale(ax, prof, top):
    """Unweighted bins above the axis: an arrow at the top edge with the value."""
    for r, s in zip(prof["radius_pc"], prof["sigma_kms"], strict=True):
        if s > top:
            ax.annotate(
                f"{s:.0f}",
                (r, 0.97 * top),
                xytext=(r, 0.85 * top),
                ha="center",
                fontsize=7,
                color="0.5",
                arrowprops={"arrowstyle": "->", "color": "0.6"},
            )


def _offsets_panel(ax, sc):
    """Each star's v - v_sys against radius, the excluded ones (weight < FAINT_BELOW) faint."""
    r, dv, w = sc["radius_pc"], sc["v"] - sc["v_sys"], sc["weight"]
    keep = w >= FAINT_BELOW
    ax.scatter(r[~keep], dv[~keep], s=8, color="0.75", label=f"weight < {FAINT_BELOW:g}")
    ax.scatter(r[keep], dv[keep], s=10, color="k", label=f"weight >= {FAINT_BELOW:g}")
    lim = max(5.0, 4.0 * float(np.percentile(np.abs(dv[keep]), 90)) if keep.any() else 5.0)
    ax.set_ylim(-lim, lim)
    ax.set_xscale("log")
    ax.set_xlabel("projected radius R [pc] (circularised, at the catalogue distance)")
    ax.set_ylabel("v_los - v_sys [km/s]")
    ax.legend(loc="upper left", fontsize=7, ncol=2)


def _truth_curve(ax, truth, r_grid, prof):
    """The true profile on the grid and at the bins' radii (None without a usable truth)."""
    if not truth:
        return None
    curve = true_profile(truth, r_grid)
    if curve is None:
        return None
    ax.plot(r_grid, curve, color="tab:red", ls="--", lw=1.2, label="truth (mock)")
    return {
        "source": TRUE_PROFILE_SOURCE,
        "radius_pc": r_grid,
        "sigma_kms": curve,
        "sigma_at_bins_kms": true_profile(truth, prof["radius_pc"]) if prof["radius_pc"] else [],
    }


def dispersion_figure(plt, ctx, stars, sigma_angles, path, truth):
    """Write the figure and its data (dispersion_profile.json); returns the data."""
    sc = ctx["stars"]
    weighted = weighted_profile(sc["radius_pc"], sc["v"], sc["v_err"], sc["weight"])
    everyone = weighted_profile(sc["radius_pc"], sc["v"], sc["v_err"], np.ones_like(sc["v"]))
    fig, (ax, low) = plt.subplots(
        2, 1, figsize=(6.5, 6.8), sharex=True, gridspec_kw={"height_ratios": [2.2, 1]}
    )
    _points(
        ax, everyone, fmt="s", color="0.7", mfc="white", ms=4, lw=0.8, label="all stars, unweighted"
    )
    _points(ax, weighted, fmt="ko", ms=5, zorder=5, label="members: weight p_member (1 - p_binary)")
    r_grid = np.tan(np.radians(np.asarray(sigma_angles))) * ctx["d0"] * 1e3
    bands = {}
    for n in ctx["names"]:
        bands[n] = _band(
            ax, r_grid, ctx["results"][n]["derived"]["sigma_los_kms"], ctx["colours"][n], n
        )
    true = _truth_curve(ax, truth, r_grid, weighted)
    top = max([*weighted["sigma_hi_kms"], *np.ravel([b["p84"] for b in bands.values()])] or [1.0])
    ax.set_ylim(0, 1.3 * top)
    _off_scale(ax, everyone, 1.3 * top)
    ax.set_xscale("log")
    ax.set_ylabel("sigma_los [km/s]")
    ax.legend(fontsize=7)
    title(ax, f"{ctx['sat_name']}: velocity dispersion (points: 68%; bands: 68%)", ctx["summary"])
    _offsets_panel(low, sc)
    save_png(fig, path)
    plt.close(fig)
    data = {
        "weighted": weighted,
        "unweighted_all_stars": everyone,
        "weights_model": sc["model"],
        "weights": "w = p_member (1 - p_binary) of model " + sc["model"],
        "membership_modelled": sc["membership_modelled"],
        "binaries_modelled": sc["binaries_modelled"],
        "v_sys_kms": sc["v_sys"],
        "models": {"radius_pc": r_grid, **bands},
        "truth": true,
    }
    save_data(path, data)
    return data
