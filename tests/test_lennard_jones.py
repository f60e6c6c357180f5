"""Lennard-Jones engine: physics against published references, conservation, walls,
instability handling and the command line.

Tolerances: 4 combined standard errors (ours from block averaging, the reference's where
known) together with the absolute bound the physics asks for. Runs are sized so those
errors sit below the bounds; seeds are fixed.
"""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest

import mdgas
from mdgas import config
from mdgas.analysis.statistics import estimate, ratio_series
from mdgas.cli import main as cli_main
from mdgas.engines import get_engine
from mdgas.errors import ConfigError, InstabilityError
from mdgas.observe import new_accumulator

LJ = get_engine("lennard-jones")


def settings(**keys) -> config.Settings:
    """LJ settings from ``section__key=value`` pairs (periodic box, no frames by default)."""
    raw = {"gas": {"model": "lennard-jones"}, "container": {"walls": "none"},
           "output": {"frame_every": 0.0}}
    for dotted, value in keys.items():
        sec, key = dotted.split("__")
        raw.setdefault(sec, {})[key] = value
    return config.from_dict(raw)


def simulate(tmp_path_factory, name: str, **keys):
    path = tmp_path_factory.mktemp("lj") / f"{name}.h5"
    return mdgas.simulate(settings(**keys), path=path, force=True)


def z_of(run):
    """Z = <P> / (ρ <T>) with the measured temperature (correlations kept)."""
    _, p = run.series("pressure_virial")
    _, t = run.series("temperature")
    return ratio_series(p, t, 1.0 / run.settings.gas.density)


def within(value, ref, se, bound=None):
    """|value - ref| within 4 combined standard errors (and an absolute bound)."""
    dev = abs(value - ref)
    ok = dev <= 4.0 * se and (bound is None or dev <= bound)
    return ok, f"{value:.6g} vs {ref:.6g}: off by {dev:.3g}, 4 stderr = {4 * se:.3g}" + (
        f", bound {bound:.3g}" if bound is not None else "")


# -- NIST Standard Reference Simulation Website ------------------------------------
# Lennard-Jones fluid, NVT Monte Carlo, N = 500, potential truncated at 3σ with analytic
# long-range corrections, T* = 0.85 isotherm (NIST SRSW, "Lennard-Jones Fluid Properties",
# mmlapps.nist.gov/srs/LJ_PURE). Values from memory, not read here (no web access); as a
# check of the memory they agree with the Thol et al. (2016) equation of state (teqp) to
# 0.2% (liquid) and 0.3% (vapour energy). NIST's own uncertainties, from memory and only as
# an order of magnitude: liquid 2e-4 (u) and 3e-3 (p); vapour 2e-5 (u) and 2e-6 (p).
NIST_T085 = {
    # rho: (u per particle, stderr_u, p, stderr_p)
    0.82: (-5.7947, 2e-4, 5.5355e-1, 3e-3),
    0.005: (-5.1901e-2, 2e-5, 4.1003e-3, 2e-6),
}


@pytest.mark.parametrize("rho", [0.82, 0.005])
def test_nist_t085(tmp_path_factory, rho):
    u_ref, su, p_ref, sp = NIST_T085[rho]
    if rho > 0.5:
        run = simulate(tmp_path_factory, "nist_liquid", gas__particles=500, gas__density=rho,
                       gas__temperature=0.85, schedule__equilibrate=20.0,
                       schedule__produce=100.0, schedule__produce_thermostat="csvr")
    else:   # a wide skin: rebuilds are the cost in a dilute gas
        run = simulate(tmp_path_factory, "nist_vapour", gas__particles=2000, gas__density=rho,
                       gas__temperature=0.85, potential__skin=1.0, schedule__equilibrate=20.0,
                       schedule__produce=400.0, schedule__produce_thermostat="csvr")
    u = estimate(run.series("potential_energy")[1])
    p = estimate(run.series("pressure_virial")[1])
    t = estimate(run.series("temperature")[1])
    ok, msg = within(t.mean, 0.85, t.stderr, 0.01)
    assert ok, "temperature " + msg
    # Absolute bounds sized to what these runs resolve (4 stderr measured): the liquid
    # pressure is a small difference of large terms (stderr ~3 %), the vapour energy
    # comes from rare close pairs (stderr ~2 %); their sharp partners are the liquid
    # energy (0.06 %) and the vapour pressure (0.1 %).
    u_bound, p_bound = (0.01, 0.15) if rho > 0.5 else (0.10, 0.01)
    ok, msg = within(u.mean, u_ref, math.hypot(u.stderr, su), u_bound * abs(u_ref))
    assert ok, "energy " + msg
    ok, msg = within(p.mean, p_ref, math.hypot(p.stderr, sp), p_bound * abs(p_ref))
    assert ok, "pressure " + msg


