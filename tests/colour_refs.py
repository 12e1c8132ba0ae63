"""Colour references shared by the colour-management tests.

- LittleCMS through Pillow's ImageCms, built without optimization (the full-precision pipeline),
  as the reference transform;
- profiles from Debian's ICC packages (icc-profiles-free, colord-data, libgs-common; `.ci/run`
  installs them), skipped where absent;
- LUT-based (lut16Type ``mft2``) RGB profiles written here from the published Adobe RGB (1998)
  definition, an independent construction of the tables a LUT profile holds (ICC.1:2001-04
  section 6.5.8);
- H&E-like colours from the Beer-Lambert law with the Ruifrok & Johnston (2001) stain vectors.
"""

from __future__ import annotations

import io
import struct
from pathlib import Path

import numpy as np
import pytest

from tilewright.demo import icc

DEBIAN_ICC = Path("/usr/share/color/icc")
# Ruifrok & Johnston (2001), Anal Quant Cytol Histol 23:291-299: H&E optical-density vectors
RUIFROK_H = np.array([0.65, 0.70, 0.29])
RUIFROK_E = np.array([0.07, 0.99, 0.11])


def debian_profile(relative: str) -> bytes:
    """Bytes of a profile shipped by a Debian package, or skip the test."""
    path = DEBIAN_ICC / relative
    if not path.exists():
        pytest.skip(f"{path} not installed (apt-get install icc-profiles-free colord-data libgs-common)")
    return path.read_bytes()


def lcms_reference(profile: bytes, rgb: np.ndarray) -> np.ndarray:
    """LittleCMS (Pillow ImageCms), unoptimized pipeline, relative colorimetric: profile -> sRGB."""
    from PIL import Image, ImageCms

    src = ImageCms.ImageCmsProfile(io.BytesIO(profile))
    xf = ImageCms.buildTransform(src, ImageCms.createProfile("sRGB"), "RGB", "RGB",
                                 renderingIntent=ImageCms.Intent.RELATIVE_COLORIMETRIC,
                                 flags=ImageCms.Flags.NOOPTIMIZE)
    flat = np.ascontiguousarray(rgb.reshape(1, -1, 3))
    return np.asarray(ImageCms.applyTransform(Image.fromarray(flat), xf)).reshape(rgb.shape)


