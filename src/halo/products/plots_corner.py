"""Corner plots of a model's posterior: the physical parameters first (M(<r_1/2), the halo and
anisotropy parameters of the spec), then the nuisances (v_sys, distance, half-light radius,
stellar mass, binary and field terms); every sampled parameter, readable labels with units,
68% and 95% contours, split across pages of at most :data:`CORNER_PAGE` parameters.

Contours: the 2-d histogram (:data:`_BINS` bins a side over the 0.5-99.5% range) smoothed with a
Gaussian of :data:`_SMOOTH` bins (scipy.ndimage.gaussian_filter); the levels are the densities
above which 68% and 95% of the smoothed mass lies (the highest-density regions; common practice).
"""

import math

import numpy as np

__all__ = [
    "CORNER_PAGE",
    "corner_columns",
    "corner_pages",
    "corner_truth",
    "contour_levels",
    "write_corner",
]

#: parameters on one page of a corner plot
CORNER_PAGE = 8
_BINS = 30
_SMOOTH = 1.0

#: labels of the sites every model shares (nuisances), with units
_NUISANCE_LABELS = {
    "v_sys": "v_sys [km/s]",
    "distance": "distance [kpc]",
    "r_half_pc": "R_half, major axis [pc]",
    "m_star_d0": "M_star at d_file [Msun]",
    "ml_v": "M_star/L_V [Msun/Lsun]",
    "abs_mag_v": "M_V [mag]",
    "f_binary": "binary fraction [-]",
    "f_member": "member fraction [-]",
    "v_fg": "field mean v [km/s]",
    "log10_sigma_fg": "log10 field sigma [km/s]",
}
_PRETTY = {"m200": "M200", "rho_s": "rho_s", "beta_0": "beta_0", "beta_inf": "beta_inf"}


def _spec_label(spec, site):
    """(label, spec parameter name, transform) of a sampled spec site; None when not one."""
    params = getattr(spec, "parameters", {}) or {}
    for name, p in params.items():
        unit = p.get("unit") or "-"
        pretty = _PRETTY.get(name, name)
        if site == f"log10_{name}":
            return f"log10 {pretty} [{unit}]", name, "log10"
        if site == f"{name}_sym":  # shown as the anisotropy itself
            return f"{pretty} [{unit}]", name, "beta"
        if site == name:
            return f"{pretty} [{unit}]", name, "value"
    return None


def corner_columns(res):
    """[(label, draws, truth key, transform)] of a model result: log10 M(<r_1/2) first, the spec's
    parameters in spec order, then the nuisances, then any other scalar site."""
    samples, spec = res["samples"], res.get("spec")
    cols = []
    m_half = res.get("derived", {}).get("m_half_msun")
    if m_half is not None:
        cols.append(("log10 M(<r_1/2) [Msun]", np.log10(np.asarray(m_half)), "m_half", "log10"))
    scalar = [k for k in res["latent"] if np.ndim(samples[k]) == 1]
    physical, nuisance, other = [], [], []
    for site in scalar:
        lab = _spec_label(spec, site)
        if lab is not None:
            label, name, how = lab
            x = samples[name] if how == "beta" and name in samples else samples[site]
            physical.append((label, np.asarray(x), name, how))
        elif site in _NUISANCE_LABELS:
            nuisance.append((_NUISANCE_LABELS[site], np.asarray(samples[site]), site, "value"))
        else:
            other.append((f"{site} [-]", np.asarray(samples[site]), site, "value"))
    order = list(getattr(spec, "parameters", {}) or {})
    physical.sort(key=lambda c: order.index(c[2]) if c[2] in order else len(order))
    nuisance.sort(key=lambda c: list(_NUISANCE_LABELS).index(c[2]))
    return cols + physical + nuisance + other


