"""One batch entry, run on a worker: the `halo fit` job of :mod:`halo.pipeline.fit` into
``OUT/<name>/``, its outcome as a record.

The fit writes into a hidden sibling folder ``OUT/.<name>.partial-<id>/`` that is renamed to
``OUT/<name>/`` only once the fit has finished, so a worker killed mid-fit leaves no half-written
result under the entry's name (the next run removes the leftover). A failing entry returns its
one-line error instead of raising: one bad entry never stops the others.
"""

import os
import shutil
import socket
import time
import uuid
from pathlib import Path

from halo.batch.records import headline
from halo.core.errors import InputError

__all__ = ["run_entry", "prepare_worker", "PARTIAL_MARK", "one_line"]

#: the infix of an unfinished entry folder: OUT/.<name>.partial-<id>
PARTIAL_MARK = ".partial-"


def prepare_worker(jax_cache):
    """Point this worker's JAX persistent compilation cache at ``jax_cache`` (the folder the
    batch's client uses), so that every worker loads the programs any of them compiled; the
    chains of a fit run on one thread unless the worker's environment says otherwise, and a local
    cluster's worker is pinned to its own core (one core per fit, :mod:`halo.batch.cluster`)."""
    os.environ.setdefault("HALO_CHAIN_THREADS", "1")
    _pin_local_worker()
    if jax_cache:
        os.environ["JAX_COMPILATION_CACHE_DIR"] = str(jax_cache)
    from halo.core.cache import configure_caches

    configure_caches()


def _pin_local_worker():
    """Pin a local cluster's worker (``HALO_WORKER_CORES`` in its environment) to core number
    <worker name> of those cores; a worker of another scheduler is left as its admin set it."""
    cores = os.environ.get("HALO_WORKER_CORES", "").strip()
    if not cores:
        return
    try:
        from distributed import get_worker

        index = int(get_worker().name)
    except (ImportError, ValueError, TypeError):
        return
    from halo.batch.cluster import pin_to_core

    pin_to_core([int(c) for c in cores.split(",")], index)


def one_line(exc):
    """The one-line message of an exception: an InputError's own text, else its class too."""
    text = " ".join(str(exc).split())
    if isinstance(exc, InputError):
        return text
    return f"{exc.__class__.__name__}: {text}" if text else exc.__class__.__name__


def _fit(entry, folder):
    """The fit of ``entry`` (a :class:`halo.batch.manifest.Entry`) into ``folder``."""
    from halo.inputs.catalogue import parse_column_overrides, read_catalogue
    from halo.inputs.satellite import read_satellite
    from halo.pipeline.fit import fit

    sat = read_satellite(entry.satellite)
    stars = read_catalogue(entry.catalogue, sat, parse_column_overrides(list(entry.columns)))
    summary = fit(
        stars,
        sat,
        folder,
        list(entry.models),
        entry.settings,
        satellite_path=entry.satellite,
    )
    return summary, list(stars.notes) + list(stars.warnings)


def _move_into_place(partial, final):
    """Rename the finished ``partial`` folder to ``final`` (an earlier folder there goes)."""
    old = None
    if final.exists():
        old = final.with_name(f".{final.name}.old-{uuid.uuid4().hex[:8]}")
        final.rename(old)
    partial.rename(final)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def run_entry(entry, out_root, jax_cache=None):
    """Fit ``entry`` into ``out_root/<name>/``; returns its record (name, status "done" or
    "failed", error, wall time, worker, notes, per-model headline numbers)."""
    t0 = time.perf_counter()
    prepare_worker(jax_cache)
    out_root = Path(out_root)
    final = out_root / entry.name
    partial = out_root / f".{entry.name}{PARTIAL_MARK}{uuid.uuid4().hex[:12]}"
    record = {"name": entry.name, "status": "failed", "error": None, "models": {}}
    try:
        summary, notes = _fit(entry, partial)
        _move_into_place(partial, final)
        record.update(status="done", notes=notes, **headline(summary))
    except Exception as exc:  # the entry fails alone, with its one-line error
        record["error"] = one_line(exc)
    finally:
        shutil.rmtree(partial, ignore_errors=True)
    record["wall_time_s"] = time.perf_counter() - t0
    record["worker"] = f"{socket.gethostname()}:{os.getpid()}"
    return record
