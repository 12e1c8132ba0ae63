import json

import pytest

from tilewright import MacenkoTransfer, ReinhardTransfer
from tilewright.errors import ConfigError
from tilewright.stain.registry import make_transfer, transfer_from_dict

from .synthetic import site_image


def test_make_by_name():
    assert type(make_transfer("macenko")) is MacenkoTransfer
    assert type(make_transfer("Reinhard")) is ReinhardTransfer
    assert make_transfer("macenko", per_tile=True).per_tile
    with pytest.raises(ConfigError):
        make_transfer("vahadane")
    with pytest.raises(ConfigError):
        make_transfer("macenko", alpha=90)


def test_from_dict_dispatches_on_method():
    img = site_image(80, "north")
    for cls in (MacenkoTransfer, ReinhardTransfer):
        d = json.loads(json.dumps(cls().fit(img).to_dict()))
        assert type(transfer_from_dict(d)) is cls  # round trip through json.dumps
    with pytest.raises(ConfigError):
        transfer_from_dict({"method": "other"})
    with pytest.raises(ConfigError):
        transfer_from_dict({})
