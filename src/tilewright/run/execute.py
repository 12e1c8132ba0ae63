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

__all__ = ["execute", "local_cluster", "connect", "worker_threads"]

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


#: Tasks kept submitted per worker thread: enough that a thread never waits for its next task,
#: few enough that the scheduler, the client's bookkeeping and "in flight" stay small.
PER_THREAD = 3

#: Seconds between two looks at how many worker threads the cluster has (it may grow or shrink).
RECOUNT_EVERY = 10.0


def execute(fn, args_list, *, scheduler=None, workers=None, on_error=None, stop_name=None, client=None,
            per_thread: int = PER_THREAD):
    """Yield ``(index, fn(*args))`` for every ``args`` in ``args_list``, in completion order.

    Parameters
    ----------
    fn : callable
        A picklable function (sent to dask workers).
    args_list : iterable of tuple
        Taken lazily: on dask, at most ``per_thread`` tasks a worker thread are submitted at a
        time, the next one as soon as one finishes, so a cohort of any size costs the scheduler
        and this process the same few tasks at a time.
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
    per_thread : int
        Tasks submitted at a time per worker thread (:data:`PER_THREAD`).
    """
    import itertools

    args_iter = iter(args_list)
    first = next(args_iter, None)
    if first is None:
        return
    args_iter = itertools.chain([first], args_iter)
    if client is None and scheduler is None and (workers or 1) <= 1:
        for i, args in enumerate(args_iter):
            try:
                value = fn(*args)
            except Exception as exc:  # noqa: BLE001 - on_error decides; Ctrl-C passes through
                if on_error is None:
                    raise
                value = on_error(i, exc)
            yield i, value
        return
    import time
    import uuid

    from distributed import as_completed

    own_cluster = own_client = None
    if client is None:
        if scheduler is not None:
            client = own_client = connect(scheduler)
        else:
            own_cluster = local_cluster(workers)
            client = own_client = _client(own_cluster)
    tag = uuid.uuid4().hex[:12]
    running: dict = {}  # key -> (index, future): submitted and not yet yielded
    numbered = enumerate(args_iter)
    window, counted = _window(client, per_thread), time.monotonic()

    def submit_more(done):
        nonlocal window, counted
        if time.monotonic() - counted >= RECOUNT_EVERY:
            window, counted = _window(client, per_thread), time.monotonic()
        while len(running) < window:
            item = next(numbered, None)
            if item is None:
                return
            i, args = item
            fut = client.submit(fn, *args, key=f"tilewright-{fn.__name__}-{i}-{tag}", pure=False)
            running[fut.key] = (i, fut)
            done.add(fut)

    try:
        done = as_completed()
        submit_more(done)
        for fut in done:
            i, _ = running.pop(fut.key)
            submit_more(done)  # before this result is handled: the workers keep busy meanwhile
            try:
                value = fut.result()
            except Exception as exc:  # noqa: BLE001 - e.g. KilledWorker: the worker died mid-task
                if on_error is None:
                    raise
                value = on_error(i, exc)
            del fut
            yield i, value
    finally:
        pending = [f for _, f in running.values()]
        if pending and any(not f.done() for f in pending):
            _stop(client, pending, stop_name)
        _let_go(own_client, own_cluster)


def _window(client, per_thread: int) -> int:
    """Tasks to keep submitted: ``per_thread`` for every worker thread of the cluster (at least
    two threads' worth, for a cluster whose workers have not joined yet)."""

    return max(1, int(per_thread)) * max(2, worker_threads(client))


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


def worker_threads(client) -> int:
    """Worker threads of the cluster behind ``client`` (0 without one: slides run in this process)."""
    if client is None:
        return 0
    try:
        return sum(int(n) for n in client.nthreads().values())
    except Exception:  # noqa: BLE001 - a busy or vanishing scheduler: size as for a small cluster
        return 2
