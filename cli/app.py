"""The ``halo`` command line (typer). It only parses options and calls library functions.

Exit codes: 0 done; 2 bad input or usage (one line on stderr, no traceback); 1 internal error;
130 interrupted (SIGINT), the unfinished outputs removed.

The commands live in :mod:`halo.cli.run_commands` (models, predict, fit, demo, mock) and
:mod:`halo.cli.workspace_commands` (init, add, refit, status, history, export); option values
are parsed by :mod:`halo.cli.options`; what they print is written by
:mod:`halo.products.console` and :mod:`halo.products.text_report`.
"""

import os
import sys
import tempfile

import typer

from halo.cli import run_commands as run
from halo.cli import workspace_commands as ws
from halo.cli.options import UsageFailure

__all__ = ["app", "main", "INTERRUPTED"]

#: exit code of a command interrupted by SIGINT (Ctrl-C): 128 + 2, the shells' convention
INTERRUPTED = 130

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    help="Jeans models of faint Milky Way satellites: masses, J- and D-factors, dark matter "
    "versus stars alone.",
)

for _name, _command in (
    ("models", run.models_cmd),
    ("predict", run.predict_cmd),
    ("fit", run.fit_cmd),
    ("demo", run.demo_cmd),
    ("mock", run.mock_cmd),
    ("init", ws.init_cmd),
    ("add", ws.add_cmd),
    ("refit", ws.refit_cmd),
    ("status", ws.status_cmd),
    ("history", ws.history_cmd),
    ("export", ws.export_cmd),
):
    app.command(_name)(_command)


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
