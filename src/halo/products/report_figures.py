"""The figures of the fit report (embedded PNGs with captions) and its caveats."""

import functools
import tomllib
from importlib import resources
from pathlib import Path

from halo.products.plots import CORNER_MAX
from halo.products.report_cells import esc
from halo.products.report_sources import embed_png, figure_list

__all__ = ["figures", "caveats"]


def _caption(rel, summary):
    stem = Path(rel).stem
    name = esc(summary["satellite"].get("name"))
    if stem == "dispersion_profile":
        return (
            f"{name}: line-of-sight velocity dispersion against projected radius. Points: "
            "maximum-likelihood dispersion of the stars in radial bins; lines and bands: each "
            "model's median and 68% interval."
        )
    if stem == "mass_profile":
        return (
            f"{name}: enclosed mass M(&lt;r) of each model (median and 68% band), the stars alone "
            "(dashed) and the closed-form estimators at their radii."
        )
    if stem == "jfactor":
        return (
            f"{name}: J-factor against the half-angle of the cone for each dark model (median, "
            "68% and 95% bands)."
        )
    if stem.startswith("corner_"):
        model = esc(stem[len("corner_") :])
        return (
            f"Posterior of model {model}: histograms of the sampled parameters (at most "
            f"{CORNER_MAX}; the figure names any left out) on the diagonal and pairwise "
            "two-dimensional histograms below it."
        )
    return f"Figure {esc(rel)}."


def figures(summary, run_dir):
    parts = []
    problems = []
    figs = figure_list(run_dir, summary)
    for i, rel in enumerate(figs, 1):
        uri, why = embed_png(run_dir, rel)
        if uri is None:
            problems.append(f"<li><code>{esc(rel)}</code>: {esc(why)}</li>")
            continue
        parts.append(
            f'<figure id="fig-{i}"><img src="{uri}" alt="{esc(rel)}">'
            f"<figcaption><strong>Figure {i}.</strong> {_caption(rel, summary)} "
            f'<span class="hash">({esc(rel)})</span></figcaption></figure>'
        )
    if problems:
        parts.insert(
            0,
            '<div class="banner" id="banner-figures" role="alert">'
            '<strong class="head">Some figures could not be embedded</strong>'
            f'<ul class="plain">{"".join(problems)}</ul></div>',
        )
    if not figs:
        parts.append("<p>This run lists no figures.</p>")
    return "".join(parts)


@functools.cache
def _caveat_list():
    """(title HTML, plain text) of each caveat, from the package data file report_caveats.toml."""
    text = resources.files("halo.products").joinpath("report_caveats.toml").read_text("utf-8")
    return tuple((c["title"], c["text"]) for c in tomllib.loads(text)["caveat"])


def caveats():
    items = "".join(f"<dt><strong>{t}</strong></dt><dd>{esc(x)}</dd>" for t, x in _caveat_list())
    return f'<dl id="caveats-list">{items}</dl>'
