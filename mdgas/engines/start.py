"""Starting configurations shared by the engines: placements and velocities."""

from __future__ import annotations

import math

import numpy as np


def maxwell_boltzmann(rng: np.random.Generator, n: int, temperature: float,
                      periodic: bool = False) -> np.ndarray:
    """Velocities (N, 3) from Maxwell-Boltzmann at ``temperature`` (unit mass).

    The centre-of-mass velocity is always removed. Each component is
    then rescaled so that its kinetic temperature is exact: without that, the per-axis
    kinetic energy of a gas between specular walls (which never mixes axes) would stay
    off by its initial fluctuation, about sqrt(2/N). ``periodic`` (no walls: momentum is
    conserved) counts N - 1 degrees of freedom per axis, as ``observe.kinetic_dof`` does.
    """
    v = rng.normal(0.0, math.sqrt(temperature), size=(n, 3))
    if n > 1:
        v -= v.mean(axis=0)
        dof = n - 1 if periodic else n
        v *= np.sqrt(temperature * dof / (v * v).sum(axis=0))
    return v


def uniform_positions(rng: np.random.Generator, n: int, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Independent uniform positions in the box [lo, hi) per axis (point particles)."""
    return lo + rng.random((n, 3)) * (hi - lo)


def lattice_positions(n: int, lo: np.ndarray, hi: np.ndarray,
                      rng: np.random.Generator | None = None) -> np.ndarray:
    """``n`` sites of a face-centred cubic lattice filling [lo, hi), fewest cells first.

    The lattice has k_a cells per axis, chosen so 4·k_x·k_y·k_z >= n with cells as
    cubic as the box allows; surplus sites are dropped at random (or from the end).
    """
    span = hi - lo
    cell_volume = float(np.prod(span)) * 4.0 / n
    a = cell_volume ** (1.0 / 3.0)
    k = np.maximum(1, np.floor(span / a)).astype(int)
    while 4 * int(np.prod(k)) < n:
        k[int(np.argmax(span / k))] += 1
    basis = np.array([[0.25, 0.25, 0.25], [0.75, 0.75, 0.25],
                      [0.75, 0.25, 0.75], [0.25, 0.75, 0.75]])
    cells = np.stack(np.meshgrid(*[np.arange(ki) for ki in k], indexing="ij"), -1).reshape(-1, 3)
    sites = (cells[:, None, :] + basis[None, :, :]).reshape(-1, 3) / k * span + lo
    if len(sites) > n:
        keep = rng.choice(len(sites), n, replace=False) if rng is not None else np.arange(n)
        sites = sites[np.sort(keep)]
    return sites
