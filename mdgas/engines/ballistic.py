"""Ideal point particles: exact free flight between hard-wall bounces."""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from ..errors import ConfigError
from ..observe import STEPS
from . import Engine, register
from .rng import seed_state
from .start import maxwell_boltzmann, uniform_positions
from .walls import WALL_CODES, hard_wall_bounce


@njit(cache=True)
def ballistic_advance(pos, vel, box, walled, kind, wall_temperature, duration, acc, rng):
    """Fly every particle for ``duration`` with no time-step error.

    Each particle is independent: it flies straight to its next wall plane, bounces,
    and repeats until its time is used up; periodic axes are wrapped at the end.
    """
    n = pos.shape[0]
    events = 0
    for i in range(n):
        left = duration
        while True:
            step = left
            axis = -1
            for a in range(3):
                if walled[a]:
                    v = vel[i, a]
                    if v > 0.0:
                        t = (box[a] - pos[i, a]) / v
                    elif v < 0.0:
                        t = -pos[i, a] / v
                    else:
                        continue
                    if t < step:
                        step = t
                        axis = a
            for a in range(3):
                pos[i, a] += vel[i, a] * step
            left -= step
            if axis < 0:
                break
            upper = vel[i, axis] > 0.0
            pos[i, axis] = box[axis] if upper else 0.0  # no drift through the wall by round-off
            hard_wall_bounce(vel, i, axis, upper, kind, wall_temperature, acc, rng)
            events += 1
        for a in range(3):
            if not walled[a]:
                pos[i, a] -= box[a] * math.floor(pos[i, a] / box[a])
                if pos[i, a] >= box[a]:
                    pos[i, a] = 0.0
    acc[STEPS] += events


@register
class IdealGas(Engine):
    """Non-interacting point particles: the ideal-gas control experiment."""

    name = "ideal"

    @classmethod
    def validate(cls, settings) -> None:
        if settings.container.wall == "lj93":
            raise ConfigError(settings.source, "container.wall",
                              "ideal particles have no force field for a 9-3 wall",
                              'use "specular" or "thermal"')

    def initial_state(self) -> dict[str, np.ndarray]:
        s = self.settings
        rng = np.random.default_rng(s.schedule.seed)
        n = s.gas.particles
        pos = uniform_positions(rng, n, np.zeros(3), self.box)
        vel = maxwell_boltzmann(rng, n, s.gas.temperature, periodic=s.container.walls == "none")
        return {"positions": pos, "velocities": vel, "time": np.zeros(1),
                "rng": seed_state(s.schedule.seed, stream=1)}

    def advance(self, state, duration, acc, producing) -> None:
        c = self.settings.container
        ballistic_advance(state["positions"], state["velocities"], self.box, self.walled,
                          WALL_CODES[c.wall], c.wall_temperature or 0.0, duration, acc,
                          state["rng"])
        state["time"][0] += duration

    def cost_per_time(self) -> float:
        s = self.settings
        hits_per_particle = math.sqrt(8 * s.gas.temperature / math.pi) * 0.5 * sum(
            1.0 / L for L, w in zip(self.box, s.walled) if w)
        return s.gas.particles * (15e-9 * hits_per_particle + 2e-9 / s.output.sample_every)
