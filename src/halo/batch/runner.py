"""`halo batch`: every manifest entry as one task on a Dask distributed cluster.

A rerun skips the entries whose earlier result is finished with the same input hash (and whose
folder is still there), and runs the rest: new, changed, failed or never finished ones. After
every finished entry DIR/batch.json and DIR/batch.ecsv are rewritten atomically, so an interrupt
(SIGINT, a dying client) loses no finished result. A worker that dies mid-entry (killed, out of
memory) loses only that attempt: the scheduler runs the entry again on another worker, up to
``distributed.scheduler.allowed-failures`` times (3 by default), before it is recorded as failed.

With a scheduler address, every worker must have halo installed and see the manifest's files and
DIR at the same absolute paths as the client (a shared file system): the tasks carry the paths,
not the data.
"""

import os
import shutil
import sys
import time
import uuid
from pathlib import Path

from halo.batch.cluster import batch_client, default_workers
from halo.batch.hashing import entry_hash
from halo.batch.manifest import read_manifest
from halo.batch.records import read_batch, write_batch
from halo.batch.task import PARTIAL_MARK, one_line, run_entry
from halo.core import interrupt
from halo.core.errors import InputError

__all__ = ["run_batch", "plan", "format_outcome", "BatchOutcome"]


class BatchOutcome:
    """What a batch run did: ``records`` (one per entry, manifest order), the names it ``ran``
    and ``skipped`` (finished earlier with the same inputs), and its wall time [s]."""

    def __init__(self, records, ran, skipped, wall_time_s):
        self.records, self.ran, self.skipped = records, ran, skipped
        self.wall_time_s = wall_time_s


def _finished(old, digest, out_dir, name):
    return (
        bool(old)
        and old.get("status") == "done"
        and (old.get("hash") or {}).get("entry") == digest["entry"]
        and (out_dir / name / "summary.json").is_file()
    )


def plan(entries, out_dir):
    """(records, todo): a record per entry (earlier finished ones as they were, the rest
    "pending") and the entries to run."""
    earlier = read_batch(out_dir)
    records, todo = [], []
    for e in entries:
        digest, old = entry_hash(e), earlier.get(e.name)
        if _finished(old, digest, out_dir, e.name):
            records.append(old)
            continue
        same = bool(old) and (old.get("hash") or {}).get("entry") == digest["entry"]
        records.append(
            {
                "name": e.name,
                "status": "pending",
                "error": None,
                "hash": digest,
                "folder": e.name,
                "attempts": int(old.get("attempts", 0)) if same else 0,
                "models": {},
            }
        )
        todo.append(e)
    return records, todo


def _remove_leftovers(out_dir, names):
    """Unfinished folders a killed worker or an interrupt left behind for these entries."""
    for name in names:
        for marker in (PARTIAL_MARK, ".old-"):
            for p in out_dir.glob(f".{name}{marker}*"):
                shutil.rmtree(p, ignore_errors=True)


def _check_out_dir(out):
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise InputError(f"--out {out}: exists and is not a folder")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"--out {out}: cannot create ({exc.strerror})") from None
    if not os.access(out, os.W_OK | os.X_OK):
        raise InputError(f"--out {out}: not writable")
    return out


def _local_workers(workers, n_todo):
    """Worker processes of a local cluster: the request (default the core count), no more than
    there are entries to run."""
    n = default_workers() if workers is None else workers
    if isinstance(n, bool) or not isinstance(n, int) or n < 1:
        raise InputError(f"--workers: expected a positive number of workers, got {n!r}")
    return min(n, n_todo)


def _outcome(future):
    """The record a finished future carries, or a failed one naming why the task itself died."""
    from distributed import KilledWorker

    try:
        return future.result()
    except KilledWorker:
        return {
            "status": "failed",
            "error": "the worker running this entry died on every attempt (killed or out of "
            "memory; see distributed.scheduler.allowed-failures)",
        }
    except Exception as exc:
        return {"status": "failed", "error": one_line(exc)}


