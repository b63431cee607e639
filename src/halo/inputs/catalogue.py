"""The velocity catalogue: reading, validation, epochs merged into stars, projected radii.

A catalogue is any table astropy reads (ECSV, FITS, VOTable, CSV; the format follows the file
extension) with the columns, matched case-insensitively:

- ``id``           optional; rows sharing an id and differing in ``mjd`` are epochs of one star
                   (without the column every row is its own star, named by its row number)
- ``ra``, ``dec``  ICRS position [deg]
- ``vlos``         line-of-sight velocity [km/s]
- ``vlos_err``     its 1-sigma uncertainty [km/s]
- ``mjd``          optional epoch [day]
- ``member_prob``  optional membership probability in [0, 1]
- ``feh``, ``feh_err``  optional [Fe/H] and its 1-sigma error [dex], per epoch or per star; an
                   empty cell or NaN is a value not measured (:mod:`halo.inputs.feh`)

Other names map onto these with overrides ``{"vlos": "VHEL"}`` (see
:func:`halo.inputs.columns.parse_column_overrides`). Units come from the file where a column
carries one (converted with astropy.units); columns without a unit are taken as deg and km/s, and
the reader says so in :attr:`StarData.notes`. Bad input raises
:class:`halo.core.errors.InputError` with one line naming the file, the row and the column.

Row numbers in messages count data rows from 1 in file order, header lines not counted: row 1 is
the first star line of a CSV (line 2 with a one-line header) or the first row of a FITS table.

This module reads the file and assembles :class:`StarData`; the columns are matched and read in
:mod:`halo.inputs.columns` (values checked in :mod:`halo.inputs.values`), epochs merged in
:mod:`halo.inputs.epochs`, offsets and radii computed in :mod:`halo.inputs.sky`.
"""

import dataclasses
import hashlib
import math
import warnings
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.table import Table

from halo.core.errors import InputError
from halo.inputs.columns import (
    column_values,
    parse_column_overrides,  # moved (halo.inputs.columns)
    resolve_columns,
)
from halo.inputs.epochs import MIN_STARS, merge_epochs
from halo.inputs.feh import merge_feh
from halo.inputs.sky import angle_to_kpc, projected_offsets

__all__ = [
    "FORMATS",
    "StarData",
    "read_catalogue",
    "stars_from_table",
    "parse_column_overrides",
]

#: file-name ending (lower case) -> astropy format; longest endings are tried first
FORMATS = {
    ".fits.gz": "fits",
    ".fit.gz": "fits",
    ".fits": "fits",
    ".fit": "fits",
    ".ecsv": "ascii.ecsv",
    ".votable": "votable",
    ".vot": "votable",
    ".xml": "votable",
    ".csv": "ascii.csv",
    ".txt": "ascii.csv",
}

_HIGH_VELOCITY_KMS = 1000.0  # |vlos| above this: probably a unit slip (m/s without a unit)


