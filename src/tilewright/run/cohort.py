"""``tile_cohort``: every slide of a cohort on dask, locally or on a dask.distributed cluster."""

from __future__ import annotations

import json
import os
import time
from pathlib import Path

from tilewright.errors import TilewrightError
from tilewright.run.config import TilingConfig
from tilewright.run.slide import SlideResult
from tilewright.store.layout import slide_ids, store_path

__all__ = ["tile_cohort", "run_one", "STAIN_TARGET_FILE"]


STAIN_TARGET_FILE = "stain_target.json"


def run_one(path: str, out_dir: str, config: dict, slide_id: str, mpp: float | None,
            target: dict | None, overwrite: bool) -> dict:
    """Tile one slide and return its manifest row; never raises for a bad slide.

    This is the unit of work sent to dask workers (arguments are plain, picklable values).
    """
    from tilewright.run.allocator import steady_heap

    steady_heap()  # this process tiles slides: memory that does not grow with them (run/allocator.py)
    t0 = time.perf_counter()
    cfg = TilingConfig.from_dict(config)
    final = store_path(out_dir, slide_id)
    try:
        done = None if overwrite else _complete_row(final, path, slide_id, cfg)
        if done is not None:
            return done
        normalizer = None
        if target is not None:
            from tilewright.stain.registry import normalizer_from_dict

            normalizer = normalizer_from_dict(target)
        res = tile_slide_row(path, final, cfg, slide_id, mpp, normalizer)
    except TilewrightError as exc:
        res = SlideResult(slide_id, path, "failed", exc.one_line())
    except MemoryError:
        res = SlideResult(slide_id, path, "failed", f"{path}: out of memory; lower --workers or --threads")
    except Exception as exc:  # a bug or an unexpected library error: record it, keep the cohort going
        res = SlideResult(slide_id, path, "failed", f"{path}: unexpected {type(exc).__name__}: "
                          + " ".join(str(exc).split())[:300])
    res.seconds = round(time.perf_counter() - t0, 3)
    return res.to_row()


def tile_slide_row(path, final, cfg, slide_id, mpp, normalizer) -> SlideResult:
    from tilewright.run.slide import tile_slide

    res = tile_slide(path, final, cfg, slide_id=slide_id, mpp=mpp, target=normalizer)
    if res.n_tiles == 0:
        res.status = "skipped"
        res.error = "no tile met the tissue criteria (blank slide or too little tissue)"
    return res


#: Settings that do not change what a store contains. Lossless compression gives the same pixels
#: whichever codec, and each store names its codec in its metadata, so a cohort may mix them; a
#: lossy codec (and its quality) does change the tiles: see ``tile_identity`` in _complete_row.
_RUN_ONLY = ("threads", "verify_jpeg", "qc_overlay", "compression", "quality")


def _complete_row(final: Path, path: str, slide_id: str, cfg: TilingConfig) -> dict | None:
    """Manifest row of an already complete store made with the same settings, or None.

    A complete store made with other settings is not silently kept or replaced: the slide fails
    with a reason saying how to proceed.
    """
    from tilewright.errors import ConfigError
    from tilewright.store.compression import tile_identity
    from tilewright.store.reader import is_complete, open_store

    if not is_complete(final):
        return None
    a = open_store(final).attrs
    old, new = dict(a.get("config") or {}), cfg.to_dict()
    changed = sorted(k for k in set(old) | set(new) if k not in _RUN_ONLY and old.get(k) != new.get(k))
    if tile_identity(old) != tile_identity(new):  # lossy tiles are not those of another codec family
        changed.append("compression")
        old, new = {**old, "compression": tile_identity(old)}, {**new, "compression": tile_identity(new)}
    if changed:
        detail = ", ".join(f"{k} {old.get(k)!r} -> {new.get(k)!r}" for k in changed[:4])
        raise ConfigError(f"a complete store made with other settings exists ({detail}); pass --overwrite "
                          "to re-tile or choose another output folder", final)
    n = int(a.get("n_tiles", 0))
    return SlideResult(slide_id, path, "ok" if n else "skipped",
                       "" if n else "no tile met the tissue criteria (blank slide or too little tissue)",
                       n, a.get("mpp_source"), a.get("objective"), a.get("source_level"), 0.0,
                       str(final)).to_row()


