"""The dask.distributed cluster a run's chunk tasks go to, closed to other users.

* Default: one in-process worker with a thread per core. The scheduler's and the worker's
  HTTP servers (dask starts them even without a dashboard) listen on 127.0.0.1 only.
* ``--workers N``: N local worker processes on 127.0.0.1, their connections encrypted and
  authenticated with TLS credentials made for this run only
  (``distributed.security.Security.temporary``), so another local user cannot submit work to
  them.
* ``--scheduler ADDRESS``: an existing cluster, with the TLS settings of the dask config or of
  a ``--scheduler-security FILE`` (a dask config file, YAML).
* ``--dashboard``: dask's dashboard on 127.0.0.1 (needs the bokeh package).

A worker that dies takes its tasks with it: the scheduler runs them again on another (or the
restarted) worker, up to :data:`ALLOWED_FAILURES` times, and a task that waits
:data:`NO_WORKERS_TIMEOUT` for any worker fails; both end the run with a
:class:`ClusterError` (exit 2) instead of an internal error.
"""

from __future__ import annotations

import contextlib
import importlib.util
import logging
import os
import warnings
from concurrent.futures import CancelledError
from pathlib import Path

import yaml
from distributed.diagnostics.plugin import WorkerPlugin

from regionmap.errors import ClusterError, InputError

__all__ = ["dask_client", "cluster_errors", "ALLOWED_FAILURES", "NO_WORKERS_TIMEOUT"]

#: Times a task may be lost with a dying worker before the run gives up.
ALLOWED_FAILURES = 3
#: How long a task waits for a worker to run on before the run gives up.
NO_WORKERS_TIMEOUT = "120s"


class _QuietWorker(WorkerPlugin):
    """Worker plugin: the run's logging level in worker processes, and no Python warnings
    printed to the terminal from them unless the CLI shows library messages (-v)."""

    name = "regionmap-quiet-worker"

    def __init__(self, level: int):
        self.level = level

    def setup(self, worker) -> None:
        if self.level > logging.WARNING:
            warnings.simplefilter("ignore")
        for name in ("distributed", "dask", "numba", "rasterio"):
            logging.getLogger(name).setLevel(self.level)


def _library_log_level() -> int:
    """The level the CLI set for dask.distributed's own log messages (ERROR when unset)."""
    return logging.getLogger("distributed").level or logging.ERROR


def _scheduler_security(path: Path | None):
    """TLS settings for ``--scheduler``: from a dask config file, else from the dask config."""
    import dask
    from distributed.security import Security

    if path is None:
        return Security()
    try:
        settings = yaml.safe_load(Path(path).read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, yaml.YAMLError) as exc:
        raise InputError(f"--scheduler-security {path}: cannot be read as YAML ({exc})") from None
    tls = (((settings or {}).get("distributed") or {}).get("comm") or {}).get("tls")
    if not isinstance(tls, dict):
        raise InputError(
            f"--scheduler-security {path}: expected a dask config file with a "
            "distributed: comm: tls: section (ca-file, client: cert, key)"
        )
    with dask.config.set(settings):
        try:
            return Security()
        except (OSError, ValueError, TypeError) as exc:
            raise InputError(f"--scheduler-security {path}: {exc}") from None


@contextlib.contextmanager
def dask_client(
    workers: int | None = None,
    scheduler: str | None = None,
    *,
    dashboard: bool = False,
    scheduler_security: Path | None = None,
):
    """A dask.distributed client: in-process threads by default, ``workers`` local processes
    with temporary TLS credentials, or an existing cluster at ``scheduler``.

    Raises
    ------
    InputError
        The scheduler cannot be reached or its security settings are unusable; a dashboard
        was asked for without bokeh.
    """
    import dask
    from distributed import Client, LocalCluster
    from distributed.security import Security

    if dashboard and importlib.util.find_spec("bokeh") is None:
        raise InputError(
            "--dashboard: dask's dashboard needs the bokeh package (pip install bokeh)"
        )
    level = _library_log_level()
    settings = {
        "distributed.scheduler.allowed-failures": ALLOWED_FAILURES,
        "distributed.scheduler.no-workers-timeout": NO_WORKERS_TIMEOUT,
    }
    with dask.config.set(settings):
        if scheduler:
            security = _scheduler_security(scheduler_security)
            try:
                client = Client(scheduler, timeout="20s", security=security)
            except (OSError, TimeoutError, ValueError, TypeError) as exc:
                hint = (
                    "; hint: a tls:// scheduler needs --scheduler-security FILE or TLS settings "
                    "in the dask config"
                    if scheduler.startswith("tls://") and scheduler_security is None
                    else ""
                )
                raise InputError(
                    f"--scheduler {scheduler}: cannot connect to a dask scheduler there "
                    f"({type(exc).__name__}: {exc}){hint}"
                ) from None
            with client:
                yield client
            return
        loopback = {
            "dashboard_address": "127.0.0.1:8787" if dashboard else "127.0.0.1:0",
            "worker_dashboard_address": "127.0.0.1:0",
            "silence_logs": level,
        }
        if workers:
            cluster = LocalCluster(
                n_workers=int(workers),
                threads_per_worker=1,
                processes=True,
                host="127.0.0.1",
                protocol="tls://",
                security=Security.temporary(),
                **loopback,
            )
        else:
            cluster = LocalCluster(
                n_workers=1,
                threads_per_worker=max(1, os.cpu_count() or 1),
                processes=False,
                **loopback,
            )
        with cluster, Client(cluster, security=cluster.security) as client:
            if workers:
                client.register_plugin(_QuietWorker(level))
            if dashboard:
                print(f"dask dashboard (this machine only): {client.dashboard_link}")
            yield client


@contextlib.contextmanager
def cluster_errors(what: str):
    """Turn the cluster's failures while waiting for ``what`` into a :class:`ClusterError`:
    a worker that died too often, no worker for too long, a lost scheduler."""
    from distributed.comm.core import CommClosedError
    from distributed.scheduler import KilledWorker, NoValidWorkerError, NoWorkerError

    try:
        yield
    except KilledWorker as exc:
        raise ClusterError(
            f"{what}: the dask worker running it died {ALLOWED_FAILURES} times ({exc}); "
            "hint: a worker may run out of memory, try a smaller [run] chunk_size or more "
            "memory per worker"
        ) from None
    except (NoWorkerError, NoValidWorkerError) as exc:
        raise ClusterError(
            f"{what}: no dask worker to run it for {NO_WORKERS_TIMEOUT} ({type(exc).__name__}); "
            "hint: check that the cluster's workers are running"
        ) from None
    except (CancelledError, CommClosedError) as exc:
        raise ClusterError(
            f"{what}: the dask cluster dropped it ({type(exc).__name__}: {exc}); the scheduler "
            "or its workers went away"
        ) from None
