"""open: open a whole-slide image with the backend that serves it correctly (`tw.open`)."""

from __future__ import annotations

import os

from tilewright.errors import (
    NotAnImageError,
    SlideError,
    SlideTooLargeError,
    UnsupportedSlideError,
)
from tilewright.location.url import is_url
from tilewright.slide.colour import MODES, slide_colour
from tilewright.slide.resolution import checked_mpp
from tilewright.slide.sniff import MAX_PIXELS, MAX_SIDE, sniff
from tilewright.slide.wholeslide import WholeSlide

__all__ = ["open"]

_BACKENDS = ("auto", "tiff", "dicom", "openslide")


def open(path: str | os.PathLike, *, mpp: float | None = None,
             backend: str = "auto", verify: bool = True, colour_profile: str = "apply") -> WholeSlide:
    """Open a whole-slide image.

    Parameters
    ----------
    path : str or os.PathLike
        The slide file; for a DICOM whole-slide series, its folder or any file of the series
        (the slide's ``path`` is then the folder, or the level-0 file when other series share
        the folder). May be an object-store URL (``s3://bucket/a.svs``, ``gs://``, ``az://``,
        ``https://``; a DICOM series' folder is a key prefix): TIFF-family files and DICOM
        series are then read by range requests, only the byte ranges a read touches (see
        :mod:`tilewright.location`); credentials come from each cloud's standard environment
        variables and config files. Formats only OpenSlide reads are refused for URLs
        (OpenSlide reads local files): copy them to a local disk.
    mpp : float, optional
        Level-0 µm/px to use instead of what the file records (for files that lack or
        misstate it).
    backend : {"auto", "tiff", "dicom", "openslide"}
        ``"tiff"`` decodes TIFF-family pyramids (tiled TIFF, OME-TIFF, Aperio-style SVS)
        directly, touching only the tiles a read needs; ``"dicom"`` does the same for the frames
        of a DICOM WSI series (JPEG, JPEG 2000 or uncompressed, TILED_FULL or TILED_SPARSE, see
        :mod:`tilewright.slide.dicom_backend`); ``"openslide"`` serves every format OpenSlide
        reads. ``"auto"`` uses ``"tiff"`` (TIFF files) or ``"dicom"`` (DICOM series) when it
        serves the slide with its levels and a resolution, else ``"openslide"``.
    verify : bool
        Check every JPEG tile the tiff backend decodes for a desynchronized entropy-coded stream
        (damage that decoders pass silently as garbage pixels, see
        :mod:`tilewright.slide.jpeg_check`); a damaged tile raises DamagedSlideError naming it.
        On by default. Costs about 7 % of JPEG decoding for tiles without vertical chroma
        subsampling (4:4:4, RGB) and about 65 % for YCbCr 4:2:0 tiles (``benchmarks/jpeg_verify.py``);
        ``False`` returns damaged tiles as the decoder makes them (garbage, no error).
        OpenSlide applies its own strict checks regardless.
    colour_profile : {"apply", "ignore"}
        ``"apply"`` converts every pixel read from the file's embedded ICC profile (TIFF tag
        InterColorProfile, or the profile OpenSlide finds) to sRGB, relative colorimetric (see
        :mod:`tilewright.slide.colour`); a slide without a profile is read as it is.
        ``"ignore"`` returns the file's raw pixels, bit for bit.

    Returns
    -------
    WholeSlide
        Also a context manager.

    Raises
    ------
    SlideNotFoundError, EmptyFileError, NotAnImageError
        Missing path, zero-byte file, or a file that is not an image.
    DamagedSlideError
        Truncated or unparsable file.
    UnsupportedSlideError
        No backend can serve it.
    MissingResolutionError, ImplausibleResolutionError
        No µm/px recorded and none given, or a value outside 0.05-20 µm/px.
    SlideTooLargeError
        Declared dimensions are absurd (refused before any allocation).
    ColourProfileError
        ``colour_profile="apply"`` and the embedded profile is damaged or is not an RGB device
        profile (the message says to use ``"ignore"``).

    Examples
    --------
    >>> import tilewright as tw                                  # doctest: +SKIP
    >>> with tw.open("slide.svs") as slide:                  # doctest: +SKIP
    ...     view = slide.at_mpp(0.5)
    ...     block = view.read(0, 0, 2048, 2048)
    """
    if backend not in _BACKENDS:
        raise ValueError(f"backend must be one of {_BACKENDS}, got {backend!r}")
    if colour_profile not in MODES:
        raise ValueError(f"colour_profile must be one of {MODES}, got {colour_profile!r}")
    if is_url(path):  # an object-store URL: read by range requests (tilewright.location)
        path = str(path)
        kind = _url_kind(path)
    else:
        path = os.fspath(path)
        kind = "dicom" if os.path.isdir(path) else sniff(path)  # a folder is a slide only as one DICOM series
    if kind == "dicom":
        from tilewright.slide.dicom_series import find_series

        series = find_series(path)
        path = series.name
        reader = _open_reader(str(series.volumes[0].path), kind, backend, mpp, verify, shown=path,
                              series=series)
    else:
        reader = _open_reader(path, kind, backend, mpp, verify)
    try:
        h0, w0 = reader.level_shapes[0]
        if max(h0, w0) > MAX_SIDE or h0 * w0 > MAX_PIXELS or h0 < 1 or w0 < 1:
            raise SlideTooLargeError(
                f"declares {w0} x {h0} px at level 0, beyond the supported "
                f"{MAX_SIDE} px a side / {MAX_PIXELS:.0e} px; the header is likely corrupt",
                path)
        resolution = checked_mpp(reader.resolution, mpp, path)
        colour = slide_colour(getattr(reader, "icc_profile", None), colour_profile, path)
    except BaseException:
        reader.close()
        raise
    return WholeSlide(path, reader, resolution, mpp_override=mpp, requested_backend=backend, verify=verify,
                      colour=colour, colour_mode=colour_profile, reopen=_reopen)


