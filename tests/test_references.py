"""Reference equations of state against published and hand-computed values."""

from __future__ import annotations

import math

import numpy as np
import pytest

from mdgas.analysis import references as R

# Reduced second virial coefficient B2* = B2/(2πσ³/3) of the full LJ 12-6 potential,
# Hirschfelder, Curtiss & Bird, "Molecular Theory of Gases and Liquids" (1954),
# Table I-B (values from memory).
HCB_B2_REDUCED = {1.0: -2.5381, 2.0: -0.6276, 5.0: 0.2433, 10.0: 0.4609}


@pytest.mark.parametrize("t,b2star", sorted(HCB_B2_REDUCED.items()))
def test_lj_b2_quadrature_matches_published_table(t, b2star):
    # The table has four decimals: agree to within rounding.
    assert R.lj_b2(t) / R.B2_HARD_SPHERE == pytest.approx(b2star, abs=1.5e-4)


@pytest.mark.parametrize("t", [0.6, 1.3, 3.0, 7.5, 40.0])
def test_lj_b2_quadrature_matches_closed_form_series(t):
    assert R.lj_b2(t) == pytest.approx(R.lj_b2_series(t), rel=1e-9, abs=1e-11)


def test_boyle_temperature_of_lennard_jones():
    # T_B* = 3.42 (3.418 in Hirschfelder, Curtiss & Bird 1954, from memory).
    assert R.boyle_temperature() == pytest.approx(3.418, abs=0.002)


def test_truncated_b2_is_less_attractive_and_approaches_full_with_large_cutoff():
    full = R.lj_b2(1.5)
    assert R.lj_b2(1.5, 2.5) > full  # less of the attractive well counted
    # The shift and the missing tail both fall off as r_c⁻³: doubling r_c cuts the
    # difference about eightfold.
    d6, d12 = abs(R.lj_b2(1.5, 6.0) - full), abs(R.lj_b2(1.5, 12.0) - full)
    assert d12 < d6 / 4
    assert d12 < 5e-3 * abs(full)


def test_hard_sphere_b2_and_high_temperature_limit():
    assert R.B2_HARD_SPHERE == pytest.approx(2.0943951, rel=1e-7)  # 2π/3, exact
    # At very high T the repulsive wall dominates: B2 > 0 and decreasing (common practice).
    assert 0 < R.lj_b2(100.0) < R.lj_b2(30.0)


def test_carnahan_starling_hand_values():
    # η = 0.3: (1 + 0.3 + 0.09 − 0.027)/0.7³ = 1.363/0.343 (hand-computed).
    rho = 6 * 0.3 / math.pi
    assert R.carnahan_starling(rho) == pytest.approx(1.363 / 0.343, rel=1e-12)
    # Low density: Z ≈ 1 + 4η = 1 + B2ρ (exact B2 of hard spheres).
    rho = 1e-5
    assert R.carnahan_starling(rho) - 1 == pytest.approx(R.B2_HARD_SPHERE * rho, rel=1e-4)


def test_van_der_waals_hand_values():
    a, b = R.van_der_waals_constants(1.3120, 0.1279)
    assert a == pytest.approx(27 * 1.3120 ** 2 / (64 * 0.1279), rel=1e-12)
    assert b == pytest.approx(1.3120 / (8 * 0.1279), rel=1e-12)
    # ρ = 0.2, T = 2 with a = 5.6778, b = 1.28225: 1/(1 − 0.256450) − 0.567781 = 0.777122
    # (hand-computed).
    assert R.van_der_waals(0.2, 2.0, a, b) == pytest.approx(0.777122, abs=1e-5)
    # The critical point of vdW in its own constants: Z_c = 3/8 (textbook, common practice).
    rhoc = 1.0 / (3.0 * b)
    assert R.van_der_waals(rhoc, 1.3120, a, b) == pytest.approx(3.0 / 8.0, rel=1e-12)


