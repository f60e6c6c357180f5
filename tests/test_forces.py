"""Lennard-Jones forces, neighbour lists and walls against independent calculations."""

from __future__ import annotations

import copy

import numpy as np
import pytest

from mdgas import config
from mdgas.engines import get_engine
from mdgas.engines.cells import (build_neighbour_list, cell_grid, image_arrays,
                                 mirror_half_list, sort_by_cell)
from mdgas.engines.verlet import lj_pair, pair_forces_brute, tail_corrections
from mdgas.engines.walls import lj93_minimum, lj93_potential
from mdgas.observe import new_accumulator

LJ = get_engine("lennard-jones")


def lj_settings(**keys):
    raw = {"gas": {"model": "lennard-jones", "particles": 300, "density": 0.7,
                   "temperature": 1.0},
           "container": {"walls": "none"},
           "schedule": {"equilibrate": 1.0, "produce": 2.0}}
    for dotted, value in keys.items():
        sec, key = dotted.split("__")
        raw.setdefault(sec, {})[key] = value
    return config.from_dict(raw)


def shaken(engine, seed=3, amount=0.15):
    """An initial state with positions displaced randomly, then re-prepared."""
    st = engine.initial_state()
    rng = np.random.default_rng(seed)
    pos = st["positions"] + rng.uniform(-amount, amount, st["positions"].shape)
    for a in range(3):
        if engine.walled[a]:
            pos[:, a] = np.clip(pos[:, a], 0.8, engine.box[a] - 0.8)
        else:
            pos[:, a] %= engine.box[a]
    st["positions"][:] = pos
    st["list_reference"][:] = 1e9          # forces a rebuild on the next step
    return st


def brute(engine, pos):
    f = np.zeros_like(pos)
    u, wx, wy, wz = pair_forces_brute(pos, engine.lp, engine.ilp, engine.fpar[1],
                                      engine.fpar[2], engine.fpar[13], f)
    return f, u, np.array([wx, wy, wz])


@pytest.mark.parametrize("mode", ["full", "half"])
@pytest.mark.parametrize("walls,tail", [("none", "shifted"), ("z", "shifted"),
                                        ("none", "shifted-force")])
def test_list_forces_equal_brute_force(mode, walls, tail):
    s = lj_settings(potential__neighbour_list=mode, container__walls=walls,
                    potential__tail=tail, gas__particles=400)
    e = LJ(s)
    st = shaken(e)
    acc = new_accumulator()
    e.advance(st, e.settings.schedule.timestep, acc, False)   # one step: rebuild + forces
    assert acc[20] >= 1                                       # the list was rebuilt
    f, u, w = brute(e, st["positions"])
    # Same pairs, same arithmetic up to summation order.
    np.testing.assert_allclose(st["forces"], f, rtol=1e-9, atol=1e-9)
    assert e.energy(st) == pytest.approx(u, rel=1e-11)
    dt = e.settings.schedule.timestep
    np.testing.assert_allclose(acc[12:15] / dt, w, rtol=1e-10)
    assert acc[15] / dt == pytest.approx(u, rel=1e-11)


@pytest.mark.parametrize("mode", ["full", "half"])
@pytest.mark.parametrize("walls", ["none", "z"])
def test_forces_equal_brute_force_after_the_particles_moved(mode, walls):
    """A box wide enough that most list rows and cells skip the minimum image (rows
    farther than r_list + skin from every periodic face at the build, cells with no
    neighbour cell across a face), checked against the brute-force loop after 100 steps,
    when particles have crossed faces and lists have aged."""
    s = lj_settings(potential__neighbour_list=mode, container__walls=walls,
                    gas__particles=4000, gas__density=0.8, gas__temperature=1.5)
    e = LJ(s)
    margin = e.rlist + s.potential.skin
    st = e.initial_state()
    acc = new_accumulator()
    dt = s.schedule.timestep
    e.advance(st, 100 * dt, acc, False)
    assert acc[20] >= 2                                # lists were rebuilt and aged
    ref = st["list_reference"]
    periodic = [a for a in range(3) if not e.walled[a]]
    inner = np.all([(ref[:, a] > margin) & (ref[:, a] < e.box[a] - margin)
                    for a in periodic], axis=0)
    assert 0.2 < inner.mean() < 0.9                    # both kinds of rows are in play
    f, u, _ = brute(e, st["positions"])
    np.testing.assert_allclose(st["forces"], f, rtol=1e-9, atol=1e-9)
    assert e.energy(st) == pytest.approx(u, rel=1e-11)


