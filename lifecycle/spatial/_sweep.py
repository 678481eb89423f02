"""Counting, for every premise and month, the other premises within a radius that qualify.

The count behind ``nearby_adopters_*`` and the customers-nearby denominator. Each premise j
qualifies in a run of months (an interval: while it is a customer, while it holds a product),
so the count for premise i in month m is

    c(i, m) = #{ j ≠ i : d(i, j) ≤ r,  lo_j ≤ m ≤ hi_j }.

A pairwise method costs one step per pair and month change, and at town densities
(~1,000 premises within 400 m) that is about a billion pairs per million premises. Here the
disc around each premise is covered instead by horizontal strips of premises sorted by x (a
spatial index built once): within a strip, the premises whose x lies in the part of the strip
that is wholly inside the disc form one contiguous run, so their month-by-month count is the
difference of two rows of a prefix sum over the strip-sorted premises. Only the premises in the
thin rim where a strip crosses the circle are tested one by one, with the exact distance; each
of those adds its interval through a difference array over months. The result equals the
pairwise count exactly (the tests compare it with brute force, ties at the radius included).
"""

from __future__ import annotations

import itertools
from collections.abc import Iterator, Sequence

import numpy as np

__all__ = ["nearby_counts"]

# Strip height as a fraction of the radius: taller strips mean fewer row look-ups per premise
# but a wider rim to test pair by pair; r/10 was about fastest at town densities.
_STRIPS_PER_RADIUS = 10
# Bound on each working array of a chunk of premises (≈ 8 MB: stays in cache).
_CHUNK_BYTES = 8 * 2**20
# Rim candidates expanded at a time (a single longer range is taken whole).
_RIM_BATCH = 2**20


