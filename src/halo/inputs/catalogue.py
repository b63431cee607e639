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

Other names map onto these with overrides ``{"vlos": "VHEL"}`` (see
:func:`parse_column_overrides`). Units come from the file where a column carries one (converted
with astropy.units); columns without a unit are taken as deg and km/s, and the reader says so in
:attr:`StarData.notes`. Bad input raises :class:`halo.core.errors.InputError` with one line naming the
file, the row and the column.

Row numbers in messages count data rows from 1 in file order, header lines not counted: row 1 is
the first star line of a CSV (line 2 with a one-line header) or the first row of a FITS table.
"""

import dataclasses
import hashlib
import math
import warnings
from pathlib import Path
from typing import NamedTuple

import astropy.units as u
import numpy as np
from astropy.coordinates import SkyCoord
from astropy.table import Table
from astropy.time import Time
from scipy import stats

from halo.core.errors import InputError

__all__ = [
    "COLUMNS",
    "StarData",
    "Offsets",
    "read_catalogue",
    "stars_from_table",
    "parse_column_overrides",
    "projected_offsets",
    "angle_to_kpc",
]

#: column role -> (required, unit the values are converted to)
COLUMNS = {
    "id": (False, None),
    "ra": (True, u.deg),
    "dec": (True, u.deg),
    "vlos": (True, u.km / u.s),
    "vlos_err": (True, u.km / u.s),
    "mjd": (False, u.day),
    "member_prob": (False, u.dimensionless_unscaled),
}
_UNIT_TEXT = {"ra": "deg", "dec": "deg", "vlos": "km/s", "vlos_err": "km/s"}

#: file-name ending (lower case) -> astropy format; longest endings are tried first
_FORMATS = {
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

MIN_STARS = 3
_SAME_STAR_ARCSEC = 1.0  # epochs of one star further apart than this raise a warning
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
    ``radius_ell_deg`` the elliptical (major-axis) radius and ``radius_deg`` the circularised one.

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

    @property
    def n_stars(self):
        return len(self.id)

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
        for name in ("xi_deg", "eta_deg", "radius_ell_deg", "radius_deg"):
            t[name] = getattr(self, name) * u.deg
        return t


class Offsets(NamedTuple):
    """Offsets of stars from a centre [deg] (see :func:`projected_offsets`)."""

    xi_deg: np.ndarray
    eta_deg: np.ndarray
    radius_ell_deg: np.ndarray
    radius_deg: np.ndarray


def projected_offsets(
    ra_deg, dec_deg, centre_ra_deg, centre_dec_deg, ellipticity=0.0, position_angle_deg=0.0
):
    """Offsets and elliptical / circularised radii of positions about a centre [deg].

    Parameters
    ----------
    ra_deg, dec_deg : array
        ICRS positions [deg].
    centre_ra_deg, centre_dec_deg : float
        ICRS centre [deg].
    ellipticity : float
        e = 1 - b/a of the light.
    position_angle_deg : float
        Position angle of the major axis, east of north [deg].

    Returns
    -------
    Offsets
        ``xi_deg`` (east), ``eta_deg`` (north), ``radius_ell_deg``, ``radius_deg``.

    Notes
    -----
    With the great-circle separation rho and position angle phi (east of north) of each star from
    the centre (astropy SkyCoord.separation / position_angle, exact on the sphere, so valid near the
    poles and across RA = 0), the offsets are those of the zenithal equidistant projection:
    xi = rho sin phi, eta = rho cos phi, whose length is rho itself. Along and across the major
    axis, x_maj = rho cos(phi - PA), x_min = rho sin(phi - PA);
    R_ell = sqrt(x_maj^2 + (x_min / (1 - e))^2) is the major-axis radius of the ellipse of axis
    ratio 1 - e through the star, and R_circ = R_ell sqrt(1 - e) the circularised radius, on the
    same footing as the circularised half-light radius r_half sqrt(1 - e) (common practice).
    """
    centre = SkyCoord(centre_ra_deg * u.deg, centre_dec_deg * u.deg, frame="icrs")
    stars = SkyCoord(np.asarray(ra_deg) * u.deg, np.asarray(dec_deg) * u.deg, frame="icrs")
    rho = centre.separation(stars).to_value(u.deg)
    phi = centre.position_angle(stars).to_value(u.rad)
    dphi = phi - math.radians(position_angle_deg)
    x_maj = rho * np.cos(dphi)
    x_min = rho * np.sin(dphi)
    r_ell = np.hypot(x_maj, x_min / (1.0 - ellipticity))
    return Offsets(
        rho * np.sin(phi), rho * np.cos(phi), r_ell, r_ell * math.sqrt(1.0 - ellipticity)
    )


def angle_to_kpc(angle_deg, distance_kpc):
    """Projected radius [kpc] of an angular radius [deg] at ``distance_kpc`` [kpc].

    Notes
    -----
    R = D tan(theta): the radius, in the plane of the sky through the centre, of a line of sight
    at angle theta from the centre (exact for theta < 90 deg). The small-angle form D theta differs
    by theta^2 / 3 in relative terms (2.5e-5 at 0.5 deg). ``distance_kpc`` multiplies from the left,
    so a JAX scalar (traced) gives a JAX array.
    """
    return distance_kpc * np.tan(np.deg2rad(angle_deg))


def parse_column_overrides(items):
    """Parse ``["vlos=VHEL", "ra=RAJ2000"]`` into ``{"vlos": "VHEL", "ra": "RAJ2000"}``.

    Roles are matched case-insensitively; bad syntax, unknown roles and a role given twice raise
    :class:`InputError`.
    """
    out = {}
    for item in items or ():
        role, sep, name = str(item).partition("=")
        role, name = role.strip().lower(), name.strip()
        if not sep or not role or not name:
            raise InputError(f"--column {item!r}: expected ROLE=NAME, e.g. vlos=VHEL")
        if role not in COLUMNS:
            raise InputError(
                f"--column {item!r}: unknown column role '{role}' (known: {', '.join(COLUMNS)})"
            )
        if role in out:
            raise InputError(f"--column {item!r}: column role '{role}' given twice")
        out[role] = name
    return out


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
        Overrides ``{role: file column name}`` (:func:`parse_column_overrides`).
    **kwargs
        Passed to :func:`stars_from_table` (warning thresholds).

    Raises
    ------
    InputError
        One line naming the file, and where it applies the 1-based data row (header lines not
        counted) and the column: unreadable file, unknown extension, missing or ambiguous columns,
        missing, non-numeric or non-finite values, unconvertible units, errors <= 0, ra outside
        [0, 360), dec outside [-90, 90], member_prob outside [0, 1], repeated (id, mjd), stars
        90 deg or more from the centre, fewer than 3 stars.
    """
    path = Path(path)
    name = path.name.lower()
    fmt = next((f for ext, f in _FORMATS.items() if name.endswith(ext)), None)
    if fmt is None:
        raise InputError(
            f"{path}: unknown catalogue format (extensions: {', '.join(sorted(_FORMATS))})"
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
    read_notes = list(dict.fromkeys(f"astropy: {' '.join(str(w.message).split())}" for w in caught))
    return stars_from_table(
        table,
        satellite,
        columns,
        source=str(path),
        sha256=hashlib.sha256(data).hexdigest(),
        read_notes=read_notes,
        **kwargs,
    )


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
):
    """Validate an astropy table of velocities and reduce it to :class:`StarData`.

    The work of :func:`read_catalogue` without the file (e.g. for mock catalogues).
    ``few_stars``: warn below this many stars; ``far_r_half``: warn about stars whose elliptical
    radius exceeds this many (major-axis) half-light radii.
    """
    where = f"{source}:"
    roles = _resolve(table.colnames, columns or {}, where)
    n_rows = len(table)
    values, unit_notes = _columns(table, roles, where)
    notes = [*read_notes, *unit_notes]
    ra, dec, v, err = (values[k] for k in ("ra", "dec", "vlos", "vlos_err"))
    mjd, prob = values.get("mjd"), values.get("member_prob")

    # stars and epochs: epoch arrays sorted by (star, mjd, row)
    star, first_row, star_ids = _stars(table, roles, where)
    rows = np.arange(n_rows)
    key = np.lexsort((rows, rows if mjd is None else mjd, star))
    _check_repeats(star[key], rows[key], None if mjd is None else mjd[key], star_ids, roles, where)
    n_stars = len(star_ids)
    if n_stars < MIN_STARS:
        raise InputError(
            f"{where} only {n_stars} star(s) after merging epochs of {n_rows} row(s); "
            f"at least {MIN_STARS} are needed"
        )
    merged = _merge(v, err, star, n_stars)
    starts = np.flatnonzero(np.r_[True, star[key][1:] != star[key][:-1]])
    baseline = np.zeros(n_stars)
    if mjd is not None:
        baseline = np.maximum.reduceat(mjd[key], starts) - np.minimum.reduceat(mjd[key], starts)
    warns = []
    multi = merged["n_epochs"] > 1
    if multi.any():
        notes.append(
            f"{n_rows} rows merged into {n_stars} stars ({int(multi.sum())} with several epochs)"
        )
        sep = SkyCoord(ra * u.deg, dec * u.deg).separation(
            SkyCoord(ra[first_row[star]] * u.deg, dec[first_row[star]] * u.deg)
        )
        apart = sep.to_value(u.arcsec) > _SAME_STAR_ARCSEC
        if apart.any():
            bad = np.unique(star[apart])
            warns.append(
                f"{len(bad)} star(s) have epochs more than {_SAME_STAR_ARCSEC:g} arcsec apart "
                f"(up to {sep.to_value(u.arcsec).max():.3g} arcsec; first: "
                f"'{star_ids[bad[0]]}'): their first row's position is used"
            )
    member = None
    if prob is not None:
        member = np.bincount(star, prob, minlength=n_stars) / merged["n_epochs"]
        spread = np.maximum.reduceat(prob[key], starts) - np.minimum.reduceat(prob[key], starts)
        if (spread > 0).any():
            notes.append(
                f"member_prob differs between the epochs of {int((spread > 0).sum())} star(s): "
                "their mean is used"
            )

    # radii, from each star's first row
    s_ra, s_dec = ra[first_row], dec[first_row]
    sat = satellite
    off = projected_offsets(
        s_ra, s_dec, sat.ra_deg, sat.dec_deg, sat.ellipticity, sat.position_angle_deg
    )
    rho = np.hypot(off.xi_deg, off.eta_deg)
    if (rho >= 90).any():
        i = int(np.argmax(rho >= 90))
        raise InputError(
            f"{where} row {first_row[i] + 1}, columns '{roles['ra']}', '{roles['dec']}': star "
            f"'{star_ids[i]}' lies {rho[i]:.4g} deg from the satellite centre"
        )
    warns += _warnings(off.radius_ell_deg, merged["v"], star_ids, sat, roles, few_stars, far_r_half)

    arrays = dict(
        id=star_ids,
        ra=s_ra,
        dec=s_dec,
        **merged,
        baseline_days=baseline,
        member_prob=member,
        **off._asdict(),
        epoch_star=star[key],
        epoch_v=v[key],
        epoch_err=err[key],
        epoch_mjd=np.full(n_rows, np.nan) if mjd is None else mjd[key],
        epoch_row=rows[key] + 1,
    )
    for a in arrays.values():
        if a is not None:
            a.setflags(write=False)
    return StarData(
        source=source,
        sha256=sha256,
        n_rows=n_rows,
        columns=dict(roles),
        centre_ra_deg=float(sat.ra_deg),
        centre_dec_deg=float(sat.dec_deg),
        ellipticity=float(sat.ellipticity),
        position_angle_deg=float(sat.position_angle_deg),
        notes=tuple(notes),
        warnings=tuple(warns),
        **arrays,
    )


