"""Write a DICOM whole-slide-image series (VL Whole Slide Microscopy Image IOD) with pydicom.

Used by the tests and benchmarks to produce DICOM WSI series whose pixels and resolution are known
exactly: one file (instance) a pyramid level (``ImageType`` VOLUME), plus optional THUMBNAIL,
LABEL and OVERVIEW instances, all sharing one SeriesInstanceUID in one folder. Frames are tiles
in TILED_FULL order (row by row, no positions stored), JPEG baseline (YCbCr, the usual scanner
output), JPEG 2000 or uncompressed.

References
----------
.. [1] DICOM PS3.3, A.32.8 "VL Whole Slide Microscopy Image IOD" and C.8.12.4 "Whole Slide
   Microscopy Image" module (Supplement 145): TotalPixelMatrixColumns/Rows, DimensionOrganizationType
   TILED_FULL, ImageType value 3 (VOLUME, THUMBNAIL, LABEL, OVERVIEW), Pixel Measures.
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from pathlib import Path

import numpy as np

__all__ = ["write_dicom_series", "WSM_SOP_CLASS"]

#: SOP Class UID of VL Whole Slide Microscopy Image Storage (PS3.4 B.5).
WSM_SOP_CLASS = "1.2.840.10008.5.1.4.1.1.77.1.6"

_SYNTAX = {
    "jpeg": "1.2.840.10008.1.2.4.50",  # JPEG Baseline (Process 1)
    "jpeg2000": "1.2.840.10008.1.2.4.90",  # JPEG 2000 Image Compression (Lossless Only)
    "none": "1.2.840.10008.1.2.1",  # Explicit VR Little Endian
}


def _frames(img: np.ndarray, tile: int, codec: str, quality: int):
    import imagecodecs

    h, w = img.shape[:2]
    for y in range(0, h, tile):
        for x in range(0, w, tile):
            t = np.full((tile, tile, 3), 255, np.uint8)
            part = img[y:y + tile, x:x + tile]
            t[:part.shape[0], :part.shape[1]] = part
            if codec == "jpeg":
                yield imagecodecs.jpeg8_encode(t, level=quality)
            elif codec == "jpeg2000":
                yield imagecodecs.jpeg2k_encode(t, level=0, reversible=True, codecformat=0)
            else:
                yield t.tobytes()


def _instance(img, *, image_type, tile, codec, quality, mpp, uids, number, path):
    """One instance: a whole-slide-image dataset of ``img`` written to ``path``."""
    import pydicom
    from pydicom.dataset import Dataset, FileMetaDataset
    from pydicom.encaps import encapsulate
    from pydicom.sequence import Sequence as Seq
    from pydicom.uid import generate_uid

    h, w = img.shape[:2]
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
    ds.DimensionOrganizationType = "TILED_FULL"
    ds.Rows = ds.Columns = tile
    ds.TotalPixelMatrixRows, ds.TotalPixelMatrixColumns = h, w
    ds.TotalPixelMatrixFocalPlanes, ds.NumberOfOpticalPaths = 1, 1
    ds.NumberOfFrames = math.ceil(h / tile) * math.ceil(w / tile)
    ds.SamplesPerPixel, ds.PlanarConfiguration = 3, 0
    ds.PhotometricInterpretation = "YBR_FULL_422" if codec == "jpeg" else "RGB"
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
    ds.OpticalPathSequence = Seq([path_ds])
    frames = list(_frames(img, tile, codec, quality))
    if codec == "none":
        ds.PixelData = b"".join(frames)
    else:
        ds.PixelData = encapsulate(frames)
        ds["PixelData"].VR = "OB"
    pydicom.dcmwrite(path, ds, enforce_file_format=True)


def write_dicom_series(folder: str | os.PathLike, levels: Sequence[np.ndarray], *, mpp: float,
                       tile: int = 256, codec: str = "jpeg", quality: int = 90,
                       thumbnail: np.ndarray | None = None, label: np.ndarray | None = None,
                       overview: np.ndarray | None = None) -> list[Path]:
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
        Frame compression: JPEG baseline (YCbCr 4:2:0), lossless JPEG 2000, or uncompressed.
    quality : int
        JPEG quality.
    thumbnail, label, overview : ndarray, optional
        Associated images written as THUMBNAIL, LABEL and OVERVIEW instances (JPEG, one frame
        per tile like the levels).

    Returns
    -------
    list of Path
        The files written, levels first.
    """
    from pydicom.uid import generate_uid

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
        _instance(img, image_type=kind, tile=tile, codec=codec if kind == "VOLUME" else "jpeg",
                  quality=quality, mpp=mpp * scale, uids=uids, number=number, path=path)
        written.append(path)
    return written