def _stain_target(paths, out_dir: Path, config: TilingConfig, mpps, compute) -> dict | None:
    """The cohort's stain target, computed once and saved in the output folder."""
    from tilewright.run.reference import make_target

    if not config.normalizer:
        return None
    if config.reference is not None:
        return make_target(config.normalizer, config.reference).to_dict()
    saved = out_dir / STAIN_TARGET_FILE
    if saved.exists():
        d = json.loads(saved.read_text())
        if d.get("method") == config.normalizer:
            return d
    from tilewright.run.target import cohort_target

    d = cohort_target(paths, config, mpps, compute)
    if d is None:
        return None
    tmp = saved.with_suffix(".tmp")
    tmp.write_text(json.dumps(d, indent=1))
    os.replace(tmp, saved)
    return d


def tile_cohort(paths, out_dir, config: TilingConfig | None = None, *, scheduler=None, workers=None,
                progress=True, overwrite: bool = False, mpp: dict | float | None = None,
                on_result=None) -> list[SlideResult]:
    """Tile every slide into ``out_dir`` and write the manifest.

    Parameters
    ----------
    paths : list of path
        Slide files (see :func:`tilewright.run.sources.find_slides` for folders and lists).
    out_dir : path
        Output folder: one store a slide, ``manifest.csv``/``.parquet``, ``config.toml``.
    config : TilingConfig
    scheduler : str or distributed.Client, optional
        A dask.distributed scheduler address (``tcp://host:8786``) or client. Default: local dask
        with ``workers`` processes (1 runs in this process).
    workers : int, optional
        Local worker processes (default 1).
    progress : bool or callable
        True shows progress on stderr; a callable gets each finished row.
    overwrite : bool
        Re-tile slides whose store is already complete.
    mpp : float or dict, optional
        Level-0 µm/px override for all slides (float) or per slide id / path (dict).
    on_result : callable, optional
        Called with each finished manifest row (dict).

    Returns
    -------
    list of SlideResult
        In input order. Failures are rows with status "failed", never exceptions.
    """
    from tilewright.run.execute import execute
    from tilewright.run.lock import output_lock
    from tilewright.store.cohort import write_manifest

    config = config or TilingConfig()
    if on_result is None and callable(progress):
        on_result = progress
    elif on_result is None and progress:
        from tilewright.cli.progress import SlideProgress

        on_result = SlideProgress(len(paths))
    out_dir = Path(out_dir)
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        from tilewright.errors import StoreError

        raise StoreError(f"cannot create the output folder ({exc.strerror or exc}); choose a writable "
                         "folder path", out_dir) from None
    paths = [str(p) for p in paths]
    ids = slide_ids(paths)
    mpps = [_mpp_for(mpp, p, i) for p, i in zip(paths, ids)]
    with output_lock(out_dir):
        (out_dir / "config.toml").write_text(config.to_toml(), encoding="utf-8")
        rows: dict[int, dict] = {}

        def done(i, row):
            rows[i] = row
            if on_result is not None:
                on_result(row)

        def compute(fn, args_list):
            return execute(fn, args_list, scheduler=scheduler, workers=workers)

        try:
            target = _stain_target(paths, out_dir, config, mpps, lambda fn, a: [r for _, r in compute(fn, a)])
            args = [(p, str(out_dir), config.to_dict(), sid, m, target, overwrite)
                    for p, sid, m in zip(paths, ids, mpps)]
            for i, row in execute(run_one, args, scheduler=scheduler, workers=workers):
                done(i, row)
        finally:
            final_rows = []
            for i, (p, sid) in enumerate(zip(paths, ids)):
                final_rows.append(rows.get(i) or SlideResult(
                    sid, p, "failed", "interrupted before this slide finished; run again to resume").to_row())
            write_manifest(out_dir, final_rows)
    return [SlideResult(**{k: r[k] for k in SlideResult.__dataclass_fields__}) for r in final_rows]


def _mpp_for(mpp, path, slide_id):
    if mpp is None or isinstance(mpp, (int, float)):
        return mpp
    for key in (slide_id, path, os.path.basename(path)):
        if key in mpp:
            return float(mpp[key])
    return None
