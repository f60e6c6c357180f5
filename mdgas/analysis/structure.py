"""Structure from the production histograms: g(r), density profiles, contact densities.

All functions take the ``histograms`` dict of a :class:`mdgas.run.Run` (see
``mdgas.observe.Histograms``) and return number densities in σ⁻³.
"""

from __future__ import annotations

import numpy as np


def radial_distribution(hist: dict, particles: int, volume: float) -> tuple[np.ndarray, np.ndarray]:
    """(r at bin centres, g(r)) from ordered pair counts, ideal-gas normalised.

    g(r) = counts / (samples · N · (N − 1)/V · shell volume): the (N − 1) makes an ideal
    gas give exactly 1 in a finite periodic box.
    """
    edges, counts = hist["rdf_edges"], hist["rdf_counts"]
    samples = float(hist["samples"])
    shell = 4.0 / 3.0 * np.pi * np.diff(edges ** 3)
    norm = samples * particles * (particles - 1) / volume * shell
    with np.errstate(invalid="ignore", divide="ignore"):
        g = np.where(norm > 0, counts / norm, np.nan)
    return 0.5 * (edges[1:] + edges[:-1]), g


def density_profile(hist: dict, box: np.ndarray, axis: int) -> tuple[np.ndarray, np.ndarray]:
    """(position along ``axis`` at bin centres, number density) averaged over snapshots."""
    edges, counts = hist["profile_edges"][axis], hist["profile_counts"][axis]
    area = float(np.prod(box)) / float(box[axis])
    rho = counts / (float(hist["samples"]) * area * np.diff(edges))
    return 0.5 * (edges[1:] + edges[:-1]), rho


def wall_layer_profile(hist: dict, box: np.ndarray, face: int) -> tuple[np.ndarray, np.ndarray]:
    """(distance of particle centres from the wall plane, number density) next to ``face``.

    Faces are numbered 0..5 as x-, x+, y-, y+, z-, z+.
    """
    edges, counts = hist["wall_layer_edges"], hist["wall_layer_counts"][face]
    axis = face // 2
    area = float(np.prod(box)) / float(box[axis])
    rho = counts / (float(hist["samples"]) * area * np.diff(edges))
    return 0.5 * (edges[1:] + edges[:-1]), rho