def _bar(total, progress):
    from tqdm.auto import tqdm

    return tqdm(
        total=total, desc="batch", unit="entry", file=sys.stderr, disable=not progress, leave=True
    )


def _jax_cache():
    """The persistent compilation cache folder of this process, handed to every worker."""
    from halo.core.cache import configure_caches

    configure_caches()
    return os.environ["JAX_COMPILATION_CACHE_DIR"]


def _submit(client, todo, out_dir):
    cache = _jax_cache()
    return {
        client.submit(
            run_entry,
            e,
            str(out_dir.resolve()),
            cache,
            key=f"halo-batch-{e.name}-{uuid.uuid4().hex[:8]}",
            pure=False,
        ): e.name
        for e in todo
    }


def _run(todo, records, out_dir, cluster, progress):
    """Run ``todo`` on the cluster, updating ``records`` and the batch files as entries end."""
    from distributed import as_completed

    by_name = {r["name"]: r for r in records}
    failed = 0
    with batch_client(*cluster) as client, _bar(len(todo), progress) as bar:
        futures = _submit(client, todo, out_dir)
        try:
            for fut in as_completed(list(futures)):
                rec = by_name[futures[fut]]
                rec.update(models={}, error=None)
                rec.update(_outcome(fut))
                rec["attempts"] = int(rec.get("attempts", 0)) + 1
                write_batch(out_dir, records)
                failed += rec["status"] != "done"
                bar.update(1)
                bar.set_postfix(failed=failed, refresh=False)
                bar.write(_entry_line(rec), file=sys.stderr)
                interrupt.check()
        except BaseException:
            client.cancel(list(futures))
            raise


def _entry_line(rec):
    if rec["status"] != "done":
        return f"{rec['name']}: FAILED: {rec['error']}"
    flag = "" if rec.get("converged") else " (NOT CONVERGED: see batch.ecsv)"
    return f"{rec['name']}: done in {rec.get('wall_time_s', float('nan')):.1f} s{flag}"


def run_batch(
    manifest,
    out_dir,
    *,
    scheduler=None,
    workers=None,
    settings=None,
    models=None,
    progress=True,
):
    """Run the batch of ``manifest`` into ``out_dir``; returns a :class:`BatchOutcome`.

    ``scheduler``: address of a running Dask scheduler (else a LocalCluster of ``workers``
    processes on loopback); ``settings`` and ``models``: the fit options every entry takes
    unless it sets its own (see :func:`halo.batch.manifest.read_manifest`).
    """
    t0 = time.perf_counter()
    entries = read_manifest(manifest, settings, models)
    out_dir = _check_out_dir(out_dir)
    records, todo = plan(entries, out_dir)
    write_batch(out_dir, records)
    skipped = [r["name"] for r in records if r["status"] == "done"]
    if todo:
        _remove_leftovers(out_dir, [e.name for e in todo])
        _run(todo, records, out_dir, (scheduler, _local_workers(workers, len(todo))), progress)
    return BatchOutcome(records, [e.name for e in todo], skipped, time.perf_counter() - t0)


def format_outcome(outcome, out_dir):
    """The lines `halo batch` prints at the end: counts, failures, unconverged entries."""
    recs = outcome.records
    done = [r["name"] for r in recs if r["status"] == "done"]
    failed = [r for r in recs if r["status"] == "failed"]
    lines = [
        f"batch: {len(done)} of {len(recs)} entries done ({len(outcome.skipped)} finished "
        f"earlier with the same inputs, {len(outcome.ran)} run now, {len(failed)} failed) in "
        f"{outcome.wall_time_s:.1f} s"
    ]
    lines += [f"FAILED {r['name']}: {r['error']}" for r in failed]
    unconverged = [r["name"] for r in recs if r["status"] == "done" and not r.get("converged")]
    if unconverged:
        lines.append(
            "WARNING: NOT CONVERGED (chains disagree; do not use their numbers as they are): "
            + ", ".join(unconverged)
        )
    lines.append(f"results in {out_dir}/: batch.ecsv, batch.json, <name>/ (one fit folder each)")
    return "\n".join(lines)
