"""Figures of the stars under the fitted membership: line-of-sight velocity against projected
radius and the sky map (both coloured by membership probability), and the velocity histogram with
the fitted member and field components scaled to counts."""

import numpy as np

from halo.products.plots_base import open_markers, save_data, save_png, title

__all__ = ["velocity_radius_figure", "sky_figure", "histogram_figure", "component_counts"]

_CMAP = "viridis"


def _true_field(stars, truth):
    """Boolean per star: a field star of the mock (None without a truth record)."""
    if not truth or "foreground_ids" not in truth:
        return None
    ids = {str(i) for i in truth["foreground_ids"]}
    return np.array([str(i) in ids for i in np.asarray(stars.id)])


def _mark_field(ax, x, y, field):
    open_markers(ax, x, y, field, marker="o", colour="tab:red", label="field star (mock truth)")


def _by_membership(ax, x, y, p, size):
    """The stars coloured by membership probability, the likeliest members drawn last."""
    order = np.argsort(p)
    return ax.scatter(
        x[order],
        y[order],
        c=p[order],
        cmap=_CMAP,
        vmin=0,
        vmax=1,
        s=size,
        zorder=3,
        edgecolors="0.2",
        linewidths=0.3,
    )


def _vr_panel(ax, sc, field, truth):
    r, v = sc["radius_pc"], sc["v"]
    ax.errorbar(r, v, yerr=sc["v_err"], fmt="none", ecolor="0.75", lw=0.6, zorder=1)
    pts = _by_membership(ax, r, v, sc["member_prob"], 16)
    ax.axhline(sc["v_sys"], color="k", lw=0.8, label=f"fitted v_sys ({sc['model']})")
    _mark_field(ax, r, v, field)
    if truth and truth.get("v_sys_kms") is not None:
        ax.axhline(truth["v_sys_kms"], color="tab:red", ls="--", lw=0.8, label="true v_sys")
    ax.set_xscale("log")
    ax.set_xlabel("projected radius R [pc] (circularised)")
    ax.set_ylabel("line-of-sight velocity v_los [km/s]")
    return pts


def velocity_radius_figure(plt, ctx, stars, path, truth):
    """v_los against projected radius, coloured by membership probability: every star (left)
    and the members' velocity range (right)."""
    sc = ctx["stars"]
    field = _true_field(stars, truth)
    fig, (a1, a2) = plt.subplots(1, 2, figsize=(12, 4.5))
    _vr_panel(a1, sc, field, truth)
    pts = _vr_panel(a2, sc, field, truth)
    w = sc["weight"]
    spread = float(np.sqrt(np.average((sc["v"] - sc["v_sys"]) ** 2, weights=w))) if w.sum() else 5
    half = max(10.0, 6.0 * spread)
    a2.set_ylim(sc["v_sys"] - half, sc["v_sys"] + half)
    a2.set_title(f"zoom: v_sys +- {half:.0f} km/s")
    fig.colorbar(pts, ax=[a1, a2], label="membership probability [-]")
    a1.legend(loc="best")
    title(a1, f"{ctx['sat_name']}: velocities of the stars", ctx["summary"])
    save_png(fig, path)
    plt.close(fig)
    data = {
        "radius_pc": sc["radius_pc"],
        "v_kms": sc["v"],
        "v_err_kms": sc["v_err"],
        "member_prob": sc["member_prob"],
        "v_sys_kms": sc["v_sys"],
        "model": sc["model"],
        "zoom_half_width_kms": half,
        "true_field": None if field is None else field.tolist(),
    }
    save_data(path, data)
    return data


def _ellipse(satellite):
    """(xi, eta) [arcmin] of the half-light ellipse: semi-major axis r_half along the position
    angle (east of north), semi-minor r_half (1 - e)."""
    a = np.degrees(satellite.r_half_pc * 1e-3 / satellite.distance_kpc) * 60.0
    b = a * (1.0 - satellite.ellipticity)
    pa = np.radians(satellite.position_angle_deg)
    t = np.linspace(0, 2 * np.pi, 200)
    u, w = b * np.cos(t), a * np.sin(t)  # u: minor-axis, w: major-axis coordinate
    xi = w * np.sin(pa) + u * np.cos(pa)
    eta = w * np.cos(pa) - u * np.sin(pa)
    return xi, eta, a, b


