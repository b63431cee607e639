"""The embedded demo: a fictional satellite shipped as package data."""

from importlib import resources

__all__ = ["demo_satellite_path"]


def demo_satellite_path():
    """Path of the embedded demo satellite file (TOML)."""
    return str(resources.files("halo").joinpath("data/demo_satellite.toml"))
