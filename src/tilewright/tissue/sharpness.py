"""Focus quality of tiles: the variance of the Laplacian (common practice).

A sharp tile has strong second derivatives at nuclear and fibre edges; a blurred (out-of-focus)
tile does not. The score depends on tile content, µm/px and size, so compare tiles cut at one
resolution and set a minimum per cohort (for example from a low percentile of the scores).

References
----------
.. [1] J. L. Pech-Pacheco, G. Cristóbal, J. Chamorro-Martínez and J. Fernández-Valdivia,
       "Diatom autofocusing in brightfield microscopy: a comparative study", Proceedings of the
       15th International Conference on Pattern Recognition (ICPR) 3:314-317, 2000.
"""

from __future__ import annotations

import numpy as np

__all__ = ["sharpness", "GRAY_WEIGHTS"]

#: ITU-R BT.601 luma weights (the ones OpenCV's RGB2GRAY uses).
GRAY_WEIGHTS = np.array([0.299, 0.587, 0.114], dtype=np.float32)


def sharpness(tiles) -> np.ndarray:
    """Variance of the 4-neighbour Laplacian of each tile's grey level.

    Parameters
    ----------
    tiles : array_like (N, T, T, 3) or (T, T, 3) uint8, or (N, T, T) grey
        RGB tiles (converted to grey with BT.601 weights, values 0-255).

    Returns
    -------
    ndarray (N,) float32
        The score of each tile (higher is sharper). Borders are reflected (OpenCV's default,
        ``BORDER_REFLECT_101``).

    Raises
    ------
    ValueError
        If ``tiles`` does not have one of the shapes above.

    References
    ----------
    .. [1] J. L. Pech-Pacheco et al., "Diatom autofocusing in brightfield microscopy: a
           comparative study", ICPR 2000, 3:314-317.

    Examples
    --------
    >>> import numpy as np
    >>> flat = np.full((2, 32, 32, 3), 200, np.uint8)
    >>> sharpness(flat).tolist()
    [0.0, 0.0]
    """
    import cv2

    a = np.asarray(tiles)
    if a.ndim == 3 and a.shape[-1] == 3:
        a = a[None]
    rgb = a.ndim == 4 and a.shape[-1] == 3
    if not rgb and a.ndim != 3:
        raise ValueError(f"expected tiles (N, T, T, 3), (T, T, 3) or (N, T, T), got shape {a.shape}")
    out = np.empty(a.shape[0], dtype=np.float32)
    if a.shape[0] == 0:
        return out
    # one tile at a time through float32 buffers allocated once per call (no float copy of the
    # whole batch, no allocation per tile); cv2.transform / Laplacian / meanStdDev run in C
    # without the GIL
    work = np.empty(a.shape[1:], np.float32)
    grey = np.empty(a.shape[1:3], np.float32) if rgb else work
    lap = np.empty(a.shape[1:3], np.float32)
    weights = GRAY_WEIGHTS.reshape(1, 3)
    for i, tile in enumerate(a):
        np.copyto(work, tile)
        if rgb:
            cv2.transform(work, weights, dst=grey[..., None])
        cv2.Laplacian(grey, cv2.CV_32F, dst=lap, ksize=1)
        _, sd = cv2.meanStdDev(lap)
        out[i] = sd[0, 0] ** 2
    return out
