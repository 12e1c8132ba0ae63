"""``tile_slide``: one slide in, one complete tile store out."""

from __future__ import annotations

import os
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import asdict, dataclass
from types import SimpleNamespace
from pathlib import Path

import numpy as np

from tilewright.errors import TilewrightError
from tilewright.location.objpath import as_path
from tilewright.location.url import is_url
from tilewright.run.config import TilingConfig
from tilewright.run.identity import target_digest
from tilewright.run.stain_bind import bind_normalizer
from tilewright.store.manifest_row import stain_columns
from tilewright.run.stain_record import stain_record
from tilewright.run.tile_rows import per_tile_arrays
from tilewright.store.layout import slide_ids
from tilewright.store.metadata import folder_bytes
from tilewright.store.writer import StoreWriter, remove_partials

__all__ = ["SlideResult", "tile_slide"]


@dataclass
class SlideResult:
    """What happened to one slide (one manifest row)."""

    slide_id: str
    source: str
    status: str  # "ok" | "failed" | "skipped" | "all-ink" (no tile: ink took the tissue; store/manifest_row.py)
    error: str = ""
    n_tiles: int = 0
    mpp_source: float | None = None
    objective: float | None = None
    source_level: int | None = None
    seconds: float = 0.0
    store: str = ""
    colour_profile: str = ""  # ColourInfo.label: "none", the applied profile, or "... (ignored)"
    warnings: str = ""  # "; "-joined "code: reason" messages (see tissue_mask, fit_source_checked)
    source_sha256: str = ""  # the source's full SHA-256 (TilingConfig.source_digest = "full"), else ""
    mpp_origin: str = ""  # where mpp_source (the level-0 µm/px) came from: "aperio", "override", ...
    kept: bool = False  # a complete store of an earlier run, kept as it is (seconds: that run's)
    stain_check: str = ""  # the normalized sample against the target: ok, off-target, not-normalized (run/stain_bind.py)
    stain_delta_e_raw: float | None = None  # CIEDE2000 of the sample's mean tissue colour to the target's, raw
    stain_delta_e: float | None = None  # ... and normalized
    tissue_mm2: float | None = None  # tissue area the mask found, in mm²
    bytes: int = 0  # the store's size on disk, when this run wrote it

    def to_row(self) -> dict:
        return asdict(self)


def _tile_arrays(view, plan, config, bind, writer, progress):
    """Read planned tiles block by block, normalize, score, compress and append whole shards.

    Reader threads read, normalize, score and compress each block (OpenCV, numpy and the codecs
    release the GIL); this thread only gathers blocks into shards and writes the files, so on
    several cores the work on the next blocks overlaps the writing of the previous ones.
    """
    from tilewright.run.blocks import block_order, iter_tile_blocks
    from tilewright.tissue.sharpness import sharpness

    order, groups = block_order(plan.yx, config.tile, config.block)
    yx = plan.yx[order]
    tissue = plan.tissue[order]
    region = plan.region[order] if getattr(plan, "region", None) is not None else None
    scale = view.scale
    min_sharp = config.min_sharpness

    def prepare(tiles):
        bound = None if bind is None else bind.result()[0]  # fitted beside the first reads
        if bound is not None:
            tiles = bound.transform(tiles, out=tiles)
        sharp = sharpness(tiles)
        keep = None if min_sharp is None else np.flatnonzero(sharp >= min_sharp)
        if keep is not None and len(keep) < len(tiles):
            tiles, sharp = tiles[keep], sharp[keep]
        encoded = writer.encode(tiles)
        return (None if encoded is not None else tiles), sharp, keep, encoded  # pixels freed once encoded

    counts = {"read": 0, "kept": 0}
    for positions, (tiles, sharp, keep, encoded) in iter_tile_blocks(
            view, yx, config.tile, block=config.block, threads=config.threads, process=prepare,
            reuse=writer.encodes, groups=groups):  # compressed in the reader: its buffer is free for the next block
        pos = positions if keep is None else positions[keep]
        counts["read"] += len(positions)
        counts["kept"] += len(pos)
        if len(pos):
            writer.append(tiles, yx[pos], np.rint(yx[pos] * scale).astype(np.int64), tissue[pos], sharp,
                          None if region is None else region[pos], encoded=encoded)
        if progress is not None:
            progress(len(positions))
    if counts["read"] != len(yx):
        from tilewright.errors import StoreError

        raise StoreError(f"{counts['read']} of {len(yx)} planned tiles were read; nothing was committed; "
                         "run again", writer.final)
    return counts["kept"]


