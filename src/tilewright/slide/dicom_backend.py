"""Direct DICOM whole-slide backend: the frames a read touches, decoded once, as for tiled TIFF.

A DICOM WSI series (see :mod:`tilewright.slide.dicom_series`) holds one VOLUME instance a pyramid
level; each instance is a grid of frames (tiles). This backend reads each level's frame table once
(see :mod:`tilewright.slide.dicom_frames`) and serves reads through
:class:`tilewright.slide.tile_grid.GridReader`: positional reads of the frames a region touches,
each decoded once, JPEG frames decoded straight into per-thread buffers and checked for a
desynchronized entropy-coded stream exactly as tiff tiles are.

Served (anything else raises UnsupportedSlideError, and ``tw.open`` hands the series to OpenSlide):

===========================  ===================================  ===================================
transfer syntax              photometric interpretation           pixels
===========================  ===================================  ===================================
JPEG Baseline (1.2.840.      YBR_FULL_422, YBR_FULL               JPEG YCbCr → RGB by the decoder
10008.1.2.4.50)              RGB                                  JPEG without colour transform (*)
JPEG 2000 (…4.90, …4.91)     RGB, YBR_RCT, YBR_ICT                RGB (the decoder inverts the MCT)
                             YBR_FULL                             YCbCr (T.871) → RGB
Explicit/implicit VR little  RGB                                  as stored
endian (uncompressed)        YBR_FULL, YBR_FULL_422               YCbCr (T.871; 4:2:2 pairs) → RGB
===========================  ===================================  ===================================

(*) JPEG frames whose stream says what its components are (a JFIF APP0 segment: YCbCr; an Adobe
APP14 segment: its transform flag; component identifiers R, G, B) are decoded as the stream says,
whatever the photometric interpretation claims (PS3.5 8.2.1 asks the two to agree; when a
converter mislabels the series, the stream is right: tested against the pixels written). Only
streams that say nothing are decoded as labelled. OpenSlide follows the label.

Always 8 bits, 3 samples, one focal plane and one optical path; frames addressable: TILED_FULL
(frames in row-major order), or per-frame Plane Position (Slide) on the frame grid (TILED_SPARSE;
frames never stored are glass). µm/px from the Pixel Measures of level 0; the optical path's ICC
profile is exposed as ``icc_profile`` (bytes) for colour management.

References
----------
.. [1] DICOM PS3.3, A.32.8 "VL Whole Slide Microscopy Image IOD", C.8.12.4 "Whole Slide
   Microscopy Image Module" (DimensionOrganizationType TILED_FULL: frames ordered by column, then
   row, then focal plane, then optical path), C.8.12.6.1 "Plane Position (Slide)"
   (Row/Column Position In Total Image Pixel Matrix, 1-based), C.8.12.5 "Optical Path Module"
   (ICC Profile), C.7.6.3.1.2 (YBR_FULL, YBR_FULL_422).
.. [2] DICOM PS3.5, 8.2.1 (JPEG image compression: photometric interpretation of the frames) and
   8.2.4 (JPEG 2000: RGB, YBR_RCT, YBR_ICT).
"""

from __future__ import annotations

import os

import numpy as np

from tilewright.errors import DamagedSlideError, TilewrightError, UnsupportedSlideError
from tilewright.location.byte_source import open_source
from tilewright.slide.dicom_frames import find_pixel_data, frame_table, join_fragments
from tilewright.slide.resolution import Resolution, resolution_from_xy
from tilewright.slide.tiff_pixels import jfif_ycbcr_to_rgb
from tilewright.slide.tile_grid import GridLevel, GridReader

__all__ = ["DicomBackend"]

_JPEG = {"1.2.840.10008.1.2.4.50": "jpeg"}
_J2K = {"1.2.840.10008.1.2.4.90": "jpeg2000", "1.2.840.10008.1.2.4.91": "jpeg2000"}
_NATIVE = {"1.2.840.10008.1.2.1": "none", "1.2.840.10008.1.2": "none"}
_CODECS = {**_JPEG, **_J2K, **_NATIVE}
_PHOTOMETRIC = {"jpeg": ("YBR_FULL_422", "YBR_FULL", "RGB"),
                "jpeg2000": ("RGB", "YBR_RCT", "YBR_ICT", "YBR_FULL"),
                "none": ("RGB", "YBR_FULL", "YBR_FULL_422")}
