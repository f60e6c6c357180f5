"""Error bars for correlated time series.

- Block averaging (Flyvbjerg & Petersen, J. Chem. Phys. 91, 461 (1989)) with the
  plateau found automatically by the test of Jonsson, Phys. Rev. E 98, 043304 (2018).
- Statistical inefficiency g = 1 + 2 Σ (1 - t/n) C(t) from the autocorrelation function,
  summed until C first drops below zero (the estimator of Chodera et al., J. Chem.
  Theory Comput. 3, 26 (2007)).
- End of equilibration by maximising the number of effectively uncorrelated samples
  (Chodera, J. Chem. Theory Comput. 12, 1799 (2016)).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

#: Below this many effectively independent samples an error bar is itself unreliable.
MIN_INDEPENDENT = 20
#: Blocking levels taken beyond the first one that passes the plateau test, and the
#: fewest blocks such a further level may leave.
PLATEAU_EXTRA_LEVELS = 2
PLATEAU_MIN_BLOCKS = 32


@dataclass(frozen=True)
class Estimate:
    """A mean with its standard error and the number of independent samples behind it."""

    mean: float
    stderr: float
    n_eff: float

    def as_json(self) -> dict[str, float]:
        return {"mean": _finite(self.mean), "stderr": _finite(self.stderr)}


def _finite(x: float):
    return float(x) if np.isfinite(x) else None


def blocking_curve(x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(block sizes, stderr estimates, their uncertainties) at every halving level.

    Flyvbjerg-Petersen: at each level the series is coarse-grained by averaging pairs;
    the naive stderr of the block means rises until blocks are longer than the
    correlation time, then stays on a plateau.
    """
    x = np.asarray(x, dtype=float)
    sizes, errs, err_errs = [], [], []
    size = 1
    while len(x) >= 4:
        n = len(x)
        var = x.var(ddof=1) if n > 1 else 0.0
        se = np.sqrt(var / n)
        sizes.append(size)
        errs.append(se)
        err_errs.append(se / np.sqrt(2.0 * (n - 1)))
        m = n // 2
        x = 0.5 * (x[0:2 * m:2] + x[1:2 * m:2])
        size *= 2
    return np.array(sizes), np.array(errs), np.array(err_errs)


def block_stderr(x: np.ndarray) -> tuple[float, int]:
    """Standard error of the mean on the blocking plateau, and the block size chosen.

    The plateau is found by the automated test of Jonsson, Phys. Rev. E 98, 043304
    (2018): at blocking level k the statistic M_k = Σ_{i≥k} n_i (γ_i/σ²_i)², with γ_i
    the lag-one autocovariance of the level-i block means, is chi-square with (levels
    left) degrees of freedom once the blocks are uncorrelated; the first level where
    M_k falls below the 99% quantile is the plateau. If no level passes (too short a
    series) the largest estimate with at least 8 blocks is returned, which errs on the
    side of a wider error bar.
    """
    x = np.asarray(x, dtype=float)
    if len(x) < 4:
        return float("nan"), 1
    mu = x.mean()
    ns, var, gamma = [], [], []
    while len(x) >= 2:
        n = len(x)
        d = x - mu
        ns.append(n)
        var.append(float(np.mean(d * d)))
        gamma.append(float(np.sum(d[:-1] * d[1:]) / n))
        m = n // 2
        x = 0.5 * (x[0:2 * m:2] + x[1:2 * m:2])
    ns, var, gamma = np.array(ns, float), np.array(var), np.array(gamma)
    with np.errstate(invalid="ignore", divide="ignore"):
        terms = np.where(var > 0, ns * (gamma / var) ** 2, 0.0)
    m_stat = np.cumsum(terms[::-1])[::-1]
    levels = len(ns)
    sizes = 2 ** np.arange(levels)
    for k in range(levels):
        if ns[k] < 8:
            break
        k_first = k
        if m_stat[k] < stats.chi2.ppf(0.99, levels - k):
            # The test accepts a level whose blocks still carry a residual correlation
            # of order τ/b (stderr biased low by ~5-10% on AR(1) series); two levels
            # further cut that bias fourfold while enough blocks remain for a steady
            # estimate.
            while k < k_first + PLATEAU_EXTRA_LEVELS and ns[k + 1] >= PLATEAU_MIN_BLOCKS:
                k += 1
            return float(np.sqrt(var[k] / (ns[k] - 1))), int(sizes[k])
    usable = [k for k in range(levels) if ns[k] >= 8]
    if not usable:  # fewer than 8 samples: only the naive estimate exists
        return float(np.sqrt(var[0] / (ns[0] - 1))), 1
    errs = np.sqrt(var[usable] / (ns[usable] - 1))
    k = usable[int(np.argmax(errs))]
    return float(errs[usable.index(k)]), int(sizes[k])


