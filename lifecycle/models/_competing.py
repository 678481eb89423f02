"""From monthly cause-specific hazards to survival and cumulative incidence (one shared place)."""

from __future__ import annotations

import numpy as np


def survival_and_incidence(hazards: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Discrete-time Aalen–Johansen: survival and cause-specific cumulative incidence.

    For monthly hazards ``h_k(t)`` of competing causes k (the probability of leaving by cause
    k in month t, given present at its start),

        S(t)   = S(t−1) · (1 − Σ_k h_k(t)),            S(0) = 1
        F_k(t) = Σ_{s ≤ t} S(s−1) · h_k(s)

    so that ``S(t) + Σ_k F_k(t) = 1`` at every t. This is the Aalen–Johansen estimator of a
    competing-risks process on a discrete time grid (Aalen & Johansen 1978, Scand. J.
    Statistics 5, 141–150); fed nonparametric hazards ``d_k / n`` it is that estimator itself.

    Parameters
    ----------
    hazards
        Array ``(..., T, K)``: any leading shape (e.g. customers), T months, K causes. Each
        ``Σ_k h_k(t)`` must lie in [0, 1].

    Returns
    -------
    survival
        ``(..., T)``: S(1..T).
    incidence
        ``(..., T, K)``: F_k(1..T).
    """
    h = np.asarray(hazards, dtype=np.float64)
    if h.ndim < 2:
        raise ValueError(f"hazards must have shape (..., T, K); got shape {h.shape}")
    total = h.sum(axis=-1)
    if np.any(total < -1e-12) or np.any(total > 1 + 1e-9):
        raise ValueError("the summed hazard of a month must lie in [0, 1]")
    survival = np.cumprod(1.0 - np.clip(total, 0.0, 1.0), axis=-1)
    before = np.concatenate([np.ones((*h.shape[:-2], 1)), survival[..., :-1]], axis=-1)
    incidence = np.cumsum(before[..., None] * h, axis=-2)
    return survival, incidence
