"""The Dask distributed cluster a batch runs on: a LocalCluster on loopback by default, or an
existing scheduler's address to scale out.

The local cluster has N worker processes of one thread each, every listener (scheduler, workers,
nannies, their HTTP status pages) on 127.0.0.1 with a free port: nothing is opened to the
network, and there is no dashboard beyond those loopback status pages (the dashboard's own
package is not a dependency). Each worker uses one core, so that N workers on N cores do not fight
over them: it is pinned to its own core (every thread of the process, before its first fit; worker
i gets the i-th core this process may use), with one BLAS/OpenMP thread and the chains of a fit one
after the other. The XLA flags stay those of a single `halo fit` (they are part of the persistent
compilation cache's key), so workers load the programs that single fits compiled, and the reverse.
"""

import contextlib
import logging
import os
import signal

from distributed.diagnostics.plugin import WorkerPlugin

from halo.core.errors import InputError

__all__ = [
    "WORKER_ENV",
    "default_workers",
    "pin_to_core",
    "batch_client",
    "local_cluster",
    "LOOPBACK",
]

LOOPBACK = "127.0.0.1"

#: environment of every local worker process, set before it imports anything: one core per fit
WORKER_ENV = {
    "OMP_NUM_THREADS": "1",
    "OPENBLAS_NUM_THREADS": "1",
    "MKL_NUM_THREADS": "1",
    "HALO_CHAIN_THREADS": "1",  # the chains of a fit one after the other (halo.inference.sampling)
    "JAX_PLATFORMS": "cpu",
    "MPLBACKEND": "Agg",
    "TF_CPP_MIN_LOG_LEVEL": "3",
}


def default_workers():
    """The number of cores this process may run on (one worker each)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


def _worker_env():
    """WORKER_ENV, with the cores a worker may be pinned to (``HALO_WORKER_CORES``)."""
    env = dict(WORKER_ENV)
    try:
        cores = sorted(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not Linux: no pinning
        return env
    env["HALO_WORKER_CORES"] = ",".join(str(c) for c in cores)
    return env


def pin_to_core(cores, index):
    """Pin every thread of this process to core ``cores[index % len(cores)]`` (Linux; threads
    started later inherit it); where affinity cannot be set, nothing changes."""
    core = cores[index % len(cores)]
    try:
        tids = [int(t) for t in os.listdir("/proc/self/task")]
    except OSError:
        tids = [0]
    for tid in tids:
        with contextlib.suppress(OSError, AttributeError):
            os.sched_setaffinity(tid, {core})


class IgnoreInterrupt(WorkerPlugin):
    """Local workers ignore SIGINT: a Ctrl-C in the terminal reaches every process of its group,
    and the client alone should act on it (it cancels the entries and stops the workers)."""

    name = "halo-ignore-sigint"

    def setup(self, worker):
        with contextlib.suppress(ValueError):  # only possible in the process's main thread
            signal.signal(signal.SIGINT, signal.SIG_IGN)


def local_cluster(workers):
    """A LocalCluster of ``workers`` one-thread processes on loopback, each pinned to its own core
    when it starts a fit (see the module)."""
    from distributed import LocalCluster

    return LocalCluster(
        n_workers=workers,
        threads_per_worker=1,
        processes=True,
        host=LOOPBACK,
        protocol="tcp",
        scheduler_port=0,
        dashboard_address=f"{LOOPBACK}:0",
        worker_dashboard_address=f"{LOOPBACK}:0",
        silence_logs=logging.CRITICAL,
        env=_worker_env(),
    )


@contextlib.contextmanager
def batch_client(scheduler=None, workers=None):
    """A connected ``distributed.Client``: to ``scheduler`` (an address such as
    tcp://host:8786) when given, else to a new LocalCluster of ``workers`` processes (default:
    the core count), closed on exit."""
    from distributed import Client

    if scheduler is not None:
        try:
            client = Client(scheduler, timeout="20s")
        except (OSError, TimeoutError) as exc:
            raise InputError(f"--scheduler {scheduler}: cannot connect ({exc})") from None
        try:
            yield client
        finally:
            client.close()
        return
    n = default_workers() if workers is None else workers
    if isinstance(n, bool) or not isinstance(n, int) or n < 1:
        raise InputError(f"--workers: expected a positive number of workers, got {n!r}")
    logging.getLogger("distributed").setLevel(logging.CRITICAL)
    with local_cluster(n) as cluster, Client(cluster) as client:
        client.register_plugin(IgnoreInterrupt())
        yield client