def _merge(v, err, star, n_stars):
    """Inverse-variance mean of each star's epochs, its error, chi2 about it and the p-value."""
    w = 1.0 / err**2
    ref = np.zeros(n_stars)
    ref[star] = v  # one epoch's velocity per star: single epochs come out exact, chi2 = 0
    dv = v - ref[star]
    sum_w = np.bincount(star, w, minlength=n_stars)
    mean_dv = np.bincount(star, w * dv, minlength=n_stars) / sum_w
    vbar = ref + mean_dv
    chi2 = np.bincount(star, w * (dv - mean_dv[star]) ** 2, minlength=n_stars)
    n_ep = np.bincount(star, minlength=n_stars)
    dof = n_ep - 1
    p_var = np.full(n_stars, np.nan)
    multi = dof > 0
    p_var[multi] = stats.chi2.sf(chi2[multi], dof[multi])
    return dict(
        v=vbar,
        v_err=1.0 / np.sqrt(sum_w),
        n_epochs=n_ep,
        chi2=chi2,
        chi2_dof=dof,
        p_var=p_var,
    )


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


# ----------------------------------------------------------------------------- helpers
def _resolve(colnames, overrides, where):
    """Role -> file column name, case-insensitive, with overrides; one file column per role."""
    bad = [k for k in overrides if str(k).lower() not in COLUMNS]
    if bad:
        raise InputError(
            f"{where} unknown column role '{bad[0]}' in overrides (known: {', '.join(COLUMNS)})"
        )
    overrides = {str(k).lower(): str(n) for k, n in overrides.items()}
    by_lower = {}
    for name in colnames:
        by_lower.setdefault(name.lower(), []).append(name)
    shown = ", ".join(colnames[:20]) + (", ..." if len(colnames) > 20 else "") or "none"
    if len(colnames) == 1 and any(c in colnames[0] for c in " \t;|"):
        shown += "; is the file comma-separated?"
    roles = {}
    for role, (required, _) in COLUMNS.items():
        want = overrides.get(role, role)
        # an override naming a column exactly wins; otherwise every case-insensitive match counts
        exact = role in overrides and want in colnames
        found = [want] if exact else by_lower.get(want.lower(), [])
        if len(found) > 1:
            raise InputError(
                f"{where} column '{want}' is ambiguous: {', '.join(found)} differ only in case"
            )
        if not found:
            if role in overrides:
                raise InputError(
                    f"{where} column '{want}' (given for {role}) not found (columns: {shown})"
                )
            if required:
                raise InputError(
                    f"{where} missing required column '{role}' (columns: {shown}); "
                    f"map another column with --column {role}=NAME"
                )
            continue
        roles[role] = found[0]
    used = {}
    for role, name in roles.items():
        if name in used:
            raise InputError(f"{where} column '{name}' is used for both {used[name]} and {role}")
        used[name] = role
    return roles


