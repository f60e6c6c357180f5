"""Hard spheres by exact event-driven dynamics (Alder & Wainwright's method).

Identical spheres of diameter σ = 1 and mass m = 1 fly in straight lines between
events. Three kinds of event are predicted exactly: a pair collision, a cell crossing
(cells of side >= σ, so only the 27 surrounding cells can hold a partner) and a wall
hit (on a walled axis the centre reflects σ/2 from the wall plane). Each particle
keeps one pending event — its earliest collision candidate or its next crossing/wall
hit — in an indexed binary min-heap of N entries. Predictions are invalidated
lazily: a collision candidate remembers its partner's event counter and is dropped
when the partner has changed velocity since. Particles are moved lazily too: each
has a local time and is only brought up to date when it takes part in an event.

One call of :func:`hs_chunk` advances the whole system by one chunk of simulated time
in compiled code. The calendar is rebuilt from positions and velocities at the start
of every chunk and all particles are synchronised to the chunk end before it returns,
so the state dict (positions, velocities, time, rng) is a true snapshot, small to
checkpoint, and a resumed run repeats the uninterrupted one bit for bit.

Volume convention: ``gas.density`` is N σ³ / V with V the whole box between the wall
planes; packing fraction η = π ρ σ³ / 6. On a walled axis the centres can reach only
L - σ of the edge L, which matters when L is not large compared with σ.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
from numba import njit

from ..errors import ConfigError
from ..observe import COLLISIONS, STEPS, VIRIAL
from . import Engine, register
from .rng import seed_state, uniform
from .start import lattice_positions, maxwell_boltzmann
from .walls import WALL_CODES, hard_wall_bounce

#: Sphere radius (σ). The centre of a sphere touching a wall is this far from the plane.
RADIUS = 0.5

#: Fluid-solid coexistence of hard spheres, Hoover & Ree, J. Chem. Phys. 49, 3609 (1968):
#: the fluid freezes at η = 0.494 and the solid melts at η = 0.545.
FREEZING_ETA = 0.494
MELTING_ETA = 0.545
#: Densest state started from the lattice that is expected to melt during equilibration.
LATTICE_MELT_ETA = 0.50
#: Random sequential placement is used below this packing fraction (of the volume the
#: centres can reach); it slows sharply towards its jamming limit near η = 0.38.
RANDOM_START_ETA = 0.30
#: Smallest edge (σ) of a periodic axis: the cell scheme needs 3 cells of side >= σ.
MIN_PERIODIC_EDGE = 3.0
#: Smallest edge (σ) of a walled axis: room for one layer of spheres (L - σ >= σ).
MIN_WALLED_EDGE = 2.0

#: Event codes below WALL are cell crossings through face 2·axis + up; codes WALL + face
#: are wall hits at that face.
WALL = 6

# Columns of the hot per-particle array: position (3), velocity (3), local time, and
# in the last 8 bytes two int32 (seen through an int32 view of the same rows, columns
# 14 and 15): the next particle in the cell list and the event counter. One row is 64
# bytes, aligned, so a neighbour costs one cache line.
_T = 6
_NXT = 14
_CNT = 15


def packing_fraction(density: float) -> float:
    """η = π ρ σ³ / 6."""
    return math.pi * density / 6.0


def accessible_volume(box: np.ndarray, walled) -> float:
    """Volume (σ³) the sphere centres can reach: L - σ per walled axis, L per periodic one."""
    return float(np.prod([L - 2 * RADIUS if w else L for L, w in zip(box, walled)]))


# Heap ---------------------------------------------------------------------------------

@njit(cache=True, inline="always", error_model="numpy")
def _sift_up(heap, hpos, k, t, i):
    # heap[k] = (event time, particle as a float): one cache line holds both
    while k > 0:
        p = (k - 1) >> 1
        if heap[p, 0] <= t:
            break
        heap[k, 0] = heap[p, 0]
        heap[k, 1] = heap[p, 1]
        hpos[int(heap[k, 1])] = k
        k = p
    heap[k, 0] = t
    heap[k, 1] = i
    hpos[i] = k


@njit(cache=True, inline="always", error_model="numpy")
def _sift_down(heap, hpos, k, t, i):
    n = heap.shape[0]
    while True:
        c = 2 * k + 1
        if c >= n:
            break
        if c + 1 < n and heap[c + 1, 0] < heap[c, 0]:
            c += 1
        if heap[c, 0] >= t:
            break
        heap[k, 0] = heap[c, 0]
        heap[k, 1] = heap[c, 1]
        hpos[int(heap[k, 1])] = k
        k = c
    heap[k, 0] = t
    heap[k, 1] = i
    hpos[i] = k


@njit(cache=True, inline="always", error_model="numpy")
def _reschedule(heap, hpos, tcol, tcross, i):
    t = tcol[i] if tcol[i] < tcross[i] else tcross[i]
    k = hpos[i]
    if k > 0 and t < heap[(k - 1) >> 1, 0]:
        _sift_up(heap, hpos, k, t, i)
    else:
        _sift_down(heap, hpos, k, t, i)


# Cells --------------------------------------------------------------------------------

@njit(cache=True, inline="always", error_model="numpy")
def _cell_of(cell, nc, i):
    return (cell[i, 2] * nc[1] + cell[i, 1]) * nc[0] + cell[i, 0]


@njit(cache=True, inline="always", error_model="numpy")
def _cell_insert(head, nxt, prv, cell, nc, i):
    c = _cell_of(cell, nc, i)
    h = head[c]
    nxt[i, _NXT] = h
    prv[i] = -1
    if h >= 0:
        prv[h] = i
    head[c] = i


@njit(cache=True, inline="always", error_model="numpy")
def _cell_remove(head, nxt, prv, cell, nc, i):
    n, p = nxt[i, _NXT], prv[i]
    if p >= 0:
        nxt[p, _NXT] = n
    else:
        head[_cell_of(cell, nc, i)] = n
    if n >= 0:
        prv[n] = p


# Prediction ---------------------------------------------------------------------------

@njit(cache=True, inline="always", error_model="numpy")
def _move(P, i, t):
    dt = t - P[i, _T]
    P[i, 0] += P[i, 3] * dt
    P[i, 1] += P[i, 4] * dt
    P[i, 2] += P[i, 5] * dt
    P[i, _T] = t


@njit(cache=True, inline="always", error_model="numpy")
def _crossing(P, cell, nc, cs, box, walled, tcross, code, i, now):
    """Next cell crossing or wall hit of ``i`` (up to date at ``now``)."""
    best = np.inf
    which = -1
    for d in range(3):
        v = P[i, 3 + d]
        if v > 0.0:
            if walled[d] and cell[i, d] == nc[d] - 1:
                dt = (box[d] - RADIUS - P[i, d]) / v
                c = WALL + 2 * d + 1
            else:
                dt = ((cell[i, d] + 1) * cs[d] - P[i, d]) / v
                c = 2 * d + 1
        elif v < 0.0:
            if walled[d] and cell[i, d] == 0:
                dt = (RADIUS - P[i, d]) / v
                c = WALL + 2 * d
            else:
                dt = (cell[i, d] * cs[d] - P[i, d]) / v
                c = 2 * d
        else:
            continue
        if dt < best:
            best = dt
            which = c
    if best < 0.0:
        best = 0.0  # round-off: already on the face
    tcross[i] = now + best
    code[i] = which


@njit(cache=True, inline="always", error_model="numpy")
def _scan(P, head, nxt, cell, nc, box, walled, tcol, partner, pcount, i, now,
          layer_axis, layer_side, skip):
    """Look for a collision of ``i`` earlier than its candidate in the neighbour cells.

    ``layer_axis`` < 0 searches all 27 cells; otherwise only the layer of 9 at offset
    ``layer_side`` along that axis (the cells that just became adjacent).
    """
    best = tcol[i]
    bestj = -1
    xi, yi, zi = P[i, 0], P[i, 1], P[i, 2]
    vxi, vyi, vzi = P[i, 3], P[i, 4], P[i, 5]
    lo0, hi0, lo1, hi1, lo2, hi2 = -1, 1, -1, 1, -1, 1
    if layer_axis == 0:
        lo0 = hi0 = layer_side
    elif layer_axis == 1:
        lo1 = hi1 = layer_side
    elif layer_axis == 2:
        lo2 = hi2 = layer_side
    for oz in range(lo2, hi2 + 1):
        cz = cell[i, 2] + oz
        sz = 0.0
        if cz < 0:
            if walled[2]:
                continue
            cz += nc[2]
            sz = -box[2]
        elif cz >= nc[2]:
            if walled[2]:
                continue
            cz -= nc[2]
            sz = box[2]
        for oy in range(lo1, hi1 + 1):
            cy = cell[i, 1] + oy
            sy = 0.0
            if cy < 0:
                if walled[1]:
                    continue
                cy += nc[1]
                sy = -box[1]
            elif cy >= nc[1]:
                if walled[1]:
                    continue
                cy -= nc[1]
                sy = box[1]
            for ox in range(lo0, hi0 + 1):
                cx = cell[i, 0] + ox
                sx = 0.0
                if cx < 0:
                    if walled[0]:
                        continue
                    cx += nc[0]
                    sx = -box[0]
                elif cx >= nc[0]:
                    if walled[0]:
                        continue
                    cx -= nc[0]
                    sx = box[0]
                # i's image next to the neighbour cell as stored
                qx, qy, qz = xi - sx, yi - sy, zi - sz
                j = head[(cz * nc[1] + cy) * nc[0] + cx]
                while j >= 0:
                    if j != i and j != skip:
                        dt = now - P[j, _T]
                        dx = P[j, 0] + P[j, 3] * dt - qx
                        dy = P[j, 1] + P[j, 4] * dt - qy
                        dz = P[j, 2] + P[j, 5] * dt - qz
                        ux = P[j, 3] - vxi
                        uy = P[j, 4] - vyi
                        uz = P[j, 5] - vzi
                        b = dx * ux + dy * uy + dz * uz
                        if b < 0.0:  # approaching
                            dr2m1 = dx * dx + dy * dy + dz * dz - 1.0
                            u2 = ux * ux + uy * uy + uz * uz
                            disc = b * b - u2 * dr2m1
                            if disc > 0.0:
                                # the root without cancellation; an overlap left by
                                # round-off (dr2m1 < 0) gives tc < 0: collide now
                                tc = dr2m1 / (math.sqrt(disc) - b)
                                if tc < 0.0:
                                    tc = 0.0
                                if now + tc < best:
                                    best = now + tc
                                    bestj = j
                    j = nxt[j, _NXT]
    if bestj >= 0:
        tcol[i] = best
        partner[i] = bestj
        pcount[i] = nxt[bestj, _CNT]


# The chunk ----------------------------------------------------------------------------

@njit(cache=True)
def cell_grid(box, walled, n):
    """Cells per axis and their sides (σ): side >= σ (with a hair to spare), larger in
    dilute gases so that a cell holds about 1/8 particle on average — fewer crossing
    events, and the cell count stays near 8 N however dilute the gas. A periodic axis
    keeps at least 3 cells (its edge is >= 3 σ, checked in ``validate``)."""
    nc = np.empty(3, dtype=np.int64)
    cs = np.empty(3)
    volume = box[0] * box[1] * box[2]
    side = max(1.0, (volume / (8.0 * n)) ** (1.0 / 3.0))
    for d in range(3):
        k = int(math.floor(box[d] / side * (1.0 - 1e-12)))
        if not walled[d]:
            k = max(k, 3)
        nc[d] = max(1, min(k, int(math.floor(box[d] * (1.0 - 1e-12)))))
        cs[d] = box[d] / nc[d]
    return nc, cs


@njit(cache=True, error_model="numpy")
def hs_chunk(pos, vel, box, walled, kind, wall_temperature, duration, acc, rng):
    """Advance hard spheres by ``duration`` (τ) exactly; update ``pos``/``vel`` in place.

    Adds to ``acc``: wall impulses and hits (through ``hard_wall_bounce``), the pair
    collision virial Σ r_ij,a Δp_i,a per axis, the number of pair collisions, and the
    number of events of every kind (STEPS). Returns the number of pair collisions.
    """
    n = pos.shape[0]
    nc, cs = cell_grid(box, walled, n)
    ncell = nc[0] * nc[1] * nc[2]
    # rows of 64 bytes start on a cache-line boundary, so a neighbour is one line
    buf = np.empty(n * 8 + 8)
    off = ((64 - buf.ctypes.data % 64) % 64) // 8
    P = buf[off:off + n * 8].reshape((n, 8))
    nxt = buf.view(np.int32)[2 * off:2 * off + n * 16].reshape((n, 16))
    # the bookkeeping of a particle shares one aligned 64-byte row too: collision and
    # crossing times (float64), then as int32 partner, its counter then, event code,
    # previous particle in the cell list, cell (3) and heap position
    bbuf = np.empty(n * 8 + 8)
    boff = ((64 - bbuf.ctypes.data % 64) % 64) // 8
    B = bbuf[boff:boff + n * 8].reshape((n, 8))
    Bi = bbuf.view(np.int32)[2 * boff:2 * boff + n * 16].reshape((n, 16))
    tcol = B[:, 0]
    tcross = B[:, 1]
    partner = Bi[:, 4]
    pcount = Bi[:, 5]
    code = Bi[:, 6]
    prv = Bi[:, 7]
    cell = Bi[:, 8:11]
    hpos = Bi[:, 11]
    head = np.full(ncell, -1, dtype=np.int32)
    heap = np.empty((n, 2))
    # Internally the particles are numbered in cell order (a counting sort), so that
    # neighbours sit close in memory whatever order the caller keeps them in.
    home = np.empty(n, dtype=np.int64)
    fill = np.zeros(ncell + 1, dtype=np.int64)
    for i in range(n):
        c3 = 0
        for d in range(2, -1, -1):
            c = min(max(int(math.floor(pos[i, d] / cs[d])), 0), nc[d] - 1)
            c3 = c3 * nc[d] + c
        home[i] = c3
        fill[c3 + 1] += 1
    for c in range(ncell):
        fill[c + 1] += fill[c]
    order = np.empty(n, dtype=np.int64)  # internal number -> caller's number
    for i in range(n):
        order[fill[home[i]]] = i
        fill[home[i]] += 1
    for k in range(n):
        i = order[k]
        for d in range(3):
            P[k, d] = pos[i, d]
            P[k, 3 + d] = vel[i, d]
            c = int(math.floor(pos[i, d] / cs[d]))
            cell[k, d] = min(max(c, 0), nc[d] - 1)
        P[k, _T] = 0.0
        nxt[k, _CNT] = 0
        _cell_insert(head, nxt, prv, cell, nc, k)
    for i in range(n):
        _crossing(P, cell, nc, cs, box, walled, tcross, code, i, 0.0)
        tcol[i] = np.inf
        partner[i] = -1
        _scan(P, head, nxt, cell, nc, box, walled, tcol, partner, pcount, i, 0.0, -1, 0, -1)
        heap[i, 0] = tcol[i] if tcol[i] < tcross[i] else tcross[i]
        heap[i, 1] = i
        hpos[i] = i
    for k in range(n // 2 - 1, -1, -1):
        _sift_down(heap, hpos, k, heap[k, 0], int(heap[k, 1]))

    V = P[:, 3:6]  # velocity view for the shared wall rules
    collisions = 0
    events = 0
    while n > 0:
        i = int(heap[0, 1])
        now = heap[0, 0]
        if now > duration:
            break
        events += 1
        if tcol[i] <= tcross[i]:
            k = int(partner[i])
            if nxt[k, _CNT] == pcount[i]:
                _move(P, i, now)
                _move(P, k, now)
                dx = P[k, 0] - P[i, 0]
                dy = P[k, 1] - P[i, 1]
                dz = P[k, 2] - P[i, 2]
                if not walled[0]:
                    if dx > 0.5 * box[0]:
                        dx -= box[0]
                    elif dx < -0.5 * box[0]:
                        dx += box[0]
                if not walled[1]:
                    if dy > 0.5 * box[1]:
                        dy -= box[1]
                    elif dy < -0.5 * box[1]:
                        dy += box[1]
                if not walled[2]:
                    if dz > 0.5 * box[2]:
                        dz -= box[2]
                    elif dz < -0.5 * box[2]:
                        dz += box[2]
                b = (dx * (P[k, 3] - P[i, 3]) + dy * (P[k, 4] - P[i, 4])
                     + dz * (P[k, 5] - P[i, 5]))
                f = b / (dx * dx + dy * dy + dz * dz)
                # exchange of the normal components; Δp_i = f·(r_k - r_i)
                P[i, 3] += f * dx
                P[i, 4] += f * dy
                P[i, 5] += f * dz
                P[k, 3] -= f * dx
                P[k, 4] -= f * dy
                P[k, 5] -= f * dz
                # r_ik,a Δp_i,a = -(r_k - r_i)_a f (r_k - r_i)_a
                acc[VIRIAL] -= f * dx * dx
                acc[VIRIAL + 1] -= f * dy * dy
                acc[VIRIAL + 2] -= f * dz * dz
                nxt[i, _CNT] += 1
                nxt[k, _CNT] += 1
                collisions += 1
                # the pair just parted: it cannot meet again before another event
                for a in range(2):
                    me, other = (i, k) if a == 0 else (k, i)
                    _crossing(P, cell, nc, cs, box, walled, tcross, code, me, now)
                    tcol[me] = np.inf
                    partner[me] = -1
                    _scan(P, head, nxt, cell, nc, box, walled, tcol, partner, pcount, me, now,
                          -1, 0, other)
                    _reschedule(heap, hpos, tcol, tcross, me)
            else:
                # stale candidate (partner changed course); the crossing still holds
                _move(P, i, now)
                tcol[i] = np.inf
                partner[i] = -1
                _scan(P, head, nxt, cell, nc, box, walled, tcol, partner, pcount, i, now,
                      -1, 0, -1)
                _reschedule(heap, hpos, tcol, tcross, i)
        elif code[i] >= WALL:
            _move(P, i, now)
            face = code[i] - WALL
            d = face >> 1
            upper = (face & 1) == 1
            P[i, d] = box[d] - RADIUS if upper else RADIUS  # no drift through the wall
            hard_wall_bounce(V, i, d, upper, kind, wall_temperature, acc, rng)
            nxt[i, _CNT] += 1
            _crossing(P, cell, nc, cs, box, walled, tcross, code, i, now)
            tcol[i] = np.inf
            partner[i] = -1
            _scan(P, head, nxt, cell, nc, box, walled, tcol, partner, pcount, i, now, -1, 0, -1)
            _reschedule(heap, hpos, tcol, tcross, i)
        else:
            _move(P, i, now)
            d = code[i] >> 1
            up = code[i] & 1
            _cell_remove(head, nxt, prv, cell, nc, i)
            if up:
                cell[i, d] += 1
                if cell[i, d] == nc[d]:
                    cell[i, d] = 0
                    P[i, d] -= box[d]
            else:
                cell[i, d] -= 1
                if cell[i, d] < 0:
                    cell[i, d] = nc[d] - 1
                    P[i, d] += box[d]
            _cell_insert(head, nxt, prv, cell, nc, i)
            _crossing(P, cell, nc, cs, box, walled, tcross, code, i, now)
            k = partner[i]
            if k < 0 or nxt[k, _CNT] == pcount[i]:
                # candidate still good: only the cells that just became adjacent can
                # hold an earlier collision (if the candidate goes stale later, the
                # particle searches all 27 cells then, before anything is missed)
                _scan(P, head, nxt, cell, nc, box, walled, tcol, partner, pcount, i, now,
                      d, 1 if up else -1, -1)
            else:
                tcol[i] = np.inf
                partner[i] = -1
                _scan(P, head, nxt, cell, nc, box, walled, tcol, partner, pcount, i, now,
                      -1, 0, -1)
            _reschedule(heap, hpos, tcol, tcross, i)

    for k in range(n):
        _move(P, k, duration)
        i = order[k]
        for d in range(3):
            x = P[k, d]
            if not walled[d]:
                x -= box[d] * math.floor(x / box[d])
                if x >= box[d]:
                    x = 0.0
            pos[i, d] = x
            vel[i, d] = P[k, 3 + d]
    acc[COLLISIONS] += collisions
    acc[STEPS] += events
    return collisions


# Start and checks ---------------------------------------------------------------------

@njit(cache=True)
def random_placement(n, lo, hi, box, walled, rng, max_tries):
    """Random sequential placement of ``n`` non-overlapping spheres (centres in [lo, hi)).

    Returns the positions and the number placed (< n when ``max_tries`` ran out).
    """
    nc, cs = cell_grid(box, walled, n)
    head = np.full(nc[0] * nc[1] * nc[2], -1, dtype=np.int64)
    nxt = np.full(n, -1, dtype=np.int64)
    pos = np.zeros((n, 3))
    cell = np.zeros((n, 3), dtype=np.int64)
    q = np.empty(3)
    c = np.empty(3, dtype=np.int64)
    cc = np.empty(3, dtype=np.int64)
    tries = 0
    placed = 0
    while placed < n and tries < max_tries:
        tries += 1
        for d in range(3):
            q[d] = lo[d] + uniform(rng) * (hi[d] - lo[d])
            c[d] = min(max(int(math.floor(q[d] / cs[d])), 0), nc[d] - 1)
        ok = True
        for oz in range(-1, 2):
            if not ok:
                break
            for oy in range(-1, 2):
                if not ok:
                    break
                for ox in range(-1, 2):
                    o = (ox, oy, oz)
                    skip = False
                    for d in range(3):
                        cc[d] = c[d] + o[d]
                        if cc[d] < 0 or cc[d] >= nc[d]:
                            if walled[d]:
                                skip = True
                            cc[d] %= nc[d]
                    if skip:
                        continue
                    j = head[(cc[2] * nc[1] + cc[1]) * nc[0] + cc[0]]
                    while j >= 0:
                        r2 = 0.0
                        for d in range(3):
                            x = pos[j, d] - q[d]
                            if not walled[d]:
                                x -= box[d] * math.floor(x / box[d] + 0.5)
                            r2 += x * x
                        if r2 < 1.0:
                            ok = False
                            break
                        j = nxt[j]
                    if not ok:
                        break
        if ok:
            for d in range(3):
                pos[placed, d] = q[d]
                cell[placed, d] = c[d]
            k = (c[2] * nc[1] + c[1]) * nc[0] + c[0]
            nxt[placed] = head[k]
            head[k] = placed
            placed += 1
    return pos, placed


@njit(cache=True)
def min_pair_distance(pos, box, walled):
    """Smallest centre-to-centre distance (σ), minimum image on periodic axes.

    Only pairs closer than one cell side are seen, which is all an overlap check needs
    (returns at most the cell side, or inf when no pair is that close).
    """
    n = pos.shape[0]
    nc, cs = cell_grid(box, walled, n)
    head = np.full(nc[0] * nc[1] * nc[2], -1, dtype=np.int64)
    nxt = np.full(n, -1, dtype=np.int64)
    cell = np.empty((n, 3), dtype=np.int64)
    for i in range(n):
        for d in range(3):
            cell[i, d] = min(max(int(math.floor(pos[i, d] / cs[d])), 0), nc[d] - 1)
        k = (cell[i, 2] * nc[1] + cell[i, 1]) * nc[0] + cell[i, 0]
        nxt[i] = head[k]
        head[k] = i
    best = np.inf
    cc = np.empty(3, dtype=np.int64)
    for i in range(n):
        for oz in range(-1, 2):
            for oy in range(-1, 2):
                for ox in range(-1, 2):
                    o = (ox, oy, oz)
                    skip = False
                    for d in range(3):
                        cc[d] = cell[i, d] + o[d]
                        if cc[d] < 0 or cc[d] >= nc[d]:
                            if walled[d]:
                                skip = True
                            cc[d] %= nc[d]
                    if skip:
                        continue
                    j = head[(cc[2] * nc[1] + cc[1]) * nc[0] + cc[0]]
                    while j >= 0:
                        if j > i:
                            r2 = 0.0
                            for d in range(3):
                                x = pos[j, d] - pos[i, d]
                                if not walled[d]:
                                    x -= box[d] * math.floor(x / box[d] + 0.5)
                                r2 += x * x
                            if r2 < best:
                                best = r2
                        j = nxt[j]
    return math.sqrt(best)


def _centre_bounds(box: np.ndarray, walled: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    lo = np.where(walled, RADIUS, 0.0)
    hi = np.where(walled, box - RADIUS, box)
    return lo, hi


def lattice_start(n: int, box: np.ndarray, walled: np.ndarray,
                  rng: np.random.Generator | None = None) -> np.ndarray:
    """fcc sites for ``n`` centres, stretched on walled axes so that the outer layers
    touch the contact planes at σ/2 (``start.lattice_positions`` keeps a quarter cell
    clear at each end, which would waste room between walls)."""
    lo, hi = _centre_bounds(box, walled)
    sites = lattice_positions(n, lo, hi)
    if not walled.any():
        return sites if rng is None else lattice_positions(n, lo, hi, rng)
    # k cells along an axis put 2k distinct coordinates there; a stretch δ per end with
    # δ = a/4 and a = (span + 2δ)/k gives δ = span/(4k - 2). One δ for every walled
    # axis (the smallest) keeps equal edges equal, so the lattice keeps its cell counts.
    k = np.array([len(np.unique(np.round(sites[:, a], 9))) // 2 for a in range(3)])
    need = ((hi - lo) / np.maximum(4 * k - 2, 1))[walled]
    delta = np.where(walled, need.min() * (1.0 - 1e-9), 0.0)
    wide = lattice_positions(n, lo - delta, hi + delta)
    if rng is not None:
        wide = lattice_positions(n, lo - delta, hi + delta, rng)
    if ((wide < lo).any() or (wide > hi).any()
            or min_pair_distance(wide, box, walled) < min_pair_distance(sites, box, walled)):
        return sites if rng is None else lattice_positions(n, lo, hi, rng)
    return wide


def start_method(settings) -> str:
    """"random" (sequential placement) or "lattice" (fcc, melted in equilibration)."""
    eta_acc = packing_fraction(settings.gas.particles
                               / accessible_volume(settings.box, settings.walled))
    return "random" if eta_acc < RANDOM_START_ETA else "lattice"


@register
class HardSpheres(Engine):
    """Identical hard spheres (σ = 1, m = 1): exact event-driven dynamics."""

    name = "hard-sphere"

    @classmethod
    def validate(cls, settings) -> None:
        src = settings.source
        eta = packing_fraction(settings.gas.density)
        if eta >= MELTING_ETA:
            raise ConfigError(
                src, "gas.density",
                f"packing fraction η = πρ/6 = {eta:.4f} cannot be a hard-sphere fluid: at and "
                f"above η = {MELTING_ETA} the stable state is the crystal (fluid-solid "
                "coexistence 0.494-0.545, Hoover & Ree, J. Chem. Phys. 49, 3609 (1968))",
                f"give gas.density below {6 * FREEZING_ETA / math.pi:.4f} (η < {FREEZING_ETA}) "
                "for a stable fluid")
        if settings.gas.particles < 2:
            raise ConfigError(src, "gas.particles", "hard spheres need at least 2 particles",
                              "give gas.particles >= 2")
        box = settings.box
        for axis, (L, w) in enumerate(zip(box, settings.walled)):
            need = MIN_WALLED_EDGE if w else MIN_PERIODIC_EDGE
            # a periodic edge of exactly 3 σ would leave only 2 cells of side >= σ
            if L < need or (not w and L * (1.0 - 1e-12) < need):
                kind = "walled" if w else "periodic"
                raise ConfigError(
                    src, "gas.particles",
                    f"the box edge along {'xyz'[axis]} is {L:.3g} σ, too small for hard spheres "
                    f"(a {kind} edge needs {'more than' if not w else 'at least'} {need:g} σ)",
                    "use more particles, a lower density or a less elongated container.aspect")
        if eta >= FREEZING_ETA:
            warnings.warn(
                f"{src}: η = {eta:.4f} lies in the hard-sphere fluid-solid coexistence region "
                f"({FREEZING_ETA}-{MELTING_ETA}, Hoover & Ree 1968): the fluid is metastable"
                " and may crystallise; the lattice start may not melt", stacklevel=2)
        if start_method(settings) == "lattice":
            walled = np.array(settings.walled, dtype=np.bool_)
            sites = lattice_start(settings.gas.particles, box, walled)
            dmin = min_pair_distance(sites, box, walled)
            if dmin < 1.0:
                raise ConfigError(
                    src, "gas.density",
                    f"the fcc start lattice does not fit: its nearest sites are {dmin:.4f} σ "
                    "apart in the room the walls leave (centres stay σ/2 from a wall)",
                    "lower the density, or use more particles or wider walled edges")
            if eta > LATTICE_MELT_ETA and eta < FREEZING_ETA:
                warnings.warn(f"{src}: η = {eta:.4f} is above {LATTICE_MELT_ETA}; the fcc "
                              "start may need a long schedule.equilibrate to melt",
                              stacklevel=2)

    def initial_state(self) -> dict[str, np.ndarray]:
        s = self.settings
        n = s.gas.particles
        lo, hi = _centre_bounds(self.box, self.walled)
        rng = np.random.default_rng(s.schedule.seed)
        if start_method(s) == "random":
            pos, placed = random_placement(n, lo, hi, self.box, self.walled,
                                           seed_state(s.schedule.seed, stream=2), 200 * n + 10000)
            if placed < n:
                pos = lattice_start(n, self.box, self.walled, rng)
        else:
            pos = lattice_start(n, self.box, self.walled, rng)
        vel = maxwell_boltzmann(rng, n, s.gas.temperature, periodic=s.container.walls == "none")
        return {"positions": np.ascontiguousarray(pos), "velocities": vel, "time": np.zeros(1),
                "rng": seed_state(s.schedule.seed, stream=1)}

    def advance(self, state, duration, acc, producing) -> None:
        # No thermostat: collisions conserve kinetic energy exactly, so the temperature
        # set by the start velocities stays (only thermal walls exchange heat).
        c = self.settings.container
        hs_chunk(state["positions"], state["velocities"], self.box, self.walled,
                 WALL_CODES[c.wall], c.wall_temperature or 0.0, duration, acc, state["rng"])
        state["time"][0] += duration

    def health(self, state) -> str:
        problem = super().health(state)
        if problem:
            return problem
        lo, hi = _centre_bounds(self.box, self.walled)
        pos = state["positions"]
        tol = 1e-9
        if ((pos < lo - tol) | (pos > hi + tol)).any():
            return "a sphere centre came closer than σ/2 to a wall"
        return ""

    def collision_rate_estimate(self) -> float:
        """Collisions per particle per τ expected from Enskog with Carnahan-Starling g(σ)."""
        s = self.settings
        eta = packing_fraction(s.gas.density)
        g = (1 - eta / 2) / (1 - eta) ** 3
        return 4.0 * s.gas.density * g * math.sqrt(math.pi * s.gas.temperature)

    def cost_per_time(self) -> float:
        s = self.settings
        n = s.gas.particles
        # about two crossings per collision at moderate density; ~1.5 µs per event, and
        # one full prediction per particle per chunk for the rebuilt calendar
        per_tau = n * (0.5 * self.collision_rate_estimate() * 3.0
                       + 2.0 * math.sqrt(s.gas.temperature))
        return 1.5e-6 * per_tau + 1.5e-6 * n / s.output.sample_every

    def memory_bytes(self) -> int:
        return 250 * self.settings.gas.particles
