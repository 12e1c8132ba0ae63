"""The public names of DESIGN.md resolve, and the renamed ones have no alias left behind."""

import pytest

import tilewright as tw

# The contract's names (shared/DESIGN.md, "Public API").
CONTRACT = ["open", "WholeSlide", "Level", "ResampledView", "tissue_mask", "TissueMask",
            "plan_tiles", "TilePlan", "RegionMap", "classify_regions", "MacenkoNormalizer",
            "ReinhardNormalizer", "estimate_stains", "StainJitter", "TilingConfig", "tile_slide",
            "SlideResult", "tile_cohort", "open_store", "TileStore", "open_cohort", "Cohort",
            "audit_cohort", "CohortAudit", "make_splits"]


@pytest.mark.parametrize("name", CONTRACT)
def test_contract_name_resolves(name):
    assert getattr(tw, name) is not None


@pytest.mark.parametrize("old", ["open_wsi", "StainAugmenter"])
def test_old_names_are_gone(old):
    with pytest.raises(AttributeError):
        getattr(tw, old)


def test_torch_dataset_renamed():
    torch_mod = pytest.importorskip("tilewright.torch")
    assert hasattr(torch_mod, "TileStoreDataset")
    assert not hasattr(torch_mod, "TileDataset")
