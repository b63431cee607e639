"""The ``halo`` command line (typer). It only parses options and calls library functions.

Exit codes: 0 done; 2 bad input or usage (one line on stderr, no traceback); 1 internal error.
"""

import json
import math
import os
import sys
import tempfile

import typer

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    help="Jeans models of faint Milky Way satellites: masses, J- and D-factors, dark matter "
    "versus stars alone.",
)


class UsageFailure(Exception):
    """Raised by commands for bad option values (exit 2)."""


def _fail(msg):
    raise UsageFailure(msg)


def _parse_list(text, option):
    if text is None:
        return None
    try:
        vals = [float(x) for x in text.replace(" ", "").split(",") if x != ""]
    except ValueError:
        _fail(f"{option}: expected comma-separated numbers, got {text!r}")
    if not vals:
        _fail(f"{option}: empty list")
    for v in vals:
        if not math.isfinite(v) or v <= 0:
            _fail(f"{option}: values must be positive, got {v}")
    return vals


def _parse_set(items):
    out = {}
    for item in items or []:
        if "=" not in item:
            _fail(f"--set: expected KEY=VALUE, got {item!r}")
        k, v = item.split("=", 1)
        k = k.strip()
        try:
            out[k] = float(v)
        except ValueError:
            _fail(f"--set {k}: expected a number, got {v!r}")
    return out


@app.command("models")
def models_cmd(
    json_out: bool = typer.Option(False, "--json", help="print one JSON object"),
):
    """List the model specs and their parameters."""
    from halo.spec import available_specs, load_spec

    specs = [load_spec(n) for n in available_specs()]
    if json_out:
        obj = {
            s.name: {
                "description": s.description,
                "dark_profile": s.dark_profile,
                "anisotropy": s.anisotropy,
                "parameters": s.parameters,
            }
            for s in specs
        }
        typer.echo(json.dumps(obj, indent=1, default=str))
        return
    for s in specs:
        typer.echo(f"{s.name}: {s.description}")
        typer.echo(f"  dark profile: {s.dark_profile}; anisotropy: {s.anisotropy}")
        for name, p in s.parameters.items():
            bits = [f"{k}={v}" for k, v in p.items() if k not in ("prior", "doc", "unit")]
            unit = f" [{p['unit']}]" if "unit" in p else ""
            typer.echo(f"  {name:<12s}{unit:<14s} {p['prior']}({', '.join(bits)})")
            if "doc" in p:
                typer.echo(f"  {'':<26s} {p['doc']}")
        typer.echo(
            "  also: stellar_mass [Msun] (from the satellite file), and in fits the systemic "
            "velocity, distance and half-light radius"
        )
        typer.echo("")


def _satellite_path(name):
    """'demo' names the embedded demo satellite file; anything else is a path."""
    if name == "demo" and not os.path.exists(name):
        from halo.demo import demo_satellite_path

        return demo_satellite_path()
    return name


def _fmt(x, nd=4):
    if x is None:
        return "-"
    return f"{x:.{nd}g}"


