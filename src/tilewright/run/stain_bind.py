"""A slide's stain normalizer, bound to its own estimate and checked on its outcome before any tile.

Order: a reproducible sample of the slide's tissue tiles is read; the slide's own estimate is
bound (a failed or implausible one is replaced by the normalizer's fallback); the sample is
normalized and measured against the target (:mod:`tilewright.stain.outcome`). Never worse than
doing nothing: when normalizing moves the sample's tissue colour further from the target than it
started, the fallback is tried (if the slide's own estimate was used), and when that too moves
it away the slide is stored as scanned, un-normalized, with a ``stain-not-normalized`` warning.
A normalized sample past the documented limits is stored normalized with a ``stain-off-target``
warning. The measures go to the store (``stain_outcome``) and the manifest (``stain_check``,
``stain_delta_e_raw``, ``stain_delta_e``).
"""

from __future__ import annotations

from tilewright.stain.checked import checked_binding
from tilewright.store.manifest_row import stain_columns  # noqa: F401 - public here too (its home: the store layer)

__all__ = ["bind_normalizer", "stain_columns", "CHECKS"]

#: Values of the manifest's ``stain_check`` ("" when not checked: no normalization, per-tile mode):
#: ``uncertain`` is within the limits but from an estimate flagged by
#: :func:`tilewright.stain.estimate.uncertain` (the reason is in the store's ``stain_outcome``).
CHECKS = ("ok", "uncertain", "off-target", "not-normalized")


def bind_normalizer(view, plan, config, target, path, glass=None):
    """Fit the target (if needed), bind the slide's own stain estimate from a tile sample and
    check the outcome (see the module notes); optical density is measured against the slide's
    glass colour ``glass``.

    Returns
    -------
    (normalizer or None, shared target or None, notes, outcome or None)
        ``notes``: list of ``code: reason`` warnings; ``outcome``: the measures and ``check``
        (None when nothing was measured: no tile, or per-tile estimates).
    """
    from tilewright.run.reference import make_target, own_target, sample_tiles

    sample = sample_tiles(view, plan.yx, config.tile, config.stain_sample, config.seed, threads=config.threads)
    if len(sample) == 0:
        return None, None, [], None  # nothing will be stored; no estimate needed
    if target is None and config.reference is not None:
        target = make_target(config.normalizer, config.reference, config)
    used = target  # the shared target (None: the slide's own estimate is its target)
    notes = []
    if target is None:
        target, note = own_target(config.normalizer, sample, glass, path)
        notes += [f"stain-replaced: {note}"] if note else []
    if config.per_tile_stain:
        return target.with_glass(glass), used, notes, None
    bound, replaced = target.fit_source_checked(sample, glass=glass)
    bound, outcome, more = checked_binding(target, bound, replaced, sample, glass)
    return bound, used, notes + more, outcome
