"""Stain normalization applied when tiles are read, from the estimates a run stored beside them.

A store written with ``estimate_stains`` holds un-normalized tiles, the slide's stain estimates
(``attrs["stain_estimates"]``), its glass colour and a sample of its tissue pixels
(``stain_sample``). :func:`bind_to_store` binds a target (Macenko or Reinhard) to that slide the
way a normalizing run binds it: the slide's own recorded estimate (its fallback when that was
implausible) checked on the stored sample by the same never-worse rule
(:func:`tilewright.stain.checked.checked_binding`); every tile read is then normalized with it.
:func:`median_target` builds a cohort's own target from the stores' estimates, without reading a
pixel (the median a normalizing run computes from its slides).
"""

from __future__ import annotations

import json
import os
from pathlib import Path

from tilewright.errors import ConfigError, StoreError

__all__ = ["bind_to_store", "median_target", "resolve_target", "ReadNormalization"]


class ReadNormalization:
    """What a store's reads apply: ``method``, the ``target`` dict, the bound normalizer, and the
    notes of the binding ("code: reason" warnings joined by "; "; "" when the slide's own estimate was
    used as is)."""

    def __init__(self, method: str, target: dict, bound, note: str):
        self.method, self.target, self.bound, self.note = method, target, bound, note

    def to_dict(self) -> dict:
        from tilewright.store.settings import target_digest

        return {"method": self.method, "target": target_digest(self.target), "note": self.note}

    def __call__(self, tiles):
        if self.bound is None:  # normalizing moved this slide away from the target: read as stored
            return tiles
        return self.bound.transform(tiles, out=tiles if tiles.flags.writeable else None)


def resolve_target(target, method: str) -> dict:
    """A target as a fitted normalizer dictionary: from a normalizer, its dict, or a JSON file of
    one (``OUT/stain_target.macenko.json``, a ``--reference`` fitted and saved)."""
    from tilewright.stain.registry import transfer_from_dict

    if isinstance(target, (str, os.PathLike)):
        path = Path(target)
        try:
            target = json.loads(path.read_text())
        except (OSError, ValueError) as exc:
            raise ConfigError(f"cannot read the stain target JSON ({exc})", path) from None
    if hasattr(target, "to_dict"):
        target = target.to_dict()
    if not isinstance(target, dict):
        raise ConfigError(f"target= must be a fitted normalizer, its dict or a JSON file of one, got {target!r}")
    if target.get("method") != method:
        raise ConfigError(f"the target is for {target.get('method')!r}, not {method!r}")
    d = transfer_from_dict(target).to_dict()
    d["source"], d["glass"] = None, None  # a target: no slide's source bound to it
    return d


def median_target(stores, method: str) -> dict:
    """The cohort's own target: the median of the stores' recorded ``method`` estimates (slides whose
    estimate failed or was implausible are left out, as a normalizing run leaves them out).

    Raises
    ------
    StoreError
        No store holds a usable estimate (none was tiled with ``estimate_stains``).
    """
    from tilewright.stain.registry import transfer_from_dict

    fitted = []
    for store in stores:
        est = (store.attrs.get("stain_estimates") or {}).get(method) or {}
        if "error" not in est and est.get("method") == method:
            fitted.append(transfer_from_dict(est))
    if not fitted:
        raise StoreError(f"no store holds a usable {method} stain estimate; tile with --estimate-stains "
                         "(TilingConfig(estimate_stains=True)), or give target=")
    return resolve_target(type(fitted[0]).from_median(fitted), method)


def bind_to_store(store, method: str, target) -> ReadNormalization:
    """The normalization of ``store``'s tiles to ``target`` (see the module notes).

    Raises
    ------
    StoreError
        The tiles are normalized already, or the store holds no stain sample.
    ConfigError
        An unknown method or a target of another method.
    """
    import copy

    from tilewright.stain.checked import checked_binding
    from tilewright.stain.registry import METHODS, transfer_from_dict

    method = str(method).lower()
    if method not in METHODS:
        raise ConfigError(f"normalize= must be one of {', '.join(METHODS)}, got {method!r}")
    attrs = store.attrs
    if attrs.get("normalizer"):
        raise StoreError(f"the tiles are stain-normalized already ({attrs['normalizer'].get('method')}); open the "
                         "store without normalize=, or tile with --estimate-stains to normalize when reading",
                         store.path)
    if not store._has("stain_sample"):
        raise StoreError("the store holds no stain estimate; tile with --estimate-stains (TilingConfig("
                         "estimate_stains=True)) to normalize when reading", store.path)
    target = resolve_target(target, method)
    pixels = _sample(store)
    glass = attrs.get("stain_glass")
    fitted = transfer_from_dict(target)
    bound = fitted.with_glass(glass) if glass is not None else copy.deepcopy(fitted)
    # the slide's own estimate, made at tiling from its whole tile sample (as a normalizing run's)
    estimate = (attrs.get("stain_estimates") or {}).get(method) or {}
    reason = estimate.get("error") or ("" if estimate.get("method") == method else "no estimate recorded")
    replaced = ""
    if reason:
        bound.source, how = bound._fallback_source(pixels, bound.glass)
        replaced = f"the slide's own stain estimate was replaced ({reason}) by {how}"
    else:
        bound.source = transfer_from_dict(estimate)._target_stats()
    bound, _, notes = checked_binding(fitted, bound, replaced, pixels, glass)
    return ReadNormalization(method, target, bound, "; ".join(notes))


def _sample(store):
    """The slide's stain sample: the stored (un-normalized) tiles the run sampled, when every one
    was kept (the pixels a normalizing run binds on, tile structure and all); else the stored
    65,536 of their pixels, as one row."""
    import numpy as np

    positions = store.attrs.get("stain_sample_yx")
    if positions:
        where = {(int(y), int(x)): i for i, (y, x) in enumerate(np.asarray(store.yx).tolist())}
        index = [where.get((int(y), int(x))) for y, x in positions]
        if None not in index:
            return store[np.asarray(index, dtype=np.int64)]
    return store._small("stain_sample").reshape(1, -1, 3)