def tile_slide(path, out, config: TilingConfig | None = None, *, slide_id: str | None = None,
               mpp: float | None = None, target=None, regions=None, overwrite: bool = True,
               progress=None, on_plan=None) -> SlideResult:
    """Tile one slide into a complete zarr store.

    Open → tissue mask → tile plan → read in large blocks → normalize with one slide-level stain
    estimate → write whole shards. The store is written under a temporary name and renamed when
    complete, with its ``complete`` attribute written last; on any error nothing is left behind.

    Parameters
    ----------
    path : path
        Slide file (or an object-store URL).
    out : path
        Store path (``*.zarr``) or a folder, in which ``<slide_id>.zarr`` is written; a URL
        (``s3://bucket/out/``) writes the store into the bucket, made complete by its marker
        (see :mod:`tilewright.store.writer`).
    config : TilingConfig
    slide_id : str, optional
        Defaults to the file name without extension(s).
    mpp : float, optional
        Level-0 µm/px override for files that lack or misstate it.
    target : normalizer, optional
        A fitted stain normalizer (the cohort's target). Default: from ``config.reference``; when
        that is unset too, the slide's own stain estimate (normalization then standardizes only
        the stain intensity range).
    regions : RegionMap, optional
        Tissue-type regions; tiles are kept where ``config.keep`` classes cover ``min_region``.
    overwrite : bool
        Replace an existing store.
    progress : callable, optional
        Called with the number of tiles done after each block.
    on_plan : callable, optional
        Called once, before any tile is read, with the number of planned tiles and the source
        megapixels (level-0 pixels) one tile covers.

    Notes
    -----
    A process that tiles many slides should call :func:`tilewright.run.allocator.steady_heap`
    once (``tile-out`` and :func:`tile_cohort` do): with glibc's default malloc thresholds, peak
    memory grows with slide size through heap fragmentation. It is not done here because it
    changes the whole process's allocator.

    Returns
    -------
    SlideResult
        Raises on failure (a :class:`TilewrightError` for expected problems).
    """
    from tilewright.run.allocator import release_free
    from tilewright.slide.open import open as open_slide

    config = config or TilingConfig()
    t0 = time.perf_counter()
    path = str(path) if is_url(path) else Path(path)  # a slide in a bucket stays a URL
    slide_id = slide_id or slide_ids([path])[0]
    out = as_path(out)
    final = out if out.suffix == ".zarr" else out / f"{slide_id}.zarr"
    remove_partials(final)
    with open_slide(path, mpp=mpp, verify=config.verify_jpeg, colour_profile=config.colour_profile) as slide:
        view = config.view(slide)
        survey = _survey(slide, view, config, slide_id, path, regions, target)
        plan, attrs = survey.plan, survey.attrs
        attrs["mpp_source_from"] = "file" if mpp is None else "given"  # a resumed run trusts "file" on an unchanged digest
        release_free()  # the survey's temporaries are gone: start the tile pipeline on a clean heap
        if on_plan is not None:
            on_plan(len(plan), (config.tile * view.scale) ** 2 / 1e6)
        try:
            with StoreWriter(final, len(plan), config.tile, shard_tiles=config.shard_tiles,
                             compression=config.compression, quality=config.quality,
                             with_region=attrs["regions"] is not None, overwrite=overwrite) as writer, \
                    ThreadPoolExecutor(2, thread_name_prefix="tilewright-aside") as pool:
                # the slide's stain estimate is fitted while the first blocks are read and decoded
                bind = (pool.submit(bind_normalizer, view, plan, config, target, path, survey.glass)
                        if config.normalizer else None)
                record = (pool.submit(stain_record, view, plan, config, survey.glass)
                          if config.estimate_stains else None)
                # the slide-sized pictures go to the store, the QC picture is drawn and the source is
                # digested beside the tile pipeline; the pictures are freed once written
                aside = pool.submit(_aside, writer, survey.maps, survey.draw, survey.mask, plan, path, slide_id,
                                    config.source_digest == "full")
                survey.maps = survey.draw = survey.mask = None
                kept = _tile_arrays(view, plan, config, bind, writer, progress)
                bound, used, stain_notes, attrs["stain_outcome"] = (None, None, [], None) if bind is None else bind.result()
                attrs["normalizer"] = None if bound is None else bound.to_dict()
                attrs["stain_target"] = target_digest(used)  # what a resumed run must match
                attrs["warnings"].extend(stain_notes)
                png, digests = aside.result()
                attrs["source"].update(digests)
                arrays = None
                if record is not None:  # the slide's stain estimates, for normalizing when reading
                    pixels, attrs["stain_estimates"], attrs["stain_glass"], attrs["stain_sample_yx"] = record.result()
                    arrays = {"stain_sample": pixels}
                writer.commit(attrs, overwrite=overwrite, expected=kept, arrays=arrays,
                              per_tile=per_tile_arrays(plan, writer.stored_yx, attrs.get("regions")))
                n = writer.n
        except BaseException:  # nothing half-written survives, whatever stopped the slide
            remove_partials(final)
            raise
        if png is not None:
            _write_png(png, final.parent / "qc" / f"{slide_id}.png", slide_id)
        return SlideResult(slide_id=slide_id, source=str(path), status="ok", n_tiles=int(n),
                           mpp_source=float(slide.mpp), objective=slide.objective,
                           source_level=int(view.source_level), seconds=round(time.perf_counter() - t0, 3),
                           store=str(final), colour_profile=slide.colour.label,
                           warnings="; ".join(attrs["warnings"]), source_sha256=attrs["source"].get("sha256") or "",
                           mpp_origin=slide.mpp_origin or "", tissue_mm2=attrs["tissue_mm2"],
                           bytes=folder_bytes(final), **stain_columns(attrs))


