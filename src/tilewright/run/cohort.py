"""``tile_cohort``: every slide of a cohort on dask, locally or on a dask.distributed cluster."""

from __future__ import annotations

import json
import logging
from pathlib import Path

from tilewright.location.objpath import as_path, replace_text
from tilewright.location.url import is_url
from tilewright.run.config import TilingConfig
from tilewright.run.slide import SlideResult
from tilewright.run.slide_task import run_one  # noqa: F401 - public here too (each slide's task)

__all__ = ["tile_cohort", "run_one", "stain_target_path", "STAIN_TARGET_FILE"]

#: The single stain-target file of earlier versions (still read when its method matches).
STAIN_TARGET_FILE = "stain_target.json"
_log = logging.getLogger("tilewright")


def stain_target_path(out_dir, method: str) -> Path:
    """Where the cohort's own stain target for ``method`` is saved: one file a method, so a run
    with another method never replaces the target the existing stores were normalized to."""
    return as_path(out_dir) / f"stain_target.{method}.json"


def _stain_target(paths, out_dir: Path, config: TilingConfig, mpps, compute, reference=None,
                  ids=None) -> dict | None:
    """The cohort's stain target, computed once and saved in the output folder (``reference``:
    the target already fitted from ``config.reference``)."""
    from tilewright.run.reference import make_target

    if not config.normalizer:
        return None
    if config.reference is not None:
        return reference or make_target(config.normalizer, config.reference, config).to_dict()
    saved = stain_target_path(out_dir, config.normalizer)
    for candidate in (saved, out_dir / STAIN_TARGET_FILE):  # STAIN_TARGET_FILE: written by earlier versions
        if candidate.is_file():
            d = json.loads(candidate.read_text())
            if d.get("method") == config.normalizer:
                return d
    from tilewright.run.target import cohort_target

    d = cohort_target(paths, config, mpps, compute, ids)
    if d is None:
        return None
    replace_text(saved, json.dumps(d, indent=1))
    return d


