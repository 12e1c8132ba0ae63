"""Typed errors raised by tilewright.

Every error names the file it concerns (``.path``) and says what the user can do about it.
They all derive from :class:`TilewrightError`, so a cohort run can catch one type, record a
one-line reason in the manifest and carry on with the next slide.
"""

from __future__ import annotations

import os

__all__ = [
    "TilewrightError",
    "SlideError",
    "SlideNotFoundError",
    "EmptyFileError",
    "NotAnImageError",
    "DamagedSlideError",
    "UnsupportedSlideError",
    "MissingResolutionError",
    "ImplausibleResolutionError",
    "SlideTooLargeError",
    "SlideGeometryError",
    "ResolutionUnavailableError",
    "ColourProfileError",
    "StainEstimationError",
    "RegionError",
    "StoreError",
    "IncompleteStoreError",
    "ConfigError",
    "OutputLockedError",
    "ObjectStoreError",
    "ObjectNotFoundError",
]


class TilewrightError(Exception):
    """Base class of every error tilewright raises on purpose.

    Parameters
    ----------
    message : str
        What went wrong and what to do about it.
    path : str or os.PathLike, optional
        The file or folder (or object-store URL) the error concerns; prefixed to the message.
    """

    def __init__(self, message: str, path: str | os.PathLike | None = None):
        # a local path, or an object-store URL (text, or an ObjectPath, which has no fspath)
        self.path = None if path is None else (path.url if hasattr(path, "url") else os.fspath(path))
        self.reason = message
        super().__init__(f"{self.path}: {message}" if self.path else message)

    def one_line(self) -> str:
        """The message on a single line, for manifests and logs."""
        return " ".join(str(self).split())


class SlideError(TilewrightError):
    """A slide file cannot be read as asked."""


class SlideNotFoundError(SlideError, FileNotFoundError):
    """The slide path does not exist."""


class EmptyFileError(SlideError):
    """The slide file has zero bytes."""


class NotAnImageError(SlideError):
    """The file is not an image any backend recognizes (for example text named ``.tif``)."""


class DamagedSlideError(SlideError):
    """The file is truncated or its compressed data cannot be decoded."""


class UnsupportedSlideError(SlideError):
    """No backend can serve this file as a whole-slide pyramid."""


class MissingResolutionError(SlideError):
    """The file records no usable µm/px and no override was given."""


class ImplausibleResolutionError(SlideError):
    """The recorded or given µm/px lies outside the plausible range."""


class SlideTooLargeError(SlideError):
    """The declared dimensions are absurd; refused before allocating memory."""


class SlideGeometryError(SlideError):
    """The pixels cannot be placed on a square, upright grid as stored (pixels wider than they are
    tall, a TIFF Orientation other than top-left); no backend is tried instead, since serving the
    file as stored would give tiles of the wrong shape or orientation."""


class ResolutionUnavailableError(SlideError, ValueError):
    """The requested µm/px is finer than the slide's finest level (it would need upsampling)."""


class ColourProfileError(SlideError):
    """The slide's embedded ICC profile is damaged or does not describe its RGB pixels."""


class StainEstimationError(TilewrightError):
    """Too few tissue pixels, or degenerate colour, to estimate stain vectors."""


class RegionError(TilewrightError):
    """A region annotation (GeoJSON, raster, tile table) is invalid."""


class StoreError(TilewrightError):
    """A tile store cannot be written or read."""


class IncompleteStoreError(StoreError):
    """The store exists but was never marked complete (an interrupted write)."""


class ConfigError(TilewrightError, ValueError):
    """A configuration value is invalid."""


class OutputLockedError(TilewrightError):
    """Another run holds the output folder's lock."""


class ObjectStoreError(TilewrightError):
    """An object-store request failed (refused credentials, access denied, missing bucket, unreachable
    endpoint, timeout, server failure); ``.path`` is the URL and ``.cause`` one word for the kind
    (``credentials``, ``denied``, ``bucket``, ``missing``, ``connection``, ``timeout``, ``server``,
    ``other``)."""

    def __init__(self, message: str, path: str | os.PathLike | None = None, *, cause: str = "other"):
        super().__init__(message, path)
        self.cause = cause


class ObjectNotFoundError(ObjectStoreError, FileNotFoundError):
    """The object (or the prefix) the URL names does not exist."""
