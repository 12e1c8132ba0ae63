"""Direct TIFF-family backend: tifffile for the structure, positional reads for the tiles.

tifffile parses the IFDs once (levels of an IFD chain, SubIFD or OME series pyramids,
Aperio-style SVS). Reads then go through :class:`tilewright.slide.tile_grid.GridReader`: only
the tiles a region touches are fetched and decoded, with the page's own decoder (tifffile's,
imagecodecs: libjpeg-turbo for JPEG) as the reference, and 8-bit RGB JPEG tiles decoded directly
with the colour-space arguments tifffile would pass.
"""

from __future__ import annotations


import numpy as np

from tilewright.errors import DamagedSlideError, SlideTooLargeError, TilewrightError, UnsupportedSlideError
from tilewright.slide import colour as _colour
from tilewright.slide.sniff import MAX_PIXELS, MAX_SIDE
from tilewright.slide.tiff_pages import discover
from tilewright.slide.tiff_pixels import page_converter
from tilewright.slide.tiff_strips import read_rows, strip_problem
from tilewright.slide.tiff_vendors import OPENSLIDE_ONLY, philips_pyramid
from tilewright.slide.tile_grid import GridLevel, GridReader

__all__ = ["TiffBackend"]

class _Level(GridLevel):
    """One pyramid level: a TIFF page and what is needed to decode its segments (tiles or strips)."""

    __slots__ = ("decode", "raw_rows", "samples")

    def __init__(self, page, size=None):
        # size: the level's true (height, width) when the page is padded beyond it (Philips)
        height, width = size or (int(page.imagelength), int(page.imagewidth))
        chunks = page.chunks
        tile_h, tile_w = int(chunks[-3]), int(chunks[-2])
        if not page.is_tiled:  # RowsPerStrip may exceed the image (one strip)
            tile_h = max(1, min(tile_h, height))
        super().__init__(height, width, tile_h, tile_w, page.dataoffsets, page.databytecounts,
                         jpegtables=page.jpegtables,
                         is_jpeg=int(page.compression) == 7,  # new-style JPEG (TIFF Technical Note 2)
                         jpeg=_jpeg_args(page),  # (colorspace, outcolorspace) for the direct JPEG path, or None
                         convert=page_converter(page),  # segment -> RGB (YCbCr, alpha), or None
                         stripped=not page.is_tiled)
        self.decode = page.decode
        self.samples = int(page.samplesperpixel)
        # uncompressed strips: read only the rows a region needs, whatever the strip length
        self.raw_rows = self.stripped and int(page.compression) == 1 and page.fillorder == 1

    def reference(self, data, index: int):
        """One segment as tifffile decodes it, (h, w, samples), or None."""
        seg = self.decode(data, index, jpegtables=self.jpegtables)[0]
        return None if seg is None else seg.reshape(seg.shape[-3:])


def _jpeg_args(page):
    """Colour-space arguments of imagecodecs.jpeg_decode for an 8-bit RGB JPEG page, else None."""
    if page.compression != 7 or page.bitspersample != 8 or page.samplesperpixel != 3 or page.extrasamples:
        return None
    try:
        from tifffile.tifffile import jpeg_decode_colorspace

        return jpeg_decode_colorspace(page.photometric, page.planarconfig, page.extrasamples, page.is_jfif)
    except Exception:  # noqa: BLE001 - any surprise: use tifffile's decoder
        return None


