"""The breakdown finder: crossings of |Z − 1| = tolerance on synthetic and real isotherms."""

from __future__ import annotations

import math

import numpy as np
import pytest

from mdgas import breakdown as bd


def _rows(rho, z, err, temperature=2.0, **extra):
    return [dict(status="complete", Z=float(zi), Z_stderr=float(ei), density=float(r),
                 temperature=temperature, temperature_stderr=1e-4,
                 pressure=float(zi * r * temperature), pressure_stderr=0.0, model="synthetic",
                 **extra)
            for r, zi, ei in zip(rho, z, err)]


def _quadratic_root(b, c, tau):
    """Smallest positive ρ with bρ + cρ² = tau (b, c > 0)."""
    return (-b + math.sqrt(b * b + 4 * c * tau)) / (2 * c)


B, C = 2.0, 3.0  # synthetic virial-like Z = 1 + Bρ + Cρ² (σ³, σ⁶)
RHO = np.geomspace(0.002, 0.1, 8)


def test_noiseless_quadratic_crossing_is_recovered_exactly():
    z = 1 + B * RHO + C * RHO ** 2
    rows = _rows(RHO, z, np.full(len(RHO), 1e-3))
    for tol in (1.0, 5.0):
        c = bd.find(rows, [], [tol])[0]
        assert c.status == bd.FOUND and c.sign == 1
        assert c.density == pytest.approx(_quadratic_root(B, C, tol / 100), rel=1e-9)
        lo, hi = c.bracket
        assert lo < c.density < hi
        # At the crossing Z = 1 + τ by definition, so P* = (1 + τ) ρ* T.
        assert c.pressure == pytest.approx((1 + tol / 100) * c.density * 2.0, rel=1e-3)


def test_noisy_crossings_fall_within_their_stated_uncertainty():
    """Coverage of the propagated error bar over many synthetic data sets (fixed seed)."""
    tau, sigma = 0.05, 0.005
    true = _quadratic_root(B, C, tau)
    rng = np.random.default_rng(20240601)
    pulls = []
    for _ in range(300):
        z = 1 + B * RHO + C * RHO ** 2 + rng.normal(0.0, sigma, len(RHO))
        c = bd.find(_rows(RHO, z, np.full(len(RHO), sigma)), [], [5.0])[0]
        assert c.status == bd.FOUND
        pulls.append((c.density - true) / c.density_stderr)
    pulls = np.array(pulls)
    inside = np.mean(np.abs(pulls) < 2.0)
    # Gaussian 2σ coverage is 0.954; 300 trials give a binomial sd of 0.012, so [0.90, 0.995]
    # is a 4-sd band (common practice). The pull spread must be near 1 (neither over- nor
    # under-stated), and the estimator nearly unbiased.
    assert 0.90 <= inside <= 0.995
    assert 0.75 <= pulls.std() <= 1.25
    assert abs(pulls.mean()) < 4 * pulls.std() / math.sqrt(len(pulls)) + 0.1


def test_crossing_below_one_and_group_separation():
    rho = np.linspace(0.01, 0.1, 6)
    rows = (_rows(rho, 1 - 1.5 * rho, np.full(6, 1e-3), pore=3.0)
            + _rows(rho, 1 + 0.3 * rho, np.full(6, 1e-3), pore=6.0))
    found = {c.group["pore"]: c for c in bd.find(rows, ["pore"], [5.0])}
    assert found[3.0].sign == -1 and found[3.0].density == pytest.approx(0.05 / 1.5, rel=1e-9)
    assert found[3.0].pressure == pytest.approx(0.95 * found[3.0].density * 2.0, rel=1e-3)
    assert found[6.0].status == bd.ABOVE  # 0.3·ρ stays below 5% up to ρ = 0.1
    assert found[6.0].bracket[0] == pytest.approx(0.1)


def test_statuses_at_the_edges_of_the_grid():
    rho = np.array([0.02, 0.04, 0.08])
    assert bd.find(_rows(rho, 1 + 2.0 * rho, [1e-3] * 3), [], [1.0])[0].status == bd.BELOW
    assert bd.find(_rows(rho, 1 + 0.01 * rho, [1e-3] * 3), [], [1.0])[0].status == bd.ABOVE
    assert bd.find([], [], [1.0]) == []
    failed = [dict(r, status="failed") for r in _rows(rho, 1 + rho, [1e-3] * 3)]
    assert bd.find(failed, [], [1.0]) == []


def test_noise_larger_than_half_the_tolerance_is_unresolved_not_a_crossing():
    rho = np.array([0.01, 0.02, 0.04])
    noisy = bd.find(_rows(rho, [1.02, 0.99, 1.03], [0.015] * 3), [], [1.0, 5.0])
    # 1.5 % error bars cannot resolve 1 % (> 0.5 %), but can resolve 5 % (< 2.5 %).
    assert [c.status for c in noisy] == [bd.UNRESOLVED, bd.ABOVE]
    assert noisy[0].density is None and "lengthen production" in noisy[0].note
    # The same means with small error bars do give answers.
    sharp = bd.find(_rows(rho, [1.02, 0.99, 1.03], [0.001] * 3), [], [1.0, 5.0])
    assert [c.status for c in sharp] == [bd.BELOW, bd.ABOVE]


