"""Single-pass, mergeable summaries of a table read in batches.

Everything here is fed one batch at a time with numpy arrays and never holds more than a
bounded amount of state, so a table of any length can be summarised in constant memory:

* :class:`Moments` -- counts, means and 2nd to 4th central moments per column, merged
  pairwise (Chan, Golub & LeVeque 1979, "Updating formulae and a pairwise algorithm for
  computing sample variances"; the 3rd and 4th order terms are Pebay 2008, Sandia report
  SAND2008-6212, eq. 3.1). Exact up to floating-point rounding.
* :class:`LevelCounter` -- exact counts of distinct values while there are at most
  ``cap`` of them; beyond that it gives up (``overflowed``) and the caller falls back on
  a sketch or on the sample.
* :class:`DistinctSketch` -- the k-minimum-values sketch of the number of distinct values
  (Bar-Yossef et al. 2002; estimator ``(k - 1) / h_k`` of Beyer et al., SIGMOD 2007).
  Exact while fewer than ``k`` distinct hashes were seen, otherwise about ``1/sqrt(k)``
  relative error.
* :class:`BottomKSample` -- a seeded uniform sample of at most ``cap`` rows: each row gets
  the priority ``mix64(row index, seed)`` and the ``cap`` rows of smallest priority are
  kept. It is a reservoir sample whose content does not depend on how the rows were cut
  into batches, so a DataFrame and its Parquet file give the same sample; samples of
  disjoint row ranges merge into the sample of their union.

Every summary has a ``merge`` that combines it with the summary of other rows, so the
summaries of the parts of a table, computed apart, add up to the table's.

Hashes are 64-bit (:func:`mix64`, the SplitMix64 finaliser of Steele, Lea & Flood,
OOPSLA 2014), computed on whole arrays.
"""

from __future__ import annotations

import numpy as np

_M1 = np.uint64(0xBF58476D1CE4E5B9)
_M2 = np.uint64(0x94D049BB133111EB)
_GOLDEN = np.uint64(0x9E3779B97F4A7C15)
NULL_HASH = np.uint64(0x6A09E667F3BCC909)


def mix64(x: np.ndarray) -> np.ndarray:
    """SplitMix64 finaliser: a bijective avalanche mix of uint64 values, same shape."""
    x = np.asarray(x, dtype=np.uint64)
    x = (x ^ (x >> np.uint64(30))) * _M1
    x = (x ^ (x >> np.uint64(27))) * _M2
    return x ^ (x >> np.uint64(31))


def hash_floats(x: np.ndarray, key: np.ndarray | np.uint64,
                nan: np.ndarray | None = None) -> np.ndarray:
    """Hash float64 values (any shape); NaN -> :data:`NULL_HASH`, -0.0 and 0.0 alike.

    ``key`` (a uint64 per column, broadcast against ``x``) makes equal values in different
    columns hash differently; ``nan`` is ``np.isnan(x)`` when the caller has it already.
    """
    h = mix64((x + 0.0).view(np.uint64) ^ key)  # + 0.0 turns -0.0 into 0.0
    nan = np.isnan(x) if nan is None else nan
    if nan.any():
        h[nan] = NULL_HASH
    return h


def hash_ints(x: np.ndarray, null: np.ndarray, key: np.uint64) -> np.ndarray:
    """Hash int64 values (e.g. nanoseconds since the epoch); ``null`` marks missing."""
    h = mix64(x.astype(np.int64).view(np.uint64) ^ key)
    return np.where(null, NULL_HASH, h)


def unique_counts(keys: np.ndarray, counts: np.ndarray | None = None
                  ) -> tuple[np.ndarray, np.ndarray]:
    """Sorted distinct keys and the summed ``counts`` of each (1 per key when None).

    Sort-based (``np.unique`` can be many times slower on hashes); keys of shape (n,).
    """
    keys = np.asarray(keys).ravel()
    if keys.size == 0:
        return keys, np.zeros(0)
    if counts is None and keys.dtype == np.float64:
        lo, hi = keys.min(), keys.max()
        # Whole numbers in a short range (codes, counts, ratings): one bincount, no sort.
        if hi - lo < 65536 and np.all(keys == np.floor(keys)):
            c = np.bincount((keys - lo).astype(np.int64))
            nz = np.flatnonzero(c)
            return nz + lo, c[nz].astype(float)
    order = np.argsort(keys, kind="stable")
    sk = keys[order]
    first = np.flatnonzero(np.concatenate(([True], sk[1:] != sk[:-1])))
    weights = np.ones(keys.size) if counts is None else np.asarray(counts, dtype=float)[order]
    return sk[first], np.add.reduceat(weights, first)


def sorted_distinct(x: np.ndarray) -> np.ndarray:
    """Sorted distinct values of a 1-d array (sort-based)."""
    x = np.sort(np.asarray(x).ravel())
    return x[np.concatenate(([True], x[1:] != x[:-1]))] if x.size else x


