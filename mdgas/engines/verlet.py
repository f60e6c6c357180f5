"""Lennard-Jones particles: velocity Verlet with cell-sorted Verlet neighbour lists.

Reduced units throughout: σ, ε, m = 1, τ = σ sqrt(m/ε), kT/ε, pressure ε/σ³.

Physics
- Pair potential 4[(1/r)^12 - (1/r)^6] cut at r_c (``potential.cutoff``). Forces are
  those of the truncated potential in both tail treatments. ``"shifted"`` reports the
  truncated-and-shifted energy (continuous at r_c, so total energy is conserved);
  ``"corrected"`` reports the truncated energy plus the uniform-fluid long-range
  corrections (Allen & Tildesley, Computer Simulation of Liquids, 1987, eqs. 2.144):
  u_tail = (8/3)πρ[(1/3)r_c⁻⁹ - r_c⁻³] per particle and
  P_tail = (16/3)πρ²[(2/3)r_c⁻⁹ - r_c⁻³]. They assume the density is uniform (g = 1)
  beyond r_c. In a walled box that is not so near the walls (there is no fluid beyond a
  wall), so there the corrections are the bulk value at the mean density N/V: a fair
  guide for wide containers, an overestimate of the attraction for narrow ones. The wall
  pressure is a direct measurement and never gets a tail correction. ``"shifted-force"``
  also subtracts the force at r_c, u(r) - u(r_c) + (r - r_c) F(r_c) (Toxvaerd & Dyre,
  J. Chem. Phys. 134, 081102 (2011)): force and energy both reach zero at r_c, which
  removes the random walk of the total energy that the force jump at r_c drives in the
  other two (a different, slightly less attractive model: compare with references for
  it only at large r_c).
- Velocity Verlet (common practice), whole chunk of steps in one compiled call.
- CSVR thermostat (Bussi, Donadio & Parrinello, J. Chem. Phys. 126, 014101 (2007)):
  the kinetic energy follows the exact stochastic relaxation towards the canonical
  distribution with time constant ``schedule.thermostat_time``; the energy it adds is
  booked in the THERMOSTAT slot so that total energy stays checkable.
- Walls on walled axes: ``specular`` and ``thermal`` are hard walls reflecting the
  particle centre at the wall plane (:func:`mdgas.engines.walls.hard_wall_bounce`);
  ``lj93`` is the 9-3 wall (:func:`mdgas.engines.walls.lj93_wall_forces`).

Speed: the force kernels use a *full* neighbour list for dense states (no scatter to j,
so the loop vectorises under fastmath) and a *half* list with one force buffer per
thread for dilute ones, where list builds dominate and a half list halves them
(``potential.neighbour_list = "auto"`` picks by density). List rows of particles far
from the periodic faces, and cells with no neighbour cell across one, skip the minimum
image (:func:`_far_from_faces`, :func:`mdgas.engines.cells.build_neighbour_list`).
"""

from __future__ import annotations

import math
import warnings

import numba
import numpy as np
from numba import njit, prange

from ..errors import ConfigError, InstabilityError
from ..observe import IMPULSE, KINETIC, POTENTIAL, REBUILDS, STEPS, THERMOSTAT, VIRIAL, \
    WALL_ENERGY, kinetic_dof
from . import Engine, register
from .cells import (build_neighbour_list, cell_grid, image_arrays, list_capacity,
                    min_image, mirror_half_list, permute_rows, separation, sort_by_cell)
from .rng import normal, seed_state, uniform
from .start import lattice_positions, maxwell_boltzmann
from .walls import LJ93, WALL_CODES, hard_wall_bounce, lj93_minimum, lj93_potential, \
    lj93_wall_forces

#: fastmath without the no-NaN/no-Inf assumptions, so blow-ups stay detectable.
FAST = {"nsz", "arcp", "contract", "afn", "reassoc"}

#: Time-step rule (τ), applied to dt·sqrt(max(1, T_max)): above WARN a warning, above
#: LIMIT an error. Common practice puts dt ≈ 0.005 τ for the LJ liquid near T = 1;
#: energy errors grow as dt², and hotter particles meet at shorter distances.
TIMESTEP_WARN = 0.01
TIMESTEP_LIMIT = 0.02

#: A run stops when the kinetic energy exceeds this many times its set value (or is NaN).
BLOWUP_FACTOR = 100.0

#: Density above which "auto" picks the full neighbour list (measured crossover region).
FULL_LIST_DENSITY = 0.3

#: Below this many particles the kernels run on one thread: parallel regions cost more
#: than they save there, and a busy second core would stall every step at the barrier.
PARALLEL_MIN_PARTICLES = 4000

#: Below this density the start is a random non-overlapping placement, above it fcc.
RANDOM_START_DENSITY = 0.2

OK, BLOWUP, ESCAPED = 0, 1, 2

# fpar slots
_DT, _RC2, _USHIFT, _RLIST2, _SKIN, _WEPS, _WSIG, _WCUT, _WSHIFT, _WTEMP, _KTARGET, \
    _CTHERMO, _KLIMIT, _FC = range(14)
# ipar slots
_WKIND, _THERMO, _HALF, _NDOF, _REACH = range(5)


# -- forces ---------------------------------------------------------------------------