def test_list_is_complete_and_exact():
    """Every pair within r_list is in the list, none beyond it (several cell layouts)."""
    rng = np.random.default_rng(7)
    for box, walled, reach in [((7.0, 7.0, 7.0), (False,) * 3, 1),
                               ((7.0, 7.0, 7.0), (False,) * 3, 2),   # < 5 cells: all once
                               ((12.0, 9.5, 6.7), (False, False, True), 2),
                               ((15.0, 15.0, 15.0), (True, False, False), 2),
                               ((15.0, 15.0, 15.0), (True, False, False), 1)]:
        box = np.array(box)
        n = 500
        pos = rng.random((n, 3)) * box
        rlist = 3.3
        lp, ilp = image_arrays(box, walled)
        nc, inv = cell_grid(box, rlist, reach)
        cell_start = np.zeros(int(np.prod(nc)) + 1, np.int64)
        order = np.zeros(n, np.int64)
        sort_by_cell(pos, inv, nc, cell_start, order, np.zeros(n, np.int64))
        pos = pos[order]
        d = pos[:, None, :] - pos[None, :, :]
        d -= lp * np.rint(d * ilp)
        r2 = (d ** 2).sum(-1)
        np.fill_diagonal(r2, np.inf)
        for half in (False, True):
            nbr = np.zeros((n, 4), np.int32)     # too small on purpose: must report growth
            count = np.zeros(n, np.int32)
            widest = build_neighbour_list(pos, lp, nc, cell_start, rlist ** 2, half, nbr,
                                          count, reach)
            assert widest > 4
            room = int((r2 < rlist ** 2).sum(axis=1).max()) if half else widest
            nbr = np.zeros((n, room), np.int32)
            assert build_neighbour_list(pos, lp, nc, cell_start, rlist ** 2, half, nbr,
                                        count, reach) == widest
            for i in range(n):
                want = set(np.nonzero(r2[i] < rlist ** 2)[0])
                if half:
                    want = {j for j in want if j > i}
                got = list(nbr[i, :count[i]])
                assert len(got) == len(set(got)) and set(got) == want
            if half:   # the mirrored half list is the full list
                full_longest = int((r2 < rlist ** 2).sum(axis=1).max())
                assert mirror_half_list(nbr, count, np.zeros(n, np.int64)) == full_longest
                for i in range(n):
                    assert set(nbr[i, :count[i]]) == set(np.nonzero(r2[i] < rlist ** 2)[0])


@pytest.mark.parametrize("tail", ["shifted", "shifted-force"])
def test_forces_are_minus_the_energy_gradient(tail):
    """Central finite differences of the total energy (pairs + 9-3 walls)."""
    s = lj_settings(container__walls="z", container__wall="lj93", gas__particles=200,
                    gas__density=0.5, potential__tail=tail)
    e = LJ(s)
    st = shaken(e, amount=0.1)
    e.advance(st, e.settings.schedule.timestep, new_accumulator(), False)
    rng = np.random.default_rng(1)
    h = 1e-6
    for i in rng.choice(e.n, 8, replace=False):
        for a in range(3):
            plus, minus = copy.deepcopy(st), copy.deepcopy(st)
            plus["positions"][i, a] += h
            minus["positions"][i, a] -= h
            fd = -(e.energy(plus) - e.energy(minus)) / (2 * h)
            assert st["forces"][i, a] == pytest.approx(fd, rel=1e-5, abs=1e-5)


def test_lj93_wall_force_and_pressure_bookkeeping():
    """Face impulses and wall energy of one step equal the 9-3 sums over the particles."""
    s = lj_settings(container__walls="z", container__wall="lj93", gas__particles=300,
                    gas__density=0.1, potential__tail="shifted")
    e = LJ(s)
    st = e.initial_state()
    acc = new_accumulator()
    dt = e.settings.schedule.timestep
    e.advance(st, dt, acc, False)
    eps, sig, cut = 1.0, 1.0, 3.0
    shift = lj93_potential(cut, eps, sig, 0.0)

    def fh(h):  # force away from the wall, by finite difference of the potential
        return -(lj93_potential(h + 1e-6, eps, sig, 0.0)
                 - lj93_potential(h - 1e-6, eps, sig, 0.0)) / 2e-6
    L = e.box[2]
    z = st["positions"][:, 2]
    lower, upper = z[z < cut], L - z[L - z < cut]
    assert len(lower) > 5 and len(upper) > 5
    # The impulse of a step uses the forces at the end-of-step positions.
    assert acc[4] / dt == pytest.approx(sum(fh(h) for h in lower), rel=1e-6)   # face z-
    assert acc[5] / dt == pytest.approx(sum(fh(h) for h in upper), rel=1e-6)   # face z+
    assert acc[18] / dt == pytest.approx(
        sum(lj93_potential(h, eps, sig, shift) for h in np.concatenate([lower, upper])),
        rel=1e-9)
    assert acc[0:4].tolist() == [0.0] * 4          # periodic faces get nothing
    assert lj93_minimum(1.0) == pytest.approx(0.858, abs=1e-3)
    assert fh(lj93_minimum(1.0)) == pytest.approx(0.0, abs=1e-6)


