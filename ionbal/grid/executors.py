"""Executors: how tiles are computed (serial, a thread pool, Dask).  Each yields ``(tile, arrays)``.

Add an executor by writing a generator and one entry of :data:`EXECUTORS`.
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import os
from typing import Iterable, Iterator

from . import compute as _compute
from .spec import Tile, TileTask

__all__ = ["EXECUTORS", "dask_client", "numba_threads"]


def _run_serial(tasks: Iterable[TileTask]) -> Iterator[tuple[Tile, dict]]:
    for task in tasks:
        yield task.tile, _compute.compute_tile(task)


def _run_threads(tasks: Iterable[TileTask], workers: int) -> Iterator[tuple[Tile, dict]]:
    """A thread pool; at most 2 x workers tiles are in flight (bounded memory)."""
    workers = max(1, int(workers))
    with cf.ThreadPoolExecutor(max_workers=workers, thread_name_prefix="ionbal-tile") as pool:
        pending: dict[cf.Future, Tile] = {}
        it = iter(tasks)
        try:
            for task in it:
                pending[pool.submit(_compute.compute_tile, task)] = task.tile
                if len(pending) >= 2 * workers:
                    break
            while pending:
                done, _ = cf.wait(pending, return_when=cf.FIRST_COMPLETED)
                for fut in done:
                    tile = pending.pop(fut)
                    yield tile, fut.result()
                    nxt = next(it, None)
                    if nxt is not None:
                        pending[pool.submit(_compute.compute_tile, nxt)] = nxt.tile
        finally:
            for fut in pending:
                fut.cancel()


@contextlib.contextmanager
def dask_client(scheduler: str | None = None, *, local_cluster: bool = False, workers: int | None = None):
    """A ``dask.distributed`` client: to ``scheduler`` (an address), or to a new local cluster on 127.0.0.1."""
    try:
        from dask.distributed import Client, LocalCluster
    except ImportError:
        raise ValueError("running tiles on Dask needs dask.distributed; install it with "
                         "pip install 'ionbal[dask]'") from None
    if scheduler:
        try:
            client = Client(scheduler, timeout="20s")
        except (OSError, TimeoutError, ValueError) as exc:
            raise OSError(f"cannot connect to the Dask scheduler at {scheduler}: {exc}") from None
        try:
            yield client
        finally:
            client.close()
        return
    if not local_cluster:
        raise ValueError("dask_client needs a scheduler address or local_cluster=True")
    n = max(1, int(workers or os.cpu_count() or 1))
    cluster = LocalCluster(n_workers=n, processes=True, threads_per_worker=1, host="127.0.0.1",
                           dashboard_address=None)
    client = Client(cluster)
    try:
        yield client
    finally:
        client.close()
        cluster.close()


def _run_dask(tasks: Iterable[TileTask], client) -> Iterator[tuple[Tile, dict]]:
    """Tiles on a Dask cluster; at most 2 tiles per worker thread are in flight (bounded driver memory)."""
    from dask.distributed import as_completed

    try:
        n_threads = sum(client.nthreads().values())
    except Exception:  # noqa: BLE001 - informational only
        n_threads = 1
    limit = max(2, 2 * n_threads)
    it = iter(tasks)
    futures = {}
    for task in it:
        fut = client.submit(_compute.compute_tile, task, pure=False)
        futures[fut] = task.tile
        if len(futures) >= limit:
            break
    ac = as_completed(list(futures))
    try:
        for fut in ac:
            tile = futures.pop(fut)
            result = fut.result()
            fut.release()
            yield tile, result
            nxt = next(it, None)
            if nxt is not None:
                nf = client.submit(_compute.compute_tile, nxt, pure=False)
                futures[nf] = nxt.tile
                ac.add(nf)
    finally:
        for fut in futures:
            with contextlib.suppress(Exception):
                fut.cancel()


@contextlib.contextmanager
def numba_threads(n: int | None):
    """Use ``n`` numba threads inside the block (restored afterwards)."""
    if not n:
        yield
        return
    from ..core.config import get_num_threads, set_num_threads

    old = get_num_threads()
    try:
        set_num_threads(max(1, min(int(n), _max_numba_threads())))
    except Exception:  # noqa: BLE001 - thread count is a hint
        pass
    try:
        yield
    finally:
        with contextlib.suppress(Exception):
            set_num_threads(old)


def _max_numba_threads() -> int:
    from ..core.config import max_num_threads

    return max_num_threads()


# one entry per executor: (make_tasks, workers, scheduler, local_cluster) -> stream of (tile, arrays);
# make_tasks(numba_threads) gives the tasks lazily


def _serial(make_tasks, *, workers=None, **_) -> Iterator[tuple[Tile, dict]]:
    with numba_threads(workers):
        yield from _run_serial(make_tasks(None))


def _threads(make_tasks, *, workers=None, **_) -> Iterator[tuple[Tile, dict]]:
    yield from _run_threads(make_tasks(None), int(workers or os.cpu_count() or 1))


def _dask(make_tasks, *, workers=None, scheduler=None, local_cluster=False) -> Iterator[tuple[Tile, dict]]:
    with dask_client(scheduler, local_cluster=local_cluster, workers=workers) as client:
        yield from _run_dask(make_tasks(1 if local_cluster else None), client)


#: executor name -> generator of finished tiles
EXECUTORS = {"serial": _serial, "threads": _threads, "dask": _dask}