def corner_pages(columns, per_page=CORNER_PAGE):
    """The columns split into pages: one page when they fit, else physical parameters and
    nuisances on pages of their own (each split again into pages of at most ``per_page``)."""
    if len(columns) <= per_page:
        return [columns]
    n_phys = sum(1 for c in columns if c[2] not in _NUISANCE_LABELS)
    pages = []
    for g in (columns[:n_phys], columns[n_phys:]):
        n = max(1, math.ceil(len(g) / per_page))
        pages += [[g[i] for i in idx] for idx in np.array_split(np.arange(len(g)), n)]
    return [p for p in pages if p]


#: where a mock's truth record keeps the true value of a column (by the column's key)
_TRUTH_PATHS = {
    "m_half": ("m_half_msun",),
    "v_sys": ("v_sys_kms",),
    "distance": ("satellite", "distance_kpc"),
    "r_half_pc": ("satellite", "r_half_pc"),
    "m_star_d0": ("stellar_mass_msun",),
    "f_binary": ("binary_fraction",),
}


def _dig(record, path):
    for k in path:
        record = record.get(k) if isinstance(record, dict) else None
    return record if path else None


def _truth_of(key, how, truth, model):
    """The true value of a column (None when the truth does not record it)."""
    value = _dig(truth, _TRUTH_PATHS.get(key, ()))
    params = truth.get("parameters") or {}
    if value is None and key in params and truth.get("model") == model:
        value = params[key]
    if value is None or not np.isfinite(value) or (how == "log10" and value <= 0):
        return None
    return float(np.log10(value) if how == "log10" else value)


def corner_truth(columns, truth, model):
    """{label: true value} of the columns a mock's truth record gives (spec parameters only
    when the mock was drawn from the same model)."""
    if not truth:
        return {}
    out = {c[0]: _truth_of(c[2], c[3], truth, model) for c in columns}
    return {k: v for k, v in out.items() if v is not None}


def contour_levels(h, fractions=(0.68, 0.95)):
    """Density levels above which ``fractions`` of the histogram's mass lie (descending)."""
    flat = np.sort(np.asarray(h, dtype=float).ravel())[::-1]
    cum = np.cumsum(flat)
    cum /= cum[-1]
    return [float(flat[min(np.searchsorted(cum, f), flat.size - 1)]) for f in fractions]


def _range(x):
    lo, hi = np.percentile(x, [0.5, 99.5])
    if not hi > lo:
        lo, hi = lo - 0.5, hi + 0.5
    return lo, hi


def _smoothed(x, y):
    from scipy.ndimage import gaussian_filter

    h, xe, ye = np.histogram2d(x, y, bins=_BINS, range=[_range(x), _range(y)])
    return gaussian_filter(h, _SMOOTH), xe, ye


def _pair(ax, x, y):
    """Smoothed 2-d density of (x, y) with its 68% and 95% contours; returns the levels."""
    h, xe, ye = _smoothed(x, y)
    xc, yc = 0.5 * (xe[1:] + xe[:-1]), 0.5 * (ye[1:] + ye[:-1])
    lv = contour_levels(h)
    ax.imshow(
        h.T,
        origin="lower",
        extent=(xe[0], xe[-1], ye[0], ye[-1]),
        aspect="auto",
        cmap="Greys",
        alpha=0.5,
    )
    levels = sorted(set([lv[1], lv[0]]))
    if len(levels) == 2 and levels[0] < levels[1] < h.max():
        ax.contour(
            xc,
            yc,
            h.T,
            levels=[*levels, h.max() * 1.01],
            colors=["k", "k", "k"],
            linewidths=[0.8, 1.2, 0.0],
        )
    return lv


def _two_lines(label):
    """The label with its unit on a second line."""
    return label.replace(" [", "\n[", 1)


def _label(ax, i, j, k, cols):
    """Axis labels on the outer panels, in fonts that grow with the page (a page printed at
    column width stays readable)."""
    big = 8 + 0.4 * k
    if i == k - 1:
        ax.set_xlabel(_two_lines(cols[j][0]), fontsize=big)
    else:
        ax.set_xticklabels([])
    if j == 0 and i > 0:
        ax.set_ylabel(_two_lines(cols[i][0]), fontsize=big)
    elif j > 0 or i == 0:
        ax.set_yticklabels([])
    ax.tick_params(labelsize=big - 2)
    for t in ax.get_xticklabels():
        t.set_rotation(45)


