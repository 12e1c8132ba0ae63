"""Where the work runs: in this process, on a local dask cluster, or on a remote one.

``workers=1`` without a scheduler runs slides one after the other in this process (no start-up
cost). ``workers>1`` starts a local ``dask.distributed`` cluster of that many single-threaded
worker processes; ``scheduler="tcp://host:port"`` (or a ``distributed.Client``) sends the same
tasks to an existing cluster. Results are yielded as they complete, so the caller can record
progress and a manifest row per slide.
"""

from __future__ import annotations

import logging

__all__ = ["execute", "local_cluster"]


def local_cluster(workers: int):
    """The ``dask.distributed`` LocalCluster tile-out starts: ``workers`` single-threaded processes.

    dask's default worker environment trims malloc aggressively (``MALLOC_TRIM_THRESHOLD_`` of
    64 KiB), which costs ~20 % in page faults on block-sized buffers; the workers get
    :mod:`tilewright.run.allocator`'s thresholds instead (the rest of dask's environment, such as
    ``OMP_NUM_THREADS=1``, is kept).
    """
    import dask
    from distributed import LocalCluster

    from tilewright.run.allocator import ENV

    env = {**dask.config.get("distributed.nanny.pre-spawn-environ", {}), **ENV}
    with dask.config.set({"distributed.nanny.pre-spawn-environ": env}):
        return LocalCluster(n_workers=int(workers), threads_per_worker=1, processes=True,
                            dashboard_address=None, silence_logs=logging.ERROR)


def execute(fn, args_list, *, scheduler=None, workers=None):
    """Yield ``(index, fn(*args))`` for every ``args`` in ``args_list``, in completion order."""
    args_list = list(args_list)
    if not args_list:
        return
    if scheduler is None and (workers or 1) <= 1:
        for i, args in enumerate(args_list):
            yield i, fn(*args)
        return
    from distributed import Client, as_completed

    own_cluster = None
    if isinstance(scheduler, Client):
        client, own_client = scheduler, False
    elif scheduler is not None:
        client, own_client = Client(scheduler, timeout="30s"), True
    else:
        own_cluster = local_cluster(workers)
        client, own_client = Client(own_cluster), True
    try:
        futures = [client.submit(fn, *args, key=f"tilewright-{fn.__name__}-{i}-{id(args_list)}", pure=False)
                   for i, args in enumerate(args_list)]
        index = {f.key: i for i, f in enumerate(futures)}
        for fut in as_completed(futures):
            yield index[fut.key], fut.result()
    finally:
        if own_client:
            client.close()
        if own_cluster is not None:
            own_cluster.close()
