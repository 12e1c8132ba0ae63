"""The cohort's default stain target: the median of its slides' own stain estimates.

Which slides build it. At most :data:`MAX_SLIDES` slides are estimated. They are spread over the
cohort's groups so that no site or scanner is left out: the groups are a metadata column when
the run names one (``TilingConfig.stain_groups``, a CSV with ``slide_id`` and that column), else
each slide's folder and file format (a site's slides commonly share a folder and a scanner's a
format). Each group gets an equal share (a group with fewer slides gives all it has and the rest
is shared out), taken evenly along the group's sorted paths; the median is then over that
balanced set. Taking the first slides of one sorted list, as earlier versions did, could leave a
whole site out of the target.

What the target file records besides the target: ``slides`` (id, source path and size, the
sampled source digest, group) that built it, and ``target_colour``, the median over those slides of
their sample's mean tissue CIELAB once normalized to the target: the colour every slide's
outcome is checked against (:mod:`tilewright.stain.outcome`).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from tilewright.errors import ConfigError, TilewrightError
from tilewright.run.config import TilingConfig
from tilewright.stain.density import slide_glass  # noqa: F401 - public here too (its home: the stain layer)
from tilewright.stain.tissue_pixels import colour_pixels

__all__ = ["cohort_target", "slide_estimate", "slide_glass", "target_colour", "balanced_pick", "MAX_SLIDES"]

#: Slides estimated (spread over the groups) to build the cohort target.
MAX_SLIDES = 24


def slide_estimate(path: str, config: dict, mpp: float | None) -> dict | None:
    """One slide's own estimate for the cohort target: ``{"fitted": normalizer dict, "pixels": a
    subset of its sample's tissue pixels, "glass": its glass colour}``, its optical density
    measured against that glass (None when impossible, or for Macenko when the estimate is
    implausible: :func:`tilewright.stain.estimate.implausible`)."""
    from tilewright.run.reference import sample_tiles
    from tilewright.slide.open import open as open_slide
    from tilewright.stain.registry import make_transfer
    from tilewright.tissue.mask import tissue_mask
    from tilewright.tissue.plan import plan_tiles

    cfg = TilingConfig.from_dict(config)
    try:
        with open_slide(path, mpp=mpp, verify=cfg.verify_jpeg, colour_profile=cfg.colour_profile) as slide:
            view = cfg.view(slide)
            thumbnail = slide.thumbnail(cfg.mask_mpp)  # read once: the mask and the glass colour share it
            mask = tissue_mask(thumbnail, mpp=getattr(thumbnail, "mpp", cfg.mask_mpp), **cfg.mask_options())
            plan = plan_tiles(view, mask, tile=cfg.tile, stride=cfg.stride, min_tissue=cfg.min_tissue,
                              max_tiles=cfg.stain_sample, seed=cfg.seed)
            sample = sample_tiles(view, plan.yx, cfg.tile, cfg.stain_sample, cfg.seed, threads=cfg.threads)
            glass = slide_glass(thumbnail, mask)
        if len(sample) == 0:
            return None
        fitted = make_transfer(cfg.normalizer).fit(sample, glass=glass)
        if fitted._implausible(fitted._target_stats()):
            return None  # a failed estimate does not pull the cohort's median
        return {"fitted": fitted.to_dict(), "pixels": colour_pixels(sample, glass), "glass": glass}
    except TilewrightError:
        return None  # the slide's own run will report why


def target_colour(target, estimates) -> list[float] | None:
    """Median mean tissue CIELAB of slides' pixels normalized to ``target``, each from its own
    estimate (``estimates``: ``slide_estimate`` results)."""
    from tilewright.stain.outcome import tissue_colour

    colours = []
    for est in estimates:
        bound = target.with_glass(est["glass"])
        bound.source = type(target)._stats_from_dict(est["fitted"])
        pixels = est["pixels"]
        if len(pixels):
            colours.append(tissue_colour(bound.transform(pixels), np.ones(pixels.shape[:2], bool)))
    colours = [c for c in colours if c is not None]
    return None if not colours else [round(float(v), 3) for v in np.median(np.stack(colours), axis=0)]


def _group_table(config: TilingConfig) -> dict | None:
    """slide id -> group from ``config.stain_groups`` (None when unset)."""
    if not config.stain_groups:
        return None
    import pandas as pd

    where = Path(config.stain_groups)
    try:
        table = pd.read_csv(where, dtype=str)
    except (OSError, ValueError) as exc:
        raise ConfigError(f"cannot read the stain-target groups table ({exc}); give a CSV with slide_id and "
                          f"{config.stain_group_column!r} columns", where) from None
    missing = {"slide_id", config.stain_group_column} - set(table.columns)
    if missing:
        raise ConfigError(f"the stain-target groups table lacks column(s) {sorted(missing)}; give a CSV with "
                          f"slide_id and {config.stain_group_column!r}, or set --stain-group-column", where)
    return dict(zip(table["slide_id"], table[config.stain_group_column].fillna("")))


def _groups(paths, ids, table: dict | None) -> list[str]:
    """Each slide's group: its metadata value, else its folder and file format."""
    if table is not None:
        return [str(table.get(i, "")) for i in ids]
    out = []
    for p in paths:
        name = Path(p).name.lower()
        fmt = ".ome.tif" if name.endswith((".ome.tif", ".ome.tiff")) else Path(name).suffix
        out.append(f"{Path(p).parent.name}/{fmt}")
    return out


