"""The pass over the rows as Dask tasks: one task per Parquet part, only statistics come back.

``--cluster local`` starts a :class:`dask.distributed.LocalCluster` on this
machine (loopback only); ``--cluster tcp://HOST:PORT`` connects to a running
scheduler whose workers can read the table's path (a shared disk or the same
machine).  Each task runs :func:`regbench.data.stream.rows_pass` or
:func:`~regbench.data.stream.stats_pass` on its part; what it returns is the
part's usable-row counts and per-group sums, then its p×p fold statistics,
its triangular factor and the few rows of the seeded sample that fall in it.
The client merges them (centred co-moments, merged factors) and fits every
model as the streamed route does, so the results equal the in-memory fit to
round-off.

dask.distributed is an optional dependency (the ``cluster`` extra).
"""

from __future__ import annotations

from typing import Optional

from regbench.errors import RegbenchError

#: Seconds to wait for a scheduler to answer.
CONNECT_TIMEOUT = 20


class ClusterError(RegbenchError):
    """The cluster could not be started or reached."""


def _distributed():
    try:
        import dask.distributed as dd
    except ImportError:
        raise ClusterError("the cluster route needs dask.distributed; install regbench with the 'cluster' extra "
                           "(pip install 'regbench[cluster]')") from None
    return dd


def connect(address: str = "local", *, processes: bool = True, n_workers: Optional[int] = None):
    """A ``(client, cluster)`` pair; ``cluster`` is None when the scheduler runs elsewhere.

    Parameters
    ----------
    address : str
        ``'local'`` to start a cluster here, or a scheduler address ``tcp://HOST:PORT``.
    processes : bool
        Local cluster only: workers in their own processes (True) or threads of this one.
    n_workers : int, optional
        Local cluster only; default one per core, at most 4.
    """
    import os

    dd = _distributed()
    if address == "local":
        workers = n_workers or max(1, min(4, os.cpu_count() or 1))
        try:
            # Worker processes talk over loopback; threads in this process need no network at all.
            where = {"host": "127.0.0.1"} if processes else {}
            cluster = dd.LocalCluster(n_workers=workers, threads_per_worker=1, processes=processes,
                                      dashboard_address=None, **where)
        except Exception as exc:  # many kinds: ports, spawning, resources
            raise ClusterError(f"--cluster local: could not start a local cluster ({exc})") from None
        return dd.Client(cluster), cluster
    if not address.startswith(("tcp://", "tls://", "inproc://")):
        raise ClusterError(f"--cluster: '{address}' is not 'local' or a scheduler address like tcp://HOST:8786")
    try:
        return dd.Client(address, timeout=CONNECT_TIMEOUT), None
    except Exception as exc:
        raise ClusterError(f"--cluster {address}: no scheduler answered within {CONNECT_TIMEOUT} s ({exc}); "
                           "check that it runs and that this machine can reach it") from None


def runner_for(client):
    """Run one pass: each argument tuple becomes a task; results come back in order.

    With ``combine`` (a function of two neighbouring results), the results are merged
    pairwise on the workers, neighbours first, and only the merged result comes back
    (a list of one): the client never holds every part's statistics at once.
    """

    def run(fn, args, combine=None):
        futures = [client.submit(fn, *a, pure=False) for a in args]
        made = list(futures)
        try:
            while combine is not None and len(futures) > 1:
                nxt = [client.submit(combine, futures[i], futures[i + 1], pure=False)
                       for i in range(0, len(futures) - 1, 2)]
                if len(futures) % 2:
                    nxt.append(futures[-1])
                made += nxt
                futures = nxt
            return client.gather(futures)
        finally:
            for f in made:
                f.release()

    run.reduces = True
    return run


def cluster_fit(path, roles, settings, *, address: str = "local", client=None, memory_budget: Optional[int] = None,
                progress=None, cancel=None, processes: bool = True):
    """Fit every model with the pass over the rows running on a Dask cluster.

    Parameters
    ----------
    path : path
        A Parquet file (one task per row group) or a folder of Parquet files
        (one per file's row group); a CSV is one task.
    roles : Roles
    settings : FitSettings
    address : str
        ``'local'`` or ``tcp://HOST:PORT`` (ignored when ``client`` is given).
    client : dask.distributed.Client, optional
        A client to use (it is left open).
    memory_budget : int, optional
        Bytes each task may use for its batches.

    Returns
    -------
    regbench.data.stream.StreamedFit
        With ``route = 'cluster'``.
    """
    from pathlib import Path

    from regbench.data.stream import stream_fit

    path = str(Path(path).resolve())
    own = client is None
    cluster = None
    if own:
        client, cluster = connect(address, processes=processes)
    try:
        return stream_fit(path, roles, settings, memory_budget=memory_budget, progress=progress, cancel=cancel,
                          runner=runner_for(client))
    finally:
        if own:
            client.close()
            if cluster is not None:
                cluster.close()
