"""On-the-fly observables shared by every engine.

Engines fill one flat ``float64`` accumulator array (``acc``) with time integrals and
counts over a chunk; the slot layout is defined here and nowhere else. Between chunks
the driver turns ``acc`` plus a snapshot of the state into one sample row
(:func:`sample_row`) and adds the snapshot to the production histograms
(:class:`Histograms`). Units are reduced throughout.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

# Slot layout of the accumulator ---------------------------------------------------
IMPULSE = 0      # 0..5: momentum delivered to faces x-, x+, y-, y+, z-, z+ (outward positive)
HITS = 6         # 6..11: wall hits per face
VIRIAL = 12      # 12..14: time integral of sum over pairs r_ij,a F_ij,a (a = x, y, z);
#                  event-driven engines add r_ij,a * Δp_ij,a per collision (same dimension)
POTENTIAL = 15   # time integral of the total pair potential energy (no tail correction)
COLLISIONS = 16  # pair collisions (event-driven engines)
THERMOSTAT = 17  # kinetic energy added by the thermostat (negative when it removes heat)
WALL_ENERGY = 18  # time integral of the total wall potential energy (soft walls)
STEPS = 19       # integration steps or events processed (cost bookkeeping)
REBUILDS = 20    # neighbour-list rebuilds
KINETIC = 21     # time integral of the kinetic energy (time-step integrators; else 0)
NSLOTS = 22


def new_accumulator() -> np.ndarray:
    return np.zeros(NSLOTS)


def kinetic_dof(settings) -> int:
    """Kinetic degrees of freedom: 3N, less 3 when total momentum is conserved (no walls)."""
    n = settings.gas.particles
    return 3 * n - 3 if settings.container.walls == "none" else 3 * n


@njit(cache=True)
def kinetic_tensor(vel):
    """Diagonal of sum_i m v_i,a v_i,a (unit mass)."""
    out = np.zeros(3)
    for i in range(vel.shape[0]):
        for a in range(3):
            out[a] += vel[i, a] * vel[i, a]
    return out


def sample_row(settings, engine, state: dict, acc: np.ndarray, duration: float) -> dict:
    """One sample of every time-series observable from a chunk's accumulator.

    Wall pressures are the chunk's momentum transfer per area per time; the virial
    pressure tensor is (kinetic snapshot + time-averaged pair virial) / V, plus the
    engine's tail correction; its kinetic part is scaled to N k T_kin / V.
    """
    n, box, vol = settings.gas.particles, settings.box, settings.volume
    area = np.array([box[1] * box[2], box[1] * box[2], box[0] * box[2], box[0] * box[2],
                     box[0] * box[1], box[0] * box[1]])
    kin = kinetic_tensor(state["velocities"])
    ke = 0.5 * kin.sum()
    pot = acc[POTENTIAL] / duration + n * engine.energy_tail
    wall_u = acc[WALL_ENERGY] / duration
    # Kinetic part N k T_kin / V per axis (common practice: P = ρkT + W/3V with the
    # kinetic temperature): in a periodic box T_kin counts 3N - 3 degrees of freedom, so
    # the bare Σ m v² would read Z = 1 - 1/N for an ideal gas.
    dof = kinetic_dof(settings)
    ptensor = (kin * (3.0 * n / dof) + acc[VIRIAL:VIRIAL + 3] / duration) / vol \
        + engine.pressure_tail
    return {
        "pressure_wall": acc[IMPULSE:IMPULSE + 6] / (area * duration),
        "wall_hits": acc[HITS:HITS + 6].copy(),
        "pressure_tensor": ptensor,
        "pressure_virial": np.array(ptensor.mean()),
        "kinetic_energy": np.array(ke / n),
        "potential_energy": np.array((pot + wall_u) / n),
        "total_energy": np.array((ke + pot + wall_u) / n),
        "temperature": np.array(2.0 * ke / kinetic_dof(settings)),
        # Per-axis kinetic temperature: the wall pressure on a face follows the kinetic
        # energy along its normal, which in a dilute gas drifts slowly away from the mean.
        "temperature_axes": kin * (3.0 / kinetic_dof(settings)),
        "collisions": np.array(acc[COLLISIONS]),
        "thermostat_work": np.array(acc[THERMOSTAT]),
        # Chunk-averaged K + U per particle: in NVE it is conserved from sample to sample,
        # whereas total_energy pairs a kinetic snapshot with the mean U and scatters.
        "energy_mean": np.array((acc[KINETIC] / duration + pot + wall_u) / n
                                if acc[KINETIC] > 0.0 else (ke + pot + wall_u) / n),
    }


@njit(cache=True)
def _histogram_add(values, lo, hi, counts):
    nb = counts.shape[0]
    scale = nb / (hi - lo)
    for v in values:
        k = int(math.floor((v - lo) * scale))
        if 0 <= k < nb:
            counts[k] += 1.0


@njit(cache=True)
def _speeds(vel):
    out = np.empty(vel.shape[0])
    for i in range(vel.shape[0]):
        out[i] = math.sqrt(vel[i, 0] ** 2 + vel[i, 1] ** 2 + vel[i, 2] ** 2)
    return out


@njit(cache=True, inline="always")
def _count_pair(pos, i, j, box, r2max, scale, counts):
    """Add the pair (i, j) twice (ordered counts) to its minimum-image distance bin."""
    r2 = 0.0
    for a in range(3):
        d = pos[i, a] - pos[j, a]
        d -= box[a] * np.rint(d / box[a])
        r2 += d * d
    if r2 < r2max:
        k = int(math.sqrt(r2) * scale)
        if k < counts.shape[0]:
            counts[k] += 2.0


@njit(cache=True)
def pair_distance_counts(pos, box, rmax, counts):
    """Add ordered pair counts (i != j, minimum image on every axis) by distance.

    ``counts`` has bins of equal width over [0, rmax); rmax <= min(box)/2. Uses a cell
    list when at least 3 cells fit along every axis, else the O(N²) loop.
    """
    n = pos.shape[0]
    nb = counts.shape[0]
    scale = nb / rmax
    r2max = rmax * rmax
    nc = np.empty(3, dtype=np.int64)
    for a in range(3):
        nc[a] = int(box[a] / rmax)
    if nc[0] < 3 or nc[1] < 3 or nc[2] < 3:
        for i in range(n):
            for j in range(i + 1, n):
                _count_pair(pos, i, j, box, r2max, scale, counts)
        return
    ncell = nc[0] * nc[1] * nc[2]
    head = -np.ones(ncell, dtype=np.int64)
    nxt = np.empty(n, dtype=np.int64)
    cell_of = np.empty((n, 3), dtype=np.int64)
    for i in range(n):
        c = 0
        for a in range(3):
            k = int(pos[i, a] / box[a] * nc[a])
            k = min(max(k, 0), nc[a] - 1)
            cell_of[i, a] = k
            c = c * nc[a] + k
        nxt[i] = head[c]
        head[c] = i
    for i in range(n):
        for dx in range(-1, 2):
            cx = (cell_of[i, 0] + dx + nc[0]) % nc[0]
            for dy in range(-1, 2):
                cy = (cell_of[i, 1] + dy + nc[1]) % nc[1]
                for dz in range(-1, 2):
                    cz = (cell_of[i, 2] + dz + nc[2]) % nc[2]
                    j = head[(cx * nc[1] + cy) * nc[2] + cz]
                    while j >= 0:
                        # With at least 3 cells per axis each neighbour cell is visited
                        # once, so j > i counts every pair once (added twice below).
                        if j > i:
                            _count_pair(pos, i, j, box, r2max, scale, counts)
                        j = nxt[j]


@njit(cache=True)
def wall_distance_counts(pos, box, walled, dmax, counts):
    """Add counts of particle-centre distances from each walled face, bins over [0, dmax)."""
    nb = counts.shape[1]
    scale = nb / dmax
    for i in range(pos.shape[0]):
        for a in range(3):
            if walled[a]:
                for upper in range(2):
                    d = box[a] - pos[i, a] if upper else pos[i, a]
                    k = int(d * scale)
                    if 0 <= k < nb:
                        counts[2 * a + upper, k] += 1.0


#: Range of the g(r) histogram (σ) and of the near-wall profile (σ from the wall plane).
RDF_RANGE = 4.0
RDF_BINS = 200
WALL_LAYER = 1.5
WALL_LAYER_BINS = 60


class Histograms:
    """Production histograms from state snapshots: speeds, velocity components, the
    number-density profile along every axis, a fine profile next to each walled face,
    and pair-distance counts for g(r) in fully periodic boxes."""

    def __init__(self, settings) -> None:
        nb = settings.output.histogram_bins
        t = max(settings.gas.temperature, settings.container.wall_temperature or 0.0)
        vmax = 6.0 * math.sqrt(t)
        self.speed_edges = np.linspace(0.0, vmax, nb + 1)
        self.velocity_edges = np.linspace(-vmax, vmax, nb + 1)
        self.profile_edges = np.stack([np.linspace(0.0, L, nb + 1) for L in settings.box])
        self.speed = np.zeros(nb)
        self.velocity = np.zeros((3, nb))
        self.profile = np.zeros((3, nb))
        self.samples = 0
        self.box = np.asarray(settings.box, dtype=float)
        self.walled = np.array(settings.walled, dtype=np.bool_)
        self.wall_edges = np.linspace(0.0, WALL_LAYER, WALL_LAYER_BINS + 1)
        self.wall_layer = np.zeros((6, WALL_LAYER_BINS))
        # g(r) only means something without walls (a homogeneous, isotropic fluid).
        self.rdf_max = min(RDF_RANGE, 0.5 * float(self.box.min()))
        self.with_rdf = settings.container.walls == "none" and settings.gas.model != "ideal"
        self.rdf_edges = np.linspace(0.0, self.rdf_max, RDF_BINS + 1)
        self.rdf = np.zeros(RDF_BINS)

    def add(self, state: dict) -> None:
        pos, vel = state["positions"], state["velocities"]
        _histogram_add(_speeds(vel), self.speed_edges[0], self.speed_edges[-1], self.speed)
        for a in range(3):
            _histogram_add(vel[:, a].copy(), self.velocity_edges[0], self.velocity_edges[-1],
                           self.velocity[a])
            _histogram_add(pos[:, a].copy(), self.profile_edges[a, 0], self.profile_edges[a, -1],
                           self.profile[a])
        if self.walled.any():
            wall_distance_counts(pos, self.box, self.walled, WALL_LAYER, self.wall_layer)
        if self.with_rdf:
            pair_distance_counts(pos, self.box, self.rdf_max, self.rdf)
        self.samples += 1

    def arrays(self) -> dict[str, np.ndarray]:
        return {"speed_edges": self.speed_edges, "speed_counts": self.speed,
                "velocity_edges": self.velocity_edges, "velocity_counts": self.velocity,
                "profile_edges": self.profile_edges, "profile_counts": self.profile,
                "wall_layer_edges": self.wall_edges, "wall_layer_counts": self.wall_layer,
                "rdf_edges": self.rdf_edges, "rdf_counts": self.rdf,
                "samples": np.array(self.samples)}

    def load(self, arrays: dict) -> None:
        self.speed[:] = arrays["speed_counts"]
        self.velocity[:] = arrays["velocity_counts"]
        self.profile[:] = arrays["profile_counts"]
        self.wall_layer[:] = arrays["wall_layer_counts"]
        self.rdf[:] = arrays["rdf_counts"]
        self.samples = int(arrays["samples"])
