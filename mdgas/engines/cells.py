"""Cell lists, cell sorting and Verlet neighbour lists shared by the engines.

Geometry: the box is [0, L_a] per axis; an axis is periodic (minimum image) or walled
(closed, no images). Periodic images are handled branch-free with the per-axis array
``lp`` (L on periodic axes, 0 on walled ones; ``ilp`` holds 1/L or 0): positions are
kept wrapped into [0, L), so a difference d of two of them has |d| < L and
:func:`min_image` (one compare-and-shift each way) is the minimum image on periodic
axes and a no-op on walled ones. Lengths in σ.

Cells are at least ``rlist / reach`` wide, so every neighbour within ``rlist`` lies
within ``reach`` cells along each axis (27 cells for reach 1; reach 2 scans 125 smaller
cells, 1.7 times less volume, which pays in dense fluids). Particles are sorted by cell index (z fastest) before a
list is built: the three cells along z of one (x, y) row are then one contiguous run
of particle indices (a "strip"), which the builder scans into a distance buffer and
filters, and neighbours sit close together in memory for the force loop.

The neighbour list is a fixed-stride table ``nbr`` (N, capacity) of int32 with a count
per particle ``count`` (N,): rows can be filled in parallel without a prefix sum, and
the arrays are self-describing (capacity is ``nbr.shape[1]``). A *full* list holds
every neighbour of i; a *half* list only those j > i (each pair once).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange


@njit(cache=True, inline="always", error_model="numpy")
def min_image(d, L, half):
    """Minimum image of the difference d (|d| < L) of two wrapped coordinates on an axis
    of length L (``half`` = L/2; L = 0 on a walled axis leaves d as it is).

    Compare-and-shift instead of d - L·rint(d/L): the rounding instruction shares an
    execution port with the division in the vectorised force loop (measured on an
    AVX-512 machine: 7.4 ms against 7.9 ms per dense force pass at N = 32000, same
    forces bit for bit).
    """
    d = d - L if d > half else d
    d = d + L if d < -half else d
    return d


@njit(cache=True, inline="always", error_model="numpy")
def separation(pos, j, xi, yi, zi, lp, hl, image):
    """(x_i - x_j) of particle j from the point (xi, yi, zi), minimum image applied when
    ``image`` (a constant at each call site, so the test costs nothing); ``hl`` = lp/2."""
    dx = xi - pos[j, 0]
    dy = yi - pos[j, 1]
    dz = zi - pos[j, 2]
    if image:
        dx = min_image(dx, lp[0], hl[0])
        dy = min_image(dy, lp[1], hl[1])
        dz = min_image(dz, lp[2], hl[2])
    return dx, dy, dz


def image_arrays(box: np.ndarray, walled) -> tuple[np.ndarray, np.ndarray]:
    """(lp, ilp): L and 1/L on periodic axes, 0 on walled ones (see module doc)."""
    lp = np.array([0.0 if w else float(L) for L, w in zip(box, walled)])
    ilp = np.array([0.0 if w else 1.0 / float(L) for L, w in zip(box, walled)])
    return lp, ilp


def cell_grid(box: np.ndarray, rlist: float, reach: int = 1) -> tuple[np.ndarray, np.ndarray]:
    """(cells per axis (3,) int64, inverse cell width (3,)) for cells >= ``rlist / reach``
    wide, so that neighbours lie within ``reach`` cells along each axis."""
    nc = np.maximum(1, np.floor(np.asarray(box, dtype=float) * reach / rlist)).astype(np.int64)
    return nc, nc / np.asarray(box, dtype=float)


@njit(cache=True, error_model="numpy")
def cell_of(x, y, z, inv_width, ncell):
    """Flat cell index (z fastest) of a point in the box; points on the upper face go to
    the last cell. Coordinates are non-negative, so truncation is a floor."""
    cx = min(int(x * inv_width[0]), ncell[0] - 1)
    cy = min(int(y * inv_width[1]), ncell[1] - 1)
    cz = min(int(z * inv_width[2]), ncell[2] - 1)
    return (cx * ncell[1] + cy) * ncell[2] + cz


@njit(cache=True, error_model="numpy")
def sort_by_cell(pos, inv_width, ncell, cell_start, order, cell_tmp):
    """Counting sort of particles by cell.

    Fills ``order`` (N,) with the old index of the particle that goes to each new slot
    (stable: equal cells keep their old order) and ``cell_start`` (ncells + 1,) with the
    first new slot of every cell. ``cell_tmp`` (N,) int64 is scratch.
    """
    n = pos.shape[0]
    ncells = cell_start.shape[0] - 1
    cell_start[:] = 0
    for i in range(n):
        c = cell_of(pos[i, 0], pos[i, 1], pos[i, 2], inv_width, ncell)
        cell_tmp[i] = c
        cell_start[c + 1] += 1
    for c in range(ncells):
        cell_start[c + 1] += cell_start[c]
    fill = cell_start[:-1].copy()
    for i in range(n):
        c = cell_tmp[i]
        order[fill[c]] = i
        fill[c] += 1


@njit(cache=True, error_model="numpy")
def permute_rows(arr, order, tmp):
    """arr[k] <- arr[order[k]] for an (N, 3) array, through the (N, 3) scratch ``tmp``.

    Serial: a copy this cheap is not worth two parallel regions (each one costs a wake-up
    of every thread, painful on a shared machine)."""
    n = arr.shape[0]
    for k in range(n):
        j = order[k]
        tmp[k, 0] = arr[j, 0]
        tmp[k, 1] = arr[j, 1]
        tmp[k, 2] = arr[j, 2]
    for k in range(n):
        arr[k, 0] = tmp[k, 0]
        arr[k, 1] = tmp[k, 1]
        arr[k, 2] = tmp[k, 2]


@njit(cache=True, error_model="numpy")
def _axis_cells(c, n, periodic, reach, out):
    """Distinct neighbour cell coordinates along one axis (c - reach .. c + reach, with
    wrap or clip); with too few periodic cells every cell once. Returns the count."""
    m = 0
    if periodic and n < 2 * reach + 1:
        for k in range(n):
            out[m] = k
            m += 1
        return m
    for d in range(-reach, reach + 1):
        k = c + d
        if k < 0:
            if not periodic:
                continue
            k += n
        elif k >= n:
            if not periodic:
                continue
            k -= n
        out[m] = k
        m += 1
    return m


@njit(cache=True, inline="always")
def _no_wrap(c, n, periodic, reach):
    """Whether the cells within ``reach`` of cell c along an axis all lie inside the box
    without wrapping (always so on a walled axis)."""
    return not periodic or (c >= reach and c + reach < n)


@njit(cache=True, error_model="numpy")
def _z_runs(c, n, periodic, reach, lo, hi):
    """Contiguous runs [lo, hi] of neighbour cell coordinates along z; returns the count
    (one run, or two where the periodic wrap splits it)."""
    if periodic and n < 2 * reach + 1:
        lo[0], hi[0] = 0, n - 1
        return 1
    a, b = c - reach, c + reach
    if not periodic:
        lo[0], hi[0] = max(a, 0), min(b, n - 1)
        return 1
    if a < 0:
        lo[0], hi[0], lo[1], hi[1] = 0, b, a + n, n - 1
        return 2
    if b >= n:
        lo[0], hi[0], lo[1], hi[1] = 0, b - n, a, n - 1
        return 2
    lo[0], hi[0] = a, b
    return 1


@njit(cache=True, inline="always", error_model="numpy")
def _scan_strip(pos, xi, yi, zi, i, lo, hi, lp, hl, rlist2, buf, row, m, buffered, image):
    """Append to ``row[m:]`` every j in [lo, hi), j != i, within sqrt(rlist2) of
    (xi, yi, zi); returns the new m.

    ``buffered`` (long strips of dense fluids): distances into ``buf`` first, in a loop
    that vectorises, then a branch-free filter; otherwise one scalar pass, cheaper for
    short strips. ``image``: apply the minimum image. Both are constants at each call
    site, so each combination compiles to its own flat loop.
    """
    if buffered:
        for j in range(lo, hi):
            dx, dy, dz = separation(pos, j, xi, yi, zi, lp, hl, image)
            buf[j - lo] = dx * dx + dy * dy + dz * dz
        if lo <= i < hi:
            buf[i - lo] = np.inf
        for j in range(lo, hi):
            row[m] = j
            m += buf[j - lo] < rlist2
    else:
        for j in range(lo, hi):
            dx, dy, dz = separation(pos, j, xi, yi, zi, lp, hl, image)
            row[m] = j
            m += (dx * dx + dy * dy + dz * dz < rlist2) & (j != i)
    return m


@njit(cache=True, parallel=True, error_model="numpy")
def build_neighbour_list(pos, lp, ncell, cell_start, rlist2, half, nbr, count, reach=1):
    """Fill ``nbr``/``count`` with the pairs closer than sqrt(rlist2), from cell-sorted
    positions (``cell_start`` from :func:`sort_by_cell`, cells from :func:`cell_grid`
    with the same ``reach``).

    ``half`` keeps only j > i. Rows longer than the capacity are counted but not
    stored; the return value is the longest row, so the caller can grow ``nbr`` and
    build again when it exceeds ``nbr.shape[1]``.
    """
    n = pos.shape[0]
    cap = nbr.shape[1]
    nx, ny, nz = ncell[0], ncell[1], ncell[2]
    ncells = nx * ny * nz
    px, py, pz = lp[0] > 0.0, lp[1] > 0.0, lp[2] > 0.0
    hl = 0.5 * lp
    longest = 0
    for c in range(ncells):
        longest = max(longest, cell_start[c + 1] - cell_start[c])
    span = 2 * reach + 1
    buf_len = span * longest + 1
    row_len = span * span * span * longest + 1
    nchunk = min(ncells, 32)   # few chunks (each allocates), enough to balance threads
    widest = 0
    for t in prange(nchunk):
        buf = np.empty(buf_len)
        row = np.empty(row_len, np.int32)
        xs = np.empty(span, np.int64)
        ys = np.empty(span, np.int64)
        zlo = np.empty(2, np.int64)
        zhi = np.empty(2, np.int64)
        local_widest = 0
        for c in range(t * ncells // nchunk, (t + 1) * ncells // nchunk):
            if cell_start[c + 1] == cell_start[c]:
                continue
            cz = c % nz          # c >= 0: plain modulo is safe here
            cy = (c // nz) % ny
            cx = c // (ny * nz)
            mx = _axis_cells(cx, nx, px, reach, xs)
            my = _axis_cells(cy, ny, py, reach, ys)
            mz = _z_runs(cz, nz, pz, reach, zlo, zhi)
            # No neighbour cell across a periodic face: plain differences are the
            # minimum image for every pair that can be within r_list (L >= 2 r_list).
            inside = (_no_wrap(cx, nx, px, reach) and _no_wrap(cy, ny, py, reach)
                      and _no_wrap(cz, nz, pz, reach))
            for i in range(cell_start[c], cell_start[c + 1]):
                xi, yi, zi = pos[i, 0], pos[i, 1], pos[i, 2]
                m = 0
                for a in range(mx):
                    for b in range(my):
                        base = (xs[a] * ny + ys[b]) * nz
                        for r in range(mz):
                            lo = cell_start[base + zlo[r]]
                            hi = cell_start[base + zhi[r] + 1]
                            if half and lo <= i:
                                lo = i + 1
                            if hi <= lo:
                                continue
                            if reach > 1:
                                if inside:
                                    m = _scan_strip(pos, xi, yi, zi, i, lo, hi, lp, hl, rlist2,
                                                    buf, row, m, True, False)
                                else:
                                    m = _scan_strip(pos, xi, yi, zi, i, lo, hi, lp, hl, rlist2,
                                                    buf, row, m, True, True)
                            elif inside:
                                m = _scan_strip(pos, xi, yi, zi, i, lo, hi, lp, hl, rlist2,
                                                buf, row, m, False, False)
                            else:
                                m = _scan_strip(pos, xi, yi, zi, i, lo, hi, lp, hl, rlist2,
                                                buf, row, m, False, True)
                keep = min(m, cap)
                for k in range(keep):
                    nbr[i, k] = row[k]
                count[i] = keep
                local_widest = max(local_widest, m)
        widest = max(widest, local_widest)
    return widest


def list_capacity(density: float, rlist: float, half: bool) -> int:
    """A starting row capacity: the mean full-list row plus generous room for
    fluctuations (rows grow automatically when a build finds more)."""
    mean = density * 4.0 / 3.0 * math.pi * rlist ** 3
    return int(math.ceil(mean + 5.0 * math.sqrt(mean + 1.0) + 8.0))


@njit(cache=True, error_model="numpy")
def mirror_half_list(nbr, count, fill):
    """Turn a half list into a full one in place: row i keeps its j > i and gets every
    k < i whose row holds i appended (in increasing k). Building half and mirroring
    computes each distance once instead of twice.

    ``fill`` (N,) int64 is scratch. Returns the longest full row; when that exceeds the
    capacity the rows are incomplete and the caller must grow ``nbr`` and build again.
    """
    n = nbr.shape[0]
    cap = nbr.shape[1]
    for i in range(n):
        fill[i] = count[i]
    for i in range(n):
        # Row i's own half entries (j > i) were written by the build and are never
        # touched here: rows only receive k < their own index, after their half part.
        for k in range(count[i]):
            j = nbr[i, k]
            if fill[j] < cap:
                nbr[j, fill[j]] = i
            fill[j] += 1
    widest = 0
    for i in range(n):
        widest = max(widest, fill[i])
        count[i] = min(fill[i], cap)
    return widest
