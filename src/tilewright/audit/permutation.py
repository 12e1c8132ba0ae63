"""Null distributions by rearranging group labels: exact enumeration when small, seeded Monte
Carlo otherwise.

A test of "does this grouping of the slides go with that measurement" under the hypothesis of no
association treats every rearrangement of the group labels over the slides as equally likely
(Fisher 1935; Pitman 1937). When the number of distinct rearrangements,
``n! / (n_1! n_2! ... n_g!)``, is at most ``exact_limit`` every one of them is enumerated and the
p-value is exact: the share of rearrangements whose statistic is at least the observed one.
Otherwise ``n_resamples`` random rearrangements are drawn from a seeded generator and the
p-value is ``(1 + b) / (1 + n_resamples)`` where ``b`` of them reach the observed statistic,
which is never zero and keeps the test's size (Phipson & Smyth 2010). The same convention is used
by ``scipy.stats.permutation_test``, which the tests use as the reference.

References
----------
Fisher RA (1935). The Design of Experiments. Oliver and Boyd, section 21.
Pitman EJG (1937). Significance tests which may be applied to samples from any populations.
Supplement to the Journal of the Royal Statistical Society 4(1):119-130.
Phipson B, Smyth GK (2010). Permutation p-values should never be zero: calculating exact
p-values when permutations are randomly drawn. Statistical Applications in Genetics and
Molecular Biology 9(1):39.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from itertools import combinations

import numpy as np

__all__ = ["EXACT_LIMIT", "N_RESAMPLES", "BLOCK_VALUES", "Rearrangements", "rearrangements",
           "count_rearrangements", "upper_tail", "reaching", "tail_p", "stable_seed"]

#: Enumerate every distinct rearrangement when there are at most this many.
EXACT_LIMIT = 50_000
#: Random rearrangements drawn otherwise (the issue's floor is 10,000).
N_RESAMPLES = 10_000
#: Relative tolerance under which a rearranged statistic counts as equal to the observed one
#: (sums taken in another order differ in the last bits).
REL_TOL = 1e-9


#: Most code values held at once while a null distribution is computed (a block of
#: rearrangements): 10,000 rearrangements of 10,000 slides would otherwise take 800 MB.
BLOCK_VALUES = 4_000_000


@dataclass(frozen=True)
class Rearrangements:
    """Group codes of the slides under the null hypothesis, one rearrangement a row.

    Rows are produced in blocks (:meth:`blocks`) so that memory stays bounded whatever the
    number of slides; :attr:`codes` gathers them all (small cohorts, tests).

    Attributes
    ----------
    exact : bool
        True when the rows are all distinct rearrangements (each equally likely), False for
        a seeded random sample.
    count : int
        Number of rearrangements (rows).
    """

    exact: bool
    count: int
    _enumerated: np.ndarray | None = None  # every rearrangement (exact)
    _base: np.ndarray | None = None  # the observed codes, shuffled block by block (random)
    _seed: object = None

    def blocks(self, values: int = BLOCK_VALUES):
        """Yield the rows in order, in blocks of about ``values`` codes. The random sample is the
        same whatever the block size (one generator, drawn row after row)."""
        n = int(self._enumerated.shape[1] if self.exact else self._base.size)
        rows = max(1, int(values) // max(1, n))
        if self.exact:
            for start in range(0, self.count, rows):
                yield self._enumerated[start:start + rows]
            return
        rng = np.random.default_rng(self._seed)
        for start in range(0, self.count, rows):
            k = min(rows, self.count - start)
            yield rng.permuted(np.broadcast_to(self._base, (k, self._base.size)), axis=1)

    @property
    def codes(self) -> np.ndarray:
        """Every row at once, shape (M, n)."""
        return np.concatenate(list(self.blocks(max(1, self.count) * max(1, self._n))), axis=0)

    @property
    def _n(self) -> int:
        return int(self._enumerated.shape[1] if self.exact else self._base.size)


def count_rearrangements(codes) -> int:
    """Number of distinct rearrangements of ``codes``: the multinomial coefficient
    ``n! / prod(n_g!)``."""
    counts = np.bincount(np.asarray(codes, dtype=np.int64))
    total, left = 1, int(counts.sum())
    for k in counts:
        total *= math.comb(left, int(k))
        left -= int(k)
    return total


def rearrangements(codes, *, exact_limit: int = EXACT_LIMIT, n_resamples: int = N_RESAMPLES,
                   seed=0) -> Rearrangements:
    """All distinct rearrangements of a code vector, or a seeded random sample of them.

    Parameters
    ----------
    codes : array_like of int, shape (n,)
        Group code (0, 1, ...) of every observation.
    exact_limit : int
        Enumerate when there are at most this many distinct rearrangements.
    n_resamples : int
        Random rearrangements otherwise (each an independent uniform shuffle).
    seed : int or sequence of int
        Seed of ``numpy.random.default_rng`` for the random sample.

    Returns
    -------
    Rearrangements
    """
    codes = np.asarray(codes, dtype=np.int64)
    if codes.ndim != 1:
        raise ValueError(f"codes must be one-dimensional, got shape {codes.shape}")
    if count_rearrangements(codes) <= exact_limit:
        # the set of rearrangements depends on the group sizes only
        every = _enumerate(tuple(int(k) for k in np.bincount(codes)))
        return Rearrangements(True, int(every.shape[0]), _enumerated=every)
    small = codes.astype(np.int16 if codes.max(initial=0) < 2**15 else np.int64)  # same shuffles, less memory
    return Rearrangements(False, int(n_resamples), _base=small, _seed=seed)


@lru_cache(maxsize=32)
def _enumerate(counts: tuple) -> np.ndarray:
    """Every distinct arrangement of groups of these sizes: positions of each group chosen in
    turn among those left. Cached (read-only), as many tests share group sizes."""
    n = int(sum(counts))
    # place the largest group last: it fills what is left, so the loops run over fewer rows
    order = [int(g) for g in np.argsort(counts, kind="stable")]
    partial = np.full((1, n), -1, dtype=np.int16)
    for g in order[:-1]:
        k = int(counts[g])
        if k == 0:
            continue
        chosen_all = {}
        blocks = []
        for row in partial:
            free = np.flatnonzero(row < 0)
            if free.size not in chosen_all:
                chosen_all[free.size] = np.array(list(combinations(range(free.size), k)), dtype=np.int64)
            chosen = free[chosen_all[free.size]]
            block = np.repeat(row[None, :], len(chosen), axis=0)
            block[np.arange(len(chosen))[:, None], chosen] = g
            blocks.append(block)
        partial = np.concatenate(blocks, axis=0)
    partial[partial < 0] = order[-1]
    partial.setflags(write=False)
    return partial


def reaching(null: np.ndarray, observed) -> np.ndarray:
    """How many values of ``null`` (shape (M,) or (M, K)) reach ``observed`` (scalar or (K,)),
    the tolerance of :func:`upper_tail` included: counts of a null computed block by block add
    up to the count of the whole."""
    null = np.asarray(null, dtype=np.float64)
    observed = np.asarray(observed, dtype=np.float64)
    return np.count_nonzero(null >= observed - REL_TOL * np.maximum(1.0, np.abs(observed)), axis=0)


def tail_p(reached: int, total: int, exact: bool) -> float:
    """The p-value of :func:`upper_tail` from a count of rearrangements reaching the observed
    statistic among ``total``."""
    if exact:
        return min(1.0, int(reached) / total)
    return (int(reached) + 1) / (total + 1)


def upper_tail(null: np.ndarray, observed: float, exact: bool) -> float:
    """p-value of an upper-tail test from the statistic under every (or sampled) rearrangement.

    Parameters
    ----------
    null : ndarray, shape (M,)
        The statistic of each rearrangement.
    observed : float
        The statistic of the data.
    exact : bool
        ``null`` holds every distinct rearrangement (share reaching ``observed``) or a random
        sample (``(1 + b) / (1 + M)``, Phipson & Smyth 2010).

    Returns
    -------
    float
    """
    null = np.asarray(null, dtype=np.float64)
    return tail_p(int(reaching(null, observed)), null.size, exact)


def stable_seed(*parts) -> list[int]:
    """A process-independent seed sequence from ints and strings (Python's ``hash`` is salted)."""
    out = []
    for part in parts:
        if isinstance(part, (int, np.integer)):
            out.append(int(part) % 2**63)
            continue
        value = 0
        for byte in str(part).encode("utf-8"):
            value = (value * 131 + byte) % (2**61 - 1)
        out.append(value)
    return out
