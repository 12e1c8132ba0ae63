"""Embed slides by their metrics and group them into colour clusters.

Steps: drop metrics that are missing for every slide or constant; fill remaining gaps with the
metric's median; standardize each metric (z-score); principal component analysis keeping the
components that explain 90 % of the variance (at least two); k-means on those coordinates for
every k in 2..min(8, n - 1, n // 5), keeping the k with the highest mean silhouette (see
:func:`max_clusters`), unless the caller fixes k (a before/after comparison uses one k on both
sides). t-SNE coordinates are computed for the plots only; clusters never depend on them.

References
----------
Pearson K (1901). On lines and planes of closest fit to systems of points in space.
Philosophical Magazine 2(11):559-572.
Lloyd SP (1982). Least squares quantization in PCM. IEEE Transactions on Information Theory
28(2):129-137.
Rousseeuw PJ (1987). Silhouettes: a graphical aid to the interpretation and validation of
cluster analysis. Journal of Computational and Applied Mathematics 20:53-65.
van der Maaten L, Hinton G (2008). Visualizing data using t-SNE. Journal of Machine Learning
Research 9:2579-2605.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = ["Embedding", "embed_slides", "standardize"]

MAX_CLUSTERS = 8
SLIDES_PER_CLUSTER = 5
VARIANCE_KEPT = 0.90
#: Above this many slides the mean silhouette of a clustering is taken over a seeded sample of
#: this many slides (Rousseeuw's silhouette costs n² distances: 10,000 slides, 10^8 a k).
SILHOUETTE_SAMPLE = 2000
#: t-SNE coordinates (for the plots only) are computed up to this many slides; above, the plots
#: show the first two principal components (t-SNE of 10,000 slides takes minutes).
TSNE_MAX_SLIDES = 5000


@dataclass
class Embedding:
    """Coordinates and clusters of the slides.

    Attributes
    ----------
    coords : DataFrame
        Indexed by slide id: ``pc1, pc2, ...`` (the kept components), ``tsne1, tsne2`` and
        ``cluster`` (int).
    features : list of str
        Metrics that entered the embedding.
    explained : ndarray
        Share of variance explained by each kept component.
    silhouette : dict
        k -> mean silhouette of the k-means solution with k clusters.
    n_clusters : int
        The chosen k (1 when there are fewer than three slides).
    """

    coords: pd.DataFrame
    features: list
    explained: np.ndarray
    silhouette: dict
    n_clusters: int

    @property
    def clusters(self) -> pd.Series:
        """Cluster of every slide."""
        return self.coords["cluster"]

    @property
    def best_silhouette(self) -> float:
        """Mean silhouette of the chosen clustering (NaN when not clustered)."""
        return float(self.silhouette.get(self.n_clusters, float("nan")))


def standardize(metrics: pd.DataFrame) -> pd.DataFrame:
    """Median-filled, z-scored metrics without all-missing or constant columns.

    Parameters
    ----------
    metrics : DataFrame
        Numeric metrics, one row per slide.

    Returns
    -------
    DataFrame
        Same index; each kept column has mean 0 and (population) standard deviation 1.
    """
    numeric = metrics.apply(pd.to_numeric, errors="coerce").astype(np.float64)
    numeric = numeric.loc[:, numeric.notna().any()]
    numeric = numeric.fillna(numeric.median())
    spread = numeric.std(ddof=0)
    numeric = numeric.loc[:, spread > 1e-12 * (numeric.abs().max() + 1.0)]
    return (numeric - numeric.mean()) / numeric.std(ddof=0)


def embed_slides(metrics: pd.DataFrame, *, seed: int = 0, tsne: bool = True,
                 n_clusters: int | None = None) -> Embedding:
    """PCA coordinates, k-means clusters (k by silhouette) and t-SNE coordinates of slides.

    Parameters
    ----------
    metrics : DataFrame
        Per-slide metrics indexed by slide id.
    seed : int
        Seed of k-means and t-SNE (results are reproducible).
    tsne : bool
        Compute t-SNE coordinates (for plots; up to :data:`TSNE_MAX_SLIDES` slides); otherwise
        they repeat the first two components.
    n_clusters : int, optional
        Use this k instead of choosing it by silhouette (lowered to what the slides allow:
        at most ``n - 1`` and the number of distinct points).

    Returns
    -------
    Embedding

    References
    ----------
    Rousseeuw PJ (1987). Journal of Computational and Applied Mathematics 20:53-65.
    van der Maaten L, Hinton G (2008). Journal of Machine Learning Research 9:2579-2605.
    """
    from sklearn.cluster import KMeans
    from sklearn.decomposition import PCA
    from sklearn.metrics import silhouette_score

    z = standardize(metrics)
    n = len(z)
    coords = pd.DataFrame(index=metrics.index)
    if n < 3 or z.shape[1] == 0:
        pcs = np.zeros((n, 2))
        if n >= 2 and z.shape[1] >= 1:
            pcs[:, : min(2, z.shape[1], n)] = PCA(n_components=min(2, z.shape[1], n)).fit_transform(z.to_numpy())
        coords["pc1"], coords["pc2"] = pcs[:, 0], pcs[:, 1]
        coords["tsne1"], coords["tsne2"] = pcs[:, 0], pcs[:, 1]
        coords["cluster"] = 0
        return Embedding(coords, list(z.columns), np.zeros(0), {}, 1 if n else 0)
    pca = PCA(n_components=min(n, z.shape[1])).fit(z.to_numpy())
    cumulative = np.cumsum(pca.explained_variance_ratio_)
    kept = max(2, int(np.searchsorted(cumulative, VARIANCE_KEPT) + 1))
    kept = min(kept, pca.n_components_)
    pcs = pca.transform(z.to_numpy())[:, :kept]
    for i in range(kept):
        coords[f"pc{i + 1}"] = pcs[:, i]
    if kept < 2:
        coords["pc2"] = 0.0
    silhouette, labels = {}, {}
    distinct = len(np.unique(np.round(pcs, 9), axis=0))
    candidates = range(2, max_clusters(n, distinct) + 1)
    if n_clusters is not None:
        fixed = min(int(n_clusters), n - 1, distinct)
        candidates = range(fixed, fixed + 1) if fixed >= 2 else range(0)
    for k in candidates:
        fit = KMeans(n_clusters=k, n_init=10, random_state=seed).fit(pcs)
        if len(np.unique(fit.labels_)) < 2:
            continue
        silhouette[k] = float(silhouette_score(pcs, fit.labels_, sample_size=SILHOUETTE_SAMPLE if n > SILHOUETTE_SAMPLE
                                               else None, random_state=seed))
        labels[k] = fit.labels_
    if silhouette:
        best = max(silhouette, key=lambda k: (round(silhouette[k], 6), -k))
        coords["cluster"] = _relabel(labels[best])
    else:
        best = 1
        coords["cluster"] = 0
    coords["tsne1"], coords["tsne2"] = _tsne(pcs, seed) if tsne and n <= TSNE_MAX_SLIDES else (pcs[:, 0], pcs[:, 1])
    return Embedding(coords, list(z.columns), pca.explained_variance_ratio_[:kept], silhouette, best)


def max_clusters(n: int, distinct: int | None = None) -> int:
    """Largest k tried for ``n`` slides: at most 8, at most ``n - 1``, and about five slides a
    cluster or more (never below 2), so that clusters stay groups of slides rather than single
    outliers. Small cluster × factor tables still have expected counts far below five (20 slides,
    4 clusters × 4 levels: 1.25 a cell), which is why their p-values are exact or by permutation
    (:func:`tilewright.audit.association.association_test`), never the chi-square approximation.
    """
    limit = min(MAX_CLUSTERS, n - 1, max(2, n // SLIDES_PER_CLUSTER))
    return limit if distinct is None else min(limit, distinct)


def _relabel(labels: np.ndarray) -> np.ndarray:
    """Number clusters 0, 1, ... by decreasing size (ties by first appearance)."""
    values, first, counts = np.unique(labels, return_index=True, return_counts=True)
    order = sorted(range(len(values)), key=lambda i: (-counts[i], first[i]))
    mapping = {values[i]: rank for rank, i in enumerate(order)}
    return np.array([mapping[v] for v in labels], dtype=np.int64)


def _tsne(pcs: np.ndarray, seed: int) -> tuple[np.ndarray, np.ndarray]:
    from sklearn.manifold import TSNE

    n = pcs.shape[0]
    if n < 5:
        return pcs[:, 0], pcs[:, 1]
    perplexity = float(min(30.0, max(2.0, (n - 1) / 3.0)))
    # exact gradients for cohort-sized inputs: faster than Barnes-Hut's tree below a few hundred points
    method = "exact" if n <= 300 else "barnes_hut"
    xy = TSNE(n_components=2, perplexity=perplexity, init="pca", random_state=seed, method=method).fit_transform(pcs)
    return xy[:, 0], xy[:, 1]
