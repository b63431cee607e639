"""Figures of a fit (matplotlib, Agg), written into DIR/figures/, each with the data it shows
beside it (<name>.json):

- dispersion_profile: the members' weighted dispersion in radial bins, the models' bands, the
  truth of a mock (:mod:`halo.products.plots_dispersion`);
- velocity_radius, velocity_histogram, sky_map: the stars under the fitted membership
  (:mod:`halo.products.plots_members`);
- epoch_changes: epoch-to-epoch velocity changes (multi-epoch catalogues only,
  :mod:`halo.products.plots_epochs`);
- mass_profile, jfactor: enclosed mass and J(theta) of each model (here);
- corner_<model> (or corner_<model>_1, _2 ... when its parameters need more pages,
  :mod:`halo.products.plots_corner`).

A mock's truth (the catalogue's ``truth`` header record or the truth file beside it,
:func:`halo.products.plots_base.catalogue_truth`) is overlaid where the figure shows it.
"""

import numpy as np

from halo.products.plots_base import catalogue_truth, plt_agg, save_data, save_png, star_context
from halo.products.plots_base import title as _title
from halo.products.plots_corner import CORNER_PAGE, write_corner
from halo.products.plots_dispersion import dispersion_figure
from halo.products.plots_epochs import epochs_figure
from halo.products.plots_members import histogram_figure, sky_figure, velocity_radius_figure
from halo.results.derived import CURVE_ANGLES, PROFILE_RADII_PC

__all__ = ["make_figures", "CORNER_PAGE"]

_COLOURS = ("tab:blue", "tab:orange", "tab:green", "tab:red", "tab:purple", "tab:brown")


def _plt():
    return plt_agg()


def _band(ax, x, draws, colour, label):
    """Median line and 68% band over the draws (axis 0)."""
    q = np.percentile(draws, [16, 50, 84], axis=0)
    ax.fill_between(x, q[0], q[2], color=colour, alpha=0.3)
    ax.plot(x, q[1], color=colour, label=label)
    return {"p16": q[0], "median": q[1], "p84": q[2]}


_save = save_png


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


def _mass_truth(ax, truth):
    """The mock's true M(<r_1/2) at r_1/2 (3D), or None."""
    if not truth or truth.get("m_half_msun") is None or truth.get("r_half_3d_kpc") is None:
        return None
    point = {"r_half_3d_pc": 1e3 * truth["r_half_3d_kpc"], "m_half_msun": truth["m_half_msun"]}
    ax.plot([point["r_half_3d_pc"]], [point["m_half_msun"]], marker="*", color="tab:red", ms=12,
            ls="none", label="truth M(<r_1/2) (mock)")  # fmt: skip
    return point


def _mass_figure(plt, ctx, path, truth=None):
    """2. each model's enclosed mass, the stars alone and the estimators."""
    results, names, summary = ctx["results"], ctx["names"], ctx["summary"]
    fig, ax = plt.subplots(figsize=(6.5, 4.5))
    radii = np.asarray(PROFILE_RADII_PC)
    data = {"radius_pc": radii, "models": {}}
    for n in names:
        data["models"][n] = _band(
            ax, radii, results[n]["derived"]["mass_total_msun"], ctx["colours"][n], f"{n} (total)"
        )
    ms = np.median(results[names[0]]["derived"]["mass_stars_msun"], axis=0)
    ax.plot(radii, ms, "k--", label="stars")
    data["stars_median_msun"] = ms
    _estimator_points(ax, summary["estimators"])
    data["truth"] = _mass_truth(ax, truth)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("3D radius r [pc]")
    ax.set_ylabel(r"enclosed mass M(<r) [M$_\odot$]")
    ax.legend(fontsize=7)
    _title(ax, f"{ctx['sat_name']}: enclosed mass (bands: 68%)", summary)
    _save(fig, path)
    plt.close(fig)
    save_data(path, data)


def _jfactor_figure(plt, ctx, dark, path):
    """3. J against the cone half-angle of each dark model (68% and 95% bands)."""
    fig, ax = plt.subplots(figsize=(6.5, 4.5))
    th = np.asarray(CURVE_ANGLES)
    data = {"half_angle_deg": th, "models": {}}
    for n in dark:
        j = ctx["results"][n]["derived"]["log10_j_curve"]
        q = np.percentile(j, [2.5, 16, 50, 84, 97.5], axis=0)
        colour = ctx["colours"][n]
        ax.fill_between(th, q[0], q[4], color=colour, alpha=0.15)
        ax.fill_between(th, q[1], q[3], color=colour, alpha=0.35)
        ax.plot(th, q[2], color=colour, label=n)
        data["models"][n] = dict(zip(("p2_5", "p16", "median", "p84", "p97_5"), q, strict=True))
    ax.set_xscale("log")
    ax.set_xlabel(r"cone half-angle $\theta$ [deg]")
    ax.set_ylabel(r"log$_{10}$ J [GeV$^2$ cm$^{-5}$]")
    ax.legend(fontsize=8)
    _title(ax, f"{ctx['sat_name']}: J-factor (bands: 68% and 95%)", ctx["summary"])
    _save(fig, path)
    plt.close(fig)
    save_data(path, data)


def _star_figures(plt, ctx, stars, satellite, folder, truth):
    """The figures of the stars: velocity against radius, histogram, sky map, epoch changes."""
    paths = [folder / "velocity_radius.png", folder / "velocity_histogram.png",
             folder / "sky_map.png"]  # fmt: skip
    velocity_radius_figure(plt, ctx, stars, paths[0], truth)
    histogram_figure(plt, ctx, stars, satellite, paths[1], truth)
    sky_figure(plt, ctx, stars, satellite, paths[2], truth)
    if epochs_figure(plt, ctx, stars, folder / "epoch_changes.png", truth) is not None:
        paths.append(folder / "epoch_changes.png")
    return paths


def make_figures(results, stars, satellite, sigma_angles, folder, summary, truth=None):
    """Write the figures (and each one's data as <name>.json beside it); returns the PNG paths.

    ``truth``: a mock's truth record; by default the one the catalogue file carries (None for
    other catalogues).
    """
    from pathlib import Path

    plt = _plt()
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    truth = catalogue_truth(stars) if truth is None else truth
    names = list(summary["models"])
    ctx = {
        "results": results,
        "summary": summary,
        "names": names,
        "colours": dict(zip(names, _COLOURS * 3, strict=False)),
        "d0": satellite.distance_kpc,
        "sat_name": satellite.name,
        "sigma_angles": np.asarray(sigma_angles),
        "stars": star_context(stars, results, names, satellite),
    }
    paths = [folder / "dispersion_profile.png"]
    dispersion_figure(plt, ctx, stars, sigma_angles, paths[0], truth)
    paths += _star_figures(plt, ctx, stars, satellite, folder, truth)
    paths.append(folder / "mass_profile.png")
    _mass_figure(plt, ctx, paths[-1], truth)
    dark = [n for n in names if "log10_j_curve" in results[n]["derived"]]
    if dark:
        paths.append(folder / "jfactor.png")
        _jfactor_figure(plt, ctx, dark, paths[-1])
    for n in names:
        converged = summary["models"][n]["converged"]
        for path, data in write_corner(plt, results[n], folder, n, converged, truth, _save):
            save_data(path, data)
            paths.append(path)
    return paths