def _columns(table, roles, where):
    """Numeric columns in deg, km/s, day, checked; notes on columns without a unit."""
    values, no_unit = {}, {"deg": [], "km/s": []}
    for role in ("ra", "dec", "vlos", "vlos_err", "mjd", "member_prob"):
        if role in roles:
            values[role], has_unit = _numbers(table[roles[role]], role, roles[role], where)
            if not has_unit and role in _UNIT_TEXT:
                no_unit[_UNIT_TEXT[role]].append(roles[role])
    notes = []
    for unit, names in no_unit.items():
        if names:
            many = len(names) > 1
            notes.append(
                f"column{'s' if many else ''} {', '.join(names)} "
                f"{'carry' if many else 'carries'} no unit: taken as {unit}"
            )
    ra, dec, err = values["ra"], values["dec"], values["vlos_err"]
    _check(ra, (ra >= 0) & (ra < 360), "must be in [0, 360) deg", roles["ra"], where)
    _check(dec, (dec >= -90) & (dec <= 90), "must be in [-90, 90] deg", roles["dec"], where)
    _check(err, err > 0, "must be positive", roles["vlos_err"], where)
    if "member_prob" in values:
        p = values["member_prob"]
        _check(p, (p >= 0) & (p <= 1), "must be in [0, 1]", roles["member_prob"], where)
    return values, notes


