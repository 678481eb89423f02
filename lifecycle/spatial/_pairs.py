"""Pairs of premises within a distance of each other, found once with a KD-tree."""

from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree


def neighbour_pairs(x: np.ndarray, y: np.ndarray, radius: float) -> np.ndarray:
    """All unordered pairs ``(i, j)``, ``i < j``, of points at most ``radius`` apart.

    The boundary is inclusive: two points exactly ``radius`` apart are neighbours (this is what
    `scipy.spatial.cKDTree.query_pairs` does). Coordinates must be in a projected CRS in metres.
    For counts per premise and month (the nearby-adoption features) use `nearby_counts`, which
    counts the same pairs without listing them: at town densities there are about 500 pairs
    per premise, too many to list for a million premises.

    Returns
    -------
    numpy.ndarray
        int64 array of shape ``(n_pairs, 2)``, sorted by ``i`` then ``j``.
    """
    points = np.column_stack([np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)])
    if len(points) < 2:
        return np.empty((0, 2), dtype=np.int64)
    pairs = cKDTree(points).query_pairs(float(radius), output_type="ndarray").astype(np.int64)
    order = np.lexsort((pairs[:, 1], pairs[:, 0]))
    return pairs[order]
