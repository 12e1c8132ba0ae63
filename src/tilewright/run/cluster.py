"""The dask cluster of a cohort run: connecting, checking the workers, stopping and sweeping up."""

from __future__ import annotations

from pathlib import Path

from tilewright.run.execute import worker_threads  # noqa: F401 - public here too
from tilewright.store.layout import store_path

__all__ = ["run_cluster", "worker_threads"]


def _sweep_partials(out_dir: Path, ids) -> None:
    """Remove temporary stores a stopped or killed worker left (this run holds the folder's lock)."""
    from tilewright.store.writer import remove_partials

    remove_partials(*(store_path(out_dir, sid) for sid in ids))


class run_cluster:
    """The dask client of a run on workers (None in this process) and the name of its stop event;
    workers are checked to see the slides and the output folder first."""

    def __init__(self, scheduler, workers, paths, out_dir, ids):
        self.args = (scheduler, workers, paths, out_dir)
        self.ids = ids
        self.client = self.cluster = None
        self.own = False

    def __enter__(self):
        import uuid

        scheduler, workers, paths, out_dir = self.args
        if scheduler is None and (workers or 1) <= 1:
            return None, None
        from tilewright.run.execute import _client, connect, local_cluster

        if scheduler is not None:
            self.client = connect(scheduler)
            self.own = self.client is not scheduler
            from tilewright.run.workers_check import check_workers

            try:
                check_workers(self.client, paths, out_dir)
            except BaseException:
                self.__exit__(None, None, None)
                raise
        else:
            self.cluster = local_cluster(workers)
            try:
                self.client, self.own = _client(self.cluster), True
            except BaseException:
                self.__exit__(None, None, None)
                raise
        return self.client, f"tilewright-stop-{uuid.uuid4().hex}"

    def __exit__(self, *exc):
        from tilewright.run.execute import _let_go

        # local workers end here: nothing writes any more; a close that raises (a worker killed a
        # moment before a SIGTERM) is logged by _let_go and never replaces the run's outcome
        _let_go(self.client if self.own else None, self.cluster)
        if self.client is not None:
            _sweep_partials(self.args[3], self.ids)
        return False
