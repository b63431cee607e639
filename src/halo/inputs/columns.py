"""Catalogue columns: the roles (``id``, ``ra``, ``dec``, ``vlos``, ...), matched to a file's
column names case-insensitively with user overrides, and read as checked numbers in the roles'
units (``feh`` and ``feh_err`` in dex, checked in :mod:`halo.inputs.feh`)."""

import astropy.units as u

from halo.core.errors import InputError
from halo.inputs.feh import check_feh
from halo.inputs.values import check_range, numbers

__all__ = ["COLUMNS", "parse_column_overrides", "resolve_columns", "column_values"]

#: column role -> (required, unit the values are converted to)
COLUMNS = {
    "id": (False, None),
    "ra": (True, u.deg),
    "dec": (True, u.deg),
    "vlos": (True, u.km / u.s),
    "vlos_err": (True, u.km / u.s),
    "mjd": (False, u.day),
    "member_prob": (False, u.dimensionless_unscaled),
    "feh": (False, u.dex),
    "feh_err": (False, u.dex),
}
#: roles whose cells may be empty or NaN (not measured)
_MAY_BE_MISSING = ("feh", "feh_err")
_UNIT_TEXT = {"ra": "deg", "dec": "deg", "vlos": "km/s", "vlos_err": "km/s"}


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


def resolve_columns(colnames, overrides, where):
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


def column_values(table, roles, where):
    """Numeric columns in deg, km/s, day, checked; notes on columns without a unit."""
    values, no_unit = {}, {"deg": [], "km/s": []}
    for role in ("ra", "dec", "vlos", "vlos_err", "mjd", "member_prob", *_MAY_BE_MISSING):
        if role in roles:
            values[role], has_unit = numbers(
                table[roles[role]],
                role,
                roles[role],
                where,
                COLUMNS[role][1],
                missing_ok=role in _MAY_BE_MISSING,
            )
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
    check_range(ra, (ra >= 0) & (ra < 360), "must be in [0, 360) deg", roles["ra"], where)
    check_range(dec, (dec >= -90) & (dec <= 90), "must be in [-90, 90] deg", roles["dec"], where)
    check_range(err, err > 0, "must be positive", roles["vlos_err"], where)
    if "member_prob" in values:
        p = values["member_prob"]
        check_range(p, (p >= 0) & (p <= 1), "must be in [0, 1]", roles["member_prob"], where)
    check_feh(values, roles, where)
    return values, notes
