"""Which TIFF pages the tiff backend can serve as RGB, and the conversion each one needs.

A page's samples are RGB only for some photometric/compression pairs. Every pair the tiff
backend serves is listed here with its conversion; any other page gets a reason (naming what
it is) and is never served as if it were RGB:

==========================  ====================================  =============================
photometric                 compression                           conversion
==========================  ====================================  =============================
RGB                         any codec imagecodecs decodes         none
RGB                         33003 (Aperio JPEG 2000, YCbCr)       YCbCr (JFIF, full range) → RGB
RGB                         33005 (Aperio JPEG 2000, RGB)         none
YCbCr                       7 (JPEG)                              done by the JPEG decoder
YCbCr, no subsampling       deflate, LZW, none, ...               YCbCr (TIFF 6.0 §21) → RGB
RGB + alpha (ExtraSamples)  as RGB                                composited on white
==========================  ====================================  =============================

Refused: CMYK (photometric SEPARATED), palette, grey, YCbCr with chroma subsampling outside
JPEG, old-style JPEG (compression 6), planar (separate) samples, samples other than 8 bits.

References
----------
.. [1] Adobe Developers Association (1992). TIFF Revision 6.0, section 21 "YCbCr Images"
   (YCbCrCoefficients, ReferenceBlackWhite) and section 18 "ExtraSamples".
.. [2] ITU-T T.871 (2011), JPEG File Interchange Format, section 7: YCbCr ↔ RGB with full-range
   components (the transform of Aperio's compression 33003 codestreams).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

__all__ = ["page_problem", "page_converter", "jfif_ycbcr_to_rgb"]

_RGB, _YCBCR, _SEPARATED = 2, 6, 5
_JPEG, _OJPEG = 7, 6
_J2K_YCBCR, _J2K_RGB = 33003, 33005
#: Compression codes whose codecs imagecodecs provides to tifffile (TIFF tag 259 values).
_CODECS = {1, 5, 7, 8, 32773, 32946, 33003, 33004, 33005, 34712, 34887, 34925, 50000, 50001, 50002}
_PHOTOMETRIC_NAMES = {0: "grey (white is zero)", 1: "grey", 3: "palette", 4: "mask",
                      5: "CMYK (separated)", 8: "CIELAB", 9: "ICC L*a*b*", 10: "ITU L*a*b*",
                      32844: "LogL", 32845: "LogLuv", 34892: "linear raw"}


def _alpha_kind(page) -> int | None:
    """ExtraSamples value of the 4th sample (1 associated, 2 unassociated alpha), else None."""
    extra = tuple(int(e) for e in (page.extrasamples or ()))
    return extra[0] if page.samplesperpixel == 4 and len(extra) == 1 else None


def page_problem(page) -> str | None:
    """Why the tiff backend cannot serve this page as 8-bit RGB, or None when it can.

    Parameters
    ----------
    page : tifffile.TiffPage

    Returns
    -------
    str or None
        A reason fit for an error message ("CMYK (separated) colour ..."), or None.
    """
    photometric, compression = int(page.photometric), int(page.compression)
    spp = int(page.samplesperpixel)
    if photometric in _PHOTOMETRIC_NAMES:
        return (f"its pixels are {_PHOTOMETRIC_NAMES[photometric]} (photometric {photometric}), "
                "not RGB")
    if photometric not in (_RGB, _YCBCR):
        return f"unknown photometric interpretation {photometric}"
    if page.dtype != np.uint8:
        return f"{page.bitspersample}-bit samples ({page.dtype}), not 8-bit"
    if spp == 4 and _alpha_kind(page) not in (1, 2):
        return "4 samples a pixel without an alpha ExtraSamples tag"
    if spp not in (3, 4):
        return f"{spp} samples a pixel, not RGB"
    if page.planarconfig != 1:
        return "planar (separate) colour planes are not supported"
    if page.imagedepth > 1:
        return "volumetric TIFF pages are not supported"
    if compression == _OJPEG:
        return "old-style JPEG (compression 6) is not supported"
    if compression not in _CODECS:
        return f"compression {compression} has no decoder here"
    if photometric == _YCBCR and compression != _JPEG:
        if spp != 3:
            return "YCbCr with extra samples is not supported"
        if tuple(page.subsampling or (1, 1)) != (1, 1):
            return (f"YCbCr with chroma subsampling {tuple(page.subsampling)} outside JPEG "
                    "is not supported")
    return None


def page_converter(page) -> Callable[[np.ndarray], np.ndarray] | None:
    """The function turning a decoded segment of a servable page into RGB, or None (already RGB).

    The function takes and returns (h, w, samples) uint8 arrays; its output has 3 samples.
    """
    photometric, compression = int(page.photometric), int(page.compression)
    if compression == _J2K_YCBCR:
        return jfif_ycbcr_to_rgb
    if photometric == _YCBCR and compression != _JPEG:
        return _tiff_ycbcr(page)
    alpha = _alpha_kind(page)
    if alpha is not None:
        return _composite_associated if alpha == 1 else _composite_unassociated
    return None


def jfif_ycbcr_to_rgb(seg: np.ndarray) -> np.ndarray:
    """Full-range YCbCr → RGB (T.871: R = Y + 1.402 Cr', G = Y − 0.344136 Cb' − 0.714136 Cr',
    B = Y + 1.772 Cb', with Cb' = Cb − 128)."""
    return _ycbcr(seg, 0.0, 255.0, (0.299, 0.587, 0.114))


def _tiff_ycbcr(page) -> Callable[[np.ndarray], np.ndarray]:
    """TIFF 6.0 §21 YCbCr → RGB with the page's YCbCrCoefficients and ReferenceBlackWhite."""
    tags = page.tags
    coeffs = tags.valueof(529, (299 / 1000, 587 / 1000, 114 / 1000))  # YCbCrCoefficients
    ref = tags.valueof(532, None)  # ReferenceBlackWhite
    luma = tuple(float(np.divide(*c)) if isinstance(c, tuple) else float(c) for c in _pairs(coeffs))
    refs = [float(np.divide(*r)) if isinstance(r, tuple) else float(r) for r in _pairs(ref)] \
        if ref is not None else [0.0, 255.0, 128.0, 255.0, 128.0, 255.0]
    if len(refs) != 6 or len(luma) != 3:
        refs, luma = [0.0, 255.0, 128.0, 255.0, 128.0, 255.0], (0.299, 0.587, 0.114)

    def convert(seg: np.ndarray) -> np.ndarray:
        f = seg[..., :3].astype(np.float32)
        y = (f[..., 0] - refs[0]) * 255.0 / max(refs[1] - refs[0], 1.0)
        cb = (f[..., 1] - refs[2]) * 127.0 / max(refs[3] - refs[2], 1.0)
        cr = (f[..., 2] - refs[4]) * 127.0 / max(refs[5] - refs[4], 1.0)
        return _rgb_from(y, cb, cr, luma)

    return convert