def key_of(name: str) -> np.uint64:
    """A stable 64-bit key for a column name."""
    import hashlib

    return np.uint64(int.from_bytes(hashlib.blake2b(name.encode(), digest_size=8).digest(),
                                    "little"))


class Moments:
    """Count, mean and central moment sums M2..M4 of many columns at once.

    ``update(x, ok)`` takes a batch ``x`` of shape (rows, columns) and the mask ``ok`` of
    the values to use (finite ones); columns are independent.
    """

    def __init__(self, n_columns: int):
        z = np.zeros(n_columns)
        self.n, self.mean, self.m2, self.m3, self.m4 = z.copy(), z.copy(), z.copy(), z.copy(), z

    def update(self, x: np.ndarray, ok: np.ndarray) -> None:
        nb = ok.sum(axis=0).astype(float)
        with np.errstate(all="ignore"):
            mb = np.where(ok, x, 0.0).sum(axis=0) / np.where(nb > 0, nb, 1.0)
            d = np.where(ok, x - mb, 0.0)
            d2 = d * d
            m2b, m3b, m4b = d2.sum(axis=0), (d2 * d).sum(axis=0), (d2 * d2).sum(axis=0)
        self.merge(nb, mb, m2b, m3b, m4b)

    def merge(self, nb, mb, m2b, m3b, m4b) -> None:
        """Combine with another set of sums (Chan et al. 1979; Pebay 2008, eq. 3.1)."""
        na, ma, m2a, m3a, m4a = self.n, self.mean, self.m2, self.m3, self.m4
        n = na + nb
        safe = np.where(n > 0, n, 1.0)
        delta = mb - ma
        self.mean = ma + delta * nb / safe
        self.m2 = m2a + m2b + delta**2 * na * nb / safe
        self.m3 = (m3a + m3b + delta**3 * na * nb * (na - nb) / safe**2
                   + 3.0 * delta * (na * m2b - nb * m2a) / safe)
        self.m4 = (m4a + m4b + delta**4 * na * nb * (na * na - na * nb + nb * nb) / safe**3
                   + 6.0 * delta**2 * (na * na * m2b + nb * nb * m2a) / safe**2
                   + 4.0 * delta * (na * m3b - nb * m3a) / safe)
        self.n = n


class LevelCounter:
    """Exact counts of distinct values (numbers or strings) while there are ``<= cap``."""

    def __init__(self, cap: int):
        self.cap = cap
        self.keys: np.ndarray | None = None
        self.counts = np.zeros(0)
        self.overflowed = False

    def add(self, keys: np.ndarray, counts: np.ndarray) -> None:
        """Add distinct ``keys`` seen ``counts`` times in a batch."""
        if self.overflowed or keys.size == 0:
            return
        if keys.size > self.cap:
            self.give_up()
            return
        if self.keys is None:
            allk, allc = keys, counts
        else:
            allk = np.concatenate([self.keys, keys])
            allc = np.concatenate([self.counts, counts])
        uniq, total = unique_counts(allk, allc)
        if uniq.size > self.cap:
            self.give_up()
            return
        self.keys, self.counts = uniq, total

    def merge(self, other: LevelCounter) -> None:
        """Add the counts of another counter (gives up if either did)."""
        if other.overflowed:
            self.give_up()
        elif other.keys is not None:
            self.add(other.keys, other.counts)

    def give_up(self) -> None:
        """Stop counting: there are more than ``cap`` levels."""
        self.overflowed, self.counts = True, np.zeros(0)

    @property
    def size(self) -> int:
        return 0 if self.keys is None else int(self.keys.size)


class DistinctSketch:
    """k-minimum-values estimate of the number of distinct hashes."""

    def __init__(self, k: int = 4096):
        self.k = k
        self.h = np.zeros(0, dtype=np.uint64)

    def add(self, hashes: np.ndarray) -> None:
        hashes = np.asarray(hashes, dtype=np.uint64).ravel()
        if self.h.size == self.k:
            hashes = hashes[hashes < self.h[-1]]
        if hashes.size:
            self.h = sorted_distinct(np.concatenate([self.h, hashes]))[: self.k]

    def merge(self, other: DistinctSketch) -> None:
        """The sketch of the union: the ``k`` smallest of both sets of hashes."""
        self.add(other.h)

    def estimate(self) -> tuple[float, bool]:
        """(distinct count, exact?)."""
        if self.h.size < self.k:
            return float(self.h.size), True
        kth = float(self.h[-1]) / 2.0**64
        return (self.k - 1) / kth, False


