"""Stain-normalization targets: from a reference image or slide, a fitted dictionary, or a slide sample.

A reference given as a plain image (PNG, JPEG, or a single-page TIFF of at most
:data:`MAX_IMAGE_PIXELS`) is read whole. A reference that is a whole slide (any slide format, or a
TIFF pyramid or larger image) is read like a slide being tiled, never its whole level 0: its
thumbnail at the run's ``mask_mpp`` (8 µm/px by default) for the tissue mask, then a reproducible
sample of ``stain_sample`` tissue tiles of ``tile`` pixels at the run's ``mpp`` (0.5 µm/px by
default), the same kind of sample each slide's own estimate is taken from. A reference with too
little stained tissue (a white or grey image), or whose Macenko estimate is not plausible H&E, is
a configuration error (``tile-out`` exits 2).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from tilewright.errors import ConfigError

__all__ = ["load_image", "make_target", "own_target", "sample_tiles", "MAX_IMAGE_PIXELS"]

#: A TIFF reference with more pixels than this (or with several pages) is read as a slide.
MAX_IMAGE_PIXELS = 4096 * 4096
_IMAGE_SUFFIXES = (".png", ".jpg", ".jpeg")


def load_image(path: str | os.PathLike) -> np.ndarray:
    """Read an RGB reference image (PNG, JPEG, TIFF) as uint8 (H, W, 3)."""
    path = Path(path)
    if not path.is_file():
        raise ConfigError("reference image not found; give an RGB image file (PNG, JPEG or TIFF)", path)
    if path.suffix.lower() in (".tif", ".tiff"):
        import tifffile

        img = tifffile.imread(str(path))
    else:
        import cv2

        img = cv2.imread(str(path), cv2.IMREAD_COLOR)
        if img is None:
            raise ConfigError("cannot read the reference image; give a PNG, JPEG or TIFF file", path)
        img = img[..., ::-1]
    img = np.asarray(img)
    if img.ndim == 3 and img.shape[-1] == 4:
        img = img[..., :3]
    if img.ndim != 3 or img.shape[-1] != 3 or img.dtype != np.uint8:
        raise ConfigError(f"reference must be an 8-bit RGB image, got shape {img.shape} {img.dtype}", path)
    return np.ascontiguousarray(img)


def _is_slide(path: Path) -> bool:
    """True when a reference file is a whole slide, to be sampled rather than read whole."""
    name = path.name.lower()
    if name.endswith(_IMAGE_SUFFIXES):
        return False
    if not name.endswith((".tif", ".tiff")):
        return True  # .svs, .ndpi, .mrxs, ... are slides
    import tifffile

    try:
        with tifffile.TiffFile(str(path)) as tif:
            page = tif.pages[0]
            return len(tif.pages) > 1 or int(page.imagelength) * int(page.imagewidth) > MAX_IMAGE_PIXELS
    except (OSError, ValueError, IndexError, tifffile.TiffFileError):
        return False  # load_image reports what is wrong with it


def _slide_sample(path: Path, config) -> tuple[np.ndarray, list | None]:
    """A sample of tissue tiles of a reference slide and its glass colour (see module doc)."""
    from tilewright.errors import TilewrightError
    from tilewright.run.config import TilingConfig
    from tilewright.stain.density import slide_glass
    from tilewright.slide.open import open as open_slide
    from tilewright.tissue.mask import tissue_mask
    from tilewright.tissue.plan import plan_tiles

    cfg = config or TilingConfig()
    try:
        with open_slide(path, verify=cfg.verify_jpeg) as slide:
            view = slide.at_mpp(cfg.mpp, tolerance=cfg.tolerance)
            thumbnail = slide.thumbnail(cfg.mask_mpp)
            mask = tissue_mask(thumbnail, mpp=getattr(thumbnail, "mpp", cfg.mask_mpp), **cfg.mask_options())
            plan = plan_tiles(view, mask, tile=cfg.tile, stride=cfg.stride, min_tissue=cfg.min_tissue,
                              max_tiles=cfg.stain_sample, seed=cfg.seed)
            sample = sample_tiles(view, plan.yx, cfg.tile, cfg.stain_sample, cfg.seed, threads=cfg.threads)
            return sample, slide_glass(thumbnail, mask)
    except TilewrightError as exc:
        raise ConfigError(f"cannot read the reference slide ({exc.reason if hasattr(exc, 'reason') else exc})",
                          path) from None


def make_target(method: str, reference, config=None):
    """A fitted normalizer: ``reference`` is an image or slide path, a fitted dict, or an RGB array.

    Raises
    ------
    ConfigError
        The reference cannot be read, has too little stained tissue, or (Macenko) its estimate is
        not plausible H&E (:func:`tilewright.stain.estimate.implausible`).
    """
    from tilewright.errors import StainEstimationError
    from tilewright.stain.registry import make_transfer, transfer_from_dict

    if isinstance(reference, dict):
        norm = transfer_from_dict(reference)
        if norm.to_dict().get("method") != method:
            raise ConfigError(f"the reference was fitted for {reference.get('method')!r}, not {method!r}")
        return norm
    where, glass = None, None
    if isinstance(reference, (str, os.PathLike)):
        where = Path(reference)
        if where.is_file() and _is_slide(where):
            image, glass = _slide_sample(where, config)
            if len(image) == 0:
                raise ConfigError("the reference slide shows no tissue tile; give an H&E slide or image "
                                  "with stained tissue", where)
        else:
            image = load_image(where)
    else:
        image = np.asarray(reference)
    try:
        norm = make_transfer(method).fit(image, glass=glass)
    except StainEstimationError as exc:
        raise ConfigError(f"the reference has too little stained tissue for a {method} target "
                          f"({exc.reason if hasattr(exc, 'reason') else exc}); give an H&E image or slide "
                          "with stained tissue", where) from None
    reason = norm._implausible(norm._target_stats())
    if reason:
        raise ConfigError(f"the reference does not look like H&E ({reason}); give an H&E image or "
                          "slide with both stains", where)
    norm.target_colour = _own_colour(norm, image, glass)
    return norm


def _own_colour(norm, image, glass):
    """Mean tissue CIELAB of a reference normalized to its own target (rendered on the output glass)."""
    from tilewright.stain.tissue_pixels import colour_pixels
    from tilewright.stain.outcome import tissue_colour

    pixels = colour_pixels(np.asarray(image), glass)
    if not len(pixels):
        return None
    bound = norm.with_glass(glass)
    bound.source = norm._target_stats()
    colour = tissue_colour(bound.transform(pixels), np.ones(pixels.shape[:2], bool))
    return None if colour is None else [round(float(v), 3) for v in colour]


def own_target(method: str, sample, glass, path):
    """A target fitted on the slide's own sample (no reference, no cohort target), and a note.

    For Macenko, an implausible or failed estimate is replaced by the Ruifrok & Johnston (2001)
    stain vectors with the sample's own concentration maxima (note says so). Other methods raise
    :class:`~tilewright.errors.StainEstimationError` when the sample has too little tissue.
    """
    from tilewright.errors import StainEstimationError
    from tilewright.stain.registry import make_transfer

    norm = make_transfer(method)
    try:
        norm.fit(sample, glass=glass)
        reason = norm._implausible(norm._target_stats())
    except StainEstimationError as exc:
        if method != "macenko":
            raise StainEstimationError(f"cannot estimate this slide's stain from {len(sample)} tissue tiles "
                                       f"({exc.reason}); lower --min-tissue or run without --normalize",
                                       path) from None
        reason = exc.reason if hasattr(exc, "reason") else str(exc)
    if not reason:
        return norm, ""
    from tilewright.stain.estimate import RUIFROK_STAINS, StainProfile

    norm._set_target(StainProfile(RUIFROK_STAINS.astype(np.float32), np.ones(2, np.float32), 0))
    norm.reference_glass = None if glass is None else np.asarray(glass, np.float64)
    profile, how = norm._fallback_source(np.asarray(sample), glass)
    norm._set_target(profile)
    return norm, (f"the slide's own stain target was replaced ({reason}) by the Ruifrok & Johnston "
                  f"stain vectors with {'its own' if profile.n_tissue_pixels else 'unit'} concentration maxima")


def sample_positions(yx: np.ndarray, count: int, seed: int) -> np.ndarray:
    """The positions of the reproducible sample :func:`sample_tiles` reads: ``count`` of the planned
    positions ``yx`` (all of them when fewer), in plan order."""
    yx = np.asarray(yx)
    if len(yx) > count:
        pick = np.sort(np.random.default_rng(seed).choice(len(yx), size=count, replace=False))
        yx = yx[pick]
    return yx


def sample_tiles(view, yx: np.ndarray, tile: int, count: int, seed: int, *, threads: int = 1) -> np.ndarray:
    """Read a reproducible sample of ``count`` planned tiles (all of them when fewer), on
    ``threads`` threads (view reads are thread-safe and release the GIL while decoding)."""
    yx = sample_positions(yx, count, seed)
    out = np.empty((len(yx), tile, tile, 3), np.uint8)
    if len(yx) == 0:
        return out

    def read(i):
        view.read(int(yx[i, 0]), int(yx[i, 1]), tile, tile, out=out[i])

    if threads <= 1:
        for i in range(len(yx)):
            read(i)
    else:
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(threads, thread_name_prefix="tilewright-sample") as pool:
            list(pool.map(read, range(len(yx))))
    return out