def nearby_counts(
    x: np.ndarray,
    y: np.ndarray,
    radius: float,
    intervals: Sequence[tuple[np.ndarray, np.ndarray]],
    n_months: int,
) -> np.ndarray:
    """For each point and month, how many other points within ``radius`` qualify that month.

    With ``intervals[q] = (lo, hi)``, point j qualifies for quantity q in month m when
    ``lo[j] ≤ m ≤ hi[j]`` (an empty interval when ``lo[j] > hi[j]``), and::

        counts[i, q, m] = #{ j ≠ i : (x_i − x_j)² + (y_i − y_j)² ≤ radius²,
                             lo_q[j] ≤ m ≤ hi_q[j] },        m = 0 .. n_months − 1.

    The boundary is inclusive (a point exactly ``radius`` away counts, as in
    `neighbour_pairs`); a point never counts for itself, but another point at the same place
    does. Months are offsets 0..n_months−1 from the caller's first month; interval ends
    outside that range are fine (they are clipped).

    Cost: building the index is a sort; then per point about 2·(2·10+3) row look-ups of
    ``len(intervals) · n_months`` integers and an exact test of the ~4·r·h·density points in
    the rim (strip height h = r/10). Memory: a prefix array of ``n × len(intervals) ×
    n_months`` 16-bit integers (32-bit where more than 65,535 points could be within the
    radius of one), the int32 result, and twice that while it is put back in input order.

    Parameters
    ----------
    x, y
        Coordinates in metres in a projected CRS, float64, all finite.
    radius
        r ≥ 0, in the same units.
    intervals
        Pairs ``(lo, hi)`` of integer arrays of month offsets, one entry per point.
    n_months
        Number of months wanted.

    Returns
    -------
    numpy.ndarray
        int32 array of shape ``(n_points, len(intervals), n_months)``.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    n = len(x)
    n_q = len(intervals)
    radius = float(radius)
    if y.shape != x.shape or x.ndim != 1:
        raise ValueError(f"x has shape {x.shape} but y has shape {y.shape}")
    if not np.isfinite(radius) or radius < 0:
        raise ValueError(f"radius was {radius} but is expected to be finite and ≥ 0")
    if not (np.isfinite(x).all() and np.isfinite(y).all()):
        raise ValueError("coordinates must be finite")
    if n == 0 or n_q == 0 or n_months <= 0:
        return np.zeros((n, n_q, max(n_months, 0)), dtype=np.int32)

    index = _StripIndex(x, y, radius)
    lo, hi = _clipped(intervals, n, n_months, index.order)
    prefix = _prefix_rows(lo, hi, n_months, _prefix_dtype(x, y, radius))
    width = n_q * n_months
    chunk = int(max(64, min(4096, _CHUNK_BYTES // (8 * width))))
    out_sorted = np.empty((n, width), dtype=np.int32)
    for c0 in range(0, n, chunk):
        c1 = min(n, c0 + chunk)
        out_sorted[c0:c1] = _count_chunk(index, prefix, lo, hi, n_months, c0, c1)
    rank = np.empty(n, dtype=np.int64)
    rank[index.order] = np.arange(n)
    return out_sorted.take(rank, axis=0).reshape(n, n_q, n_months)


class _StripIndex:
    """Points sorted into horizontal strips and by x within a strip, with a look-up table.

    ``table[t, u]`` is the sorted position of the first point of strip t whose x-bin
    ⌊(x − x_min) / B⌋ is at least u, so a run of x-values in a strip is found with two table
    reads instead of two binary searches. Bins blur a run's ends by less than B; the runs are
    always widened on the rim side and narrowed on the inside side, and the rim is tested
    exactly, so the blur costs a few extra tests and never changes a count.
    """

    def __init__(self, x: np.ndarray, y: np.ndarray, radius: float) -> None:
        n = len(x)
        self.r2 = radius * radius
        x_min, y_min = x.min(), y.min()
        extent_x, extent_y = x.max() - x_min, y.max() - y_min
        height = radius / _STRIPS_PER_RADIUS
        # keep the number of strips O(n) when points are sparse over a huge extent
        height = max(height, extent_y / (2 * n + 1))
        if height <= 0:
            height = 1.0
        strip = np.floor((y - y_min) / height).astype(np.int64)
        self.order = np.lexsort((x, strip))
        self.x = x[self.order]
        self.y = y[self.order]
        self.strip = strip[self.order]
        self.n_strips = int(self.strip[-1]) + 1
        self.x_min = x_min
        # A margin δ keeps the "wholly inside" runs and the rim's outer ends safe from
        # rounding (δ² is far above the float error of a squared distance).
        self.delta = 1e-3 * radius + 1e-9 * max(np.abs(x).max(), np.abs(y).max())
        # bins: fine against the strip height, but a table of at most ~4n entries
        self.bin = max(height / 8.0, extent_x * self.n_strips / (4.0 * n), 1e-9)
        x_bin = np.floor((self.x - x_min) / self.bin).astype(np.int64)
        self.n_bins = int(x_bin.max()) + 1
        row = self.n_bins + 1
        code = self.strip * row + x_bin  # non-decreasing in sorted order
        wanted = np.arange((self.n_strips + 1) * row, dtype=np.int64)
        self.table = np.searchsorted(code, wanted, "left").astype(np.int64)
        # actual y-range of each strip; one extra empty strip stands for "no strip"
        self.y_lo = np.full(self.n_strips + 1, np.inf)
        self.y_hi = np.full(self.n_strips + 1, -np.inf)
        np.minimum.at(self.y_lo, self.strip, self.y)
        np.maximum.at(self.y_hi, self.strip, self.y)
        reach = int(np.ceil(radius / height)) + 1
        self.offsets = np.arange(-reach, reach + 1)

    def _first(self, strip: np.ndarray, value: np.ndarray, step: int) -> np.ndarray:
        """Position of the first point of ``strip`` in x-bin ⌊value / B⌋ + step or beyond."""
        u = np.floor(value / self.bin)
        u = np.clip(u + step, 0, self.n_bins).astype(np.int64)
        return self.table[strip * (self.n_bins + 1) + u]

    def runs(self, c0: int, c1: int) -> tuple[np.ndarray, ...]:
        """For points c0..c1 (sorted order) and each strip offset: the run boundaries.

        Returns ``a ≤ b ≤ c ≤ e`` (shape ``(offsets, points)``): positions ``[b, c)`` are
        wholly inside the disc, ``[a, b)`` and ``[c, e)`` form the rim to test one by one
        (every point of the strip within the disc lies in ``[a, e)``).
        """
        xq, yq = self.x[c0:c1], self.y[c0:c1]
        target = self.strip[c0:c1][None, :] + self.offsets[:, None]
        safe = np.where((target >= 0) & (target < self.n_strips), target, self.n_strips)
        lo_y = self.y_lo[safe] - yq
        hi_y = self.y_hi[safe] - yq
        far2 = np.maximum(lo_y * lo_y, hi_y * hi_y)
        straddles = (lo_y <= 0) & (hi_y >= 0)
        near2 = np.where(straddles, 0.0, np.minimum(lo_y * lo_y, hi_y * hi_y))
        reach = near2 <= self.r2  # False for the empty strip (inf)
        inner = np.where(far2 <= self.r2, np.sqrt(np.maximum(self.r2 - far2, 0.0)), -np.inf)
        inner -= self.delta
        outer = np.sqrt(np.maximum(self.r2 - near2, 0.0)) + self.delta
        centre = xq - self.x_min
        a = self._first(safe, centre - outer, 0)
        e = self._first(safe, centre + outer, 1)
        b = self._first(safe, centre - np.maximum(inner, 0.0), 1)
        c = self._first(safe, centre + np.maximum(inner, 0.0), 0)
        has_inner = (inner >= 0) & (b < c)
        b = np.where(has_inner, b, a)
        c = np.where(has_inner, c, a)
        a, b, c, e = (np.where(reach, v, 0) for v in (a, b, c, e))
        return a, b, c, e


def _clipped(
    intervals: Sequence[tuple[np.ndarray, np.ndarray]], n: int, n_months: int, order: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Interval bounds in sorted order as difference-array columns: +1 at ``lo``, −1 at ``hi``
    (exclusive), both in 0..n_months; an empty interval becomes ``(n_months, n_months)``."""
    lo = np.empty((len(intervals), n), dtype=np.int32)
    hi = np.empty((len(intervals), n), dtype=np.int32)
    for q, (first, last) in enumerate(intervals):
        first = np.asarray(first, dtype=np.int64)
        last = np.asarray(last, dtype=np.int64)
        if first.shape != (n,) or last.shape != (n,):
            raise ValueError(
                f"interval {q} has shapes {first.shape}, {last.shape}; expected ({n},)"
            )
        a = np.clip(first, 0, n_months)[order]
        b = np.clip(last + 1, 0, n_months)[order]
        empty = a >= b
        a[empty] = n_months
        b[empty] = n_months
        lo[q] = a
        hi[q] = b
    return lo, hi


