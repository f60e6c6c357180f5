"""The verdict on PV = NkT, the reference models beside it, and the run's self-checks.

Reads a :class:`mdgas.run.Run` only. Every check returns ``{"status": "pass" | "warn" |
"fail", "detail": str}``; its tolerance is a number of combined standard errors
(:data:`PASS_SIGMA`, :data:`WARN_SIGMA`) plus, where round-off or a physically
negligible difference could trip it, a stated absolute bound.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from . import distributions, references
from .statistics import MIN_INDEPENDENT, Estimate, detect_equilibration, estimate, \
    statistical_inefficiency

#: Within this many combined standard errors a check passes; beyond WARN_SIGMA it fails.
PASS_SIGMA = 3.0
WARN_SIGMA = 5.0
#: Distribution tests: p-values below these warn / fail.
P_WARN, P_FAIL = 0.01, 1e-4
#: Energy drift over the production run, per particle, in units of kT, that is
#: negligible for pressure and temperature (common practice: well under 0.1% of kT).
DRIFT_OK, DRIFT_WARN = 1e-3, 1e-2
#: Share of production the equilibration detector may discard before it warns.
CUT_WARN = 0.10
#: A verdict is decided when the tolerance lies this many stderr from the deviation.
DECIDE_SIGMA = 2.0


def _status(z: float, negligible: bool = False) -> str:
    if negligible or z <= PASS_SIGMA:
        return "pass"
    return "warn" if z <= WARN_SIGMA else "fail"


def _check(status: str, detail: str) -> dict[str, str]:
    return {"status": status, "detail": detail}


# -- the equilibration cut ---------------------------------------------------------------

def equilibration_cut(run) -> dict[str, Any]:
    """Where production data becomes stationary (Chodera 2016 on the key series).

    Returns the scheduled production start, the detected start (τ) and the number of
    production samples dropped; the detector runs on temperature, total energy and
    every walled face's mean pressure (or the virial pressure), and the latest cut wins.
    """
    times, _ = run.series("temperature")
    names = ["temperature", "total_energy", "pressure_virial"]
    series = [run.series(n)[1] for n in names if n in run.observables]
    faces = [k for k in range(6) if run.settings.walled[k // 2]]
    if faces and "pressure_wall" in run.observables:
        series.append(run.series("pressure_wall")[1][:, faces].mean(axis=1))
    t0 = 0
    for x in series:
        x = np.asarray(x, dtype=float)
        if len(x) < 10 or np.ptp(x) <= 1e-12 * max(1.0, abs(float(x.mean()))):
            continue  # a conserved or constant series says nothing about equilibration
        t0 = max(t0, detect_equilibration(x)[0])
    start = run.production_start
    cut = float(times[t0 - 1]) if t0 > 0 and len(times) else start
    return {"scheduled_start": start, "detected_start": cut, "dropped_samples": int(t0),
            "production_samples": int(len(times))}


# -- Z, the verdict and the references ---------------------------------------------------

def tail_shift(run, pressure_source: str) -> float:
    """ΔZ to add to the measured Z so that it describes the full LJ potential.

    Only for Lennard-Jones runs with ``potential.tail = "corrected"`` whose Z comes from
    the wall pressure: the virial pressure already carries the tail correction, the
    momentum delivered to the walls does not. Zero otherwise.
    """
    s = run.settings
    if s.gas.model != "lennard-jones" or s.potential.tail != "corrected" \
            or pressure_source != "wall":
        return 0.0
    return references.lj_tail_pressure(s.gas.density, s.potential.cutoff) / (
        s.gas.density * s.gas.temperature)


def verdict(z: Estimate, tolerance_percent: float) -> dict[str, Any]:
    """Is |Z − 1| within the tolerance? ``decided`` says whether the error bar settles it."""
    dev = 100.0 * (z.mean - 1.0)
    err = 100.0 * z.stderr if np.isfinite(z.stderr) else float("nan")
    tol = float(tolerance_percent)
    ok = abs(dev) <= tol
    decided = bool(np.isfinite(err) and abs(abs(dev) - tol) >= DECIDE_SIGMA * err)
    if not np.isfinite(err):
        decided = False
    kind = ("less compressible than ideal: repulsion dominates" if dev > 0 else
            "more compressible than ideal: attraction dominates")
    what = f"Z − 1 = {dev:+.3g} % ± {err:.2g} %"
    if decided and ok:
        text = f"PV = NkT is good enough here: {what}, within the {tol:g} % tolerance."
    elif decided:
        text = (f"PV = NkT is not good enough here: {what}, beyond the {tol:g} % "
                f"tolerance; the gas is {kind}.")
    else:
        side = "inside" if ok else "outside"
        text = (f"Undecided: {what} lies {side} the {tol:g} % tolerance, but within "
                f"{DECIDE_SIGMA:g} standard errors of it; lengthen schedule.produce "
                "(or set schedule.target_stderr) to settle it.")
    return {"ideal_ok": bool(ok), "decided": decided,
            "deviation_percent": {"mean": dev, "stderr": err if np.isfinite(err) else None},
            "tolerance_percent": tol,
            "Z_minus_1": {"mean": z.mean - 1.0,
                          "stderr": z.stderr if np.isfinite(z.stderr) else None},
            "statement": text}


def compare(run, z: Estimate, real_fluid: dict | None = None,
            temperature: float | None = None) -> tuple[dict[str, dict], dict[str, str]]:
    """(references, skipped): each applicable model's Z and its distance in stderr.

    References are evaluated at ``temperature``, the measured mean kinetic temperature
    (an isolated run settles near, not at, the set value; default: the set value).
    ``sigma_away`` is (Z_measured − Z_reference)/stderr(Z): positive when the
    simulation lies above the reference. ``real_fluid`` (from the SI mapping) adds
    CoolProp's reference equation for the mapped gas.
    """
    s = run.settings
    t_ref = float(temperature) if temperature and np.isfinite(temperature) \
        else s.gas.temperature
    c = references.predictions(s.gas.model, s.gas.density, t_ref,
                               tail=s.potential.tail, cutoff=s.potential.cutoff)
    se = z.stderr if np.isfinite(z.stderr) and z.stderr > 0 else float("nan")
    confined = s.container.walls != "none"
    out: dict[str, dict] = {}
    for p in c.predictions:
        detail = p.detail
        if confined and p.name != "ideal gas":
            detail += "; bulk fluid at ρ = N/V, while the walls layer the density near them"
        out[p.name] = {"Z": p.Z, "sigma_away": _sigma(z.mean, p.Z, se), "source": p.source,
                       "detail": detail, "in_range": p.in_range}
    skipped = dict(c.skipped)
    if real_fluid is not None:
        name = f"CoolProp {real_fluid['fluid']}"
        try:
            zr = references.coolprop_z(real_fluid["fluid"], real_fluid["temperature_K"],
                                       density_mol_m3=real_fluid["density_mol_m3"])
            out[name] = {"Z": zr, "sigma_away": _sigma(z.mean, zr, se),
                         "source": "CoolProp reference equation of state (Bell et al. 2014)",
                         "detail": (f"the real fluid at {real_fluid['temperature_K']:.4g} K, "
                                    f"{real_fluid['density_mol_m3']:.4g} mol/m³; the gap is "
                                    "the simulated model's own error"),
                         "in_range": True}
        except ImportError as exc:
            skipped[name] = str(exc)
        except ValueError as exc:
            skipped[name] = f"CoolProp refused the state: {exc}"
    return out, skipped


def _sigma(measured: float, ref: float, se: float):
    v = (measured - ref) / se
    return float(v) if np.isfinite(v) else None


# -- self-checks ------------------------------------------------------------------------

def check_wall_vs_virial(run) -> dict[str, str] | None:
    """Wall pressure against the virial pressure tensor on the walled axes.

    The virial theorem along a walled axis a, with hard walls acting on the particle
    centres at two planes a distance L_eff apart, gives P_wall · A · L_eff =
    <Σ m v_a²> + <Σ r_ij,a F_ij,a>, so P_wall · L_eff / L equals the normal component
    P_aa of the virial pressure tensor over the box volume. L_eff = L for point
    centres (ideal gas, Lennard-Jones with hard walls) and L − σ for hard spheres,
    whose centres stop σ/2 from each wall. Soft (9-3) walls add a wall virial that is
    not recorded, so they are skipped. The per-sample difference series gives a stderr
    that keeps the correlation of the two.
    """
    s = run.settings
    axes = [a for a in range(3) if s.walled[a]]
    if not axes or "pressure_tensor" not in run.observables or s.container.wall == "lj93":
        return None
    _, pw = run.series("pressure_wall")
    _, pt = run.series("pressure_tensor")
    box = s.box
    contact = 1.0 if s.gas.model == "hard-sphere" else 0.0
    wall = np.mean([0.5 * (pw[:, 2 * a] + pw[:, 2 * a + 1]) * (box[a] - contact) / box[a]
                    for a in axes], axis=0)
    vir = pt[:, axes].mean(axis=1)
    note = ""
    if s.gas.model == "lennard-jones" and s.potential.tail == "corrected":
        tail = references.lj_tail_pressure(s.gas.density, s.potential.cutoff)
        vir = vir - tail
        note = f" (virial without its tail correction {tail:.4g})"
    d = estimate(wall - vir)
    scale = max(abs(float(wall.mean())), 1e-300)
    if not np.isfinite(d.stderr):
        return _check("warn", "too few samples to compare wall and virial pressure")
    z = abs(d.mean) / d.stderr if d.stderr > 0 else (0.0 if d.mean == 0 else math.inf)
    rel = abs(d.mean) / scale
    model = "kinetic part only (no pair forces)" if s.gas.model == "ideal" else "kinetic + pair"
    detail = (f"wall {wall.mean():.5g} vs virial{note} {vir.mean():.5g} ε/σ³ ({model}): "
              f"difference {d.mean:+.3g} ± {d.stderr:.2g} ({z:.1f} stderr, {100 * rel:.2g} %)")
    return _check(_status(z, negligible=rel < 1e-3), detail)


def expected_temperature(settings) -> float:
    c = settings.container
    if c.wall == "thermal" and c.walls != "none" and c.wall_temperature:
        return float(c.wall_temperature)
    return float(settings.gas.temperature)


def check_temperature(run, t: Estimate) -> dict[str, str]:
    """Mean kinetic temperature against the set (or thermal-wall) temperature.

    Without a thermostat or thermal walls in production the run is microcanonical: its
    mean temperature may sit off the set value by the canonical spread of the energy it
    started production with, at most T·sqrt(2/(3N)); that is added to the stderr.
    """
    s = run.settings
    target = expected_temperature(s)
    isolated = s.schedule.produce_thermostat == "none" and not (
        s.container.wall == "thermal" and s.container.walls != "none")
    spread = target * math.sqrt(2.0 / (3.0 * s.gas.particles)) if isolated else 0.0
    se = t.stderr if np.isfinite(t.stderr) else 0.0
    sigma = math.hypot(se, spread)
    diff = t.mean - target
    negligible = abs(diff) <= 1e-9 * target
    z = abs(diff) / sigma if sigma > 0 else (0.0 if negligible else math.inf)
    why = "stderr ⊕ NVE spread" if spread else "stderr"
    detail = (f"kinetic {t.mean:.5g} vs set {target:.5g} ε/k: {diff:+.3g}, "
              f"{z:.1f} σ (σ = {why} = {sigma:.2g})")
    return _check(_status(z, negligible), detail)


def check_maxwell_boltzmann(run) -> dict[str, str] | None:
    """KS test of the final speeds and chi-square of the production speed histogram.

    The final velocities are one snapshot, tested against Maxwell-Boltzmann at that
    snapshot's own kinetic temperature (a fitted parameter makes the test
    conservative). Successive snapshots in the histogram are correlated, so it is
    rescaled to one snapshot's worth of counts (N) before the chi-square: conservative.
    """
    vel = run.final_state.get("velocities")
    if vel is None or len(vel) < 5:
        return None
    v = np.asarray(vel, dtype=float)
    t_snap = float((v ** 2).sum() / (3 * len(v)))
    ks = distributions.speed_ks(v, t_snap)
    parts = [f"KS on the final {len(v)} speeds at T = {t_snap:.4g}: D = "
             f"{ks['ks_statistic']:.3g}, p = {ks['p_value']:.3g}"]
    ps = [ks["p_value"]]
    h = run.histograms
    if h and float(h.get("samples", 0)) > 0 and h["speed_counts"].sum() > 0:
        counts = h["speed_counts"] / float(h["samples"])
        _, temp = run.series("temperature")
        chi = distributions.speed_chi2(h["speed_edges"], counts, float(np.mean(temp)))
        parts.append(f"chi-square of the speed histogram (scaled to one snapshot): "
                     f"{chi['chi2']:.1f} on {chi['dof']} dof, p = {chi['p_value']:.3g}")
        ps.append(chi["p_value"])
    p = min(ps)
    status = "pass" if p >= P_WARN else ("warn" if p >= P_FAIL else "fail")
    return _check(status, "; ".join(parts))


def energy_conserved(settings) -> str:
    """Empty when total energy (less thermostat work) should be conserved, else why not."""
    c = settings.container
    if c.wall == "thermal" and c.walls != "none":
        return "thermal walls exchange energy with the gas and that exchange is not recorded"
    return ""


def check_energy_drift(run) -> dict[str, str] | None:
    """Linear drift of the total energy per particle (less thermostat work) over
    production, against DRIFT_OK·kT; the fit's stderr is inflated by the residuals'
    statistical inefficiency."""
    s = run.settings
    # The chunk-averaged energy (engines that record it) is far less noisy than the
    # sample's kinetic snapshot plus chunk-averaged potential energy.
    name = "energy_mean" if "energy_mean" in run.observables else "total_energy"
    if name not in run.observables or energy_conserved(s):
        return None
    times, e = run.series(name)
    if len(e) < 10:
        return None
    n = s.gas.particles
    if "thermostat_work" in run.observables:
        _, w = run.series("thermostat_work")
        e = e - np.cumsum(w) / n
    t = times - times[0]
    slope, icpt = np.polyfit(t, e, 1)
    resid = e - (slope * t + icpt)
    span = float(t[-1]) if t[-1] > 0 else 1.0
    g = statistical_inefficiency(resid)
    sxx = float(((t - t.mean()) ** 2).sum())
    se_slope = math.sqrt(max(float(resid.var(ddof=2)), 0.0) * g / sxx) if sxx > 0 else 0.0
    kt = max(expected_temperature(s), 1e-300)
    drift, se_drift = slope * span / kt, se_slope * span / kt
    z = abs(drift) / se_drift if se_drift > 0 else (0.0 if drift == 0 else math.inf)
    detail = (f"drift {drift:+.2g} ± {se_drift:.2g} kT per particle over {span:.4g} τ "
              f"(fluctuation {resid.std() / kt:.2g} kT)")
    if abs(drift) <= DRIFT_OK or (z <= PASS_SIGMA and PASS_SIGMA * se_drift <= DRIFT_WARN):
        return _check("pass", detail)
    if z <= PASS_SIGMA:
        # Samples pair a time-averaged potential energy with an end-of-interval kinetic
        # energy, so the series is noisier than the conserved energy itself.
        return _check("warn", detail + f"; too noisy to resolve a drift below "
                      f"{DRIFT_WARN:g} kT: lengthen schedule.produce")
    return _check("warn" if abs(drift) <= DRIFT_WARN else "fail", detail)


def check_samples(n_eff: dict[str, float]) -> dict[str, str]:
    few = {k: v for k, v in n_eff.items() if v < MIN_INDEPENDENT}
    detail = ", ".join(f"{k} {v:.0f}" for k, v in n_eff.items())
    if few:
        return _check("warn", f"effectively independent samples: {detail}; fewer than "
                      f"{MIN_INDEPENDENT} make the error bar itself uncertain")
    return _check("pass", f"effectively independent samples: {detail}")


def check_equilibration(cut: dict[str, Any], produce: float) -> dict[str, str]:
    dropped = cut["detected_start"] - cut["scheduled_start"]
    share = dropped / produce if produce > 0 else 0.0
    detail = (f"stationary from t = {cut['detected_start']:.4g} τ; the first "
              f"{dropped:.3g} τ ({100 * share:.2g} %) of production were left out")
    if share > CUT_WARN:
        return _check("warn", detail + "; lengthen schedule.equilibrate")
    return _check("pass", detail)


def self_checks(run, t: Estimate, n_eff: dict[str, float], cut: dict[str, Any]
                ) -> tuple[dict[str, dict], dict[str, str]]:
    """(checks, skipped): every self-check that applies, and why the others do not."""
    checks: dict[str, dict] = {}
    skipped: dict[str, str] = {}
    wv = check_wall_vs_virial(run)
    if wv is None:
        skipped["wall_vs_virial"] = (
            "soft 9-3 walls: their virial is not recorded" if run.settings.container.wall
            == "lj93" and run.settings.container.walls != "none"
            else "no walls: the virial pressure is the only measurement")
    else:
        checks["wall_vs_virial"] = wv
    checks["temperature"] = check_temperature(run, t)
    mb = check_maxwell_boltzmann(run)
    if mb is None:
        skipped["maxwell_boltzmann"] = "no final velocities in the run file"
    else:
        checks["maxwell_boltzmann"] = mb
    ed = check_energy_drift(run)
    if ed is None:
        skipped["energy_drift"] = energy_conserved(run.settings) or \
            "no total-energy series long enough"
    else:
        checks["energy_drift"] = ed
    checks["sample_size"] = check_samples(n_eff)
    checks["equilibration"] = check_equilibration(cut, run.settings.schedule.produce)
    return checks, skipped