def sky_figure(plt, ctx, stars, satellite, path, truth):
    """Tangent-plane offsets, coloured by membership, with the half-light ellipse."""
    sc = ctx["stars"]
    xi = np.asarray(stars.xi_deg) * 60.0
    eta = np.asarray(stars.eta_deg) * 60.0
    fig, ax = plt.subplots(figsize=(6.0, 5.2))
    field = _true_field(stars, truth)
    _mark_field(ax, xi, eta, field)
    pts = _by_membership(ax, xi, eta, sc["member_prob"], 14)
    fig.colorbar(pts, ax=ax, label="membership probability [-]")
    ex, ey, a, b = _ellipse(satellite)
    ax.plot(
        ex, ey, color="tab:red", lw=1.5, zorder=5, label=f"half-light ellipse ({a:.2f}' x {b:.2f}')"
    )
    ax.set_aspect("equal")
    rad = np.hypot(xi, eta)
    lim = max(float(np.percentile(rad, 98)), 3.0 * a) * 1.1
    outside = int(np.sum((np.abs(xi) > lim) | (np.abs(eta) > lim)))
    ax.set_xlim(lim, -lim)  # east to the left
    ax.set_ylim(-lim, lim)
    if outside:
        ax.text(
            0.98,
            0.98,
            f"{outside} star(s) outside the view",
            transform=ax.transAxes,
            ha="right",
            va="top",
            fontsize=8,
        )
    ax.set_xlabel("xi (east offset, tangent plane) [arcmin]")
    ax.set_ylabel("eta (north offset, tangent plane) [arcmin]")
    ax.legend(loc="lower left")
    note = f"PA {satellite.position_angle_deg:g} deg E of N, e = {satellite.ellipticity:g}"
    title(ax, f"{ctx['sat_name']}: sky positions ({note})", ctx["summary"])
    save_png(fig, path)
    plt.close(fig)
    data = {
        "xi_arcmin": xi,
        "eta_arcmin": eta,
        "member_prob": sc["member_prob"],
        "ellipse_xi_arcmin": ex,
        "ellipse_eta_arcmin": ey,
        "semi_major_arcmin": a,
        "semi_minor_arcmin": b,
        "position_angle_deg": satellite.position_angle_deg,
        "ellipticity": satellite.ellipticity,
        "true_field": None if field is None else field.tolist(),
    }
    save_data(path, data)
    return data


def _field_components(res, satellite):
    """(means, sigmas, weights) [km/s] of the fitted field model: the satellite file's
    components, or the posterior medians of the free Gaussian (v_fg, log10_sigma_fg)."""
    s = res["samples"]
    if "v_fg" in s:
        return [float(np.median(s["v_fg"]))], [float(np.median(10 ** s["log10_sigma_fg"]))], [1.0]
    comps = np.asarray(satellite.foreground, dtype=float)
    return list(comps[:, 0]), list(comps[:, 1]), list(comps[:, 2] / comps[:, 2].sum())


def _normal(x, mu, var):
    return np.exp(-0.5 * (x - mu) ** 2 / var) / np.sqrt(2 * np.pi * var)


def component_counts(grid, ctx, res, satellite, sigma_at_stars, width):
    """Expected counts per bin of ``width`` [km/s] at velocities ``grid``: members sum_i p_i
    N(v | v_sys, sigma_los(R_i)^2 + e_i^2), field sum_i (1 - p_i) sum_m a_m N(v | mu_m, s_m^2 +
    e_i^2) (the fitted field model; zero when membership is not modelled)."""
    sc = ctx["stars"]
    p, e2 = sc["member_prob"], sc["v_err"] ** 2
    g = np.asarray(grid)[:, None]
    mem = width * np.sum(p * _normal(g, sc["v_sys"], sigma_at_stars**2 + e2), axis=1)
    field = np.zeros_like(mem)
    if sc["membership_modelled"]:
        mus, sds, amps = _field_components(res, satellite)
        for mu, sd, a in zip(mus, sds, amps, strict=True):
            field += width * a * np.sum((1 - p) * _normal(g, mu, sd**2 + e2), axis=1)
    return mem, field