def _prefix_rows(lo: np.ndarray, hi: np.ndarray, n_months: int, dtype: type) -> np.ndarray:
    """``P[k, q·M + m]`` = number of the first k points (sorted order) qualifying for q in m.

    With ``dtype=np.uint16`` the sums wrap modulo 2¹⁶; differences of rows are then still right
    whenever the true difference is below 2¹⁶ (see `_neighbour_bound`).
    """
    n_q, n = lo.shape
    months = np.arange(n_months, dtype=np.int32)[:, None]
    prefix = np.zeros((n + 1, n_q * n_months), dtype=dtype)
    for q in range(n_q):
        # month-major so that the running sum runs along contiguous memory
        qualifies = (months >= lo[q][None, :]) & (months < hi[q][None, :])
        running = np.cumsum(qualifies, axis=1, dtype=dtype)
        prefix[1:, q * n_months : (q + 1) * n_months] = running.T
    return prefix


def _prefix_dtype(x: np.ndarray, y: np.ndarray, radius: float) -> type:
    """uint16 when no point can have 2¹⁶ or more points within the radius, else int32."""
    if len(x) < 2**16 or _neighbour_bound(x, y, radius) < 2**16:
        return np.uint16
    return np.int32


def _neighbour_bound(x: np.ndarray, y: np.ndarray, radius: float) -> int:
    """An upper bound on the number of points within ``radius`` of any point (itself included):
    the largest population of a 3 × 3 block of square cells of side ``radius``."""
    side = radius if radius > 0 else 1.0
    cx = np.floor((x - x.min()) / side)
    cy = np.floor((y - y.min()) / side)
    ny = cy.max() + 3.0
    if (cx.max() + 3.0) * ny >= 2.0**62:
        return len(x)
    key = (cx.astype(np.int64) + 1) * int(ny) + (cy.astype(np.int64) + 1)
    cells, count = np.unique(key, return_counts=True)
    block = np.zeros(len(cells), dtype=np.int64)
    for step in (-int(ny) - 1, -int(ny), -int(ny) + 1, -1, 0, 1, int(ny) - 1, int(ny), int(ny) + 1):
        pos = np.minimum(np.searchsorted(cells, cells + step), len(cells) - 1)
        block += np.where(cells[pos] == cells + step, count[pos], 0)
    return int(block.max())


