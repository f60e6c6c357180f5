"""Error bars on correlated series: blocking, statistical inefficiency, equilibration."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.signal import lfilter

from mdgas.analysis import statistics as S


def ar1(phi: float, n: int, seed: int, burn: int = 5000) -> np.ndarray:
    """x_t = φ x_{t-1} + e_t with unit-variance normal e, started in its stationary state."""
    e = np.random.default_rng(seed).normal(size=n + burn)
    return lfilter([1.0], [1.0, -phi], e)[burn:]


def ar1_stderr(phi: float, n: int) -> float:
    """Exact standard error of the mean of n AR(1) samples (common practice):
    Var = σ²/n [(1+φ)/(1−φ) − 2φ(1−φⁿ)/(n(1−φ)²)], σ² = 1/(1−φ²)."""
    var = 1.0 / (1.0 - phi ** 2)
    return float(np.sqrt(var / n * ((1 + phi) / (1 - phi)
                                    - 2 * phi * (1 - phi ** n) / (n * (1 - phi) ** 2))))


@pytest.mark.parametrize("phi,seed", [(0.5, 11), (0.9, 12), (0.97, 13)])
def test_blocking_matches_the_ar1_formula_within_ten_percent(phi, seed):
    n = 2 ** 19
    x = ar1(phi, n, seed)
    se, block = S.block_stderr(x)
    assert se == pytest.approx(ar1_stderr(phi, n), rel=0.10)
    assert block > 1  # the correlated series needed blocking
    est = S.estimate(x)
    assert est.stderr == pytest.approx(ar1_stderr(phi, n), rel=0.10)
    # n_eff = n/g with g = (1+φ)/(1−φ) for AR(1) (common practice).
    assert est.n_eff == pytest.approx(n * (1 - phi) / (1 + phi), rel=0.2)


@pytest.mark.parametrize("phi", [0.5, 0.9])
def test_statistical_inefficiency_of_ar1(phi):
    x = ar1(phi, 2 ** 18, 21)
    assert S.statistical_inefficiency(x) == pytest.approx((1 + phi) / (1 - phi), rel=0.10)


def test_white_noise_gives_sigma_over_root_n():
    x = np.random.default_rng(5).normal(3.0, 2.0, size=100_000)
    est = S.estimate(x)
    assert est.stderr == pytest.approx(2.0 / np.sqrt(len(x)), rel=0.05)
    assert est.mean == pytest.approx(3.0, abs=4 * est.stderr)
    assert est.n_eff == pytest.approx(len(x), rel=0.1)
    assert S.statistical_inefficiency(x) < 1.05


def test_blocking_error_bars_cover_the_truth_at_the_advertised_rate():
    # 200 short AR(1) series: |mean| < 2 stderr should hold for ~95% of them; the
    # conservative max(blocking, autocorrelation) rule must not under-cover.
    inside = 0
    trials = 200
    for seed in range(trials):
        est = S.estimate(ar1(0.8, 1000, 1000 + seed))
        inside += abs(est.mean) < 2 * est.stderr
    # Binomial(200, 0.95) has sd 3.1; fewer than 180 would be under-coverage.
    assert inside >= 180


def test_blocking_curve_rises_to_a_plateau_for_correlated_data():
    sizes, errs, de = S.blocking_curve(ar1(0.9, 2 ** 14, 3))
    assert sizes[0] == 1 and np.all(np.diff(sizes) > 0)
    assert errs[0] < 0.5 * errs[6]  # naive stderr far too small
    assert len(sizes) == len(errs) == len(de)


def test_constant_and_short_series():
    est = S.estimate(np.full(100, 2.5))
    assert (est.mean, est.stderr) == (2.5, 0.0)
    assert np.isnan(S.estimate(np.array([1.0, 2.0])).stderr)
    assert S.estimate(np.array([])).n_eff == 0.0


def test_equilibration_detection_cuts_an_initial_transient():
    n = 4000
    rng = np.random.default_rng(8)
    t = np.arange(n)
    x = 5.0 * np.exp(-t / 150.0) + ar1(0.5, n, 9)
    t0, g, neff = S.detect_equilibration(x)
    # The transient is below the noise (σ ≈ 1.15) after ~150·ln(5/0.3) ≈ 420 samples.
    assert 200 <= t0 <= 1200
    assert neff < n
    # A stationary series keeps (almost) everything.
    t0_stat, _, _ = S.detect_equilibration(rng.normal(size=n))
    assert t0_stat < n // 10


def test_ratio_series_keeps_correlation():
    rng = np.random.default_rng(4)
    den = 1.0 + 0.05 * rng.normal(size=20000)
    num = 2.0 * den  # perfectly correlated: the ratio has no error at all
    r = S.ratio_series(num, den, 3.0)
    assert r.mean == pytest.approx(6.0)
    assert r.stderr < 1e-12
    # Independent numerator: the error is that of num/<den>.
    num = 2.0 + 0.1 * rng.normal(size=20000)
    r = S.ratio_series(num, np.ones(20000))
    assert r.stderr == pytest.approx(0.1 / np.sqrt(20000), rel=0.1)


def test_very_short_series_get_the_naive_error_not_a_crash():
    from mdgas.analysis.statistics import block_stderr
    x = np.array([1.0, 2.0, 4.0, 3.0, 5.0])
    se, size = block_stderr(x)
    assert size == 1
    assert se == pytest.approx(x.std(ddof=1) / np.sqrt(len(x)))
