"""Stain colour: optical density, Macenko and Reinhard normalization, augmentation.

Modules (nothing is imported here, so ``import tilewright.stain`` does no work):

- ``density``: Beer–Lambert optical density of uint8 RGB (lookup table, safe at 0 and 255).
- ``tissue_pixels``: which pixels count as tissue for stain statistics (OD norm >= beta).
- ``estimate``: Macenko stain vectors and 99th-percentile concentrations (``estimate_stains``).
- ``od_transform``: fast float32 affine maps in optical-density space.
- ``lab``: CIE L*a*b* (D65) conversions with OpenCV float32 kernels.
- ``transfer``: ``StainTransfer``, the base of both methods: fitting, source binding, per-tile mode
  and dictionaries.
- ``macenko``: ``MacenkoTransfer`` (and ``estimate_stains``).
- ``reinhard``: ``ReinhardTransfer``.
- ``augment``: ``StainJitter`` (random H and E concentration scale and shift).
- ``registry``: ``make_transfer(name)`` and ``transfer_from_dict(d)``.
- ``normalizer``: old home of the base class (its old name warns; removed in the next release).
"""
