"""Commands on one satellite without a workspace: models, predict, fit, demo and mock."""

import json
import math
import shutil
from typing import Annotated

import typer

from halo.cli.options import (
    Anisotropy,
    Columns,
    Draws,
    JsonOut,
    Models,
    Quiet,
    Satellite,
    Seed,
    SetValues,
    TidalTruncation,
    Warmup,
    check_out_dir,
    fail,
    parse_angles,
    parse_list,
    parse_set,
    positive_int,
    satellite_path,
)

__all__ = ["models_cmd", "predict_cmd", "fit_cmd", "demo_cmd", "mock_cmd"]


def models_cmd(json_out: JsonOut = False):
    """List the model specs and their parameters."""
    from halo.inputs.spec import available_specs, load_spec
    from halo.products.console import format_models, models_json

    specs = [load_spec(n) for n in available_specs()]
    if json_out:
        typer.echo(json.dumps(models_json(specs), indent=1, default=str))
        return
    typer.echo(format_models(specs))


def predict_cmd(
    satellite: Satellite,
    model: str = typer.Option(
        ...,
        "--model",
        metavar="NAME",
        help="model spec name (see `halo models`; any case) or path to a spec file",
    ),
    set_: SetValues = None,
    radii_pc: str = typer.Option(
        None, "--radii-pc", metavar="LIST", help="comma-separated projected radii [pc]"
    ),
    angles_deg: str = typer.Option(
        None, "--angles-deg", metavar="LIST", help="comma-separated cone half-angles [deg]"
    ),
    anisotropy: Anisotropy = None,
    json_out: JsonOut = False,
):
    """Velocity dispersion, enclosed mass, J and D of one model at given parameters."""
    from halo.inputs.satellite import read_satellite
    from halo.inputs.spec import load_spec
    from halo.inputs.spec_anisotropy import with_anisotropy
    from halo.pipeline.predict import predict
    from halo.products.console import format_prediction

    values = parse_set(set_)
    radii = parse_list(radii_pc, "--radii-pc")
    angles = parse_angles(angles_deg, "--angles-deg")
    sat = read_satellite(satellite_path(satellite))
    spec = with_anisotropy(load_spec(model), anisotropy)
    res = predict(spec, sat, values, radii, angles)
    if json_out:
        typer.echo(json.dumps(res))
        return
    typer.echo(format_prediction(res, sat))


def _read_inputs(catalogue, satellite, column):
    """(satellite path, satellite, stars) of `halo fit`; the catalogue's notes and warnings
    are shown."""
    from halo.inputs.catalogue import parse_column_overrides, read_catalogue
    from halo.inputs.satellite import read_satellite

    sat_path = satellite_path(satellite)
    sat = read_satellite(sat_path)
    stars = read_catalogue(catalogue, sat, parse_column_overrides(column))
    for note in stars.notes:
        typer.echo(f"note: {note}", err=True)
    for w in stars.warnings:
        typer.echo(f"warning: {w}", err=True)
    return sat_path, sat, stars


Catalogue = Annotated[
    str,
    typer.Argument(metavar="CATALOGUE", help="velocity catalogue (ECSV, FITS, VOTable or CSV)"),
]


