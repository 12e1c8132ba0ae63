"""DICOM whole-slide-image series: which files make one slide, and what each instance holds.

A DICOM WSI is a *series* (one SeriesInstanceUID, usually one folder): one instance (file) a
pyramid level, ``ImageType`` value 3 ``VOLUME``, plus ``THUMBNAIL``, ``LABEL`` and ``OVERVIEW``
instances, which are associated images, never slides. This module reads instance headers only
(pydicom, stopping before the pixel data) and groups them; backends read the pixels: OpenSlide
opens any one file of the series and finds the others in the same folder, and a frame-reading
backend can take :class:`DicomSeries` as it is (frame size, frame count, transfer syntax and
organization of each level are recorded here).

References
----------
.. [1] DICOM PS3.3, A.32.8 "VL Whole Slide Microscopy Image IOD" (Supplement 145): ImageType
   value 3, TotalPixelMatrixColumns/Rows, DimensionOrganizationType, Shared Functional Groups
   Pixel Measures (PixelSpacing in mm, row spacing first).
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import NamedTuple

from tilewright.errors import DamagedSlideError, SlideNotFoundError, TilewrightError, UnsupportedSlideError
from tilewright.location.byte_source import open_binary
from tilewright.location.objpath import ObjectPath, as_path
from tilewright.location.url import is_url

__all__ = ["DicomInstance", "DicomSeries", "WSM_SOP_CLASS", "is_dicom_file", "read_instance",
           "find_series", "series_in_folder"]

#: SOP Class UID of VL Whole Slide Microscopy Image Storage (PS3.4 B.5).
WSM_SOP_CLASS = "1.2.840.10008.5.1.4.1.1.77.1.6"
_KINDS = ("VOLUME", "THUMBNAIL", "LABEL", "OVERVIEW")


class DicomInstance(NamedTuple):
    """The header facts of one WSI instance (one file) that readers need."""

    path: Path
    series_uid: str
    kind: str  # VOLUME | THUMBNAIL | LABEL | OVERVIEW
    height: int  # TotalPixelMatrixRows
    width: int  # TotalPixelMatrixColumns
    frame_height: int  # Rows
    frame_width: int  # Columns
    frames: int  # NumberOfFrames
    transfer_syntax: str
    photometric: str
    organization: str  # DimensionOrganizationType (TILED_FULL, TILED_SPARSE, ...)
    pixel_spacing: tuple[float, float] | None  # mm (row spacing = y, column spacing = x)
    focal_planes: int
    optical_paths: int
    dataset: object = None  # the parsed header (pydicom Dataset, up to the pixel data), kept for the reader
    header_end: int = 0  # file offset where the header stops: the Pixel Data element starts there


class DicomSeries(NamedTuple):
    """The instances of one series: pyramid levels (largest first) and associated images."""

    folder: Path
    series_uid: str
    volumes: tuple  # DicomInstance, largest first
    associated: dict  # kind (lower case) -> DicomInstance
    alone: bool  # no other WSI series shares the folder

    @property
    def source(self) -> Path:
        """What names the slide: the folder when it holds only this series, else the level-0 file."""
        return self.folder if self.alone else self.volumes[0].path

    @property
    def name(self) -> str:
        """:attr:`source` as text; a folder in an object store ends with ``/`` (a key prefix)."""
        if is_url(self.source):
            return str(self.source) + ("/" if self.alone else "")
        return os.fspath(self.source)


def is_dicom_file(path: str | os.PathLike) -> bool:
    """True when the file (a path or URL) carries the DICOM Part 10 preamble (``DICM`` at byte 128)."""
    try:
        with open_binary(path) as fh:
            head = fh.read(132)
    except (OSError, TilewrightError):
        return False
    return len(head) == 132 and head[128:132] == b"DICM"


def read_instance(path: str | os.PathLike) -> DicomInstance | None:
    """Header of one file; None when it is not a VL Whole Slide Microscopy instance.

    The file is parsed once: the parsed header (``dataset``) and where it ends (``header_end``)
    go with the instance, so a reader of its frames does not parse it again.

    Raises
    ------
    DamagedSlideError
        The file has the DICOM preamble but its header cannot be parsed.
    """
    import pydicom

    path = as_path(path)
    try:
        with open_binary(path) as fh:
            ds = pydicom.dcmread(fh, stop_before_pixels=True)
            header_end = fh.tell()
    except TilewrightError:
        raise  # an object-store failure says why
    except Exception as exc:  # pydicom raises several types on malformed headers
        raise DamagedSlideError(f"the DICOM header cannot be parsed ({exc})", path) from exc
    if str(ds.get("SOPClassUID", "")) != WSM_SOP_CLASS:
        return None
    image_type = [str(v).upper() for v in (ds.get("ImageType") or [])]
    kind = image_type[2] if len(image_type) > 2 and image_type[2] in _KINDS else "VOLUME"
    spacing = None
    try:
        measures = ds.SharedFunctionalGroupsSequence[0].PixelMeasuresSequence[0]
        spacing = (float(measures.PixelSpacing[0]), float(measures.PixelSpacing[1]))
    except (AttributeError, IndexError, KeyError, TypeError, ValueError):
        pass
    try:
        return DicomInstance(
            path=path, series_uid=str(ds.SeriesInstanceUID), kind=kind,
            height=int(ds.get("TotalPixelMatrixRows", ds.Rows)),
            width=int(ds.get("TotalPixelMatrixColumns", ds.Columns)),
            frame_height=int(ds.Rows), frame_width=int(ds.Columns),
            frames=int(ds.get("NumberOfFrames", 1) or 1),
            transfer_syntax=str(ds.file_meta.TransferSyntaxUID),
            photometric=str(ds.get("PhotometricInterpretation", "")),
            organization=str(ds.get("DimensionOrganizationType", "")),
            pixel_spacing=spacing,
            focal_planes=int(ds.get("TotalPixelMatrixFocalPlanes", 1) or 1),
            optical_paths=int(ds.get("NumberOfOpticalPaths", 1) or 1),
            dataset=ds if kind == "VOLUME" else None, header_end=header_end)
    except (AttributeError, TypeError, ValueError) as exc:
        raise DamagedSlideError(f"the DICOM WSI header lacks a required attribute ({exc})", path) from exc


def _candidates(folder: Path) -> list[Path]:
    """Files of a folder that may be DICOM: ``.dcm`` names, and names without a suffix that carry
    the DICOM preamble (archives often export without extensions)."""
    out = []
    if isinstance(folder, ObjectPath):  # one listing says which keys are objects
        from tilewright.location.objects import list_children

        entries = [ObjectPath(url) for url, _ in list_children(folder.url)[0]]
    else:
        entries = [e for e in sorted(folder.iterdir()) if e.is_file()]
    for entry in entries:
        if entry.name.startswith("."):
            continue
        if entry.suffix.lower() == ".dcm" or (not entry.suffix and is_dicom_file(entry)):
            out.append(entry)
    return out


def series_in_folder(folder: str | os.PathLike, *, known: dict | None = None) -> list[DicomSeries]:
    """Every WSI series with at least one VOLUME instance among the folder's files (not recursive).

    Series holding only THUMBNAIL, LABEL or OVERVIEW instances are not slides and are left out,
    as are DICOM files of other kinds (CT, reports, ...). Sorted by their level-0 file name.
    ``known``: instances already read, by path (not parsed again).
    """
    folder = as_path(folder)
    groups: dict[str, list[DicomInstance]] = {}
    known = known or {}
    for path in _candidates(folder):
        inst = known[path] if path in known else read_instance(path)
        if inst is not None:
            groups.setdefault(inst.series_uid, []).append(inst)
    slides = [(uid, items) for uid, items in groups.items() if any(i.kind == "VOLUME" for i in items)]
    out = []
    for uid, items in slides:
        volumes = sorted((i for i in items if i.kind == "VOLUME"), key=lambda i: (-i.height * i.width, i.path.name))
        associated = {}
        for i in items:
            if i.kind != "VOLUME":
                associated.setdefault(i.kind.lower(), i)
        out.append(DicomSeries(folder, uid, tuple(volumes), associated, alone=len(slides) == 1))
    return sorted(out, key=lambda s: s.volumes[0].path.name)


def find_series(path: str | os.PathLike) -> DicomSeries:
    """The series a folder holds, or the series of one of its files.

    Parameters
    ----------
    path : str or os.PathLike
        A folder holding one WSI series, or any file (level, thumbnail, label) of a series.

    Raises
    ------
    SlideNotFoundError
        A folder without any DICOM WSI series.
    UnsupportedSlideError
        A folder holding several series (open one of their files), a file that is not a WSI
        instance, or a series without VOLUME instances (only a label or overview).
    """
    given = path
    path = as_path(path)
    if isinstance(path, ObjectPath):  # a key prefix (named with a trailing "/", or no object of that name)
        folder = str(given).endswith("/") or not path.is_file()
    else:
        folder = path.is_dir()
    if folder:
        found = series_in_folder(path)
        if not found:
            raise SlideNotFoundError(
                "is a folder without a DICOM whole-slide series; give a slide file, or the folder "
                "of one DICOM series", path)
        if len(found) > 1:
            names = ", ".join(s.volumes[0].path.name for s in found)
            raise UnsupportedSlideError(
                f"the folder holds {len(found)} DICOM whole-slide series; open one of their files "
                f"({names})", path)
        return found[0]
    inst = read_instance(path)
    if inst is None:
        raise UnsupportedSlideError(
            "a DICOM file that is not a whole-slide image (VL Whole Slide Microscopy)", path)
    for series in series_in_folder(path.parent, known={path: inst}):
        if series.series_uid == inst.series_uid:
            return series
    raise UnsupportedSlideError(
        f"the DICOM series holds no VOLUME (pyramid level) instance, only {inst.kind.lower()} "
        "images; it is not a slide", path)
