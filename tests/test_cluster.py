"""The run's dask cluster: loopback only, TLS between local processes, lost workers.

Each case starts a real dask.distributed cluster (the CI machine has 2 cores: one worker).
"""

from __future__ import annotations

import os
from pathlib import Path

import psutil
import pytest

from regionmap.errors import ClusterError, InputError
from regionmap.pipeline.cluster import ALLOWED_FAILURES, cluster_errors, dask_client


def _listening(pids) -> list:
    """(ip, port) of every listening TCP socket of these processes."""
    found = []
    for pid in pids:
        for conn in psutil.Process(pid).net_connections(kind="inet"):
            if conn.status == psutil.CONN_LISTEN:
                found.append((conn.laddr.ip, conn.laddr.port))
    return found


def _this_process_and_children() -> list[int]:
    me = psutil.Process()
    return [me.pid] + [p.pid for p in me.children(recursive=True)]


def test_default_cluster_listens_on_loopback_only():
    before = set(_listening([os.getpid()]))
    with dask_client() as client:
        assert client.submit(sum, [1, 2]).result() == 3
        opened = set(_listening([os.getpid()])) - before
    assert opened, "dask's HTTP servers were expected to listen (on loopback)"
    assert all(ip == "127.0.0.1" for ip, _ in opened), opened


async def _connect(address: str, security) -> None:
    """Open and close one dask comm to ``address`` with ``security``'s client credentials."""
    from distributed.comm import connect

    kwargs = security.get_connection_args("client") if security is not None else {}
    comm = await connect(address, timeout="5s", **kwargs)
    await comm.close()


def test_process_cluster_uses_tls_and_refuses_clients_without_its_credentials():
    import asyncio

    from distributed.security import Security

    with dask_client(workers=1) as client:
        address = client.scheduler.address
        assert address.startswith("tls://127.0.0.1:")
        assert client.submit(sum, [1, 2]).result() == 3
        opened = _listening(_this_process_and_children())
        assert opened and all(ip == "127.0.0.1" for ip, _ in opened), opened
        asyncio.run(_connect(address, client.security))  # the run's own credentials: accepted
        # another local user: plain TCP, or TLS with certificates of their own, is refused
        with pytest.raises((OSError, TimeoutError)):
            asyncio.run(_connect(address.replace("tls://", "tcp://"), None))
        with pytest.raises((OSError, TimeoutError)):
            asyncio.run(_connect(address, Security.temporary()))


def _die_once(marker: str) -> int:
    """Kill the worker process the first time (the marker file does not exist yet)."""
    if not os.path.exists(marker):
        Path(marker).touch()
        os._exit(1)
    return 42


def _always_die() -> int:
    os._exit(1)


def _context(value):
    return value


def test_a_dying_worker_is_replaced_and_its_task_and_inputs_sent_again(tmp_path):
    # the context is a task, not scattered data: the restarted worker gets it made again
    with dask_client(workers=1) as client:
        ctx = client.submit(_context, str(tmp_path / "died"), pure=False)
        fut = client.submit(_die_once, ctx, pure=False)
        with cluster_errors("task"):
            assert fut.result(timeout=120) == 42
    assert (tmp_path / "died").exists()


def test_a_worker_that_keeps_dying_ends_the_run_with_a_clear_error():
    with dask_client(workers=1) as client:
        fut = client.submit(_always_die, pure=False)
        with pytest.raises(ClusterError, match=rf"chunk 0-10: .*died {ALLOWED_FAILURES} times"):
            with cluster_errors("cell chunk 0-10"):
                fut.result(timeout=300)


def test_scheduler_security_file_must_hold_tls_settings(tmp_path):
    bad = tmp_path / "security.yaml"
    bad.write_text("distributed:\n  scheduler:\n    x: 1\n")
    with pytest.raises(InputError, match=r"security\.yaml: expected a dask config file"):
        with dask_client(scheduler="tls://127.0.0.1:1", scheduler_security=bad):
            pass


def _bad_input():
    raise InputError("forcing file 'f.nc', variable 't2m': 290 K at ... cannot be physical")


@pytest.mark.parametrize("workers", [None, 1])
def test_an_error_inside_a_task_reaches_the_user_as_its_own_line_only(capfd, workers):
    # dask logs "Compute Failed" with the task's traceback from the worker; the CLI's
    # logging set-up keeps that off the terminal, and the error itself comes back whole
    from regionmap.cli import configure_logging

    configure_logging(0)
    with dask_client(workers=workers) as client:
        with pytest.raises(InputError, match="cannot be physical"):
            client.submit(_bad_input, pure=False).result(timeout=120)
    err = capfd.readouterr().err
    assert "Traceback" not in err and "Compute Failed" not in err and "distributed" not in err, err
