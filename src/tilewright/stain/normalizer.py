"""Former home of the stain-transfer base class, now :mod:`tilewright.stain.transfer`.

Kept for one release: ``StainNormalizer`` resolves to
:class:`~tilewright.stain.transfer.StainTransfer` with a DeprecationWarning.
"""

from tilewright.renamed import old_name


def __getattr__(name: str):
    return old_name(__name__, name)