class BottomKSample:
    """Rows of smallest seeded priority, at most ``cap`` of them, batch-order independent.

    Payload arrays (one per field) are gathered only for candidate rows, so the cost per
    batch is one vectorised hash and comparison of the row indices. ``bound``, when
    known, is the largest priority the sample of the whole table keeps (see
    :meth:`smallest`): rows above it are never candidates, so the sample of a part of
    the table holds only rows that the whole table's sample will keep.
    """

    def __init__(self, cap: int, seed: int, bound: int | None = None):
        self.cap = cap
        self.seed = np.uint64((int(seed) * int(_GOLDEN)) % 2**64)
        self.bound = None if bound is None else np.uint64(bound)
        self.priority = np.zeros(0, dtype=np.uint64)
        self.index = np.zeros(0, dtype=np.int64)
        self.payload: dict[str, np.ndarray] = {}

    def candidates(self, start: int, n: int) -> tuple[np.ndarray, np.ndarray] | None:
        """Positions in the batch ``[start, start + n)`` that may enter the sample."""
        pri = mix64(np.arange(start, start + n, dtype=np.uint64) ^ self.seed)
        ok = pri < self.priority.max() if self.priority.size >= self.cap else None
        if self.bound is not None:
            ok = pri <= self.bound if ok is None else ok & (pri <= self.bound)
        pos = np.arange(n) if ok is None else np.flatnonzero(ok)
        return (pos, pri[pos]) if pos.size else None

    def full_bound(self) -> int | None:
        """The largest kept priority once ``cap`` rows are kept (a bound for later rows)."""
        return int(self.priority.max()) if self.priority.size >= self.cap else None

    def smallest(self, start: int, stop: int, chunk: int = 1 << 20) -> np.ndarray:
        """The ``cap`` smallest priorities of the rows ``[start, stop)``, sorted.

        Needs no data, only row numbers; memory is ``chunk`` rows at a time.
        """
        best = np.zeros(0, dtype=np.uint64)
        for lo in range(start, stop, chunk):
            pri = mix64(np.arange(lo, min(lo + chunk, stop), dtype=np.uint64) ^ self.seed)
            best = np.concatenate([best, pri])
            if best.size > self.cap:
                best = np.partition(best, self.cap - 1)[: self.cap]
        return np.sort(best)

    @staticmethod
    def bound_of(smallest: list[np.ndarray], cap: int) -> int | None:
        """The whole table's ``bound`` from :meth:`smallest` of ranges covering it; None
        when the table has fewer than ``cap`` rows (every row is kept)."""
        allp = np.concatenate([np.zeros(0, dtype=np.uint64), *smallest])
        if allp.size < cap:
            return None
        return int(np.partition(allp, cap - 1)[cap - 1])

    def merge(self, other: BottomKSample) -> None:
        """The sample of the union of two disjoint row ranges."""
        if other.index.size:
            self.offer(0, other.index, other.priority, other.payload)

    def offer(self, start: int, pos: np.ndarray, pri: np.ndarray,
              payload: dict[str, np.ndarray]) -> None:
        """Add the candidate rows ``pos`` with their payload rows, keep the best ``cap``."""
        pr = np.concatenate([self.priority, pri])
        ix = np.concatenate([self.index, start + pos.astype(np.int64)])
        merged = {k: (np.concatenate([self.payload[k], v]) if k in self.payload else v)
                  for k, v in payload.items()}
        if pr.size > self.cap:
            keep = np.argpartition(pr, self.cap - 1)[: self.cap]
            pr, ix = pr[keep], ix[keep]
            merged = {k: v[keep] for k, v in merged.items()}
        self.priority, self.index, self.payload = pr, ix, merged

    def in_row_order(self) -> tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]:
        """(row indices, priorities, payload) sorted by row index."""
        order = np.argsort(self.index, kind="stable")
        return (self.index[order], self.priority[order],
                {k: v[order] for k, v in self.payload.items()})


def shape_statistics(moments: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Skewness, excess kurtosis and coefficient of variation from moment sums.

    Parameters
    ----------
    moments : ndarray of shape (5, n_columns)
        Count, mean, M2, M3, M4 (sums of centred powers) per column.

    Returns
    -------
    skewness, kurtosis, variation : ndarray of shape (n_columns,)
        ``g1 = m3 / m2**1.5`` and ``g2 = m4 / m2**2 - 3`` with the biased moments
        ``m_k = M_k / n`` (scipy.stats.skew / kurtosis with ``bias=True``) and
        ``sqrt(m2) / |mean|``; NaN where the variance or the mean is 0.
    """
    n, mean, m2, m3, m4 = (np.asarray(r, dtype=float) for r in moments)
    with np.errstate(all="ignore"):
        v = m2 / n
        # Relative to the mean's size, a variance below rounding noise is a constant.
        flat = ~(v > (np.abs(mean) * 1e-12) ** 2) | (n < 2)
        skew = np.where(flat, np.nan, (m3 / n) / v**1.5)
        kurt = np.where(flat, np.nan, (m4 / n) / v**2 - 3.0)
        cv = np.where((mean != 0) & (n > 0), np.sqrt(v) / np.abs(mean), np.nan)
    return skew, kurt, cv