def _url_kind(url: str) -> str:
    """What a URL names: a slide file (its sniffed kind), or a key prefix, which is a slide only as
    one DICOM series (a trailing ``/`` says so without asking the store)."""
    from tilewright.errors import SlideNotFoundError
    from tilewright.location.objects import is_prefix
    from tilewright.location.url import LISTABLE, split_url

    if url.endswith("/"):
        return "dicom"
    try:
        return sniff(url)
    except SlideNotFoundError:
        if split_url(url)[0] in LISTABLE and is_prefix(url):
            return "dicom"
        raise


#: Why a URL is refused when only OpenSlide could read the slide.
OPENSLIDE_NEEDS_A_FILE = ("only OpenSlide reads this slide, and OpenSlide reads local files only; copy it to a local "
                          "disk and give that path, or convert it to pyramidal tiled TIFF or OME-TIFF, which are "
                          "read from the bucket directly")


def _open_reader(path: str, kind: str, backend: str, mpp: float | None, verify: bool = True,
                 shown: str | None = None, series=None):
    """The backend serving ``path``; errors name ``shown`` (a DICOM series' folder) if given;
    ``series`` is the DicomSeries of a DICOM slide (``path`` its level-0 file)."""
    from tilewright.slide.openslide_backend import OpenSlideBackend
    from tilewright.slide.tiff_backend import TiffBackend

    if is_url(path):
        return _url_reader(path, kind, backend, verify, shown, series)

    if backend == "tiff":
        if kind != "tiff":
            raise UnsupportedSlideError(
                f"the tiff backend reads TIFF files only (this is {kind}); use backend='auto'",
                shown or path)
        return TiffBackend(path, verify_jpeg=verify)
    if kind == "dicom":
        return _dicom_reader(series, path, backend, verify, shown or path)
    if backend == "dicom":
        raise UnsupportedSlideError(
            f"the dicom backend reads DICOM whole-slide series only (this is {kind}); use backend='auto'", path)
    if backend == "openslide":
        return OpenSlideBackend(path)
    tiff_error = None
    if kind == "tiff":
        try:
            reader = TiffBackend(path, verify_jpeg=verify)
        except UnsupportedSlideError as exc:
            tiff_error = exc
        else:
            if reader.resolution.mpp is not None or mpp is not None:
                return reader
            # no resolution in what tifffile sees: OpenSlide may know the vendor's fields
            try:
                other = OpenSlideBackend(path)
            except SlideError:
                return reader
            if other.resolution.mpp is not None:
                reader.close()
                return other
            other.close()
            return reader
    try:
        return OpenSlideBackend(path)
    except UnsupportedSlideError as exc:
        if kind == "other":
            raise NotAnImageError(
                "no backend recognizes this file as an image (tiff or OpenSlide formats)",
                path) from exc
        reason = f" ({tiff_error.reason})" if tiff_error is not None else ""
        raise UnsupportedSlideError(
            f"neither the tiff backend nor OpenSlide can read it as a whole-slide "
            f"pyramid{reason}; convert it to pyramidal tiled TIFF or OME-TIFF", path) from exc


