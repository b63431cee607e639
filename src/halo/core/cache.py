"""The one user cache folder halo keeps (compiled programs, matplotlib's font cache).

``HALO_CACHE_DIR`` if set, else ``$XDG_CACHE_HOME/halo``, else ``~/.cache/halo``: a user-level
folder that survives a reboot, so a rerun, a refit or the next catalogue of similar size loads
its compiled programs instead of compiling them again. Deleting it is always safe (it only costs
compilation time). When it cannot be created (read-only home), a per-user folder under the
system's temporary folder is used instead.
"""

import os
import tempfile
from pathlib import Path

__all__ = ["cache_dir", "configure_caches"]

#: compile times below this are not worth a cache entry [s]
MIN_COMPILE_TIME_S = 0.2


def cache_dir():
    """The cache folder (not created here)."""
    explicit = os.environ.get("HALO_CACHE_DIR")
    if explicit:
        return Path(explicit).expanduser()
    xdg = os.environ.get("XDG_CACHE_HOME")
    base = Path(xdg).expanduser() if xdg else Path.home() / ".cache"
    return base / "halo"


def _usable(folder):
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError:
        return False
    return os.access(folder, os.W_OK | os.X_OK)


def configure_caches():
    """Point JAX's persistent compilation cache and matplotlib's config folder into the cache
    folder (environment variables the user set win); returns the folder used. Call before JAX
    compiles anything (the command line does it first thing)."""
    folder = cache_dir()
    if not _usable(folder):
        folder = Path(tempfile.gettempdir()) / f"halo-cache-{os.getuid()}"
        folder.mkdir(parents=True, exist_ok=True)
    os.environ.setdefault("JAX_COMPILATION_CACHE_DIR", str(folder / "jax"))
    os.environ.setdefault("JAX_PERSISTENT_CACHE_MIN_COMPILE_TIME_SECS", str(MIN_COMPILE_TIME_S))
    os.environ.setdefault("MPLCONFIGDIR", str(folder / "matplotlib"))
    import jax  # JAX reads its environment when imported: set the options themselves too

    jax.config.update("jax_compilation_cache_dir", os.environ["JAX_COMPILATION_CACHE_DIR"])
    jax.config.update(
        "jax_persistent_cache_min_compile_time_secs",
        float(os.environ["JAX_PERSISTENT_CACHE_MIN_COMPILE_TIME_SECS"]),
    )
    return folder
