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
    from halo.inputs.spec import available_specs, load_spec

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
        from halo.pipeline.demo import demo_satellite_path

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
    from halo.inputs.satellite import read_satellite
    from halo.inputs.spec import load_spec
    from halo.pipeline.predict import predict

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
    from halo.inputs.catalogue import parse_column_overrides, read_catalogue
    from halo.inputs.satellite import read_satellite
    from halo.pipeline.fit import DEFAULT_MODELS, FitSettings, fit
    from halo.products.text_report import format_summary

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
    from halo.pipeline.demo import run_demo

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
    epochs: str = typer.Option(
        None, "--epochs", help="observing epochs as MJDs, e.g. 60000,60365 (adds an mjd column)"
    ),
    repeat_fraction: float = typer.Option(
        1.0, "--repeat-fraction", help="fraction of stars observed at every epoch"
    ),
    binary_fraction: float = typer.Option(
        0.0, "--binary-fraction", help="fraction of members that are binaries (orbits drawn)"
    ),
    n_foreground: int = typer.Option(
        0, "--foreground", help="number of non-member field stars to add"
    ),
):
    """A mock catalogue with a known truth (written beside it as JSON)."""
    from halo.pipeline.demo import write_mock

    _positive_int(n_stars, "--n-stars")
    err = _parse_list(errors, "--errors")
    if len(err) != 2 or err[0] > err[1]:
        _fail("--errors: expected LO,HI with LO <= HI")
    if method not in ("df", "gaussian"):
        _fail(f"--method: expected df or gaussian, got {method!r}")
    mjds = None if epochs is None else _parse_list(epochs, "--epochs")
    for value, name in (
        (repeat_fraction, "--repeat-fraction"),
        (binary_fraction, "--binary-fraction"),
    ):
        if not 0.0 <= value <= 1.0:
            _fail(f"{name}: expected a number between 0 and 1, got {value!r}")
    if n_foreground < 0:
        _fail(f"--foreground: expected a non-negative number of stars, got {n_foreground!r}")
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
        epochs_mjd=mjds,
        repeat_fraction=repeat_fraction,
        binary_fraction=binary_fraction,
        n_foreground=n_foreground,
    )
    extra = f" + {n_foreground} foreground" if n_foreground else ""
    typer.echo(f"wrote {path} ({n_stars} stars{extra}) and its truth {truth_path}")


@app.command("init")
def init_cmd(
    workspace: str = typer.Argument(..., help="new workspace folder"),
    satellite: str = typer.Option(..., "--satellite", help="satellite description file (TOML)"),
    model: list[str] = typer.Option(
        None, "--model", help="model spec name or path (repeatable; default nfw, cored)"
    ),
):
    """Create a workspace for one satellite: catalogue versions, runs and their history."""
    from halo.workspace.store import init_workspace

    ws = init_workspace(workspace, _satellite_path(satellite), list(model) if model else None)
    typer.echo(f"workspace {ws.root} created; add stars with `halo add {ws.root} CATALOGUE`")


@app.command("add")
def add_cmd(
    workspace: str = typer.Argument(..., help="workspace folder"),
    catalogue: str = typer.Argument(..., help="velocity catalogue with new stars or epochs"),
    replace: bool = typer.Option(
        False, "--replace", help="let new values supersede conflicting measurements"
    ),
    column: list[str] = typer.Option(
        None, "--column", help="column override ROLE=NAME, e.g. vlos=VHEL (repeatable)"
    ),
):
    """Merge a catalogue's stars and epochs into a new catalogue version."""
    from halo.inputs.catalogue import parse_column_overrides
    from halo.workspace.store import add_catalogue

    r = add_catalogue(workspace, catalogue, parse_column_overrides(column), replace=replace)
    if not r["changed"]:
        typer.echo(f"nothing new: catalogue version {r['seq']} already holds every row")
    else:
        typer.echo(
            f"catalogue version {r['seq']} ({r['sha256'][:12]}): {r['added']} rows added, "
            f"{r['replaced']} replaced; {r['n_rows']} rows, {r['n_stars']} stars"
        )


