"""Metrics, fits, alignment and path distances of the SEA comparison (DESIGN section 3).

Arrays are (samples, reactions) unless said otherwise; rates are mol m-3 s-1, the disequilibrium
x = A/(RT) is dimensionless, mobilities are mol m-3 s-1.
"""

from __future__ import annotations

import numpy as np

def progress_grid(n: int, start: float, end: float) -> np.ndarray:
    """Shared progress grid, 1: Chebyshev-spaced between ``start`` and ``end`` (dense at both ends)."""
    s = 0.5 * (1.0 - np.cos(np.pi * np.arange(n) / (n - 1)))
    grid = start + (end - start) * s
    grid[0], grid[-1] = start, end
    return grid


def fisher_rao_angle(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Fisher-Rao angle 2 arccos(sum_k sqrt(x_k y_k)) between mole-fraction vectors, rad.

    Computed as 4 arcsin(|sqrt x - sqrt y| / 2), the same angle without the loss of precision of
    arccos near 1 (Amari and Nagaoka, Methods of Information Geometry, 2000, sec. 2.5).
    Negative round-off entries are clipped to zero; rows are renormalised.
    """
    x = np.clip(np.asarray(x, float), 0.0, None)
    y = np.clip(np.asarray(y, float), 0.0, None)
    a = np.sqrt(x / x.sum(axis=-1, keepdims=True))
    b = np.sqrt(y / y.sum(axis=-1, keepdims=True))
    chord = np.linalg.norm(a - b, axis=-1)
    return 4.0 * np.arcsin(np.clip(chord / 2.0, 0.0, 1.0))


def log_mean_mobility(forward: np.ndarray, reverse: np.ndarray, disequilibrium: np.ndarray) -> np.ndarray:
    """Lambda_j = (r+ - r-)/(ln r+ - ln r-) with the smaller one-way rate taken from thermodynamics.

    The larger one-way rate rho = max(r+, r-) (mol m-3 s-1) is kept and the other is rho e^-|x|,
    so Lambda = rho (1 - e^-|x|) / |x| and Lambda x equals the mass-action net rate also where a
    trace species is absent and one of Cantera's one-way rates is exactly zero (Mielke 2011).
    """
    rho = np.maximum(forward, reverse)
    u = np.abs(disequilibrium)
    small = u < 1e-8
    phi = np.where(small, 1.0 - u / 2.0 + u * u / 6.0, -np.expm1(-u) / np.where(small, 1.0, u))
    return rho * phi


def alignment(x: np.ndarray, q: np.ndarray, mobility: np.ndarray) -> np.ndarray:
    """cos theta_G = x.q / (sqrt(q.G.q) sqrt(x.M.x)) for diagonal M = G^-1, 1 (in [-1, 1]).

    x : (..., nr) disequilibrium, 1; q : (..., nr) net rates, mol m-3 s-1; mobility : (..., nr).
    A reaction with zero mobility but a nonzero rate has infinite cost: cos theta = 0 there.
    NaN where there is neither rate nor affinity.
    """
    m = np.broadcast_to(mobility, np.broadcast(x, q).shape)
    pos = m > 0
    cost = np.where(pos, q * q / np.where(pos, m, 1.0), np.where(q != 0, np.inf, 0.0)).sum(axis=-1)
    drive = (m * x * x).sum(axis=-1)
    num = (x * q).sum(axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / (np.sqrt(cost) * np.sqrt(drive))
    out = np.where(np.isinf(cost) & np.isfinite(num), 0.0, out)
    return np.clip(out, -1.0, 1.0)


def path_weights(kind: str, time: np.ndarray, potential: np.ndarray, progress: np.ndarray) -> np.ndarray:
    """Per-sample trapezoid weights of the fits (DESIGN section 3).

    ``entropy``: entropy produced around each sample, J/K (increments of the potential);
    ``time``: s; ``progress``: 1. Negative increments (round-off near the end) count as zero.
    """
    coordinate = {"entropy": potential, "time": time, "progress": progress}[kind]
    inc = np.clip(np.diff(coordinate), 0.0, None)
    w = np.zeros(coordinate.size)
    w[:-1] += 0.5 * inc
    w[1:] += 0.5 * inc
    return w


def fit_scalar(x: np.ndarray, q: np.ndarray, w: np.ndarray, valid: np.ndarray) -> float:
    """m = sum_ij w_i x_ij q_ij / sum_ij w_i x_ij^2 (weighted least squares of q on m x), mol m-3 s-1."""
    ww = w[:, None] * valid
    den = float((ww * x * x).sum())
    return float((ww * x * q).sum()) / den if den > 0 else float("nan")


def fit_diagonal(x: np.ndarray, q: np.ndarray, w: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """m_j = sum_i w_i x_ij q_ij / sum_i w_i x_ij^2, mol m-3 s-1 (>= 0 where x_j q_j >= 0).

    NaN for a reaction with no weighted affinity on the path.
    """
    ww = w[:, None] * valid
    den = (ww * x * x).sum(axis=0)
    num = (ww * x * q).sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)


def fit_arrhenius(x, q, w, valid, temperature, reference_temperature):
    """Per-reaction fit of m_j(T) = m_ref,j exp(-b_j (1/T - 1/T_ref)) to q_j ~ m_j(T) x_j.

    For fixed b_j the best m_ref,j is closed-form; b_j (K) maximises the explained weighted sum of
    squares, found by a coarse scan and golden-section refinement within |b| (1/T_min - 1/T_max) <= 40.
    Returns (m_ref mol m-3 s-1, b K). With no temperature span (isothermal) b = 0.

    Cost: the sums over the path take the weighted products w x q and w x^2 once; a scan point
    (one b for all reactions) needs one exponential per sample, and each golden-section iteration
    evaluates one new point per reaction (the other is the last iteration's, the golden ratio's
    property). On a 4 200-sample gri30 path: 1.3 s -> 0.3 s.
    """
    rows = w > 1e-12 * w.max()  # rows without weight change nothing
    x, q, w, valid, temperature = x[rows], q[rows], w[rows], valid[rows], temperature[rows]
    ww = w[:, None] * valid
    u = 1.0 / temperature - 1.0 / reference_temperature  # 1/K
    span = float(u.max() - u.min()) if u.size else 0.0
    nr = x.shape[1]
    if span < 1e-9:
        m = fit_diagonal(x, q, w, valid)
        return m, np.zeros(nr)
    wxq = ww * x * q  # (samples, reactions)
    wxx = ww * x * x

    def from_sums(num, den):  # explained sum of squares per reaction, and m_ref
        with np.errstate(invalid="ignore", divide="ignore"):
            m = np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)
            s = np.where(den > 0, num * num / np.where(den > 0, den, 1.0), -np.inf)
        return s, m

    bmax = 40.0 / span
    # |u b| stays below 700 (no overflow of exp) unless the reference temperature lies far outside
    # the path's: the clip is then needed, and otherwise saved (a sixth of each evaluation)
    clip = float(np.abs(u).max()) * bmax > 700.0

    def score(b):  # b: (reactions,)
        arg = np.multiply.outer(-u, b)
        g = np.exp(np.clip(arg, -700.0, 700.0, out=arg) if clip else arg)
        return from_sums(np.einsum("ij,ij->j", wxq, g), np.einsum("ij,ij->j", wxx, g * g))

    def score_all(b):  # one b for every reaction
        g = np.exp(np.clip(-u * b, -700.0, 700.0))
        return from_sums(g @ wxq, (g * g) @ wxx)

    scan = np.linspace(-bmax, bmax, 17)
    scores = np.array([score_all(b)[0] for b in scan])  # (17, nr)
    best = np.argmax(scores, axis=0)
    lo = scan[np.clip(best - 1, 0, scan.size - 1)]
    hi = scan[np.clip(best + 1, 0, scan.size - 1)]
    golden = 0.5 * (np.sqrt(5.0) - 1.0)
    c = hi - golden * (hi - lo)
    d = lo + golden * (hi - lo)
    sc, sd = score(c)[0], score(d)[0]
    for _ in range(24):  # interval shrinks to 0.618^24 ~ 1e-5 of a scan cell
        left = sc > sd  # maximum in [lo, d]: the new upper point is the old c
        hi = np.where(left, d, hi)
        lo = np.where(left, lo, c)
        new = np.where(left, hi - golden * (hi - lo), lo + golden * (hi - lo))
        s_new = score(new)[0]
        c, d, sc, sd = (np.where(left, new, d), np.where(left, c, new),
                        np.where(left, s_new, sd), np.where(left, sc, s_new))
    b = 0.5 * (lo + hi)
    s_b, m = score(b)
    s_scan = scores[best, np.arange(nr)]
    keep = s_scan > s_b  # keep the scan point if refinement did worse
    if keep.any():
        b = np.where(keep, scan[best], b)
        m = score(b)[1]
    return m, b


def fit_quality(q: np.ndarray, predicted: np.ndarray, w: np.ndarray, valid: np.ndarray) -> float:
    """Weighted coefficient of determination 1 - sum w |q - M x|^2 / sum w |q|^2, 1 (<= 1)."""
    ww = w[:, None] * valid
    total = float((ww * q * q).sum())
    if not total > 0:
        return float("nan")
    resid = np.where(valid, q - predicted, 0.0)
    return 1.0 - float((ww * resid * resid).sum()) / total