def _pairs(value):
    """Tag values come as flat rationals (n, d, n, d, ...) or as numbers; pair the former."""
    value = tuple(value)
    if value and all(isinstance(v, int) for v in value) and len(value) in (6, 12):
        return [(value[i], value[i + 1]) for i in range(0, len(value), 2)]
    return list(value)


def _ycbcr(seg, black, white, luma) -> np.ndarray:
    f = seg[..., :3].astype(np.float32)
    return _rgb_from(f[..., 0] - black, f[..., 1] - 128.0, f[..., 2] - 128.0, luma)


def _rgb_from(y, cb, cr, luma) -> np.ndarray:
    lr, lg, lb = luma
    r = y + (2.0 - 2.0 * lr) * cr
    b = y + (2.0 - 2.0 * lb) * cb
    g = (y - lb * b - lr * r) / lg
    out = np.stack([r, g, b], axis=-1)
    np.rint(out, out=out)
    return np.clip(out, 0, 255).astype(np.uint8)


def _composite_unassociated(seg: np.ndarray) -> np.ndarray:
    """RGB over white with straight (unassociated) alpha: c·a + 255·(1 − a)."""
    a = seg[..., 3:4].astype(np.float32) / 255.0
    out = seg[..., :3].astype(np.float32) * a + 255.0 * (1.0 - a)
    return np.clip(np.rint(out), 0, 255).astype(np.uint8)


def _composite_associated(seg: np.ndarray) -> np.ndarray:
    """RGB over white with premultiplied (associated) alpha: c + 255·(1 − a)."""
    a = seg[..., 3:4].astype(np.int32)
    return np.clip(seg[..., :3].astype(np.int32) + 255 - a, 0, 255).astype(np.uint8)
