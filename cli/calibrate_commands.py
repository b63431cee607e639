"""`halo calibrate` (simulation-based calibration of the fit over a spec's prior) and `halo
forecast` (observing plans from a fit's posterior), both on the batch runner."""

import shlex
from typing import Annotated

import typer

from halo.cli.options import Anisotropy, Columns, Draws, Models, Quiet, Seed, Warmup

__all__ = ["calibrate_cmd", "forecast_cmd"]

SPEC_HELP = "model spec whose prior the truths come from: a name (any case) or a path"
OUT_HELP = (
    "output folder: calibration.json, calibration.ecsv, rank_histograms.png, mocks/ (catalogues, "
    "truths, manifest) and fits/ (the batch)"
)
SAT_HELP = (
    "satellite file whose distance, r_half and stellar-mass priors the truths are drawn from, "
    "or 'demo'"
)
VSYS_HELP = (
    "MEAN,SIGMA [km/s]: the v_sys prior when the satellite file gives none (the ranks need one "
    "that does not depend on the data)"
)
SCHEDULER_HELP = "address of a running Dask scheduler (default: a local cluster on 127.0.0.1)"
WORKERS_HELP = "worker processes of the local cluster, one core each (default: the core count)"
Scheduler = Annotated[
    str | None, typer.Option("--scheduler", metavar="ADDRESS", help=SCHEDULER_HELP)
]
Workers = Annotated[int | None, typer.Option("--workers", metavar="N", help=WORKERS_HELP)]
Chains = Annotated[int, typer.Option("--chains", metavar="N", help="number of chains")]


Mocks = Annotated[int, typer.Option("--mocks", metavar="N", help="mocks (truths from the prior)")]
Stars = Annotated[int, typer.Option("--stars", metavar="N", help="stars per mock, field included")]
SatelliteFile = Annotated[str, typer.Option("--satellite", metavar="FILE", help=SAT_HELP)]
VSysPrior = Annotated[str, typer.Option("--v-sys-prior", metavar="MEAN,SIGMA", help=VSYS_HELP)]
ForegroundMax = Annotated[
    float,
    typer.Option("--foreground-max", metavar="F", help="field-star fraction uniform in [0, F]"),
]
Epochs = Annotated[int, typer.Option("--epochs", metavar="N", help="epochs per star, a year apart")]
RankDraws = Annotated[
    int,
    typer.Option(
        "--rank-draws", metavar="L", help="posterior draws kept per fit (thinned) for ranks"
    ),
]
Bins = Annotated[
    int, typer.Option("--bins", metavar="N", help="rank histogram bins ((L+1) % N = 0)")
]
MockBinaries = Annotated[
    bool,
    typer.Option("--binaries/--no-binaries", help="binaries in the mocks and in the fitted model"),
]
MOCK_PERIODS_HELP = (
    "MEAN,SIGMA of log10 P [day]: the mocks' binary periods only (the fits keep the spec's): a "
    "robustness run on binaries the model does not assume"
)
MOCK_FIELD_HELP = (
    "OFFSET:SIGMA:WEIGHT[,...] [km/s]: the mocks' field-star velocity components (offset from "
    "v_sys); default 50:40:0.6,-30:90:0.4, a two-component field the fit's one Gaussian does "
    "not assume"
)
MOCK_FLATTENING_HELP = (
    "Q: the mocks' stars from an oblate tracer of intrinsic axis ratio Q, inclined so that its "
    "image has the satellite's ellipticity (Q <= 1 - e); the fits stay spherical"
)
MockFlattening = Annotated[
    float | None,
    typer.Option("--mock-flattening", metavar="Q", help=MOCK_FLATTENING_HELP),
]
MockPeriods = Annotated[
    str | None,
    typer.Option("--mock-binary-periods", metavar="MEAN,SIGMA", help=MOCK_PERIODS_HELP),
]
MockField = Annotated[
    str | None, typer.Option("--mock-field", metavar="COMPONENTS", help=MOCK_FIELD_HELP)
]
Foreground = Annotated[
    bool | None,
    typer.Option(
        "--foreground/--no-foreground",
        help="the fits' non-member mixture; default: decided per catalogue",
    ),
]


def _v_sys_prior(text):
    from halo.cli.options import fail

    parts = text.split(",")
    try:
        mean, sigma = (float(p) for p in parts)
    except ValueError:
        fail(f"--v-sys-prior: expected MEAN,SIGMA [km/s], got {text!r}")
    return mean, sigma


