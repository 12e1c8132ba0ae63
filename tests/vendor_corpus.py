"""A corpus of small TIFF files in the layouts scanners and converters write, built at test time.

Every writer returns a :class:`Case`: the file, the pixels written at level 0 (ground truth),
the level sizes and µm/px the tiff backend must report, and what OpenSlide does with the same
file (``openslide``: "equal" lossless, "jpeg" within decoder rounding, "close" within 2 levels
(colour conversions that round differently), or a string saying why OpenSlide differs or refuses).
Resolutions come from the ranges real scanners record (0.2428, 0.2527, 0.2265, 0.4991 µm/px).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import tifffile

__all__ = ["Case", "CASES", "build", "image", "reduce_to"]


@dataclass
class Case:
    path: Path
    truth: np.ndarray  # level-0 pixels as RGB (after any conversion the format implies)
    levels: list  # [(height, width), ...] the tiff backend must list
    mpp: float | None
    openslide: str  # "equal" | "jpeg" | "close" | a documented reason OpenSlide differs
    lossy: bool = False
    notes: dict = field(default_factory=dict)


def image(h: int, w: int, seed: int = 5) -> np.ndarray:
    """Smooth colour gradients plus grain: every pixel differs, JPEG-friendly (constructed here)."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float32)
    r = 185 + 45 * np.sin(xx / 83.0) * np.cos(yy / 57.0)
    g = 125 + 55 * np.cos((xx + 2 * yy) / 151.0)
    b = 195 - 35 * np.sin(yy / 47.0 + xx / 301.0)
    img = np.stack([r, g, b], -1) + rng.normal(0, 6, (h, w, 3)).astype(np.float32)
    return np.clip(img, 0, 255).astype(np.uint8)


def reduce_to(img: np.ndarray, factor: int) -> np.ndarray:
    """Area reduction to ceil(size / factor) (cv2 INTER_AREA)."""
    import cv2

    h, w = img.shape[:2]
    return cv2.resize(img, (math.ceil(w / factor), math.ceil(h / factor)), interpolation=cv2.INTER_AREA)


H0, W0 = 1200, 1610  # odd sizes: reduced levels need floor/ceil, not exact division


def _res(mpp: float, unit: str = "cm"):
    per = 1e4 if unit == "cm" else 25400.0
    return dict(resolution=(per / mpp, per / mpp), resolutionunit="CENTIMETER" if unit == "cm" else "INCH")


def _split_jpeg(stream: bytes) -> tuple[bytes, bytes]:
    """(tables, abbreviated stream): DQT/DHT moved to a tables-only stream (TIFF TN2 JPEGTables)."""
    i, tables, body = 2, [], []
    while i < len(stream):
        marker = stream[i + 1]
        length = int.from_bytes(stream[i + 2 : i + 4], "big")
        if marker == 0xDA:
            body.append(stream[i:])
            break
        seg = stream[i : i + 2 + length]
        if marker in (0xDB, 0xC4):
            tables.append(seg)
        elif marker != 0xE0:  # drop the JFIF APP0, as TIFF JPEG tiles carry none
            body.append(seg)
        i += 2 + length
    return b"\xff\xd8" + b"".join(tables) + b"\xff\xd9", b"\xff\xd8" + b"".join(body)


