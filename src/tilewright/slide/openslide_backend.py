"""OpenSlide backend: every format OpenSlide reads (SVS, NDPI, MRXS, SCN, BIF, DICOM, ...).

openslide-python is imported when the backend is first used, never at package import.
OpenSlide handles are safe to share between threads (the C library locks internally).

References
----------
.. [1] Goode, A., Gilbert, B., Harkes, J., Jukic, D., Satyanarayanan, M. (2013). OpenSlide: A
   vendor-neutral software foundation for digital pathology. J Pathol Inform 4:27.
"""

from __future__ import annotations

import numpy as np

from tilewright.errors import DamagedSlideError, UnsupportedSlideError
from tilewright.slide.colour import openslide_profile
from tilewright.slide.resolution import Resolution, mpp_from_openslide

__all__ = ["OpenSlideBackend"]


class OpenSlideBackend:
    """Serve a slide through OpenSlide, with alpha composited onto white.

    Parameters
    ----------
    path : str

    Raises
    ------
    UnsupportedSlideError
        OpenSlide does not recognize the file.
    DamagedSlideError
        OpenSlide recognizes it but fails to open it.
    """

    name = "openslide"

    def __init__(self, path: str):
        import openslide

        self.path = path
        try:
            self._slide = openslide.OpenSlide(path)
        except openslide.OpenSlideUnsupportedFormatError as exc:
            raise UnsupportedSlideError("not a format OpenSlide recognizes", path) from exc
        except openslide.OpenSlideError as exc:
            raise DamagedSlideError(f"OpenSlide cannot open it ({exc})", path) from exc
        self._error_type = openslide.OpenSlideError
        self.level_shapes = [(int(h), int(w)) for (w, h) in self._slide.level_dimensions]
        self._downsamples = [float(d) for d in self._slide.level_downsamples]
        self.resolution: Resolution = mpp_from_openslide(self._slide.properties)
        self.flavour = self._slide.properties.get("openslide.vendor", "unknown")
        self.icc_profile = openslide_profile(self._slide)  # what OpenSlide found, or None

    def tile_shape(self, level: int) -> tuple[int, int]:
        """Tile size OpenSlide reports for a level (falls back to 512)."""
        p = self._slide.properties
        th = p.get(f"openslide.level[{level}].tile-height")
        tw = p.get(f"openslide.level[{level}].tile-width")
        return (int(th) if th else 512, int(tw) if tw else 512)

    def read(self, level: int, y: int, x: int, h: int, w: int, out: np.ndarray) -> None:
        """Read the region ``[y, y+h) x [x, x+w)`` of a level into ``out`` (h, w, 3).

        Transparent pixels (outside the scanned area) become white.

        Raises
        ------
        DamagedSlideError
            OpenSlide fails to decode the region.
        """
        if self._slide is None:
            raise ValueError("the slide is closed")
        ds = self._downsamples[level]
        origin = (int(round(x * ds)), int(round(y * ds)))
        try:
            rgba = np.asarray(self._slide.read_region(origin, level, (w, h)))
        except self._error_type as exc:
            raise DamagedSlideError(
                f"OpenSlide failed reading level {level} region y={y}, x={x}, h={h}, w={w} "
                f"({exc}); the file is damaged", self.path) from exc
        alpha = rgba[..., 3]
        if alpha.min() == 255:
            out[...] = rgba[..., :3]
            return
        a = alpha[..., None].astype(np.float32) / 255.0
        out[...] = np.rint(rgba[..., :3] * a + 255.0 * (1.0 - a)).astype(np.uint8)

    def close(self) -> None:
        """Close the OpenSlide handle (idempotent)."""
        s, self._slide = self._slide, None
        if s is not None:
            s.close()