@app.command("refit")
def refit_cmd(
    workspace: str = typer.Argument(..., help="workspace folder"),
    chains: int = typer.Option(None, "--chains", help="number of chains (default: as last run)"),
    warmup: int = typer.Option(None, "--warmup", help="warmup steps per chain"),
    draws: int = typer.Option(None, "--draws", help="kept draws per chain"),
    seed: int = typer.Option(None, "--seed", help="random seed"),
    binaries: bool | None = typer.Option(
        None, "--binaries/--no-binaries", help="model binaries (default: as last run, on)"
    ),
    foreground: bool | None = typer.Option(
        None, "--foreground/--no-foreground", help="model foreground (default: as last run)"
    ),
    force: bool = typer.Option(False, "--force", help="refit every model even if unchanged"),
    model: list[str] = typer.Option(
        None, "--model", help="add or update a model spec (name or path; repeatable)"
    ),
    quiet: bool = typer.Option(False, "--quiet", help="no progress output"),
):
    """Fit what changed since the last run (unchanged models are reused, others warm-started).

    Options left out keep the values of the workspace's last run (the defaults of `halo fit`
    before the first run).
    """
    from halo.products.text_report import format_summary
    from halo.workspace.store import last_settings, refit

    for v, o in ((chains, "--chains"), (warmup, "--warmup"), (draws, "--draws")):
        if v is not None:
            _positive_int(v, o)
    settings = last_settings(
        workspace,
        chains=chains,
        warmup=warmup,
        draws=draws,
        seed=seed,
        binaries=binaries,
        foreground=foreground,
        progress=not quiet,
    )

    def say(msg):
        if not quiet:
            typer.echo(msg, err=True)

    folder, message = refit(
        workspace, settings, force=force, say=say, models=list(model) if model else None
    )
    summary = json.loads((folder / "summary.json").read_text())
    typer.echo(format_summary(summary, folder))
    typer.echo(message)


@app.command("status")
def status_cmd(
    workspace: str = typer.Argument(..., help="workspace folder"),
    json_out: bool = typer.Option(False, "--json", help="one JSON object on stdout"),
):
    """What is stale in a workspace and what the next refit would do."""
    from halo.workspace.store import status

    st = status(workspace)
    if json_out:
        typer.echo(json.dumps(st))
        return
    cat = st["catalogue"]
    typer.echo(
        f"workspace {st['workspace']}: "
        + (
            "no catalogue"
            if cat is None
            else f"catalogue version {cat['seq']} ({cat['n_stars']} stars, {cat['n_rows']} rows)"
        )  # fmt: skip
        + f", {st['runs']} run(s), models {', '.join(st['models'])}"
    )
    if st.get("up_to_date"):
        typer.echo(f"up to date (run {st['last_run']['seq']})")
    for line in st["stale"]:
        typer.echo(f"stale: {line}")
    for name, action in st.get("next", {}).items():
        typer.echo(f"next refit: {name}: {action}")


@app.command("history")
def history_cmd(
    workspace: str = typer.Argument(..., help="workspace folder"),
    json_out: bool = typer.Option(False, "--json", help="one JSON object on stdout"),
):
    """How the mass, J-factor, Bayes factors and members moved from run to run."""
    from halo.workspace.store import history, history_figure

    rows = history(workspace)
    if json_out:
        typer.echo(json.dumps({"runs": rows}))
        return
    if not rows:
        typer.echo("no runs yet: `halo refit` fits the latest catalogue version")
        return
    typer.echo(
        f"{'run':>4} {'version':>7} {'stars':>6} {'model':>12} {'M(<r_1/2) [Msun]':>24} "
        f"{'log10 J(0.5)':>14} {'ln B':>12} {'members':>8}"
    )
    for r in rows:
        for name, h in r["models"].items():
            m = h["m_half_msun"]
            j = h.get("log10_j_0.5")
            lb = h.get("ln_bayes_factor")
            flag = "" if h["converged"] else "  NOT CONVERGED"
            typer.echo(
                f"{r['run']:>4} {r['catalogue_version']:>7} {r['n_stars']:>6} {name:>12} "
                f"{m['median']:>10.3g} [{m['p16']:.2g}, {m['p84']:.2g}]"
                f"{'' if j is None else format(j['median'], '14.2f'):>14} "
                f"{'' if lb is None else format(lb, '12.2f'):>12} "
                f"{h.get('effective_members') or float('nan'):>8.1f}{flag}"
            )
    path = history_figure(workspace, rows)
    typer.echo(f"figure: {path}")


@app.command("export")
def export_cmd(
    source: str = typer.Argument(..., help="workspace folder (its latest run) or a fit folder"),
    out: str = typer.Option(..., "--out", help="output folder (must not hold earlier exports)"),
    angles_deg: str = typer.Option(
        None, "--angles-deg", help="extra cone half-angles [deg], comma-separated"
    ),
):
    """J- and D-factor tables, posterior draws, FITS templates and the summary of a run."""
    from pathlib import Path

    from halo.products.export import export_run
    from halo.workspace.store import DB_NAME, latest_run_folder

    src = Path(source)
    run = latest_run_folder(src) if (src / DB_NAME).is_file() else src
    written = export_run(run, out, _parse_list(angles_deg, "--angles-deg"))
    typer.echo(f"exported run {run} to {out}:")
    for p in written:
        typer.echo(f"  {p}")


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
    from halo.core.errors import InputError

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