def _survey(slide, view, config, slide_id, path, regions, target) -> SimpleNamespace:
    """Everything decided at thumbnail resolution, before any tile is read.

    Reads the thumbnail once (mask, glass colour, store pictures and QC picture share it), masks
    tissue, plans tiles and measures the glass colour. Returns the plan, the glass colour,
    the store attributes, the pictures the store keeps (``maps``) and what the QC picture is drawn
    from (``draw``: its own small copy of the thumbnail; ``mask``, summed-area cache dropped); the caller hands these to
    :func:`_aside` and drops them, so memory while tiles are read does not grow with the slide.
    """
    from tilewright.tissue.mask import tissue_mask
    from tilewright.tissue.plan import plan_tiles
    import tilewright

    # the thumbnail's pixels may be a reused level's (7.78 µm/px for 8 asked): the mask, the store's
    # pictures and the QC picture all take that true µm/px (thumbnail.mpp), never config.mask_mpp
    thumbnail = slide.thumbnail(config.mask_mpp)
    mask = tissue_mask(SimpleNamespace(thumbnail=lambda mpp: thumbnail, path=slide.path), mpp=_true_mpp(thumbnail, config.mask_mpp),
                       **config.mask_options())
    keep = absent = None
    if regions is not None and not config.keep:
        from tilewright.errors import ConfigError

        raise ConfigError("regions were given but config.keep names no class to keep; set keep= (the region "
                          "classes whose tiles to keep)", path)
    if config.keep:
        regions, keep, absent = _regions_for(regions, config, slide_id, slide, path)
    plan = plan_tiles(view, mask, tile=config.tile, stride=config.stride, min_tissue=config.min_tissue,
                      regions=regions if config.keep else None, keep=keep,
                      min_region=config.min_region, max_tiles=config.max_tiles, seed=config.seed,
                      max_ink=config.max_ink)
    glass = _glass(thumbnail, mask) if config.normalizer or config.estimate_stains else None
    mask_arr = np.asarray(mask.array, dtype=bool)
    attrs = {
        "slide_id": slide_id,
        "source": {"path": str(path) if is_url(path) else str(path.resolve()), "size": _source_size(path),
                   "stamp": _source_stamp(path),
                   "digest": None, "backend": slide.backend},  # digest: computed aside (see _aside)
        "mpp": float(view.mpp), "mpp_source": float(slide.mpp), "mpp_origin": slide.mpp_origin,
        "objective": slide.objective,
        "source_level": int(view.source_level), "scale": float(view.scale),
        "from_level0": bool(config.from_level0),  # every tile computed from level 0, whatever the pyramid
        "dimensions": list(slide.dimensions), "shape": list(view.shape),
        "tile": int(config.tile), "stride": int(config.step), "mask_mpp": float(mask.mpp),
        "tissue_fraction": float(mask_arr.mean()) if mask_arr.size else 0.0,
        "tissue_mm2": round(float(mask_arr.sum()) * float(mask.mpp) ** 2 / 1e6, 4),
        "normalizer": None,  # bound while the first tiles are read (see tile_slide)
        "regions": None if (regions is None or not config.keep) else _region_info(regions, config, absent),
        "tissue_mask": _jsonable(mask.to_dict()),
        "warnings": list(mask.warnings),  # what the user should know; the stain's note joins later
        "plan": _jsonable(getattr(plan, "params", {})),
        "order": "blocks of config.block target px, row-major; row-major inside a block",
        "config": _jsonable(config.to_dict()),
        "library_version": tilewright.__version__,
        "colour_profile": _colour_provenance(slide),
    }
    mask.clear_cache()
    maps = (thumbnail[: mask_arr.shape[0], : mask_arr.shape[1]], mask_arr, {"ink": np.asarray(mask.ink, dtype=bool)})
    draw = None
    if config.qc_overlay:  # the picture's own small copy: the thumbnail is not kept for it
        from tilewright.tissue.overlay import overlay_base

        draw = overlay_base(thumbnail[..., :3], mask.mpp)
    return SimpleNamespace(plan=plan, glass=glass, attrs=attrs, maps=maps, draw=draw, mask=mask)


