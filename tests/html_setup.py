"""Shared set-up of the HTML report tests: one real run folder and a parser of the page.

One real run folder is made by a small fit (a cold stars-only mock of 40 stars, NFW against stars
only, 2 chains x 200 + 200) whose satellite name holds HTML special characters; it is fitted once
per test session and shared by the test files of the report. The page is checked with Python's
html.parser.
"""

import json
import re
import shutil
from html.parser import HTMLParser

from halo.inputs.catalogue import read_catalogue
from halo.inputs.satellite import read_satellite
from halo.mock.catalogue import make_mock
from halo.pipeline.fit import FitSettings, fit
from halo.products.html_report import write_html_report

NAME = "Mock <b>& I"
SATELLITE_TOML = """\
name = "Mock <b>& I"
ra_deg = 40.0
dec_deg = 12.0
distance_kpc = 60.0
distance_err_kpc = 3.0
r_half_pc = 50.0
r_half_err_pc = 5.0
ellipticity = 0.2
position_angle_deg = 30.0
stellar_mass_msun = 8000.0
stellar_mass_err_msun = 2000.0
absolute_magnitude_v = -4.5
absolute_magnitude_v_err = 0.2
"""
SETTINGS = FitSettings(chains=2, warmup=200, draws=200, seed=1, progress=False)

#: elements whose boundaries separate words in the rendered text
BLOCKS = {
    "p", "div", "li", "td", "th", "tr", "table", "h1", "h2", "h3", "dt", "dd", "ul", "dl",
    "section", "header", "nav", "figure", "figcaption", "title", "footer", "br", "details",
    "summary", "main", "body", "head",
}  # fmt: skip


class Page(HTMLParser):
    """Tags, attributes, text and the text of elements with an id, from html.parser."""

    def __init__(self, text):
        super().__init__(convert_charrefs=True)
        self.tags = []
        self.texts = []
        self.style = []
        self._stack = []  # (tag, id) of open elements
        self.by_id = {}  # id -> list of text pieces inside that element
        self.feed(text)
        self.close()

    def _gap(self, tag):
        if tag in BLOCKS:
            self.handle_data(" ")

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.tags.append((tag, attrs))
        self._gap(tag)
        if tag in ("img", "meta", "br", "hr", "input", "link"):
            return
        self._stack.append((tag, attrs.get("id")))
        if attrs.get("id"):
            self.by_id[attrs["id"]] = []

    def handle_endtag(self, tag):
        self._gap(tag)
        while self._stack:
            t, _ = self._stack.pop()
            if t == tag:
                break

    def handle_data(self, data):
        self.texts.append(data)
        if self._stack and self._stack[-1][0] == "style":
            self.style.append(data)
        for _, ident in self._stack:
            if ident:
                self.by_id[ident].append(data)

    @property
    def text(self):
        return " ".join("".join(self.texts).split())

    def text_of(self, ident):
        assert ident in self.by_id, f"no element with id {ident!r}"
        return " ".join("".join(self.by_id[ident]).split())

    def images(self):
        return [a.get("src", "") for t, a in self.tags if t == "img"]


_CACHE = {}


def fitted_run(tmp_path_factory):
    """The run folder and its report (fitted on the first call of the session)."""
    if "run" not in _CACHE:
        _CACHE["run"] = _fit_and_report(tmp_path_factory)
    return _CACHE["run"]


def _fit_and_report(tmp_path_factory):
    inputs = tmp_path_factory.mktemp("html-inputs")
    sat_path = inputs / "satellite <s>.toml"
    sat_path.write_text(SATELLITE_TOML, encoding="utf-8")
    sat = read_satellite(sat_path)
    assert sat.name == NAME
    # a cold system (stars only, ~0.3 km/s) measured with 1-2 km/s errors: the dispersion is not
    # resolved, so the run exercises the loud banner and the upper limits
    mock = make_mock(sat, None, n_stars=40, v_sys=12.0, error_range_kms=(1.0, 2.0), seed=5)
    cat_path = inputs / "mock & <cat>.ecsv"
    mock.table.write(cat_path, format="ascii.ecsv")
    stars = read_catalogue(cat_path, sat)
    out = tmp_path_factory.mktemp("html-run")
    summary = fit(stars, sat, out, ["nfw"], SETTINGS, satellite_path=sat_path)
    assert summary["dispersion"]["resolved"] is False, summary["dispersion"]["message"]
    report = write_html_report(out)
    text = report.read_text(encoding="utf-8")
    return {
        "dir": out,
        "summary": json.loads((out / "summary.json").read_text()),
        "report": report,
        "html": text,
        "page": Page(text),
        "sat_path": sat_path,
        "cat_path": cat_path,
    }


def row_cells(html_text, row_id):
    """Inner HTML of the <td> cells of the table row with id ``row_id``."""
    m = re.search(rf'<tr id="{re.escape(row_id)}">(.*?)</tr>', html_text, re.S)
    assert m, f"no table row {row_id!r}"
    return re.findall(r"<td[^>]*>(.*?)</td>", m.group(1), re.S)


def assert_printed(cell_html, unit_html, value):
    """A printed number equals ``value`` to within half a unit of its last printed decimal.

    The unit cell may start with the row's power of ten, '10<sup>k</sup>'.
    """
    text = cell_html.strip()
    assert re.fullmatch(r"-?\d+(\.\d+)?", text), text
    decimals = len(text.split(".")[1]) if "." in text else 0
    k = re.match(r"\s*10<sup>(-?\d+)</sup>", unit_html)
    scale = 10.0 ** int(k.group(1)) if k else 1.0
    tol = 0.5 * 10.0**-decimals * scale * (1 + 1e-9)
    assert abs(float(text) * scale - value) <= tol, (text, unit_html, value)


def sig_value(cell_html):
    """'6.53 &times; 10<sup>4</sup>' or '3706' -> float."""
    m = re.fullmatch(r"\s*(-?[\d.]+)(?: &times; 10<sup>(-?\d+)</sup>)?\s*", cell_html)
    assert m, cell_html
    return float(m.group(1)) * (10.0 ** int(m.group(2)) if m.group(2) else 1.0)


def copy_run(run, dest):
    dest.mkdir()
    shutil.copytree(run["dir"] / "figures", dest / "figures")
    shutil.copy2(run["dir"] / "members.ecsv", dest / "members.ecsv")
    return dest


def write_report(folder, summary):
    (folder / "summary.json").write_text(json.dumps(summary), encoding="utf-8")
    return write_html_report(folder).read_text(encoding="utf-8")
