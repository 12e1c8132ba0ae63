"""The dask cluster of a cohort run: connecting, checking the workers, stopping and sweeping up."""

from __future__ import annotations

from pathlib import Path

from tilewright.store.layout import store_path

__all__ = ["run_cluster"]


def _sweep_partials(out_dir: Path, ids) -> None:
    """Remove temporary stores a stopped or killed worker left (this run holds the folder's lock)."""
    from tilewright.store.writer import remove_partials

    for sid in ids:
        remove_partials(store_path(out_dir, sid))


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
        from tilewright.run.execute import connect, local_cluster

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
            from distributed import Client

            self.cluster = local_cluster(workers)
            self.client, self.own = Client(self.cluster), True
        return self.client, f"tilewright-stop-{uuid.uuid4().hex}"

    def __exit__(self, *exc):
        try:
            if self.own and self.client is not None:
                self.client.close()
            if self.cluster is not None:
                self.cluster.close()  # local workers end here: nothing writes any more
        finally:
            if self.client is not None:
                _sweep_partials(self.args[3], self.ids)
        return False