def _numbers(text, flag, shape, n_parts):
    """Floats of ``text`` split by ``,`` (and ``:`` inside each part); one-line error naming
    ``flag`` and the expected ``shape`` otherwise."""
    from halo.cli.options import fail

    try:
        parts = [[float(x) for x in part.split(":")] for part in text.split(",")]
    except ValueError:
        fail(f"--{flag}: expected {shape}, got {text!r}")
    if any(len(p) != n_parts for p in parts) or (n_parts == 1 and len(parts) != 2):
        fail(f"--{flag}: expected {shape}, got {text!r}")
    return parts


def _mock_field(text):
    """The field components (offset, sigma, weight) of ``--mock-field``, or None."""
    from halo.cli.options import fail

    if text is None:
        return None
    comps = _numbers(text, "mock-field", "OFFSET:SIGMA:WEIGHT[,...] [km/s]", 3)
    if any(sigma <= 0 or weight <= 0 for _, sigma, weight in comps):
        fail(f"--mock-field: every SIGMA and WEIGHT must be positive, got {text!r}")
    return tuple(tuple(c) for c in comps)


def _mock_periods(text):
    if text is None:
        return None
    return tuple(p[0] for p in _numbers(text, "mock-binary-periods", "MEAN,SIGMA", 1))


def _command_line(ctx, command="calibrate", argument="spec"):
    """The command as run, every option spelled out (recorded in its JSON output)."""
    words = ["halo", command, ctx.params[argument]]
    for p in ctx.command.params:
        v = ctx.params.get(p.name)
        if p.name == argument or v is None or not p.opts:
            continue
        if isinstance(v, bool):
            flag = p.opts[0] if v else (p.secondary_opts or [None])[0]
            words += [flag] if flag and (v or p.secondary_opts) else []
            continue
        for item in v if isinstance(v, list | tuple) else [v]:
            words += [p.opts[0], str(item)]
    return shlex.join(words)


def calibrate_cmd(
    ctx: typer.Context,
    spec: Annotated[str, typer.Argument(metavar="SPEC", help=SPEC_HELP)],
    out: Annotated[str, typer.Option("--out", metavar="DIR", help=OUT_HELP)],
    mocks: Mocks = 200,
    stars: Stars = 100,
    satellite: SatelliteFile = "demo",
    v_sys_prior: VSysPrior = "0,10",
    foreground_max: ForegroundMax = 0.2,
    epochs: Epochs = 1,
    rank_draws: RankDraws = 99,
    bins: Bins = 10,
    scheduler: Scheduler = None,
    workers: Workers = None,
    model: Models = None,
    chains: Chains = 4,
    warmup: Warmup = 1000,
    draws: Draws = 1000,
    seed: Seed = 0,
    binaries: MockBinaries = True,
    foreground: Foreground = None,
    anisotropy: Anisotropy = None,
    mock_binary_periods: MockPeriods = None,
    mock_field: MockField = None,
    mock_flattening: MockFlattening = None,
    quiet: Quiet = False,
):
    """Simulation-based calibration: truths from the spec's prior, their mocks fitted on a Dask
    cluster, each truth ranked among its posterior draws (exit code 1 when a fit failed)."""
    from halo.batch.sbc import SbcDesign
    from halo.batch.sbc_report import format_calibration, run_calibration
    from halo.cli.batch_commands import check_cluster_options, fit_settings
    from halo.cli.options import satellite_path

    check_cluster_options(scheduler, workers)
    design = SbcDesign(
        spec, mocks, stars, seed=seed, binaries=binaries, foreground_max=foreground_max,
        epochs=epochs, anisotropy=anisotropy, mock_periods=_mock_periods(mock_binary_periods),
        mock_field=_mock_field(mock_field), mock_flattening=mock_flattening,
    )  # fmt: skip
    settings = fit_settings(chains, warmup, draws, seed, binaries, foreground, anisotropy)
    result = run_calibration(
        design,
        satellite_path(satellite),
        out,
        settings=settings,
        models=list(model) if model else None,
        scheduler=scheduler,
        workers=workers,
        n_keep=rank_draws,
        n_bins=bins,
        v_sys_prior=_v_sys_prior(v_sys_prior),
        progress=not quiet,
        command=_command_line(ctx),
    )
    typer.echo(format_calibration(result, out))
    if result["failed"]:
        raise typer.Exit(1)


