"""Test-wide settings: float64, no writes under HOME, opt-in slow suites."""

import os
import tempfile

_TMP = tempfile.mkdtemp(prefix="halo-tests-")
# the user cache folder (halo's compiled programs) is shared by the xdist workers of one run, so
# that a program one worker compiled is loaded by the other instead of compiled again; a cache
# entry read while another worker writes it is compiled again (the warning is ignored, pyproject)
_RUN = os.environ.get("PYTEST_XDIST_TESTRUNUID", "")
_SHARED = os.path.join(tempfile.gettempdir(), f"halo-tests-run-{_RUN}") if _RUN else _TMP
# keep library caches out of HOME (matplotlib, astropy, colossus)
os.environ.setdefault("MPLCONFIGDIR", os.path.join(_TMP, "mpl"))
os.environ.setdefault("XDG_CACHE_HOME", os.path.join(_SHARED, "cache"))
os.environ.setdefault("XDG_CONFIG_HOME", os.path.join(_TMP, "config"))
os.environ.setdefault("ASTROPY_CACHE_DIR", os.path.join(_TMP, "astropy-cache"))
os.environ.setdefault("ASTROPY_CONFIG_DIR", os.path.join(_TMP, "astropy-config"))
os.environ.setdefault("MPLBACKEND", "Agg")
for _var in (
    "MPLCONFIGDIR",
    "XDG_CACHE_HOME",
    "XDG_CONFIG_HOME",
    "ASTROPY_CACHE_DIR",
    "ASTROPY_CONFIG_DIR",
):
    os.makedirs(os.environ[_var], exist_ok=True)

import jax  # noqa: E402
import pytest  # noqa: E402

jax.config.update("jax_enable_x64", True)

import halo  # noqa: E402,F401

TMP_ROOT = _TMP


def pytest_addoption(parser):
    parser.addoption(
        "--run-slow", action="store_true", default=False, help="run slow calibration suites"
    )


def pytest_collection_modifyitems(config, items):
    if config.getoption("--run-slow"):
        return
    skip = pytest.mark.skip(reason="slow: opt in with --run-slow")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)
