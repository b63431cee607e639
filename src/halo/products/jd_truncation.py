"""What an export truncates: the fit's own choice, read back from its run folder.

A fit states per model whether J and D are truncated at each draw's Jacobi radius
(summary.json ``models.<m>.jd_truncation``, :mod:`halo.results.truncation`) and writes each
draw's r_J into ``<model>/posterior.nc``'s ``derived`` group (``r_jacobi_pc``, dims chain,
draw). ``halo export`` reads both, so that its tables and templates are cut where the fit's
numbers were, without recomputing the tidal field. Runs without the entry (made before
truncation existed) are untruncated, as their summary says.
"""

from pathlib import Path

import numpy as np

from halo.core.errors import InputError
from halo.core.vocabulary import HALO_TRUNCATION

__all__ = [
    "truncation_of",
    "short_statement",
    "read_jacobi_pc",
    "cut_radii_kpc",
    "fits_truncation_cards",
]


def truncation_of(summary, name):
    """The ``jd_truncation`` entry of model ``name`` (an untruncated one for older runs)."""
    entry = (summary["models"].get(name) or {}).get("jd_truncation")
    if entry:
        return dict(entry)
    text = (summary.get("jd_conventions") or {}).get("halo_truncation") or HALO_TRUNCATION
    return {"truncated": False, "method": "none", "statement": text}


def short_statement(entry):
    """The truncation in one short sentence (table headers; the full one is in summary.json)."""
    if not entry.get("truncated"):
        return entry["statement"]
    where = str(entry.get("judged_at", "")).split(",")[0].split(" of orbits")[0]
    return (
        "J and D of haloes truncated at each posterior draw's own Jacobi radius (density zero "
        f"beyond r_J) in the Milky Way model {entry.get('milky_way_model')}, tides judged at "
        f"the {where}; *_untruncated: the same draws uncut (summary.json jd_conventions)."
    )


def read_jacobi_pc(path):
    """r_J [pc] per draw (flattened chain-major) from posterior.nc's ``derived`` group."""
    import xarray as xr

    path = Path(path)
    try:
        with xr.open_datatree(path) as tree:
            if "derived" not in tree.children:
                raise InputError(
                    f"{path}: no 'derived' group (r_jacobi_pc), yet summary.json says the fit "
                    "truncated J and D at the Jacobi radius"
                )
            var = tree["derived"].to_dataset()["r_jacobi_pc"]
            if var.dims != ("chain", "draw"):
                raise InputError(f"{path}: 'derived/r_jacobi_pc' must have dims (chain, draw)")
            return np.asarray(var.values, float).ravel()
    except InputError:
        raise
    except Exception as exc:  # noqa: BLE001  (netCDF/HDF5 readers raise many kinds)
        raise InputError(
            f"{path}: cannot read 'derived/r_jacobi_pc' ({exc.__class__.__name__})"
        ) from None


def cut_radii_kpc(summary, name, path, n):
    """(truncation radius [kpc] per draw, inf where none; the model's jd_truncation entry)."""
    entry = truncation_of(summary, name)
    if not entry.get("truncated"):
        return np.full(n, np.inf), entry
    r = read_jacobi_pc(path) * 1e-3
    if len(r) != n:
        raise InputError(f"{path}: 'derived/r_jacobi_pc' has {len(r)} draws, posterior {n}")
    return np.where(np.isfinite(r) & (r > 0), r, np.inf), entry


def fits_truncation_cards(hdr, entry, width=70):
    """TRUNC ('JACOBI' or 'NONE'), TRUNCATD and COMMENT lines with the statement."""
    import textwrap

    truncated = bool(entry.get("truncated"))
    hdr["TRUNC"] = ("JACOBI" if truncated else "NONE", "halo truncation: see COMMENT")
    hdr["TRUNCATD"] = (truncated, "halo tidally truncated at r_J per draw?")
    if truncated:
        hdr["MWMODEL"] = (entry.get("milky_way_model", ""), "Milky Way model of r_J")
    for line in textwrap.wrap(entry["statement"], width):
        hdr.add_comment(line)