def test_replicas_are_combined_by_inverse_variance():
    rho = np.array([0.01, 0.02, 0.03])
    rows = _rows(rho, [1.0, 1.01, 1.02], [0.002] * 3) + _rows(rho, [1.002, 1.012, 1.022],
                                                                [0.002] * 3)
    (curve,) = bd.curves(rows, [])
    assert np.allclose(curve.y, [0.001, 0.011, 0.021])
    assert np.allclose(curve.stderr, 0.002 / math.sqrt(2))


def test_virial_estimate_uses_b2():
    rho = np.geomspace(0.001, 0.02, 6)
    rows = _rows(rho, 1 + bd.second_virial("hard-sphere", 1.0) * rho, [1e-4] * 6)
    rows = [dict(r, model="hard-sphere") for r in rows]
    c = bd.find(rows, [], [1.0], bd.second_virial)[0]
    # Hard-sphere B2 = 2πσ³/3, exact (common practice): ρ ≈ 0.01 / B2.
    assert c.virial_estimate == pytest.approx(0.01 / (2 * math.pi / 3))
    assert c.density == pytest.approx(c.virial_estimate, rel=1e-6)


class _FakeSweep:
    varied_keys = ["gas.temperature", "gas.density"]
    tolerances = (1.0,)


def test_propose_bisects_the_bracket_until_statistics_limit_it():
    rho = np.array([0.002, 0.004, 0.008, 0.016])
    rows = [dict(r, **{"gas.temperature": 1.0, "gas.density": r["density"]})
            for r in _rows(rho, 1 + 2.0 * rho, [1e-4] * 4)]
    new = bd.propose(rows, _FakeSweep())
    # 2ρ = 0.01 at ρ = 0.005: the bracket is (0.004, 0.008), its geometric midpoint 0.00566.
    assert new == [{"gas.temperature": 1.0, "gas.density": float(f"{math.sqrt(0.004 * 0.008):.6g}")}]
    noisy = [dict(r, Z_stderr=0.05) for r in rows]  # error bar wider than the bracket
    assert bd.propose(noisy, _FakeSweep()) == []
    below = [dict(r, Z=r["Z"] + 0.05) for r in rows]
    assert bd.propose(below, _FakeSweep())[0]["gas.density"] == pytest.approx(0.001)


# -- real runs ---------------------------------------------------------------------------

HS_SWEEP = """
name = "hs-b2"
[base.gas]
model = "hard-sphere"
particles = 400
temperature = 1.0
[base.container]
walls = "none"
[base.schedule]
equilibrate = 5.0
produce = 400.0
[base.output]
frame_every = 0.0
sample_every = 1.0
[axes]
"gas.density" = [0.003, 0.0055, 0.008, 0.011]
"""


@pytest.mark.slow
def test_hard_sphere_one_percent_crossing_agrees_with_the_b2_estimate(tmp_path):
    from mdgas import sweep
    from mdgas.engines import available
    if "hard-sphere" not in available():
        pytest.skip("no hard-sphere engine")
    # The finite-N offset of the measured Z in a periodic box: with total momentum fixed,
    # the kinetic pressure Σmv²/3V and the 3N − 3 temperature give an ideal gas of the same
    # N a Z that differs from 1 by a constant (−1/N with the current convention, 0 if the
    # kinetic pressure is scaled to NkT/V). Measured here exactly (no noise), so the test
    # holds for either convention.
    ideal = sweep.from_text(HS_SWEEP.replace('"hard-sphere"', '"ideal"')
                            .replace("[0.003, 0.0055, 0.008, 0.011]", "[0.005]"),
                            source="ideal-offset.toml")
    (row,) = sweep.run(ideal, tmp_path / "ideal", workers=1, progress=False).rows
    offset = row["Z"] - 1.0
    assert row["Z_stderr"] < 1e-9 and abs(offset) <= 1.0 / 400 + 1e-12

    sw = sweep.from_text(HS_SWEEP, source="hs-b2.toml")
    res = sweep.run(sw, tmp_path / "hs", workers=1, refine=1, progress=False)
    assert len(res.complete) == len(res.rows) == 5  # one bisection point added
    folder = sweep.open_folder(res.folder)
    c = next(c for c in sweep.analyse(folder) if c.tolerance == 1.0)
    assert c.status == bd.FOUND and c.sign == 1
    b2 = 2 * math.pi / 3  # hard-sphere B2 = 2πσ³/3, exact (common practice)
    assert c.virial_estimate == pytest.approx(0.01 / b2)
    # Z − 1 = B2 ρ + B3 ρ² + offset, B3 = 5π²σ⁶/18 exact for hard spheres (common
    # practice); B3ρ² is 0.5 % of B2ρ here. The 1 % crossing is then where
    # B2ρ + B3ρ² = 0.01 − offset.
    b3 = 5 * math.pi ** 2 / 18
    expected = _quadratic_root(b2, b3, 0.01 - offset)
    assert c.density_stderr < 0.05 * expected, "too noisy for the check to mean anything"
    assert abs(c.density - expected) < 4 * c.density_stderr
    if abs(offset) < 1e-12:  # a momentum-consistent kinetic pressure: the B2 estimate itself
        assert abs(c.density - c.virial_estimate) < 4 * c.density_stderr + 0.01 * expected
