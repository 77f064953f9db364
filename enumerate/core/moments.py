"""Moments of a game-length distribution and its distance to the normal law.

Exact moments (from a {length: Fraction} distribution):
    mean       E[L]
    variance   E[(L - mean)**2]
    mu3, mu4   third and fourth central moments
    skewness   mu3 / variance**1.5  (irrational in general: its square skewness_sq =
               mu3**2 / variance**3 is kept exactly, the value itself as a float)
    excess_kurtosis  mu4 / variance**2 - 3 (exact rational)

Gaussian diagnostics (floats, from {length: probability}):
    kolmogorov  sup over x of |F(x) - Phi((x - mean) / sd)|, F the distribution function of
                L; for a lattice law the supremum is attained at a support point, from the
                left or the right, so both F(L-) and F(L) are compared.
    total_variation  (1/2) sum over all integers k of |P(L = k) - q(k)|, q(k) the normal mass
                of [k - 1/2, k + 1/2) (the continuity-corrected, discretised normal law with
                the same mean and variance; a lattice law is at distance 1 from any continuous
                law, so the discretised one is the meaningful comparison).
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
from scipy import stats
from zeckenum.core.text import frac_str


def exact_moments(dist: dict[int, Fraction]) -> dict:
    """mean, variance, mu3, mu4, excess_kurtosis (Fractions), skewness_sq (Fraction or None
    when the variance is 0) and skewness (float) of a length distribution."""
    mean = sum((Fraction(k) * p for k, p in dist.items()), Fraction(0))
    c = {j: Fraction(0) for j in (2, 3, 4)}
    for k, p in dist.items():
        d = k - mean
        d2 = d * d
        c[2] += p * d2
        c[3] += p * d2 * d
        c[4] += p * d2 * d2
    var, mu3, mu4 = c[2], c[3], c[4]
    out = {"mean": mean, "variance": var, "mu3": mu3, "mu4": mu4}
    if var > 0:
        out["skewness_sq"] = mu3 * mu3 / (var**3)
        out["skewness"] = math.copysign(math.sqrt(float(out["skewness_sq"])), float(mu3))
        out["excess_kurtosis"] = mu4 / (var * var) - 3
    else:
        out["skewness_sq"] = None
        out["skewness"] = float("nan")
        out["excess_kurtosis"] = None
    return out


def moments_to_dict(m: dict) -> dict:
    """JSON form of `exact_moments`: rationals as "num/den", with decimal companions."""

    def fs(x):
        return None if x is None else frac_str(x)

    out = {}
    names = {"mean": "mean_length", "variance": "variance", "mu3": "central_moment_3",
             "mu4": "central_moment_4", "excess_kurtosis": "excess_kurtosis",
             "skewness_sq": "skewness_squared"}
    for key, name in names.items():
        if key in m:
            out[name] = fs(m[key])
            out[name + "_decimal"] = None if m[key] is None else float(m[key])
    if "skewness" in m:
        out["skewness_decimal"] = m["skewness"]
    return out


def float_moments(lengths: np.ndarray, probs: np.ndarray) -> dict:
    """mean, variance, skewness, excess_kurtosis (floats) of a distribution on `lengths`."""
    p = probs / probs.sum()
    mean = float((lengths * p).sum())
    d = lengths - mean
    var = float((d * d * p).sum())
    mu3 = float((d**3 * p).sum())
    mu4 = float((d**4 * p).sum())
    skew = mu3 / var**1.5 if var > 0 else float("nan")
    kurt = mu4 / var**2 - 3 if var > 0 else float("nan")
    return {"mean": mean, "variance": var, "skewness": skew, "excess_kurtosis": kurt}


def gaussian_diagnostics(dist: dict[int, float]) -> dict:
    """Kolmogorov and total-variation distances of a length law to the normal law with the
    same mean and variance (see the module docstring), with skewness and excess kurtosis."""
    ks = np.array(sorted(dist), dtype=np.float64)
    ps = np.array([dist[int(k)] for k in ks], dtype=np.float64)
    m = float_moments(ks, ps)
    sd = math.sqrt(m["variance"]) if m["variance"] > 0 else 0.0
    if sd == 0.0:
        return {**m, "kolmogorov": float("nan"), "total_variation": float("nan")}
    cdf_right = np.cumsum(ps)
    cdf_left = cdf_right - ps
    phi = stats.norm.cdf((ks - m["mean"]) / sd)
    kol = float(max(np.abs(cdf_right - phi).max(), np.abs(cdf_left - phi).max()))
    lo, hi = int(ks[0]), int(ks[-1])
    grid = np.arange(lo, hi + 1, dtype=np.float64)
    q = stats.norm.cdf((grid + 0.5 - m["mean"]) / sd) - stats.norm.cdf(
        (grid - 0.5 - m["mean"]) / sd
    )
    pk = np.zeros(grid.size)
    pk[(ks - lo).astype(np.int64)] = ps
    outside = 1.0 - float(q.sum())
    tv = 0.5 * (float(np.abs(pk - q).sum()) + max(outside, 0.0))
    return {**m, "kolmogorov": kol, "total_variation": tv}
