"""The spatial benchmark's own correctness (never its speed): the synthetic town has the density
it claims, and the buffer + join route counts exactly what `nearby_counts` counts."""

from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree

from lifecycle.bench._spatial import DENSITY_PER_KM2, RADIUS_M, run_spatial_bench, synthetic_town


def test_town_density():
    town = synthetic_town(40_000, 12, seed=3)
    x, y = town["x"], town["y"]
    inner = (
        (x > x.min() + RADIUS_M)
        & (x < x.max() - RADIUS_M)
        & (y > y.min() + RADIUS_M)
        & (y < y.max() - RADIUS_M)
    )
    counts = cKDTree(np.c_[x, y]).query_ball_point(
        np.c_[x, y][inner][:2000], RADIUS_M, return_length=True
    )
    # a uniform pattern holds π r² ρ premises within r of an interior point (itself included):
    # π · 0.4² km² · 2,000 / km² ≈ 1,005
    expected = np.pi * (RADIUS_M / 1000) ** 2 * DENSITY_PER_KM2
    assert abs(counts.mean() - expected) < 0.03 * expected
    # every customer is a customer in some month of the window, and uptakes follow starts
    assert (np.maximum(town["start"], 0) <= np.minimum(town["end"], 11)).all()
    held = town["uptake"] < 2**40
    assert (town["uptake"][held] >= town["start"][held]).all()
    assert (town["uptake"][held] <= town["end"][held]).all()


def test_buffer_join_route_counts_the_same():
    results = run_spatial_bench(
        customers=3_000, months=6, baseline_customers=1_500, baseline_months=2
    )
    assert [m.role for m in results] == ["ours", "ours", "plain"]
    assert "counts identical" in results[-1].note
    compared = int(results[-1].note.split(" on ")[-1].split(" ")[0].replace(",", ""))
    assert compared > 1_000
