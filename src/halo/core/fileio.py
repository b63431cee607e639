"""Atomic writes: results appear whole or not at all, and nothing the user had is half-overwritten.

Each writer writes to a temporary file in the destination folder and renames it into place
(``os.replace`` is atomic on POSIX file systems).
"""

import contextlib
import json
import os
import tempfile
from pathlib import Path

__all__ = ["atomic_path", "write_text", "write_json", "write_ecsv", "read_input_text"]


def read_input_text(path, missing="no such file"):
    """The UTF-8 text of a user's input file; a one-line InputError naming the file (``missing``
    says what to write when it does not exist) when it cannot be read."""
    from halo.core.errors import InputError

    try:
        return Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"{path}: {missing}") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read ({exc.__class__.__name__})") from None


@contextlib.contextmanager
def atomic_path(path):
    """Yield a temporary path next to ``path``; on success rename it to ``path``."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    os.close(fd)
    try:
        yield Path(tmp)
        # mkstemp makes the file private (0600): give it the permissions of a normal new file
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def _umask():
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_text(path, text):
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")


def write_json(path, obj):
    write_text(path, json.dumps(obj, indent=1, allow_nan=False) + "\n")


def write_ecsv(path, table):
    """Write an astropy Table as ECSV, atomically (the one table writer of the outputs)."""
    with atomic_path(path) as tmp:
        table.write(str(tmp), format="ascii.ecsv", overwrite=True)