_JCS_RGB = 2  # libjpeg's J_COLOR_SPACE value for RGB


class _Frames(GridLevel):
    """One VOLUME instance: its frames on the level's tile grid."""

    __slots__ = ("codec", "photometric", "frame_of", "name", "jpeg_colour")

    def __init__(self, ds, path, table, grid_index, *, codec, photometric, jpeg_colour=None):
        h = int(ds.get("TotalPixelMatrixRows", ds.Rows))
        w = int(ds.get("TotalPixelMatrixColumns", ds.Columns))
        th, tw = int(ds.Rows), int(ds.Columns)
        cells = -(-h // th) * -(-w // tw)
        offsets, counts = np.zeros(cells, np.int64), np.zeros(cells, np.int64)
        offsets[grid_index], counts[grid_index] = table.offsets, table.counts
        super().__init__(
            h, w, th, tw, offsets, counts, is_jpeg=codec == "jpeg",
            jpeg=(jpeg_colour, _JCS_RGB) if codec == "jpeg" else None,
            convert=jfif_ycbcr_to_rgb if codec != "jpeg" and photometric in ("YBR_FULL", "YBR_FULL_422") else None,
            unwrap=join_fragments if table.fragmented else None, file=str(path))
        self.codec, self.photometric, self.name = codec, photometric, os.path.basename(str(path))
        self.jpeg_colour = jpeg_colour  # colour space of the JPEG components (None: libjpeg infers it)
        self.frame_of = np.full(cells, -1, np.int64)
        self.frame_of[grid_index] = np.arange(len(grid_index))

    def reference(self, data, index: int) -> np.ndarray:
        """One frame as its codec decodes it (before any YCbCr conversion), (rows, columns, 3)."""
        import imagecodecs

        th, tw = self.tile_h, self.tile_w
        if self.codec == "jpeg":
            seg = imagecodecs.jpeg8_decode(data, colorspace=self.jpeg_colour, outcolorspace=_JCS_RGB)
        elif self.codec == "jpeg2000":
            seg = imagecodecs.jpeg2k_decode(data)
        elif self.photometric == "YBR_FULL_422":  # Y1 Y2 Cb Cr a pair of pixels
            pairs = np.frombuffer(data, np.uint8, th * tw * 2).reshape(th, tw // 2, 4)
            seg = np.empty((th, tw, 3), np.uint8)
            seg[:, :, 0] = pairs[:, :, :2].reshape(th, tw)
            seg[:, :, 1:] = np.repeat(pairs[:, :, 2:], 2, axis=1)
        else:
            seg = np.frombuffer(data, np.uint8, th * tw * 3).reshape(th, tw, 3)
        if seg.ndim != 3 or seg.shape[:2] != (th, tw) or seg.shape[2] < 3:
            raise ValueError(f"the frame decodes to {seg.shape}, the header says {th} x {tw} x 3")
        return seg


class DicomBackend(GridReader):
    """Serve a DICOM WSI series by decoding only the frames a read touches.

    Parameters
    ----------
    series : DicomSeries
        The series (see :func:`tilewright.slide.dicom_series.find_series`).
    verify_jpeg : bool
        Check every JPEG frame for a desynchronized entropy-coded stream (see
        :mod:`tilewright.slide.jpeg_check`); a damaged frame raises DamagedSlideError.

    Raises
    ------
    UnsupportedSlideError
        A series this backend does not serve (see the module's table); OpenSlide may.
    DamagedSlideError
        Truncated instance, broken pixel data, fewer frames than declared.
    """

    name = "dicom"

    def __init__(self, series, *, verify_jpeg: bool = True):
        self.path = series.name
        self.verify_jpeg = bool(verify_jpeg)
        self.flavour = "dicom"
        self.associated = {kind: (inst.height, inst.width) for kind, inst in series.associated.items()}
        sizes = [(v.height, v.width) for v in series.volumes]
        if len(set(sizes)) != len(sizes):
            raise UnsupportedSlideError(
                "two VOLUME instances of one size (a concatenation, or focal planes or optical paths "
                "stored apart): which frames make the level is not decided here", self.path)
        self._levels, head, sources = [], None, {}
        try:
            for inst in series.volumes:  # headers parsed when the series was found, not again
                src = sources[str(inst.path)] = open_source(str(inst.path))
                ds, position = ((inst.dataset, inst.header_end) if inst.dataset is not None
                                else _header(src, inst.path))
                head = head or ds
                self._levels.append(self._level(ds, position, inst.path, src))
        except BaseException:
            for src in sources.values():
                src.close()
            raise
        self.resolution = _resolution(head)
        self.icc_profile = _icc_profile(head)
        self._open_files(unit="frame", sources=sources)

    def _level(self, ds, position: int, path, src) -> _Frames:
        """The frames of one instance on its grid, with their table read from the file ``src``."""
        name = os.path.basename(str(path))
        syntax = str(ds.file_meta.TransferSyntaxUID)
        codec = _CODECS.get(syntax)
        photometric = str(ds.get("PhotometricInterpretation", "")).strip()
        problem = _problem(ds, codec, syntax, photometric)
        if problem:
            raise UnsupportedSlideError(f"{name}: {problem}", self.path)
        th, tw = int(ds.Rows), int(ds.Columns)
        n = int(ds.get("NumberOfFrames", 1) or 1)
        grid_index = _grid_index(ds, n, th, tw, name, self.path)
        pixels = find_pixel_data(src, position, path)
        ext = (ds.ExtendedOffsetTable, ds.ExtendedOffsetTableLengths) \
            if "ExtendedOffsetTable" in ds and "ExtendedOffsetTableLengths" in ds else None
        table = frame_table(src, pixels, n, th * tw * (2 if photometric == "YBR_FULL_422" and codec == "none" else 3),
                            path, extended=ext)
        colour = _jpeg_colour(src, table, photometric) if codec == "jpeg" else None
        if len(grid_index) < n:  # TILED_FULL: the frames past the first plane are not read
            table = table._replace(offsets=table.offsets[:len(grid_index)], counts=table.counts[:len(grid_index)])
        return _Frames(ds, path, table, grid_index, codec=codec, photometric=photometric, jpeg_colour=colour)

    def _tile_name(self, lv, r: int, c: int) -> str:
        frame = int(lv.frame_of[r * lv.grid_w + c])
        return f"frame {frame + 1} (tile row {r}, column {c}) of {lv.name}"


def _header(src, path):
    """The instance's attributes up to the pixel data, and the file offset where they stop (the
    Pixel Data element follows there)."""
    import pydicom

    from tilewright.location.byte_source import SourceFile

    try:
        with SourceFile(src, own=False) as fh:
            ds = pydicom.dcmread(fh, stop_before_pixels=True)
            return ds, fh.tell()
    except TilewrightError:
        raise  # an object-store failure says why
    except Exception as exc:  # pydicom raises several types on malformed headers
        raise DamagedSlideError(f"the DICOM header of {os.path.basename(str(path))} cannot be parsed ({exc})",
                                str(path)) from exc


def _problem(ds, codec, syntax: str, photometric: str) -> str | None:
    """Why this backend cannot serve an instance, or None."""
    if codec is None:
        return f"transfer syntax {syntax} is not one of JPEG baseline, JPEG 2000 or uncompressed little endian"
    if photometric not in _PHOTOMETRIC[codec]:
        return f"photometric interpretation {photometric or '(none)'} of {codec} frames is not served here"
    if int(ds.get("SamplesPerPixel", 0)) != 3 or int(ds.get("BitsAllocated", 0)) != 8:
        return "pixels are not 3 samples of 8 bits"
    if codec == "none" and int(ds.get("PlanarConfiguration", 0) or 0) != 0:
        return "colour planes stored apart (PlanarConfiguration 1) are not served here"
    if codec == "none" and photometric == "YBR_FULL_422" and int(ds.Columns) % 2:
        return "YBR_FULL_422 frames of odd width"
    planes = int(ds.get("TotalPixelMatrixFocalPlanes", 1) or 1)
    paths = int(ds.get("NumberOfOpticalPaths", 1) or 1)
    if planes != 1 or paths != 1:
        return (f"{planes} focal planes and {paths} optical paths: which plane to serve is not decided "
                "here (one of each is)")
    return None


def _grid_index(ds, n: int, th: int, tw: int, name: str, where) -> np.ndarray:
    """Grid cell (row-major) of each frame, in frame order.

    Raises
    ------
    UnsupportedSlideError
        Frames not addressable on the tile grid (positions between grid cells, repeated).
    DamagedSlideError
        Fewer TILED_FULL frames than the grid needs.
    """
    h = int(ds.get("TotalPixelMatrixRows", ds.Rows))
    w = int(ds.get("TotalPixelMatrixColumns", ds.Columns))
    gh, gw = -(-h // th), -(-w // tw)
    organization = str(ds.get("DimensionOrganizationType", "")).upper()
    per_frame = ds.get("PerFrameFunctionalGroupsSequence")
    if organization == "TILED_FULL" or (not per_frame and n == gh * gw):
        if n < gh * gw:
            raise DamagedSlideError(
                f"{name} holds {n} frames where its TILED_FULL grid needs {gh * gw}; the file is damaged", where)
        return np.arange(gh * gw, dtype=np.int64)
    if not per_frame or len(per_frame) != n:
        raise UnsupportedSlideError(f"{name}: frames without a position for each (organization "
                                    f"{organization or 'not given'})", where)
    cells = np.empty(n, np.int64)
    for k, item in enumerate(per_frame):
        try:
            pos = item.PlanePositionSlideSequence[0]
            row, col = int(pos.RowPositionInTotalImagePixelMatrix) - 1, int(pos.ColumnPositionInTotalImagePixelMatrix) - 1
        except (AttributeError, IndexError, TypeError, ValueError) as exc:
            raise UnsupportedSlideError(f"{name}: frame {k + 1} has no Plane Position (Slide)", where) from exc
        if row % th or col % tw or not (0 <= row < gh * th and 0 <= col < gw * tw):
            raise UnsupportedSlideError(
                f"{name}: frame {k + 1} lies at row {row + 1}, column {col + 1}, off the {th} x {tw} frame "
                "grid (overlapping or shifted frames)", where)
        cells[k] = (row // th) * gw + col // tw
    if len(np.unique(cells)) != n:
        raise UnsupportedSlideError(f"{name}: several frames at one grid position", where)
    return cells


def _jpeg_colour(src, table, photometric: str):
    """Colour space to decode the JPEG frames of a level from: None (libjpeg infers it from the
    stream's markers) when the first frame's stream says what its components are, else the
    photometric interpretation's (RGB: no colour transform)."""
    from tilewright.slide.jpeg_strict import colour_signature

    stored = np.flatnonzero(table.counts)
    if not len(stored):
        return None
    i = int(stored[0])
    if table.fragmented:
        try:
            data = join_fragments(src.pread(int(table.counts[i]), int(table.offsets[i])))
        except ValueError:
            return None
    else:
        data = src.pread(int(min(table.counts[i], 1 << 16)), int(table.offsets[i]))
    sig = colour_signature(bytes(data))
    if sig is not None:
        jfif, adobe, comps = sig
        if jfif or adobe is not None or tuple(c[0] for c in comps) == (0x52, 0x47, 0x42):  # 'R', 'G', 'B'
            return None
    return _JCS_RGB if photometric == "RGB" else None


def _resolution(ds) -> Resolution:
    """Level-0 µm/px from the shared Pixel Measures (mm, row spacing = y first), objective power
    from the optical path."""
    objective = None
    try:
        power = ds.OpticalPathSequence[0].get("ObjectiveLensPower")
        objective = float(power) if power not in (None, "") and float(power) > 0 else None
    except (AttributeError, IndexError, TypeError, ValueError):
        pass
    try:
        spacing = ds.SharedFunctionalGroupsSequence[0].PixelMeasuresSequence[0].PixelSpacing
        y_um, x_um = float(spacing[0]) * 1e3, float(spacing[1]) * 1e3
    except (AttributeError, IndexError, KeyError, TypeError, ValueError):
        return Resolution(None, objective, None)
    return resolution_from_xy((x_um, y_um), objective, "dicom")


def _icc_profile(ds) -> bytes | None:
    """The ICC profile of the (single) optical path, or None."""
    try:
        icc = ds.OpticalPathSequence[0].get("ICCProfile")
    except (AttributeError, IndexError, TypeError):
        return None
    return bytes(icc) if icc else None

