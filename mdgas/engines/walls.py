"""Wall collision rules shared by the engines (specular and thermal, hard walls).

Faces are numbered 2·axis + (0 for the lower wall, 1 for the upper), matching
``mdgas.config.FACES`` and the impulse slots of :mod:`mdgas.observe`.
"""

from __future__ import annotations

import math

from numba import njit

from ..observe import HITS, IMPULSE
from .rng import normal, uniform

SPECULAR, THERMAL, LJ93 = 0, 1, 2
WALL_CODES = {"specular": SPECULAR, "thermal": THERMAL, "lj93": LJ93}


@njit(cache=True)
def hard_wall_bounce(vel, i, axis, upper, kind, wall_temperature, acc, rng):
    """Turn particle ``i`` around at a hard wall and book the impulse (unit mass).

    Specular: the normal velocity changes sign. Thermal (diffuse): the particle is
    re-emitted with the flux-weighted Maxwell-Boltzmann distribution at the wall
    temperature — normal speed from a Rayleigh distribution, each tangential component
    from a normal distribution — so the wall exchanges energy with the gas.
    """
    vn_in = abs(vel[i, axis])
    if kind == THERMAL:
        s = math.sqrt(wall_temperature)
        vn_out = s * math.sqrt(-2.0 * math.log(uniform(rng)))
        for a in range(3):
            if a != axis:
                vel[i, a] = s * normal(rng)
    else:
        vn_out = vn_in
    vel[i, axis] = -vn_out if upper else vn_out
    face = 2 * axis + (1 if upper else 0)
    acc[IMPULSE + face] += vn_in + vn_out
    acc[HITS + face] += 1.0
