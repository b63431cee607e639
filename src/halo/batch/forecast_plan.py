"""Observing plans of `halo forecast`: the plan grammar and the chosen stars.

A plan is ``+N`` (N more stars), ``epochs`` (one more epoch of the chosen stars), ``+N:epochs``
(both), where ``epochs`` may carry its dates: ``epochs@2027-03-01`` or ``epochs@60800,61165``
(ISO dates, or MJDs; several, comma-separated). A bare ``epochs`` is one epoch a year (365.25 d)
after the catalogue's last epoch (after the fit's date when the catalogue has no mjd column).
MJD = JD - 2400000.5; the ISO date d is MJD (d - 1858-11-17) in days at 0h UTC (the definition
of the MJD, common practice).
"""

import dataclasses
import datetime
import re
from pathlib import Path

from halo.core.errors import InputError

__all__ = ["Plan", "parse_plan", "iso_to_mjd", "parse_epoch_stars", "YEAR_DAYS"]

YEAR_DAYS = 365.25
_MJD_ZERO = datetime.date(1858, 11, 17)
_DATE = r"(?:\d{4}-\d{2}-\d{2}|\d{1,6}(?:\.\d*)?)"
_PLAN = re.compile(rf"(?:\+(\d{{1,5}}))?(?::?(epochs)(?:@({_DATE}(?:,{_DATE})*))?)?")
_GRAMMAR = (
    "+N, epochs, epochs@DATE[,DATE...] or +N:epochs[@DATE,...] (N >= 1; DATE: YYYY-MM-DD or MJD)"
)


@dataclasses.dataclass(frozen=True)
class Plan:
    """``n_add`` more stars and/or new epochs (``epochs``) of the chosen stars.

    ``dates``: the new epochs' MJDs as given, or () for a bare ``epochs`` (one epoch a year after
    the last; the forecast fills in the date it used)."""

    text: str
    n_add: int
    epochs: bool
    dates: tuple = ()

    @property
    def slug(self):
        tail = ""
        if self.epochs:
            tail = "-epochs" + (f"{len(self.dates)}at{int(self.dates[0])}" if self.dates else "")
        return f"add{self.n_add}{tail}"


def iso_to_mjd(text, where="--plan"):
    """MJD [day] of an ISO date ``YYYY-MM-DD`` at 0h UTC (InputError naming ``where``)."""
    try:
        day = datetime.date.fromisoformat(text)
    except ValueError:
        raise InputError(f"{where}: {text!r} is not a date (YYYY-MM-DD)") from None
    return float((day - _MJD_ZERO).days)


def _date(text):
    return iso_to_mjd(text) if "-" in text else float(text)


def parse_plan(text):
    """A :class:`Plan` of the grammar above (InputError naming --plan)."""
    s = text.strip()
    m = _PLAN.fullmatch(s)
    if not m or not (m.group(1) or m.group(2)) or (m.group(1) and int(m.group(1)) < 1):
        raise InputError(f"--plan: expected {_GRAMMAR}, got {text!r}")
    dates = tuple(_date(d) for d in m.group(3).split(",")) if m.group(3) else ()
    if len(set(dates)) != len(dates):
        raise InputError(f"--plan {s}: a date is given twice")
    return Plan(s, int(m.group(1) or 0), bool(m.group(2)), dates)


def parse_epoch_stars(value, known_ids):
    """The star ids ``--epoch-stars`` names (comma-separated, or a file with one id per line),
    checked against ``known_ids`` (members.ecsv); None (all stars) when ``value`` is None."""
    if value is None:
        return None
    path = Path(value)
    if path.is_file():
        lines = path.read_text().splitlines()
        ids = [x.strip() for x in lines if x.strip() and not x.strip().startswith("#")]
        where = f"--epoch-stars {path}"
    else:
        ids = [x.strip() for x in str(value).split(",") if x.strip()]
        where = "--epoch-stars"
    if not ids:
        raise InputError(f"{where}: no star ids given")
    known = set(known_ids)
    bad = next((i for i in ids if i not in known), None)
    if bad is not None:
        raise InputError(f"{where}: unknown star id {bad!r} (not in the fit's members.ecsv)")
    return list(dict.fromkeys(ids))
