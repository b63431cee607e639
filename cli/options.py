"""Options shared by several commands (declared once, with the metavar that says what the value
is and the help that states its unit), and parsing of option values: lists, KEY=VALUE pairs,
counts, output folders."""

import math
import os
import tempfile
from pathlib import Path
from typing import Annotated

import typer

__all__ = [
    "UsageFailure",
    "fail",
    "parse_list",
    "parse_angles",
    "parse_set",
    "positive_int",
    "check_out_dir",
    "satellite_path",
    "Satellite",
    "Models",
    "SetValues",
    "Columns",
    "Anisotropy",
    "TidalTruncation",
    "TIDAL_TRUNCATION_HELP",
    "Warmup",
    "Draws",
    "Seed",
    "Quiet",
    "JsonOut",
]

SATELLITE_HELP = "satellite description file (TOML), or 'demo' for the embedded demo satellite"
ANISOTROPY_HELP = (
    "anisotropy of every model instead of its spec's: constant, osipkov-merritt, "
    "baes-van-hese (default priors: `halo models`), or spec"
)
MODELS_HELP = "model spec name (any case) or path (repeatable; default nfw, cored)"
SET_HELP = "parameter value in the units of `halo models`, e.g. m200=1e9 [Msun] (repeatable)"

Satellite = Annotated[str, typer.Argument(metavar="SATELLITE", help=SATELLITE_HELP)]
Models = Annotated[list[str] | None, typer.Option("--model", metavar="NAME", help=MODELS_HELP)]
SetValues = Annotated[list[str] | None, typer.Option("--set", metavar="KEY=VALUE", help=SET_HELP)]
Columns = Annotated[
    list[str] | None,
    typer.Option(
        "--column", metavar="ROLE=NAME", help="column override, e.g. vlos=VHEL (repeatable)"
    ),
]
Anisotropy = Annotated[
    str | None, typer.Option("--anisotropy", metavar="KIND", help=ANISOTROPY_HELP)
]
TIDAL_TRUNCATION_HELP = (
    "J and D of dark haloes truncated at each posterior draw's own Jacobi radius in the Milky "
    "Way model (on by default); off: untruncated haloes, as every output then says"
)
TidalTruncation = Annotated[
    bool,
    typer.Option("--tidal-truncation/--no-tidal-truncation", help=TIDAL_TRUNCATION_HELP),
]
Warmup = Annotated[int, typer.Option("--warmup", metavar="N", help="warmup steps per chain")]
Draws = Annotated[int, typer.Option("--draws", metavar="N", help="kept draws per chain")]
Seed = Annotated[int, typer.Option("--seed", metavar="N", help="random seed")]
Quiet = Annotated[bool, typer.Option("--quiet", help="no progress output")]
JsonOut = Annotated[bool, typer.Option("--json", help="print one JSON object on stdout")]


class UsageFailure(Exception):
    """Raised by commands for bad option values (exit 2)."""


def fail(msg):
    raise UsageFailure(msg)


def parse_list(text, option):
    """Comma-separated positive numbers (None when the option was not given); spaces only around
    the commas ("10 20" is refused, never read as 1020)."""
    if text is None:
        return None
    try:
        vals = [float(x) for x in text.split(",") if x.strip() != ""]
    except ValueError:
        fail(f"{option}: expected comma-separated numbers, got {text!r}")
    if not vals:
        fail(f"{option}: empty list")
    for v in vals:
        if not math.isfinite(v) or v <= 0:
            fail(f"{option}: values must be positive, got {v}")
    return vals


def parse_angles(text, option="--angles-deg"):
    """Cone half-angles [deg]: comma-separated, each above 0 and below 90."""
    vals = parse_list(text, option)
    for v in vals or ():
        if v >= 90:
            fail(f"{option}: cone half-angles must be below 90 deg, got {v:g}")
    return vals


def parse_set(items):
    """{key: number} of repeated ``--set KEY=VALUE`` options."""
    out = {}
    for item in items or []:
        if "=" not in item:
            fail(f"--set: expected KEY=VALUE, got {item!r}")
        k, v = item.split("=", 1)
        k = k.strip()
        try:
            out[k] = float(v)
        except ValueError:
            fail(f"--set {k}: expected a number, got {v!r}")
    return out


def positive_int(value, option):
    if value < 1:
        fail(f"{option}: must be a positive integer, got {value}")
    return value


def _check_creatable(out):
    """Refuse an output path that cannot be made: a file on the way, a folder that cannot be
    written in (checked by making an unnamed probe file there)."""
    base = out
    while not base.exists() and base != base.parent:
        base = base.parent
    if not base.is_dir():
        fail(f"--out {out}: {base} is a file, not a folder")
    try:
        tempfile.TemporaryFile(dir=base).close()
    except OSError as exc:
        fail(f"--out {out}: cannot write in {base} ({exc.strerror or exc.__class__.__name__})")


def check_out_dir(out, overwrite):
    """The output folder of a fit, refused when it holds results and ``overwrite`` is off, or
    when it cannot be created or written."""
    out = Path(out)
    for part in out.parts:
        if len(os.fsencode(part)) > 255:  # NAME_MAX of common file systems (common practice)
            fail(f"--out {out}: the name '{part[:20]}...' is longer than 255 bytes")
    if out.exists() and not out.is_dir():
        fail(f"--out {out}: exists and is not a folder")
    _check_creatable(out)
    if (out / "summary.json").exists() and not overwrite:
        fail(f"--out {out}: already holds results; choose another folder or pass --overwrite")
    return out


def satellite_path(name):
    """'demo' names the embedded demo satellite file; anything else is a path."""
    if name == "demo" and not os.path.exists(name):
        from halo.pipeline.demo import demo_satellite_path

        return demo_satellite_path()
    return name
