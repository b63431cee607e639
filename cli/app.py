"""The ``halo`` command line (typer). It only parses options and calls library functions.

Exit codes: 0 done; 2 bad input or usage (one line on stderr, no traceback); 1 internal error;
130 interrupted (SIGINT), the unfinished outputs removed.

The commands live in :mod:`halo.cli.run_commands` (models, predict, fit, demo, mock) and
:mod:`halo.cli.workspace_commands` (init, add, refit, status, history, export) and
:mod:`halo.cli.batch_commands` (batch); option values
are parsed by :mod:`halo.cli.options`; what they print is written by
:mod:`halo.products.console` and :mod:`halo.products.text_report`.
"""

import os
import sys

import typer
from typer.core import TyperCommand, TyperGroup

from halo.cli import batch_commands as batch
from halo.cli import calibrate_commands as calibrate
from halo.cli import run_commands as run
from halo.cli import workspace_commands as ws
from halo.cli.options import UsageFailure

__all__ = ["app", "main", "version_text", "INTERRUPTED"]

#: exit code of a command interrupted by SIGINT (Ctrl-C): 128 + 2, the shells' convention
INTERRUPTED = 130

DISTRIBUTION = "halo-dynamics"  # the installed package's name (pyproject.toml)


_NB_HYPHEN = "\u2011"  # stands in for "-" while help is wrapped


class _Formatter(TyperCommand.context_class.formatter_class):
    """Help wrapped at spaces only: "baes-van-hese" or "[0-1]" are never split at
    their hyphens (the wrapper would break words there)."""

    def _unbroken(self, write, *args, **kwargs):
        start = len(self.buffer)
        write(*args, **kwargs)
        self.buffer[start:] = [s.replace(_NB_HYPHEN, "-") for s in self.buffer[start:]]

    def write_dl(self, rows, *args, **kwargs):
        rows = [(term, text.replace("-", _NB_HYPHEN)) for term, text in rows]
        self._unbroken(super().write_dl, rows, *args, **kwargs)

    def write_text(self, text):
        self._unbroken(super().write_text, text.replace("-", _NB_HYPHEN))


class _Context(TyperCommand.context_class):
    formatter_class = _Formatter


class _Group(TyperGroup):
    context_class = _Context


class _Command(TyperCommand):
    """A command whose help names each value by its metavar (FILE, N, LIST, KEY=VALUE, ...),
    never by its Python type (typer's own help prints ``<str>``, ``<list[str]>``)."""

    context_class = _Context

    def collect_usage_pieces(self, ctx):
        pieces = [self.options_metavar] if self.options_metavar else []
        for p in self.get_params(ctx):
            if p.param_type_name == "argument":
                name = p.metavar or p.name.upper()
                pieces.append(name if p.required else f"[{name}]")
        return pieces

    def format_options(self, ctx, formatter):
        args, opts = [], []
        for p in self.get_params(ctx):
            record = p.get_help_record(ctx)
            if record is None:
                continue
            if p.param_type_name == "argument":
                args.append((p.metavar or p.name.upper(), record[1]))
            else:
                opts.append(record)
        for title, rows in (("Arguments", args), ("Options", opts)):
            if rows:
                with formatter.section(title):
                    formatter.write_dl(rows)


app = typer.Typer(
    cls=_Group,
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,  # plain help: "[pc]" is a unit, not markup
    context_settings={"max_content_width": 120},
    help="Jeans models of faint Milky Way satellites: masses, J- and D-factors, dark matter "
    "versus stars alone.",
)

# workflow order: the whole job and a fit first, then the helpers around a fit, then the
# workspace commands in the order a user meets them, then many fits at once
for _name, _command in (
    ("demo", run.demo_cmd),
    ("fit", run.fit_cmd),
    ("mock", run.mock_cmd),
    ("predict", run.predict_cmd),
    ("models", run.models_cmd),
    ("init", ws.init_cmd),
    ("add", ws.add_cmd),
    ("refit", ws.refit_cmd),
    ("status", ws.status_cmd),
    ("history", ws.history_cmd),
    ("export", ws.export_cmd),
    ("batch", batch.batch_cmd),
    ("calibrate", calibrate.calibrate_cmd),
    ("forecast", calibrate.forecast_cmd),
):
    app.command(_name, cls=_Command)(_command)


def version_text():
    """'halo <version>' from the installed package's metadata (the source's own number when
    run from an uninstalled tree)."""
    from importlib import metadata

    try:
        version = metadata.version(DISTRIBUTION)
    except metadata.PackageNotFoundError:  # pragma: no cover - not installed
        from halo import __version__ as version
    return f"halo {version}"


def _print_version(value):
    if value:
        typer.echo(version_text())
        raise typer.Exit(0)


@app.callback()
def _root(
    version: bool = typer.Option(
        False,
        "--version",
        "-V",
        is_eager=True,
        callback=_print_version,
        help="print the version and exit",
    ),
):
    """Jeans models of faint Milky Way satellites: masses, J- and D-factors, dark matter
    versus stars alone."""


def _configure_environment():
    """Library caches in halo's one user cache folder (halo.core.cache: HALO_CACHE_DIR, else
    $XDG_CACHE_HOME/halo, else ~/.cache/halo) unless the user chose otherwise; quiet JAX."""
    from halo.core.cache import configure_caches

    os.environ.setdefault("MPLBACKEND", "Agg")
    os.environ.setdefault("JAX_PLATFORMS", "cpu")
    os.environ.setdefault("TF_CPP_MIN_LOG_LEVEL", "3")
    # compiled programs are kept between runs (reruns skip most of the compilation)
    configure_caches()


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
    from halo.core import interrupt
    from halo.core.errors import InputError

    interrupt.arm()
    try:
        code = app(args=argv, standalone_mode=False)
    except KeyboardInterrupt:  # before or after the command ran
        code = INTERRUPTED
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
            if type(exc).__name__ == "NoArgsIsHelpError":  # bare `halo`: the help, no "error"
                print(exc.format_message(), file=sys.stderr)
            else:
                print(f"halo: error: {exc.format_message()}", file=sys.stderr)
            return 2
        if os.environ.get("HALO_DEBUG"):
            raise
        print(f"halo: internal error: {exc.__class__.__name__}: {exc}", file=sys.stderr)
        return 1
    if code == INTERRUPTED:  # typer turns Ctrl-C (SIGINT) into this exit code
        print(
            "halo: interrupted (SIGINT): nothing unfinished was kept; earlier results are "
            "as they were",
            file=sys.stderr,
        )
        return INTERRUPTED
    return code if isinstance(code, int) else 0
