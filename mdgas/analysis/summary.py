"""The summary of one run: the measured state, Z with its error, and the run's self-checks.

Everything here reads a :class:`mdgas.run.Run`; numbers are in reduced units. Numbers
that carry uncertainty are ``{"mean": x, "stderr": s}`` in the JSON form.
"""

from __future__ import annotations

import dataclasses
from typing import Any, Callable

import numpy as np

from ..config import FACES
from . import distributions, verdict as _verdict
from .statistics import MIN_INDEPENDENT, Estimate, estimate, ratio, ratio_series


def _face_estimates(run) -> dict[str, Estimate]:
    _, pw = run.series("pressure_wall")
    return {FACES[k]: estimate(pw[:, k]) for k in range(6) if run.settings.walled[k // 2]}


def z_inputs(settings, series: Callable[[str], np.ndarray]) -> tuple[str, np.ndarray, np.ndarray]:
    """(source, per-sample pressure, per-sample temperature) behind Z = <P> / (ρ <kT>).

    With walls: the area-weighted wall pressure over the walled faces (total impulse
    per total wall area, so a small, rarely hit end cap does not dominate the noise),
    divided by the same area-weighted kinetic temperature of the faces' normal axes.
    The wall pressure follows the kinetic energy along its normal, which in a dilute
    gas between walls drifts away from the mean for hundreds of τ; the ratio cancels
    that drift (in equilibrium <T_a> = <T>, so the estimate is unchanged). Without
    walls: the virial pressure over the kinetic temperature. ``series(name)`` returns
    an observable's production samples.
    """
    faces = [k for k in range(6) if settings.walled[k // 2]]
    temp = np.asarray(series("temperature"), dtype=float)
    if not faces:
        return "virial", np.asarray(series("pressure_virial"), dtype=float), temp
    box = settings.box
    area = np.array([box[1] * box[2], box[0] * box[2], box[0] * box[1]]).repeat(2)[faces]
    w = area / area.sum()
    p = np.asarray(series("pressure_wall"), dtype=float)[:, faces] @ w
    try:
        t_axes = np.asarray(series("temperature_axes"), dtype=float)
        temp = t_axes[:, [k // 2 for k in faces]] @ w
    except KeyError:  # run files written before per-axis temperatures were recorded
        pass
    return "wall", p, temp


def _z_inputs(run) -> tuple[str, np.ndarray, np.ndarray]:
    return z_inputs(run.settings, lambda name: run.series(name)[1])


def wall_pressure(run) -> Estimate | None:
    """Area-weighted wall pressure over every walled face (ε/σ³), or None without walls."""
    src, p, _ = _z_inputs(run)
    return estimate(p) if src == "wall" else None


def measured_pressure(run) -> tuple[str, Estimate]:
    """The pressure Z is built on: wall pressure with walls, virial pressure without."""
    src, p, _ = _z_inputs(run)
    return src, estimate(p)


def pressure_series(run) -> tuple[str, np.ndarray]:
    """(source, per-sample pressure) behind Z."""
    src, p, _ = _z_inputs(run)
    return src, p


def compressibility(run) -> Estimate:
    """Z = <P> / (ρ <kT>), the error keeping the correlation of P and T samples
    (:func:`mdgas.analysis.statistics.ratio_series`); see :func:`z_inputs`."""
    _, p, t = _z_inputs(run)
    return ratio_series(p, t, 1.0 / run.settings.gas.density)


def si_state(run, t: Estimate, p: Estimate) -> dict[str, Any] | None:
    """SI values of the measured state when the run is mapped onto a real gas, else None.

    Hook for the units module: uses ``mdgas.units.system_of(settings)`` (None for a run
    in reduced units) and ``mdgas.units.to_si``; the species' CoolProp name (from
    ``mdgas.species``) enables the real-fluid reference.
    """
    try:
        from .. import units as _units
        system_of, to_si = _units.system_of, _units.to_si
    except (ImportError, AttributeError):
        return None
    us = system_of(run.settings)
    if us is None:
        return None
    s = run.settings

    def conv(kind: str, e: Estimate) -> dict[str, float | None]:
        f = to_si(us, kind, 1.0)[0]
        return {"mean": e.mean * f, "stderr": e.stderr * f if np.isfinite(e.stderr) else None}

    rho_mol = to_si(us, "molar_density", s.gas.density)[0]
    out: dict[str, Any] = {
        "species": getattr(us, "species", ""),
        "sigma_m": us.sigma, "epsilon_over_k_K": to_si(us, "temperature", 1.0)[0],
        "temperature_set_K": to_si(us, "temperature", s.gas.temperature)[0],
        "temperature_K": conv("temperature", t),
        "pressure_Pa": conv("pressure", p),
        "density_mol_m3": rho_mol,
        "mass_density_kg_m3": to_si(us, "mass_density", s.gas.density)[0],
        "real_fluid": None,
    }
    fluid = ""
    if out["species"]:
        try:
            from .. import species as _species
            fluid = getattr(_species.get(out["species"]), "coolprop", "")
        except (ImportError, AttributeError):
            fluid = ""
    if fluid:
        # At the measured temperature, as the model references are.
        t_k = out["temperature_K"]["mean"]
        out["real_fluid"] = {"fluid": fluid, "density_mol_m3": rho_mol,
                             "temperature_K": t_k if np.isfinite(t_k) else
                             out["temperature_set_K"]}
    return out


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


def energy_figures(run) -> dict[str, Any]:
    """Energy figures per particle (ε), JSON-ready.

    ``potential_energy``: pair (+ wall) energy per particle, with the engine's tail
    correction where chosen. ``energy_drift``: relative drift of the total energy over
    production, slope × (t_end − t_start) / |mean E| of a straight-line fit to
    E(t) − W(t), E the chunk-averaged total energy (series ``energy_mean``), W the
    cumulative energy the thermostat added (0 in plain NVE); None with fewer than 3
    samples or E = 0.
    """
    t, pot = run.series("potential_energy")
    _, etot = run.series("energy_mean" if "energy_mean" in run.observables else "total_energy")
    _, work = run.series("thermostat_work")
    e = etot - np.cumsum(work) / run.settings.gas.particles
    drift = None
    if len(t) >= 3 and np.all(np.isfinite(e)) and abs(e.mean()) > 0:
        slope = np.polyfit(t, e, 1)[0]
        drift = float(slope * (t[-1] - t[0]) / abs(e.mean()))
    return {"potential_energy": estimate(pot).as_json(), "energy_drift": drift}


def summarize(run) -> dict[str, Any]:
    """The summary as a JSON-ready dict (see README, "Summary keys").

    Production samples before the detected end of equilibration are left out of every
    estimate; the verdict, the references and the self-checks are added last.
    """
    cut = _verdict.equilibration_cut(run)
    if cut["dropped_samples"]:
        full_run = run
        run = dataclasses.replace(run, meta={**run.meta,
                                             "production_start": cut["detected_start"]})
    else:
        full_run = run
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
    out.update(energy_figures(run))
    out.update(_assessment(run, full_run, out, t_est, p_est, z, kind, n_eff, cut))
    return out


def _assessment(run, full_run, out, t_est, p_est, z, kind, n_eff, cut) -> dict[str, Any]:
    """The verdict, the references and the self-checks (summary keys of the same name)."""
    s = run.settings
    shift = _verdict.tail_shift(run, kind)
    z_model = Estimate(z.mean + shift, z.stderr, z.n_eff)
    extra: dict[str, Any] = {}
    if shift:
        extra["Z_measured"] = z.as_json()
        extra["Z"] = z_model.as_json()
        extra["tail_correction_Z"] = shift
        out["warnings"].append(
            f"Z includes the analytic LJ tail correction {shift:+.4g} (the wall pressure "
            "of the truncated potential does not carry it)")
    si = si_state(run, t_est, p_est)
    refs, skipped = _verdict.compare(run, z_model, si["real_fluid"] if si else None,
                                     temperature=t_est.mean)
    checks, checks_skipped = _verdict.self_checks(run, t_est, n_eff, cut)
    for name, c in checks.items():
        if c["status"] != "pass":
            out["warnings"].append(f"self-check {name}: {c['status']}: {c['detail']}")
    extra.update({
        "verdict": _verdict.verdict(z_model, s.analysis.tolerance),
        "references": refs,
        "references_skipped": skipped,
        "checks": checks,
        "checks_skipped": checks_skipped,
        "equilibration": cut,
        "si": si,
    })
    if si:  # the real-gas section (mdgas.statepoint): SI figures, requested P, pore
        from ..statepoint import real_gas
        extra["real_gas"] = real_gas(run, t_est, p_est, z_model, kind)
    return extra


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
    lines += _render_assessment(s)
    for w in s["warnings"]:
        lines.append(f"warning   {w}")
    return "\n".join(lines)


_MARK = {"pass": "pass", "warn": "WARN", "fail": "FAIL"}


def _render_assessment(s: dict[str, Any]) -> list[str]:
    lines: list[str] = []
    si = s.get("si")
    if si:
        t, p = si["temperature_K"], si["pressure_Pa"]
        lines.append(f"SI        {si['species'] or 'mapped gas'}: T = {t['mean']:.4g} K, "
                     f"P = {p['mean'] / 1e5:.4g} ± {(p['stderr'] or 0) / 1e5:.2g} bar, "
                     f"ρ = {si['density_mol_m3'] / 1e3:.4g} mol/L")
    if s.get("real_gas"):
        from ..statepoint import render_real_gas
        lines += render_real_gas(s["real_gas"])
    v = s.get("verdict")
    if v:
        lines.append("")
        lines.append(f"verdict   {v['statement']}")
    refs = s.get("references") or {}
    if refs:
        lines.append("references (Z, and how many stderr the measurement lies above it)")
        for name, r in refs.items():
            sig = "n/a" if r["sigma_away"] is None else f"{r['sigma_away']:+.1f}"
            flag = "" if r.get("in_range", True) else "  (outside its range)"
            lines.append(f"  {name:<22} Z = {r['Z']:.5g}   {sig} σ{flag}")
    for name, why in (s.get("references_skipped") or {}).items():
        lines.append(f"  {name:<22} skipped: {why}")
    checks = s.get("checks") or {}
    if checks:
        lines.append("self-checks")
        for name, c in checks.items():
            lines.append(f"  {_MARK[c['status']]:<5} {name:<18} {c['detail']}")
    for name, why in (s.get("checks_skipped") or {}).items():
        lines.append(f"  --    {name:<18} not applicable: {why}")
    return lines