def _colour_provenance(slide) -> dict:
    """Whether the slide's ICC profile was applied, its description, SHA-256, ... (store attribute)."""
    transform = getattr(slide, "colour_transform", None)
    return transform.provenance() if transform is not None else slide.colour.to_dict()


def _aside(writer, maps, draw, mask, plan, path, slide_id, full_digest=False):
    """Work beside the tile pipeline: the store's pictures, the QC picture, the source digests.

    ``maps`` are :meth:`StoreWriter.write_maps`'s arguments; ``draw`` is the QC picture's base
    ``(rgb, mpp)`` (see :func:`tilewright.tissue.overlay.overlay_base`), or None. Returns
    ``(png bytes or None, {"digest": sampled digest[, "sha256": full SHA-256, "files": ...]})``. Holds the only references to the thumbnail and the mask
    once the caller dropped its own, so they are freed on return.
    """
    writer.write_maps(*maps)
    del maps  # the thumbnail goes as soon as it is on disk
    png = None if draw is None else _overlay(draw[0], mask, plan, slide_id, draw[1])
    return png, _digest(path, full_digest)


def _glass(thumbnail, mask):
    from tilewright.stain.density import slide_glass

    return slide_glass(thumbnail, mask)


def _regions_for(regions, config, slide_id, slide, path):
    """The slide's RegionMap (given, or loaded from ``config.regions``), the kept classes it has
    and the kept classes it lacks. What reading repaired and the absent classes are logged once
    (the ``tilewright`` logger, which tile-out writes to ``tile-out.log``)."""
    import logging

    from tilewright.errors import RegionError

    log = logging.getLogger("tilewright")
    if regions is None:
        from tilewright.regions.load import load_regions

        regions = load_regions(config.regions, slide_id, slide.mpp, slide_shape=tuple(slide.dimensions),
                               class_property=config.class_property, default_class=config.default_class,
                               feature_kinds=config.feature_kinds, warn=False)
        if regions is None and os.path.isdir(config.regions):
            raise RegionError(f"no region file for slide {slide_id!r} in {config.regions}; add "
                              f"{slide_id}.geojson there or run without --keep", path)
        if regions is None:
            raise RegionError(f"the region table {config.regions} has no row with slide_id {slide_id!r}; add the "
                              "slide's first-pass rows or run without --keep", path)
        info = regions.to_dict()
        for message in info.get("repairs") or ():
            log.warning("%s: regions %s: %s", slide_id, info.get("path"), message)
    if hasattr(regions, "with_mpp"):
        regions = regions.with_mpp(slide.mpp)
    if not hasattr(regions, "present"):  # a RegionMap-like object: keep as configured
        return regions, list(config.keep), []
    keep, absent = regions.present(config.keep)
    if not keep:
        from tilewright.regions.classnames import none_kept

        raise none_kept(absent, regions.classes, regions.to_dict().get("path"))
    if absent:
        log.warning("%s: kept class(es) %s absent from %s; they cover nothing on this slide", slide_id,
                    ", ".join(map(repr, absent)), regions.to_dict().get("path") or "its regions")
    return regions, list(keep), list(absent)


