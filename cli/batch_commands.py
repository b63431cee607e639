"""`halo batch`: many fits at once on a Dask distributed cluster."""

from typing import Annotated

import typer

from halo.cli.options import Anisotropy, Draws, Models, Quiet, Seed, TidalTruncation, Warmup

__all__ = ["batch_cmd", "check_cluster_options", "fit_settings"]

MANIFEST_HELP = (
    "manifest (TOML): one [[entry]] table per fit with name, catalogue, satellite and optional "
    "models, columns and fit settings (chains, warmup, draws, seed, binaries, foreground, "
    "anisotropy); paths relative to the manifest"
)
OUT_HELP = "output folder: <name>/ per entry (a `halo fit` folder), batch.ecsv and batch.json"
SCHEDULER_HELP = (
    "address of a running Dask scheduler, e.g. tcp://10.0.0.5:8786 (default: a local cluster "
    "on 127.0.0.1)"
)
WORKERS_HELP = "worker processes of the local cluster, one core each (default: the core count)"


def check_cluster_options(scheduler, workers):
    """--scheduler and --workers: not both, a positive number of workers (exit 2 otherwise)."""
    from halo.cli.options import fail

    if scheduler is not None and workers is not None:
        fail("--workers: only for the local cluster; a --scheduler has its own workers")
    if workers is not None and workers < 1:
        fail(f"--workers: expected a positive number of workers, got {workers!r}")


def fit_settings(
    chains, warmup, draws, seed, binaries, foreground, anisotropy, tidal_truncation=True
):
    """The FitSettings of the command line's fit options (no progress inside a batch)."""
    from halo.pipeline.fit import FitSettings

    return FitSettings(
        chains=chains,
        warmup=warmup,
        draws=draws,
        seed=seed,
        progress=False,
        binaries=binaries,
        foreground="auto" if foreground is None else foreground,
        anisotropy=anisotropy,
        tidal_truncation=tidal_truncation,
    )


def batch_cmd(
    manifest: Annotated[str, typer.Argument(metavar="MANIFEST", help=MANIFEST_HELP)],
    out: Annotated[str, typer.Option("--out", metavar="DIR", help=OUT_HELP)],
    scheduler: Annotated[
        str | None, typer.Option("--scheduler", metavar="ADDRESS", help=SCHEDULER_HELP)
    ] = None,
    workers: Annotated[
        int | None, typer.Option("--workers", metavar="N", help=WORKERS_HELP)
    ] = None,
    model: Models = None,
    chains: int = typer.Option(4, "--chains", metavar="N", help="number of chains"),
    warmup: Warmup = 1000,
    draws: Draws = 1000,
    seed: Seed = 0,
    binaries: bool = typer.Option(
        True,
        "--binaries/--no-binaries",
        help="marginalise each star over binary orbital motion (entries may set their own)",
    ),
    foreground: bool | None = typer.Option(
        None,
        "--foreground/--no-foreground",
        help="mix members with a non-member velocity distribution; default: decided per "
        "catalogue (entries may set their own)",
    ),
    anisotropy: Anisotropy = None,
    tidal_truncation: TidalTruncation = True,
    quiet: Quiet = False,
):
    """Fit every entry of a manifest, each one task on a Dask cluster; reruns skip finished
    entries and retry failed ones (exit code 1 when an entry failed: see batch.ecsv)."""
    from halo.batch.runner import format_outcome, run_batch
    from halo.pipeline.fit import DEFAULT_MODELS

    check_cluster_options(scheduler, workers)
    settings = fit_settings(
        chains, warmup, draws, seed, binaries, foreground, anisotropy, tidal_truncation
    )
    outcome = run_batch(
        manifest,
        out,
        scheduler=scheduler,
        workers=workers,
        settings=settings,
        models=list(model) if model else list(DEFAULT_MODELS),
        progress=not quiet,
    )
    typer.echo(format_outcome(outcome, out))
    if any(r["status"] != "done" for r in outcome.records):
        raise typer.Exit(1)
