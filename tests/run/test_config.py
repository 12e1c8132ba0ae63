"""TilingConfig validation and TOML round trip."""

import pytest

from tilewright.errors import ConfigError
from tilewright.run.config import TilingConfig


def test_defaults_match_design():
    c = TilingConfig()
    # ground truth: DESIGN.md defaults
    assert (c.mpp, c.tile, c.stride, c.min_tissue, c.normalizer, c.reference, c.max_tiles, c.seed,
            c.mask_mpp) == (0.5, 256, None, 0.5, None, None, None, 0, 8.0)


def test_toml_round_trip(tmp_path):
    c = TilingConfig(mpp=0.25, tile=512, stride=256, normalizer="Macenko", max_tiles=100, seed=3)
    assert c.normalizer == "macenko"
    p = tmp_path / "c.toml"
    p.write_text(c.to_toml())
    assert TilingConfig.from_toml(p) == c


@pytest.mark.parametrize("bad", [dict(mpp=0), dict(mpp=float("nan")), dict(tile=-1), dict(tile=2.5),
                                 dict(min_tissue=1.5), dict(normalizer="vahadane"), dict(keep=["tumour"]),
                                 dict(compression="jpeg2000")])
def test_invalid_values_raise(bad):
    with pytest.raises(ConfigError):
        TilingConfig(**bad)


def test_unknown_toml_key_names_file(tmp_path):
    p = tmp_path / "c.toml"
    p.write_text("mpp = 0.5\ntile_size = 256\n")
    with pytest.raises(ConfigError, match="tile_size"):
        TilingConfig.from_toml(p)
