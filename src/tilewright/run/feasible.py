"""Settings that cannot cut a single tile from any slide, refused before anything is written."""

from __future__ import annotations

from pathlib import Path

from tilewright.errors import ConfigError, TilewrightError

__all__ = ["check_tiles_fit"]


def check_tiles_fit(paths, config, mpps=None) -> None:
    """Raise :class:`ConfigError` when a tile is larger than every slide at the target µm/px.

    Slides are opened (headers only) in order until one holds at least one tile, so a usable
    setting costs one header read; only settings that fit no slide read every header. Slides that
    cannot be opened are passed over here (the run reports them).

    Parameters
    ----------
    paths : list of path
        The run's slides.
    config : TilingConfig
        ``mpp`` (target µm/px), ``tile`` (px) and ``tolerance`` are used.
    mpps : list of (float or None), optional
        Level-0 µm/px overrides, one a path.

    Raises
    ------
    ConfigError
        Naming the tile's physical size, the largest slide and the largest tile that fits it.
    """
    from tilewright.slide.open import open as open_slide

    mpps = list(mpps) if mpps is not None else [None] * len(paths)
    largest = None  # (shorter side in target px, slide path, (height, width) in target px)
    for path, mpp in zip(paths, mpps):
        try:
            with open_slide(path, mpp=mpp, verify=False) as slide:
                shape = tuple(int(s) for s in config.view(slide).shape)
        except TilewrightError:
            continue
        if min(shape) >= config.tile:
            return
        if largest is None or min(shape) > largest[0]:
            largest = (min(shape), path, shape)
    if largest is None:
        return  # no slide could be opened: each fails on its own in the run
    side, path, (h, w) = largest
    mm = config.tile * config.mpp / 1000.0
    raise ConfigError(
        f"a {config.tile}-px tile at {config.mpp:g} µm/px ({mm:.3g} mm a side) is larger than every slide "
        f"(largest: {Path(path).name}, {w} x {h} px at {config.mpp:g} µm/px); choose --tile {side} or "
        "less, or a finer --mpp")
