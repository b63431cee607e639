"""The figures of the fit report (embedded PNGs with captions) and its caveats."""

import functools
import tomllib
from importlib import resources
from pathlib import Path

from halo.products.plots_corner import CORNER_PAGE
from halo.products.report_cells import esc
from halo.products.report_sources import embed_png, figure_list
from halo.results.members import LIKELY_BINARY_BAYES_FACTOR

__all__ = ["figures", "caveats"]


def _corner_caption(stem):
    """(model, page) of a corner file stem: corner_<model> or corner_<model>_<page>."""
    rest = stem[len("corner_") :]
    head, _, tail = rest.rpartition("_")
    if head and tail.isdigit():
        return head, int(tail)
    return rest, None


_CAPTIONS = {
    "dispersion_profile": (
        "{name}: line-of-sight velocity dispersion against projected radius. Black points: "
        "maximum of the weighted likelihood in radial bins of about equal total weight, each star "
        "weighted by p_member (1 - p_binary) (the fit's membership and binary probabilities), "
        "with 68% intervals counted with the effective number of stars; grey squares: all stars "
        "unweighted (field stars and binaries inflate them); lines and bands: each model's "
        "median and 68% interval; dashed red: the true profile when the input is a mock. Lower "
        "panel: each star's velocity offset, the stars the weights exclude (weight below 0.5) "
        "faint."
    ),
    "velocity_radius": (
        "{name}: line-of-sight velocity of each star against projected radius, coloured by its "
        "membership probability; the line is the fitted systemic velocity (red circles: the "
        "field stars of a mock)."
    ),
    "velocity_histogram": (
        "{name}: histogram of the velocities with the fitted member component (Gaussians of "
        "the model dispersion plus each star's error about v_sys, weighted by membership; no "
        "binary orbital motion) and the fitted field component, both in stars per bin; right: "
        "the members' peak."
    ),
    "sky_map": (
        "{name}: sky positions as tangent-plane offsets (east to the left), coloured by "
        "membership probability, with the half-light ellipse (major-axis half-light radius, "
        "ellipticity and position angle east of north of the satellite file)."
    ),
    "epoch_changes": (
        "{name}: epoch-to-epoch velocity changes |dv| against their errors sigma_dv for the "
        "stars measured more than once, likely binaries (members whose binary Bayes factor "
        f"exceeds {LIKELY_BINARY_BAYES_FACTOR:g}) in red, non-members as crosses; right: "
        "|dv| / sigma_dv against the half-normal expected of constant velocities."
    ),
    "mass_profile": (
        "{name}: enclosed mass M(&lt;r) of each model (median and 68% band), the stars alone "
        "(dashed) and the closed-form estimators at their radii."
    ),
    "jfactor": (
        "{name}: J-factor against the half-angle of the cone for each dark model (median, "
        "68% and 95% bands)."
    ),
}


def _caption(rel, summary):
    stem = Path(rel).stem
    name = esc(summary["satellite"].get("name"))
    if stem in _CAPTIONS:
        return _CAPTIONS[stem].format(name=name)
    if stem.startswith("corner_"):
        model, page = _corner_caption(stem)
        where = "" if page is None else f" (page {page}; at most {CORNER_PAGE} parameters a page)"
        return (
            f"Posterior of model {esc(model)}{where}: physical parameters first, then the "
            "nuisances; histograms on the diagonal, 68% and 95% contours of the smoothed "
            "two-dimensional densities below it (red: the truth of a mock)."
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