def test_liquid_gr_reproduces_the_energy(tmp_path_factory):
    """g(r) from the production histograms integrates to the measured pair energy:
    u = 2πρ ∫ g(r) u(r) r² dr (r < r_c) + u_tail (common practice)."""
    from mdgas.analysis.structure import radial_distribution
    from mdgas.engines.verlet import lj_pair, tail_corrections
    rho = 0.8
    run = simulate(tmp_path_factory, "gr", gas__particles=500, gas__density=rho,
                   gas__temperature=1.0, schedule__equilibrate=10.0, schedule__produce=40.0,
                   schedule__produce_thermostat="csvr")
    r, g = radial_distribution(run.histograms, 500, run.settings.volume)
    dr = r[1] - r[0]
    assert 2.4 < np.nanmax(g) < 3.4 and 1.0 < r[np.nanargmax(g)] < 1.2   # first shell
    inside = r < 3.0
    u_gr = 2 * np.pi * rho * np.nansum(g[inside] * lj_pair(r[inside]) * r[inside] ** 2) * dr
    u_gr += tail_corrections(rho, 3.0)[0]
    u = estimate(run.series("potential_energy")[1])
    # Bin width 0.02 σ: the midpoint rule costs ~0.1 % near the steep core.
    assert abs(u_gr - u.mean) < 4 * u.stderr + 0.01 * abs(u.mean), (u_gr, u)


# -- teqp: Thol et al. 2016 ---------------------------------------------------------
# Thol, Rutkai, Köster, Lustig, Span & Vrabec, J. Phys. Chem. Ref. Data 45, 023101 (2016),
# the full LJ fluid, evaluated with teqp. rc = 3σ plus tail corrections leaves a model
# error well below 1% here (g(r) ≈ 1 beyond 3σ at T* = 2). The EOS's own uncertainty in
# this region is a few tenths of a percent (from memory); 0.3% of Z is added to 4 stderr.

@pytest.mark.parametrize("rho,n,produce", [(0.05, 1000, 100.0), (0.6, 500, 150.0),
                                           (0.8, 500, 100.0)])
def test_teqp_thol2016_isotherm_t2(tmp_path_factory, rho, n, produce):
    teqp = pytest.importorskip("teqp")
    model = teqp.build_LJ126_TholJPCRD2016()
    z_ref = 1.0 + model.get_Ar01(2.0, rho, np.array([1.0]))
    run = simulate(tmp_path_factory, f"teqp_{rho}", gas__particles=n, gas__density=rho,
                   gas__temperature=2.0, potential__skin=0.6 if rho < 0.3 else 0.3,
                   schedule__equilibrate=10.0, schedule__produce=produce,
                   schedule__produce_thermostat="csvr")
    z = z_of(run)
    assert abs(z.mean - z_ref) < 0.01 * z_ref, (z, z_ref)
    assert abs(z.mean - z_ref) < 4 * z.stderr + 0.003 * z_ref, (z, z_ref)


# -- low-density limit: B2 ------------------------------------------------------------

