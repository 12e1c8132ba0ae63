"""Seeded stain-colour augmentation of H&E tiles in hematoxylin/eosin concentration space.

References
----------
Tellez D, Balkenhol M, Otte-Höller I, van de Loo R, Vogels R, Bult P, Wauters C, Vreuls W,
Mol S, Karssemeijer N, Litjens G, van der Laak J, Ciompi F (2018). Whole-slide mitosis
detection in H&E breast histology using PHH3 as a reference to train distilled stain-invariant
convolutional networks. IEEE Transactions on Medical Imaging 37(9):2126-2136.

Ruifrok AC, Johnston DA (2001). Quantification of histochemical staining by color
deconvolution. Analytical and Quantitative Cytology and Histology 23(4):291-299.
"""

from __future__ import annotations

import numpy as np

from .density import check_rgb
from .od_transform import apply_od_affine
from ..tissue.plane import RUIFROK_DAB, RUIFROK_E, RUIFROK_H

__all__ = ["StainJitter", "RUIFROK_JOHNSTON_HED"]

#: Hematoxylin, eosin and DAB optical-density vectors of Ruifrok & Johnston (2001), one a row (R, G,
#: B), unit length (:mod:`tilewright.tissue.plane` holds the published values).
RUIFROK_JOHNSTON_HED = np.stack([RUIFROK_H, RUIFROK_E, RUIFROK_DAB])


class StainJitter:
    """Random scale and shift of hematoxylin and eosin concentrations (Tellez et al. 2018).

    Each image's optical density is unmixed into hematoxylin, eosin and a residual (DAB)
    channel with the unit-normalized Ruifrok & Johnston (2001) vectors. For each image, the
    hematoxylin and eosin concentrations ``c`` become ``alpha * c + beta`` with
    ``alpha ~ U(1 - sigma_alpha, 1 + sigma_alpha)`` and ``beta ~ U(-sigma_beta, sigma_beta)``
    drawn independently per stain; the residual channel is kept; the image is remixed. As in
    the published method the shift applies to every pixel, so glass may take a faint tint.

    Parameters
    ----------
    sigma_alpha : float, default 0.05
        Half-width of the multiplicative range (Tellez et al. 2018 used 0.05, from memory).
    sigma_beta : float, default 0.05
        Half-width of the additive range, in optical density (log10) units of a unit stain
        vector (Tellez et al. 2018 used 0.05 in their units, from memory).
    seed : int, default 0
        Seed of the augmenter's own generator (used when ``__call__`` gets no ``rng``).

    References
    ----------
    Tellez D, Balkenhol M, Otte-Höller I, van de Loo R, Vogels R, Bult P, Wauters C, Vreuls W,
    Mol S, Karssemeijer N, Litjens G, van der Laak J, Ciompi F (2018). Whole-slide mitosis
    detection in H&E breast histology using PHH3 as a reference to train distilled
    stain-invariant convolutional networks. IEEE Transactions on Medical Imaging
    37(9):2126-2136.

    Examples
    --------
    >>> from skimage import data
    >>> aug = StainJitter(seed=7)
    >>> aug(data.immunohistochemistry()[:64, :64]).shape
    (64, 64, 3)
    """

    def __init__(self, sigma_alpha: float = 0.05, sigma_beta: float = 0.05, seed: int = 0):
        sigma_alpha, sigma_beta = float(sigma_alpha), float(sigma_beta)
        if not (0 <= sigma_alpha < 1):
            raise ValueError(f"sigma_alpha must be in [0, 1), got {sigma_alpha}")
        if not (0 <= sigma_beta and np.isfinite(sigma_beta)):
            raise ValueError(f"sigma_beta must be finite and >= 0, got {sigma_beta}")
        self.sigma_alpha = sigma_alpha
        self.sigma_beta = sigma_beta
        self.seed = seed
        self._rng = np.random.default_rng(seed)
        stains = RUIFROK_JOHNSTON_HED.copy()
        self.stain_matrix = stains
        self._unmix = np.linalg.inv(stains)

    def sample(self, n: int, rng=None):
        """Draw ``n`` perturbations.

        Parameters
        ----------
        n : int
            Number of images.
        rng : numpy.random.Generator or int, optional
            Generator (or seed); the augmenter's own generator by default.

        Returns
        -------
        alpha, beta : ndarray, shape (n, 2)
            Scale and shift of (hematoxylin, eosin) concentrations for each image.
        """
        gen = self._rng if rng is None else np.random.default_rng(rng)
        alpha = gen.uniform(1 - self.sigma_alpha, 1 + self.sigma_alpha, size=(n, 2))
        beta = gen.uniform(-self.sigma_beta, self.sigma_beta, size=(n, 2))
        return alpha, beta

    def od_map(self, alpha, beta):
        """The OD-space affine map ``OD' = OD @ A + b`` of one perturbation.

        Returns
        -------
        A : ndarray (3, 3)
        b : ndarray (3,)
        """
        scale = np.array([alpha[0], alpha[1], 1.0])
        shift = np.array([beta[0], beta[1], 0.0])
        return (self._unmix * scale) @ self.stain_matrix, shift @ self.stain_matrix

    def __call__(self, tile_or_batch, rng=None) -> np.ndarray:
        """Augment one tile (H, W, 3) or a batch (..., H, W, 3), one draw per tile.

        Parameters
        ----------
        tile_or_batch : array_like, uint8
            Tile or batch of tiles.
        rng : numpy.random.Generator or int, optional
            Source of randomness; the augmenter's own seeded generator by default (so two
            augmenters with one seed produce the same sequence).

        Returns
        -------
        ndarray, uint8, same shape
        """
        arr = check_rgb(tile_or_batch, "tile_or_batch")
        if arr.ndim < 3:
            raise ValueError(f"expected (H, W, 3) or (..., H, W, 3), got {arr.shape}")
        tiles = arr.reshape((-1,) + arr.shape[-3:])
        alpha, beta = self.sample(tiles.shape[0], rng)
        out = np.empty_like(tiles)
        for i, tile in enumerate(tiles):
            matrix, offset = self.od_map(alpha[i], beta[i])
            apply_od_affine(tile, matrix, offset, out=out[i])
        return out.reshape(arr.shape)

    def __repr__(self) -> str:
        return (f"StainJitter(sigma_alpha={self.sigma_alpha}, sigma_beta={self.sigma_beta}, "
                f"seed={self.seed})")
