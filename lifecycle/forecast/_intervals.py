"""Prediction intervals of current customers' uptakes plus joiners', with model uncertainty.

For one group and month the count is X = C + J: C Poisson-binomial over the current customers
(`grid_cdf`), J the joiners' uptakes, negative binomial with their mean m and variance v
(moments matched: r = m²/(v − m), Poisson when v ≤ m), independent of C, so P(X = k) is the
convolution of the two mass functions.

What is not known about the models enters as B draws of the expected count: draw b moves the
mean by δ_b (e.g. a drawn level of the uptake hazard, drawn joiner-count coefficients). Each
draw's count is taken as X + δ_b, with the mass at each whole k spread evenly over
[k − ½, k + ½], and the interval is read from the equal-weight mixture

    F(k) = (1/B) Σ_b F_X(k + ½ − δ_b),

F_X linear between half-integers; with δ_b = 0 it is F_X itself.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special

_SPAN_SD = 12.0
_SPAN_ADD = 30.0
_TOL = 1e-12


def joiner_pmf(mean: float, var: float) -> np.ndarray:
    """P(J = k), k = 0..K, negative binomial with ``mean`` and ``var`` (Poisson if var ≤ mean);
    K reaches 12 standard deviations plus 30 past the mean."""
    if mean <= 0.0:
        return np.ones(1)
    top = math.ceil(mean + _SPAN_SD * math.sqrt(max(var, mean)) + _SPAN_ADD)
    ks = np.arange(top + 1)
    if var <= mean * (1.0 + 1e-9):
        log_pmf = ks * math.log(mean) - mean - special.gammaln(ks + 1.0)
    else:
        r = mean * mean / (var - mean)
        log_pmf = (
            special.gammaln(ks + r) - special.gammaln(r) - special.gammaln(ks + 1.0)
            + r * math.log(r / (r + mean)) + ks * math.log(mean / (r + mean))
        )  # fmt: skip
    pmf = np.exp(log_pmf)
    return pmf / pmf.sum()


def combined_quantiles(
    lo: int,
    cdf: np.ndarray,
    qs: np.ndarray,
    *,
    add_mean: np.ndarray | None = None,
    add_var: np.ndarray | None = None,
    shifts: np.ndarray | None = None,
) -> np.ndarray:
    """Quantiles ``(rows, len(qs))`` of C + J (+ δ) row by row (see the module docstring).

    Parameters
    ----------
    lo, cdf
        The current customers' distribution functions on a grid (`grid_cdf`): ``cdf[r, j]`` is
        P(C_r ≤ lo + j).
    qs
        Probabilities in (0, 1).
    add_mean, add_var
        ``(rows,)`` mean and variance of the joiners' count J_r (``None``: no joiners).
    shifts
        ``(rows, B)`` shifts δ of the expected count under B draws (``None``: no draws).
    """
    out = np.empty((cdf.shape[0], qs.size), dtype=np.int64)
    for r in range(cdf.shape[0]):
        pmf = np.diff(cdf[r], prepend=0.0)
        if add_mean is not None and add_mean[r] > 0.0:
            pmf = np.convolve(pmf, joiner_pmf(float(add_mean[r]), float(add_var[r])))
        total = np.cumsum(pmf)
        total /= total[-1]
        if shifts is None:
            reached = total[:, None] >= qs[None, :] - _TOL
            reached[-1] = True
            out[r] = lo + reached.argmax(axis=0)
            continue
        delta = shifts[r]
        ks = np.arange(
            math.floor(lo + min(0.0, delta.min())) - 1,
            math.ceil(lo + total.size + max(0.0, delta.max())) + 2,
        )
        # F_X on half-integers: F_X(lo + j + ½) = total[j]; linear in between
        knots = lo + np.arange(-1, total.size) + 0.5
        values = np.concatenate([[0.0], total])
        at = (ks[None, :] + 0.5 - delta[:, None]).ravel()
        mix = np.interp(at, knots, values, left=0.0, right=1.0).reshape(delta.size, -1)
        mix = mix.mean(axis=0)
        reached = mix[:, None] >= qs[None, :] - _TOL
        reached[-1] = True
        out[r] = np.maximum(ks[reached.argmax(axis=0)], 0)
    return out