def fit_cmd(
    catalogue: Catalogue,
    satellite: Satellite,
    out: Annotated[str, typer.Option("--out", metavar="DIR", help="output folder")],
    model: Models = None,
    chains: int = typer.Option(4, "--chains", metavar="N", help="number of chains"),
    warmup: Warmup = 1000,
    draws: Draws = 1000,
    seed: Seed = 0,
    column: Columns = None,
    overwrite: bool = typer.Option(False, "--overwrite", help="replace results already in --out"),
    binaries: bool = typer.Option(
        True,
        "--binaries/--no-binaries",
        help="marginalise each star over binary orbital motion, epochs used jointly (free "
        "binary fraction); on by default",
    ),
    foreground: bool | None = typer.Option(
        None,
        "--foreground/--no-foreground",
        help="mix members with a broad non-member velocity distribution; default: on when the "
        "catalogue reaches beyond the members (member_prob column or far velocity outliers)",
    ),
    anisotropy: Anisotropy = None,
    tidal_truncation: TidalTruncation = True,
    quiet: Quiet = False,
):
    """Fit the models to a catalogue and compare each with stars alone."""
    from halo.inputs.spec import load_spec
    from halo.inputs.spec_anisotropy import with_anisotropy
    from halo.pipeline.fit import DEFAULT_MODELS, FitSettings, fit
    from halo.products.text_report import format_summary

    settings = FitSettings(
        chains=chains,
        warmup=warmup,
        draws=draws,
        seed=seed,
        progress=not quiet,
        binaries=binaries,
        foreground="auto" if foreground is None else foreground,
        anisotropy=anisotropy,
        tidal_truncation=tidal_truncation,
    )
    out_dir = check_out_dir(out, overwrite)
    models = list(model) if model else list(DEFAULT_MODELS)
    for name in models:  # every spec checked before the catalogue is read
        with_anisotropy(load_spec(name), settings.anisotropy)
    sat_path, sat, stars = _read_inputs(catalogue, satellite, column)
    created = not out_dir.exists()
    try:
        summary = fit(stars, sat, out_dir, models, settings, satellite_path=sat_path)
    except KeyboardInterrupt:  # the folder this run made goes; an --overwrite one stays
        if created:
            shutil.rmtree(out_dir, ignore_errors=True)
        raise
    typer.echo(format_summary(summary, out_dir))


def demo_cmd(
    out: str = typer.Option("halo-demo-output", "--out", metavar="DIR", help="output folder"),
    overwrite: bool = typer.Option(True, "--overwrite/--keep", help="replace an earlier demo run"),
    quiet: Quiet = False,
):
    """The whole job on the embedded fictional satellite and its mock catalogue."""
    from halo.pipeline.demo import run_demo

    out_dir = check_out_dir(out, overwrite)
    typer.echo(run_demo(out_dir, progress=not quiet))


METHOD_HELP = (
    "velocities: auto (default: df when the model has a non-negative distribution function, "
    "else gaussian, saying why), df (equilibrium distribution function: isotropic or "
    "Osipkov-Merritt; refuses a model without one) or gaussian (Gaussians with the Jeans "
    "dispersions, approximate; any anisotropy)"
)


N_STARS_HELP = "number of member stars"
V_SYS_HELP = "systemic velocity [km/s]"
ERRORS_HELP = "range of the velocity errors [km/s]"
EPOCHS_HELP = "observing epochs, comma-separated [MJD, d], e.g. 60000,60365 (adds an mjd column)"
MockOut = Annotated[
    str,
    typer.Option("--out", metavar="FILE", help="output catalogue (.ecsv, .fits, .vot or .csv)"),
]
MockModel = Annotated[
    str,
    typer.Option(
        "--model",
        metavar="NAME",
        help="model spec (name in any case, or path) giving the halo and anisotropy",
    ),
]
Method = Annotated[str, typer.Option("--method", metavar="auto|df|gaussian", help=METHOD_HELP)]
Epochs = Annotated[str | None, typer.Option("--epochs", metavar="LIST", help=EPOCHS_HELP)]
RepeatFraction = Annotated[
    float,
    typer.Option(
        "--repeat-fraction",
        metavar="FRACTION",
        help="fraction of stars observed at every epoch [0-1]",
    ),
]
BinaryFraction = Annotated[
    float,
    typer.Option(
        "--binary-fraction",
        metavar="FRACTION",
        help="fraction of members that are binaries, orbits drawn [0-1]",
    ),
]
NForeground = Annotated[
    int, typer.Option("--n-foreground", metavar="N", help="number of non-member field stars to add")
]
OldForeground = Annotated[
    int | None,
    typer.Option("--foreground", hidden=True, help="old name of --n-foreground (one version)"),
]


def _foreground_count(n_foreground, old_spelling):
    """The number of field stars of ``halo mock`` from --n-foreground or its old name."""
    option = "--n-foreground"
    if old_spelling is not None:
        if n_foreground not in (0, old_spelling):
            fail("--foreground and --n-foreground disagree: give --n-foreground only")
        typer.echo(
            "note: `halo mock --foreground N` is now `--n-foreground N`; the old spelling "
            "will be removed in the next version",
            err=True,
        )
        n_foreground, option = old_spelling, "--foreground"
    if n_foreground < 0:
        fail(f"{option}: expected a non-negative number of stars, got {n_foreground!r}")
    return n_foreground


