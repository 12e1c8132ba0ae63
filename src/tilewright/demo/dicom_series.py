"""Write a DICOM whole-slide-image series (VL Whole Slide Microscopy Image IOD) with pydicom.

Used by the tests and benchmarks to produce DICOM WSI series whose pixels and resolution are known
exactly: one file (instance) a pyramid level (``ImageType`` VOLUME), plus optional THUMBNAIL,
LABEL and OVERVIEW instances, all sharing one SeriesInstanceUID in one folder. Frames are tiles,
JPEG baseline (YCbCr 4:2:0 labelled YBR_FULL_422, the usual scanner output; YCbCr 4:4:4 as
YBR_FULL; or RGB without a colour transform), JPEG 2000 (lossless, RCT) or uncompressed (RGB, or
YBR_FULL / YBR_FULL_422 samples converted by pydicom). Organization TILED_FULL (row by row, no
positions stored) or TILED_SPARSE (each frame's position in the Per-Frame Functional Groups,
frames in any order, frames left out read as glass). The encapsulated frames carry a Basic Offset
Table, an Extended Offset Table, or none; frames may be split into several fragments. The optical
path may carry an ICC profile.

References
----------
.. [1] DICOM PS3.3, A.32.8 "VL Whole Slide Microscopy Image IOD" and C.8.12.4 "Whole Slide
   Microscopy Image" module (Supplement 145): TotalPixelMatrixColumns/Rows, DimensionOrganizationType
   TILED_FULL / TILED_SPARSE, ImageType value 3 (VOLUME, THUMBNAIL, LABEL, OVERVIEW), Pixel
   Measures, Plane Position (Slide) (C.8.12.6.1), Optical Path (C.8.12.5, ICC Profile).
.. [2] DICOM PS3.5, A.4 "Transfer syntaxes for encapsulation of encoded pixel data" (Basic and
   Extended Offset Tables, fragments) and 8.2.1 (photometric interpretation of JPEG frames).
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path

import numpy as np

__all__ = ["write_dicom_series", "dicom_series_from_tiff", "WSM_SOP_CLASS"]

#: SOP Class UID of VL Whole Slide Microscopy Image Storage (PS3.4 B.5).
WSM_SOP_CLASS = "1.2.840.10008.5.1.4.1.1.77.1.6"

_SYNTAX = {
    "jpeg": "1.2.840.10008.1.2.4.50",  # JPEG Baseline (Process 1)
    "jpeg2000": "1.2.840.10008.1.2.4.90",  # JPEG 2000 Image Compression (Lossless Only)
    "none": "1.2.840.10008.1.2.1",  # Explicit VR Little Endian
}


#: Photometric interpretations the writer can give each codec's frames (first: the default).
PHOTOMETRIC = {"jpeg": ("YBR_FULL_422", "YBR_FULL", "RGB"), "jpeg2000": ("YBR_RCT", "RGB"),
               "none": ("RGB", "YBR_FULL", "YBR_FULL_422")}


def _encode(t: np.ndarray, codec: str, photometric: str, quality: int) -> bytes:
    """One frame's bytes."""
    import imagecodecs

    if codec == "jpeg":
        if photometric == "RGB":  # components stored as RGB: Adobe marker, no colour transform
            return imagecodecs.jpeg8_encode(t, level=quality, outcolorspace="rgb")
        return imagecodecs.jpeg8_encode(t, level=quality, subsampling="444" if photometric == "YBR_FULL" else "420")
    if codec == "jpeg2000":  # lossless; YBR_RCT: the codestream applies the reversible colour transform
        return imagecodecs.jpeg2k_encode(t, level=0, reversible=True, codecformat=0, mct=photometric == "YBR_RCT")
    if photometric == "RGB":
        return t.tobytes()
    from pydicom.pixels import convert_color_space

    ybr = convert_color_space(t, "RGB", "YBR_FULL")
    if photometric == "YBR_FULL":
        return ybr.tobytes()
    # YBR_FULL_422: Y1 Y2 Cb Cr for each horizontal pair of pixels (PS3.3 C.7.6.3.1.2)
    pairs = ybr.reshape(t.shape[0], t.shape[1] // 2, 2, 3).astype(np.uint16)
    chroma = ((pairs[:, :, 0, 1:] + pairs[:, :, 1, 1:] + 1) // 2).astype(np.uint8)
    return np.concatenate([pairs[:, :, :, 0].astype(np.uint8), chroma], axis=-1).tobytes()


def _tiles(img: np.ndarray, th: int, tw: int):
    """(row, column, tile pixels) of every frame, row by row; edge frames padded with white."""
    h, w = img.shape[:2]
    for r, y in enumerate(range(0, h, th)):
        for c, x in enumerate(range(0, w, tw)):
            t = np.full((th, tw, 3), 255, np.uint8)
            part = img[y:y + th, x:x + tw]
            t[:part.shape[0], :part.shape[1]] = part
            yield r, c, t


def _pixel_data(ds, frames: list[bytes], codec: str, offset_table: str, fragments: int) -> None:
    """Native or encapsulated Pixel Data, with the offset table asked for."""
    from pydicom.encaps import encapsulate, encapsulate_extended

    if codec == "none":
        ds.PixelData = b"".join(frames)
        return
    if offset_table == "extended":
        data, offsets, lengths = encapsulate_extended(frames)
        ds.ExtendedOffsetTable, ds.ExtendedOffsetTableLengths = offsets, lengths
    else:
        data = encapsulate(frames, fragments_per_frame=fragments, has_bot=offset_table == "basic")
    ds.PixelData = data
    ds["PixelData"].VR = "OB"


def _plane_positions(placed, tile: int, mpp: float):
    """Per-Frame Functional Groups of TILED_SPARSE frames: each frame's Plane Position (Slide)."""
    from pydicom.dataset import Dataset
    from pydicom.sequence import Sequence as Seq

    items = []
    for r, c in placed:
        pos = Dataset()
        pos.ColumnPositionInTotalImagePixelMatrix, pos.RowPositionInTotalImagePixelMatrix = c * tile + 1, r * tile + 1
        pos.XOffsetInSlideCoordinateSystem = round(20.0 - r * tile * mpp / 1e3, 6)
        pos.YOffsetInSlideCoordinateSystem = round(40.0 - c * tile * mpp / 1e3, 6)
        pos.ZOffsetInSlideCoordinateSystem = 0.0
        content = Dataset()
        content.DimensionIndexValues = [c + 1, r + 1]
        item = Dataset()
        item.PlanePositionSlideSequence = Seq([pos])
        item.FrameContentSequence = Seq([content])
        items.append(item)
    return Seq(items)


def _encoded(img, *, image_type, tile, codec, quality, photometric, sparse, omit, seed):
    """The frames of one instance: (frame shape, frames' bytes, their (row, column) when sparse)."""
    # levels are tiled; an associated image is one frame of its own size (as readers expect)
    th, tw = (tile, tile) if image_type == "VOLUME" else img.shape[:2]
    tiles = [(r, c, t) for r, c, t in _tiles(img, th, tw) if not (sparse and omit is not None and omit(r, c))]
    if sparse:  # any order: the positions say where each frame goes
        tiles = [tiles[i] for i in np.random.default_rng(seed).permutation(len(tiles))]
    frames = [_encode(t, codec, photometric, quality) for _, _, t in tiles]
    return (th, tw), frames, [(r, c) for r, c, _ in tiles] if sparse else None


def _instance(shape, frame, frames, *, image_type, codec, mpp, uids, number, path, photometric,
              positions=None, offset_table="basic", fragments=1, icc_profile=None):
    """One instance: a whole-slide-image dataset of ``shape`` (h, w) pixels stored as ``frames`` of
    ``frame`` (rows, columns) pixels (at ``positions``, (row, column) of the frame grid, when
    TILED_SPARSE), written to ``path``."""
    import pydicom
    from pydicom.dataset import Dataset, FileMetaDataset
    from pydicom.sequence import Sequence as Seq
    from pydicom.uid import generate_uid

    h, w = shape
    th, tw = frame
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = WSM_SOP_CLASS
    meta.MediaStorageSOPInstanceUID = generate_uid()
    meta.TransferSyntaxUID = _SYNTAX[codec]
    ds = Dataset()
    ds.file_meta = meta
    ds.SOPClassUID, ds.SOPInstanceUID = WSM_SOP_CLASS, meta.MediaStorageSOPInstanceUID
    ds.StudyInstanceUID, ds.SeriesInstanceUID, ds.FrameOfReferenceUID = uids
    ds.Modality, ds.Manufacturer = "SM", "tilewright synthetic"
    ds.PatientName, ds.PatientID, ds.StudyID, ds.AccessionNumber = "Synthetic^Slide", "SYN-0001", "1", ""
    ds.StudyDate, ds.StudyTime, ds.ContentDate, ds.ContentTime = "20260101", "120000", "20260101", "120000"
    ds.AcquisitionDateTime = "20260101120000"
    ds.ReferringPhysicianName, ds.PatientBirthDate, ds.PatientSex = "", "", ""
    ds.SeriesNumber, ds.InstanceNumber = 1, number
    ds.ImageType = ["ORIGINAL" if image_type == "VOLUME" and number == 1 else "DERIVED", "PRIMARY",
                    image_type, "NONE" if number == 1 or image_type != "VOLUME" else "RESAMPLED"]
    ds.DimensionOrganizationType = "TILED_FULL" if positions is None else "TILED_SPARSE"
    ds.Rows, ds.Columns = th, tw
    ds.TotalPixelMatrixRows, ds.TotalPixelMatrixColumns = h, w
    ds.TotalPixelMatrixFocalPlanes, ds.NumberOfOpticalPaths = 1, 1
    ds.SamplesPerPixel, ds.PlanarConfiguration = 3, 0
    ds.PhotometricInterpretation = photometric
    ds.BitsAllocated, ds.BitsStored, ds.HighBit, ds.PixelRepresentation = 8, 8, 7, 0
    ds.LossyImageCompression = "01" if codec == "jpeg" else "00"
    if codec == "jpeg":
        ds.LossyImageCompressionMethod = "ISO_10918_1"
    ds.BurnedInAnnotation, ds.SpecimenLabelInImage = ("YES", "YES") if image_type == "LABEL" else ("NO", "NO")
    ds.FocusMethod, ds.ExtendedDepthOfField, ds.VolumetricProperties = "AUTO", "NO", "VOLUME"
    ds.ImageOrientationSlide = [0, -1, 0, -1, 0, 0]
    ds.ImagedVolumeWidth, ds.ImagedVolumeHeight, ds.ImagedVolumeDepth = w * mpp / 1e3, h * mpp / 1e3, 0.001
    origin = Dataset()
    origin.XOffsetInSlideCoordinateSystem, origin.YOffsetInSlideCoordinateSystem = 20.0, 40.0
    ds.TotalPixelMatrixOriginSequence = Seq([origin])
    measures = Dataset()
    measures.PixelSpacing = [mpp / 1e3, mpp / 1e3]  # mm: row spacing (y), column spacing (x)
    measures.SliceThickness, measures.SpacingBetweenSlices = 0.001, 0.001
    shared = Dataset()
    shared.PixelMeasuresSequence = Seq([measures])
    ds.SharedFunctionalGroupsSequence = Seq([shared])
    path_ds = Dataset()
    path_ds.OpticalPathIdentifier = "1"
    colour = Dataset()
    colour.CodeValue, colour.CodingSchemeDesignator, colour.CodeMeaning = "414298005", "SCT", "Full Spectrum"
    path_ds.IlluminationColorCodeSequence = Seq([colour])
    kind = Dataset()
    kind.CodeValue, kind.CodingSchemeDesignator, kind.CodeMeaning = "111744", "DCM", "Brightfield illumination"
    path_ds.IlluminationTypeCodeSequence = Seq([kind])
    if icc_profile is not None:
        path_ds.ICCProfile = bytes(icc_profile)
    ds.OpticalPathSequence = Seq([path_ds])
    if positions is not None:
        ds.PerFrameFunctionalGroupsSequence = _plane_positions(positions, th, mpp)
    ds.NumberOfFrames = len(frames)
    _pixel_data(ds, frames, codec, offset_table, fragments)
    pydicom.dcmwrite(path, ds, enforce_file_format=True)


def write_dicom_series(folder: str | os.PathLike, levels: Sequence[np.ndarray], *, mpp: float,
                       tile: int = 256, codec: str = "jpeg", quality: int = 90,
                       thumbnail: np.ndarray | None = None, label: np.ndarray | None = None,
                       overview: np.ndarray | None = None, photometric: str = "",
                       organization: str = "TILED_FULL", omit=None, seed: int = 0,
                       offset_table: str = "basic", fragments: int = 1,
                       icc_profile: bytes | None = None) -> list[Path]:
    """Write one DICOM WSI series into ``folder``: a VOLUME instance a level, plus associated images.

    Parameters
    ----------
    folder : str or os.PathLike
        Created if missing; one ``.dcm`` file per instance is written into it.
    levels : sequence of ndarray
        uint8 (H, W, 3) RGB pixels of each pyramid level, finest first.
    mpp : float
        Level-0 µm/px; each level's Pixel Spacing is scaled by its width ratio to level 0.
    tile : int
        Frame (tile) side in pixels.
    codec : {"jpeg", "jpeg2000", "none"}
        Frame compression: JPEG baseline, lossless JPEG 2000, or uncompressed.
    quality : int
        JPEG quality.
    thumbnail, label, overview : ndarray, optional
        Associated images written as THUMBNAIL, LABEL and OVERVIEW instances (JPEG, one frame
        of the image's size).
    photometric : str
        Photometric interpretation of the levels' frames (see :data:`PHOTOMETRIC`; default the
        first listed for the codec): JPEG "YBR_FULL_422" (4:2:0), "YBR_FULL" (4:4:4) or "RGB";
        JPEG 2000 "YBR_RCT" or "RGB" (no colour transform); uncompressed "RGB", "YBR_FULL",
        "YBR_FULL_422".
    organization : {"TILED_FULL", "TILED_SPARSE"}
        TILED_SPARSE stores each frame's position and writes the frames in a shuffled order.
    omit : callable, optional
        ``omit(level, row, column) -> bool``: frames left out of a TILED_SPARSE level.
    seed : int
        Seed of the TILED_SPARSE frame order.
    offset_table : {"basic", "extended", "none"}
        Offset table of encapsulated frames: the Basic Offset Table item, the Extended Offset
        Table attributes (empty basic item), or none at all.
    fragments : int
        Fragments a frame (with a basic table or none).
    icc_profile : bytes, optional
        ICC profile of the optical path (every instance).

    Returns
    -------
    list of Path
        The files written, levels first.
    """
    from pydicom.uid import generate_uid

    if organization not in ("TILED_FULL", "TILED_SPARSE"):
        raise ValueError(f"organization must be TILED_FULL or TILED_SPARSE, not {organization!r}")
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    uids = (generate_uid(), generate_uid(), generate_uid())
    w0 = levels[0].shape[1]
    written = []
    extra = [("THUMBNAIL", thumbnail), ("LABEL", label), ("OVERVIEW", overview)]
    items = [("VOLUME", lv) for lv in levels] + [(kind, im) for kind, im in extra if im is not None]
    for number, (kind, img) in enumerate(items, start=1):
        img = np.ascontiguousarray(img, dtype=np.uint8)
        path = folder / f"{kind.lower()}_{number:02d}.dcm"
        scale = w0 / img.shape[1]
        volume = kind == "VOLUME"
        kind_codec = codec if volume else "jpeg"
        kind_photometric = (photometric if volume else "") or PHOTOMETRIC[kind_codec][0]
        if kind_photometric not in PHOTOMETRIC[kind_codec]:
            raise ValueError(f"{kind_codec} frames can be written as {PHOTOMETRIC[kind_codec]}, not {kind_photometric!r}")
        frame, frames, positions = _encoded(
            img, image_type=kind, tile=tile, codec=kind_codec, quality=quality, photometric=kind_photometric,
            sparse=volume and organization == "TILED_SPARSE", seed=seed + number,
            omit=(lambda r, c, k=number - 1: omit(k, r, c)) if volume and omit is not None else None)
        _instance(img.shape[:2], frame, frames, image_type=kind, codec=kind_codec, mpp=mpp * scale, uids=uids,
                  number=number, path=path, photometric=kind_photometric, positions=positions,
                  offset_table=offset_table if volume else "basic", fragments=fragments if volume else 1,
                  icc_profile=icc_profile)
        written.append(path)
    return written


def dicom_series_from_tiff(tiff_path: str | os.PathLike, folder: str | os.PathLike, *,
                           photometric: str | None = None) -> list[Path]:
    """Store the JPEG tiles of a tiled TIFF pyramid as the frames of a DICOM WSI series, unchanged.

    Each tile's JPEG stream (with the page's shared tables spliced in) becomes one frame of a
    TILED_FULL VOLUME instance a level, so the series decodes to exactly the TIFF's pixels (what a
    converter that does not re-encode does). Used by the benchmarks to compare the two formats on
    the same pixels.

    Parameters
    ----------
    tiff_path : str or os.PathLike
        A tiled JPEG pyramid the tiff backend serves (8-bit YCbCr or RGB JPEG tiles, square tiles).
    folder : str or os.PathLike
        Created if missing; one ``.dcm`` file a level.
    photometric : str, optional
        The photometric interpretation written. Default: "RGB" for RGB JPEG tiles, otherwise
        "YBR_FULL_422" whatever the tiles' chroma sampling (as converters label scanner output;
        YCbCr 4:4:4 tiles then carry a label that disagrees with their streams).

    Returns
    -------
    list of Path
        The files written, level 0 first.
    """
    from pydicom.uid import generate_uid

    from tilewright.slide.jpeg_strict import complete_stream
    from tilewright.slide.tiff_backend import TiffBackend

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    backend = TiffBackend(os.fspath(tiff_path))
    try:
        uids, written, w0 = (generate_uid(), generate_uid(), generate_uid()), [], backend.level_shapes[0][1]
        for number, lv in enumerate(backend._levels, start=1):
            if not lv.is_jpeg or lv.stripped or lv.tile_h != lv.tile_w:
                raise ValueError(f"level {number - 1} of {tiff_path} is not stored in square JPEG tiles")
            frames = [complete_stream(backend._pread(int(n), int(o)), lv.jpegtables)
                      for o, n in zip(lv.offsets.tolist(), lv.counts.tolist())]
            path = folder / f"volume_{number:02d}.dcm"
            _instance((lv.height, lv.width), (lv.tile_h, lv.tile_w), frames, image_type="VOLUME", codec="jpeg",
                      mpp=backend.resolution.mpp * w0 / lv.width, uids=uids, number=number, path=path,
                      photometric=photometric or ("RGB" if lv.jpeg and lv.jpeg[0] == 2 else "YBR_FULL_422"))
            written.append(path)
    finally:
        backend.close()
    return written
