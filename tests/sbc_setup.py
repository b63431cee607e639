"""Shared set-up of the calibration and forecast tests: the CLI with its output captured."""

import contextlib
import io

from halo.cli.app import main


def run_cli(args):
    """main(args) with stdout and stderr captured: (exit code, stdout, stderr)."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(args)
    return code, out.getvalue(), err.getvalue()