def test_low_density_slope_is_b2(tmp_path_factory):
    """(Z - 1)/ρ → B2(T) as ρ → 0; B2 by quadrature of the full LJ potential
    (the tail correction restores the part beyond r_c to first order in ρ)."""
    from scipy.integrate import quad
    temp = 2.0
    b2 = -2 * np.pi * quad(lambda r: (math.exp(-4 * (r ** -12 - r ** -6) / temp) - 1) * r * r,
                           1e-6, 50.0, limit=200)[0]
    rhos, y, se = [], [], []
    for rho in (0.01, 0.02, 0.03):
        run = simulate(tmp_path_factory, f"b2_{rho}", gas__particles=1000, gas__density=rho,
                       gas__temperature=temp, potential__skin=1.0, schedule__equilibrate=10.0,
                       schedule__produce=200.0, schedule__produce_thermostat="csvr")
        z = z_of(run)
        rhos.append(rho)
        y.append((z.mean - 1.0) / rho)
        se.append(z.stderr / rho)
    # Weighted straight line (Z-1)/ρ = B2 + B3 ρ; the intercept's error from the weights.
    w = 1.0 / np.square(se)
    a = np.vstack([np.ones(3), rhos]).T
    cov = np.linalg.inv(a.T @ (a * w[:, None]))
    fit = cov @ (a.T @ (w * np.array(y)))
    b2_fit, b2_se = fit[0], math.sqrt(cov[0, 0])
    assert abs(b2_fit - b2) < 4 * b2_se and abs(b2_fit - b2) < 0.15 * abs(b2), (b2_fit, b2_se, b2)


# -- NVE conservation -----------------------------------------------------------------

def test_nve_energy_drift_1000_tau():
    """Relative drift of the total energy below 1e-4 over 1000 τ at ρ* = 0.8, T* = 1.0,
    dt = 0.005 τ, r_c = 3σ, N = 256 (small to fit the budget).

    Shifted-force potential: with the plain truncated-and-shifted one, the force jump at
    r_c (0.011 ε/σ at 3σ) gives every pair crossing r_c an energy error of random sign, a
    random walk of the total energy measured here at 0.7e-4 to 1.6e-4 of |E| over
    1000 τ for N = 256 (it shrinks as 1/sqrt(N)): a coin toss against 1e-4, not a drift.
    Drift = slope of a straight-line fit to E(t) × 1000 τ / |E|, with E = K + U taken
    exactly at the end of every 0.5 τ chunk. Momentum stays zero throughout."""
    s = settings(gas__particles=256, gas__density=0.8, gas__temperature=1.0,
                 potential__tail="shifted-force", schedule__timestep=0.005)
    e = LJ(s)
    st = e.initial_state()
    acc = new_accumulator()
    for _ in range(20):                       # 10 τ of CSVR to melt the lattice
        e.advance(st, 0.5, acc, False)
    energies, times = [], []
    for k in range(2000):
        e.advance(st, 0.5, acc, True)
        energies.append(0.5 * (st["velocities"] ** 2).sum() + e.energy(st))
        times.append(0.5 * (k + 1))
    energies = np.array(energies)
    slope = np.polyfit(times, energies, 1)[0]
    drift = slope * 1000.0 / abs(energies.mean())
    assert abs(drift) < 1e-4, drift
    assert np.abs(st["velocities"].sum(axis=0)).max() < 1e-9
    t = (st["velocities"] ** 2).sum() / (3 * 256 - 3)
    assert 0.8 < t < 1.2                      # still the same state, not heated away


# -- walls ------------------------------------------------------------------------------

