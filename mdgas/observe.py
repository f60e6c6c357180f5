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
NSLOTS = 21


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
    engine's tail correction.
    """
    n, box, vol = settings.gas.particles, settings.box, settings.volume
    area = np.array([box[1] * box[2], box[1] * box[2], box[0] * box[2], box[0] * box[2],
                     box[0] * box[1], box[0] * box[1]])
    kin = kinetic_tensor(state["velocities"])
    ke = 0.5 * kin.sum()
    pot = acc[POTENTIAL] / duration + n * engine.energy_tail
    wall_u = acc[WALL_ENERGY] / duration
    ptensor = (kin + acc[VIRIAL:VIRIAL + 3] / duration) / vol + engine.pressure_tail
    return {
        "pressure_wall": acc[IMPULSE:IMPULSE + 6] / (area * duration),
        "wall_hits": acc[HITS:HITS + 6].copy(),
        "pressure_tensor": ptensor,
        "pressure_virial": np.array(ptensor.mean()),
        "kinetic_energy": np.array(ke / n),
        "potential_energy": np.array((pot + wall_u) / n),
        "total_energy": np.array((ke + pot + wall_u) / n),
        "temperature": np.array(2.0 * ke / kinetic_dof(settings)),
        "collisions": np.array(acc[COLLISIONS]),
        "thermostat_work": np.array(acc[THERMOSTAT]),
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


class Histograms:
    """Production histograms from state snapshots: speeds, velocity components and the
    number-density profile along every axis (σ⁻³)."""

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

    def add(self, state: dict) -> None:
        pos, vel = state["positions"], state["velocities"]
        _histogram_add(_speeds(vel), self.speed_edges[0], self.speed_edges[-1], self.speed)
        for a in range(3):
            _histogram_add(vel[:, a].copy(), self.velocity_edges[0], self.velocity_edges[-1],
                           self.velocity[a])
            _histogram_add(pos[:, a].copy(), self.profile_edges[a, 0], self.profile_edges[a, -1],
                           self.profile[a])
        self.samples += 1

    def arrays(self) -> dict[str, np.ndarray]:
        return {"speed_edges": self.speed_edges, "speed_counts": self.speed,
                "velocity_edges": self.velocity_edges, "velocity_counts": self.velocity,
                "profile_edges": self.profile_edges, "profile_counts": self.profile,
                "samples": np.array(self.samples)}

    def load(self, arrays: dict) -> None:
        self.speed[:] = arrays["speed_counts"]
        self.velocity[:] = arrays["velocity_counts"]
        self.profile[:] = arrays["profile_counts"]
        self.samples = int(arrays["samples"])
