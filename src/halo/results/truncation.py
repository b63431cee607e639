"""J and D truncated at each posterior draw's own Jacobi radius: the shared tidal field, its
pairing with each model's draws, and the statement of what was done.

The tidal field (:func:`halo.results.tidal_site.tidal_site`) is computed once per fit, from the
posterior draws of the first model fitted (stars-only, always fitted first, as the tides section
of summary.json always did), and shared by every model and by ``nature.tides``. Each posterior
draw of each model is paired with one draw of that field (seeded by the fit's seed and the model
name), so that the Milky Way's uncertainty (distance, proper motion, orbit) propagates into r_J.
The draw's Jacobi radius is then computed in :func:`halo.results.derived.derive`, and with
truncation on (the default, ``FitSettings.tidal_truncation``) its dark halo is cut there for J
and D. Off, or when no tidal field can be computed, J and D are untruncated and the statement
says so.
"""

import zlib

import numpy as np

from halo.core.errors import InputError
from halo.core.vocabulary import HALO_TRUNCATION, angle_keys, jacobi_truncation_text
from halo.results.tidal_site import tidal_site

__all__ = ["shared_tides", "model_tides", "truncation_entry", "derived_group"]


def shared_tides(ctx, satellite, samples, settings, progress=None):
    """The fit's tidal field, computed on the first call from ``samples`` and kept in ``ctx``
    (``ctx["tides"]``: {"site": per-draw arrays, "entry": summary.json nature.tides.milky_way,
    "seed"} or {"site": None, "reason": why not})."""
    if "tides" in ctx:
        return ctx["tides"]
    seed = int(settings.seed)
    try:
        site, entry = tidal_site(
            satellite,
            samples,
            np.random.default_rng([seed, 12]),
            model=getattr(satellite, "milky_way_model", None),
            progress=progress,
        )
    except InputError:  # the user's input: a one-line error, as everywhere
        raise
    except (ValueError, ArithmeticError) as exc:
        ctx["tides"] = {"site": None, "reason": f"no tidal field could be computed ({exc})"}
        return ctx["tides"]
    ctx["tides"] = {"site": site, "entry": entry, "seed": seed}
    return ctx["tides"]


def model_tides(tides, name, n, truncate):
    """(``tides`` argument of :func:`halo.results.derived.derive`, pairing) for ``n`` draws of
    model ``name``: each draw's tidal-field index (seeded by the fit's seed and the name) and
    its denominator Omega^2 - d2Phi/dr2; (None, None) without a tidal field."""
    if tides is None or tides.get("site") is None:
        return None, None
    den = np.asarray(tides["site"]["denominator"], float)
    rng = np.random.default_rng([tides["seed"], 13, zlib.crc32(name.encode())])
    pair = rng.integers(len(den), size=n)
    return {"denominator": den[pair], "truncate": bool(truncate)}, pair


def truncation_entry(tides, truncate, derived=None):
    """summary.json ``models.<m>.jd_truncation`` (and ``jd_conventions.halo_truncation``, its
    ``statement``): whether J and D are truncated, where and how, in words."""
    site = None if tides is None else tides.get("site")
    if not truncate or site is None:
        reason = (
            "tidal truncation switched off (--no-tidal-truncation)"
            if site is not None or not truncate
            else (tides or {}).get("reason", "no tidal field")
        )
        return {
            "truncated": False,
            "method": "none",
            "reason": reason,
            "statement": f"{HALO_TRUNCATION} ({reason}; *_untruncated equal the reported values)",
        }
    entry = tides["entry"]
    out = {
        "truncated": True,
        "method": "jacobi",
        "milky_way_model": entry["model"],
        "judged_at": entry["judged_at"],
        "statement": jacobi_truncation_text(entry["model"], entry["judged_at"]),
    }
    if derived is not None and "r_jacobi_pc" in derived:
        r = np.asarray(derived["r_jacobi_pc"], float)
        out["n_draws"] = int(r.size)
        # no tidal limit (the field compresses there): those draws are left untruncated
        out["n_draws_untruncated"] = int(np.sum(~(np.isfinite(r) & (r > 0))))
    return out


#: per-draw J and D written beside r_J: (key, units)
_JD_DRAWS = (
    ("log10_j", "log10 GeV2 cm-5"),
    ("log10_d", "log10 GeV cm-2"),
    ("log10_j_untruncated", "log10 GeV2 cm-5"),
    ("log10_d_untruncated", "log10 GeV cm-2"),
)


def derived_group(derived, n_chain, entry):
    """The ``derived`` group of posterior.nc (xarray Dataset, dims chain, draw[, angle]):
    ``r_jacobi_pc`` per draw when it exists, the reported and untruncated ``log10_j`` and
    ``log10_d`` of dark models (angle: 0.1, 0.2, 0.5 deg and 2rh), and the truncation statement
    as attributes; None without r_J."""
    import xarray as xr

    if "r_jacobi_pc" not in derived:
        return None
    r = np.asarray(derived["r_jacobi_pc"], float).reshape(n_chain, -1)
    ds = xr.Dataset({"r_jacobi_pc": (("chain", "draw"), r)})
    ds["r_jacobi_pc"].attrs["units"] = "pc"
    ds["r_jacobi_pc"].attrs["long_name"] = "Jacobi radius of the draw (whole mass model)"
    for key, units in _JD_DRAWS:
        if key in derived:
            v = np.asarray(derived[key], float)
            ds[key] = (("chain", "draw", "angle"), v.reshape(n_chain, -1, v.shape[-1]))
            ds[key].attrs["units"] = units
    if "log10_j" in ds:
        ds = ds.assign_coords(angle=angle_keys())
    ds.attrs["jd_truncated"] = int(bool(entry["truncated"]))
    ds.attrs["jd_truncation"] = entry["statement"]
    return ds
