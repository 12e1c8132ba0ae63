"""Build stain transfers (the stain-normalization classes) by name or from their recorded dictionaries."""

from __future__ import annotations

from ..errors import ConfigError

__all__ = ["METHODS", "make_transfer", "transfer_from_dict"]

#: Normalization methods by name.
METHODS = ("macenko", "reinhard")


def _class_for(name):
    if name == "macenko":
        from .macenko import MacenkoTransfer

        return MacenkoTransfer
    if name == "reinhard":
        from .reinhard import ReinhardTransfer

        return ReinhardTransfer
    raise ConfigError(
        f"unknown stain normalization method {name!r}; choose one of {', '.join(METHODS)}"
    )


def make_transfer(name: str, **params):
    """A new, unfitted stain transfer of the named method.

    Parameters
    ----------
    name : {"macenko", "reinhard"}
        Method name (case-insensitive).
    **params
        Keyword arguments of the method's class.

    Returns
    -------
    MacenkoTransfer or ReinhardTransfer

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


def transfer_from_dict(d: dict):
    """Rebuild a fitted stain transfer from the dictionary its ``to_dict()`` wrote.

    Parameters
    ----------
    d : dict
        Must hold ``"method"`` ("macenko" or "reinhard").

    Returns
    -------
    MacenkoTransfer or ReinhardTransfer

    Raises
    ------
    ConfigError
        For a missing or unknown method, or a malformed dictionary.
    """
    if not isinstance(d, dict) or "method" not in d:
        raise ConfigError("a normalizer dictionary needs a 'method' key ('macenko' or 'reinhard')")
    return _class_for(d["method"]).from_dict(d)


def __getattr__(name: str):  # old spellings, one release (tilewright.renamed)
    from tilewright.renamed import old_name

    return old_name(__name__, name)