def test_slit_wall_pressure_equals_bulk_virial_pressure(tmp_path_factory):
    """Mechanical equilibrium: the pressure on specular walls of a wide slit equals the
    virial pressure of a periodic bulk fluid at the density found mid-slit (same
    truncated potential, no tail corrections on either side)."""
    teqp = pytest.importorskip("teqp")
    temp = 2.0
    slit = simulate(tmp_path_factory, "slit", gas__particles=1200, gas__density=0.3,
                    gas__temperature=temp, container__walls="z", container__wall="specular",
                    container__aspect=[1.0, 1.0, 3.0], potential__cutoff=2.5,
                    potential__tail="shifted", schedule__equilibrate=10.0,
                    schedule__produce=200.0, schedule__produce_thermostat="csvr",
                    output__frame_every=1.0)
    box = slit.settings.box
    _, pw = slit.series("pressure_wall")
    p_wall = estimate(pw[:, 4:6].mean(axis=1))
    _, frames, _ = slit.frames()
    mid = [np.count_nonzero((f[:, 2] > box[2] / 3) & (f[:, 2] < 2 * box[2] / 3))
           / (box[0] * box[1] * box[2] / 3) for f in frames]
    rho_mid = estimate(np.array(mid))
    bulk = simulate(tmp_path_factory, "slit_bulk", gas__particles=600,
                    gas__density=round(rho_mid.mean, 6), gas__temperature=temp,
                    potential__cutoff=2.5, potential__tail="shifted",
                    schedule__equilibrate=10.0, schedule__produce=200.0,
                    schedule__produce_thermostat="csvr")
    p_bulk = estimate(bulk.series("pressure_virial")[1])
    # dP/dρ only propagates the error of ρ_mid (the full-LJ EOS is good enough for that).
    model = teqp.build_LJ126_TholJPCRD2016()

    def p_eos(r):
        return r * temp * (1.0 + model.get_Ar01(temp, r, np.array([1.0])))
    dpdrho = (p_eos(rho_mid.mean + 1e-4) - p_eos(rho_mid.mean - 1e-4)) / 2e-4
    se = math.sqrt(p_wall.stderr ** 2 + p_bulk.stderr ** 2 + (dpdrho * rho_mid.stderr) ** 2)
    ok, msg = within(p_wall.mean, p_bulk.mean, se, 0.03 * p_bulk.mean)
    assert ok, msg
    # Both faces carry the same pressure (momentum balance of the slit).
    ok, msg = within(estimate(pw[:, 4]).mean, estimate(pw[:, 5]).mean,
                     math.hypot(estimate(pw[:, 4]).stderr, estimate(pw[:, 5]).stderr))
    assert ok, msg


def test_lj93_slit_runs_and_balances(tmp_path_factory):
    """A 9-3 slit: particles stay inside, both walls feel the same pressure, the density
    profile has its adsorbed layer near the wall minimum (0.86 σ_w)."""
    run = simulate(tmp_path_factory, "lj93", gas__particles=600, gas__density=0.4,
                   gas__temperature=1.5, container__walls="z", container__wall="lj93",
                   container__aspect=[1.0, 1.0, 2.0], schedule__equilibrate=5.0,
                   schedule__produce=40.0)
    assert run.complete
    _, pw = run.series("pressure_wall")
    lo, hi = estimate(pw[:, 4]), estimate(pw[:, 5])
    ok, msg = within(lo.mean, hi.mean, math.hypot(lo.stderr, hi.stderr))
    assert ok and lo.mean > 0, msg
    edges = run.histograms["wall_layer_edges"]
    layer = run.histograms["wall_layer_counts"][4]
    peak = 0.5 * (edges[:-1] + edges[1:])[np.argmax(layer)]
    assert 0.75 < peak < 1.1, peak
    _, u = run.series("potential_energy")
    assert np.isfinite(u).all()


# -- instability ------------------------------------------------------------------------

def test_blow_up_stops_with_a_clear_message_and_keeps_samples(tmp_path, monkeypatch):
    """Two particles pushed almost on top of each other at t = 2 τ: the run stops, says
    when and what to change, and the file keeps the samples before and is marked failed."""
    original = LJ.advance

    def sabotaged(self, state, duration, acc, producing):
        if state["time"][0] >= 2.0 and not getattr(self, "_sabotaged", False):
            self._sabotaged = True
            state["positions"][1] = state["positions"][0] + np.array([0.05, 0.0, 0.0])
            state["positions"][1] %= self.box
        return original(self, state, duration, acc, producing)
    monkeypatch.setattr(LJ, "advance", sabotaged)
    s = settings(gas__particles=300, gas__density=0.5, schedule__equilibrate=1.0,
                 schedule__produce=5.0)
    with pytest.raises(InstabilityError) as info:
        mdgas.simulate(s, path=tmp_path / "boom.h5", force=True)
    msg = str(info.value)
    assert "t = 2.0" in msg and "blew up" in msg and "schedule.timestep" in msg
    run = mdgas.load(tmp_path / "boom.h5")
    assert run.status == "failed"
    assert len(run.times) == 4 and run.times[-1] == pytest.approx(2.0)