@app.command("predict")
def predict_cmd(
    satellite: str = typer.Argument(
        ..., help="satellite description file (TOML), or 'demo' for the embedded demo satellite"
    ),
    model: str = typer.Option(..., "--model", help="model spec name (see `halo models`) or path"),
    set_: list[str] = typer.Option(None, "--set", help="parameter value, KEY=VALUE (repeatable)"),
    radii_pc: str = typer.Option(None, "--radii-pc", help="comma-separated projected radii [pc]"),
    angles_deg: str = typer.Option(None, "--angles-deg", help="comma-separated cone angles [deg]"),
    json_out: bool = typer.Option(False, "--json", help="print one JSON object"),
):
    """Velocity dispersion, enclosed mass, J and D of one model at given parameters."""
    from halo.predict import predict
    from halo.satellite import read_satellite
    from halo.spec import load_spec

    values = _parse_set(set_)
    radii = _parse_list(radii_pc, "--radii-pc")
    angles = _parse_list(angles_deg, "--angles-deg")
    sat = read_satellite(_satellite_path(satellite))
    spec = load_spec(model)
    res = predict(spec, sat, values, radii, angles)
    if json_out:
        typer.echo(json.dumps(res))
        return
    typer.echo(f"model {res['model']} for {sat.name} (d = {sat.distance_kpc:g} kpc)")
    typer.echo("parameters: " + ", ".join(f"{k}={_fmt(v)}" for k, v in res["parameters"].items()))
    typer.echo("")
    typer.echo(f"{'R [pc]':>10s} {'sigma_los [km/s]':>17s} {'M(<r) [Msun]':>14s}")
    for r, s, m in zip(
        res["radii_pc"], res["sigma_los_kms"], res["mass_enclosed_msun"], strict=True
    ):
        typer.echo(f"{r:10.2f} {s:17.4f} {m:14.4e}")
    typer.echo("")
    typer.echo(f"{'theta [deg]':>11s} {'log10 J [GeV^2 cm^-5]':>22s} {'log10 D [GeV cm^-2]':>20s}")
    for i, a in enumerate(res["angles_deg"]):
        j = res["log10_j"][i] if res["log10_j"] else None
        d = res["log10_d"][i] if res["log10_d"] else None
        typer.echo(f"{a:11.4f} {_fmt(j, 6):>22s} {_fmt(d, 6):>20s}")
    typer.echo("")
    for k, v in res["derived"].items():
        typer.echo(f"{k}: {_fmt(v, 5)}")


def _check_out_dir(out, overwrite):
    from pathlib import Path

    out = Path(out)
    if out.exists() and not out.is_dir():
        _fail(f"--out {out}: exists and is not a folder")
    if (out / "summary.json").exists() and not overwrite:
        _fail(f"--out {out}: already holds results; choose another folder or pass --overwrite")
    return out


def _positive_int(value, option):
    if value < 1:
        _fail(f"{option}: must be a positive integer, got {value}")
    return value


@app.command("fit")
def fit_cmd(
    catalogue: str = typer.Argument(..., help="velocity catalogue (ECSV, FITS, VOTable or CSV)"),
    satellite: str = typer.Argument(..., help="satellite description file (TOML) or 'demo'"),
    out: str = typer.Option(..., "--out", help="output folder"),
    model: list[str] = typer.Option(
        None, "--model", help="model spec name or path (repeatable; default nfw, cored)"
    ),
    chains: int = typer.Option(4, "--chains", help="number of chains"),
    warmup: int = typer.Option(1000, "--warmup", help="warmup steps per chain"),
    draws: int = typer.Option(1000, "--draws", help="kept draws per chain"),
    seed: int = typer.Option(0, "--seed", help="random seed"),
    column: list[str] = typer.Option(
        None, "--column", help="column override ROLE=NAME, e.g. vlos=VHEL (repeatable)"
    ),
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
    quiet: bool = typer.Option(False, "--quiet", help="no progress output"),
):
    """Fit the models to a catalogue and compare each with stars alone."""
    from halo.catalog import parse_column_overrides, read_catalogue
    from halo.fit import DEFAULT_MODELS, FitSettings, fit
    from halo.report import format_summary
    from halo.satellite import read_satellite

    for v, o in ((chains, "--chains"), (warmup, "--warmup"), (draws, "--draws")):
        _positive_int(v, o)
    out_dir = _check_out_dir(out, overwrite)
    sat_path = _satellite_path(satellite)
    sat = read_satellite(sat_path)
    stars = read_catalogue(catalogue, sat, parse_column_overrides(column))
    for note in stars.notes:
        typer.echo(f"note: {note}", err=True)
    for w in stars.warnings:
        typer.echo(f"warning: {w}", err=True)
    settings = FitSettings(
        chains=chains,
        warmup=warmup,
        draws=draws,
        seed=seed,
        progress=not quiet,
        binaries=binaries,
        foreground="auto" if foreground is None else foreground,
    )
    models = list(model) if model else list(DEFAULT_MODELS)
    summary = fit(stars, sat, out_dir, models, settings, satellite_path=sat_path)
    typer.echo(format_summary(summary, out_dir))


