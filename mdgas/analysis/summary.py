"""The summary of one run: the measured state, Z with its error, and the run's self-checks.

Everything here reads a :class:`mdgas.run.Run`; numbers are in reduced units. Numbers
that carry uncertainty are ``{"mean": x, "stderr": s}`` in the JSON form.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..config import FACES
from . import distributions
from .statistics import MIN_INDEPENDENT, Estimate, estimate, ratio


def _face_estimates(run) -> dict[str, Estimate]:
    _, pw = run.series("pressure_wall")
    return {FACES[k]: estimate(pw[:, k]) for k in range(6) if run.settings.walled[k // 2]}


def wall_pressure(run) -> Estimate | None:
    """Wall pressure over every walled face (ε/σ³), or None without walls.

    Area-weighted: the total impulse on all walls per total wall area and time, so a
    small, rarely hit face (the end cap of a tall column) does not dominate the noise.
    """
    faces = [k for k in range(6) if run.settings.walled[k // 2]]
    if not faces:
        return None
    _, pw = run.series("pressure_wall")
    box = run.settings.box
    area = np.array([box[1] * box[2], box[0] * box[2], box[0] * box[1]]).repeat(2)[faces]
    return estimate(pw[:, faces] @ (area / area.sum()))


def measured_pressure(run) -> tuple[str, Estimate]:
    """The pressure Z is built on: wall pressure with walls, virial pressure without."""
    pw = wall_pressure(run)
    if pw is not None:
        return "wall", pw
    _, pv = run.series("pressure_virial")
    return "virial", estimate(pv)


def compressibility(run) -> Estimate:
    """Z = P / (ρ kT) with the measured mean kinetic temperature."""
    _, p = measured_pressure(run)
    _, temp = run.series("temperature")
    t = estimate(temp)
    return ratio(p, t, 1.0 / run.settings.gas.density)


def collision_figures(run) -> dict[str, Any]:
    """Pair-collision figures (hard spheres; zeros elsewhere): JSON-ready estimates.

    ``pressure_virial``: the virial pressure (ε/σ³, kinetic + collision virial over V).
    ``collision_rate``: pair collisions per particle per τ, 2 C / (N Δt) per sample.
    ``mean_free_path``: λ = <|v|> / collision_rate (σ), with the Maxwell-Boltzmann mean
    speed <|v|> = sqrt(8 kT / (π m)) at the measured temperature; None without collisions.
    """
    times, coll = run.series("collisions", production=False)
    mask = run.production_mask()
    dt = np.diff(np.concatenate([[0.0], times]))[mask]
    rate = estimate(2.0 * coll[mask] / (run.settings.gas.particles * dt))
    _, pv = run.series("pressure_virial")
    _, temp = run.series("temperature")
    t = estimate(temp)
    mfp = None
    if rate.mean > 0:
        speed = Estimate(float(np.sqrt(8.0 * t.mean / np.pi)), 0.5 * float(
            np.sqrt(8.0 * t.mean / np.pi)) * t.stderr / t.mean, t.n_eff)
        mfp = ratio(speed, rate).as_json()
    return {"pressure_virial": estimate(pv).as_json(), "collision_rate": rate.as_json(),
            "mean_free_path": mfp}


def summarize(run) -> dict[str, Any]:
    """The summary as a JSON-ready dict (see README, "Summary keys")."""
    s = run.settings
    _, temp = run.series("temperature")
    _, hits = run.series("wall_hits")
    t_est = estimate(temp)
    kind, p_est = measured_pressure(run)
    z = compressibility(run)
    pw = wall_pressure(run)
    faces = _face_estimates(run)
    vel = run.final_state.get("velocities")
    speed = distributions.speed_ks(vel, t_est.mean) if vel is not None else None
    n_eff = {"temperature": t_est.n_eff, "pressure": p_est.n_eff, "Z": z.n_eff}
    warnings = [f"only {n:.0f} effectively independent samples behind {name}; "
                "lengthen schedule.produce for a trustworthy error bar"
                for name, n in n_eff.items() if n < MIN_INDEPENDENT]
    if not run.complete:
        warnings.insert(0, f"the run is {run.status}: {run.message or 'not finished'}")
    out: dict[str, Any] = {
        "path": str(run.path),
        "status": run.status,
        "model": s.gas.model,
        "particles": s.gas.particles,
        "density": s.gas.density,
        "box": [float(x) for x in s.box],
        "walls": s.container.walls,
        "temperature_set": s.gas.temperature,
        "temperature": t_est.as_json(),
        "pressure_source": kind,
        "pressure": p_est.as_json(),
        "pressure_wall": pw.as_json() if pw is not None else None,
        "pressure_walls": {k: v.as_json() for k, v in faces.items()},
        "Z": z.as_json(),
        "wall_hits": int(hits.sum()),
        "speed_distribution": speed,
        "production_time": float(s.schedule.produce),
        "effective_samples": n_eff,
        "warnings": warnings,
    }
    out.update(collision_figures(run))
    return out


def _pm(e: dict | None, digits: int = 4) -> str:
    if e is None:
        return "n/a"
    if e["stderr"] is None:
        return f"{e['mean']:.{digits}g} ± ?"
    return f"{e['mean']:.{digits}g} ± {e['stderr']:.2g}"


def render_text(summary: dict[str, Any]) -> str:
    """The plain-text summary: the state, the measurement, then warnings."""
    s = summary
    lines = [
        f"run       {s['path']}  ({s['status']})",
        f"model     {s['model']}, N = {s['particles']}, ρ = {s['density']:.4g} σ⁻³, "
        f"walls: {s['walls']}",
        f"box       {' × '.join(f'{x:.4g}' for x in s['box'])} σ",
        f"T         {_pm(s['temperature'])} ε/k   (set {s['temperature_set']:.4g})",
        f"P         {_pm(s['pressure'])} ε/σ³   ({s['pressure_source']} pressure)",
    ]
    for face, e in s["pressure_walls"].items():
        lines.append(f"  wall {face:<3} {_pm(e)} ε/σ³")
    z = s["Z"]
    lines.append(f"Z         {_pm(z)}   (PV = NkT gives 1)")
    if z["mean"] is not None:
        dev = 100 * (z["mean"] - 1.0)
        err = 100 * z["stderr"] if z["stderr"] is not None else float("nan")
        lines.append(f"Z - 1     {dev:+.3f} % ± {err:.2g} %")
    lines.append(f"wall hits {s['wall_hits']:,}")
    sd = s.get("speed_distribution")
    if sd:
        lines.append(f"speeds    KS vs Maxwell-Boltzmann: D = {sd['ks_statistic']:.4f}, "
                     f"p = {sd['p_value']:.3f}")
    for w in s["warnings"]:
        lines.append(f"warning   {w}")
    return "\n".join(lines)
