"""From monthly cause-specific hazards to survival and cumulative incidence (one shared place)."""

from __future__ import annotations

from collections.abc import Sequence

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


_EPS = 1e-12  # a single cause's monthly probability is held below 1 − ε before −log(1 − h)


def valid_hazards(hazards: np.ndarray, n_terminal: int) -> np.ndarray:
    """Each month's cause-specific hazards made a valid set of probabilities (one shared rule).

    Every family, and the champion's mixture of families, passes its monthly hazards
    ``(..., T, K)`` through this function once (`HazardModel`); the first ``n_terminal`` causes
    are terminal, the rest uptakes. Three steps:

    1. Every value is clipped to [0, 1] (NaN becomes 0).
    2. Terminal causes whose sum exceeds 1 are split in continuous time. Each hazard is read
       as a constant cause-specific intensity over the month,
       ``λ_k = −log(1 − min(h_k, 1 − ε))`` (ε = 10⁻¹²), with total ``Λ = Σ_k λ_k``; the
       probability of leaving by cause k within the month when all causes act together is

           h_k = (λ_k / Λ) · (1 − e^{−Λ}),

       so that ``Σ_k h_k = 1 − e^{−Λ} < 1`` and the causes keep the order of their
       intensities. Months whose terminal hazards sum to at most 1 are left unchanged.
    3. Each uptake hazard is capped at ``1 − Σ_k h_k`` (the terminal hazards after step 2):
       within a month taking a product up and leaving share one probability, and the exits
       come first.

    Returns a new float64 array; the input is not changed.
    """
    h = np.nan_to_num(np.asarray(hazards, dtype=np.float64), nan=0.0, posinf=1.0, neginf=0.0)
    h = np.clip(h, 0.0, 1.0)
    k = n_terminal
    terminal = h[..., :k]
    total = terminal.sum(axis=-1)
    over = total > 1.0
    if over.any():
        lam = -np.log1p(-np.minimum(terminal[over], 1.0 - _EPS))
        big = lam.sum(axis=-1, keepdims=True)
        terminal[over] = lam / big * -np.expm1(-big)
        total = terminal.sum(axis=-1)
    if h.shape[-1] > k:
        room = np.clip(1.0 - total, 0.0, 1.0)[..., None]
        np.minimum(h[..., k:], room, out=h[..., k:])
    return h


def uptake_incidence(hazards: np.ndarray, terminal: Sequence[int], j: int) -> np.ndarray:
    """F_u(t), ``(..., T)``: the probability of taking product u (cause ``j``) up by month t
    before leaving.

    From `survival_and_incidence` with u competing with the terminal causes:
    ``F_u(t) = Σ_{s ≤ t} S_u(s−1)·h_u(s)``, ``S_u(t) = Π_{s ≤ t} (1 − h_u(s) − Σ_k h_k(s))``.
    The terminal causes enter as one competing cause (any exit): F_u depends on them only
    through their sum. The hazards must be valid (`valid_hazards`).
    """
    exits = np.zeros(hazards.shape[:-1])
    for k in terminal:
        exits += hazards[..., k]
    _, incidence = survival_and_incidence(np.stack([hazards[..., j], exits], axis=-1))
    return incidence[..., 0]
