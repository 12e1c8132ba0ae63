"""A cohort's inventory before tiling: what each slide is, and what tiling it would give.

:func:`plan_cohort` opens every slide (headers only), reads its thumbnail, masks tissue and plans
tiles at the given settings, without reading a tile: one row a slide (backend, level-0 µm/px and
where it came from, pyramid levels, colour profile, tissue area, planned tiles, the pyramid level
the tiles would come from, estimated bytes for every codec), with totals and per-site summaries
(:mod:`tilewright.run.inventory_summary`). Slides are surveyed on dask like a tiling run, in
batches, so a 10,000-slide cohort costs what its thumbnails cost.
"""

from __future__ import annotations

import os
import time

import numpy as np

from tilewright.errors import TilewrightError
from tilewright.run.config import TilingConfig
from tilewright.run.inventory_summary import CODECS

__all__ = ["plan_cohort", "survey_slide", "BYTES_PER_RAW", "CODECS"]

#: Bytes a stored tile takes, as a share of its raw bytes (T x T x 3), by codec: measured on H&E
#: tiles at 0.5 µm/px (the bench slide and the demo tiles, `make bench`; docs/guide/formats.md, Store layout). JPEG
#: is for quality 90; other qualities need ``sample_tiles`` (measured on the slide's own tiles).
BYTES_PER_RAW = {"lz4": 0.86, "zstd": 0.77, "zlib": 0.69, "none": 1.0, "webp": 0.48, "jpeg": 0.145}

#: Slides a dask task surveys (few tasks of a few slides keep the scheduler's cost per slide small).
BATCH = 16


def _format(path: str) -> str:
    from tilewright.store.layout import SLIDE_SUFFIXES

    name = os.path.basename(path.rstrip("/")).lower()
    if os.path.isdir(path):
        return "dicom"
    return next((s.lstrip(".") for s in SLIDE_SUFFIXES if name.endswith(s)), os.path.splitext(name)[1].lstrip("."))


def survey_slide(path: str, config: dict, slide_id: str, mpp: float | None = None, sample_tiles: int = 0) -> dict:
    """One slide's inventory row; never raises for a bad slide (its row says why).

    Parameters
    ----------
    path : str
        A slide file or a DICOM series folder.
    config : dict
        ``TilingConfig.to_dict()``: the settings tiles would be cut with.
    slide_id : str
    mpp : float, optional
        A level-0 µm/px override (``--source-mpp``, ``--mpp-table``).
    sample_tiles : int
        Tiles read (spread over the plan) to measure each codec's bytes on this slide's own tiles;
        0 (default) reads no tile and uses :data:`BYTES_PER_RAW`.
    """
    from tilewright.slide.open import open as open_slide
    from tilewright.store.provenance import source_size
    from tilewright.tissue.mask import tissue_mask
    from tilewright.tissue.plan import plan_tiles

    t0 = time.perf_counter()
    cfg = TilingConfig.from_dict(config)
    row = {"slide_id": slide_id, "source": str(path), "status": "ok", "error": "", "format": _format(str(path))}
    try:
        row["file_bytes"] = int(source_size(path))
        with open_slide(path, mpp=mpp, verify=False, colour_profile=cfg.colour_profile) as slide:
            h0, w0 = slide.dimensions
            view = cfg.view(slide)
            row.update(backend=slide.backend, width=int(w0), height=int(h0), level0_mpp=float(slide.mpp),
                       mpp_origin=str(slide.mpp_origin or ""),
                       objective=slide.objective, levels=len(slide.levels),
                       downsamples=",".join(f"{lv.downsample:g}" for lv in slide.levels),
                       colour_profile=slide.colour.label, source_level=int(view.source_level),
                       resampled=bool(abs(view.scale - slide.levels[view.source_level].downsample) > 1e-9))
            thumbnail = slide.thumbnail(cfg.mask_mpp)
            mask = tissue_mask(thumbnail, mpp=float(getattr(thumbnail, "mpp", cfg.mask_mpp)), **cfg.mask_options())
            plan = plan_tiles(view, mask, tile=cfg.tile, stride=cfg.stride, min_tissue=cfg.min_tissue,
                              max_tiles=cfg.max_tiles, seed=cfg.seed, max_ink=cfg.max_ink)
            area = np.count_nonzero(mask.array) * (mask.mpp / 1000.0) ** 2
            row.update(tissue_mm2=float(area), tissue_fraction=float(np.mean(mask.array)) if mask.array.size else 0.0,
                       planned_tiles=len(plan), warnings="; ".join(mask.warnings))
            ratios = _measured_ratios(view, plan, cfg, sample_tiles) if sample_tiles else _table_ratios(cfg)
    except TilewrightError as exc:
        row.update(status="failed", error=exc.one_line())
        ratios = {}
    except Exception as exc:  # noqa: BLE001 - a bug or a library error: the row says so, the cohort goes on
        row.update(status="failed", error=f"{path}: unexpected {type(exc).__name__}: " + " ".join(str(exc).split())[:300])
        ratios = {}
    raw = 3 * cfg.tile * cfg.tile
    for codec in CODECS:
        r = ratios.get(codec)
        row[f"bytes_{codec}"] = None if r is None else int(round(row.get("planned_tiles", 0) * raw * r))
    row["seconds"] = round(time.perf_counter() - t0, 4)
    return row


