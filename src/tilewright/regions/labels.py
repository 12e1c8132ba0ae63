"""Label rasters as region input: checking the image and naming its label values."""

from __future__ import annotations

import numpy as np

from tilewright.errors import RegionError

__all__ = ["label_classes"]


def label_classes(labels, classes):
    """Check a label image and map class names to the label values they cover.

    Parameters
    ----------
    labels : array_like (H, W) of integers or booleans
    classes : sequence of str or dict
        A list names label values ``0, 1, ...`` in order; a dict maps label values to names
        (several values may share a name; spellings differing only in case or spacing are one
        class, see :mod:`tilewright.regions.classnames`).

    Returns
    -------
    labels : ndarray (H, W) of integers
    values : dict
        Class name -> list of label values, in order of first appearance.

    Raises
    ------
    RegionError
        Labels not a non-empty 2-D integer image, or ``classes`` empty or of the wrong kind.
    """
    from tilewright.regions.classnames import ClassNames

    labels = np.asarray(labels)
    if labels.ndim != 2 or labels.size == 0:
        raise RegionError(f"labels must be a non-empty 2-D image, got shape {labels.shape}")
    if labels.dtype == bool:
        labels = labels.astype(np.uint8)
    if not np.issubdtype(labels.dtype, np.integer):
        raise RegionError(f"labels must hold integers (class ids), got dtype {labels.dtype}")
    if isinstance(classes, dict):
        try:
            pairs = [(int(v), str(n)) for v, n in classes.items()]
        except (TypeError, ValueError):
            raise RegionError("classes dict keys must be integer label values") from None
    elif isinstance(classes, (list, tuple)):
        pairs = [(v, str(n)) for v, n in enumerate(classes)]
    else:
        raise RegionError("classes must be a list of names (label 0, 1, ...) or a dict {label: name}")
    if not pairs:
        raise RegionError("classes is empty; name at least one label value")
    spellings = ClassNames()
    values: dict[str, list] = {}
    for v, name in pairs:
        values.setdefault(spellings.add(name), []).append(v)
    return labels, values
