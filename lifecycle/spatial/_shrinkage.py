"""Empirical Bayes shrinkage of area rates (gamma–Poisson)."""

from __future__ import annotations

import numpy as np


def gamma_poisson_rates(events: np.ndarray, exposure: np.ndarray) -> np.ndarray:
    """Empirical Bayes rates of areas, shrunk toward the overall rate.

    Model: the count of events ``y_i`` in area ``i`` with exposure ``n_i`` (customer-months) is
    Poisson with mean ``n_i θ_i``, and the area rates ``θ_i`` are drawn from a gamma
    distribution with mean ``m`` and variance ``A`` (Clayton & Kaldor 1987, "Empirical Bayes
    estimates of age-standardized relative risks for use in disease mapping", Biometrics 43,
    671–681). The prior is fitted by the method of moments of Marshall (1991), "Mapping disease
    and mortality rates using empirical Bayes estimators", Applied Statistics 40, 283–294:

        m  = Σ y_i / Σ n_i
        s² = Σ n_i (r_i − m)² / Σ n_i,         r_i = y_i / n_i
        A  = max(0, s² − m / n̄),               n̄ = Σ n_i / k  (k areas with n_i > 0)

    and each area's rate is the posterior mean

        θ̂_i = m + C_i (r_i − m),   C_i = A / (A + m / n_i),

    which equals ``(y_i + α) / (n_i + β)`` with ``α = m² / A``, ``β = m / A``. It lies between
    the raw rate and the overall rate; an area with no exposure gets ``m``. When every area
    looks alike (``A = 0``) every area gets ``m``.

    Parameters
    ----------
    events, exposure
        Arrays of the same shape, one entry per area: event counts and exposures (≥ 0).

    Returns
    -------
    numpy.ndarray
        float64 rates, one per area; all NaN when the total exposure is zero.
    """
    y = np.asarray(events, dtype=np.float64)
    n = np.asarray(exposure, dtype=np.float64)
    if y.shape != n.shape:
        raise ValueError(f"events has shape {y.shape} but exposure has shape {n.shape}")
    total = n.sum()
    if total <= 0:
        return np.full(y.shape, np.nan)
    m = y.sum() / total
    seen = n > 0
    raw = np.divide(y, n, out=np.full(y.shape, m), where=seen)
    s2 = (n[seen] * (raw[seen] - m) ** 2).sum() / total
    n_bar = total / seen.sum()
    a = max(0.0, s2 - m / n_bar)
    if a == 0.0 or m == 0.0:
        return np.full(y.shape, m)
    weight = np.zeros(y.shape)  # areas without exposure keep the overall rate
    weight[seen] = a / (a + m / n[seen])
    return m + weight * (raw - m)