def test_tail_pressure_hand_value():
    # ρ = 0.5, r_c = 3: (16/3)π·0.25·(2/3·3⁻⁹ − 3⁻³) = 4.18879 × (−0.0370032)
    # = −0.154999 (hand-computed).
    assert R.lj_tail_pressure(0.5, 3.0) == pytest.approx(-0.154999, rel=1e-5)


def test_predictions_depend_on_model():
    assert [p.name for p in R.predictions("ideal", 0.01, 1.0).predictions] == ["ideal gas"]
    hs = {p.name: p for p in R.predictions("hard-sphere", 0.3, 1.0).predictions}
    assert set(hs) == {"ideal gas", "Carnahan-Starling", "virial B2"}
    assert hs["Carnahan-Starling"].Z == pytest.approx(R.carnahan_starling(0.3))
    lj = R.predictions("lennard-jones", 0.05, 2.0, tail="shifted", cutoff=2.5)
    names = {p.name for p in lj.predictions} | set(lj.skipped)
    assert {"virial B2", "van der Waals", "Thol 2016", "Kolafa-Nezbeda 1994",
            "Johnson 1993"} <= names
    vdw = next(p for p in lj.predictions if p.name == "van der Waals")
    assert "shifted" in vdw.detail
    b2 = next(p for p in lj.predictions if p.name == "virial B2")
    assert b2.Z == pytest.approx(1 + R.lj_b2(2.0, 2.5) * 0.05)


def test_without_teqp_the_comparisons_are_skipped_and_named(monkeypatch):
    monkeypatch.setattr(R, "_teqp", lambda: None)
    c = R.predictions("lennard-jones", 0.1, 2.0)
    assert set(c.skipped) == set(R.TEQP_LJ_MODELS)
    assert all("teqp" in why for why in c.skipped.values())


@pytest.mark.parametrize("model", sorted(R.TEQP_LJ_MODELS))
def test_teqp_lj_low_density_limit_is_b2(model):
    pytest.importorskip("teqp")
    # Each EOS was fitted to reproduce the LJ virial coefficients at low density; 2%
    # of B2 covers the fits (Thol et al. 2016 fit B2 closely; from memory).
    rho, t = 1e-3, 2.0
    assert (R.teqp_lj(model, rho, t) - 1) / rho == pytest.approx(R.lj_b2(t), rel=0.02)


def test_teqp_lj_equations_agree_at_a_moderate_state():
    pytest.importorskip("teqp")
    # Three independent fits to simulation data should agree to about 1% in Z here
    # (supercritical, ρ = 0.5, T = 2; common practice for modern LJ EOSs).
    z = [R.teqp_lj(m, 0.5, 2.0) for m in R.TEQP_LJ_MODELS]
    assert max(z) - min(z) < 0.01 * np.mean(z)
    # And the attractive well dominates here: Z < Z of hard spheres of the same ρ.
    assert max(z) < R.carnahan_starling(0.5)


def test_coolprop_argon_near_ambient():
    pytest.importorskip("CoolProp")
    # Argon at 300 K, 101325 Pa: B2 ≈ −15.5 cm³/mol (Dymond & Smith, "The Virial
    # Coefficients of Pure Gases and Mixtures" (1980), from memory), so
    # Z ≈ 1 + B2 P/(RT) = 1 − 15.5e-6·101325/(8.314462·300) = 0.99937 (hand-computed).
    assert R.coolprop_z("Argon", 300.0, pressure_Pa=101325.0) == pytest.approx(0.99937,
                                                                                 abs=1e-4)
    # Density input gives the same state back: n/V = P/(Z R T).
    z = R.coolprop_z("Argon", 300.0, pressure_Pa=101325.0)
    rho = 101325.0 / (z * 8.314462618 * 300.0)
    assert R.coolprop_z("Argon", 300.0, density_mol_m3=rho) == pytest.approx(z, abs=1e-6)
    with pytest.raises(ValueError):
        R.coolprop_z("Argon", 300.0)
