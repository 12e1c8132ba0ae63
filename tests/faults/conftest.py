"""Fixtures for the fault suite: small slides written at test time, a fast tiling config."""

from __future__ import annotations

import pytest

from helpers import write_slide


@pytest.fixture
def slide(tmp_path):
    """Write a small JPEG-tiled pyramid (0.25 µm/px, ~0.5 x 0.6 mm) and return its path."""

    def make(name="s.tif", *, seed=1, layout="ifd", compression="jpeg", folder=None, **kw):
        base = folder if folder is not None else tmp_path / "slides"
        path, _ = write_slide(base / name, mpp=0.25, size_um=(512.0, 640.0), seed=seed,
                              layout=layout, compression=compression, **kw)
        return path

    return make


@pytest.fixture
def fast_config():
    """Target 1 µm/px, 128 px tiles: a few dozen tiles a slide, quick to write."""
    from tilewright.run.config import TilingConfig

    return TilingConfig(mpp=1.0, tile=128, min_tissue=0.3, qc_overlay=False)