def _stars(table, roles, where):
    """(star index of each row, first row of each star, star ids), stars in order of appearance."""
    rows = np.arange(len(table))
    if "id" not in roles:
        return rows, rows, np.array([str(r + 1) for r in rows], dtype=str)
    ids = _ids(table[roles["id"]], roles["id"], where)
    uniq, first, inverse = np.unique(ids, return_index=True, return_inverse=True)
    order = np.argsort(first)
    rank = np.empty(len(uniq), dtype=int)
    rank[order] = np.arange(len(uniq))
    return rank[inverse.ravel()], first[order], uniq[order]


def _check_repeats(star, row, mjd, star_ids, roles, where):
    """Reject rows repeating (id, mjd), or an id without an mjd column; inputs sorted by star."""
    same = star[1:] == star[:-1]
    if mjd is not None:
        same &= mjd[1:] == mjd[:-1]
    if not same.any():
        return
    later = np.maximum(row[1:], row[:-1])[same]
    k = int(np.argmin(later))
    r, r0 = later[k], np.minimum(row[1:], row[:-1])[same][k]
    sid = star_ids[star[1:][same][k]]
    if mjd is None:
        raise InputError(
            f"{where} row {r + 1}, column '{roles['id']}': id '{sid}' repeats row {r0 + 1} and "
            "there is no mjd column to make them separate epochs"
        )
    raise InputError(
        f"{where} row {r + 1}, columns '{roles['id']}', '{roles['mjd']}': same id '{sid}' and "
        f"mjd {float(mjd[1:][same][k])!r} as row {r0 + 1}"
    )