FOLDER_HELP = (
    "a `halo fit` output folder (summary.json, members.ecsv, <model>/posterior.nc), or a "
    "workspace (its latest run)"
)
PLAN_HELP = (
    "an observing plan (repeatable, in the order to compare): +N (N more stars), epochs (one more "
    "epoch of the --epoch-stars a year after the catalogue's last epoch, or after the fit's date "
    "without an mjd column), epochs@DATE[,DATE...] (new epochs on these dates: YYYY-MM-DD or "
    "MJD), or +N:epochs[@DATE,...] (both; new stars are observed on the plan's dates)"
)
RESIM_HELP = (
    "resimulate whole catalogues at each draw (all stars, errors drawn from members.ecsv) instead "
    "of keeping the observed stars and adding the plan's stars and epochs to them"
)
CAT_HELP = (
    "the catalogue the fit used, when summary.json's catalogue.source is gone (checked by sha256)"
)
EPOCH_STARS_HELP = (
    "stars observed again by an epochs plan: comma-separated ids of members.ecsv, or a file "
    "with one id per line (default: all)"
)
NEW_ERR_HELP = (
    "errors [km/s] of the new measurements, uniform in LO,HI (default: a new star's drawn from "
    "the catalogue's errors, a new epoch's its star's own)"
)
Resimulate = Annotated[bool, typer.Option("--resimulate", help=RESIM_HELP)]
CatalogueOpt = Annotated[str | None, typer.Option("--catalogue", metavar="FILE", help=CAT_HELP)]
EpochStars = Annotated[
    str | None, typer.Option("--epoch-stars", metavar="IDS|FILE", help=EPOCH_STARS_HELP)
]
NewErrors = Annotated[str | None, typer.Option("--new-errors", metavar="LO,HI", help=NEW_ERR_HELP)]


def _new_errors(text):
    """(lo, hi) [km/s] of --new-errors, or None."""
    from halo.cli.options import fail, parse_list

    err = parse_list(text, "--new-errors")
    if err is not None and (len(err) != 2 or not 0 < err[0] <= err[1]):
        fail("--new-errors: expected LO,HI [km/s] with 0 < LO <= HI")
    return None if err is None else (err[0], err[1])


def _run_folder(folder, quiet):
    """A fit output folder as given, or a workspace's latest run (said on stderr)."""
    from pathlib import Path

    from halo.workspace.record import DB_NAME
    from halo.workspace.views import latest_run_folder

    src = Path(folder)
    if not (src / DB_NAME).is_file():
        return src
    run = latest_run_folder(src)
    if not quiet:
        typer.echo(f"forecast from the workspace's latest run: {run}", err=True)
    return run


def forecast_cmd(
    ctx: typer.Context,
    folder: Annotated[str, typer.Argument(metavar="FOLDER", help=FOLDER_HELP)],
    out: Annotated[str, typer.Option("--out", metavar="DIR", help="output folder")],
    plan: Annotated[list[str], typer.Option("--plan", metavar="PLAN", help=PLAN_HELP)],
    draws_per_plan: int = typer.Option(
        20, "--draws-per-plan", metavar="N", help="future catalogues per plan (posterior draws)"
    ),
    resimulate: Resimulate = False,
    catalogue: CatalogueOpt = None,
    epoch_stars: EpochStars = None,
    new_errors: NewErrors = None,
    column: Columns = None,
    scheduler: Scheduler = None,
    workers: Workers = None,
    model: Annotated[
        str | None,
        typer.Option("--model", metavar="NAME", help="the fit's dark model (default: its first)"),
    ] = None,
    chains: Chains = 4,
    warmup: Warmup = 1000,
    draws: Draws = 1000,
    seed: Seed = 0,
    binaries: bool = typer.Option(True, "--binaries/--no-binaries", help="binaries in the fits"),
    foreground: bool | None = typer.Option(
        None, "--foreground/--no-foreground", help="the fits' non-member mixture (default: auto)"
    ),
    quiet: Quiet = False,
):
    """Forecast observing plans from a fit's posterior: future catalogues (by default the observed
    stars kept, plus the plan's new stars and epochs) simulated at its draws, fitted on a Dask
    cluster; ln B, interval widths and binary fraction per plan."""
    from halo.batch.forecast import parse_plan
    from halo.batch.forecast_report import format_forecast, run_forecast
    from halo.cli.batch_commands import check_cluster_options, fit_settings

    check_cluster_options(scheduler, workers)
    plans = [parse_plan(p) for p in plan]
    settings = fit_settings(chains, warmup, draws, seed, binaries, foreground, None)
    result = run_forecast(
        _run_folder(folder, quiet),
        out,
        plans,
        settings=settings,
        n_draws=draws_per_plan,
        model=model,
        scheduler=scheduler,
        workers=workers,
        progress=not quiet,
        command=_command_line(ctx, "forecast", "folder"),
        resimulate=resimulate,
        catalogue=catalogue,
        epoch_stars=epoch_stars,
        new_errors=_new_errors(new_errors),
        columns=column,
    )
    typer.echo(format_forecast(result, out))
    if result["failed"]:
        raise typer.Exit(1)
