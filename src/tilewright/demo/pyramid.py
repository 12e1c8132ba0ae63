"""Write pyramidal tiled TIFF files (plain IFD chain, OME-TIFF, Aperio-style SVS).

Used by the tests, the demo cohort and the benchmarks to produce whole-slide images whose
resolution metadata is known exactly. Level 0 is never held in memory when a renderer is
given: it is rendered one strip of tiles at a time and streamed to tifffile as an iterator of
tiles, while the first reduced level is accumulated by area averaging (it is ``factor**2``
times smaller); coarser levels are area-averaged from it.
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Iterator
from typing import Literal

import numpy as np

__all__ = ["write_pyramid", "level_shapes"]

Renderer = Callable[[int, int, int, int], np.ndarray]

_CM_PER_UM = 1e-4
_INCH_PER_UM = 1e-4 / 2.54


def level_shapes(shape: tuple[int, int], factor: int, n_levels: int | None, min_size: int,
                 downsamples=None):
    """Shapes (height, width) of each pyramid level, level 0 first.

    Level ``k`` has ``ceil(H0 / factor**k)`` x ``ceil(W0 / factor**k)`` pixels (the usual
    convention of scanners: partial blocks at the right and bottom edge are kept).
    Levels are added until the longer side falls to ``min_size`` or below, or until
    ``n_levels`` levels exist. With ``downsamples`` (level-0 pixels per level pixel of every
    level, 1 first), level ``k`` has ``ceil(H0 / downsamples[k])`` x ``ceil(W0 / downsamples[k])``.
    """
    h, w = int(shape[0]), int(shape[1])
    if downsamples is not None:
        return [(math.ceil(h / d), math.ceil(w / d)) for d in downsamples]
    shapes = [(h, w)]
    while True:
        if n_levels is not None and len(shapes) >= n_levels:
            break
        f = factor ** len(shapes)
        nh, nw = math.ceil(h / f), math.ceil(w / f)
        if n_levels is None and max(shapes[-1]) <= min_size:
            break
        if nh < 1 or nw < 1 or (nh, nw) == shapes[-1]:
            break
        shapes.append((nh, nw))
    return shapes


def _area_reduce(block: np.ndarray, factor: int) -> np.ndarray:
    """Average ``factor`` x ``factor`` cells (ceil at the edges: partial cells average what exists)."""
    import cv2

    h, w = block.shape[:2]
    oh, ow = math.ceil(h / factor), math.ceil(w / factor)
    ph, pw = oh * factor, ow * factor
    if (ph, pw) == (h, w):
        return cv2.resize(block, (ow, oh), interpolation=cv2.INTER_AREA)
    # Edge cells: average only the pixels that exist (explicit counts).
    padded = np.zeros((ph, pw, block.shape[2]), np.float32)
    padded[:h, :w] = block
    ones = np.zeros((ph, pw, 1), np.float32)
    ones[:h, :w] = 1
    acc = padded.reshape(oh, factor, ow, factor, -1).sum(axis=(1, 3))
    cnt = ones.reshape(oh, factor, ow, factor, 1).sum(axis=(1, 3))
    return np.clip(np.rint(acc / cnt), 0, 255).astype(np.uint8)


def _pad_tile(t: np.ndarray, tile: int) -> np.ndarray:
    if t.shape[0] == tile and t.shape[1] == tile:
        return np.ascontiguousarray(t)
    out = np.full((tile, tile, t.shape[2]), 255, np.uint8)
    out[: t.shape[0], : t.shape[1]] = t
    return out


def _tiles_of(image: np.ndarray, tile: int) -> Iterator[np.ndarray]:
    for y in range(0, image.shape[0], tile):
        for x in range(0, image.shape[1], tile):
            yield _pad_tile(image[y : y + tile, x : x + tile], tile)


def write_pyramid(
    path: str | os.PathLike,
    image: np.ndarray | Renderer,
    *,
    shape: tuple[int, int] | None = None,
    mpp: float | None = 0.25,
    tile: int = 256,
    compression: Literal["jpeg", "zlib", "deflate", "lzw", "zstd", "none"] | None = "jpeg",
    quality: int = 90,
    jpeg_colours: Literal["ycbcr420", "ycbcr444", "rgb"] = "ycbcr420",
    n_levels: int | None = None,
    min_size: int = 512,
    factor: int = 2,
    layout: Literal["ifd", "subifd", "ome", "svs"] = "ifd",
    downsamples=None,
    resolution_unit: Literal["cm", "inch"] | None = "cm",
    objective: float | None = None,
    strip_rows: int | None = None,
    icc_profile: bytes | None = None,
) -> list[tuple[int, int]]:
    """Write an RGB whole-slide pyramid as a tiled TIFF.

    Parameters
    ----------
    path : str or os.PathLike
        Output file (overwritten).
    image : ndarray or callable
        Either a uint8 ``(H, W, 3)`` array, or a renderer ``render(y, x, h, w)`` returning the
        uint8 ``(h, w, 3)`` level-0 pixels of that box; with a renderer, ``shape`` is required
        and level 0 is rendered one strip of tiles at a time.
    shape : (int, int), optional
        Level-0 (height, width) when ``image`` is a renderer.
    mpp : float or None
        Level-0 µm/px written into the metadata; None writes no resolution at all.
    tile : int
        Tile side in pixels (multiple of 16).
    compression : str or None
        TIFF compression of the tiles; ``"none"``/None for uncompressed.
    quality : int
        JPEG quality.
    jpeg_colours : {"ycbcr420", "ycbcr444", "rgb"}
        How JPEG tiles store colour: YCbCr with 2x2 chroma subsampling (tifffile's default and
        the most common scanner output), YCbCr without subsampling, or RGB without subsampling
        (as some scanners write).
    n_levels : int, optional
        Number of levels; default: reduce until the longer side is at most ``min_size``.
    min_size : int
        See ``n_levels``.
    factor : int
        Integer downsample between consecutive levels (2 or 4 are common).
    downsamples : sequence of int, optional
        Level-0 pixels per level pixel of every level instead of powers of ``factor``: 1 first,
        each dividing the next (scanners mix x2, x4, x16, x32 levels, e.g. ``(1, 4, 32)``).
    layout : {"ifd", "subifd", "ome", "svs"}
        ``"ifd"``: every level a page of the main IFD chain (generic tiled TIFF).
        ``"subifd"``: reduced levels stored as SubIFDs of level 0, no OME metadata.
        ``"ome"``: OME-TIFF with SubIFD pyramid and OME ``PhysicalSizeX/Y`` in µm.
        ``"svs"``: Aperio-style: level 0, a stripped thumbnail, then the reduced levels;
        ImageDescription carries ``MPP`` and ``AppMag``.
    resolution_unit : {"cm", "inch"} or None
        Unit of the TIFF XResolution/YResolution tags; None writes unit NONE (unknown).
        Ignored for ``"ome"`` when ``mpp`` is None.
    objective : float, optional
        Objective power recorded (SVS ``AppMag``, OME ``NominalMagnification``).
    strip_rows : int, optional
        Rows rendered per call of the renderer (default: one row of tiles).
    icc_profile : bytes, optional
        An ICC profile for the InterColorProfile tag (34675) of level 0: the pixels are then the
        device RGB that profile describes (the caller converts them).

    Returns
    -------
    list of (int, int)
        The (height, width) of every level written, level 0 first.
    """
    import tifffile

    if callable(image):
        if shape is None:
            raise ValueError("shape=(height, width) is required with a renderer")
        render = image
        H, W = int(shape[0]), int(shape[1])
    else:
        arr = np.asarray(image)
        if arr.dtype != np.uint8 or arr.ndim != 3 or arr.shape[2] != 3:
            raise ValueError("image must be uint8 (H, W, 3)")
        H, W = arr.shape[:2]

        def render(y, x, h, w, _a=arr):
            return _a[y : y + h, x : x + w]

    if tile % 16:
        raise ValueError("tile must be a multiple of 16")
    if downsamples is not None:
        downsamples = [int(d) for d in downsamples]
        if downsamples[0] != 1 or any(b % a or b <= a for a, b in zip(downsamples, downsamples[1:])):
            raise ValueError(f"downsamples must start at 1 and each divide the next, got {downsamples}")
    shapes = level_shapes((H, W), factor, n_levels, min_size, downsamples)
    ds = downsamples or [factor**k for k in range(len(shapes))]
    factor = ds[1] if len(ds) > 1 else factor  # level 1 is accumulated from level 0 by this
    comp = None if compression in (None, "none") else compression
    if comp == "zlib":
        comp = "deflate"
    if jpeg_colours not in ("ycbcr420", "ycbcr444", "rgb"):
        raise ValueError(f"jpeg_colours must be 'ycbcr420', 'ycbcr444' or 'rgb', got {jpeg_colours!r}")
    compressionargs = None
    if comp == "jpeg":
        compressionargs = {"level": quality} if jpeg_colours != "rgb" else {"level": quality, "outcolorspace": "rgb"}
    rows = strip_rows or tile
    rows = max(tile, rows - rows % tile)
    if rows % factor:
        raise ValueError("strip rows must be a multiple of factor")

    # level 1 accumulated while level 0 streams out
    level1 = None
    if len(shapes) > 1:
        level1 = np.empty(shapes[1] + (3,), np.uint8)

    def level0_tiles() -> Iterator[np.ndarray]:
        for y in range(0, H, rows):
            h = min(rows, H - y)
            strip = np.asarray(render(y, 0, h, W), dtype=np.uint8)
            if strip.shape != (h, W, 3):
                raise ValueError(f"renderer returned {strip.shape}, expected {(h, W, 3)}")
            if level1 is not None:
                red = _area_reduce(strip, factor)
                level1[y // factor : y // factor + red.shape[0]] = red
            for ty in range(0, h, tile):
                for x in range(0, W, tile):
                    yield _pad_tile(strip[ty : ty + tile, x : x + tile], tile)

    def resolution(f: float):
        if mpp is None:
            return None, None
        um = mpp * f
        if resolution_unit == "cm":
            return (1.0 / (um * _CM_PER_UM),) * 2, "CENTIMETER"
        if resolution_unit == "inch":
            return (1.0 / (um * _INCH_PER_UM),) * 2, "INCH"
        return (1.0 / um,) * 2, "NONE"

    common = dict(
        photometric="rgb",
        tile=(tile, tile),
        compression=comp,
        compressionargs=compressionargs,
        dtype=np.uint8,
    )
    if comp == "jpeg" and jpeg_colours == "ycbcr444":
        common["subsampling"] = (1, 1)

    def level_data(k):
        if k == 0:
            return level0_tiles()
        return _tiles_of(levels[k], tile)

    levels: dict[int, np.ndarray] = {}  # filled once level 0 has been streamed out

    def ensure_levels():
        levels[1] = level1
        for k in range(2, len(shapes)):
            levels[k] = _area_reduce(levels[k - 1], ds[k] // ds[k - 1])

    path = os.fspath(path)
    ome = layout == "ome"
    with tifffile.TiffWriter(path, bigtiff=H * W * 3 > 2**31, ome=ome) as tw:
        res, unit = resolution(1.0)
        meta = None
        desc = None
        if ome:
            meta = {"axes": "YXS"}
            if mpp is not None:
                meta.update(PhysicalSizeX=mpp, PhysicalSizeXUnit="µm",
                            PhysicalSizeY=mpp, PhysicalSizeYUnit="µm")
        elif layout == "svs":
            desc = _svs_description(W, H, tile, comp, quality, mpp, objective)
        extra = {}
        if res is not None:
            extra = dict(resolution=res, resolutionunit=unit)
        sub = len(shapes) - 1 if layout in ("subifd", "ome") else 0
        if icc_profile is not None:
            extra["iccprofile"] = bytes(icc_profile)
        tw.write(level_data(0), shape=(H, W, 3), subifds=sub or None, metadata=meta,
                 description=desc, **extra, **common)
        if len(shapes) > 1:
            ensure_levels()
        if layout == "svs" and len(shapes) > 1:
            thumb = levels[len(shapes) - 1]
            tw.write(thumb, photometric="rgb", compression=comp,
                     compressionargs=compressionargs,
                     description=f"Aperio Image Library v12.0.0 \r\n{W}x{H} -> "
                                 f"{thumb.shape[1]}x{thumb.shape[0]} - |", metadata=None)
        for k in range(1, len(shapes)):
            res, unit = resolution(float(ds[k]))
            extra = {} if res is None else dict(resolution=res, resolutionunit=unit)
            kw = dict(shape=shapes[k] + (3,), metadata=None, **extra, **common)
            if layout in ("subifd", "ome"):
                tw.write(level_data(k), subfiletype=1, **kw)
            elif layout == "svs":
                d = _svs_description(W, H, tile, comp, quality, mpp, objective,
                                     level=shapes[k])
                tw.write(level_data(k), description=d, **kw)
            else:
                tw.write(level_data(k), subfiletype=1, **kw)
    if ome and objective is not None:
        _add_ome_objective(path, float(objective))
    return shapes


def _add_ome_objective(path: str, objective: float) -> None:
    """Insert an OME ``Instrument/Objective`` with ``NominalMagnification`` and refer to it."""
    import tifffile

    xml = tifffile.tiffcomment(path)
    inst = (f'<Instrument ID="Instrument:0"><Objective ID="Objective:0" '
            f'NominalMagnification="{objective:g}"/></Instrument>')
    xml = xml.replace("<Image ", inst + "<Image ", 1)
    xml = xml.replace("<Pixels ", '<InstrumentRef ID="Instrument:0"/>'
                      '<ObjectiveSettings ID="Objective:0"/><Pixels ', 1)
    tifffile.tiffcomment(path, comment=xml.encode("utf-8"))


def _svs_description(W, H, tile, comp, quality, mpp, objective, level=None) -> str:
    """ImageDescription in the Aperio style: a header line, then ``key = value`` fields."""
    kind = {"jpeg": f"JPEG/RGB Q={quality}", None: "RAW/RGB"}.get(comp, f"{comp}/RGB")
    lw, lh = (W, H) if level is None else (level[1], level[0])
    head = f"Aperio Image Library v12.0.0 \r\n{W}x{H} [0,0 {W}x{H}] ({tile}x{tile}) {kind}"
    if level is not None:
        head += f" -> {lw}x{lh}"
    fields = [head, "ScanScope ID = SS0000", "Filename = synthetic"]
    if objective is not None:
        fields.append(f"AppMag = {objective:g}")
    if mpp is not None:
        fields.append(f"MPP = {mpp:.4f}")
    return "|".join(fields)