def test_tail_corrections_match_the_integrals():
    """u_tail = 2πρ ∫ u r² dr and P_tail = -(2π/3)ρ² ∫ r u'(r) r² dr beyond r_c."""
    from scipy.integrate import quad
    rho, rc = 0.8, 2.5
    u_tail, p_tail = tail_corrections(rho, rc)
    u_int = 2 * np.pi * rho * quad(lambda r: lj_pair(r) * r * r, rc, np.inf)[0]
    du = lambda r: 4 * (-12 * r ** -13 + 6 * r ** -7)  # noqa: E731
    p_int = -2 * np.pi / 3 * rho ** 2 * quad(lambda r: r * du(r) * r * r, rc, np.inf)[0]
    assert u_tail == pytest.approx(u_int, rel=1e-10)
    assert p_tail == pytest.approx(p_int, rel=1e-10)


def test_shifted_force_pair_goes_smoothly_to_zero():
    """Shifted force: u and F both vanish at r_c (and F is the derivative of u)."""
    e = LJ(lj_settings(potential__tail="shifted-force", potential__cutoff=2.5))
    pos = np.zeros((2, 3))
    f = np.zeros((2, 3))
    for r, want_u in [(2.5 - 1e-9, 0.0), (1.5, None)]:
        pos[1, 0] = r
        u, _, _, _ = pair_forces_brute(pos, np.zeros(3), np.zeros(3), e.fpar[1], e.fpar[2],
                                       e.fpar[13], f)
        if want_u is not None:
            assert abs(u) < 1e-9 and abs(f[0, 0]) < 1e-8
        else:
            fc = 48 * 2.5 ** -13 - 24 * 2.5 ** -7
            assert u == pytest.approx(lj_pair(1.5) - lj_pair(2.5) + (1.5 - 2.5) * fc, rel=1e-12)


@pytest.mark.parametrize("producing", [False, True])
def test_resume_is_bit_exact(producing):
    """Two chunks in one go equal one chunk, a deep copy of the state, a fresh engine and
    a second chunk; equilibration runs CSVR and thermal walls (random numbers), plain NVE
    production fuses half-kicks across steps (one thread)."""
    s = lj_settings(container__walls="x", container__wall="thermal",
                    container__wall_temperature=1.3, gas__particles=300,
                    potential__neighbour_list="half")
    e1 = LJ(s)
    a = e1.initial_state()
    acc = new_accumulator()
    e1.advance(a, 0.5, acc, producing)
    b = copy.deepcopy(a)
    e1.advance(a, 0.5, acc, producing)
    e2 = LJ(s)
    e2.advance(b, 0.5, new_accumulator(), producing)
    for key in a:
        np.testing.assert_array_equal(a[key], b[key], err_msg=key)
    assert acc[20] > 0 and (acc[17] != 0.0) == (not producing)   # rebuilt; thermostat
    # One chunk of 200 steps equals two of 100 (chunk boundaries change nothing).
    c = e1.initial_state()
    d = copy.deepcopy(c)
    e1.advance(c, 1.0, new_accumulator(), producing)
    e1.advance(d, 0.5, new_accumulator(), producing)
    e1.advance(d, 0.5, new_accumulator(), producing)
    for key in c:
        np.testing.assert_array_equal(c[key], d[key], err_msg=key)


def test_momentum_conserved_in_a_periodic_box():
    s = lj_settings(gas__particles=500, gas__density=0.8, schedule__thermostat="none")
    e = LJ(s)
    st = e.initial_state()
    assert np.abs(st["velocities"].sum(axis=0)).max() < 1e-10
    e.advance(st, 5.0, new_accumulator(), True)
    assert np.abs(st["velocities"].sum(axis=0)).max() < 1e-10


def test_threaded_half_list_matches_brute_force_and_one_thread():
    """Above the parallel threshold with two threads, the half list's per-thread buffers
    (summed inside the next half-kick) give the brute-force forces, and the trajectory
    matches the one-thread run to round-off."""
    import numba
    if numba.config.NUMBA_NUM_THREADS < 2:
        pytest.skip("needs NUMBA_NUM_THREADS >= 2")
    s = lj_settings(gas__particles=4000, gas__density=0.05, gas__temperature=2.0,
                    potential__tail="shifted", schedule__thermostat="none")
    e = LJ(s)
    start = e.initial_state()
    outer = numba.get_num_threads()   # earlier tests (``--threads 1``) may have lowered it
    runs = {}
    try:
        numba.set_num_threads(2)
        assert e.half and e.threads() == 2
        for threads in (1, 2):
            numba.set_num_threads(threads)
            st = copy.deepcopy(start)
            e2 = LJ(s)
            e2.advance(st, 0.1, new_accumulator(), True)
            runs[threads] = (e2, st)
    finally:
        numba.set_num_threads(outer)
    e2, st = runs[2]
    assert e2._buffers()["fbuf"].shape[0] == 2
    f, u, _ = brute(e2, st["positions"])
    np.testing.assert_allclose(st["forces"], f, rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(runs[1][1]["positions"], st["positions"], rtol=0, atol=1e-9)
