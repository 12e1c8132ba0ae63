"""One slide's task in a cohort run: tile it (or keep its complete store) and return its
manifest row, never raising for a bad slide. :func:`run_one` is what dask workers run for each
slide (:mod:`tilewright.run.batches` sends them in batches); :func:`tilewright.run.cohort.tile_cohort`
plans the run and gathers the rows."""

from __future__ import annotations

import time
from pathlib import Path

from tilewright.errors import TilewrightError
from tilewright.run.config import TilingConfig
from tilewright.run.ledger import INTERRUPTED
from tilewright.run.slide import SlideResult
from tilewright.store.layout import store_path

__all__ = ["run_one", "stop_check", "failure_row", "tile_slide_row"]


def run_one(path: str, out_dir: str, config: dict, slide_id: str, mpp: float | None,
            target: dict | None, overwrite: bool, stop_name: str | None = None, report=None, *,
            stop=None) -> dict:
    """Tile one slide and return its manifest row; never raises for a bad slide.

    The work done for each slide on dask workers (arguments are plain, picklable values; a run
    sends them in batches, :func:`tilewright.run.batches.run_batch`). ``stop_name`` names a
    ``distributed.Event``: once set, the slide stops at its next block (its temporary store
    removed) and its row says it was interrupted (``stop``: that event's check, shared by the
    slides of a batch). ``report`` gets the slide's progress events: a callable (in this process)
    or the name of a dask event topic (on a worker; see
    :func:`tilewright.run.reporting.slide_reporter`).
    """
    from tilewright.run.reporting import UNREPORTED, slide_reporter

    from tilewright.run.allocator import steady_heap

    steady_heap()  # this process tiles slides: memory that does not grow with them (run/allocator.py)
    t0 = time.perf_counter()
    cfg = TilingConfig.from_dict(config)
    final = store_path(out_dir, slide_id)
    stop = stop or stop_check(stop_name)
    on_plan, on_tiles, finish = slide_reporter(report, slide_id)

    def on_block(n):
        on_tiles(n)
        stop()

    try:
        stop()
        normalizer = None
        if target is not None:
            from tilewright.stain.registry import transfer_from_dict

            normalizer = transfer_from_dict(target)
        done = None if overwrite else _complete_row(final, path, slide_id, cfg, mpp, normalizer)
        if done is not None:
            return done
        res = tile_slide_row(path, final, cfg, slide_id, mpp, normalizer, on_block, on_plan)
    except KeyboardInterrupt as exc:
        if stop_name is None:
            raise  # in this process: Ctrl-C stops the run
        res = SlideResult(slide_id, path, "failed", INTERRUPTED)  # on a worker: the run was stopped
        del exc
    except TilewrightError as exc:
        res = SlideResult(slide_id, path, "failed", exc.one_line())
    except MemoryError:
        res = SlideResult(slide_id, path, "failed", f"{path}: out of memory; lower --workers or --threads")
    except Exception as exc:  # a bug or an unexpected library error: record it, keep the cohort going
        res = SlideResult(slide_id, path, "failed", f"{path}: unexpected {type(exc).__name__}: "
                          + " ".join(str(exc).split())[:300])
    res.seconds = round(time.perf_counter() - t0, 3)
    row = res.to_row()
    tiles, megapixels = finish()
    if tiles:  # no event reported them (a short slide on a worker): they travel with the row
        row[UNREPORTED] = {"tiles": tiles, "megapixels": megapixels}
    return row


def stop_check(stop_name):
    """A callable raising :class:`~tilewright.interrupts.Stopped` once the run's stop event is set
    (polled at most once a second, then raising at every call); a no-op without one."""
    if stop_name is None:
        return lambda *_: None
    from distributed import Event

    from tilewright.interrupts import Stopped

    event = Event(stop_name)
    state = {"last": 0.0, "stopped": False}

    def check(*_):
        now = time.monotonic()
        if not state["stopped"] and now - state["last"] >= 1.0:
            state["last"] = now
            state["stopped"] = event.is_set()
        if state["stopped"]:
            raise Stopped()

    return check


def failure_row(path, slide_id, exc) -> dict:
    """The manifest row of a slide whose task raised outside :func:`run_one` (its worker died)."""
    name = type(exc).__name__
    if name == "KilledWorker":
        reason = (f"{path}: the worker tiling this slide died (killed, or out of memory); lower "
                  "--workers or --threads, or run again to retry")
    else:
        reason = f"{path}: unexpected {name}: " + " ".join(str(exc).split())[:300]
    return SlideResult(slide_id, str(path), "failed", reason).to_row()


def tile_slide_row(path, final, cfg, slide_id, mpp, normalizer, progress=None, on_plan=None) -> SlideResult:
    from tilewright.run.slide import tile_slide

    res = tile_slide(path, final, cfg, slide_id=slide_id, mpp=mpp, target=normalizer, progress=progress,
                     on_plan=on_plan)
    if res.n_tiles == 0:
        from tilewright.store.manifest_row import skip_status
        from tilewright.store.reader import open_store

        res.status, res.error = skip_status(open_store(res.store).attrs)
    return res


def _complete_row(final: Path, path: str, slide_id: str, cfg: TilingConfig, mpp, target) -> dict | None:
    """Manifest row of an already complete store this run would write the same, or None.

    "The same" is the resume identity (:mod:`tilewright.run.identity`): settings, source file,
    level-0 µm/px, stain target. A complete store that differs is not silently kept or replaced:
    the slide fails with a reason saying how to proceed, and the store stays as it is
    (:func:`tilewright.run.resume.resume_row`; a cohort run decides most slides before they become
    tasks, :func:`tilewright.run.resume.scan`).
    """
    from tilewright.run.identity import RunIdentity
    from tilewright.run.resume import resume_row
    from tilewright.store.metadata import store_attrs

    attrs = store_attrs(final)
    if attrs is None:
        return None
    return resume_row(final, attrs, path, slide_id, cfg, mpp, RunIdentity(cfg, target))