@njit(cache=True, inline="always", error_model="numpy", fastmath=FAST)
def _lj_pair(r2, ushift, fc, rc):
    """(F/r, u) of one pair at squared distance r2 < r_c², for the half-list loops.

    ``ushift`` shifts the energy to zero at r_c; ``fc`` (the force at r_c, or 0) makes it
    shifted-force. The vectorised full-list loop keeps its own copy of these lines on
    purpose: it must stay a flat loop body for LLVM to vectorise.
    """
    ir2 = 1.0 / r2
    ir6 = ir2 * ir2 * ir2
    ff = 48.0 * ir6 * (ir6 - 0.5) * ir2
    u = 4.0 * ir6 * (ir6 - 1.0) - ushift
    if fc != 0.0:
        ir = np.sqrt(ir2)
        ff -= fc * ir
        u += fc * (r2 * ir - rc)
    return ff, u


@njit(cache=True, inline="always", error_model="numpy", fastmath=FAST)
def _full_row(pos, nbr, i, m, lp, hl, rc2, ushift, fc, rc, image, shifted_force):
    """Sums over the m entries of row i of a full list: (F_x, F_y, F_z, U, W_xx, W_yy,
    W_zz) of particle i, with U and W counting each pair in full (the caller halves them).

    ``image`` (apply the minimum image) and ``shifted_force`` are constants at every
    call site, so each call is its own flat loop body that LLVM vectorises without the
    work it does not need. The LJ lines repeat :func:`_lj_pair` on purpose (see there).
    """
    xi, yi, zi = pos[i, 0], pos[i, 1], pos[i, 2]
    fx = 0.0
    fy = 0.0
    fz = 0.0
    ui = 0.0
    wx = 0.0
    wy = 0.0
    wz = 0.0
    for k in range(m):
        j = nbr[i, k]
        dx, dy, dz = separation(pos, j, xi, yi, zi, lp, hl, image)
        r2 = dx * dx + dy * dy + dz * dz
        if r2 < rc2:
            ir2 = 1.0 / r2
            ir6 = ir2 * ir2 * ir2
            ff = 48.0 * ir6 * (ir6 - 0.5) * ir2
            ui += 4.0 * ir6 * (ir6 - 1.0) - ushift
            if shifted_force:
                ir = np.sqrt(ir2)
                ff -= fc * ir
                ui += fc * (r2 * ir - rc)
            fx += ff * dx
            fy += ff * dy
            fz += ff * dz
            wx += ff * dx * dx
            wy += ff * dy * dy
            wz += ff * dz * dz
    return fx, fy, fz, ui, wx, wy, wz


@njit(cache=True, inline="always")
def _far_from_faces(xref, i, lp, margin):
    """Whether particle i was farther than ``margin`` from every periodic face at the
    list build (``xref``). With ``margin`` >= r_list + skin/2 its list row needs no
    minimum image: its neighbours were inside the box then, and neither side can have
    crossed a face since, because the list is rebuilt before anyone moves skin/2."""
    for a in range(3):
        if lp[a] > 0.0 and not (margin < xref[i, a] < lp[a] - margin):
            return False
    return True


@njit(cache=True, parallel=True, fastmath=FAST, error_model="numpy")
def pair_forces_full(pos, nbr, count, lp, rc2, ushift, fc, force, xref, margin):
    """LJ forces from a full list (each pair seen from both sides, no writes to j).

    Rows of particles far from the periodic faces (:func:`_far_from_faces`, with the
    positions ``xref`` at the build) skip the minimum image; in a large box that is
    most rows. Returns (U, W_xx, W_yy, W_zz): pair energy (shifted by ``ushift`` per
    pair inside r_c) and the diagonal pair virial Σ_pairs r_ij,a F_ij,a.
    """
    n = pos.shape[0]
    rc = math.sqrt(rc2)
    hl = 0.5 * lp
    sf = fc != 0.0
    u = 0.0
    wx = 0.0
    wy = 0.0
    wz = 0.0
    for i in prange(n):
        inner = _far_from_faces(xref, i, lp, margin)
        m = count[i]
        if sf:
            if inner:
                r = _full_row(pos, nbr, i, m, lp, hl, rc2, ushift, fc, rc, False, True)
            else:
                r = _full_row(pos, nbr, i, m, lp, hl, rc2, ushift, fc, rc, True, True)
        elif inner:
            r = _full_row(pos, nbr, i, m, lp, hl, rc2, ushift, fc, rc, False, False)
        else:
            r = _full_row(pos, nbr, i, m, lp, hl, rc2, ushift, fc, rc, True, False)
        force[i, 0] = r[0]
        force[i, 1] = r[1]
        force[i, 2] = r[2]
        u += r[3]
        wx += r[4]
        wy += r[5]
        wz += r[6]
    return 0.5 * u, 0.5 * wx, 0.5 * wy, 0.5 * wz


