"""Wall collision rules shared by the engines (specular and thermal, hard walls).

Faces are numbered 2·axis + (0 for the lower wall, 1 for the upper), matching
``mdgas.config.FACES`` and the impulse slots of :mod:`mdgas.observe`.
"""

from __future__ import annotations

import math

from numba import njit, prange

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


# -- the 9-3 wall (soft, Lennard-Jones engines) -------------------------------------
#
# Integrating the LJ 12-6 pair potential over a uniform half-space of wall atoms gives
# U(h) = ε_w [(2/15)(σ_w/h)⁹ - (σ_w/h)³], h the distance of the particle centre from
# the wall plane (common practice: the integral is elementary), with ε_w = (2/3)π ρ_w ε σ³ absorbing the wall density. Its minimum is at
# h = (2/5)^(1/6) σ_w ≈ 0.858 σ_w, depth ≈ 1.054 ε_w. It is cut at ``wall_cutoff`` and
# shifted there to zero. The wall planes are the box faces 0 and L of a walled axis.


def lj93_minimum(sigma: float) -> float:
    """Distance of the 9-3 potential's minimum from the wall plane (σ)."""
    return (0.4 ** (1.0 / 6.0)) * sigma


@njit(cache=True)
def lj93_potential(h, epsilon, sigma, shift):
    """9-3 wall energy at distance ``h`` from the wall plane, less ``shift`` (ε)."""
    s3 = (sigma / h) ** 3
    return epsilon * (2.0 / 15.0 * s3 * s3 * s3 - s3) - shift


@njit(cache=True, parallel=True, error_model="numpy")
def lj93_wall_forces(pos, box, walled, epsilon, sigma, cutoff, shift, force, fwall):
    """Add the 9-3 wall forces on every walled axis to ``force`` (ε/σ).

    ``fwall`` (6,) receives the force the particles exert on each face, outward positive
    (the wall pressure is its time average over the face area). Returns the total wall
    energy (ε). Positions must lie strictly between the planes of walled axes.
    """
    n = pos.shape[0]
    uw = 0.0
    for a in range(3):
        fwall[2 * a] = 0.0
        fwall[2 * a + 1] = 0.0
        if not walled[a]:
            continue
        lower = 0.0
        upper = 0.0
        ua = 0.0
        L = box[a]
        for i in prange(n):
            h = pos[i, a]
            if h < cutoff:
                s3 = (sigma / h) ** 3
                s9 = s3 * s3 * s3
                fh = epsilon * (1.2 * s9 - 3.0 * s3) / h  # -dU/dh, away from the wall
                force[i, a] += fh
                lower += fh
                ua += epsilon * (2.0 / 15.0 * s9 - s3) - shift
            h = L - pos[i, a]
            if h < cutoff:
                s3 = (sigma / h) ** 3
                s9 = s3 * s3 * s3
                fh = epsilon * (1.2 * s9 - 3.0 * s3) / h
                force[i, a] -= fh
                upper += fh
                ua += epsilon * (2.0 / 15.0 * s9 - s3) - shift
        fwall[2 * a] = lower
        fwall[2 * a + 1] = upper
        uw += ua
    return uw