def _write_abbreviated_jpeg(t, img, tile, quality=85, **kw):
    """A tiled YCbCr 4:2:0 JPEG page of abbreviated tile streams sharing one JPEGTables tag."""
    import imagecodecs

    h, w = img.shape[:2]
    pad = np.full((-(-h // tile) * tile, -(-w // tile) * tile, 3), 255, np.uint8)
    pad[:h, :w] = img
    shared, bodies = None, []
    for y in range(0, pad.shape[0], tile):
        for x in range(0, pad.shape[1], tile):
            tables, body = _split_jpeg(imagecodecs.jpeg8_encode(pad[y:y + tile, x:x + tile], level=quality))
            assert shared in (None, tables)  # same quality, standard Huffman tables: one table set
            shared = tables
            bodies.append(body)
    t.write(iter(bodies), shape=(h, w, 3), dtype=np.uint8, tile=(tile, tile), compression="jpeg",
            photometric="ycbcr", subsampling=(2, 2), jpegtables=shared, metadata=None, **kw)


def _aperio_desc(w, h, mpp, extra=""):
    return (f"Aperio Image Library v12.0.0 \r\n{W0}x{H0} [0,0 {W0}x{H0}] (256x256) {extra}-> {w}x{h}"
            f"|AppMag = 40|MPP = {mpp:.4f}")


def aperio_jpeg(folder: Path, *, thumbnail: bool = True) -> Case:
    """Aperio-style SVS: level 0, stripped thumbnail, x4 and x16 levels, LZW label, JPEG macro."""
    img, mpp = image(H0, W0), 0.2527
    path = folder / ("aperio.svs" if thumbnail else "aperio_nothumb.svs")
    levels = [img, reduce_to(img, 4), reduce_to(img, 16)]
    with tifffile.TiffWriter(path) as t:
        _write_abbreviated_jpeg(t, img, 256, description=_aperio_desc(W0, H0, mpp, "JPEG/RGB Q=85 "))
        if thumbnail:
            thumb = reduce_to(img, 7)
            t.write(thumb, photometric="rgb", compression="jpeg", rowsperstrip=16, metadata=None,
                    description=f"Aperio Image Library v12.0.0 \r\n{W0}x{H0} -> {thumb.shape[1]}x{thumb.shape[0]} - |")
        for lv in levels[1:]:
            _write_abbreviated_jpeg(t, lv, 128, description=_aperio_desc(lv.shape[1], lv.shape[0], mpp))
        label = image(300, 290, seed=9)
        t.write(label, photometric="rgb", compression="lzw", rowsperstrip=32, subfiletype=1, metadata=None,
                description="Aperio Image Library v12.0.0 \r\nlabel 290x300")
        macro = image(400, 1200, seed=11)
        t.write(macro, photometric="rgb", compression="jpeg", rowsperstrip=16, subfiletype=9, metadata=None,
                description="Aperio Image Library v12.0.0 \r\nmacro 1200x400")
    return Case(path, img, [lv.shape[:2] for lv in levels], mpp, "jpeg", lossy=True,
                notes={"objective": 40.0, "associated": {"label", "macro"} | ({"thumbnail"} if thumbnail else set())})


def _ycbcr_full(rgb: np.ndarray) -> np.ndarray:
    """RGB → full-range YCbCr (ITU-T T.871), the components of Aperio's 33003 codestreams."""
    f = rgb.astype(np.float64)
    r, g, b = f[..., 0], f[..., 1], f[..., 2]
    y = 0.299 * r + 0.587 * g + 0.114 * b
    cb = 128 - 0.168736 * r - 0.331264 * g + 0.5 * b
    cr = 128 + 0.5 * r - 0.418688 * g - 0.081312 * b
    return np.clip(np.rint(np.stack([y, cb, cr], -1)), 0, 255).astype(np.uint8)


def aperio_j2k(folder: Path, compression: int) -> Case:
    """Aperio-style SVS with lossless JPEG 2000 tiles: 33003 (YCbCr components) or 33005 (RGB)."""
    img, mpp = image(H0, W0, seed=6), 0.4991
    path = folder / f"aperio_j2k_{compression}.svs"
    levels = [img, reduce_to(img, 4)]
    with tifffile.TiffWriter(path) as t:
        for lv in levels:
            data = _ycbcr_full(lv) if compression == 33003 else lv
            t.write(data, tile=(256, 256), photometric="rgb", compression=compression, metadata=None,
                    compressionargs={"level": 0, "reversible": True, "mct": compression == 33005},
                    description=_aperio_desc(lv.shape[1], lv.shape[0], mpp, "J2K "))
    # 33003: the truth is what the YCbCr components say (rounding of the forward transform)
    truth = img if compression == 33005 else _rgb_from_full(_ycbcr_full(img))
    return Case(path, truth, [lv.shape[:2] for lv in levels], mpp, "equal" if compression == 33005 else "close",
                notes={"tolerance": 0 if compression == 33005 else 1})


def _rgb_from_full(ycc: np.ndarray) -> np.ndarray:
    f = ycc.astype(np.float64)
    y, cb, cr = f[..., 0], f[..., 1] - 128, f[..., 2] - 128
    rgb = np.stack([y + 1.402 * cr, y - 0.344136 * cb - 0.714136 * cr, y + 1.772 * cb], -1)
    return np.clip(np.rint(rgb), 0, 255).astype(np.uint8)


def generic_tiled(folder: Path, unit: str) -> Case:
    """Generic tiled TIFF, levels x2 and x8 in the IFD chain: BigTIFF/deflate/cm, or JPEG RGB/inch."""
    mpp = 0.2428 if unit == "cm" else 0.4991
    img = image(H0, W0, seed=7)
    levels = [img, reduce_to(img, 2), reduce_to(img, 8)]
    path = folder / f"tiled_{unit}.tif"
    comp = dict(compression="zlib") if unit == "cm" else dict(compression="jpeg", compressionargs={
        "level": 92, "outcolorspace": "rgb"})
    with tifffile.TiffWriter(path, bigtiff=unit == "cm") as t:
        for k, lv in enumerate(levels):
            t.write(lv, tile=(256, 256), photometric="rgb", subfiletype=1 if k else 0, metadata=None,
                    **_res(mpp * W0 / lv.shape[1], unit), **comp)
    return Case(path, img, [lv.shape[:2] for lv in levels], mpp, "equal" if unit == "cm" else "jpeg",
                lossy=unit != "cm")


def ome(folder: Path, kind: str) -> Case:
    """OME-TIFF with SubIFD pyramids: the macro first (PhysicalSize in nm), or two scenes (µm)."""
    img = image(H0, W0, seed=8)
    levels = [img, reduce_to(img, 2), reduce_to(img, 4)]
    path = folder / f"ome_{kind}.ome.tif"
    with tifffile.TiffWriter(path, ome=True) as t:
        if kind == "macro_first":
            mpp, size = 0.2265, dict(PhysicalSizeX=226.5, PhysicalSizeXUnit="nm", PhysicalSizeY=226.5,
                                     PhysicalSizeYUnit="nm")
            t.write(image(300, 900, seed=12), photometric="rgb", compression="zlib", rowsperstrip=64,
                    metadata={"axes": "YXS", "Name": "overview", "PhysicalSizeX": 16.0, "PhysicalSizeY": 16.0})
        else:
            mpp, size = 0.2428, dict(PhysicalSizeX=0.2428, PhysicalSizeY=0.2428)
        t.write(img, tile=(256, 256), photometric="rgb", compression="zlib", subifds=len(levels) - 1,
                metadata={"axes": "YXS", "Name": "slide", **size})
        for lv in levels[1:]:
            t.write(lv, tile=(256, 256), photometric="rgb", compression="zlib", subfiletype=1, metadata=None)
        if kind == "two_scenes":  # another scene of the same scan: same aspect and µm/px, other size
            scene = image(450, 604, seed=13)
            t.write(scene, tile=(256, 256), photometric="rgb", compression="zlib",
                    metadata={"axes": "YXS", "Name": "scene 2", **size})
    return Case(path, img, [lv.shape[:2] for lv in levels], mpp,
                "OpenSlide reads OME-TIFF as a generic TIFF: no SubIFD levels, other images as pages")


def stripped(folder: Path, kind: str) -> Case:
    """Stripped single-level files: JPEG in 64-row strips (short last strip), or one raw strip."""
    h, w = (1000, 1290) if kind == "jpeg" else (1100, 1290)
    img = image(h, w, seed=14)
    path = folder / f"stripped_{kind}.tif"
    if kind == "jpeg":
        tifffile.imwrite(path, img, photometric="rgb", compression="jpeg", rowsperstrip=64,
                         compressionargs={"level": 90}, metadata=None, **_res(0.4991))
    else:
        tifffile.imwrite(path, img, photometric="rgb", rowsperstrip=h, metadata=None, **_res(0.2527))
    return Case(path, img, [(h, w)], 0.4991 if kind == "jpeg" else 0.2527,
                "OpenSlide's generic TIFF reader serves tiled pages only", lossy=kind == "jpeg")


def colour(folder: Path, kind: str) -> Case:
    """Tiled pages needing a conversion: RGBA (straight alpha), YCbCr deflate; CMYK (refused)."""
    img = image(512, 640, seed=15)
    path = folder / f"colour_{kind}.tif"
    kw = dict(tile=(256, 256), compression="zlib", metadata=None, **_res(0.2527))
    if kind == "rgba":
        alpha = np.full(img.shape[:2] + (1,), 255, np.uint8)
        alpha[:, :200] = 0  # transparent background
        alpha[:, 200:260] = np.linspace(0, 255, 60).astype(np.uint8)[None, :, None]
        tifffile.imwrite(path, np.concatenate([img, alpha], -1), photometric="rgb",
                         extrasamples=["unassalpha"], **kw)
        a = alpha.astype(np.float64) / 255
        truth = np.clip(np.rint(img * a + 255 * (1 - a)), 0, 255).astype(np.uint8)
        return Case(path, truth, [img.shape[:2]], 0.2527, "close")
    if kind == "ycbcr":
        tifffile.imwrite(path, _ycbcr_full(img), photometric="ycbcr", subsampling=(1, 1), **kw)
        return Case(path, _rgb_from_full(_ycbcr_full(img)), [img.shape[:2]], 0.2527, "close")
    k = 255 - img.max(axis=-1)
    cmyk = np.stack([255 - img[..., 0] - k, 255 - img[..., 1] - k, 255 - img[..., 2] - k, k], -1)
    tifffile.imwrite(path, cmyk.astype(np.uint8), photometric="separated", **kw)
    return Case(path, img, [], 0.2527, "OpenSlide converts CMYK naively (no ink profile); tiff refuses")


def with_extra_page(folder: Path, kind: str) -> Case:
    """A tiled pyramid plus a small tiled page: an RGB label of near-square shape, or a grey one."""
    img = image(H0, W0, seed=16)
    levels = [img, reduce_to(img, 4)]
    path = folder / f"extra_{kind}.tif"
    with tifffile.TiffWriter(path) as t:
        for k, lv in enumerate(levels):
            t.write(lv, tile=(256, 256), photometric="rgb", compression="zlib", subfiletype=1 if k else 0,
                    metadata=None, **_res(0.2527 * W0 / lv.shape[1]))
        if kind == "label":  # under 2 % of level 0's size: once counted as a level
            label = np.zeros((62, 64, 3), np.uint8)
            label[...] = (20, 200, 30)
            t.write(label, tile=(16, 16), photometric="rgb", compression="zlib", metadata=None)
        else:
            grey = np.full((240, 256), 90, np.uint8)
            t.write(grey, tile=(16, 16), photometric="minisblack", compression="zlib", metadata=None)
    return Case(path, img, [lv.shape[:2] for lv in levels], 0.2527, "equal")


def build(name: str, folder: Path) -> Case:
    """Write one corpus file into ``folder`` (see :data:`CASES`)."""
    folder.mkdir(parents=True, exist_ok=True)
    return CASES[name](folder)


CASES = {
    "aperio_jpeg": lambda f: aperio_jpeg(f),
    "aperio_no_thumbnail": lambda f: aperio_jpeg(f, thumbnail=False),
    "aperio_j2k_ycbcr": lambda f: aperio_j2k(f, 33003),
    "aperio_j2k_rgb": lambda f: aperio_j2k(f, 33005),
    "bigtiff_cm": lambda f: generic_tiled(f, "cm"),
    "tiled_inch_jpeg_rgb": lambda f: generic_tiled(f, "inch"),
    "ome_macro_first": lambda f: ome(f, "macro_first"),
    "ome_two_scenes": lambda f: ome(f, "two_scenes"),
    "stripped_jpeg": lambda f: stripped(f, "jpeg"),
    "stripped_raw": lambda f: stripped(f, "raw"),
    "rgba": lambda f: colour(f, "rgba"),
    "ycbcr_deflate": lambda f: colour(f, "ycbcr"),
    "cmyk": lambda f: colour(f, "cmyk"),
    "tiny_label": lambda f: with_extra_page(f, "label"),
    "grey_label": lambda f: with_extra_page(f, "grey"),
}