def test_escape_through_a_hard_wall_is_reported():
    s = settings(gas__particles=300, gas__density=0.5, container__walls="xyz",
                 container__wall="specular")
    e = LJ(s)
    st = e.initial_state()
    st["velocities"][7] = [0.0, 0.0, -3.0 * e.box[2] / 0.005]   # crosses the box in a step
    with pytest.raises(InstabilityError, match="passed through a wall"):
        e.advance(st, 0.5, new_accumulator(), False)


# -- validation -------------------------------------------------------------------------

def test_validation_errors_name_the_key_and_the_fix():
    with pytest.raises(ConfigError) as info:
        settings(gas__particles=100, gas__density=0.8)       # box 4.6 σ < 2 (3 + 0.3)
    assert info.value.key == "potential.cutoff" and "gas.particles" in info.value.fix
    with pytest.raises(ConfigError) as info:
        settings(gas__particles=500, schedule__timestep=0.03)
    assert info.value.key == "schedule.timestep"
    with pytest.raises(ConfigError):                          # dt too large when hot
        settings(gas__particles=500, gas__temperature=9.0, schedule__timestep=0.01)
    with pytest.warns(UserWarning, match="timestep"):
        settings(gas__particles=500, schedule__timestep=0.015)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        settings(gas__particles=500, schedule__timestep=0.005)  # the default is quiet
    with pytest.raises(ConfigError) as info:
        settings(gas__particles=500, container__walls="z", container__wall="lj93",
                 container__wall_cutoff=0.5)
    assert info.value.key == "container.wall_cutoff"
    with pytest.raises(ConfigError) as info:
        settings(gas__particles=500, container__walls="z", container__wall="lj93",
                 container__wall_epsilon=200.0)
    assert info.value.key == "container.wall_epsilon"
    # Walled axes need no room for images: a narrow slit with wide periodic sides is fine.
    settings(gas__particles=800, gas__density=0.5, container__walls="z",
             container__aspect=[2.0, 2.0, 0.5])


# -- command line -----------------------------------------------------------------------

def test_run_and_summary_json_through_the_command_line(tmp_path, capsys):
    cfg = tmp_path / "lj.toml"
    cfg.write_text('[gas]\nmodel = "lennard-jones"\nparticles = 500\ndensity = 0.7\n'
                   'temperature = 1.2\n[container]\nwalls = "none"\n'
                   '[schedule]\nequilibrate = 5.0\nproduce = 20.0\n'
                   '[output]\nframe_every = 0.0\n')
    out = tmp_path / "lj.h5"
    import numba
    outer = numba.get_num_threads()
    try:
        assert cli_main(["run", str(cfg), "-o", str(out), "--threads", "1", "-q"]) == 0
        assert numba.get_num_threads() == 1
    finally:
        numba.set_num_threads(outer)     # --threads sets the process-wide default
    capsys.readouterr()
    assert cli_main(["summary", str(out), "--json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    assert summary["pressure_source"] == "virial"
    assert summary["potential_energy"]["mean"] < -3.0          # a dense liquid binds
    assert summary["pressure_virial"]["mean"] == pytest.approx(summary["pressure"]["mean"])
    # NVE production: the drift over 20 τ is small (noisy figure, see energy_figures).
    assert abs(summary["energy_drift"]) < 2e-3
    assert cli_main(["run", str(cfg), "-o", str(out), "--force", "--threads", "99"]) == 2