def _count_chunk(
    index: _StripIndex,
    prefix: np.ndarray,
    lo: np.ndarray,
    hi: np.ndarray,
    n_months: int,
    c0: int,
    c1: int,
) -> np.ndarray:
    """Counts for points c0..c1 (sorted order), shape ``(c1 − c0, n_q · n_months)``."""
    nc = c1 - c0
    a, b, c, e = index.runs(c0, c1)

    # wholly-inside runs: difference of prefix rows, summed over the strips (in the prefix's
    # dtype; with uint16 the sum wraps, but the true sum is below 2¹⁶ so it comes out right)
    inside = np.zeros((nc, prefix.shape[1]), dtype=prefix.dtype)
    row = np.empty_like(inside)
    for k in range(len(index.offsets)):
        inside += np.take(prefix, c[k], axis=0, out=row, mode="clip")
        inside -= np.take(prefix, b[k], axis=0, out=row, mode="clip")
    counts = inside.astype(np.int32)
    # Each point met itself exactly once: in its own strip's inside run, or else in that
    # strip's rim, where its distance 0 passes the test. Take it out.
    counts -= (prefix[c0 + 1 : c1 + 1] - prefix[c0:c1]).astype(np.int32)

    # the rim: every candidate tested with the exact squared distance, in batches of ranges
    start = np.concatenate([a.ravel(), c.ravel()])
    length = np.concatenate([(b - a).ravel(), (e - c).ravel()])
    owner = np.tile(np.arange(nc, dtype=np.int64), 2 * a.shape[0])
    used = length > 0
    start, length, owner = start[used], length[used], owner[used]
    if start.size == 0:
        return counts
    size = nc * (n_months + 1)
    diff = np.zeros((lo.shape[0], size), dtype=np.int64)
    for i, j in _rim_pairs(index, start, length, owner, c0):
        base = i * (n_months + 1)
        for q in range(lo.shape[0]):
            diff[q] += np.bincount(base + lo[q][j], minlength=size)
            diff[q] -= np.bincount(base + hi[q][j], minlength=size)
    for q in range(lo.shape[0]):
        per_month = np.cumsum(diff[q].reshape(nc, n_months + 1)[:, :n_months], axis=1)
        counts[:, q * n_months : (q + 1) * n_months] += per_month.astype(np.int32)
    return counts


def _rim_pairs(
    index: _StripIndex, start: np.ndarray, length: np.ndarray, owner: np.ndarray, c0: int
) -> Iterator[tuple[np.ndarray, np.ndarray]]:
    """Pairs (point offset in chunk, sorted position) of rim candidates within the radius.

    Candidate ranges are expanded a batch at a time, so that clustered premises (a block of
    flats just at the radius from another) cannot blow up the working memory.
    """
    # a batch: the ranges that start within one window of _RIM_BATCH candidates
    group = (np.cumsum(length) - length) // _RIM_BATCH
    bounds = [0, *(np.flatnonzero(np.diff(group)) + 1).tolist(), len(length)]
    for k0, k1 in itertools.pairwise(bounds):
        s, n, o = start[k0:k1], length[k0:k1], owner[k0:k1]
        total = int(n.sum())
        j = np.arange(total, dtype=np.int64)
        j -= np.repeat(np.cumsum(n) - n - s, n)
        dx = index.x[j]
        dx -= np.repeat(index.x[c0 + o], n)
        dy = index.y[j]
        dy -= np.repeat(index.y[c0 + o], n)
        dx *= dx
        dy *= dy
        dx += dy
        keep = dx <= index.r2
        if keep.any():
            yield np.repeat(o, n)[keep], j[keep]
