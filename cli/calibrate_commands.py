"""`halo calibrate`: simulation-based calibration of the fit over a spec's prior, on the batch
runner."""

import shlex
from typing import Annotated

import typer

from halo.cli.options import Anisotropy, Draws, Models, Quiet, Seed, Warmup

__all__ = ["calibrate_cmd"]

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


def _v_sys_prior(text):
    from halo.cli.options import fail

    parts = text.split(",")
    try:
        mean, sigma = (float(p) for p in parts)
    except ValueError:
        fail(f"--v-sys-prior: expected MEAN,SIGMA [km/s], got {text!r}")
    return mean, sigma


def _command_line(ctx):
    """The command as run, every option spelled out (recorded in calibration.json)."""
    words = ["halo", "calibrate", ctx.params["spec"]]
    for p in ctx.command.params:
        v = ctx.params.get(p.name)
        if p.name == "spec" or v is None or not p.opts:
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
    mocks: int = typer.Option(200, "--mocks", metavar="N", help="mocks (truths from the prior)"),
    stars: int = typer.Option(100, "--stars", metavar="N", help="stars per mock, field included"),
    satellite: str = typer.Option("demo", "--satellite", metavar="FILE", help=SAT_HELP),
    v_sys_prior: str = typer.Option("0,10", "--v-sys-prior", metavar="MEAN,SIGMA", help=VSYS_HELP),
    foreground_max: float = typer.Option(
        0.2, "--foreground-max", metavar="F", help="field-star fraction uniform in [0, F]"
    ),
    epochs: int = typer.Option(1, "--epochs", metavar="N", help="epochs per star, a year apart"),
    rank_draws: int = typer.Option(
        99, "--rank-draws", metavar="L", help="posterior draws kept per fit (thinned) for ranks"
    ),
    bins: int = typer.Option(10, "--bins", metavar="N", help="rank histogram bins ((L+1) % N = 0)"),
    scheduler: Scheduler = None,
    workers: Workers = None,
    model: Models = None,
    chains: Chains = 4,
    warmup: Warmup = 1000,
    draws: Draws = 1000,
    seed: Seed = 0,
    binaries: bool = typer.Option(
        True, "--binaries/--no-binaries", help="binaries in the mocks and in the fitted model"
    ),
    foreground: bool | None = typer.Option(
        None,
        "--foreground/--no-foreground",
        help="the fits' non-member mixture; default: decided per catalogue",
    ),
    anisotropy: Anisotropy = None,
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
        spec,
        mocks,
        stars,
        seed=seed,
        binaries=binaries,
        foreground_max=foreground_max,
        epochs=epochs,
        anisotropy=anisotropy,
    )
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
