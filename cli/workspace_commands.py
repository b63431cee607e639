"""Commands on a satellite workspace: init, add, refit, status, history, and export (of a
workspace's latest run or of any fit folder)."""

import json
from pathlib import Path
from typing import Annotated

import typer

from halo.cli.options import (
    Columns,
    Draws,
    JsonOut,
    Models,
    Quiet,
    Seed,
    Warmup,
    parse_angles,
    positive_int,
    satellite_path,
)

__all__ = ["init_cmd", "add_cmd", "refit_cmd", "status_cmd", "history_cmd", "export_cmd"]

Workspace = Annotated[str, typer.Argument(metavar="DIR", help="workspace folder")]


def init_cmd(
    workspace: str = typer.Argument(..., metavar="DIR", help="new workspace folder"),
    satellite: str = typer.Option(
        ...,
        "--satellite",
        metavar="FILE",
        help="satellite description file (TOML), or 'demo' for the embedded demo satellite",
    ),
    model: Models = None,
):
    """Create a workspace for one satellite: catalogue versions, runs and their history."""
    from halo.workspace.create import init_workspace

    ws = init_workspace(workspace, satellite_path(satellite), list(model) if model else None)
    typer.echo(f"workspace {ws.root} created; add stars with `halo add {ws.root} CATALOGUE`")


def add_cmd(
    workspace: Workspace,
    catalogue: str = typer.Argument(
        ..., metavar="CATALOGUE", help="velocity catalogue with new stars or epochs"
    ),
    replace: bool = typer.Option(
        False, "--replace", help="let new values supersede conflicting measurements"
    ),
    column: Columns = None,
):
    """Merge a catalogue's stars and epochs into a new catalogue version."""
    from halo.inputs.catalogue import parse_column_overrides
    from halo.products.console import format_added
    from halo.workspace.catalogues import add_catalogue

    r = add_catalogue(workspace, catalogue, parse_column_overrides(column), replace=replace)
    typer.echo(format_added(r))


_SATELLITE_HELP = "use this satellite file from now on (default: re-read the recorded one)"
RefitModels = Annotated[
    list[str] | None,
    typer.Option(
        "--model",
        metavar="NAME",
        help="add or update a model spec (name in any case, or path; repeatable)",
    ),
]
RefitAnisotropy = Annotated[
    str | None,
    typer.Option(
        "--anisotropy",
        metavar="KIND",
        help="anisotropy of every model instead of its spec's: constant, osipkov-merritt, "
        "baes-van-hese, or spec (default: as last run)",
    ),
]


def refit_cmd(
    workspace: Workspace,
    chains: int = typer.Option(
        None, "--chains", metavar="N", help="number of chains (default: as last run)"
    ),
    warmup: Warmup = None,
    draws: Draws = None,
    seed: Seed = None,
    binaries: bool | None = typer.Option(
        None, "--binaries/--no-binaries", help="model binaries (default: as last run, on)"
    ),
    foreground: bool | None = typer.Option(
        None, "--foreground/--no-foreground", help="model foreground (default: as last run)"
    ),
    force: bool = typer.Option(False, "--force", help="refit every model even if unchanged"),
    model: RefitModels = None,
    satellite: str = typer.Option(None, "--satellite", metavar="FILE", help=_SATELLITE_HELP),
    anisotropy: RefitAnisotropy = None,
    tidal_truncation: bool | None = typer.Option(
        None,
        "--tidal-truncation/--no-tidal-truncation",
        help="J and D truncated at each draw's Jacobi radius (default: as last run, on)",
    ),
    quiet: Quiet = False,
):
    """Fit what changed since the last run (unchanged models are reused, others warm-started).

    Options left out keep the values of the workspace's last run (the defaults of `halo fit`
    before the first run). The satellite file recorded by `halo init` (or --satellite) is read
    again: content edited since is recorded as a new satellite version and refit.
    """
    from halo.products.rundir import read_summary
    from halo.products.text_report import format_summary
    from halo.workspace.refit import last_settings, refit

    for v, o in ((chains, "--chains"), (warmup, "--warmup"), (draws, "--draws")):
        if v is not None:
            positive_int(v, o)
    settings = last_settings(
        workspace,
        chains=chains,
        warmup=warmup,
        draws=draws,
        seed=seed,
        binaries=binaries,
        foreground=foreground,
        anisotropy=anisotropy,
        tidal_truncation=tidal_truncation,
        progress=not quiet,
    )

    def say(msg):
        if not quiet:
            typer.echo(msg, err=True)

    folder, message = refit(
        workspace,
        settings,
        force=force,
        say=say,
        models=list(model) if model else None,
        satellite=None if satellite is None else satellite_path(satellite),
    )
    typer.echo(format_summary(read_summary(folder), folder))
    typer.echo(message)


def status_cmd(
    workspace: Workspace,
    json_out: JsonOut = False,
):
    """What is stale in a workspace and what the next refit would do."""
    from halo.products.console import format_status
    from halo.workspace.views import status

    st = status(workspace)
    typer.echo(json.dumps(st) if json_out else format_status(st))


def history_cmd(
    workspace: Workspace,
    json_out: JsonOut = False,
):
    """How the mass, J-factor, Bayes factors and members moved from run to run."""
    from halo.products.console import format_history
    from halo.workspace.views import history, history_figure

    rows = history(workspace)
    if json_out:
        typer.echo(json.dumps({"runs": rows}))
        return
    typer.echo(format_history(rows))
    if rows:
        typer.echo(f"figure: {history_figure(workspace, rows)}")


def export_cmd(
    source: str = typer.Argument(
        ..., metavar="DIR", help="workspace folder (its latest run) or a fit folder"
    ),
    out: str = typer.Option(
        ..., "--out", metavar="OUT", help="output folder (must not hold earlier exports)"
    ),
    angles_deg: str = typer.Option(
        None, "--angles-deg", metavar="LIST", help="extra cone half-angles, comma-separated [deg]"
    ),
    half_width_deg: float = typer.Option(
        None,
        "--half-width-deg",
        metavar="DEG",
        help="half-width of the FITS templates, at most 30 [deg] (default: per model, the "
        "smallest map holding 99% of the halo's J)",
    ),
    pixel_deg: float = typer.Option(
        None,
        "--pixel-deg",
        metavar="DEG",
        help="pixel side of the templates [deg] (default 0.01 up to 2 deg half-width, else "
        "half-width / 200)",
    ),
    template_draws: int = typer.Option(
        200, "--template-draws", metavar="N", help="posterior draws averaged in the templates"
    ),
    frame: str = typer.Option(
        "icrs", "--frame", metavar="icrs|galactic", help="celestial frame of the templates' WCS"
    ),
):
    """J- and D-factor tables, posterior draws, FITS templates and the summary of a run."""
    from astropy.table import Table

    from halo.products.console import format_export
    from halo.products.export import export_run
    from halo.products.jd_tables import headline_lines
    from halo.products.template_fits import template_lines
    from halo.workspace.record import DB_NAME
    from halo.workspace.views import latest_run_folder

    src = Path(source)
    run = latest_run_folder(src) if (src / DB_NAME).is_file() else src
    written = export_run(
        run,
        out,
        parse_angles(angles_deg, "--angles-deg"),
        n_template_draws=template_draws,
        template_half_width_deg=half_width_deg,
        pixel_deg=pixel_deg,
        frame=frame,
    )
    typer.echo(format_export(run, out, written))
    table = Table.read(written[0], format="ascii.ecsv")
    for line in headline_lines(table) + template_lines(written):
        typer.echo(line)