def _method_note(method, truth_path):
    """When --method auto fell back to the approximate Gaussians, one line on stderr saying why
    (the equilibrium DF, the expected case, goes silently; the truth records both)."""
    truth = json.loads(truth_path.read_text(encoding="utf-8")) if method == "auto" else {}
    if truth.get("method_used") == "gaussian":
        typer.echo(f"note: --method auto: {truth['method_reason']}", err=True)


def _check_fraction(value, name):
    if not 0.0 <= value <= 1.0:
        fail(f"{name}: expected a number between 0 and 1, got {value!r}")


Feh = Annotated[
    str | None,
    typer.Option(
        "--feh", metavar="MEAN,SPREAD", help="draw [Fe/H]: members' mean and spread [dex]"
    ),
]
FehErrors = Annotated[
    str, typer.Option("--feh-errors", metavar="LO,HI", help="[Fe/H] error range [dex]")
]

Flattening = Annotated[
    float | None,
    typer.Option(
        "--flattening",
        metavar="Q",
        help="an oblate tracer of intrinsic axis ratio Q, inclined so that its image has the "
        "satellite's ellipticity (Q <= 1 - e; Gaussian velocities from the axisymmetric Jeans "
        "equations)",
    ),
]


def mock_cmd(
    satellite: Satellite,
    out: MockOut,
    model: MockModel = "nfw",
    set_: SetValues = None,
    n_stars: Annotated[int, typer.Option("--n-stars", metavar="N", help=N_STARS_HELP)] = 100,
    v_sys: Annotated[float, typer.Option("--v-sys", metavar="KM/S", help=V_SYS_HELP)] = 0.0,
    errors: Annotated[str, typer.Option("--errors", metavar="LO,HI", help=ERRORS_HELP)] = "1,3",
    method: Method = "auto",
    seed: Seed = 0,
    epochs: Epochs = None,
    repeat_fraction: RepeatFraction = 1.0,
    binary_fraction: BinaryFraction = 0.0,
    n_foreground: NForeground = 0,
    old_foreground: OldForeground = None,
    anisotropy: Anisotropy = None,
    feh: Feh = None,
    feh_errors: FehErrors = "0.1,0.3",
    flattening: Flattening = None,
):
    """A mock catalogue with a known truth (written beside it as JSON)."""
    from halo.mock.files import write_mock
    from halo.mock.metallicity import metallicity_options
    from halo.products.console import format_mock_written

    positive_int(n_stars, "--n-stars")
    if not math.isfinite(v_sys):
        fail(f"--v-sys: expected a finite velocity [km/s], got {v_sys!r}")
    err = parse_list(errors, "--errors")
    if len(err) != 2 or err[0] > err[1]:
        fail("--errors: expected LO,HI with LO <= HI")
    if method not in ("auto", "df", "gaussian"):
        fail(f"--method: expected auto, df or gaussian, got {method!r}")
    mjds = None if epochs is None else parse_list(epochs, "--epochs")
    _check_fraction(repeat_fraction, "--repeat-fraction")
    _check_fraction(binary_fraction, "--binary-fraction")
    n_foreground = _foreground_count(n_foreground, old_foreground)
    path, truth_path = write_mock(
        satellite_path(satellite),
        out,
        model,
        parse_set(set_),
        n_stars=n_stars,
        v_sys=v_sys,
        error_range=tuple(err),
        method=method,
        seed=seed,
        epochs_mjd=mjds,
        repeat_fraction=repeat_fraction,
        binary_fraction=binary_fraction,
        n_foreground=n_foreground,
        anisotropy=anisotropy,
        metallicity=metallicity_options(feh, feh_errors),
        flattening=flattening,
    )
    _method_note(method, truth_path)
    typer.echo(format_mock_written(path, truth_path, n_stars, n_foreground))