@dataclasses.dataclass(frozen=True, eq=False)
class StarData:
    """Stars of a velocity catalogue, epochs merged, with projected radii (read-only arrays).

    Per star (length ``n_stars``, in order of first appearance in the file):
    ``id`` (str), ``ra``, ``dec`` [deg] (the star's first row), ``v`` [km/s] inverse-variance
    weighted mean of its epochs, ``v_err`` [km/s] its uncertainty, ``n_epochs``, ``baseline_days``
    (last minus first mjd; 0 for one epoch or without an mjd column), ``chi2`` of the epochs about
    ``v`` with ``chi2_dof = n_epochs - 1`` degrees of freedom and its p-value ``p_var`` (NaN for a
    single epoch), ``member_prob`` (None when the catalogue has no such column; the mean over
    epochs otherwise), offsets ``xi_deg`` (east) and ``eta_deg`` (north) from the satellite centre,
    ``radius_ell_deg`` the elliptical (major-axis) radius and ``radius_deg`` the circularised one;
    ``feh`` and ``feh_err`` [dex] the inverse-variance mean of the star's measured [Fe/H] and its
    error (NaN where not measured or without the columns; :mod:`halo.inputs.feh`).

    Per epoch (length ``n_epochs_total``, grouped by star in star order, by mjd within a star):
    ``epoch_star`` index into the star arrays, ``epoch_v``, ``epoch_err`` [km/s], ``epoch_mjd``
    [day] (NaN without an mjd column) and ``epoch_row``, the 1-based data row in the file.

    Angles stay the primary quantity because the fit samples the distance; :meth:`radius_kpc`
    turns them into kpc at any distance.

    Notes
    -----
    v = sum w_i v_i / sum w_i, v_err = (sum w_i)^-1/2, w_i = 1 / err_i^2;
    chi2 = sum w_i (v_i - v)^2, p_var = P(chi2_{n-1} > chi2) (scipy.stats.chi2.sf): a small p_var
    flags a velocity-variable star (binary) under Gaussian errors (common practice).
    """

    source: str
    sha256: str
    n_rows: int
    columns: dict
    centre_ra_deg: float
    centre_dec_deg: float
    ellipticity: float
    position_angle_deg: float
    id: np.ndarray
    ra: np.ndarray
    dec: np.ndarray
    v: np.ndarray
    v_err: np.ndarray
    n_epochs: np.ndarray
    baseline_days: np.ndarray
    chi2: np.ndarray
    chi2_dof: np.ndarray
    p_var: np.ndarray
    member_prob: np.ndarray | None
    xi_deg: np.ndarray
    eta_deg: np.ndarray
    radius_ell_deg: np.ndarray
    radius_deg: np.ndarray
    epoch_star: np.ndarray
    epoch_v: np.ndarray
    epoch_err: np.ndarray
    epoch_mjd: np.ndarray
    epoch_row: np.ndarray
    notes: tuple = ()
    warnings: tuple = ()
    feh: np.ndarray | None = None
    feh_err: np.ndarray | None = None
    epoch_feh: np.ndarray | None = None
    epoch_feh_err: np.ndarray | None = None

    @property
    def n_stars(self):
        return len(self.id)

    @property
    def has_feh(self):
        """Whether any star has a measured [Fe/H]."""
        return self.feh is not None and bool(np.isfinite(self.feh).any())

    @property
    def n_epochs_total(self):
        return len(self.epoch_v)

    def radius_kpc(self, distance_kpc, elliptical=False):
        """Projected radii [kpc] at ``distance_kpc``: circularised, or elliptical if asked.

        See :func:`angle_to_kpc`; ``distance_kpc`` may be a float or a JAX scalar (traced).
        """
        return angle_to_kpc(self.radius_ell_deg if elliptical else self.radius_deg, distance_kpc)

    def to_table(self):
        """Per-star astropy Table with units (ECSV-ready)."""
        t = Table()
        t["id"] = self.id
        for name, unit in [("ra", u.deg), ("dec", u.deg), ("v", u.km / u.s), ("v_err", u.km / u.s)]:
            t[name] = getattr(self, name) * unit
        t["n_epochs"] = self.n_epochs
        t["baseline_days"] = self.baseline_days * u.day
        for name in ("chi2", "chi2_dof", "p_var"):
            t[name] = getattr(self, name)
        if self.member_prob is not None:
            t["member_prob"] = self.member_prob
        if self.has_feh:
            t["feh"], t["feh_err"] = self.feh, self.feh_err
        for name in ("xi_deg", "eta_deg", "radius_ell_deg", "radius_deg"):
            t[name] = getattr(self, name) * u.deg
        return t


def _read_table(path):
    """(astropy table, the file's bytes, astropy's warnings as notes) of a catalogue file."""
    name = path.name.lower()
    fmt = next((f for ext, f in FORMATS.items() if name.endswith(ext)), None)
    if fmt is None:
        raise InputError(
            f"{path}: unknown catalogue format (extensions: {', '.join(sorted(FORMATS))})"
        )
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read ({exc.__class__.__name__})") from None
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            table = Table.read(path, format=fmt)
        except Exception as exc:  # astropy raises many types for malformed files
            text = " ".join(str(exc).split())[:200]
            raise InputError(
                f"{path}: cannot read as {fmt} ({type(exc).__name__}: {text})"
            ) from None
    notes = list(dict.fromkeys(f"astropy: {' '.join(str(w.message).split())}" for w in caught))
    return table, data, notes


def read_catalogue(path, satellite, columns=None, **kwargs):
    """Read, validate and reduce a velocity catalogue to :class:`StarData`.

    Parameters
    ----------
    path : str or Path
        Catalogue file; its extension picks the format (.ecsv; .fits, .fit, .fits.gz;
        .vot, .votable, .xml; .csv, .txt as comma-separated values).
    satellite : halo.inputs.satellite.Satellite
        Centre, ellipticity and position angle for the radii; distance and r_half for the
        far-star warning.
    columns : dict, optional
        Overrides ``{role: file column name}`` (:func:`halo.inputs.columns.parse_column_overrides`).
    **kwargs
        Passed to :func:`stars_from_table` (warning thresholds).

    Raises
    ------
    InputError
        One line naming the file, and where it applies the 1-based data row (header lines not
        counted) and the column: unreadable file, unknown extension, missing or ambiguous columns,
        missing, non-numeric or non-finite values, unconvertible units, errors <= 0, ra outside
        [0, 360), dec outside [-90, 90], member_prob outside [0, 1], repeated (id, mjd), stars
        90 deg or more from the centre, fewer than 3 stars; feh without feh_err (or the
        reverse), feh outside [-8, 2] dex, a feh without a positive feh_err on its row.
    """
    path = Path(path)
    table, data, read_notes = _read_table(path)
    return stars_from_table(
        table,
        satellite,
        columns,
        source=str(path),
        sha256=hashlib.sha256(data).hexdigest(),
        read_notes=read_notes,
        **kwargs,
    )