def _overlay(rgb, mask, plan, slide_id, mpp):
    """QC picture PNG bytes, or None when drawing fails (logged; a picture never fails the slide)."""
    from tilewright.tissue.overlay import overlay_png

    try:
        return overlay_png(rgb, mask, plan, mpp=mpp, title=slide_id)
    except Exception as exc:  # noqa: BLE001 - a picture must not cost the tiles
        _warn_png(slide_id, exc)
        return None


def _write_png(png: bytes, path: Path, slide_id: str) -> None:
    """Write the QC picture beside the store (temporary name, then rename); failures are logged."""
    from tilewright.tissue.overlay import write_png

    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        write_png(path, png)
    except (OSError, TilewrightError) as exc:  # a bucket's refusal too: a picture never fails the slide
        _warn_png(slide_id, exc)


def _warn_png(slide_id, exc):
    import logging

    logging.getLogger("tilewright").warning("%s: QC overlay not written (%s)", slide_id, exc)


def _source_size(path):
    from tilewright.store.provenance import source_size

    return source_size(path)


def _source_stamp(path):
    from tilewright.store.provenance import source_stamp

    return source_stamp(path)


def _digest(path, full=False) -> dict:
    from tilewright.store.provenance import source_digest, source_sha256

    return {"digest": source_digest(path), **(source_sha256(path) if full else {})}


def _region_info(regions, config, absent=None):
    info = regions.to_dict() if hasattr(regions, "to_dict") else {"kind": type(regions).__name__}
    info.update(keep=list(config.keep), min_region=float(config.min_region), absent=list(absent or []))
    return _jsonable(info)


def _jsonable(obj):
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    return obj


def _true_mpp(raster, asked: float) -> float:
    """µm/px a raster derived from the slide carries (``.mpp``), else the value asked for."""
    return float(getattr(raster, "mpp", None) or asked)
