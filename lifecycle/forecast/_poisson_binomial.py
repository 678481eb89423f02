"""The Poisson-binomial distribution: the number of successes among independent Bernoulli trials
with unequal probabilities p_1..p_n (here: how many of a group's customers take a product up).

Two ways to its distribution function F(k) = P(X ≤ k):

- ``exact``: the probability mass function is the coefficient list of the generating function
  Π_i (1 − p_i + p_i·z). It is computed by the DFT-CF method of Hong (2013), "On computing the
  distribution function for the Poisson binomial distribution", Computational Statistics & Data
  Analysis 59, 41–51: the characteristic function φ(ω) = Π_i (1 − p_i + p_i·e^{iω}) on an
  N-point grid, inverted by one FFT. log φ is summed through power sums,
  log(1 + p·w) = Σ_r (−1)^{r+1} (p·w)^r / r with w = e^{iω} − 1, for p ≤ 1/4 (for p ≥ 3/4 the
  same series in 1 − p), so those trials cost O(n) whatever N; a p in (1/4, 3/4) needs its own
  log at every grid point. When many p lie there, the polynomial is multiplied out by
  convolution instead (blocks of 32 factors directly, then pairwise by FFT convolution). Both
  are exact up to floating-point rounding. Only counts within [μ − 12σ − 30, μ + 12σ + 30]
  are kept (the N-point grid of DFT-CF spans them): by Bennett's inequality the mass beyond
  either end is below 1e-31 for any p (σ²·h(t/σ²) with h(u) = (1+u)·log(1+u) − u exceeds 72
  at t = 12σ + 30).
- ``rna``: the refined normal approximation (Volkova 1996, as given by Hong 2013):

  .. math::

      F(k) \\approx \\Phi(x) + \\frac{\\gamma (1 - x^2) \\varphi(x)}{6 \\sigma^3},
      \\quad x = \\frac{k + 0.5 - \\mu}{\\sigma},

  with μ = Σ p_i, σ² = Σ p_i(1 − p_i), γ = Σ p_i(1 − p_i)(1 − 2p_i).

``auto`` uses ``exact`` for groups of at most ``exact_max`` trials and whenever σ² ≤ 400 (a
short support, so exact is cheap, and where a normal-based form is least accurate); ``rna``
otherwise.

Quantiles are the smallest k with F(k) ≥ q, so an equal-tailed interval [Q(α/2), Q(1 − α/2)]
holds the outcome with probability at least 1 − α.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence

import numpy as np
from scipy import signal, stats

from ..errors import UsageError

EXACT_MAX = 20_000
"""``auto`` computes the distribution exactly for groups up to this many trials."""
RNA_MIN_VARIANCE = 400.0
"""``auto`` uses the approximation only where σ² exceeds this (and the group is large)."""
METHODS = ("auto", "exact", "rna")
_BLOCK = 32
_SPAN_SD = 12.0
_SPAN_ADD = 30.0
_CELLS = 4_000_000  # trials x rows handled at once by the exact method
_TOL = 1e-12


def poisson_binomial_pmf(p: Sequence[float] | np.ndarray) -> np.ndarray:
    """Exact probability mass function P(X = k), k = 0..n, of a sum of Bernoulli(p_i).

    The coefficients of Π_i (1 − p_i + p_i·z), multiplied out by convolution (see the module
    docstring); length n + 1.
    """
    probs = _probabilities(p)[None, :]
    return _tree_pmf(probs, probs.shape[1])[0]


def poisson_binomial_cdf(
    k: int | Sequence[int] | np.ndarray,
    p: Sequence[float] | np.ndarray,
    *,
    method: str = "auto",
    exact_max: int = EXACT_MAX,
) -> np.ndarray:
    """F(k) = P(X ≤ k) for a sum of independent Bernoulli(p_i), by ``method``."""
    probs = _probabilities(p)[None, :]
    lo, cdf = grid_cdf(probs, _method(method, probs, exact_max))
    ks = np.asarray(k, dtype=np.int64)
    pos = np.clip(ks - lo, 0, cdf.shape[1] - 1)
    out = np.where(ks < lo, 0.0, np.where(ks >= lo + cdf.shape[1], 1.0, cdf[0, pos]))
    return out if out.ndim else out[()]


def poisson_binomial_quantiles(
    p: Sequence[float] | np.ndarray | Sequence[np.ndarray],
    q: float | Sequence[float],
    *,
    method: str = "auto",
    exact_max: int = EXACT_MAX,
) -> np.ndarray:
    """Quantiles Q(q) = min{k : F(k) ≥ q} of Poisson-binomial distributions.

    Parameters
    ----------
    p
        Success probabilities: ``(n,)`` for one distribution or ``(rows, n)`` for one per row.
    q
        Probabilities in (0, 1).
    method, exact_max
        See the module docstring.

    Returns
    -------
    numpy.ndarray
        int64 ``(len(q),)`` for one distribution, ``(rows, len(q))`` for several.
    """
    probs = np.asarray(p, dtype=np.float64)
    single = probs.ndim == 1
    rows = _probabilities(probs[None, :] if single else probs)
    out = mixture_quantiles([rows], q, method=method, exact_max=exact_max)
    return out[0] if single else out


def mixture_quantiles(
    components: Iterable[np.ndarray],
    q: float | Sequence[float],
    *,
    method: str = "auto",
    exact_max: int = EXACT_MAX,
) -> np.ndarray:
    """Quantiles of an equal-weight mixture of Poisson-binomial distributions, row by row.

    Row r's distribution function is F_r(k) = (1/B) Σ_b F_{b,r}(k), where F_{b,r} is the
    Poisson-binomial distribution of ``components[b][r]`` (e.g. one component per bootstrap
    refit of a model). With one component this is the plain Poisson-binomial.

    Parameters
    ----------
    components
        B arrays ``(rows, n_b)`` of success probabilities; any iterable (a generator is
        consumed one component at a time, so only one is in memory).
    q
        Probabilities in (0, 1).

    Returns
    -------
    numpy.ndarray
        int64 ``(rows, len(q))``.
    """
    qs = np.atleast_1d(np.asarray(q, dtype=np.float64))
    if not ((qs > 0.0) & (qs < 1.0)).all():
        raise UsageError(f"quantile levels were {qs.tolist()} but must lie strictly in (0, 1)")
    grids = []
    for probs in components:
        rows = _probabilities(probs)
        if rows.ndim != 2:
            raise UsageError(f"each component must be (rows, n); got shape {rows.shape}")
        grids.append(grid_cdf(rows, _method(method, rows, exact_max)))
    if not grids:
        raise UsageError("no distributions were given")
    n_rows = grids[0][1].shape[0]
    if any(cdf.shape[0] != n_rows for _, cdf in grids):
        raise UsageError("every mixture component needs the same number of rows")
    lo = min(g[0] for g in grids)
    hi = max(g[0] + g[1].shape[1] for g in grids)
    total = np.zeros((n_rows, hi - lo))
    for start, cdf in grids:
        a = start - lo
        total[:, a : a + cdf.shape[1]] += cdf
        total[:, a + cdf.shape[1] :] += 1.0  # beyond a component's grid its F is 1
    total /= len(grids)
    reached = total[:, :, None] >= qs[None, None, :] - _TOL
    reached[:, -1, :] = True
    return (lo + reached.argmax(axis=1)).astype(np.int64)


def grid_cdf(probs: np.ndarray, method: str) -> tuple[int, np.ndarray]:
    """Distribution functions of each row's sum on a grid of counts.

    Returns ``(lo, cdf)`` with ``cdf[r, j] = F_r(lo + j)``; below ``lo`` every F is 0 and
    beyond the grid every F is 1 (both to within 1e-31).
    """
    mu = probs.sum(axis=1)
    sd = np.sqrt((probs * (1.0 - probs)).sum(axis=1))
    n = probs.shape[1]
    top = int(min(n, math.ceil(float(np.max(mu + _SPAN_SD * sd)) + _SPAN_ADD)))
    bottom = int(max(0, math.floor(float(np.min(mu - _SPAN_SD * sd)) - _SPAN_ADD)))
    ks = np.arange(bottom, top + 1)
    if method == "rna":
        return bottom, _rna_cdf(probs, mu, sd, ks)
    middle = int(((probs > 0.25) & (probs < 0.75)).sum())
    if middle * (top - bottom + 1) <= _CELLS:  # DFT-CF is cheap: few logs to take directly
        pmf = np.concatenate([_cf_pmf(row, bottom, top)[None, :] for row in probs], axis=0)
    else:
        pmf = _tree_pmf(probs, top)[:, bottom:]
    cdf = np.cumsum(pmf, axis=1)
    cdf /= cdf[:, -1:]
    return bottom, cdf


def _rna_cdf(probs: np.ndarray, mu: np.ndarray, sd: np.ndarray, ks: np.ndarray) -> np.ndarray:
    skew = (probs * (1.0 - probs) * (1.0 - 2.0 * probs)).sum(axis=1)
    safe = np.where(sd > 0.0, sd, 1.0)
    x = (ks[None, :] + 0.5 - mu[:, None]) / safe[:, None]
    g = stats.norm.cdf(x) + (skew / (6.0 * safe**3))[:, None] * (1.0 - x**2) * stats.norm.pdf(x)
    cdf = np.maximum.accumulate(np.clip(g, 0.0, 1.0), axis=1)
    degenerate = sd <= 0.0
    if degenerate.any():  # every p is 0 or 1: X = μ for sure
        cdf[degenerate] = (ks[None, :] >= np.round(mu[degenerate])[:, None]).astype(float)
    if ks[-1] == probs.shape[1]:
        cdf[:, -1] = 1.0
    return cdf


def _tree_pmf(probs: np.ndarray, top: int) -> np.ndarray:
    """P(X_r = k), k = 0..top, each row r a separate sum (mass above top dropped), by
    convolution: blocks of 32 factors multiplied out directly, then pairwise by FFT."""
    rows, n = probs.shape
    step = max(1, _CELLS // max(n, 1))
    return np.concatenate(
        [_tree_block(probs[a : a + step], top) for a in range(0, rows, step)], axis=0
    )


def _tree_block(probs: np.ndarray, top: int) -> np.ndarray:
    rows, n = probs.shape
    blocks = max(1, -(-n // _BLOCK))
    padded = np.zeros((rows, blocks * _BLOCK))
    padded[:, :n] = probs
    padded = padded.reshape(rows, blocks, _BLOCK)
    poly = np.zeros((rows, blocks, min(_BLOCK, top) + 1))
    poly[..., 0] = 1.0
    for j in range(_BLOCK):
        pj = padded[..., j : j + 1]
        width = min(j + 1, top) + 1  # coefficients that can be non-zero after j + 1 factors
        moved = poly[..., : width - 1] * pj
        poly[..., :width] *= 1.0 - pj
        poly[..., 1:width] += moved
    while poly.shape[1] > 1:
        if poly.shape[1] % 2:
            unit = np.zeros((rows, 1, poly.shape[2]))
            unit[..., 0] = 1.0
            poly = np.concatenate([poly, unit], axis=1)
        length = min(2 * (poly.shape[2] - 1), top) + 1
        poly = signal.fftconvolve(poly[:, 0::2], poly[:, 1::2], axes=-1)[..., :length]
        np.maximum(poly, 0.0, out=poly)
    out = np.zeros((rows, top + 1))
    out[:, : poly.shape[2]] = poly[:, 0, : top + 1]
    return out


def _cf_pmf(p: np.ndarray, lo: int, hi: int) -> np.ndarray:
    """P(X = k), k = lo..hi, by DFT-CF (Hong 2013) with log φ from power sums.

    With N = hi − lo + 1 points ω_l = 2πl/N, ψ_l = φ(ω_l)·e^{−iω_l·lo} and
    P(X = lo + j) = (1/N) Σ_l ψ_l e^{−iω_l j} (one FFT); counts outside [lo, hi] would fold
    onto the grid, but their mass is negligible (see the module docstring).
    """
    size = hi - lo + 1
    ell = np.arange(size)
    omega = 2.0 * np.pi * ell / size
    w = np.expm1(1j * omega)  # e^{iω} − 1
    small = p[(p > 0.0) & (p <= 0.25)]
    large = 1.0 - p[p >= 0.75]  # Bernoulli(p) = 1 − Bernoulli(1 − p)
    middle = p[(p > 0.25) & (p < 0.75)]
    log_phi = _log_series(small, w) + _log_series(large, np.conj(w))
    for chunk in np.array_split(middle, max(1, middle.size * size // _CELLS + 1)):
        if chunk.size:
            log_phi += np.log1p(chunk[:, None] * w[None, :]).sum(axis=0)
    # each factor of a p >= 3/4 carries z = e^{iω}; with the shift by lo the phase is
    # ω·(count − lo), reduced modulo N in integers to keep it exact
    turns = (ell * ((large.size - lo) % size)) % size
    log_phi += 2j * np.pi * turns / size
    pmf = np.fft.fft(np.exp(log_phi)).real / size
    np.maximum(pmf, 0.0, out=pmf)
    return pmf / pmf.sum()


def _log_series(p: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Σ_i log(1 + p_i·w) = Σ_r (−1)^{r+1} S_r w^r / r with S_r = Σ_i p_i^r, for p_i ≤ 1/4
    (|p·w| ≤ 1/2); terms are added until the rest is below 1e-15."""
    if p.size == 0:
        return np.zeros(w.shape, dtype=np.complex128)
    ratio = 2.0 * float(p.max())  # |p·w| <= ratio <= 1/2
    terms = (
        1 if ratio == 0.0 else math.ceil(math.log(1e-15 * (1.0 - ratio) / p.size) / math.log(ratio))
    )
    terms = max(1, terms)
    sums = np.empty(terms)
    power = p.copy()
    for r in range(terms):
        sums[r] = power.sum()
        power *= p
    coef = sums * (-1.0) ** np.arange(terms) / np.arange(1, terms + 1)
    total = np.zeros(w.shape, dtype=np.complex128)
    for c in coef[::-1]:  # Horner: w·(c_1 + w·(c_2 + ...))
        total = (total + c) * w
    return total


def _method(method: str, probs: np.ndarray, exact_max: int) -> str:
    if method not in METHODS:
        raise UsageError(f"method was {method!r} but is expected to be in {list(METHODS)}")
    if method != "auto":
        return method
    if probs.shape[1] <= exact_max:
        return "exact"
    variance = (probs * (1.0 - probs)).sum(axis=1)
    return "exact" if float(np.max(variance, initial=0.0)) <= RNA_MIN_VARIANCE else "rna"


def _probabilities(p: Sequence[float] | np.ndarray) -> np.ndarray:
    probs = np.asarray(p, dtype=np.float64)
    if probs.ndim not in (1, 2):
        raise UsageError(f"probabilities must be (n,) or (rows, n); got shape {probs.shape}")
    bad = ~np.isfinite(probs) | (probs < 0.0) | (probs > 1.0)
    if bad.any():
        raise UsageError(
            f"{int(bad.sum())} success probabilities are not in [0, 1], e.g. {probs[bad][0]!r}"
        )
    return probs
