"""Assign groups of slides (patients, or sites) to folds so every label is spread evenly.

Each group carries its count of slides of every label. With ``K`` folds the aim for each fold is
``1/K`` of every label's slides, which balances both fold sizes and label proportions; the cost of
an assignment is the sum over folds and labels of the squared difference from that aim. Whole
groups move, never slides, so a patient's slides (or a site's) always share a fold.

Patients: a greedy start (largest groups first, each to the fold whose cost rises least) then
improving moves and swaps of single patients until none helps. Sites, far fewer: every
assignment is enumerated when there are few (the optimum), otherwise the same greedy start and
local search from several seeded orders. Every fold keeps at least one group. Ties are broken
by the seed.

References
----------
Howard FM, Dolezal J, Kochanny S, et al. (2021). The impact of site-specific digital histology
signatures on deep learning model accuracy and bias. Nature Communications 12:4423.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["assign_groups", "cost", "EXHAUSTIVE_LIMIT"]

#: Enumerate every assignment of groups to folds when there are at most this many.
EXHAUSTIVE_LIMIT = 200_000
RESTARTS = 16


def cost(counts: np.ndarray, assignment: np.ndarray, folds: int) -> float:
    """Sum over folds and labels of (fold's count - total / folds)^2."""
    per_fold = np.zeros((folds, counts.shape[1]))
    np.add.at(per_fold, assignment, counts)
    return float(((per_fold - counts.sum(axis=0) / folds) ** 2).sum())


def assign_groups(counts, folds: int, *, seed: int = 0, exhaustive: bool = False) -> np.ndarray:
    """Fold of every group, minimizing :func:`cost` with every fold non-empty.

    Parameters
    ----------
    counts : array_like, shape (G, L)
        Slides of each label in each group (G >= ``folds``).
    folds : int
    seed : int
        Seed of the processing order and of tie-breaking.
    exhaustive : bool
        Try every assignment when there are at most :data:`EXHAUSTIVE_LIMIT` (used for sites).

    Returns
    -------
    ndarray of int, shape (G,)
        Fold 0 .. folds - 1 of each group.
    """
    counts = np.asarray(counts, dtype=np.float64)
    n_groups = counts.shape[0]
    if n_groups < folds:
        raise ValueError(f"{n_groups} groups cannot fill {folds} folds")
    rng = np.random.default_rng(seed)
    if exhaustive and _stirling2(n_groups, folds) <= EXHAUSTIVE_LIMIT:
        best = _exhaustive(counts, folds, rng)
    else:
        tries = [_local_search(counts, _greedy(counts, folds, rng), folds)
                 for _ in range(RESTARTS if exhaustive else 1)]
        scores = [cost(counts, t, folds) for t in tries]
        best = tries[int(np.argmin(np.round(scores, 9)))]
    # fold numbers carry no meaning: number them in a seeded order
    return rng.permutation(folds)[best]


def _greedy(counts: np.ndarray, folds: int, rng: np.random.Generator) -> np.ndarray:
    """Largest groups first (seeded order among equals), each to the fold whose cost rises least;
    empty folds are filled first while groups remain to fill them."""
    target = counts.sum(axis=0) / folds
    order = rng.permutation(counts.shape[0])
    order = order[np.argsort(-counts[order].sum(axis=1), kind="stable")]
    per_fold = np.zeros((folds, counts.shape[1]))
    members = np.zeros(folds, np.int64)
    out = np.empty(counts.shape[0], np.int64)
    for placed, g in enumerate(order):
        rise = (((per_fold + counts[g] - target) ** 2).sum(axis=1) - ((per_fold - target) ** 2).sum(axis=1))
        empty = members == 0
        if empty.sum() >= counts.shape[0] - placed:  # as many groups left as empty folds: fill them
            rise = np.where(empty, rise, np.inf)
        tie_break = rng.permutation(folds)
        f = int(tie_break[np.lexsort((per_fold.sum(axis=1)[tie_break], np.round(rise[tie_break], 9)))[0]])
        out[g] = f
        per_fold[f] += counts[g]
        members[f] += 1
    return out


def _local_search(counts: np.ndarray, assignment: np.ndarray, folds: int, max_passes: int = 100) -> np.ndarray:
    """Improving moves of one group, then swaps of two, until none lowers the cost."""
    assignment = assignment.copy()
    n = counts.shape[0]
    norms = (counts**2).sum(axis=1)
    for _ in range(max_passes):
        per_fold = np.zeros((folds, counts.shape[1]))
        np.add.at(per_fold, assignment, counts)
        members = np.bincount(assignment, minlength=folds)
        # moving g (vector v) from a to b changes the cost by 2 v.(C_b - C_a) + 2 |v|^2
        delta = 2 * (counts @ per_fold.T - (counts * per_fold[assignment]).sum(axis=1)[:, None]) + 2 * norms[:, None]
        delta[np.arange(n), assignment] = np.inf
        delta[members[assignment] <= 1] = np.inf  # never empty a fold
        g, b = np.unravel_index(np.argmin(delta), delta.shape)
        if delta[g, b] < -1e-9:
            assignment[g] = b
            continue
        if n > 1500:  # pairwise swaps need n x n arrays; moves alone serve large cohorts
            break
        # swapping g (v, fold a) and h (w, fold b): 2 (v - w).(C_b - C_a) + 2 |v - w|^2
        proj = counts @ per_fold.T  # v . C_f
        cross = counts @ counts.T
        own = proj[np.arange(n), assignment]
        a = assignment
        d_vb = proj[:, a]  # [g, h]: v_g . C_{a_h}
        d_wa = proj[:, a].T  # [g, h]: w_h . C_{a_g}
        swap = 2 * (d_vb - own[None, :] - own[:, None] + d_wa) + 2 * (norms[:, None] + norms[None, :] - 2 * cross)
        swap[a[:, None] == a[None, :]] = np.inf
        g, h = np.unravel_index(np.argmin(swap), swap.shape)
        if swap[g, h] < -1e-9:
            assignment[g], assignment[h] = assignment[h], assignment[g]
            continue
        break
    return assignment


def _stirling2(n: int, k: int) -> int:
    """Ways to split n labelled groups into k non-empty unlabelled folds."""
    return sum((-1) ** j * math.comb(k, j) * (k - j) ** n for j in range(k + 1)) // math.factorial(k)


def _exhaustive(counts: np.ndarray, folds: int, rng: np.random.Generator) -> np.ndarray:
    """The least-cost assignment over every split into ``folds`` non-empty folds (restricted growth
    strings: group 0 in fold 0, each next group in a used fold or the next new one); ties by seed."""
    n = counts.shape[0]
    rows = [[0]]
    for i in range(1, n):
        grown = []
        for row in rows:
            used = max(row) + 1
            left = n - i  # groups still to place, this one included
            for f in range(min(used + 1, folds)):
                new_used = max(used, f + 1)
                if folds - new_used <= left - 1:  # enough groups left to open the remaining folds
                    grown.append(row + [f])
        rows = grown
    table = np.array([r for r in rows if max(r) + 1 == folds], dtype=np.int64)
    target = counts.sum(axis=0) / folds
    scores = np.empty(len(table))
    for start in range(0, len(table), 20_000):
        block = table[start:start + 20_000]
        per_fold = np.einsum("mgf,gl->mfl", (block[:, :, None] == np.arange(folds)).astype(np.float64), counts)
        scores[start:start + len(block)] = ((per_fold - target) ** 2).sum(axis=(1, 2))
    scores = np.round(scores, 9)
    best = np.flatnonzero(scores == scores.min())
    return table[best[rng.integers(best.size)]]
