"""tilewright: harmonized, tissue-only, stain-normalized tiles from H&E whole-slide images.

Research use only; not for diagnosis or clinical decisions.

Public names are resolved lazily (PEP 562) so that ``import tilewright`` does no I/O and
imports neither openslide, dask.distributed, torch nor matplotlib.
"""

from __future__ import annotations

import importlib
from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("tilewright")
except PackageNotFoundError:  # pragma: no cover - running from a source tree without install
    __version__ = "0.0.0+unknown"

_PUBLIC = {
    # reading
    "open": "tilewright.slide.open",
    "WholeSlide": "tilewright.slide.wholeslide",
    "Level": "tilewright.slide.wholeslide",
    "ResampledView": "tilewright.slide.view",
    # tissue
    "tissue_mask": "tilewright.tissue.mask",
    "TissueMask": "tilewright.tissue.mask",
    "plan_tiles": "tilewright.tissue.plan",
    "TilePlan": "tilewright.tissue.plan",
    "render_overlay": "tilewright.tissue.overlay",
    "RegionMap": "tilewright.regions.regionmap",
    "classify_regions": "tilewright.regions.classify",
    # stain
    "MacenkoTransfer": "tilewright.stain.macenko",
    "ReinhardTransfer": "tilewright.stain.reinhard",
    "estimate_stains": "tilewright.stain.macenko",
    "StainJitter": "tilewright.stain.augment",
    # store and runs
    "TilingConfig": "tilewright.run.config",
    "tile_slide": "tilewright.run.slide",
    "SlideResult": "tilewright.run.slide",
    "tile_cohort": "tilewright.run.cohort",
    "plan_cohort": "tilewright.run.inventory",
    "CohortPlan": "tilewright.run.inventory_summary",
    "open_store": "tilewright.store.reader",
    "TileStore": "tilewright.store.reader",
    "open_cohort": "tilewright.store.cohort",
    "Cohort": "tilewright.store.cohort",
    # audit
    "audit_cohort": "tilewright.audit.cohort",
    "CohortAudit": "tilewright.audit.cohort",
    "make_splits": "tilewright.splits.make",
}

__all__ = sorted(_PUBLIC) + ["errors", "__version__"]


def __getattr__(name: str):
    if name == "errors":
        return importlib.import_module("tilewright.errors")
    try:
        module = _PUBLIC[name]
    except KeyError:
        from tilewright.renamed import old_name

        return old_name(__name__, name)  # an old spelling (DeprecationWarning), else AttributeError
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__():
    return __all__