def _fail(where, row, name, text):
    raise InputError(f"{where} row {row + 1}, column '{name}': {text}")


def _numbers(col, role, name, where):
    """(float64 values in the role's unit, whether the column carried a unit)."""
    unit = None
    if isinstance(col, Time):
        data, unit = col.mjd, u.day
    elif isinstance(col, u.Quantity):
        data, unit = col.value, col.unit
    else:
        data, unit = col, getattr(col, "unit", None)
    mask = np.ma.getmaskarray(data)
    raw = np.asarray(np.ma.getdata(data))
    if raw.ndim != 1:
        raise InputError(f"{where} column '{name}' must hold one value per row")
    if raw.dtype.kind in "iuf":
        vals = raw.astype(np.float64)
        with np.errstate(invalid="ignore"):
            bad = mask | ~np.isfinite(vals)
        if bad.any():
            i = int(np.argmax(bad))
            _fail(
                where, i, name, "missing value" if mask[i] else f"not finite ({float(vals[i])!r})"
            )
    elif raw.dtype.kind == "b":
        raise InputError(f"{where} column '{name}' holds true/false values, not numbers")
    else:
        vals = np.empty(len(raw))
        for i, x in enumerate(raw):
            if mask[i]:
                _fail(where, i, name, "missing value")
            try:
                vals[i] = float(x.decode() if isinstance(x, bytes) else x)
            except (TypeError, ValueError, UnicodeDecodeError):
                _fail(where, i, name, f"not a number ({str(x)[:40]!r})")
            if not math.isfinite(vals[i]):
                _fail(where, i, name, f"not finite ({float(vals[i])!r})")
    if unit is None or unit == u.dimensionless_unscaled:
        return vals, False
    target = COLUMNS[role][1]
    if role == "mjd" and str(unit).lower() in ("mjd", "day", "days", "d"):
        return vals, True
    try:
        vals = u.Unit(unit).to(target, vals)
    except (u.UnitsError, ValueError, TypeError):
        raise InputError(
            f"{where} column '{name}' ({role}) has unit '{unit}', which does not convert to "
            f"{target.to_string() or 'a plain number'}"
        ) from None
    return np.asarray(vals, dtype=np.float64), True


def _check(vals, ok, text, name, where):
    if not ok.all():
        i = int(np.argmax(~ok))
        _fail(where, i, name, f"{text}, got {vals[i]:.10g}")


def _ids(col, name, where):
    mask = np.ma.getmaskarray(col)
    raw = np.asarray(np.ma.getdata(col))
    if raw.ndim != 1:
        raise InputError(f"{where} column '{name}' must hold one value per row")
    out = []
    for i, x in enumerate(raw):
        s = "" if mask[i] else (x.decode(errors="replace") if isinstance(x, bytes) else str(x))
        s = s.strip()
        if not s:
            _fail(where, i, name, "missing id")
        out.append(s)
    return np.array(out, dtype=str)
