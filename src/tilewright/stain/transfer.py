"""Behaviour shared by the stain transfers (the stain-normalization classes): fitting, source
binding, batches, dictionaries.

A stain transfer has a *target* (fitted once on a reference image, or the median of several) and a
*source* estimate (the colour statistics of the images being normalized). The source estimate
comes, in order of precedence:

1. per image, when ``per_tile=True`` (an image whose own estimate fails, or is implausible, falls back to the bound
   estimate below, or is returned unchanged when there is none);
2. from a bound sample, after ``fit_source(sample)`` (the whole-slide mode: one estimate from a
   reproducible sample of a slide's tissue tiles, reused for every tile batch of that slide);
3. otherwise from all the pixels passed to ``transform`` at once.

Glass colour. Optical density is ``log10(I0 / I)`` with ``I0`` the light that reaches the camera
through blank glass (Beer–Lambert law). Slides are not all scanned on pure white glass, so each
side can have its own ``I0``: ``fit(reference, glass=...)`` estimates the target relative to the
reference's glass (recorded as ``reference_glass``), and ``fit_source(sample, glass=...)`` or
``with_glass(glass)`` sets the glass of the images to be transformed (``glass``), used both for
their estimate and for every pixel transformed. The output is rendered on white glass (or on
``output_glass`` when one is given), so a slide's tinted background becomes white and its tissue
colour loses the tint. Estimating ``I0``
from the brightest background of the slide is common practice (see
:func:`tilewright.tissue.density.glass_colour`).
"""

from __future__ import annotations

import copy

import numpy as np

from ..errors import ConfigError, StainEstimationError
from .density import check_glass, check_rgb

__all__ = ["StainTransfer", "FORMAT_VERSION"]

#: Version of the dictionary layout written by ``to_dict`` (2 added the glass colours).
FORMAT_VERSION = 2
#: Versions ``from_dict`` reads (version 1 has no glass colours: pure white).
READABLE_VERSIONS = (1, 2)


def glass_list(glass) -> list | None:
    """JSON form of a glass colour: three floats, or None for pure white."""
    arr = check_glass(glass)
    return None if arr is None else [float(v) for v in arr]


def glass_from_dict(d: dict, key: str):
    """Read an optional glass colour from a normalizer dictionary (ConfigError if malformed)."""
    value = d.get(key)
    if value is None:
        return None
    try:
        return check_glass(value)
    except ValueError as exc:
        raise ConfigError(f"normalizer dictionary: {key!r}: {exc}") from None


def as_float_list(values, shape, key):
    """Validate a JSON list against ``shape`` and return a float64 array (ConfigError if bad)."""
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise ConfigError(f"normalizer dictionary: {key!r} is not numeric: {values!r}") from None
    if arr.shape != shape or not np.all(np.isfinite(arr)):
        raise ConfigError(
            f"normalizer dictionary: {key!r} must be finite numbers of shape {shape}, "
            f"got {arr.shape}"
        )
    return arr