def _url_reader(path: str, kind: str, backend: str, verify: bool, shown: str | None, series):
    """The direct backend serving a slide in an object store; OpenSlide (local files only) is
    never tried: a slide only it could read is refused with the reason."""
    from tilewright.slide.dicom_backend import DicomBackend
    from tilewright.slide.tiff_backend import TiffBackend

    if backend == "openslide":
        raise UnsupportedSlideError(f"backend='openslide' cannot read a URL: {OPENSLIDE_NEEDS_A_FILE}", shown or path)
    if kind == "dicom" and backend in ("auto", "dicom"):
        try:
            return DicomBackend(series, verify_jpeg=verify)
        except UnsupportedSlideError as exc:
            raise UnsupportedSlideError(f"the dicom backend does not serve this series ({exc.reason}); "
                                        f"{OPENSLIDE_NEEDS_A_FILE}", shown or path) from exc
    if kind == "tiff" and backend in ("auto", "tiff"):
        try:
            return TiffBackend(path, verify_jpeg=verify)
        except UnsupportedSlideError as exc:
            raise UnsupportedSlideError(f"the tiff backend does not serve this file ({exc.reason}); "
                                        f"{OPENSLIDE_NEEDS_A_FILE}", path) from exc
    if backend != "auto":
        raise UnsupportedSlideError(f"the {backend} backend does not read {kind} files; use backend='auto'", path)
    if kind == "other":
        raise NotAnImageError("no backend recognizes this object as an image (tiff or DICOM)", path)
    raise UnsupportedSlideError(f"a {kind} file is not a whole-slide pyramid the direct backends read; "
                                f"{OPENSLIDE_NEEDS_A_FILE}", path)


def _dicom_reader(series, path: str, backend: str, verify: bool, shown: str):
    """The frame backend when it serves the series, else OpenSlide (which opens the level-0
    instance and finds the rest of the series in its folder). A damaged series is refused by
    either: it is not handed on."""
    from tilewright.slide.dicom_backend import DicomBackend
    from tilewright.slide.openslide_backend import OpenSlideBackend

    if backend == "openslide":
        return OpenSlideBackend(path)
    try:
        return DicomBackend(series, verify_jpeg=verify)
    except UnsupportedSlideError as exc:
        if backend == "dicom":
            raise
        frame_error = exc
    try:
        return OpenSlideBackend(path)
    except SlideError as exc:  # OpenSlide says "damaged" for layouts it does not handle, too
        raise UnsupportedSlideError(
            f"neither the dicom backend ({frame_error.reason}) nor OpenSlide ({exc.reason}) reads this "
            "series; convert it to pyramidal tiled TIFF or OME-TIFF", shown) from exc


def _reopen(path, mpp, backend, verify=True, colour_profile="apply"):
    return open(path, mpp=mpp, backend=backend, verify=verify, colour_profile=colour_profile)