def balanced_pick(paths, groups, limit: int | None = None) -> list[int]:
    """Indices of at most ``limit`` (default :data:`MAX_SLIDES`) slides, an equal share of each
    group (taken evenly along the group's sorted paths; a small group gives all it has and the
    others share the rest)."""
    limit = MAX_SLIDES if limit is None else int(limit)
    members: dict = {}
    for i in sorted(range(len(paths)), key=lambda k: paths[k]):
        members.setdefault(groups[i], []).append(i)
    quota = dict.fromkeys(members, 0)
    left = min(limit, len(paths))
    while left:
        open_groups = [g for g in members if quota[g] < len(members[g])]
        share = max(1, left // len(open_groups))
        for g in open_groups:
            take = min(share, len(members[g]) - quota[g], left)
            quota[g] += take
            left -= take
            if not left:
                break
    picked = []
    for g, idx in members.items():
        if quota[g]:
            picked += [idx[k] for k in np.linspace(0, len(idx) - 1, quota[g]).round().astype(int)]
    return sorted(picked, key=lambda k: paths[k])


def cohort_target(paths, config: TilingConfig, mpps, compute, ids=None) -> dict | None:
    """Median target over a balanced set of at most :data:`MAX_SLIDES` slides (see the module
    notes), with its provenance and colour; None if no slide could be estimated.

    ``compute(fn, args_list)`` runs the estimates (in this process or on the cluster).
    """
    from tilewright.stain.registry import transfer_from_dict
    from tilewright.store.layout import slide_ids

    paths = [str(p) for p in paths]
    ids = list(ids) if ids is not None else slide_ids(paths)
    groups = _groups(paths, ids, _group_table(config))
    order = balanced_pick(paths, groups)
    args = [(paths[i], config.to_dict(), mpps[i]) for i in order]
    results = list(compute(slide_estimate, args))
    used = [(i, est) for i, est in zip(order, results) if est is not None]
    if not used:
        return None
    fitted = [transfer_from_dict(est["fitted"]) for _, est in used]
    target = type(fitted[0]).from_median(fitted)
    target.target_colour = target_colour(target, [est for _, est in used])
    d = target.to_dict()
    d["slides"] = [_provenance(paths[i], ids[i], groups[i]) for i, _ in used]
    d["grouped_by"] = config.stain_group_column if config.stain_groups else "folder and file format"
    return d


def _provenance(path: str, slide_id: str, group: str) -> dict:
    from tilewright.store.provenance import source_digest

    try:
        digest, size = source_digest(path), os.path.getsize(path)
    except OSError:
        digest, size = None, None
    return {"slide_id": slide_id, "source": path, "size": size, "digest": digest, "group": group}
