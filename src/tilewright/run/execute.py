"""Where the work runs: in this process, on a local dask cluster, or on a remote one.

``workers=1`` without a scheduler runs slides one after the other in this process (no start-up
cost). ``workers>1`` starts a local ``dask.distributed`` cluster of that many single-threaded
worker processes; ``scheduler="tcp://host:port"`` (or a ``distributed.Client``) sends the same
tasks to an existing cluster. Results are yielded as they complete, so the caller can record
progress and a manifest row per slide.
"""

from __future__ import annotations

import logging

from tilewright.errors import ConfigError

__all__ = ["execute", "local_cluster", "connect"]

log = logging.getLogger("tilewright")


def local_cluster(workers: int):
    """The ``dask.distributed`` LocalCluster tile-out starts: ``workers`` single-threaded processes.

    dask's default worker environment trims malloc aggressively (``MALLOC_TRIM_THRESHOLD_`` of
    64 KiB), which costs ~20 % in page faults on block-sized buffers; the workers get
    :mod:`tilewright.run.allocator`'s thresholds instead (the rest of dask's environment, such as
    ``OMP_NUM_THREADS=1``, is kept). The workers are started with SIGINT blocked
    (:func:`tilewright.interrupts.ctrl_c_for_this_process_only`): a Ctrl-C stops the run, which
    stops them.
    """
    import dask
    from distributed import LocalCluster

    from tilewright.interrupts import ctrl_c_for_this_process_only
    from tilewright.run.allocator import ENV

    env = {**dask.config.get("distributed.nanny.pre-spawn-environ", {}), **ENV}
    cluster = None
    try:  # the workers never take a Ctrl-C: the run stops them (tilewright.interrupts)
        with dask.config.set({"distributed.nanny.pre-spawn-environ": env}), ctrl_c_for_this_process_only():
            # dashboard_address ":0": any free port, so a second run on the machine prints no "port
            # 8787 is already in use" warning (None still tries 8787)
            cluster = LocalCluster(n_workers=int(workers), threads_per_worker=1, processes=True,
                                   dashboard_address=":0", silence_logs=logging.ERROR)
    except BaseException:  # a Ctrl-C pressed while the workers started arrives here: let them go
        _let_go(None, cluster)
        raise
    return cluster


#: How long the client tries to reach a scheduler before giving up.
CONNECT_TIMEOUT = "30s"


def connect(scheduler):
    """A ``distributed.Client`` for a scheduler address (or the client given); raises
    :class:`ConfigError` naming the address when it cannot be reached."""
    from distributed import Client

    if isinstance(scheduler, Client):
        return scheduler
    try:
        return Client(scheduler, timeout=CONNECT_TIMEOUT)
    except (OSError, TimeoutError, ValueError) as exc:
        raise ConfigError(f"cannot reach the dask scheduler at {scheduler} ({type(exc).__name__}: "
                          f"{' '.join(str(exc).split())[:200]}); start it (`dask scheduler`) or fix the "
                          "address") from None


def execute(fn, args_list, *, scheduler=None, workers=None, on_error=None, stop_name=None, client=None):
    """Yield ``(index, fn(*args))`` for every ``args`` in ``args_list``, in completion order.

    Parameters
    ----------
    fn : callable
        A picklable function (sent to dask workers).
    args_list : list of tuple
    scheduler, workers :
        Where to run (see the module docstring).
    on_error : callable, optional
        ``on_error(index, exception)`` gives the value yielded for a task that raised (or whose
        worker died: ``KilledWorker``), so one bad task never ends the others. Without it the
        exception propagates.
    stop_name : str, optional
        Name of a ``distributed.Event`` set when this generator is stopped early (Ctrl-C, SIGTERM,
        an error): tasks that poll it stop at their next safe point, and the running ones are
        waited for (up to :data:`STOP_WAIT` seconds) before the cluster is let go.
    client : distributed.Client, optional
        A client already connected (then ``scheduler`` is ignored and the client is not closed).
    """
    args_list = list(args_list)
    if not args_list:
        return
    if client is None and scheduler is None and (workers or 1) <= 1:
        for i, args in enumerate(args_list):
            try:
                value = fn(*args)
            except Exception as exc:  # noqa: BLE001 - on_error decides; Ctrl-C passes through
                if on_error is None:
                    raise
                value = on_error(i, exc)
            yield i, value
        return
    from distributed import as_completed

    own_cluster = own_client = None
    if client is None:
        if scheduler is not None:
            client = own_client = connect(scheduler)
        else:
            own_cluster = local_cluster(workers)
            client = own_client = _client(own_cluster)
    futures = []
    try:
        futures = [client.submit(fn, *args, key=f"tilewright-{fn.__name__}-{i}-{id(args_list)}", pure=False)
                   for i, args in enumerate(args_list)]
        index = {f.key: i for i, f in enumerate(futures)}
        for fut in as_completed(futures):
            try:
                value = fut.result()
            except Exception as exc:  # noqa: BLE001 - e.g. KilledWorker: the worker died mid-task
                if on_error is None:
                    raise
                value = on_error(index[fut.key], exc)
            yield index[fut.key], value
    finally:
        if futures and any(not f.done() for f in futures):
            _stop(client, futures, stop_name)
        _let_go(own_client, own_cluster)


#: Seconds a stopped run waits for running tasks to reach a safe point and clean up.
STOP_WAIT = 60


def _stop(client, futures, stop_name) -> None:
    """Cancel queued tasks, ask running ones to stop, and wait for them to finish."""
    from distributed import Event, wait

    pending = [f for f in futures if not f.done()]
    try:
        if stop_name is not None:
            Event(stop_name, client=client).set()
        wait(pending, timeout=STOP_WAIT)
    except Exception as exc:  # noqa: BLE001 - best effort: the caller sweeps leftovers afterwards
        log.debug("stopping the running tasks: %s: %s", type(exc).__name__, exc)
    finally:
        _quietly("cancelling the queued tasks", client.cancel, pending)


def _let_go(client, cluster) -> None:
    """Close the client and the local cluster this run started.

    Closing races with whatever stopped the run (a worker killed a moment before a SIGTERM is
    being restarted by its nanny, a comm is half closed): such an error says nothing about the
    stores, which are complete or swept, so it is logged and never replaces the run's outcome
    (the stop that is propagating, or the results already yielded).
    """
    if client is not None:
        _quietly("closing the dask client", client.close)
    if cluster is not None:
        _quietly("closing the local dask cluster", cluster.close)


def _quietly(what, fn, *args) -> None:
    try:
        fn(*args)
    except Exception as exc:  # noqa: BLE001 - see _let_go
        log.debug("%s: %s: %s", what, type(exc).__name__, exc)


def _client(cluster):
    from distributed import Client

    return Client(cluster)