def _epoch_feh(values, key):
    """The rows' own [Fe/H] and error as given (NaN: not measured), in epoch order like
    epoch_v; None without the columns."""
    if "feh" not in values:
        return {"epoch_feh": None, "epoch_feh_err": None}
    return {"epoch_feh": values["feh"][key], "epoch_feh_err": values["feh_err"][key]}


def stars_from_table(
    table,
    satellite,
    columns=None,
    *,
    source="<table>",
    sha256="",
    read_notes=(),
    few_stars=10,
    far_r_half=10.0,
    min_stars=MIN_STARS,
):
    """Validate an astropy table of velocities and reduce it to :class:`StarData`.

    The work of :func:`read_catalogue` without the file (e.g. for mock catalogues).
    ``few_stars``: warn below this many stars; ``far_r_half``: warn about stars whose elliptical
    radius exceeds this many (major-axis) half-light radii.
    ``min_stars``: refuse fewer stars than this (a workspace's batch: 1).
    """
    where = f"{source}:"
    if not table.colnames or len(table) == 0:
        what = "no columns" if not table.colnames else "no rows"
        raise InputError(f"{where} empty file ({what})")
    roles = resolve_columns(table.colnames, columns or {}, where)
    values, unit_notes = column_values(table, roles, where)
    ep = merge_epochs(table, roles, values, where, min_stars)
    off, s_ra, s_dec = _star_offsets(values, ep, satellite, roles, where)
    fe = merge_feh(values, ep.star, len(ep.star_ids))
    warns = [*ep.warnings, *fe.warnings]
    warns += _warnings(
        off.radius_ell_deg, ep.merged["v"], ep.star_ids, satellite, roles, few_stars, far_r_half
    )
    key, mjd = ep.order, values.get("mjd")
    arrays = dict(
        id=ep.star_ids,
        ra=s_ra,
        dec=s_dec,
        **ep.merged,
        baseline_days=ep.baseline,
        member_prob=ep.member,
        **off._asdict(),
        epoch_star=ep.star[key],
        epoch_v=values["vlos"][key],
        epoch_err=values["vlos_err"][key],
        epoch_mjd=np.full(len(table), np.nan) if mjd is None else mjd[key],
        epoch_row=key + 1,
        feh=fe.feh,
        feh_err=fe.feh_err,
        **_epoch_feh(values, key),
    )
    for a in arrays.values():
        if a is not None:
            a.setflags(write=False)
    sat = satellite
    return StarData(
        source=source,
        sha256=sha256,
        n_rows=len(table),
        columns=dict(roles),
        centre_ra_deg=float(sat.ra_deg),
        centre_dec_deg=float(sat.dec_deg),
        ellipticity=float(sat.ellipticity),
        position_angle_deg=float(sat.position_angle_deg),
        notes=(*read_notes, *unit_notes, *ep.notes, *fe.notes),
        warnings=tuple(warns),
        **arrays,
    )


def _star_offsets(values, ep, sat, roles, where):
    """(offsets about the centre, ra, dec) of each star's first row; InputError for a star 90 deg
    or more from the centre."""
    s_ra, s_dec = values["ra"][ep.first_row], values["dec"][ep.first_row]
    off = projected_offsets(
        s_ra, s_dec, sat.ra_deg, sat.dec_deg, sat.ellipticity, sat.position_angle_deg
    )
    rho = np.hypot(off.xi_deg, off.eta_deg)
    if (rho >= 90).any():
        i = int(np.argmax(rho >= 90))
        raise InputError(
            f"{where} row {ep.first_row[i] + 1}, columns '{roles['ra']}', '{roles['dec']}': star "
            f"'{ep.star_ids[i]}' lies {rho[i]:.4g} deg from the satellite centre"
        )
    return off, s_ra, s_dec


def _warnings(radius_ell_deg, v, star_ids, sat, roles, few_stars, far_r_half):
    warns = []
    if len(star_ids) < few_stars:
        warns.append(f"only {len(star_ids)} stars: velocity dispersion likely unresolved")
    r_half_deg = math.degrees(math.atan(sat.r_half_pc * 1e-3 / sat.distance_kpc))
    far = radius_ell_deg > far_r_half * r_half_deg
    if far.any():
        listed = ", ".join(f"'{s}'" for s in star_ids[far][:5])
        more = ", ..." if far.sum() > 5 else ""
        warns.append(
            f"{int(far.sum())} star(s) beyond {far_r_half:g} half-light radii "
            f"({far_r_half * r_half_deg:.3g} deg along the major axis): {listed}{more}; "
            "check membership and the centre"
        )
    vmax = np.abs(v).max()
    if vmax > _HIGH_VELOCITY_KMS:
        warns.append(f"velocities up to {vmax:.4g} km/s: check the unit of '{roles['vlos']}'")
    return warns
