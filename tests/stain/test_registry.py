import json

import pytest

from tilewright import MacenkoNormalizer, ReinhardNormalizer
from tilewright.errors import ConfigError
from tilewright.stain.registry import make_normalizer, normalizer_from_dict

from .synthetic import site_image


def test_make_by_name():
    assert type(make_normalizer("macenko")) is MacenkoNormalizer
    assert type(make_normalizer("Reinhard")) is ReinhardNormalizer
    assert make_normalizer("macenko", per_tile=True).per_tile
    with pytest.raises(ConfigError):
        make_normalizer("vahadane")
    with pytest.raises(ConfigError):
        make_normalizer("macenko", alpha=90)


def test_from_dict_dispatches_on_method():
    img = site_image(80, "north")
    for cls in (MacenkoNormalizer, ReinhardNormalizer):
        d = json.loads(json.dumps(cls().fit(img).to_dict()))
        assert type(normalizer_from_dict(d)) is cls  # round trip through json.dumps
    with pytest.raises(ConfigError):
        normalizer_from_dict({"method": "other"})
    with pytest.raises(ConfigError):
        normalizer_from_dict({})
