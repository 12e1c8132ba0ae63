"""Which settings decide what a store holds, and how a store's differ from a cohort's.

A store records the settings it was made with (its ``config`` attribute) and the stain target
its tiles were normalized to (``stain_target``). A reader that mixes stores made at another µm/px,
tile size, normalization or codec mixes different data; :func:`settings_mismatch` names every
difference between a store and the settings a cohort was tiled with (its ``config.toml``).
"""

from __future__ import annotations

import hashlib
import json
import math

__all__ = ["RUN_ONLY", "RENAMED_SETTINGS", "current_names", "target_digest", "settings_mismatch", "expected_target",
           "read_settings_toml"]

#: Settings that do not change what a store contains. Lossless compression gives the same pixels
#: whichever codec, and each store names its codec in its metadata, so a cohort may mix them; a
#: lossy codec and its quality do change the tiles: they count as the field ``compression``
#: (``tile_identity``: "lossless" or "jpeg quality 90"). The stain-target groups choose which slides
#: build the cohort's target; the target itself counts (its digest, ``stain target``).
RUN_ONLY = ("threads", "verify_jpeg", "qc_overlay", "compression", "quality", "source_digest",
            "stain_groups", "stain_group_column")

#: Settings recorded under an older name by stores of earlier versions: old name -> current name.
RENAMED_SETTINGS = {"object_types": "feature_kinds"}


def current_names(settings: dict | None) -> dict:
    """``settings`` with every old setting name (:data:`RENAMED_SETTINGS`) read as its current
    one, so a store made before a rename compares as it was made (a current name wins)."""
    out = dict(settings or {})
    for old, new in RENAMED_SETTINGS.items():
        if old in out:
            value = out.pop(old)
            out.setdefault(new, value)
    return out


#: Settings compared on their own terms by :func:`settings_mismatch` (the rest: as values).
_OWN_TERMS = ("mpp", "tile", "stride", "normalizer", "reference", "tolerance")


def target_digest(target) -> str | None:
    """SHA-256 of a fitted normalizer's dictionary (canonical JSON), or None for no target."""
    if target is None:
        return None
    if isinstance(target, dict):  # through the normalizer, as a run binds it: one form per target
        from tilewright.stain.registry import transfer_from_dict

        target = transfer_from_dict(target)
    d = target.to_dict()
    text = json.dumps(d, sort_keys=True, separators=(",", ":"), default=float)
    return "sha256:" + hashlib.sha256(text.encode()).hexdigest()


def _short(value) -> str:
    text = repr(value)
    if isinstance(value, str) and value.startswith("sha256"):
        text = repr(value.split(":", 1)[-1][:12])
    return text if len(text) <= 40 else text[:37] + "..."


def expected_target(settings: dict, saved: dict | None):
    """The stain target digest a cohort's stores must record, or a marker.

    Returns the digest (a dict ``reference``, or the cohort's saved target ``saved`` when no
    reference was given), None (no normalization, or each slide its own target), or ``...``
    (Ellipsis) when it is not known from the settings alone (a reference image path: the stores'
    most common target is then taken)."""
    if not settings.get("normalizer"):
        return None
    ref = settings.get("reference")
    if isinstance(ref, dict):
        return target_digest(ref)
    if ref is None:
        return target_digest(saved) if saved is not None else None
    return ...


def settings_mismatch(attrs: dict, settings: dict, target=...) -> list[str]:
    """How the store with attributes ``attrs`` differs from a cohort's ``settings`` (a
    ``TilingConfig.to_dict()``), one ``"what store -> cohort"`` text a difference.

    Checked: the tiles' true µm/px (within the cohort's ``tolerance``), tile size and stride, the
    normalization method and (``target``: a digest, or None; ``...`` to skip) the stain target,
    the codec (lossless, or JPEG and its quality), and every other setting both sides record that
    changes a store's content (run-only settings, :data:`RUN_ONLY`, are not compared; a setting an
    older store does not record is not compared).
    """
    from tilewright.store.compression import tile_identity

    mine, settings = current_names(attrs.get("config")), current_names(settings)
    out = []
    if settings.get("mpp") is not None:  # settings that do not say (a store of an old version): not compared
        want_mpp = float(settings["mpp"])
        tol = float(settings.get("tolerance") if settings.get("tolerance") is not None else 0.005)
        got_mpp = attrs.get("mpp")
        if got_mpp is None or not math.isclose(float(got_mpp), want_mpp, rel_tol=tol + 1e-9):
            out.append(f"µm/px {'unknown' if got_mpp is None else format(float(got_mpp), '.5g')} -> {want_mpp:.5g}")
    if settings.get("tile") is not None:
        want_tile = int(settings["tile"])
        if int(attrs.get("tile") or 0) != want_tile:
            out.append(f"tile {attrs.get('tile')} -> {want_tile}")
        want_stride = int(settings.get("stride") or want_tile)
        if int(attrs.get("stride") or attrs.get("tile") or 0) != want_stride:
            out.append(f"stride {attrs.get('stride')} -> {want_stride}")
    if (mine.get("normalizer") or None) != (settings.get("normalizer") or None):
        out.append(f"normalization {mine.get('normalizer') or 'none'} -> {settings.get('normalizer') or 'none'}")
    elif settings.get("normalizer") and target is not ... and attrs.get("stain_target") != target:
        out.append(f"stain target {_short(attrs.get('stain_target'))} -> {_short(target)}")
    if "compression" in mine and tile_identity(mine) != tile_identity(settings):
        out.append(f"codec {tile_identity(mine)} -> {tile_identity(settings)}")
    for key in sorted(set(mine) & set(settings)):
        if key in RUN_ONLY or key in _OWN_TERMS:
            continue
        if not _same(mine[key], settings[key]):
            out.append(f"{key} {_short(mine[key])} -> {_short(settings[key])}")
    return out


def _same(a, b) -> bool:
    if isinstance(a, float) or isinstance(b, float):
        try:
            return math.isclose(float(a), float(b), rel_tol=1e-9)
        except (TypeError, ValueError):
            return False
    return a == b


def read_settings_toml(path) -> dict:
    """The settings a TOML file holds (keys as ``TilingConfig`` fields, at the top or in a
    ``[tiling]`` table), as a dict; a :class:`ConfigError` naming the file when it is missing or
    not TOML."""
    import tomllib

    from tilewright.errors import ConfigError
    from tilewright.location.objpath import as_path

    path = as_path(path)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ConfigError("configuration file not found", path) from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ConfigError(f"not valid TOML ({exc})", path) from None
    return dict(data.get("tiling", data))

