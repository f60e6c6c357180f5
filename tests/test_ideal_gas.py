"""The ideal-gas engine against kinetic theory (exact results for point particles).

References: the ideal-gas law PV = NkT; the Maxwell-Boltzmann distribution
(scipy.stats.maxwell / scipy.stats.norm); the effusion result for the wall hit rate per
area, n<v>/4 with <v> = sqrt(8kT/πm); equipartition <KE> = 3/2 kT per particle, hence
U = 3/2 PV for a monatomic ideal gas. All are textbook kinetic theory (common practice).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from mdgas.analysis.statistics import estimate

BOX = {"gas.model": "ideal", "gas.particles": 20000, "gas.density": 1.0,
       "gas.temperature": 1.0, "schedule.equilibrate": 5.0, "schedule.produce": 1500.0,
       "output.sample_every": 5.0, "output.frame_every": 0.0}


def _face_pressures(run):
    _, pw = run.series("pressure_wall")
    return {k: estimate(pw[:, k]) for k in range(6) if run.settings.walled[k // 2]}


@pytest.mark.parametrize("walls,wall", [("xyz", "specular"), ("z", "specular"),
                                        ("xyz", "thermal"), ("z", "thermal")])
def test_wall_pressure_is_nkt_over_v_on_every_face(run_in, walls, wall):
    run = run_in(None, **BOX, **{"container.walls": walls, "container.wall": wall,
                                 "container.wall_temperature": 1.0})
    expected = run.settings.gas.density * 1.0  # P = n kT (ideal-gas law)
    faces = _face_pressures(run)
    assert len(faces) == 2 * len(walls)
    for k, est in faces.items():
        assert est.stderr > 0
        assert abs(est.mean - expected) < 4 * est.stderr, (k, est)
        assert abs(est.mean - expected) < 0.01 * expected, (k, est)


def test_speed_and_velocity_components_follow_maxwell_boltzmann(run_in):
    # Thermal walls redraw velocities, so the final state tests the wall sampler too.
    run = run_in(None, **{**BOX, "schedule.produce": 1000.0}, **{
        "container.wall": "thermal", "container.wall_temperature": 1.0})
    v = run.final_state["velocities"]
    speeds = np.linalg.norm(v, axis=1)
    assert stats.kstest(speeds, stats.maxwell(scale=1.0).cdf).pvalue > 0.01
    n = len(v)
    for a in range(3):
        assert stats.kstest(v[:, a], stats.norm(scale=1.0).cdf).pvalue > 0.01
        # Variance of a normal sample has stderr sqrt(2/n)·σ² (common practice).
        assert abs(v[:, a].var() - 1.0) < 4 * math.sqrt(2.0 / n)
    summary = run.summary()
    assert summary["speed_distribution"]["p_value"] > 0.01


def test_wall_hit_rate_per_area_is_n_mean_speed_over_four(run_in):
    run = run_in(None, **{**BOX, "container.wall": "thermal", "container.wall_temperature": 1.0})
    s = run.settings
    box = s.box
    area = box[0] * box[1]  # faces z- and z+
    _, hits = run.series("wall_hits")
    rate = (hits[:, 4] + hits[:, 5]) / (2 * area * s.output.sample_every)
    est = estimate(rate)
    expected = s.gas.density * math.sqrt(8.0 / math.pi) / 4.0  # effusion: n<v>/4
    assert abs(est.mean - expected) < 4 * est.stderr
    assert abs(est.mean - expected) < 0.01 * expected


def test_equipartition_and_u_equals_three_halves_pv(run_in):
    run = run_in(None, **{**BOX, "container.wall": "thermal", "container.wall_temperature": 1.0})
    s = run.settings
    _, ke = run.series("kinetic_energy")
    ke_est = estimate(ke)
    assert abs(ke_est.mean - 1.5) < 4 * ke_est.stderr + 1e-12
    assert abs(ke_est.mean - 1.5) < 0.01 * 1.5
    _, pw = run.series("pressure_wall")
    p = estimate(pw.mean(axis=1))
    u = ke_est.mean * s.gas.particles
    three_halves_pv = 1.5 * p.mean * s.volume
    err = 1.5 * s.volume * p.stderr + s.gas.particles * ke_est.stderr
    assert abs(u - three_halves_pv) < 4 * err
    assert abs(u - three_halves_pv) < 0.01 * u


def test_specular_walls_conserve_energy_exactly(run_in):
    run = run_in(None, **{**BOX, "schedule.produce": 100.0})
    _, ke = run.series("kinetic_energy", production=False)
    assert np.ptp(ke) < 1e-12 * ke[0]


def test_hot_gas_relaxes_to_the_thermal_wall_temperature(run_in):
    run = run_in(None, **{**BOX, "gas.temperature": 3.0, "container.wall": "thermal",
                          "container.wall_temperature": 1.0, "schedule.equilibrate": 100.0,
                          "schedule.produce": 400.0, "output.sample_every": 1.0})
    times, temp = run.series("temperature", production=False)
    assert temp[0] > 2.5  # it really started hot (first sample after 1 τ)
    assert np.all(np.diff(temp[:10]) < 0)  # and cooled steadily
    _, prod = run.series("temperature")
    est = estimate(prod)
    assert abs(est.mean - 1.0) < 4 * est.stderr + 1e-3
    assert abs(est.mean - 1.0) < 0.01


def test_periodic_box_conserves_momentum_and_wraps(run_in):
    run = run_in(None, **{**BOX, "container.walls": "none", "schedule.produce": 50.0})
    v = run.final_state["velocities"]
    assert np.abs(v.sum(axis=0)).max() < 1e-9
    pos = run.final_state["positions"]
    assert (pos >= 0).all() and (pos < run.settings.box).all()
    assert run.summary()["pressure_wall"] is None


def test_periodic_ideal_gas_virial_pressure_is_exactly_nkt_over_v(run_in):
    # P = ρ k T_kin with T_kin over 3N - 3 degrees of freedom (common practice); for
    # point particles there is no pair virial, so Z must be 1 to round-off.
    run = run_in(None, **{**BOX, "gas.particles": 256, "container.walls": "none",
                          "schedule.produce": 20.0})
    _, pv = run.series("pressure_virial")
    _, temp = run.series("temperature")
    assert np.allclose(pv, run.settings.gas.density * temp, rtol=1e-12)
    assert abs(run.summary()["Z"]["mean"] - 1.0) < 1e-9