def _sigma_at_stars(ctx, stars, res):
    """The model's median sigma_los at each star's radius (interpolated in log radius)."""
    ang = np.asarray(ctx["sigma_angles"])
    med = np.median(np.asarray(res["derived"]["sigma_los_kms"]), axis=0)
    th = np.clip(np.asarray(stars.radius_deg), ang[0], ang[-1])
    return np.interp(np.log(th), np.log(ang), med)


def _hist_panel(ax, ctx, comp, lo, hi, width, truth):
    """One histogram panel over [lo, hi] with bins of ``width``; returns its data."""
    sc = ctx["stars"]
    v = sc["v"]
    edges = np.arange(np.floor(lo / width) * width, hi + width, width)
    counts, _ = np.histogram(v, bins=edges)
    grid = np.linspace(edges[0], edges[-1], 600)
    mem, field = comp(grid, width)
    ax.stairs(counts, edges, color="0.3", fill=True, alpha=0.35, label="stars")
    ax.plot(grid, mem, color="tab:blue", label="fitted members")
    if sc["membership_modelled"]:
        ax.plot(grid, field, color="tab:orange", label="fitted field")
        ax.plot(grid, mem + field, color="k", lw=0.8, ls="--", label="sum")
    if truth and truth.get("v_sys_kms") is not None:
        ax.axvline(truth["v_sys_kms"], color="tab:red", ls=":", lw=1.0, label="true v_sys")
    ax.set_xlim(edges[0], edges[-1])
    ax.set_xlabel("line-of-sight velocity v_los [km/s]")
    ax.set_ylabel(f"stars per {width:.2g} km/s bin [count]")
    return {
        "edges_kms": edges,
        "counts": counts,
        "grid_kms": grid,
        "member_counts": mem,
        "field_counts": field,
        "bin_width_kms": width,
    }


def histogram_figure(plt, ctx, stars, satellite, path, truth):
    """Histogram of the velocities with the fitted member and field components (counts): all
    velocities (left) and the members' peak (right)."""
    sc = ctx["stars"]
    res = ctx["results"][sc["model"]]
    v, err = sc["v"], float(np.median(sc["v_err"]))
    sig = _sigma_at_stars(ctx, stars, res)

    def comp(grid, width):
        return component_counts(grid, ctx, res, satellite, sig, width)

    fig, (a1, a2) = plt.subplots(1, 2, figsize=(11, 4.3))
    span = float(v.max() - v.min())
    full = _hist_panel(a1, ctx, comp, v.min(), v.max(), max(1.0, span / 60.0), truth)
    half = 5.0 * float(np.hypot(np.median(sig), err)) + 2.0
    zoom = _hist_panel(
        a2,
        ctx,
        comp,
        sc["v_sys"] - half,
        sc["v_sys"] + half,
        float(np.clip(half / 12.0, 0.5, 4.0)),
        truth,
    )
    a1.legend(loc="upper left")
    title(a1, f"{ctx['sat_name']}: velocity distribution ({sc['model']})", ctx["summary"])
    a2.set_title(f"the members' peak: v_sys +- {half:.0f} km/s")
    save_png(fig, path)
    plt.close(fig)
    data = {
        "full": full,
        "zoom": zoom,
        "model": sc["model"],
        "v_sys_kms": sc["v_sys"],
        "n_member_expected": float(np.sum(sc["member_prob"])),
        "n_stars": int(v.size),
        "components": (
            "members: sum_i p_member,i N(v | v_sys, sigma_los(R_i)^2 + e_i^2), sigma_los the "
            "model's median profile (binary orbital motion not included); field: sum_i (1 - "
            "p_member,i) sum_m a_m N(v | mu_m, s_m^2 + e_i^2) of the fitted field model"
        ),
    }
    save_data(path, data)
    return data
