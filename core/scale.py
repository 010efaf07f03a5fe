"""Scale-out of the probabilistic run (and of the deterministic fit) on a Dask cluster.

The probabilistic run (:func:`core.probabilistic.probabilistic_field`) splits the wells
into canonical chunks (sorted by months used, then well_id; each well seeded from
(seed, well_id)); :func:`map_chunks` runs those chunks on Dask workers, grouped into
partitions, and returns the results in chunk order. The chunks and their arithmetic are
exactly those of the single-process run, so the results are identical, bit for bit.

Schedulers
----------
* ``None``: in this process (no Dask).
* ``"local"``: a :class:`distributed.LocalCluster` started for the call (two worker
  processes of one thread each by default: :data:`LOCAL_WORKERS`), closed afterwards.
* ``"tcp://host:8786"`` (any address string): an existing cluster, ``Client(address)``;
  its workers must be able to import ``core`` (same code installed or on the path).
* a ``distributed.Client``: used as is (not closed), e.g. one client for many runs.

References
----------
.. [1] M. Rocklin, "Dask: Parallel computation with blocked algorithms and task
   scheduling," Proc. 14th Python in Science Conference, 2015.
"""

from __future__ import annotations

import contextlib
import os
import sys
from collections.abc import Callable, Iterator, Sequence
from typing import Any

import pandas as pd

from core.validation import InputError, check_range

LOCAL_WORKERS = 2  # worker processes of the default local cluster
PARTITIONS_PER_WORKER = 4  # partitions per worker: balances load without many tiny tasks
_ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def _add_path(root: str) -> None:
    if root not in sys.path:
        sys.path.insert(0, root)


def _run_partition(fn: Callable[[Any], Any], items: Sequence[Any]) -> list:
    """Worker task: ``fn`` over one partition's payloads, in order."""
    return [fn(x) for x in items]


@contextlib.contextmanager
def dask_client(scheduler, *, n_workers: int = LOCAL_WORKERS) -> Iterator[Any]:
    """A ``distributed.Client`` for ``scheduler`` ("local", an address or a Client).

    A client (and local cluster) created here is closed on exit; a given Client is not.
    """
    try:
        from distributed import Client, LocalCluster
    except ImportError as exc:  # pragma: no cover - dask is pinned in requirements
        raise InputError("the Dask scheduler needs the 'distributed' package") from exc
    if isinstance(scheduler, Client):
        yield scheduler
        return
    if not isinstance(scheduler, str) or not scheduler:
        raise InputError(f"scheduler must be 'local', an address like tcp://host:8786 or a "
                         f"distributed.Client, got {scheduler!r}")
    if scheduler == "local":
        check_range("n_workers", n_workers, 1, 256)
        cluster = LocalCluster(n_workers=int(n_workers), threads_per_worker=1, processes=True,
                               dashboard_address=None)
        client = Client(cluster)
        try:
            client.run(_add_path, _ROOT)
            yield client
        finally:
            client.close()
            cluster.close()
        return
    try:
        client = Client(scheduler, timeout="30s")
    except OSError as exc:
        raise InputError(f"cannot reach the Dask scheduler at {scheduler}: {exc}") from exc
    try:
        yield client
    finally:
        client.close()


def map_chunks(fn: Callable[[Any], Any], payloads: Sequence[Any], *, scheduler,
               n_workers: int = LOCAL_WORKERS, partitions: int | None = None) -> list:
    """Run ``fn`` over ``payloads`` on Dask and return the results in payload order.

    Parameters
    ----------
    fn : callable
        A top-level (importable) function of one payload.
    payloads : sequence
        Chunk inputs (plain numpy/pandas objects).
    scheduler : None, "local", address str or distributed.Client
        Where to run (module docstring). None runs in this process.
    n_workers : int
        Workers of a "local" cluster.
    partitions : int, optional
        Tasks to split the payloads into (contiguous runs of chunks). Default
        :data:`PARTITIONS_PER_WORKER` per worker.

    Returns
    -------
    list
        ``[fn(p) for p in payloads]``, computed on the cluster.
    """
    items = list(payloads)
    if scheduler is None or not items:
        return [fn(p) for p in items]
    with dask_client(scheduler, n_workers=n_workers) as client:
        n_w = max(len(client.scheduler_info().get("workers", {})), 1)
        n_parts = int(partitions) if partitions else PARTITIONS_PER_WORKER * n_w
        n_parts = max(1, min(n_parts, len(items)))
        size = -(-len(items) // n_parts)
        parts = [items[i:i + size] for i in range(0, len(items), size)]
        futures = client.map(_run_partition, [fn] * len(parts), parts, pure=False)
        done = client.gather(futures)
    return [r for part in done for r in part]


def probabilistic_field_dask(production: pd.DataFrame, fit_result_or_fits, *, scheduler="local",
                             **kwargs):
    """:func:`core.probabilistic.probabilistic_field` with its chunks on a Dask cluster.

    Same arguments and result (identical numbers); ``scheduler`` defaults to a local
    cluster of :data:`LOCAL_WORKERS` worker processes.
    """
    from core.probabilistic import probabilistic_field

    if scheduler == "local":
        # one cluster for the calibration and the main run
        with dask_client("local") as client:
            return probabilistic_field(production, fit_result_or_fits, scheduler=client, **kwargs)
    return probabilistic_field(production, fit_result_or_fits, scheduler=scheduler, **kwargs)


def _fit_part(args):
    from core.decline import fit_field

    prod, regime, settings, overrides = args
    return fit_field(prod, regime_start=regime, settings=settings, overrides=overrides)


def fit_field_dask(production: pd.DataFrame, *, scheduler="local", regime_start=None, settings=None,
                   overrides=None, wells_per_partition: int = 4096):
    """:func:`core.decline.fit_field` over partitions of wells on a Dask cluster.

    Wells are split into partitions of ``wells_per_partition`` (sorted well_id order); each
    partition is fitted by the engine on a worker with ``workers=1``; the tables are joined
    in well order. Each well's fit depends only on its own months, but the engine pads
    wells of a batch to a common length, so parameters can differ from a single-process
    fit in the last digits (relative ~1e-12), not in any reported figure.
    """
    import dataclasses

    from core.decline import DeclineSettings, FieldFit

    st = dataclasses.replace(settings or DeclineSettings(), workers=1)
    check_range("wells_per_partition", wells_per_partition, 1, None)
    wells = sorted(pd.unique(production["well_id"]))
    groups = [set(wells[i:i + wells_per_partition]) for i in range(0, len(wells), wells_per_partition)]
    payloads = [(production[production["well_id"].isin(g)], regime_start, st, overrides) for g in groups]
    parts = map_chunks(_fit_part, payloads, scheduler=scheduler)
    if not parts:
        return _fit_part((production, regime_start, st, overrides))
    fits = pd.concat([p.fits for p in parts], ignore_index=True).sort_values(["well_id", "stream"], kind="stable")
    cands = pd.concat([p.candidates for p in parts], ignore_index=True)
    msgs = tuple(m for p in parts for m in p.messages)
    return FieldFit(fits=fits.reset_index(drop=True), candidates=cands.reset_index(drop=True),
                    settings=settings or DeclineSettings(), messages=msgs)