@njit(cache=True, inline="always", error_model="numpy", fastmath=FAST)
def _half_row(pos, nbr, i, m, lp, hl, rc2, ushift, fc, rc, out, image):
    """Row i of a half list: adds the pair forces to ``out[i]`` and subtracts them from
    ``out[j]``; returns (U, W_xx, W_yy, W_zz) of the row. ``image`` (apply the minimum
    image) is a constant at each call site."""
    xi, yi, zi = pos[i, 0], pos[i, 1], pos[i, 2]
    fx = 0.0
    fy = 0.0
    fz = 0.0
    u = 0.0
    wx = 0.0
    wy = 0.0
    wz = 0.0
    for k in range(m):
        j = nbr[i, k]
        dx, dy, dz = separation(pos, j, xi, yi, zi, lp, hl, image)
        r2 = dx * dx + dy * dy + dz * dz
        if r2 < rc2:
            ff, uij = _lj_pair(r2, ushift, fc, rc)
            u += uij
            fx += ff * dx
            fy += ff * dy
            fz += ff * dz
            out[j, 0] -= ff * dx
            out[j, 1] -= ff * dy
            out[j, 2] -= ff * dz
            wx += ff * dx * dx
            wy += ff * dy * dy
            wz += ff * dz * dz
    out[i, 0] += fx
    out[i, 1] += fy
    out[i, 2] += fz
    return u, wx, wy, wz


@njit(cache=True, inline="always", error_model="numpy", fastmath=FAST)
def _half_rows(pos, nbr, count, lp, rc2, ushift, fc, out, xref, margin, start, stop):
    """Rows start..stop-1 of a half list into ``out`` (zeroed by the caller); returns
    their (U, W_xx, W_yy, W_zz)."""
    rc = math.sqrt(rc2)
    hl = 0.5 * lp
    u = 0.0
    wx = 0.0
    wy = 0.0
    wz = 0.0
    for i in range(start, stop):
        if _far_from_faces(xref, i, lp, margin):
            r = _half_row(pos, nbr, i, count[i], lp, hl, rc2, ushift, fc, rc, out, False)
        else:
            r = _half_row(pos, nbr, i, count[i], lp, hl, rc2, ushift, fc, rc, out, True)
        u += r[0]
        wx += r[1]
        wy += r[2]
        wz += r[3]
    return u, wx, wy, wz


