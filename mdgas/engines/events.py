"""Hard spheres by exact event-driven dynamics (Alder & Wainwright's method).

Identical spheres of diameter σ = 1 and mass m = 1 fly in straight lines between
events. Three kinds of event are predicted exactly: a pair collision, a cell crossing
(cells of side >= σ, so only the 27 surrounding cells can hold a partner) and a wall
hit (on a walled axis the centre reflects σ/2 from the wall plane). Each particle
keeps one pending event — its earliest collision candidate or its next crossing/wall
hit — in an indexed 8-ary min-heap of N entries. Predictions are invalidated
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
from .prefetch import prefetch
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


def packing_fraction(density: float) -> float:
    """η = π ρ σ³ / 6."""
    return math.pi * density / 6.0


def accessible_volume(box: np.ndarray, walled) -> float:
    """Volume (σ³) the sphere centres can reach: L - σ per walled axis, L per periodic one."""
    return float(np.prod([L - 2 * RADIUS if w else L for L, w in zip(box, walled)]))


# One record per sphere for what a neighbour search reads: position and velocity at
# the sphere's local time, the local time, the next sphere in its cell and its event
# counter — 64 bytes, kept on one cache line. Records (not 2-D arrays) give the
# compiler a constant row size, so an index costs a shift rather than a multiply.
HOT = np.dtype([("r", "f8", 3), ("v", "f8", 3), ("t", "f8"), ("next", "i4"),
                ("count", "i4")], align=True)
# Event bookkeeping of a sphere: candidate collision and crossing times, the partner
# and its counter then, the event code, the previous sphere in the cell and the cell.
BOOK = np.dtype([("tcol", "f8"), ("tcross", "f8"), ("partner", "i4"), ("pcount", "i4"),
                 ("code", "i4"), ("prev", "i4"), ("c", "i4", 3), ("pad", "i4")], align=True)
# A calendar entry: event time and sphere.
NODE = np.dtype([("t", "f8"), ("i", "i8")], align=True)
_HOT_BYTES, _BOOK_BYTES, _NODE_BYTES = HOT.itemsize, BOOK.itemsize, NODE.itemsize


@njit(cache=True, inline="always")
def _carve(work, at, nbytes):
    """``nbytes`` of the byte buffer ``work`` from offset ``at`` on, moved up to the next
    64-byte (cache line) boundary; returns the piece and the offset after it."""
    start = at + (64 - (work.ctypes.data + at) % 64) % 64
    return work[start:start + nbytes], start + nbytes


@njit(cache=True)
def workspace_bytes(box, walled, n):
    """Bytes of scratch memory :func:`hs_chunk` uses for ``n`` spheres in ``box``."""
    nc, cs = cell_grid(box, walled, n)
    ncell = nc[0] * nc[1] * nc[2]
    per_sphere = _HOT_BYTES + _BOOK_BYTES + _NODE_BYTES + 4 + 2 * 8
    # and the wall-rule velocity (24 bytes), and up to 63 bytes of alignment per piece
    return n * per_sphere + 3 * _NODE_BYTES + ncell * 4 + (ncell + 1) * 8 + 24 + 9 * 64


# Heap ---------------------------------------------------------------------------------
# An 8-ary min-heap: a third of the depth of a binary one (5 levels for 32000 spheres),
# each family of children two adjacent cache lines, and the smallest child found with
# selects rather than a hard-to-predict branch per level. Measured faster than 2, 4
# and 16 children at N = 32000 and 256000 (tests/benchmarks/bench_hard_spheres.py).

@njit(cache=True, inline="always", error_model="numpy")
def _sift_up(heap, hpos, k, t, i):
    while k > 0:
        p = (k - 1) >> 3
        if heap[p].t <= t:
            break
        heap[k].t = heap[p].t
        heap[k].i = heap[p].i
        hpos[heap[k].i] = k
        k = p
    heap[k].t = t
    heap[k].i = i
    hpos[i] = k


@njit(cache=True, inline="always", error_model="numpy")
def _sift_down(heap, hpos, k, t, i):
    n = heap.shape[0]
    while True:
        c = 8 * k + 1
        if c >= n:
            break
        m = c
        tm = heap[c].t
        if c + 7 < n:
            for q in range(c + 1, c + 8):
                tq = heap[q].t
                if tq < tm:
                    m = q
                    tm = tq
        else:
            for q in range(c + 1, n):
                if heap[q].t < tm:
                    m = q
                    tm = heap[q].t
        if tm >= t:
            break
        heap[k].t = tm
        heap[k].i = heap[m].i
        hpos[heap[k].i] = k
        k = m
    heap[k].t = t
    heap[k].i = i
    hpos[i] = k


@njit(cache=True, inline="always", error_model="numpy")
def _reschedule(heap, hpos, B, i):
    t = B[i].tcol if B[i].tcol < B[i].tcross else B[i].tcross
    k = hpos[i]
    if k > 0 and t < heap[(k - 1) >> 3].t:
        _sift_up(heap, hpos, k, t, i)
    else:
        _sift_down(heap, hpos, k, t, i)


# Cells --------------------------------------------------------------------------------

@njit(cache=True, inline="always", error_model="numpy")
def _cell_of(B, nc, i):
    return (B[i].c[2] * nc[1] + B[i].c[1]) * nc[0] + B[i].c[0]


@njit(cache=True, inline="always", error_model="numpy")
def _cell_insert(head, P, B, nc, i):
    c = _cell_of(B, nc, i)
    h = head[c]
    P[i].next = h
    B[i].prev = -1
    if h >= 0:
        B[h].prev = i
    head[c] = i


@njit(cache=True, inline="always", error_model="numpy")
def _cell_remove(head, P, B, nc, i):
    n, p = P[i].next, B[i].prev
    if p >= 0:
        P[p].next = n
    else:
        head[_cell_of(B, nc, i)] = n
    if n >= 0:
        B[n].prev = p


# Prediction ---------------------------------------------------------------------------

@njit(cache=True, inline="always", error_model="numpy")
def _move(P, i, t):
    p = P[i]
    dt = t - p.t
    p.r[0] += p.v[0] * dt
    p.r[1] += p.v[1] * dt
    p.r[2] += p.v[2] * dt
    p.t = t


@njit(cache=True, inline="always", error_model="numpy")
def _crossing(P, B, nc, cs, box, walled, i, now):
    """Next cell crossing or wall hit of ``i`` (up to date at ``now``)."""
    p = P[i]
    b = B[i]
    best = np.inf
    which = -1
    for d in range(3):
        v = p.v[d]
        if v > 0.0:
            if walled[d] and b.c[d] == nc[d] - 1:
                dt = (box[d] - RADIUS - p.r[d]) / v
                c = WALL + 2 * d + 1
            else:
                dt = ((b.c[d] + 1) * cs[d] - p.r[d]) / v
                c = 2 * d + 1
        elif v < 0.0:
            if walled[d] and b.c[d] == 0:
                dt = (RADIUS - p.r[d]) / v
                c = WALL + 2 * d
            else:
                dt = (b.c[d] * cs[d] - p.r[d]) / v
                c = 2 * d
        else:
            continue
        if dt < best:
            best = dt
            which = c
    if best < 0.0:
        best = 0.0  # round-off: already on the face
    b.tcross = now + best
    b.code = which


@njit(cache=True, inline="always", error_model="numpy")
def _meet(pj, now, qx, qy, qz, vx, vy, vz):
    """When sphere ``pj`` meets the sphere at (qx, qy, qz) with velocity (vx, vy, vz)
    at ``now`` (the image next to ``pj``'s cell), or inf if they do not meet."""
    dt = now - pj.t
    dx = pj.r[0] + pj.v[0] * dt - qx
    dy = pj.r[1] + pj.v[1] * dt - qy
    dz = pj.r[2] + pj.v[2] * dt - qz
    ux = pj.v[0] - vx
    uy = pj.v[1] - vy
    uz = pj.v[2] - vz
    b = dx * ux + dy * uy + dz * uz
    if b < 0.0:  # approaching
        dr2m1 = dx * dx + dy * dy + dz * dz - 1.0
        u2 = ux * ux + uy * uy + uz * uz
        disc = b * b - u2 * dr2m1
        if disc > 0.0:
            # the root without cancellation; an overlap left by round-off
            # (dr2m1 < 0) gives tc < 0: collide now
            tc = dr2m1 / (math.sqrt(disc) - b)
            if tc < 0.0:
                tc = 0.0
            return now + tc
    return np.inf


@njit(cache=True, inline="always", error_model="numpy")
def _walk_cell(P, j, i, skip, now, qx, qy, qz, vx, vy, vz, best, bestj):
    """Go down one cell's list from sphere ``j`` for a meeting with sphere ``i`` (at q
    with velocity v, ``skip`` left out) before ``best``; returns the new (best, bestj)."""
    while j >= 0:
        pj = P[j]
        if j != i and j != skip:
            t = _meet(pj, now, qx, qy, qz, vx, vy, vz)
            if t < best:
                best = t
                bestj = j
        j = pj.next
    return best, bestj


@njit(cache=True, inline="always", error_model="numpy")
def _scan(P, B, head, nc, box, walled, i, now, layer_axis, layer_side, skip):
    """Look for a collision of ``i`` earlier than its candidate in the neighbour cells.

    ``layer_axis`` < 0 searches all 27 cells; otherwise only the layer of 9 at offset
    ``layer_side`` along that axis (the cells that just became adjacent).
    """
    bi = B[i]
    best = bi.tcol
    bestj = -1
    pi = P[i]
    xi, yi, zi = pi.r[0], pi.r[1], pi.r[2]
    vxi, vyi, vzi = pi.v[0], pi.v[1], pi.v[2]
    c0, c1, c2 = bi.c[0], bi.c[1], bi.c[2]
    if (layer_axis < 0 and 0 < c0 < nc[0] - 1 and 0 < c1 < nc[1] - 1
            and 0 < c2 < nc[2] - 1):
        # away from the box faces the 27 cells need no wrapping or images: walk the
        # 9 rows of 3 cells that lie side by side in ``head``
        s1 = nc[0]
        s2 = nc[0] * nc[1]
        centre = (c2 * nc[1] + c1) * nc[0] + c0
        for oz in range(-1, 2):
            for oy in range(-1, 2):
                row = centre + oz * s2 + oy * s1
                for ox in range(-1, 2):
                    best, bestj = _walk_cell(P, head[row + ox], i, skip, now, xi, yi, zi,
                                             vxi, vyi, vzi, best, bestj)
    else:
        lo0, hi0, lo1, hi1, lo2, hi2 = -1, 1, -1, 1, -1, 1
        if layer_axis == 0:
            lo0 = hi0 = layer_side
        elif layer_axis == 1:
            lo1 = hi1 = layer_side
        elif layer_axis == 2:
            lo2 = hi2 = layer_side
        for oz in range(lo2, hi2 + 1):
            cz = c2 + oz
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
                cy = c1 + oy
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
                    cx = c0 + ox
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
                    best, bestj = _walk_cell(P, head[(cz * nc[1] + cy) * nc[0] + cx], i,
                                             skip, now, xi - sx, yi - sy, zi - sz,
                                             vxi, vyi, vzi, best, bestj)
    if bestj >= 0:
        bi.tcol = best
        bi.partner = bestj
        bi.pcount = P[bestj].count


@njit(cache=True, inline="always", error_model="numpy")
def _predict(P, B, head, nc, cs, box, walled, i, now, skip):
    """Full prediction for ``i`` (up to date at ``now``) on a new trajectory."""
    _crossing(P, B, nc, cs, box, walled, i, now)
    B[i].tcol = np.inf
    B[i].partner = -1
    _scan(P, B, head, nc, box, walled, i, now, -1, 0, skip)


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


@njit(cache=True, error_model="numpy", _nrt=False)
def _events(P, B, heap, hpos, head, nc, cs, box, walled, kind, wall_temperature,
            duration, acc, rng, vw):
    """The event loop of :func:`hs_chunk`: process events up to ``duration``.

    Compiled without reference counting (it allocates nothing): the helpers inlined
    here would otherwise count references to their array arguments on every call,
    atomic operations that cost about a sixth of the loop. Returns the numbers of
    pair collisions and of events.
    """
    n = P.shape[0]
    collisions = 0
    events = 0
    while n > 0:
        i = heap[0].i
        now = heap[0].t
        if now > duration:
            break
        events += 1
        # the next event is most likely the earliest child of the root: start loading
        # its sphere while this event is handled
        if n > 8:
            m = 1
            tm = heap[1].t
            for q in range(2, 9):
                if heap[q].t < tm:
                    m = q
                    tm = heap[q].t
            prefetch(B, heap[m].i)
            prefetch(P, heap[m].i)
        bi = B[i]
        if bi.tcol <= bi.tcross:
            k = bi.partner
            if P[k].count == bi.pcount:
                _move(P, i, now)
                _move(P, k, now)
                pi = P[i]
                pk = P[k]
                dx = pk.r[0] - pi.r[0]
                dy = pk.r[1] - pi.r[1]
                dz = pk.r[2] - pi.r[2]
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
                b = (dx * (pk.v[0] - pi.v[0]) + dy * (pk.v[1] - pi.v[1])
                     + dz * (pk.v[2] - pi.v[2]))
                f = b / (dx * dx + dy * dy + dz * dz)
                # exchange of the normal components; Δp_i = f·(r_k - r_i)
                pi.v[0] += f * dx
                pi.v[1] += f * dy
                pi.v[2] += f * dz
                pk.v[0] -= f * dx
                pk.v[1] -= f * dy
                pk.v[2] -= f * dz
                # r_ik,a Δp_i,a = -(r_k - r_i)_a f (r_k - r_i)_a
                acc[VIRIAL + 0] -= f * dx * dx
                acc[VIRIAL + 1] -= f * dy * dy
                acc[VIRIAL + 2] -= f * dz * dz
                pi.count += 1
                pk.count += 1
                collisions += 1
                # the pair just parted: it cannot meet again before another event
                _predict(P, B, head, nc, cs, box, walled, i, now, k)
                _reschedule(heap, hpos, B, i)
                _predict(P, B, head, nc, cs, box, walled, k, now, i)
                _reschedule(heap, hpos, B, k)
            else:
                # stale candidate (partner changed course); the crossing still holds
                _move(P, i, now)
                bi.tcol = np.inf
                bi.partner = -1
                _scan(P, B, head, nc, box, walled, i, now, -1, 0, -1)
                _reschedule(heap, hpos, B, i)
        elif bi.code >= WALL:
            _move(P, i, now)
            face = bi.code - WALL
            d = face >> 1
            upper = (face & 1) == 1
            pi = P[i]
            pi.r[d] = box[d] - RADIUS if upper else RADIUS  # no drift through the wall
            for a in range(3):
                vw[0, a] = pi.v[a]
            hard_wall_bounce(vw, 0, d, upper, kind, wall_temperature, acc, rng)
            for a in range(3):
                pi.v[a] = vw[0, a]
            pi.count += 1
            _predict(P, B, head, nc, cs, box, walled, i, now, -1)
            _reschedule(heap, hpos, B, i)
        else:
            _move(P, i, now)
            d = bi.code >> 1
            up = bi.code & 1
            _cell_remove(head, P, B, nc, i)
            if up:
                bi.c[d] += 1
                if bi.c[d] == nc[d]:
                    bi.c[d] = 0
                    P[i].r[d] -= box[d]
            else:
                bi.c[d] -= 1
                if bi.c[d] < 0:
                    bi.c[d] = nc[d] - 1
                    P[i].r[d] += box[d]
            _cell_insert(head, P, B, nc, i)
            _crossing(P, B, nc, cs, box, walled, i, now)
            k = bi.partner
            if k < 0 or P[k].count == bi.pcount:
                # candidate still good: only the cells that just became adjacent can
                # hold an earlier collision (if the candidate goes stale later, the
                # particle searches all 27 cells then, before anything is missed)
                _scan(P, B, head, nc, box, walled, i, now, d, 1 if up else -1, -1)
            else:
                bi.tcol = np.inf
                bi.partner = -1
                _scan(P, B, head, nc, box, walled, i, now, -1, 0, -1)
            _reschedule(heap, hpos, B, i)
    return collisions, events


@njit(cache=True, error_model="numpy")
def hs_chunk(pos, vel, box, walled, kind, wall_temperature, duration, acc, rng, work):
    """Advance hard spheres by ``duration`` (τ) exactly; update ``pos``/``vel`` in place.

    Adds to ``acc``: wall impulses and hits (through ``hard_wall_bounce``), the pair
    collision virial Σ r_ij,a Δp_i,a per axis, the number of pair collisions, and the
    number of events of every kind (STEPS). Returns the number of pair collisions.

    ``work`` is a uint8 scratch buffer of at least ``workspace_bytes`` (any content; a
    smaller one, e.g. empty, makes the call allocate its own). Kept by the caller from
    chunk to chunk it spares the page faults of fresh memory every chunk, and numpy
    gives large buffers transparent huge pages where the system allows, which cuts
    TLB misses in the random accesses of the event loop.
    """
    n = pos.shape[0]
    nc, cs = cell_grid(box, walled, n)
    ncell = nc[0] * nc[1] * nc[2]
    need = workspace_bytes(box, walled, n)
    if work.shape[0] < need:
        work = np.empty(need, dtype=np.uint8)
    piece, at = _carve(work, 0, n * _HOT_BYTES)
    P = piece.view(HOT)
    piece, at = _carve(work, at, n * _BOOK_BYTES)
    B = piece.view(BOOK)
    # entry 0 sits 3 entries into a cache line, so that every family of children
    # (8k+1 .. 8k+8) starts on a line
    piece, at = _carve(work, at, (n + 3) * _NODE_BYTES)
    heap = piece.view(NODE)[3:]
    # its own dense array: sifts touch it at random
    piece, at = _carve(work, at, n * 4)
    hpos = piece.view(np.int32)
    piece, at = _carve(work, at, ncell * 4)
    head = piece.view(np.int32)
    head[:] = -1
    # Internally the particles are numbered in cell order (a counting sort), so that
    # neighbours sit close in memory whatever order the caller keeps them in.
    piece, at = _carve(work, at, n * 8)
    home = piece.view(np.int64)
    piece, at = _carve(work, at, (ncell + 1) * 8)
    fill = piece.view(np.int64)
    fill[:] = 0
    for i in range(n):
        c3 = 0
        for d in range(2, -1, -1):
            c = min(max(int(math.floor(pos[i, d] / cs[d])), 0), nc[d] - 1)
            c3 = c3 * nc[d] + c
        home[i] = c3
        fill[c3 + 1] += 1
    for c in range(ncell):
        fill[c + 1] += fill[c]
    piece, at = _carve(work, at, n * 8)
    order = piece.view(np.int64)  # internal number -> caller's number
    for i in range(n):
        order[fill[home[i]]] = i
        fill[home[i]] += 1
    for k in range(n):
        i = order[k]
        for d in range(3):
            P[k].r[d] = pos[i, d]
            P[k].v[d] = vel[i, d]
            c = int(math.floor(pos[i, d] / cs[d]))
            B[k].c[d] = min(max(c, 0), nc[d] - 1)
        P[k].t = 0.0
        P[k].count = 0
        _cell_insert(head, P, B, nc, k)
    for i in range(n):
        _predict(P, B, head, nc, cs, box, walled, i, 0.0, -1)
        heap[i].t = B[i].tcol if B[i].tcol < B[i].tcross else B[i].tcross
        heap[i].i = i
        hpos[i] = i
    for k in range((n - 2) // 8, -1, -1):
        _sift_down(heap, hpos, k, heap[k].t, heap[k].i)

    piece, at = _carve(work, at, 3 * 8)
    vw = piece.view(np.float64).reshape((1, 3))  # a sphere's velocity for the wall rules
    collisions, events = _events(P, B, heap, hpos, head, nc, cs, box, walled, kind,
                                 wall_temperature, duration, acc, rng, vw)

    for k in range(n):
        _move(P, k, duration)
        i = order[k]
        for d in range(3):
            x = P[k].r[d]
            if not walled[d]:
                x -= box[d] * math.floor(x / box[d])
                if x >= box[d]:
                    x = 0.0
            pos[i, d] = x
            vel[i, d] = P[k].v[d]
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
    #: hs_chunk's scratch memory, kept from chunk to chunk (allocated on first use)
    _work: np.ndarray | None = None

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
        n = len(state["positions"])
        if self._work is None:
            self._work = np.empty(workspace_bytes(self.box, self.walled, n), dtype=np.uint8)
        hs_chunk(state["positions"], state["velocities"], self.box, self.walled,
                 WALL_CODES[c.wall], c.wall_temperature or 0.0, duration, acc, state["rng"],
                 self._work)
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
        # the kernel's scratch buffer, plus positions, velocities and the copies the
        # caller's arrays get passed through (about 10 doubles per sphere)
        n = self.settings.gas.particles
        return int(workspace_bytes(self.box, self.walled, n)) + 80 * n
