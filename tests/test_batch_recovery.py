"""`halo batch` when things go wrong mid-run, on real Dask clusters with tiny fits: a worker killed
mid-entry (the scheduler runs the entry again elsewhere and it completes), and an interrupted batch
(SIGINT) whose rerun does only what is missing. Every listener and connection stays on loopback."""

import json
import os
import signal
import subprocess
import sys
import threading
import time

import psutil
import pytest
from batch_setup import TINY, entry_toml, write_inputs, write_manifest
from distributed import Client

from halo.batch.cluster import LOOPBACK, local_cluster
from halo.cli.app import main
from halo.core.vocabulary import STARS_ONLY

ONLY_STARS = f'["{STARS_ONLY}"]'
LOOPBACK_IPS = {LOOPBACK, "::1", "::ffff:127.0.0.1"}


def _records(out):
    return {r["name"]: r for r in json.loads((out / "batch.json").read_text())}


def _non_loopback(pid, listening_only):
    """Connections of process ``pid`` whose local or remote address is not loopback."""
    bad = []
    for c in psutil.Process(pid).net_connections(kind="inet"):
        if listening_only and c.status != psutil.CONN_LISTEN:
            continue
        ends = [c.laddr] + ([c.raddr] if c.raddr else [])
        bad += [c for e in ends if e.ip not in LOOPBACK_IPS]
    return bad


class _Killer(threading.Thread):
    """Kills (SIGKILL) the worker process that runs a batch entry, a few seconds into it."""

    def __init__(self, address, pids, delay_s=3.0):
        super().__init__(daemon=True)
        self.address, self.pids, self.delay_s = address, pids, delay_s
        self.killed = None

    def run(self):
        with Client(self.address, timeout="20s") as client:
            deadline = time.time() + 300
            while time.time() < deadline and self.killed is None:
                for worker, keys in client.processing().items():
                    if any(str(k).startswith("halo-batch-") for k in keys):
                        time.sleep(self.delay_s)  # mid-fit: compiling or sampling
                        os.kill(self.pids[worker], signal.SIGKILL)
                        self.killed = self.pids[worker]
                        break
                time.sleep(0.2)


def _worker_threads_after_prepare():
    from halo.batch.task import prepare_worker

    prepare_worker(None)
    tids = [int(t) for t in os.listdir("/proc/self/task")]
    cores = {tuple(sorted(os.sched_getaffinity(t))) for t in tids}
    return os.environ.get("XLA_FLAGS", ""), os.environ["HALO_CHAIN_THREADS"], cores


def test_a_worker_killed_mid_entry_loses_only_that_attempt(tmp_path):
    paths = write_inputs(tmp_path / "in", ["a"])
    manifest = write_manifest(
        tmp_path / "in" / "m.toml", entry_toml("one", "a.ecsv", models=ONLY_STARS)
    )
    out = tmp_path / "out"
    with local_cluster(2) as cluster, Client(cluster) as client:
        pids = client.run(os.getpid)
        # nothing but loopback: scheduler and nannies (this process), worker processes
        assert not _non_loopback(os.getpid(), listening_only=True)
        for pid in pids.values():
            assert not _non_loopback(pid, listening_only=False), pid
        # one core per fit: each worker pinned to its own core (every thread), the chains one
        # after the other, and the XLA flags of a single fit (part of the compilation cache key)
        env = {  # as a task on each worker (get_worker works in tasks, not in client.run)
            w: client.submit(_worker_threads_after_prepare, workers=[w], pure=False).result()
            for w in pids
        }
        cores = sorted(os.sched_getaffinity(0))
        pinned = []
        for flags, chain_threads, affinities in env.values():
            assert flags == os.environ.get("XLA_FLAGS", "") and chain_threads == "1"
            # every thread on the same single core
            assert len(affinities) == 1 and len(next(iter(affinities))) == 1, affinities
            pinned.append(next(iter(affinities))[0])
        assert all(c in cores for c in pinned)
        assert len(set(pinned)) == min(2, len(cores)), pinned
        killer = _Killer(cluster.scheduler_address, pids)
        killer.start()
        code = main(
            [
                "batch",
                str(manifest),
                "--out",
                str(out),
                "--scheduler",
                cluster.scheduler_address,
                "--quiet",
                *TINY,
            ]
        )
        killer.join(timeout=30)
    assert killer.killed is not None, "the entry ended before a worker could be killed"
    assert code == 0
    rec = _records(out)["one"]
    assert rec["status"] == "done" and rec["attempts"] == 1, rec
    assert not rec["worker"].endswith(f":{killer.killed}")  # finished by another process
    assert (out / "one" / "summary.json").is_file()
    assert paths["a"].is_file()


def _interrupt_after_first(args, out, log):
    """Run ``python -m halo.cli ARGS``; SIGINT once batch.json has a finished entry."""
    with open(log, "wb") as err_file:
        proc = subprocess.Popen(
            [sys.executable, "-m", "halo.cli", *args], stdout=subprocess.DEVNULL,
            stderr=err_file, env=dict(os.environ),
        )  # fmt: skip
    deadline = time.time() + 600
    while time.time() < deadline:
        assert proc.poll() is None, log.read_text()
        if (out / "batch.json").is_file() and any(
            r["status"] == "done" for r in _records(out).values()
        ):
            break
        time.sleep(0.2)
    proc.send_signal(signal.SIGINT)
    return proc.wait(timeout=120), log.read_text()


def test_an_interrupted_batch_keeps_what_finished_and_the_rerun_does_the_rest(tmp_path):
    write_inputs(tmp_path / "in", ["a", "b"])
    manifest = write_manifest(
        tmp_path / "in" / "m.toml",
        entry_toml("first", "a.ecsv", models=ONLY_STARS),
        entry_toml("second", "b.ecsv", models=ONLY_STARS),
    )
    out = tmp_path / "out"
    args = ["batch", str(manifest), "--out", str(out), "--workers", "1", *TINY]
    code, err = _interrupt_after_first(args, out, tmp_path / "int.log")
    assert code == 130, err
    # (the multiprocessing resource tracker may add its own note after it when the worker is
    # stopped mid-entry)
    assert any(line.startswith("halo: interrupted") for line in err.splitlines()), err
    recs = _records(out)
    assert recs["first"]["status"] == "done" and recs["second"]["status"] == "pending"
    stamp = (out / "first" / "summary.json").stat().st_mtime_ns
    assert not (out / "second").exists()
    code = main([*args, "--quiet"])
    assert code == 0
    recs = _records(out)
    assert [recs[n]["status"] for n in ("first", "second")] == ["done", "done"]
    assert (recs["first"]["attempts"], recs["second"]["attempts"]) == (1, 1)
    assert (out / "first" / "summary.json").stat().st_mtime_ns == stamp  # not run again
    assert sorted(p.name for p in out.iterdir()) == ["batch.ecsv", "batch.json", "first", "second"]


@pytest.fixture(autouse=True)
def _restore_sigint():
    """main() arms halo's own SIGINT handler: give pytest its own back afterwards."""
    previous = signal.getsignal(signal.SIGINT)
    yield
    signal.signal(signal.SIGINT, previous)