@njit(cache=True, parallel=True, fastmath=FAST, error_model="numpy")
def pair_forces_half(pos, nbr, count, lp, rc2, ushift, fc, force, fbuf, xref, margin,
                     defer=False):
    """LJ forces from a half list, one (N, 3) force buffer per thread in ``fbuf``.

    Each buffer takes the rows of one contiguous block of particles, so no two threads
    write the same memory; the buffers are summed in a fixed order (deterministic for a
    given buffer count). ``defer`` leaves the sum to the caller (:func:`sum_buffers`,
    or the next half-kick, which saves a parallel region). Rows far from the periodic
    faces skip the minimum image as in :func:`pair_forces_full`. Returns (U, W_xx,
    W_yy, W_zz) as :func:`pair_forces_full`.
    """
    n = pos.shape[0]
    nb = fbuf.shape[0]
    if nb == 1:   # one thread: straight into ``force``, no buffer pass, no parallel region
        force[:] = 0.0
        return _half_rows(pos, nbr, count, lp, rc2, ushift, fc, force, xref, margin, 0, n)
    parts = np.zeros((nb, 4))
    for t in prange(nb):
        b = fbuf[t]
        for i in range(n):
            b[i, 0] = 0.0
            b[i, 1] = 0.0
            b[i, 2] = 0.0
        r = _half_rows(pos, nbr, count, lp, rc2, ushift, fc, b, xref, margin, t * n // nb,
                       (t + 1) * n // nb)
        for q in range(4):
            parts[t, q] = r[q]
    if not defer:
        sum_buffers(fbuf, force)
    tot = np.zeros(4)
    for t in range(nb):
        for q in range(4):
            tot[q] += parts[t, q]
    return tot[0], tot[1], tot[2], tot[3]


@njit(cache=True, inline="always")
def _sum_row(fbuf, force, i):
    sx = 0.0
    sy = 0.0
    sz = 0.0
    for t in range(fbuf.shape[0]):
        sx += fbuf[t, i, 0]
        sy += fbuf[t, i, 1]
        sz += fbuf[t, i, 2]
    force[i, 0] = sx
    force[i, 1] = sy
    force[i, 2] = sz


@njit(cache=True, parallel=True, error_model="numpy")
def sum_buffers(fbuf, force):
    """force[i] = Σ_t fbuf[t, i], buffers in a fixed order."""
    for i in prange(force.shape[0]):
        _sum_row(fbuf, force, i)


@njit(cache=True, error_model="numpy")
def pair_forces_brute(pos, lp, ilp, rc2, ushift, fc, force):
    """O(N²) reference loop over all pairs (tests only). Returns (U, W_xx, W_yy, W_zz)."""
    n = pos.shape[0]
    force[:] = 0.0
    u = 0.0
    w = np.zeros(3)
    d = np.empty(3)
    for i in range(n):
        for j in range(i + 1, n):
            for a in range(3):
                d[a] = pos[i, a] - pos[j, a]
                d[a] -= lp[a] * np.rint(d[a] * ilp[a])
            r2 = d[0] * d[0] + d[1] * d[1] + d[2] * d[2]
            if r2 < rc2:
                ir6 = 1.0 / (r2 * r2 * r2)
                r = math.sqrt(r2)
                ff = 48.0 * ir6 * (ir6 - 0.5) / r2 - fc / r
                u += 4.0 * ir6 * (ir6 - 1.0) - ushift + fc * (r - math.sqrt(rc2))
                for a in range(3):
                    force[i, a] += ff * d[a]
                    force[j, a] -= ff * d[a]
                    w[a] += ff * d[a] * d[a]
    return u, w[0], w[1], w[2]


# -- thermostat -----------------------------------------------------------------------

@njit(cache=True)
def _gamma(shape, rng):
    """Gamma(shape, 1) deviate for shape >= 1 (Marsaglia & Tsang, ACM TOMS 26, 363 (2000))."""
    d = shape - 1.0 / 3.0
    c = 1.0 / math.sqrt(9.0 * d)
    while True:
        x = normal(rng)
        v = 1.0 + c * x
        if v <= 0.0:
            continue
        v = v * v * v
        if math.log(uniform(rng)) < 0.5 * x * x + d - d * v + d * math.log(v):
            return d * v


@njit(cache=True)
def _chi_squared(k, rng):
    """Sum of k squared standard normals (a chi-squared deviate with k degrees)."""
    if k <= 0:
        return 0.0
    if k < 3:
        s = 0.0
        for _ in range(k):
            z = normal(rng)
            s += z * z
        return s
    return 2.0 * _gamma(0.5 * k, rng)


@njit(cache=True)
def csvr_factor(ke, target, ndof, c, rng):
    """Velocity scale factor of one CSVR step (Bussi, Donadio & Parrinello 2007, eq. A7).

    ``ke`` the kinetic energy now, ``target`` = ndof·T/2, ``c`` = exp(-dt/τ_T).
    """
    if ke <= 0.0 or ndof < 1:
        return 1.0
    r1 = normal(rng)
    s = _chi_squared(ndof - 1, rng)
    new = ke + (1.0 - c) * (target * (s + r1 * r1) / ndof - ke) \
        + 2.0 * r1 * math.sqrt(ke * target / ndof * (1.0 - c) * c)
    return math.sqrt(max(new, 0.0) / ke)


# -- the chunk kernel -----------------------------------------------------------------

@njit(cache=True, error_model="numpy")
def _rebuild(x, v, ids, xref, nbr, count, cell_start, order, cell_tmp, tmp3, itmp,
             lp, ncell, inv_width, rlist2, half, reach):
    """Sort particles by cell (x, v and the slot ids move together) and rebuild the list;
    grows ``nbr`` when a row does not fit. Returns the (possibly new) ``nbr``."""
    n = x.shape[0]
    sort_by_cell(x, inv_width, ncell, cell_start, order, cell_tmp)
    permute_rows(x, order, tmp3)
    permute_rows(v, order, tmp3)
    for k in range(n):
        itmp[k] = ids[order[k]]
    for k in range(n):
        ids[k] = itmp[k]
    while True:
        # Always a half build (each distance once); a full list is its mirror image.
        widest = build_neighbour_list(x, lp, ncell, cell_start, rlist2, True, nbr, count,
                                      reach)
        if widest <= nbr.shape[1] and not half:
            widest = mirror_half_list(nbr, count, cell_tmp)
        if widest <= nbr.shape[1]:
            break
        nbr = np.empty((n, widest + widest // 4 + 8), np.int32)
    for k in range(n):
        for a in range(3):
            xref[k, a] = x[k, a]
    return nbr


@njit(cache=True, error_model="numpy")
def _forces(x, nbr, count, box, lp, walled, fpar, ipar, f, fbuf, fwall, xref, defer=False):
    """All forces on the particles; returns (U_pairs, W_xx, W_yy, W_zz, U_walls).
    ``xref`` the positions at the list build. ``defer`` may leave the pair forces in
    the per-thread buffers (no 9-3 walls only)."""
    # Margin r_list + skin: twice the skin/2 that image-free rows need, against rounding.
    margin = math.sqrt(fpar[_RLIST2]) + fpar[_SKIN]
    if ipar[_HALF]:
        u, wx, wy, wz = pair_forces_half(x, nbr, count, lp, fpar[_RC2], fpar[_USHIFT],
                                         fpar[_FC], f, fbuf, xref, margin,
                                         defer and ipar[_WKIND] != LJ93)
    else:
        u, wx, wy, wz = pair_forces_full(x, nbr, count, lp, fpar[_RC2], fpar[_USHIFT],
                                         fpar[_FC], f, xref, margin)
    uw = 0.0
    if ipar[_WKIND] == LJ93:
        uw = lj93_wall_forces(x, box, walled, fpar[_WEPS], fpar[_WSIG], fpar[_WCUT],
                              fpar[_WSHIFT], f, fwall)
    return u, wx, wy, wz, uw


@njit(cache=True, parallel=True, error_model="numpy")
def prepare(x, v, ids, xref, nbr, count, cell_start, order, cell_tmp, tmp3, itmp, f, fbuf,
            box, lp, walled, ncell, inv_width, fpar, ipar):
    """Sort, build the list and compute forces for a fresh state; returns ``nbr``."""
    nbr = _rebuild(x, v, ids, xref, nbr, count, cell_start, order, cell_tmp, tmp3, itmp,
                   lp, ncell, inv_width, fpar[_RLIST2], ipar[_HALF] == 1, ipar[_REACH])
    fwall = np.zeros(6)
    _forces(x, nbr, count, box, lp, walled, fpar, ipar, f, fbuf, fwall, xref)
    return nbr


@njit(cache=True, inline="always")
def _wrap(x, i, a, L):
    """Back into [0, L) on a periodic axis (a particle moves far less than L per step)."""
    if x[i, a] < 0.0:
        x[i, a] += L
    elif x[i, a] >= L:
        x[i, a] -= L
    if x[i, a] >= L or x[i, a] < 0.0:
        x[i, a] -= L * math.floor(x[i, a] / L)
        if x[i, a] >= L:
            x[i, a] = 0.0


@njit(cache=True, inline="always")
def _moved2(x, xref, i, lp):
    """Squared displacement of particle i since the list build (minimum image)."""
    s = 0.0
    for a in range(3):
        d = min_image(x[i, a] - xref[i, a], lp[a], 0.5 * lp[a])
        s += d * d
    return s


@njit(cache=True, parallel=True, error_model="numpy")
def _kick_drift(x, v, f, box, walled, dt, hdt, xref, lp):
    """First half of a velocity-Verlet step: v += f dt/2, x += v dt (wrapped).
    Returns the largest squared displacement since the last list build."""
    moved = 0.0
    for i in prange(x.shape[0]):
        for a in range(3):
            v[i, a] += hdt * f[i, a]
            x[i, a] += dt * v[i, a]
            if not walled[a]:
                _wrap(x, i, a, box[a])
        moved = max(moved, _moved2(x, xref, i, lp))
    return moved


@njit(cache=True, parallel=True, error_model="numpy")
def _kick(v, f, hdt, fbuf, pending):
    """Second half-kick; returns Σ v² after it. ``pending``: first complete ``f`` from
    the per-thread force buffers (see :func:`pair_forces_half`)."""
    ke2 = 0.0
    for i in prange(v.shape[0]):
        if pending:
            _sum_row(fbuf, f, i)
        s = 0.0
        for a in range(3):
            v[i, a] += hdt * f[i, a]
            s += v[i, a] * v[i, a]
        ke2 += s
    return ke2


@njit(cache=True, parallel=True, error_model="numpy")
def _kick_kick_drift(x, v, f, box, walled, dt, hdt, xref, lp, fbuf, pending):
    """The second half-kick of one step fused with the first half of the next, in one
    pass (same arithmetic as :func:`_kick` then :func:`_kick_drift`); returns Σ v² at
    the end of the step and the largest squared displacement since the list build."""
    ke2 = 0.0
    moved = 0.0
    for i in prange(x.shape[0]):
        if pending:
            _sum_row(fbuf, f, i)
        s = 0.0
        for a in range(3):
            vh = v[i, a] + hdt * f[i, a]
            s += vh * vh
            v[i, a] = vh + hdt * f[i, a]
            x[i, a] += dt * v[i, a]
            if not walled[a]:
                _wrap(x, i, a, box[a])
        ke2 += s
        moved = max(moved, _moved2(x, xref, i, lp))
    return ke2, moved


@njit(cache=True, error_model="numpy")
def verlet_chunk(nsteps, x, v, f, ids, xref, nbr, count, cell_start, order, cell_tmp, tmp3,
                 itmp, fbuf, box, lp, walled, ncell, inv_width, fpar, ipar, acc, rng,
                 status):
    """Run ``nsteps`` velocity-Verlet steps on the cell-sorted working arrays.

    Per step it adds U·dt, W_aa·dt, wall force impulses and wall energy·dt, thermostat
    work, one step and any list rebuilds to ``acc``. Stops early with ``status[0]`` =
    BLOWUP (kinetic energy NaN or above its limit) or ESCAPED (a particle through a
    wall), ``status[1]`` the step and ``status[2]`` the particle. Returns
    (steps done, nbr), ``nbr`` possibly regrown.
    """
    n = x.shape[0]
    dt = fpar[_DT]
    hdt = 0.5 * dt
    kind = ipar[_WKIND]
    hard = kind != LJ93
    any_wall = walled[0] or walled[1] or walled[2]
    half = ipar[_HALF] == 1
    fwall = np.zeros(6)
    done = 0
    thermo = ipar[_THERMO] == 1
    # Pair forces left in the per-thread buffers, summed by the next half-kick.
    pending = half and fbuf.shape[0] > 1 and kind != LJ93
    moved = _kick_drift(x, v, f, box, walled, dt, hdt, xref, lp)
    for step in range(nsteps):
        if any_wall:
            bad = -1
            for i in range(n):
                for a in range(3):
                    if not walled[a]:
                        continue
                    if hard:
                        if x[i, a] < 0.0:
                            x[i, a] = -x[i, a]
                            hard_wall_bounce(v, i, a, False, kind, fpar[_WTEMP], acc, rng)
                        elif x[i, a] > box[a]:
                            x[i, a] = 2.0 * box[a] - x[i, a]
                            hard_wall_bounce(v, i, a, True, kind, fpar[_WTEMP], acc, rng)
                    if x[i, a] < 0.0 or x[i, a] > box[a] or x[i, a] != x[i, a]:
                        bad = i
            if bad >= 0:
                status[0] = ESCAPED
                status[1] = step
                status[2] = ids[bad]
                return done, nbr
        # The list holds while no pair can have closed in by more than the skin: each
        # particle has moved less than skin/2 since the build (hard-wall reflections
        # only shorten the displacement measured before them).
        if 4.0 * moved > fpar[_SKIN] * fpar[_SKIN]:
            nbr = _rebuild(x, v, ids, xref, nbr, count, cell_start, order, cell_tmp, tmp3,
                           itmp, lp, ncell, inv_width, fpar[_RLIST2], half, ipar[_REACH])
            acc[REBUILDS] += 1.0
        u, wx, wy, wz, uw = _forces(x, nbr, count, box, lp, walled, fpar, ipar, f, fbuf,
                                    fwall, xref, True)
        last = step == nsteps - 1
        # Plain NVE fuses this step's last half-kick with the next step's first half;
        # the thermostat needs the end-of-step kinetic energy first, so it cannot.
        if thermo or last:
            ke = 0.5 * _kick(v, f, hdt, fbuf, pending)
        else:
            ke2, moved = _kick_kick_drift(x, v, f, box, walled, dt, hdt, xref, lp, fbuf,
                                          pending)
            ke = 0.5 * ke2
        if thermo:
            alpha = csvr_factor(ke, fpar[_KTARGET], ipar[_NDOF], fpar[_CTHERMO], rng)
            _scale(v, alpha)
            acc[THERMOSTAT] += (alpha * alpha - 1.0) * ke
            ke *= alpha * alpha
        acc[POTENTIAL] += u * dt
        acc[KINETIC] += ke * dt
        acc[VIRIAL] += wx * dt
        acc[VIRIAL + 1] += wy * dt
        acc[VIRIAL + 2] += wz * dt
        if kind == LJ93:
            for face in range(6):
                acc[IMPULSE + face] += fwall[face] * dt
            acc[WALL_ENERGY] += uw * dt
        acc[STEPS] += 1.0
        done += 1
        if not (ke < fpar[_KLIMIT]):
            status[0] = BLOWUP
            status[1] = step
            return done, nbr
        if thermo and not last:
            moved = _kick_drift(x, v, f, box, walled, dt, hdt, xref, lp)
    return done, nbr


@njit(cache=True, parallel=True, error_model="numpy")
def _scale(v, alpha):
    for i in prange(v.shape[0]):
        for a in range(3):
            v[i, a] *= alpha


# -- the engine -----------------------------------------------------------------------

def tail_corrections(density: float, cutoff: float) -> tuple[float, float]:
    """(u_tail per particle (ε), P_tail (ε/σ³)) for a uniform LJ fluid cut at ``cutoff``
    (Allen & Tildesley 1987, eqs. 2.144)."""
    ir3 = cutoff ** -3
    ir9 = ir3 ** 3
    return (8.0 / 3.0 * math.pi * density * (ir9 / 3.0 - ir3),
            16.0 / 3.0 * math.pi * density ** 2 * (2.0 / 3.0 * ir9 - ir3))


def lj_pair(r: float) -> float:
    """The full LJ pair potential 4(r⁻¹² - r⁻⁶) (ε)."""
    ir6 = r ** -6
    return 4.0 * ir6 * (ir6 - 1.0)


def _hottest(settings) -> float:
    return max(1.0, settings.gas.temperature, settings.container.wall_temperature or 0.0)


@register
class LennardJones(Engine):
    """Lennard-Jones 12-6 particles, velocity Verlet, CSVR thermostat, walls or periodic."""

    name = "lennard-jones"

    @classmethod
    def validate(cls, settings) -> None:
        s, src = settings, settings.source
        p, sch, c = s.potential, s.schedule, s.container
        rc, rlist = p.cutoff, p.cutoff + p.skin
        if rc < 1.0:
            raise ConfigError(src, "potential.cutoff", f"{rc} σ cuts into the repulsive core",
                              "use at least 2^(1/6) ≈ 1.12 σ (repulsive only) or 2.5-3 σ")
        for a, (L, w) in enumerate(zip(s.box, s.walled)):
            if not w and L < 2.0 * rlist:
                axis = "xyz"[a]
                raise ConfigError(
                    src, "potential.cutoff",
                    f"the periodic box edge along {axis} is {L:.4g} σ, shorter than "
                    f"2 (cutoff + skin) = {2 * rlist:.4g} σ, so a particle would meet its "
                    "own image",
                    "raise gas.particles, lower gas.density, or shorten potential.cutoff / "
                    "potential.skin")
        dt_eff = sch.timestep * math.sqrt(_hottest(s))
        if dt_eff > TIMESTEP_LIMIT:
            raise ConfigError(
                src, "schedule.timestep",
                f"{sch.timestep} τ is too large to be stable (rule: dt·sqrt(max(1, T)) must "
                f"not exceed {TIMESTEP_LIMIT} τ; here it is {dt_eff:.3g} τ)",
                f"use {0.005 / math.sqrt(_hottest(s)):.3g} τ or less")
        if dt_eff > TIMESTEP_WARN:
            warnings.warn(f"{src}: schedule.timestep: {sch.timestep} τ is large "
                          f"(dt·sqrt(max(1, T)) = {dt_eff:.3g} τ > {TIMESTEP_WARN} τ): energy "
                          "conservation will be poor; 0.005 τ is the usual choice",
                          UserWarning, stacklevel=2)
        if s.output.sample_every < sch.timestep:
            raise ConfigError(src, "output.sample_every",
                              f"{s.output.sample_every} τ is shorter than one time step "
                              f"({sch.timestep} τ)", "make sample_every a multiple of the time step")
        if c.wall == "lj93" and c.walls != "none":
            zmin = lj93_minimum(c.wall_sigma)
            if c.wall_cutoff < zmin:
                raise ConfigError(src, "container.wall_cutoff",
                                  f"{c.wall_cutoff} σ is inside the 9-3 wall's minimum at "
                                  f"{zmin:.3g} σ, leaving a purely repulsive stub",
                                  f"use at least {zmin:.3g} σ (≈ 3 σ_w keeps the attraction)")
            for a, (L, w) in enumerate(zip(s.box, s.walled)):
                if w and L < 2.0 * c.wall_cutoff:
                    raise ConfigError(src, "container.wall_cutoff",
                                      f"{c.wall_cutoff} σ is more than half the walled edge "
                                      f"along {'xyz'[a]} ({L:.4g} σ)",
                                      "shorten wall_cutoff or make the container wider")
                if w and L < 4.0 * c.wall_sigma:
                    raise ConfigError(src, "container.wall_sigma",
                                      f"the walled edge along {'xyz'[a]} ({L:.4g} σ) leaves "
                                      "no room between the walls' repulsive layers",
                                      "lower wall_sigma or make the container wider")
            if c.wall_epsilon > 50.0 * s.gas.temperature:
                raise ConfigError(src, "container.wall_epsilon",
                                  f"{c.wall_epsilon} ε is over 50 kT: every particle would "
                                  "stick to the walls", "use a value of a few ε or less")

    def __init__(self, settings) -> None:
        super().__init__(settings)
        s = settings
        p, c, sch = s.potential, s.container, s.schedule
        self.n = s.gas.particles
        rc = p.cutoff
        self.rlist = rc + p.skin
        fc = 0.0
        if p.tail == "corrected":
            self.energy_tail, self.pressure_tail = tail_corrections(s.gas.density, rc)
            ushift = 0.0
        else:
            self.energy_tail, self.pressure_tail = 0.0, 0.0
            ushift = lj_pair(rc)
            if p.tail == "shifted-force":
                fc = 48.0 * rc ** -13 - 24.0 * rc ** -7   # F(r_c) = -u'(r_c)
        mode = getattr(p, "neighbour_list", "auto")
        self.half = (s.gas.density < FULL_LIST_DENSITY) if mode == "auto" else mode == "half"
        self.lp, self.ilp = image_arrays(self.box, s.walled)
        # Finer cells (reach 2) scan less volume per particle; they pay where cells are
        # well filled, i.e. for the dense states that use the full list.
        self.reach = 1 if self.half else 2
        self.ncell, self.inv_width = cell_grid(self.box, self.rlist, self.reach)
        self.kind = WALL_CODES[c.wall] if c.walls != "none" else WALL_CODES["specular"]
        wall_shift = lj93_potential(c.wall_cutoff, c.wall_epsilon, c.wall_sigma, 0.0)
        self.ndof = kinetic_dof(s)
        self.fpar = np.zeros(14)
        self.fpar[_FC] = fc
        self.fpar[[_DT, _RC2, _USHIFT, _RLIST2, _SKIN]] = [sch.timestep, rc * rc, ushift,
                                                           self.rlist ** 2, p.skin]
        self.fpar[[_WEPS, _WSIG, _WCUT, _WSHIFT, _WTEMP]] = [
            c.wall_epsilon, c.wall_sigma, c.wall_cutoff, wall_shift, c.wall_temperature or 0.0]
        self.fpar[_KTARGET] = 0.5 * self.ndof * s.gas.temperature
        self.fpar[_CTHERMO] = math.exp(-sch.timestep / sch.thermostat_time)
        self.fpar[_KLIMIT] = BLOWUP_FACTOR * 1.5 * self.n * _hottest(s)
        self.ipar = np.array([self.kind, 0, int(self.half), self.ndof, self.reach],
                             dtype=np.int64)
        self._scratch: dict[str, np.ndarray] = {}

    # -- scratch arrays (not state: rebuilt freely) ---------------------------------
    def threads(self) -> int:
        """Threads the kernels use: numba's setting (``--threads``, NUMBA_NUM_THREADS),
        or 1 for small systems."""
        return 1 if self.n < PARALLEL_MIN_PARTICLES else numba.get_num_threads()

    def _buffers(self) -> dict[str, np.ndarray]:
        n = self.n
        nthreads = self.threads() if self.half else 1
        sc = self._scratch
        if not sc or sc["fbuf"].shape[0] != nthreads:
            ncells = int(np.prod(self.ncell))
            sc.update(cell_start=np.zeros(ncells + 1, np.int64), order=np.zeros(n, np.int64),
                      cell_tmp=np.zeros(n, np.int64), tmp3=np.zeros((n, 3)),
                      itmp=np.zeros(n, np.int64),
                      fbuf=np.zeros((nthreads, n if self.half else 1, 3)),
                      status=np.zeros(3, np.int64))
        return sc

    def _placement(self, rng: np.random.Generator) -> np.ndarray:
        s, c = self.settings, self.settings.container
        lo, hi = np.zeros(3), self.box.copy()
        if c.wall == "lj93":
            inset = 0.75 * c.wall_sigma  # where the 9-3 wall energy is about -1 ε_w
            for a in range(3):
                if s.walled[a]:
                    lo[a], hi[a] = inset, self.box[a] - inset
        if s.gas.density < RANDOM_START_DENSITY:
            # Random non-overlapping centres (no pair closer than 1 σ, where U = 0): a gas
            # starts near its equilibrium structure instead of melting a lattice.
            from .events import random_placement
            pos, placed = random_placement(self.n, lo, hi, self.box, self.walled,
                                           seed_state(s.schedule.seed, stream=4), 200 * self.n)
            if placed == self.n:
                return pos
        return lattice_positions(self.n, lo, hi, rng)

    def initial_state(self) -> dict[str, np.ndarray]:
        s = self.settings
        rng = np.random.default_rng(s.schedule.seed)
        pos = self._placement(rng)
        vel = maxwell_boltzmann(rng, self.n, s.gas.temperature,
                                periodic=s.container.walls == "none")
        n = self.n
        ids = np.arange(n, dtype=np.int64)
        sc = self._buffers()
        cap = list_capacity(s.gas.density, self.rlist, self.half)
        nbr = np.zeros((n, cap), np.int32)
        count = np.zeros(n, np.int32)
        xref = np.zeros((n, 3))
        f = np.zeros((n, 3))
        nbr = prepare(pos, vel, ids, xref, nbr, count, sc["cell_start"], sc["order"],
                      sc["cell_tmp"], sc["tmp3"], sc["itmp"], f, sc["fbuf"], self.box, self.lp,
                      self.walled, self.ncell, self.inv_width, self.fpar, self.ipar)
        # The particles are labelled in their first cell-sorted order.
        ids[:] = np.arange(n)
        return {"positions": pos, "velocities": vel, "forces": f, "time": np.zeros(1),
                "rng": seed_state(s.schedule.seed, stream=3), "slot_ids": ids,
                "neighbours": nbr, "neighbour_count": count, "list_reference": xref}

    def advance(self, state, duration, acc, producing) -> None:
        sch = self.settings.schedule
        dt = sch.timestep
        nsteps = max(1, int(round(duration / dt)))
        thermostat = sch.produce_thermostat if producing else sch.thermostat
        self.ipar[_THERMO] = 1 if thermostat == "csvr" else 0
        ids = state["slot_ids"]
        x = state["positions"][ids]
        v = state["velocities"][ids]
        f = state["forces"][ids]
        sc = self._buffers()
        status = sc["status"]
        status[:] = 0
        outer = numba.get_num_threads()
        numba.set_num_threads(self.threads())
        try:
            done, nbr = verlet_chunk(
                nsteps, x, v, f, ids, state["list_reference"], state["neighbours"],
                state["neighbour_count"], sc["cell_start"], sc["order"], sc["cell_tmp"],
                sc["tmp3"], sc["itmp"], sc["fbuf"], self.box, self.lp, self.walled,
                self.ncell, self.inv_width, self.fpar, self.ipar, acc, state["rng"], status)
        finally:
            numba.set_num_threads(outer)
        state["neighbours"] = nbr
        state["positions"][ids] = x
        state["velocities"][ids] = v
        state["forces"][ids] = f
        t0 = float(state["time"][0])
        state["time"][0] = t0 + done * dt
        if status[0] != OK:
            t_fail = t0 + (int(status[1]) + 1) * dt
            if status[0] == ESCAPED:
                what = (f"particle {int(status[2])} passed through a wall (a 9-3 wall was "
                        "overrun, or a hard-wall particle moved farther than the box in one step)")
            else:
                what = ("the kinetic energy blew up (became NaN or exceeded "
                        f"{BLOWUP_FACTOR:g} times its set value): particles came too close")
            self._problem = f"{what} at t = {t_fail:.6g} τ"
            raise InstabilityError(
                f"the run became unstable at t = {t_fail:.6g} τ: {what}. Data up to the last "
                f"sample is kept. Try a smaller schedule.timestep (now {dt} τ), a lower "
                "density or temperature, or a longer schedule.equilibrate with the thermostat.")

    def health(self, state) -> str:
        return getattr(self, "_problem", "") or super().health(state)

    # -- helpers for analysis and tests ----------------------------------------------
    def energy(self, state) -> float:
        """Total potential energy of a state (pairs + walls, no tail, shifted when the
        tail is "shifted"), ε."""
        ids = state["slot_ids"]
        x = state["positions"][ids]
        f = np.zeros_like(x)
        sc = self._buffers()
        fwall = np.zeros(6)
        u, _, _, _, uw = _forces(x, state["neighbours"], state["neighbour_count"], self.box,
                                 self.lp, self.walled, self.fpar, self.ipar, f, sc["fbuf"],
                                 fwall, state["list_reference"])
        return u + uw

    def cost_per_time(self) -> float:
        s = self.settings
        nb = s.gas.density * 4.0 / 3.0 * math.pi * self.rlist ** 3
        per_step = self.n * (60e-9 + (0.6e-9 if self.half else 1.2e-9) * nb)
        return per_step / s.schedule.timestep / max(1.0, 0.8 * numba.get_num_threads())

    def memory_bytes(self) -> int:
        n = self.n
        cap = list_capacity(self.settings.gas.density, self.rlist, self.half)
        threads = numba.get_num_threads() if self.half else 0
        per = 7 * 24 + 4 * cap + 4 + 4 * 8 + 24 * threads
        return int(n * per + 8 * int(np.prod(self.ncell)))