def statistical_inefficiency(x: np.ndarray) -> float:
    """g >= 1: how many consecutive samples make one independent sample."""
    x = np.asarray(x, dtype=float)
    n = len(x)
    if n < 3:
        return 1.0
    dx = x - x.mean()
    var = dx.var()
    if var == 0.0:
        return 1.0
    # Autocorrelation by FFT, zero-padded to avoid wrap-around.
    f = np.fft.rfft(dx, 2 * n)
    acf = np.fft.irfft(f * np.conj(f))[:n] / (var * np.arange(n, 0, -1))
    g = 1.0
    for t in range(1, n - 1):
        if acf[t] <= 0.0:
            break
        g += 2.0 * acf[t] * (1.0 - t / n)
    return max(1.0, g)


def detect_equilibration(x: np.ndarray, candidates: int = 50) -> tuple[int, float, float]:
    """(first production index t0, statistical inefficiency g, effective samples n_eff).

    Tries ``candidates`` start points over the first half of the series and keeps the
    one that maximises (n - t0) / g (Chodera 2016).
    """
    x = np.asarray(x, dtype=float)
    n = len(x)
    if n < 10:
        return 0, 1.0, float(n)
    best = (0, statistical_inefficiency(x), 0.0)
    best = (0, best[1], n / best[1])
    for t0 in np.unique(np.linspace(0, n // 2, candidates).astype(int))[1:]:
        g = statistical_inefficiency(x[t0:])
        neff = (n - t0) / g
        if neff > best[2]:
            best = (int(t0), g, neff)
    return best


def estimate(x: np.ndarray) -> Estimate:
    """Mean, standard error and effective sample count n_eff = var/stderr² of a series.

    The stderr is the larger of the blocking-plateau value and sqrt(var·g/n) from the
    statistical inefficiency g.
    """
    x = np.asarray(x, dtype=float)
    if len(x) == 0:
        return Estimate(float("nan"), float("nan"), 0.0)
    if len(x) < 4:
        return Estimate(float(x.mean()), float("nan"), float(len(x)))
    var = x.var(ddof=1)
    if var <= 1e-24 * max(1.0, x.mean() ** 2):  # constant up to round-off (a conserved quantity)
        return Estimate(float(x.mean()), 0.0, float(len(x)))
    se_block, _ = block_stderr(x)
    # On short, strongly correlated series the blocking plateau is not yet reached and
    # its estimate runs low; the autocorrelation estimate is then the better one. Take
    # the larger of the two, so that an error bar errs on the wide side.
    se = max(se_block, float(np.sqrt(var * statistical_inefficiency(x) / len(x))))
    n_eff = var / se ** 2 if se > 0 else float(len(x))
    return Estimate(float(x.mean()), se, float(min(n_eff, len(x))))


def ratio(num: Estimate, den: Estimate, scale: float = 1.0) -> Estimate:
    """num / den · scale with first-order error propagation (independent errors)."""
    m = scale * num.mean / den.mean
    rel = np.hypot(num.stderr / num.mean if num.mean else 0.0,
                   den.stderr / den.mean if den.mean else 0.0)
    return Estimate(m, abs(m) * rel, min(num.n_eff, den.n_eff))


def ratio_series(num: np.ndarray, den: np.ndarray, scale: float = 1.0) -> Estimate:
    """scale · mean(num) / mean(den) with an error that keeps their correlation.

    The delta method on the linearised series y = R (num/<num> − den/<den>), whose
    blocked standard error is that of the ratio R (common practice).
    """
    num, den = np.asarray(num, dtype=float), np.asarray(den, dtype=float)
    a, b = float(num.mean()), float(den.mean())
    r = scale * a / b
    if a == 0.0:
        return Estimate(r, estimate(num).stderr * abs(scale / b), estimate(num).n_eff)
    e = estimate(r * (num / a - den / b))
    return Estimate(r, e.stderr, e.n_eff)