def tile_cohort(paths, out_dir, config: TilingConfig | None = None, *, scheduler=None, workers=None,
                progress=True, overwrite: bool = False, mpp: dict | float | None = None,
                on_result=None, on_progress=None, ids=None, root=None) -> list[SlideResult]:
    """Tile every slide into ``out_dir`` and keep the manifest current.

    Parameters
    ----------
    paths : list of path
        Slide files (see :func:`tilewright.run.sources.find_slides` for folders and lists); a
        file named twice is tiled once.
    out_dir : path
        Output folder: one store a slide, ``manifest.csv``/``.parquet``, ``config.toml``.
    config : TilingConfig
    scheduler : str or distributed.Client, optional
        A dask.distributed scheduler address (``tcp://host:8786``) or client. Every worker must
        see the slides and ``out_dir`` at the same absolute paths (checked before any work).
        Default: local dask with ``workers`` processes (1 runs in this process).
    workers : int, optional
        Local worker processes (default 1).
    progress : bool or callable
        True logs a plain line a slide on stderr (``tilewright`` logger) unless ``on_progress`` or
        ``on_result`` is given; a callable gets each finished row.
    overwrite : bool
        Re-tile slides whose store is already complete.
    mpp : float or dict, optional
        Level-0 µm/px override for all slides (float) or per slide id / path (dict).
    on_result : callable, optional
        Called with each finished manifest row (dict).
    on_progress : callable, optional
        Called with every :class:`tilewright.run.events.ProgressEvent` of the run: slides
        planned, tiles read per block (also from dask workers), slides finished. The same counts
        go to ``OUT/progress.json`` (rewritten atomically every few seconds).
    ids : list or dict, optional
        Slide ids chosen by the caller: a list aligned with ``paths``, or a dict path → id (None
        or missing: derived). A slide the folder already holds keeps its id.
    root : path, optional
        The folder derived ids are relative to when file names are shared (see
        :func:`tilewright.run.naming.cohort_ids`; default: the deepest folder holding every path).
        Give the slides' top folder so that ids do not depend on which slides a run lists.

    Returns
    -------
    list of SlideResult
        In input order. Failures are rows with status "failed", never exceptions: a slide that
        raised, whose worker died, or that was interrupted. A run stopped by Ctrl-C / SIGTERM
        raises ``KeyboardInterrupt`` once the manifest names every slide done so far.

    Notes
    -----
    Each finished slide's row is appended to ``manifest.journal.jsonl`` at once and folded into
    the manifest (rewritten atomically) every few seconds and at the end; the manifest keeps the
    rows of slides this run did not reach and of earlier runs into the same folder; a run that
    stops before any slide finished leaves the manifest and ``config.toml`` as they were
    (:mod:`tilewright.run.ledger`). A complete store is kept only when this run would write the
    same one (:mod:`tilewright.run.identity`); that is decided for every store before any task is
    sent, with one metadata read a store (:mod:`tilewright.run.resume`). A few slides per worker
    thread are submitted at a time, so memory and the scheduler's load do not grow with the
    cohort. A slide the folder already holds keeps its id (:func:`tilewright.run.naming.cohort_ids`):
    adding slides never renames a store.
    """
    from tilewright.run.batches import BatchSizer, lost_rows, run_batch
    from tilewright.run.cluster import run_cluster
    from tilewright.run.events import LogProgress, ProgressEvent, ProgressTracker
    from tilewright.run.execute import execute, worker_threads
    from tilewright.run.ledger import Ledger
    from tilewright.run.lock import output_lock
    from tilewright.run.naming import cohort_ids, given_ids
    from tilewright.run.reporting import UNREPORTED, events_from
    from tilewright.run.resume import scan
    from tilewright.run.sources import mpp_for, unique_paths

    from tilewright.run.allocator import steady_heap

    steady_heap()  # this process runs a cohort: large buffers mmapped and returned, heaps trimmed
    config = config or TilingConfig()
    if on_result is None and callable(progress):
        on_result = progress
    out_dir = as_path(out_dir).absolute()  # workers resolve relative paths in their own folder
    try:
        out_dir.mkdir(parents=True, exist_ok=True)  # a prefix in a bucket needs none
    except OSError as exc:
        from tilewright.errors import StoreError

        raise StoreError(f"cannot create the output folder ({exc.strerror or exc}); choose a writable "
                         "folder path", out_dir) from None
    given = given_ids(paths, ids)
    paths = [p if is_url(p) else str(Path(p).absolute()) for p in unique_paths(paths)]
    reference = None
    if config.normalizer and config.reference is not None:  # a bad reference stops the run before any slide
        from tilewright.run.reference import make_target

        reference = make_target(config.normalizer, config.reference, config).to_dict()
    plain = LogProgress() if progress is True and on_progress is None and on_result is None else None
    # ids are chosen once the folder is locked (what it holds cannot change under them)
    with output_lock(out_dir) as held, run_cluster(scheduler, workers, paths, out_dir, ids := cohort_ids(
            paths, out_dir, root=root, given=given(paths))) as (client, stop_name):
        mpps = [mpp_for(mpp, p, i) for p, i in zip(paths, ids)]
        tracker = ProgressTracker(out_dir, len(paths), [on_progress, plain])
        ledger = None

        def compute(fn, args_list, on_error):
            return execute(fn, args_list, scheduler=scheduler, workers=workers, on_error=on_error,
                           stop_name=stop_name, client=client)

        def finish(row):
            extra = row.pop(UNREPORTED, None) or {}  # counts no progress event carried
            ledger.record(row)
            getattr(held, "check", _nothing)()  # a lease in a bucket lost to another run stops here
            for note in filter(None, str(row.get("warnings") or "").split("; ")):
                _log.warning("%s: %s", row.get("slide_id"), note)  # reaches tile-out.log
            tracker(ProgressEvent("slide", row["slide_id"], int(extra.get("tiles") or 0),
                                  float(extra.get("megapixels") or 0.0), row=row))
            if on_result is not None:
                on_result(row)

        state = "interrupted"
        try:
            target = _stain_target(paths, out_dir, config, mpps, lambda fn, a: [
                r for _, r in compute(fn, a, lambda i, exc: None)], reference, ids)  # a slide that fails here fails later
            tracker(ProgressEvent("start", count=len(paths)))
            found, decided = scan(out_dir, paths, ids, config, mpps, target, overwrite)  # one read a store
            ledger = Ledger(out_dir, paths, ids, config.to_toml(), found=found,
                            on_fold=_after_fold(out_dir, config.qc_overlay))
            ledger.started = True
            for i in sorted(decided):  # kept (or refused) here: no task
                finish(decided[i])
            todo = [(paths[i], ids[i], mpps[i]) for i in range(len(paths)) if i not in decided]
            sizer = BatchSizer(worker_threads(client))
            sent = []  # the batches, in the order execute numbers them

            def tasks():  # taken as tasks are submitted: a few per worker thread at a time
                settings, shared_target = config.to_dict(), target
                if client is not None:  # sent to the workers once, not with every task
                    settings, shared_target = client.scatter([settings, target], broadcast=True, hash=False)
                for batch in sizer.batches(todo):
                    sent.append(batch)
                    yield batch, str(out_dir), settings, shared_target, overwrite, stop_name, report

            with events_from(client, tracker) as report:
                results = compute(run_batch, tasks(), lambda k, exc: lost_rows(sent[k], out_dir, exc, overwrite))
                try:
                    for k, rows in results:
                        sent[k] = None  # done: its slides are recorded below
                        for row in rows:
                            sizer.note(row)
                            finish(row)
                finally:
                    results.close()  # running tasks stopped and waited for before the sweep
            state = "finished"
        finally:
            if ledger is not None:
                ledger.write(last=True)
                tracker.close(state)
    rows = ledger.rows()
    return [SlideResult(**{k: r[k] for k in SlideResult.__dataclass_fields__ if k in r}) for r in rows]


def _after_fold(out_dir, qc_page: bool):
    """What runs after each folding of the manifest: ``OUT/qc/index.html`` written from its rows
    (a failure is logged: a page never stops a run), then the heap's free pages given back (a
    folding's buffers grow with the cohort; :mod:`tilewright.run.allocator`)."""
    def after(rows):
        from tilewright.run.allocator import release_free
        from tilewright.run.qc_page import write_qc_page

        if qc_page:
            try:
                write_qc_page(out_dir, rows)
            except Exception as exc:  # noqa: BLE001 - a picture page must not cost the cohort
                _log.warning("qc/index.html not written (%s: %s)", type(exc).__name__, exc)
        release_free()

    return after


def _nothing() -> None:
    return None