def delta_e(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """CIEDE2000 between 8-bit sRGB colours (scikit-image: sRGB -> CIELAB D65, deltaE_ciede2000)."""
    from skimage.color import deltaE_ciede2000, rgb2lab

    return deltaE_ciede2000(rgb2lab(a.reshape(-1, 1, 3)), rgb2lab(b.reshape(-1, 1, 3))).ravel()


def random_colours(n: int = 100_000, seed: int = 0) -> np.ndarray:
    return np.random.default_rng(seed).integers(0, 256, (n, 3), dtype=np.uint8)


def he_colours(n: int = 50_000, seed: int = 0) -> np.ndarray:
    """H&E-like RGB: I = 255 * 10**-(c_H h + c_E e) with random amounts of each stain, plus noise."""
    rng = np.random.default_rng(seed)
    h = RUIFROK_H / np.linalg.norm(RUIFROK_H)
    e = RUIFROK_E / np.linalg.norm(RUIFROK_E)
    c = rng.gamma(2.0, 0.25, (n, 2))
    od = c[:, :1] * h + c[:, 1:] * e
    rgb = 255.0 * 10.0 ** (-od) + rng.normal(0, 3, (n, 3))
    return np.clip(np.rint(rgb), 0, 255).astype(np.uint8)


def adobe_rgb_to_srgb(rgb8: np.ndarray) -> np.ndarray:
    """Adobe RGB (1998) -> sRGB computed from the published definitions, float in [0, 1].

    Adobe RGB (1998) Color Image Encoding (2005): gamma 563/256 and its normalized RGB -> XYZ
    matrix (D65, section 4.3.4.1); IEC 61966-2-1: XYZ -> linear sRGB matrix and the encoding.
    Both are D65, so no adaptation; out-of-gamut colours are clipped in linear sRGB.
    """
    linear = (rgb8.astype(np.float64) / 255.0) ** (563 / 256)
    to_xyz = np.array([[0.57667, 0.18556, 0.18823], [0.29734, 0.62736, 0.07529], [0.02703, 0.07069, 0.99134]])
    to_srgb = np.array([[3.2406, -1.5372, -0.4986], [-0.9689, 1.8758, 0.0415], [0.0557, -0.2040, 1.0570]])
    s = np.clip(linear @ to_xyz.T @ to_srgb.T, 0.0, 1.0)
    return np.where(s <= 0.0031308, 12.92 * s, 1.055 * s ** (1 / 2.4) - 0.055)


def _adobe_xyz_d50(rgb01: np.ndarray) -> np.ndarray:
    """XYZ (D50 connection space) of Adobe RGB values in [0, 1] (published primaries, Bradford)."""
    spec = icc.ADOBE_RGB_1998
    m = icc.bradford(icc.xy_to_xyz(spec["white"]), icc.D50) @ icc.primaries_matrix(spec["primaries"], spec["white"])
    return (rgb01 ** spec["trc"]) @ m.T


def lut16_tag(xyz_of, grid: int = 33) -> bytes:
    """lut16Type (``mft2``), RGB -> XYZ: identity matrix and curves, a ``grid``**3 CLUT of ``xyz_of``."""
    axis = np.linspace(0.0, 1.0, grid)
    r, g, b = np.meshgrid(axis, axis, axis, indexing="ij")  # first input channel varies slowest
    xyz = xyz_of(np.stack([r, g, b], -1).reshape(-1, 3))
    clut = np.clip(np.rint(xyz * 32768.0), 0, 65535).astype(">u2")  # PCS XYZ: 0x8000 = 1.0
    identity = np.array([1, 0, 0, 0, 1, 0, 0, 0, 1]) * 65536
    ramp = np.array([0, 65535], ">u2").tobytes()
    return (b"mft2" + bytes(4) + struct.pack(">BBBB", 3, 3, grid, 0) + struct.pack(">9i", *identity)
            + struct.pack(">HH", 2, 2) + ramp * 3 + clut.tobytes() + ramp * 3)


def lut_profile(a2b0, a2b1=None, description: str = "Adobe RGB (1998) as a LUT profile") -> bytes:
    """An ICC v2 LUT-based RGB input profile: A2B0 (and A2B1) tables of XYZ functions."""
    tags = [(b"desc", icc.desc_tag(description)), (b"cprt", icc.text_tag("No copyright; test profile")),
            (b"wtpt", icc.xyz_tag(icc.D50)), (b"A2B0", lut16_tag(a2b0))]
    if a2b1 is not None:
        tags.append((b"A2B1", lut16_tag(a2b1)))
    return icc.assemble(tags, device_class=b"scnr")


def adobe_lut_profile(**kw) -> bytes:
    return lut_profile(_adobe_xyz_d50, **kw)


def desaturated_adobe_xyz(rgb01: np.ndarray) -> np.ndarray:
    """A different 'perceptual' rendering for A2B0: Adobe RGB pulled halfway towards grey."""
    grey = rgb01.mean(axis=1, keepdims=True)
    return _adobe_xyz_d50(0.5 * rgb01 + 0.5 * grey)


def write_profiled_slide(path, image: np.ndarray, profile: bytes | None, *, mpp: float = 0.2428,
                         layout: str = "ifd", factor: int = 2, compression: str = "zlib") -> Path:
    """A lossless pyramid of ``image`` whose level 0 carries ``profile`` in tag 34675."""
    from tilewright.demo.pyramid import write_pyramid

    write_pyramid(path, image, mpp=mpp, tile=256, compression=compression, layout=layout, factor=factor,
                  icc_profile=profile, objective=40.0 if layout == "svs" else None)
    return Path(path)
