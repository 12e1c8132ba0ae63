"""Shared fixture builders: small pyramidal TIFFs of synthetic layouts, written at test time.

Written slides are cached for the session (same parameters → one render), then copied to where
each test wants them, so the suite renders each distinct slide once.
"""

from __future__ import annotations

import atexit
import shutil
import tempfile
from pathlib import Path

from tilewright.demo.synth import random_layout

_CACHE: dict = {}
_CACHE_DIR = None


def _cache_dir() -> Path:
    global _CACHE_DIR
    if _CACHE_DIR is None:
        _CACHE_DIR = Path(tempfile.mkdtemp(prefix="tilewright-test-slides-"))
        atexit.register(shutil.rmtree, _CACHE_DIR, True)
    return _CACHE_DIR


def write_slide(path, *, mpp=0.25, size_um=(1600.0, 2000.0), seed=1, n_islands=2, pens=0, tumour=False,
                layout="ifd", compression="jpeg", tile=256, stains=None, concentration=(1.0, 1.0),
                write_mpp=True, objective=None):
    """Write a synthetic slide of ``size_um`` at ``mpp`` µm/px; return (path, SlideLayout)."""
    from tilewright.demo.pyramid import write_pyramid

    lay = random_layout(*size_um, seed=seed, n_islands=n_islands, pens=pens, tumour=tumour, stains=stains,
                        concentration=concentration)
    key = (mpp, tuple(size_um), seed, n_islands, pens, tumour, layout, compression, tile,
           None if stains is None else repr(stains), tuple(concentration), write_mpp, objective)
    if key not in _CACHE:
        cached = _cache_dir() / f"{len(_CACHE)}{''.join(Path(path).suffixes) or '.tif'}"
        write_pyramid(cached, lay.renderer(mpp), shape=lay.shape_at(mpp), mpp=mpp if write_mpp else None,
                      tile=tile, compression=compression, layout=layout, objective=objective,
                      resolution_unit="cm" if write_mpp else None)
        _CACHE[key] = cached
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    shutil.copyfile(_CACHE[key], path)
    return path, lay
