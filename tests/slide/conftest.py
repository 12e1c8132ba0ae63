"""Fixtures for slide reading: small pyramids written at test time with our tifffile writer."""

from __future__ import annotations

import numpy as np
import pytest

from tilewright.demo.pyramid import write_pyramid

H0, W0 = 1536, 2048


def make_image(h: int = H0, w: int = W0, seed: int = 7) -> np.ndarray:
    """Smooth colour gradients plus blobs and grain: every pixel differs, JPEG-friendly."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float32)
    r = 180 + 50 * np.sin(xx / 97.0) * np.cos(yy / 61.0)
    g = 120 + 60 * np.cos((xx + yy) / 143.0)
    b = 200 - 40 * np.sin(yy / 53.0)
    img = np.stack([r, g, b], -1) + rng.normal(0, 8, (h, w, 3)).astype(np.float32)
    return np.clip(img, 0, 255).astype(np.uint8)


@pytest.fixture(scope="session")
def image() -> np.ndarray:
    return make_image()


@pytest.fixture(scope="session")
def slide_dir(tmp_path_factory):
    return tmp_path_factory.mktemp("slides")


@pytest.fixture(scope="session")
def write(slide_dir, image):
    """``write(name, **writer_kwargs) -> path``; files are cached per name for the session."""
    cache = {}

    def _write(name, img=None, **kw):
        if name not in cache:
            path = slide_dir / name
            write_pyramid(path, image if img is None else img, **kw)
            cache[name] = path
        return cache[name]

    return _write
