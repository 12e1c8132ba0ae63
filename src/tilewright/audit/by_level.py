"""Sharpness beside colour, for every level of every factor (site, scanner, ...).

A site whose tiles are softer (its scanner's own pyramid level used, another focus, a thicker
section) gives a model a shortcut as surely as a colour cast does. :func:`level_table` puts the
two side by side: for each level, its slides' median sharpness (variance of the Laplacian, with
quartiles) and median tissue colour (CIELAB), and the CIEDE2000 distance of that colour from the
median colour of the other levels' slides.

References
----------
Sharma G, Wu W, Dalal EN (2005). The CIEDE2000 color-difference formula: implementation notes,
supplementary test data, and mathematical observations. Color Research & Application 30(1):21-30
(computed by ``skimage.color.deltaE_ciede2000``).
Pech-Pacheco JL, Cristóbal G, Chamorro-Martínez J, Fernández-Valdivia J (2000). Diatom
autofocusing in brightfield microscopy: a comparative study. Proceedings of the 15th
International Conference on Pattern Recognition, vol. 3, 314-317.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["level_table", "LEVEL_COLUMNS"]

LEVEL_COLUMNS = ["factor", "level", "slides", "sharpness_median", "sharpness_q1", "sharpness_q3",
                 "sharpness_vs_rest", "lab_l", "lab_a", "lab_b", "delta_e_vs_rest"]

_LAB = ("lab_l_mean", "lab_a_mean", "lab_b_mean")


def level_table(metrics: pd.DataFrame, factors: pd.DataFrame) -> pd.DataFrame:
    """Sharpness and colour of each factor level (one row a level; see :data:`LEVEL_COLUMNS`).

    Parameters
    ----------
    metrics : DataFrame
        Per-slide metrics indexed by slide id (``sharpness``, ``lab_*_mean``).
    factors : DataFrame
        Categorical factors indexed by slide id.

    Returns
    -------
    DataFrame
        ``sharpness_vs_rest``: the level's median sharpness over the other slides' median;
        ``delta_e_vs_rest``: CIEDE2000 between the level's median tissue colour and the other
        slides' (NaN for a factor with one level).
    """
    from skimage.color import deltaE_ciede2000

    rows = []
    have_lab = all(c in metrics.columns for c in _LAB)
    sharp = metrics["sharpness"] if "sharpness" in metrics.columns else pd.Series(np.nan, index=metrics.index)
    for factor in factors.columns:
        values = factors[factor].reindex(metrics.index)
        levels = [v for v in pd.unique(values.dropna())]
        for level in sorted(levels, key=str):
            mine = values == level
            rest = values.notna() & ~mine
            s_mine, s_rest = sharp[mine].dropna(), sharp[rest].dropna()
            row = {"factor": factor, "level": str(level), "slides": int(mine.sum()),
                   "sharpness_median": _median(s_mine), "sharpness_q1": _q(s_mine, 0.25),
                   "sharpness_q3": _q(s_mine, 0.75),
                   "sharpness_vs_rest": _median(s_mine) / _median(s_rest) if len(s_rest) else np.nan}
            if have_lab:
                lab_mine = metrics.loc[mine, list(_LAB)].median()
                lab_rest = metrics.loc[rest, list(_LAB)].median()
                row.update(lab_l=float(lab_mine.iloc[0]), lab_a=float(lab_mine.iloc[1]), lab_b=float(lab_mine.iloc[2]))
                ok = rest.any() and not (lab_mine.isna().any() or lab_rest.isna().any())
                row["delta_e_vs_rest"] = (float(deltaE_ciede2000(lab_mine.to_numpy(float), lab_rest.to_numpy(float)))
                                          if ok else np.nan)
            rows.append(row)
    return pd.DataFrame(rows, columns=LEVEL_COLUMNS)


def _median(s) -> float:
    return float(s.median()) if len(s) else float("nan")


def _q(s, q) -> float:
    return float(s.quantile(q)) if len(s) else float("nan")
