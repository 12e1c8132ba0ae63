"""Names that were renamed, still importable for one release under their old spelling.

Reading an old name returns the object its new name holds and warns with a
:class:`DeprecationWarning` naming the replacement. Modules that held an old name resolve it
through :func:`old_name` from their module ``__getattr__`` (PEP 562), so nothing is imported
until an old name is used.
"""

from __future__ import annotations

import importlib
import warnings

__all__ = ["RENAMED", "old_name"]

#: (module, old name) -> (module holding the new name, new name). The stain classes were renamed
#: so that the set of names is the project's own; behaviour, ``fit``/``transform`` and the
#: dictionaries they write are unchanged.
RENAMED = {
    ("tilewright", "MacenkoNormalizer"): ("tilewright.stain.macenko", "MacenkoTransfer"),
    ("tilewright", "ReinhardNormalizer"): ("tilewright.stain.reinhard", "ReinhardTransfer"),
    ("tilewright.stain.macenko", "MacenkoNormalizer"): ("tilewright.stain.macenko", "MacenkoTransfer"),
    ("tilewright.stain.reinhard", "ReinhardNormalizer"): ("tilewright.stain.reinhard", "ReinhardTransfer"),
    ("tilewright.stain.normalizer", "StainNormalizer"): ("tilewright.stain.transfer", "StainTransfer"),
    ("tilewright.stain.transfer", "StainNormalizer"): ("tilewright.stain.transfer", "StainTransfer"),
    ("tilewright.stain.registry", "make_normalizer"): ("tilewright.stain.registry", "make_transfer"),
    ("tilewright.stain.registry", "normalizer_from_dict"): ("tilewright.stain.registry", "transfer_from_dict"),
}


def old_name(module: str, name: str):
    """The object ``module.name`` named before it was renamed, with a DeprecationWarning.

    Parameters
    ----------
    module : str
        The module the name is read from (``__name__`` of the caller's module).
    name : str
        The attribute asked for.

    Raises
    ------
    AttributeError
        When ``name`` is not an old name of ``module`` (as a plain missing attribute).
    """
    try:
        home, new = RENAMED[(module, name)]
    except KeyError:
        raise AttributeError(f"module {module!r} has no attribute {name!r}") from None
    warnings.warn(f"{module}.{name} is renamed {home}.{new}; the old name will be removed in the next release",
                  DeprecationWarning, stacklevel=3)
    return getattr(importlib.import_module(home), new)
