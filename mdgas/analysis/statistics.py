"""Error bars for correlated time series.

- Block averaging with an automatic plateau (Flyvbjerg & Petersen, J. Chem. Phys. 91,
  461 (1989)).
- Statistical inefficiency g = 1 + 2 Σ (1 - t/n) C(t) from the autocorrelation function,
  summed until C first drops below zero (the estimator of Chodera et al., J. Chem.
  Theory Comput. 3, 26 (2007)).
- End of equilibration by maximising the number of effectively uncorrelated samples
  (Chodera, J. Chem. Theory Comput. 12, 1799 (2016)).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Below this many effectively independent samples an error bar is itself unreliable.
MIN_INDEPENDENT = 20


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

    The plateau is the first level whose estimate agrees, within the combined
    uncertainty, with every later level that still has at least 8 blocks; if none
    does (too short a series), the largest estimate is returned, which errs on the
    side of a wider error bar.
    """
    sizes, errs, de = blocking_curve(x)
    if len(errs) == 0:
        return float("nan"), 1
    n = len(np.asarray(x))
    usable = [k for k in range(len(errs)) if n // sizes[k] >= 8]
    for k in usable:
        later = [j for j in usable if j > k]
        if all(abs(errs[j] - errs[k]) <= de[j] + de[k] for j in later) and \
                all(errs[j] <= errs[k] + de[j] + de[k] for j in later):
            return float(errs[k]), int(sizes[k])
    k = int(np.argmax(errs[usable])) if usable else 0
    return float(errs[k]), int(sizes[k])


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
    """Mean, block-averaging standard error and effective sample count of a series."""
    x = np.asarray(x, dtype=float)
    if len(x) == 0:
        return Estimate(float("nan"), float("nan"), 0.0)
    if len(x) < 4:
        return Estimate(float(x.mean()), float("nan"), float(len(x)))
    var = x.var(ddof=1)
    if var <= 1e-24 * max(1.0, x.mean() ** 2):  # constant up to round-off (a conserved quantity)
        return Estimate(float(x.mean()), 0.0, float(len(x)))
    se, _ = block_stderr(x)
    n_eff = var / se ** 2 if se > 0 else float(len(x))
    return Estimate(float(x.mean()), se, float(min(n_eff, len(x))))


def ratio(num: Estimate, den: Estimate, scale: float = 1.0) -> Estimate:
    """num / den · scale with first-order error propagation (independent errors)."""
    m = scale * num.mean / den.mean
    rel = np.hypot(num.stderr / num.mean if num.mean else 0.0,
                   den.stderr / den.mean if den.mean else 0.0)
    return Estimate(m, abs(m) * rel, min(num.n_eff, den.n_eff))