class TiffBackend(GridReader):
    """Serve a TIFF-family pyramid by decoding only the tiles a read touches.

    Parameters
    ----------
    path : str
        The slide file (already sniffed as TIFF).
    verify_jpeg : bool
        Check every decoded JPEG tile for a desynchronized entropy-coded stream (see
        :mod:`tilewright.slide.jpeg_check`); a damaged tile raises DamagedSlideError.

    Raises
    ------
    UnsupportedSlideError
        A TIFF this backend does not serve (vendor layout, non-RGB, no levels).
    DamagedSlideError
        The file is truncated (tile data past the end of the file) or its IFDs are unreadable.
    """

    name = "tiff"

    def __init__(self, path: str, *, verify_jpeg: bool = True):
        import tifffile

        from tilewright.location.url import is_url

        self.path = path
        self.associated = {}
        self.verify_jpeg = bool(verify_jpeg)
        source = None
        try:
            if is_url(path):  # the structure is read through the source's block cache
                from tilewright.location.byte_source import SourceFile, open_source
                from tilewright.location.url import url_name

                source = open_source(path)
                tf = tifffile.TiffFile(SourceFile(source, own=False), name=url_name(path))
            else:
                tf = tifffile.TiffFile(path)
        except Exception as exc:  # the header said TIFF: any parse failure means damage
            if source is not None:
                source.close()
            if isinstance(exc, TilewrightError):  # an object-store failure: it says why
                raise
            raise DamagedSlideError(f"the TIFF structure cannot be parsed ({exc})", path) from exc
        try:
            self._levels, self.resolution, self.flavour, found, self.icc_profile = self._inspect(tf, path)
            #: Associated images kept apart from the pyramid: name -> (height, width).
            self.associated = {k: (int(p.imagelength), int(p.imagewidth)) for k, p in found.items()}
        except BaseException as exc:
            tf.close()
            if source is not None:
                source.close()
            if isinstance(exc, TilewrightError) or not isinstance(exc, Exception):
                raise  # typed (slide or object-store) errors, Ctrl-C
            raise DamagedSlideError(f"the TIFF structure cannot be parsed ({exc})", path) from exc
        tf.close()
        h0, w0 = self._levels[0].height, self._levels[0].width
        if max(h0, w0) > MAX_SIDE or h0 * w0 > MAX_PIXELS:
            if source is not None:
                source.close()
            raise SlideTooLargeError(
                f"declares {w0} x {h0} px at level 0, beyond the supported {MAX_SIDE} px a "
                f"side / {MAX_PIXELS:.0e} px; the header is likely corrupt", path)
        self._open_files(sources=None if source is None else {path: source})

    # -- structure ---------------------------------------------------------------------
    @staticmethod
    def _inspect(tf, path):
        for flag in OPENSLIDE_ONLY:  # vendor layouts without an exact tile grid (see tiff_vendors)
            if getattr(tf, flag, False):
                raise UnsupportedSlideError(
                    f"{flag[3:].upper()} layout needs the OpenSlide backend", path)
        sizes = None
        if tf.is_philips:
            pyramid, sizes = philips_pyramid(tf, path)
        else:
            pyramid = discover(tf, path)
        levels = []
        for i, page in enumerate(pyramid.levels):
            problem = strip_problem(page, i)
            if problem is not None and i == 0:
                raise UnsupportedSlideError(problem, path)
            if problem is None:  # a reduced level stored in huge strips: finer levels serve it
                levels.append(_Level(page, None if sizes is None else sizes[i]))
        flavour = "ome" if tf.is_ome else "svs" if tf.is_svs else "philips" if tf.is_philips else "tiff"
        icc = _colour.tiff_profile(pyramid.levels[0])  # InterColorProfile of level 0, or None
        return levels, pyramid.resolution, flavour, pyramid.associated, icc

    # -- pixels ------------------------------------------------------------------------
    def reduces(self, level: int, factor: int) -> bool:
        """See :meth:`GridReader.reduces`; never for uncompressed strips (read row by row)."""
        return not self._levels[level].raw_rows and super().reduces(level, factor)

    def read(self, level: int, y: int, x: int, h: int, w: int, out: np.ndarray, factor: int = 1) -> None:
        """Decode the region ``[y, y+h) x [x, x+w)`` of a level into ``out`` (h, w, 3).

        The region must lie inside the level. Only the tiles (or strip rows) it touches are read.
        ``factor``: see :meth:`GridReader.read`.

        Raises
        ------
        DamagedSlideError
            A tile cannot be read or decoded (names the file, level and region).
        """
        lv = self._levels[level]
        if lv.raw_rows and self._fd is not None and factor == 1:
            read_rows(self._pread, lv, level, (y, x, h, w), out, self.path)
            return
        super().read(level, y, x, h, w, out, factor)
