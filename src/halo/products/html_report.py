"""One self-contained HTML page for a fit output folder.

The page is read from the folder that :func:`halo.pipeline.fit.fit` wrote (``summary.json``,
``members.ecsv`` and ``figures/*.png``) and holds everything in one file: the figures are embedded
as base64 ``data:`` URIs, the style sheet is inline, there is no script and no reference to any
other file or address (a Content-Security-Policy meta tag forbids them), so the page can be mailed
or archived on its own and opened offline.

Every string taken from the summary is escaped with :func:`html.escape`.

The page is put together here from one module per part: :mod:`halo.products.report_sources`
(what is read from the folder), :mod:`halo.products.report_cells` (escaping and number formats),
:mod:`halo.products.report_verdict`, :mod:`halo.products.report_models`,
:mod:`halo.products.report_run` and :mod:`halo.products.report_figures` (the sections); the style
sheet and the caveats are package data (``report.css``, ``report_caveats.toml``).
"""

import datetime
import functools
from importlib import resources
from pathlib import Path

from halo.core.fileio import atomic_path
from halo.products.report_cells import esc
from halo.products.report_comparison import comparison_section
from halo.products.report_figures import caveats, figures
from halo.products.report_headline import headline_table
from halo.products.report_models import model_section
from halo.products.report_run import diagnostics, inputs, notes
from halo.products.report_sources import load_summary
from halo.products.report_verdict import convergence_banner, dispersion_banner, verdict_block

__all__ = ["write_html_report"]


@functools.cache
def _css():
    """The inline style sheet (package data file report.css)."""
    return resources.files("halo.products").joinpath("report.css").read_text(encoding="utf-8")


def _when(created):
    try:
        t = datetime.datetime.fromisoformat(created)
    except (TypeError, ValueError):
        return esc(created)
    if t.tzinfo is not None:
        t = t.astimezone(datetime.UTC)
        return esc(t.strftime("%Y-%m-%d %H:%M:%S UTC"))
    return esc(t.strftime("%Y-%m-%d %H:%M:%S"))


def _sections(summary, run_dir):
    """(id, title, HTML) of the sections in reading order: verdict, headline numbers, figures,
    comparison and priors, diagnostics, inputs and hashes, then notes and caveats."""
    models = "".join(model_section(n, m, summary) for n, m in summary["models"].items())
    return [
        ("verdict", "Verdict", verdict_block(summary) + dispersion_banner(summary)),
        ("models", "Headline numbers", headline_table(summary) + models),
        ("figures", "Figures", figures(summary, run_dir)),
        ("comparison", "Comparison with stars alone, and the priors", comparison_section(summary)),
        ("diagnostics", "Convergence diagnostics", diagnostics(summary)),
        ("inputs", "Inputs and hashes", inputs(summary, run_dir)),
        ("notes", "Notes and warnings", notes(summary)),
        ("caveats", "Caveats", caveats()),
    ]


def _render(summary, run_dir):
    name = summary["satellite"]["name"]
    dark = [n for n, m in summary["models"].items() if "vs_stars_only" in m]
    sections = _sections(summary, run_dir)
    nav = "".join(f'<a href="#sec-{k}">{t}</a>' for k, t, _ in sections)
    body = "".join(f'<section id="sec-{k}"><h2>{t}</h2>{h}</section>' for k, t, h in sections)
    first, rest = body.split("</section>", 1)
    body = f"{first}</section><nav>{nav}</nav>{rest}"
    written = datetime.datetime.now(datetime.UTC).strftime("%Y-%m-%d %H:%M:%S UTC")
    sub = (
        f"Run of {_when(summary['created'])} &middot; halo {esc(summary.get('version'))} &middot; "
        f"{len(dark)} dark model(s) compared with stars only &middot; report written {written}"
    )
    csp = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en"><head><meta charset="utf-8">'
        f'<meta http-equiv="Content-Security-Policy" content="{csp}">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>halo fit report: {esc(name)} ({_when(summary['created'])})</title>"
        f"<style>\n{_css()}</style></head>"
        f'<body><main><header><h1 id="title">{esc(name)} <span class="kind">fit report</span></h1>'
        f'<p class="sub">{sub}</p></header>'
        f"{convergence_banner(summary)}{body}"
        f"<footer>Written by halo {esc(summary.get('version'))} from "
        "<code>summary.json</code>, <code>members.ecsv</code> and the figures of the run "
        "folder. Self-contained: no scripts, no external resources.</footer>"
        "</main></body></html>\n"
    )


def write_html_report(run_dir, path=None):
    """Write one self-contained HTML report of a fit output folder.

    Parameters
    ----------
    run_dir : path of a folder written by :func:`halo.pipeline.fit.fit` (``summary.json``,
        ``members.ecsv``, ``figures/*.png``)
    path : where to write the page (default ``run_dir/report.html``); written atomically

    Returns
    -------
    Path of the written report.

    Raises
    ------
    halo.core.errors.InputError
        When the folder or its summary.json is missing, unreadable or lacks a required key.
    """
    run_dir = Path(run_dir)
    summary = load_summary(run_dir)
    page = _render(summary, run_dir)
    out = Path(path) if path is not None else run_dir / "report.html"
    with atomic_path(out) as tmp:
        tmp.write_text(page, encoding="utf-8")
    return out