def _inside(value, lim):
    return value is not None and lim[0] <= value <= lim[1]


def _panel(ax, cols, i, j, truth):
    """Panel (i, j): a histogram on the diagonal, the smoothed pair density below it; the axes
    span the draws (a truth value off the scale is named in the panel instead)."""
    x = cols[j][1]
    xr = _range(x)
    tx = truth.get(cols[j][0])
    if i == j:
        ax.hist(x, bins=_BINS, range=xr, color="0.25", histtype="step", density=True)
        for q in np.percentile(x, [16, 50, 84]):
            ax.axvline(q, color="0.4", ls=":", lw=0.8)
        if _inside(tx, xr):
            ax.axvline(tx, color="tab:red", lw=1.2)
        elif tx is not None:
            ax.text(
                0.5,
                0.95,
                f"truth {tx:.3g}\n(off scale)",
                transform=ax.transAxes,
                ha="center",
                va="top",
                fontsize=7,
                color="tab:red",
            )
        ax.set_xlim(*xr)
        ax.set_yticks([])
        return None
    y = cols[i][1]
    yr = _range(y)
    lv = _pair(ax, x, y)
    ty = truth.get(cols[i][0])
    if _inside(tx, xr) and _inside(ty, yr):
        ax.plot([tx], [ty], marker="*", color="tab:red", ms=9, mec="white")
    ax.set_xlim(*xr)
    ax.set_ylim(*yr)
    return lv


def _page(plt, cols, truth, title, title_colour):
    k = len(cols)
    size = max(4.5, 1.8 * k + 1.5)
    fig, axes = plt.subplots(k, k, figsize=(size, size), squeeze=False)
    for i in range(k):
        for j in range(k):
            if j > i:
                axes[i, j].axis("off")
                continue
            _panel(axes[i, j], cols, i, j, truth)
            _label(axes[i, j], i, j, k, cols)
    fig.suptitle(title, color=title_colour, fontsize=11)
    fig.subplots_adjust(hspace=0.08, wspace=0.08, top=0.95 if k > 2 else 0.88)
    return fig


def write_corner(plt, res, folder, name, converged, truth, save):
    """Corner pages of model ``name``: corner_<name>.png, or corner_<name>_1.png, _2.png ... when
    the parameters need more than one page; ``truth``: a mock's truth record (or None), its
    values overlaid in red.

    Returns [(path, data)] with the data each page shows (labels, medians, 68% intervals, truth)."""
    cols = corner_columns(res)
    truth = corner_truth(cols, truth, name)
    pages = corner_pages(cols)
    out = []
    for p, page in enumerate(pages, 1):
        stem = f"corner_{name}" if len(pages) == 1 else f"corner_{name}_{p}"
        head = f"{name}: posterior, page {p} of {len(pages)} (contours: 68%, 95%)"
        head += "" if converged else "\nNOT CONVERGED"
        fig = _page(plt, page, truth, head, "black" if converged else "red")
        path = folder / f"{stem}.png"
        save(fig, path)
        plt.close(fig)
        data = {
            "model": name,
            "page": p,
            "pages": len(pages),
            "converged": bool(converged),
            "parameters": [c[0] for c in page],
            "all_parameters": [c[0] for c in cols],
            "not_shown": [k for k in res["latent"] if np.ndim(res["samples"][k]) != 1],
            "median": [float(np.median(c[1])) for c in page],
            "p16": [float(np.percentile(c[1], 16)) for c in page],
            "p84": [float(np.percentile(c[1], 84)) for c in page],
            "truth": [truth.get(c[0]) for c in page],
            "contours": "68% and 95% highest-density levels of the smoothed 2-d histogram",
        }
        out.append((path, data))
    return out
