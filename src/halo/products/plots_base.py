"""What every figure shares: matplotlib on the Agg backend at print-readable sizes, atomic PNG
writes, the figure's data written beside it as JSON, the convergence flag in titles, the per-star
numbers the figures of the stars use, and the mock truth of the input catalogue."""

import json
from pathlib import Path

import numpy as np

from halo.core.fileio import atomic_path, write_json
from halo.core.vocabulary import STARS_ONLY
from halo.results.profile import star_weights
from halo.results.summary import clean

__all__ = [
    "plt_agg",
    "save_png",
    "save_data",
    "title",
    "open_markers",
    "star_context",
    "catalogue_truth",
]

#: font sizes readable when a figure is printed at column width (6 inch wide at 110 dpi)
_RC = {
    "font.size": 10,
    "axes.labelsize": 10,
    "axes.titlesize": 10,
    "legend.fontsize": 8,
    "xtick.labelsize": 9,
    "ytick.labelsize": 9,
}


def plt_agg():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    plt.rcParams.update(_RC)
    return plt


def save_png(fig, path):
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=110, bbox_inches="tight")


def _plain(obj):
    if isinstance(obj, dict):
        return {k: _plain(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_plain(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _plain(obj.tolist())
    return obj


def save_data(png_path, data):
    """Write the data a figure shows as <figure>.json beside its PNG."""
    write_json(Path(png_path).with_suffix(".json"), clean(_plain(data)))


def title(ax, text, summary, name=None):
    """Axis title; a red NOT CONVERGED line naming the models (or ``name``) that did not."""
    bad = [m for m, v in summary["models"].items() if not v["converged"] and (name in (None, m))]
    if bad:
        text += "\nNOT CONVERGED: " + ", ".join(bad)
    ax.set_title(text, color="red" if bad else "black")
    return bad


def open_markers(ax, x, y, mask, *, marker, colour, label, size=40):
    """Open markers around the points ``mask`` selects (a mock's truth: field stars,
    binaries); nothing when ``mask`` is None or selects none."""
    if mask is not None and np.any(mask):
        ax.scatter(
            x[mask],
            y[mask],
            s=size,
            marker=marker,
            facecolors="none",
            edgecolors=colour,
            lw=0.8,
            label=label,
            zorder=4,
        )


def _reference(names):
    dark = [n for n in names if n != STARS_ONLY]
    return dark[0] if dark else STARS_ONLY


def star_context(stars, results, names, satellite):
    """Per-star numbers of the figures of the stars, under the model members.ecsv uses (the first
    dark model): radius_pc, v, v_err, member_prob (the fit's; the catalogue's, or 1, when not
    modelled), binary_prob (0 when not modelled), weight = p_member (1 - p_binary), v_sys (the
    posterior median) and whether membership and binarity were modelled."""
    ref = _reference(names)
    res = results[ref]
    n = stars.n_stars
    mp = res["member_prob"]
    if mp is None and stars.member_prob is not None:
        mp = stars.member_prob
    bp = res["binary_prob"]
    d0 = satellite.distance_kpc
    return {
        "model": ref,
        "radius_pc": np.tan(np.radians(np.asarray(stars.radius_deg))) * d0 * 1e3,
        "v": np.asarray(stars.v, dtype=float),
        "v_err": np.asarray(stars.v_err, dtype=float),
        "member_prob": np.ones(n) if mp is None else np.asarray(mp, dtype=float),
        "binary_prob": np.zeros(n) if bp is None else np.asarray(bp, dtype=float),
        "weight": star_weights(mp, bp, n),
        "v_sys": float(np.median(res["samples"]["v_sys"])),
        "membership_modelled": res["member_prob"] is not None,
        "binaries_modelled": bp is not None,
    }


def catalogue_truth(stars):
    """The mock truth of the catalogue ``stars`` came from, or None: the ``truth`` record in an
    ECSV catalogue's header (``halo mock``), else the ``<catalogue>.truth.json`` beside it."""
    path = Path(str(stars.source))
    if not path.is_file():
        return None
    side = path.with_name(path.name + ".truth.json")
    try:
        if side.is_file():
            return json.loads(side.read_text(encoding="utf-8"))
        if path.suffix.lower() == ".ecsv":
            from astropy.table import Table

            truth = Table.read(path, format="ascii.ecsv").meta.get("truth")
            return truth if isinstance(truth, dict) else None
    except (OSError, ValueError):
        return None
    return None