@app.command("demo")
def demo_cmd(
    out: str = typer.Option("halo-demo-output", "--out", help="output folder"),
    overwrite: bool = typer.Option(True, "--overwrite/--keep", help="replace an earlier demo run"),
    quiet: bool = typer.Option(False, "--quiet", help="no progress output"),
):
    """The whole job on the embedded fictional satellite and its mock catalogue."""
    from halo.demo import run_demo

    out_dir = _check_out_dir(out, overwrite)
    typer.echo(run_demo(out_dir, progress=not quiet))


@app.command("mock")
def mock_cmd(
    satellite: str = typer.Argument(..., help="satellite description file (TOML) or 'demo'"),
    out: str = typer.Option(..., "--out", help="output catalogue (.ecsv, .fits, .vot or .csv)"),
    model: str = typer.Option("nfw", "--model", help="model spec giving the halo and anisotropy"),
    set_: list[str] = typer.Option(None, "--set", help="parameter value, KEY=VALUE (repeatable)"),
    n_stars: int = typer.Option(100, "--n-stars", help="number of stars"),
    v_sys: float = typer.Option(0.0, "--v-sys", help="systemic velocity [km/s]"),
    errors: str = typer.Option("1,3", "--errors", help="velocity error range LO,HI [km/s]"),
    method: str = typer.Option("df", "--method", help="df (equilibrium) or gaussian (approximate)"),
    seed: int = typer.Option(0, "--seed", help="random seed"),
):
    """A mock catalogue with a known truth (written beside it as JSON)."""
    from halo.demo import write_mock

    _positive_int(n_stars, "--n-stars")
    err = _parse_list(errors, "--errors")
    if len(err) != 2 or err[0] > err[1]:
        _fail("--errors: expected LO,HI with LO <= HI")
    if method not in ("df", "gaussian"):
        _fail(f"--method: expected df or gaussian, got {method!r}")
    path, truth_path = write_mock(
        _satellite_path(satellite),
        out,
        model,
        _parse_set(set_),
        n_stars=n_stars,
        v_sys=v_sys,
        error_range=tuple(err),
        method=method,
        seed=seed,
    )
    typer.echo(f"wrote {path} ({n_stars} stars) and its truth {truth_path}")


def _configure_environment():
    """Keep library caches out of HOME unless the user chose otherwise; quiet JAX."""
    tmp = os.path.join(tempfile.gettempdir(), f"halo-cache-{os.getuid()}")
    os.environ.setdefault("MPLCONFIGDIR", os.path.join(tmp, "matplotlib"))
    os.environ.setdefault("MPLBACKEND", "Agg")
    os.environ.setdefault("JAX_PLATFORMS", "cpu")
    # compiled programs are kept between runs (reruns skip most of the compilation)
    os.environ.setdefault("JAX_COMPILATION_CACHE_DIR", os.path.join(tmp, "jax"))
    os.environ.setdefault("JAX_PERSISTENT_CACHE_MIN_COMPILE_TIME_SECS", "0.5")
    os.environ.setdefault("TF_CPP_MIN_LOG_LEVEL", "3")


def _is_usage_error(exc):
    """True for the command-line parser's own errors (unknown command, bad option)."""
    try:  # typer >= 0.26 carries its own copy of click
        from typer._click.exceptions import ClickException
    except ImportError:  # pragma: no cover - older typer
        from click import ClickException
    return isinstance(exc, ClickException)


def main(argv=None):
    """Console entry point: maps bad input to exit 2 with one line, internal errors to exit 1."""
    _configure_environment()
    from halo.errors import InputError

    try:
        app(args=argv, standalone_mode=False)
    except (InputError, UsageFailure) as exc:
        print(f"halo: error: {exc}", file=sys.stderr)
        return 2
    except typer.Exit as exc:
        return exc.exit_code
    except typer.Abort:
        print("halo: aborted", file=sys.stderr)
        return 1
    except Exception as exc:
        if _is_usage_error(exc):
            print(f"halo: error: {exc.format_message()}", file=sys.stderr)
            return 2
        if os.environ.get("HALO_DEBUG"):
            raise
        print(f"halo: internal error: {exc.__class__.__name__}: {exc}", file=sys.stderr)
        return 1
    return 0
