"""Build stain normalizers by name or from their recorded dictionaries."""

from __future__ import annotations

from ..errors import ConfigError

__all__ = ["METHODS", "make_normalizer", "normalizer_from_dict"]

#: Normalization methods by name.
METHODS = ("macenko", "reinhard")


def _class_for(name):
    if name == "macenko":
        from .macenko import MacenkoNormalizer

        return MacenkoNormalizer
    if name == "reinhard":
        from .reinhard import ReinhardNormalizer

        return ReinhardNormalizer
    raise ConfigError(
        f"unknown stain normalization method {name!r}; choose one of {', '.join(METHODS)}"
    )


def make_normalizer(name: str, **params):
    """A new, unfitted normalizer of the named method.

    Parameters
    ----------
    name : {"macenko", "reinhard"}
        Method name (case-insensitive).
    **params
        Keyword arguments of the normalizer class.

    Returns
    -------
    MacenkoNormalizer or ReinhardNormalizer

    Raises
    ------
    ConfigError
        For an unknown name or invalid parameters.
    """
    if not isinstance(name, str):
        raise ConfigError(f"normalizer name must be a string, got {type(name).__name__}")
    cls = _class_for(name.strip().lower())
    try:
        return cls(**params)
    except (TypeError, ValueError) as exc:
        raise ConfigError(f"invalid {name} parameters: {exc}") from None


def normalizer_from_dict(d: dict):
    """Rebuild a fitted normalizer from the dictionary its ``to_dict()`` wrote.

    Parameters
    ----------
    d : dict
        Must hold ``"method"`` ("macenko" or "reinhard").

    Returns
    -------
    MacenkoNormalizer or ReinhardNormalizer

    Raises
    ------
    ConfigError
        For a missing or unknown method, or a malformed dictionary.
    """
    if not isinstance(d, dict) or "method" not in d:
        raise ConfigError("a normalizer dictionary needs a 'method' key ('macenko' or 'reinhard')")
    return _class_for(d["method"]).from_dict(d)