def _table_ratios(cfg: TilingConfig) -> dict:
    """:data:`BYTES_PER_RAW`; JPEG only at quality 90 (the quality it was measured at)."""
    return {c: r for c, r in BYTES_PER_RAW.items() if c != "jpeg" or int(cfg.quality) == 90}


def _measured_ratios(view, plan, cfg: TilingConfig, n: int) -> dict:
    """Each codec's bytes over raw bytes on ``n`` of the slide's planned tiles (spread over it)."""
    from tilewright.store.chunk_codec import ChunkCodec
    from tilewright.store.compression import tile_codecs
    from tilewright.tissue.plan import spread_sample

    if not len(plan):
        return _table_ratios(cfg)
    idx = spread_sample(plan.yx, min(int(n), len(plan)), plan.stride, cfg.seed)
    tiles = [view.read(int(y), int(x), cfg.tile, cfg.tile) for y, x in plan.yx[idx]]
    raw = sum(t.nbytes for t in tiles)
    out = {}
    for codec in CODECS:
        spec = tile_codecs(codec, cfg.quality)
        chain = [spec["serializer"].to_dict()] + ([spec["compressors"].to_dict()] if spec["compressors"] else [])
        enc = ChunkCodec.for_chain(chain)
        out[codec] = sum(len(enc.encode(np.ascontiguousarray(t))) for t in tiles) / raw
    return out


def survey_batch(items: list, config: dict, sample_tiles: int = 0) -> list[dict]:
    """:func:`survey_slide` over ``items`` (``(path, slide_id, mpp)`` tuples): one dask task."""
    return [survey_slide(p, config, sid, m, sample_tiles) for p, sid, m in items]


def plan_cohort(source, config: TilingConfig | None = None, *, out_dir=None, sites=None, site_column: str = "site",
                mpp=None, sample_tiles: int = 0, scheduler=None, workers=None, on_progress=None):
    """The inventory of a cohort at the given settings, without tiling it.

    Parameters
    ----------
    source : path or list of paths
        What ``tile-out`` takes as SOURCE (a folder, a list file, a slide), or slide paths.
    config : TilingConfig, optional
        The settings tiles would be cut with (µm/px, tile, stride, min_tissue, max_tiles, mask
        options, colour profile; regions are not applied). Default ``TilingConfig()``.
    out_dir : path, optional
        The folder the cohort will be tiled into: ids are then those a run into it gives (a
        slide it already holds keeps its id). Default: ids of a fresh folder.
    sites : path, DataFrame or dict, optional
        A metadata table with a ``slide_id`` column and ``site_column`` (CSV/TSV/Parquet), or a
        dict slide_id → site: per-site summaries.
    site_column : str
    mpp : float or dict, optional
        Level-0 µm/px overrides, as for :func:`tilewright.tile_cohort`.
    sample_tiles : int
        Read this many tiles a slide to measure codec bytes on them (default 0: no tile read;
        bytes from :data:`BYTES_PER_RAW`, measured on H&E tiles).
    scheduler, workers :
        Where to run (see :func:`tilewright.run.execute.execute`): a dask scheduler address, or
        local worker processes.
    on_progress : callable, optional
        Called with ``(slides done, slides total)`` as batches finish.

    Returns
    -------
    CohortPlan
        ``.slides`` (one row a slide), ``.totals``, ``.sites``, ``.write(folder)``, ``.summary()``.
    """
    from pathlib import Path

    from tilewright.run.execute import execute
    from tilewright.run.inventory_summary import CohortPlan
    from tilewright.run.naming import cohort_ids
    from tilewright.run.sources import mpp_for, slide_list, unique_paths

    config = config or TilingConfig()
    if isinstance(source, (str, os.PathLike)):
        found = slide_list(source)
        paths, given, root = found.paths, found.ids, found.root
    else:
        paths, given, root = list(source), None, None
    paths = [str(Path(p).absolute()) for p in unique_paths(paths)]  # slide_list's paths are unique already
    # ids as a run into out_dir would give them (a slide it holds keeps its id)
    ids = cohort_ids(paths, out_dir, root=root, given=given if given is not None and len(given) == len(paths) else None)
    items = [(p, sid, mpp_for(mpp, p, sid)) for p, sid in zip(paths, ids)]
    batches = [items[i:i + BATCH] for i in range(0, len(items), BATCH)]
    rows: list = [None] * len(batches)
    t0 = time.perf_counter()
    done = 0
    cfg = config.to_dict()
    for i, result in execute(survey_batch, [(b, cfg, int(sample_tiles)) for b in batches], scheduler=scheduler,
                             workers=workers, on_error=lambda i, exc: [_failed(it, exc) for it in batches[i]]):
        rows[i] = result
        done += len(result)
        if on_progress is not None:
            on_progress(done, len(items))
    flat = [r for batch in rows for r in (batch or [])]
    return CohortPlan(flat, config, sites=sites, site_column=site_column, seconds=time.perf_counter() - t0)


def _failed(item, exc) -> dict:
    """The row of a slide whose batch's worker died."""
    path, sid, _ = item
    return {"slide_id": sid, "source": path, "status": "failed",
            "error": f"{path}: the worker surveying this slide died ({type(exc).__name__}); run again"}
