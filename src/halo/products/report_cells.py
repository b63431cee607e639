"""HTML cells of the fit report: escaping, number formats and the rows of its tables."""

import html
import math
import re

__all__ = [
    "ANGLES", "MSUN", "RHALF", "J_UNIT", "D_UNIT", "esc", "slugify", "is_num", "fixed",
    "sig_figs", "q_cells", "q_row", "plain_row", "kv_table",
]  # fmt: skip

ANGLES = (("0.1", "0.1&deg;"), ("0.2", "0.2&deg;"), ("0.5", "0.5&deg;"))


MSUN = "M<sub>&#9737;</sub>"


RHALF = "r<sub>1/2</sub>"


J_UNIT = "GeV<sup>2</sup> cm<sup>&minus;5</sup>"


D_UNIT = "GeV cm<sup>&minus;2</sup>"


def esc(x):
    """Escaped text of any value (None becomes an en dash)."""
    if x is None:
        return "&ndash;"
    return html.escape(str(x), quote=True)


def slugify(name):
    return re.sub(r"[^A-Za-z0-9_-]+", "-", str(name)).strip("-") or "x"


def is_num(x):
    return isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x)


def fixed(x, d=2):
    return f"{x:.{d}f}" if is_num(x) else "&ndash;"


def sig_figs(x, n=3):
    """``x`` to ``n`` significant figures, as HTML (powers of ten written with <sup>)."""
    if not is_num(x):
        return "&ndash;"
    if x == 0:
        return "0"
    k = math.floor(math.log10(abs(x)))
    if -3 <= k < 4:
        return f"{x:.{max(n - 1 - k, 0)}f}"
    m = x / 10.0**k
    if round(abs(m), n - 1) >= 10:
        m, k = m / 10, k + 1
    return f"{m:.{n - 1}f} &times; 10<sup>{k}</sup>"


def _scale(q):
    """Power of ten shared by a row (0 unless the median is >= 1e4 or below 1e-2)."""
    med = q.get("median") if isinstance(q, dict) else None
    if not is_num(med) or med == 0:
        return 0
    k = math.floor(math.log10(abs(med)))
    return k if (k >= 4 or k < -2) else 0


def _decimals(x, n=3):
    """Decimals that give ``x`` ``n`` significant figures (at least 0)."""
    if not is_num(x) or x == 0:
        return 2
    return max(n - 1 - math.floor(math.log10(abs(x))), 0)


def q_cells(q, kind):
    """Median, 68% and 95% interval cells and the unit prefix for a quantile dict.

    ``kind``: "sig" (3 significant figures on the median, a shared power of ten), or "f2"/"f3"
    (fixed decimals, no scaling).
    """
    if not isinstance(q, dict) or not is_num(q.get("median")):
        return ["&ndash;"] * 3, ""
    if kind == "sig":
        k = _scale(q)
        f = 10.0**k
        d = _decimals(q["median"] / f)
        prefix = f"10<sup>{k}</sup> " if k else ""
    else:
        f, d, prefix = 1.0, int(kind[1:]), ""

    def one(x):
        return f"{x / f:.{d}f}" if is_num(x) else "&ndash;"

    cells = [
        one(q["median"]),
        f"{one(q.get('p16'))} &ndash; {one(q.get('p84'))}",
        f"{one(q.get('p2.5'))} &ndash; {one(q.get('p97.5'))}",
    ]
    return cells, prefix


def q_row(row_id, label, q, unit, kind="sig"):
    cells, prefix = q_cells(q, kind)
    unit_html = (prefix + unit).strip() or "&ndash;"
    tds = "".join(f'<td class="num">{c}</td>' for c in cells)
    return f'<tr id="{row_id}"><th scope="row">{label}</th>{tds}<td>{unit_html}</td></tr>'


def plain_row(row_id, label, value, unit=""):
    return (
        f'<tr id="{row_id}"><th scope="row">{label}</th><td class="num" colspan="3">{value}</td>'
        f"<td>{unit or '&ndash;'}</td></tr>"
    )


def kv_table(rows, table_id=None):
    """Two-column table of (label HTML, value HTML)."""
    ident = f' id="{table_id}"' if table_id else ""
    body = "".join(f'<tr><th scope="row">{k}</th><td>{v}</td></tr>' for k, v in rows)
    return f"<table{ident}>{body}</table>"
