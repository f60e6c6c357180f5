"""Velocity distributions against Maxwell-Boltzmann (scipy.stats reference laws)."""

from __future__ import annotations

import numpy as np
from scipy import stats


def speed_ks(velocities: np.ndarray, temperature: float) -> dict[str, float]:
    """Kolmogorov-Smirnov test of speeds against the Maxwell distribution at kT/m = T.

    scipy.stats.maxwell with scale sqrt(kT/m) is the Maxwell-Boltzmann speed law.
    """
    v = np.linalg.norm(np.asarray(velocities), axis=1)
    res = stats.kstest(v, stats.maxwell(scale=np.sqrt(temperature)).cdf)
    return {"ks_statistic": float(res.statistic), "p_value": float(res.pvalue)}


def speed_chi2(edges: np.ndarray, counts: np.ndarray, temperature: float,
               min_expected: float = 5.0) -> dict[str, float]:
    """Chi-square of a speed histogram against Maxwell-Boltzmann at T.

    Counts from successive snapshots are correlated, so the p-value is indicative; bins
    with fewer than ``min_expected`` expected counts are merged into their neighbours.
    """
    counts = np.asarray(counts, dtype=float)
    total = counts.sum()
    if total == 0:
        return {"chi2": float("nan"), "dof": 0, "p_value": float("nan")}
    cdf = stats.maxwell(scale=np.sqrt(temperature)).cdf(edges)
    expected = total * np.diff(cdf) / (cdf[-1] - cdf[0])
    obs, exp = [], []
    o = e = 0.0
    for ci, ei in zip(counts, expected):
        o, e = o + ci, e + ei
        if e >= min_expected:
            obs.append(o)
            exp.append(e)
            o = e = 0.0
    if obs and e > 0:
        obs[-1] += o
        exp[-1] += e
    obs, exp = np.array(obs), np.array(exp)
    chi2 = float(((obs - exp) ** 2 / exp).sum())
    dof = max(1, len(obs) - 1)
    return {"chi2": chi2, "dof": dof, "p_value": float(stats.chi2.sf(chi2, dof))}
