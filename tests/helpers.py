"""Shared fixture builders: small pyramidal TIFFs of synthetic layouts, written at test time."""

from __future__ import annotations

from pathlib import Path

from tilewright.demo.synth import random_layout


def write_slide(path, *, mpp=0.25, size_um=(1600.0, 2000.0), seed=1, n_islands=2, pens=0, tumour=False,
                layout="ifd", compression="zlib", tile=256, stains=None, concentration=(1.0, 1.0),
                write_mpp=True, objective=None):
    """Write a synthetic slide of ``size_um`` at ``mpp`` µm/px; return (path, SlideLayout)."""
    from tilewright.demo.pyramid import write_pyramid

    lay = random_layout(*size_um, seed=seed, n_islands=n_islands, pens=pens, tumour=tumour, stains=stains,
                        concentration=concentration)
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    write_pyramid(path, lay.renderer(mpp), shape=lay.shape_at(mpp), mpp=mpp if write_mpp else None,
                  tile=tile, compression=compression, layout=layout, objective=objective,
                  resolution_unit="cm" if write_mpp else None)
    return path, lay