class StainTransfer:
    """Base class of the stain transfers, which carry one image's stain colour onto a target's
    (stain normalization); see :class:`~tilewright.stain.macenko.MacenkoTransfer` and
    :class:`~tilewright.stain.reinhard.ReinhardTransfer`."""

    method = ""

    def __init__(self, *, per_tile: bool = False, output_glass=None):
        self.per_tile = bool(per_tile)
        #: Glass colour the output is rendered with (None: pure white, the default).
        self.output_glass = check_glass(output_glass)
        self.source = None
        #: Glass colour (RGB ``I0``) of the images to transform; None is pure white.
        self.glass = None
        #: Glass colour of the reference the target was fitted on (provenance); None is white.
        self.reference_glass = None
        #: Mean tissue CIELAB of the target's own normalized sample(s), what each slide's outcome is
        #: checked against (:mod:`tilewright.stain.outcome`); None when unknown.
        self.target_colour = None

    # -- hooks for subclasses ------------------------------------------------------------------
    def _estimate(self, rgb: np.ndarray, glass=None):  # pragma: no cover - abstract
        """Statistics of ``rgb`` with OD relative to ``glass``; StainEstimationError if impossible."""
        raise NotImplementedError

    def _set_target(self, stats) -> None:  # pragma: no cover - abstract
        raise NotImplementedError

    def _apply(self, rgb: np.ndarray, source, out: np.ndarray) -> None:  # pragma: no cover
        raise NotImplementedError

    def _params(self) -> dict:  # pragma: no cover - abstract
        raise NotImplementedError

    def _target_dict(self) -> dict:  # pragma: no cover - abstract
        raise NotImplementedError

    @classmethod
    def _stats_to_dict(cls, stats) -> dict:  # pragma: no cover - abstract
        raise NotImplementedError

    @classmethod
    def _stats_from_dict(cls, d) -> object:  # pragma: no cover - abstract
        raise NotImplementedError

    @property
    def is_fitted(self) -> bool:  # pragma: no cover - abstract
        raise NotImplementedError

    # -- public API ----------------------------------------------------------------------------
    @property
    def is_bound(self) -> bool:
        """True when ``fit_source`` fixed the source estimate."""
        return self.source is not None

    def fit(self, reference_rgb, *, glass=None):
        """Fit the target to a reference image (or batch); returns ``self``.

        Parameters
        ----------
        reference_rgb : array_like, uint8, shape (..., 3)
            Reference image(s).
        glass : array_like (3,), optional
            RGB of the reference's blank glass (the incident light ``I0`` its optical density
            is measured against); default pure white. Recorded as ``reference_glass``.

        Raises
        ------
        StainEstimationError
            When the reference has too little tissue or degenerate colour.
        ValueError
            For an invalid glass colour.
        """
        glass = check_glass(glass)
        self._set_target(self._estimate(check_rgb(reference_rgb, "reference_rgb"), glass))
        self.reference_glass = glass
        return self

    def with_glass(self, glass):
        """Return a copy that treats ``glass`` as the blank-glass colour of the images it transforms.

        Use it when the source estimate comes per tile or per ``transform`` call;
        :meth:`fit_source` sets the glass and binds an estimate in one step.

        Parameters
        ----------
        glass : array_like (3,) or None
            RGB of blank glass (0..255); None is pure white.

        Returns
        -------
        same type as ``self``
            A copy; ``self`` is not modified. A bound estimate is kept as it is.

        Raises
        ------
        ValueError
            For an invalid glass colour.
        """
        other = copy.deepcopy(self)
        other.glass = check_glass(glass)
        return other

    def fit_source(self, sample_rgb, *, glass=None):
        """Return a copy whose ``transform`` reuses one source estimate taken from ``sample_rgb``.

        Parameters
        ----------
        sample_rgb : array_like, uint8, shape (..., 3)
            A reproducible sample of the slide's tissue (for example a batch of tissue tiles).
        glass : array_like (3,), optional
            RGB of the slide's blank glass (the incident light ``I0``), used for the estimate
            and for every pixel the copy transforms. Default: this transfer's ``glass`` (pure
            white unless :meth:`with_glass` set one). Estimate it from the brightest background
            of the slide (common practice), e.g. :func:`tilewright.tissue.density.glass_colour`.

        Returns
        -------
        same type as ``self``
            A bound copy; ``self`` is not modified.

        Raises
        ------
        StainEstimationError
            When the sample has too little tissue.
        ConfigError
            When the transfer has no target yet.
        ValueError
            For an invalid glass colour.
        """
        self._require_fitted()
        bound = self.with_glass(glass) if glass is not None else copy.deepcopy(self)
        bound.source = bound._estimate(check_rgb(sample_rgb, "sample_rgb"), bound.glass)
        return bound

    def _implausible(self, source) -> str:
        """Why a source estimate is not plausible ("" when it is); every estimate by default."""
        return ""

    def _fallback_source(self, rgb, glass):
        """``(source, how)``: the estimate used when a slide's own one failed or is implausible.
        By default the target's own statistics (the slide is left as it is)."""
        return self._target_stats(), "the target's own statistics (colours left as they are)"

    def _target_stats(self):  # pragma: no cover - abstract
        raise NotImplementedError

    def fit_source_checked(self, sample_rgb, *, glass=None):
        """Like :meth:`fit_source`, but a failed or implausible estimate is replaced, not raised.

        Parameters
        ----------
        sample_rgb : array_like, uint8, shape (..., 3)
            A reproducible sample of the slide's tissue.
        glass : array_like (3,), optional
            As in :meth:`fit_source`.

        Returns
        -------
        bound : same type as ``self``
            A bound copy.
        note : str
            "" when the slide's own estimate was used; otherwise why it was replaced and by what
            (for the user's warnings).

        Raises
        ------
        ConfigError
            When the transfer has no target yet.
        """
        self._require_fitted()
        bound = self.with_glass(glass) if glass is not None else copy.deepcopy(self)
        arr = check_rgb(sample_rgb, "sample_rgb")
        try:
            source = bound._estimate(arr, bound.glass)
            reason = bound._implausible(source)
        except StainEstimationError as exc:
            source, reason = None, exc.reason if hasattr(exc, "reason") else str(exc)
        if not reason:
            bound.source = source
            return bound, ""
        bound.source, how = bound._fallback_source(arr, bound.glass)
        return bound, f"the slide's own stain estimate was replaced ({reason}) by {how}"

    def transform(self, rgb, *, out=None) -> np.ndarray:
        """Normalize an image or a batch of images.

        Parameters
        ----------
        rgb : array_like, uint8, shape (H, W, 3) or (..., H, W, 3)
            Image(s) to normalize.
        out : ndarray, uint8, optional
            Destination of the same shape (may be ``rgb``).

        Returns
        -------
        ndarray, uint8, same shape as ``rgb``

        Raises
        ------
        ConfigError
            When the transfer has no target (call ``fit`` or ``from_dict`` first).
        StainEstimationError
            Only when neither ``per_tile`` nor a bound source is set and the pixels given have
            too little tissue for a source estimate.
        """
        self._require_fitted()
        arr = check_rgb(rgb)
        if out is None:
            out = np.empty_like(arr)
        if not self.per_tile:
            source = self.source if self.is_bound else self._estimate(arr, self.glass)
            self._apply(arr, source, out)
            return out
        if arr.ndim < 3:
            raise ValueError(f"per-tile mode needs images of shape (..., H, W, 3), got {arr.shape}")
        images = arr.reshape((-1,) + arr.shape[-3:])
        dest = out.reshape(images.shape)
        for i, image in enumerate(images):
            try:
                source = self._estimate(image, self.glass)
                if self._implausible(source):  # a tile's failed estimate is not used either
                    source = self.source
            except StainEstimationError:
                source = self.source  # bound slide estimate, or None: leave the tile unchanged
            if source is None:
                dest[i] = image
            else:
                self._apply(image, source, dest[i])
        if not np.shares_memory(dest, out):
            out[...] = dest.reshape(out.shape)
        return out

    __call__ = transform

    def to_dict(self) -> dict:
        """JSON-safe description: method, parameters, target, bound source estimate or None, the
        glass colours (``glass`` of the images transformed, ``reference_glass`` of the target's
        reference; None for pure white) and, when known, ``target_colour``."""
        self._require_fitted()
        d = {"method": self.method, "version": FORMAT_VERSION, **self._params()}
        d.update(self._target_dict())
        d["reference_glass"] = glass_list(self.reference_glass)
        d["glass"] = glass_list(self.glass)
        d["source"] = None if self.source is None else self._stats_to_dict(self.source)
        if self.target_colour is not None:  # only when known: targets written without it keep their form
            d["target_colour"] = [float(v) for v in self.target_colour]
        return d

    @classmethod
    def from_dict(cls, d):
        """Rebuild a stain transfer written by :meth:`to_dict`.

        Raises
        ------
        ConfigError
            When the dictionary is for another method, another format version, or malformed.
        """
        if not isinstance(d, dict):
            raise ConfigError(f"normalizer description must be a dict, got {type(d).__name__}")
        if d.get("method") != cls.method:
            raise ConfigError(f"expected method {cls.method!r}, got {d.get('method')!r}")
        if d.get("version", FORMAT_VERSION) not in READABLE_VERSIONS:
            raise ConfigError(
                f"normalizer dictionary version {d.get('version')!r} is not supported "
                f"(this library writes version {FORMAT_VERSION}); fit the target again"
            )
        try:
            obj = cls(**{k: d[k] for k in cls._param_names() if k in d})
        except (TypeError, ValueError) as exc:
            raise ConfigError(f"invalid {cls.method} parameters: {exc}") from None
        obj._set_target(cls._stats_from_dict(d))
        obj.glass = glass_from_dict(d, "glass")
        obj.reference_glass = glass_from_dict(d, "reference_glass")
        if d.get("source") is not None:
            obj.source = cls._stats_from_dict(d["source"])
        if d.get("target_colour") is not None:
            obj.target_colour = as_float_list(d["target_colour"], (3,), "target_colour")
        return obj

    @classmethod
    def _param_names(cls) -> tuple:  # pragma: no cover - abstract
        raise NotImplementedError

    def _require_fitted(self) -> None:
        if not self.is_fitted:
            raise ConfigError(
                f"{type(self).__name__} has no target yet: call .fit(reference_rgb), "
                f".from_dict(d) or .from_median([...]) first"
            )

    def __repr__(self) -> str:
        params = ", ".join(f"{k}={v!r}" for k, v in self._params().items())
        if self.glass is not None:
            params += f", glass={tuple(round(float(v), 1) for v in self.glass)}"
        state = "bound" if self.is_bound else ("fitted" if self.is_fitted else "unfitted")
        return f"{type(self).__name__}({params}) [{state}]"


def __getattr__(name: str):  # old spellings, one release (tilewright.renamed)
    from tilewright.renamed import old_name

    return old_name(__name__, name)
