"""State points given by pressure, and the real-gas view of a finished run.

``gas.pressure`` (with ``gas.temperature``) is mapped to the number density the model
has there, by the best equation of state mdgas has for the model:

* ideal: ρ = P/T, exact;
* hard-sphere: Carnahan & Starling, J. Chem. Phys. 51, 635 (1969);
* lennard-jones: Thol, Rutkai, Köster, Lustig, Span & Vrabec, J. Phys. Chem. Ref. Data
  45, 023101 (2016) through teqp, for the full potential; for ``potential.tail =
  "shifted"`` the interactions beyond r_c are taken off in mean field (g(r) = 1, common
  practice). Without teqp, the virial series to B2.

The run then measures the pressure the model actually has at that density, and
:func:`real_gas` reports both side by side with the real fluid's reference equation
(CoolProp) and, for slit pores, the confinement figures. All arguments are reduced
(σ, ε, kT/ε, ε/σ³, Nσ³/V) unless a name ends in an SI unit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Callable

from scipy import optimize

from .errors import ConfigError

#: The cautions every report with SI values carries.
CAUTIONS = (
    "Model estimates only: a simulated model fluid, not measured property data.",
    "Vessel and piping design follows the applicable pressure-equipment codes and is done "
    "by licensed engineers.",
    "Use certified property data for design.",
)

#: The known limits of the spherical Lennard-Jones model of a real gas.
MODEL_LIMITS = (
    "A spherical Lennard-Jones particle is a poor model for strongly non-spherical or "
    "polar molecules (CO2, H2O, NH3), and only fair for N2, O2, CO.",
    "Helium and hydrogen are quantum fluids: the classical model fails at low temperature "
    "(below about 50 K) and is only fair at room temperature.",
    "The parameters are fitted to second virial coefficients: pair interactions at gas "
    "densities; the dense fluid is less well described.",
)

#: Stated relative accuracy of each equation of state in pressure at given (T, ρ).
#: Thol et al. (2016) estimate their equation's uncertainty against simulation data at
#: well under 1 % in the homogeneous gas and supercritical fluid, larger near the
#: critical point (from memory); mdgas states 1 %, and 5 % in the near-critical box.
LJ_ACCURACY, LJ_NEAR_CRITICAL_ACCURACY = 0.01, 0.05
#: Carnahan-Starling against hard-sphere simulation: within about 1 % in Z across the
#: stable fluid, η < 0.494 (Carnahan & Starling 1969, their comparison table; from memory).
CS_ACCURACY = 0.01
#: Freezing packing fraction of hard spheres (Hoover & Ree, J. Chem. Phys. 49, 3609 (1968)).
HS_FREEZING_ETA = 0.494


@dataclass(frozen=True)
class EquationOfState:
    """Z(T, ρ) of one model, with its source and stated accuracy (None = not stated)."""

    name: str
    source: str
    z: Callable[[float, float], float]
    accuracy: float | None
    note: str = ""
    max_density: float = 1.2

    def pressure(self, temperature: float, density: float) -> float:
        """P = ρ T Z (ε/σ³)."""
        return density * temperature * self.z(temperature, density)

    def accuracy_at(self, temperature: float, density: float) -> float | None:
        if self.accuracy is None:
            return None
        if self.name.startswith("Thol"):
            from .analysis.references import LJ_CRITICAL
            tc, rc = LJ_CRITICAL["temperature"], LJ_CRITICAL["density"]
            if abs(temperature / tc - 1) < 0.1 and abs(density / rc - 1) < 0.3:
                return LJ_NEAR_CRITICAL_ACCURACY
        return self.accuracy


def equation_for(model: str, tail: str = "corrected", cutoff: float = 3.0) -> EquationOfState:
    """The best available equation of state for ``model`` as the engine runs it."""
    from .analysis import references as ref
    if model == "ideal":
        return EquationOfState("ideal gas", "PV = NkT", lambda t, r: 1.0, 0.0,
                               "exact for non-interacting point particles")
    if model == "hard-sphere":
        return EquationOfState("Carnahan-Starling", "Carnahan & Starling, J. Chem. Phys. 51, "
                               "635 (1969)", lambda t, r: ref.carnahan_starling(r), CS_ACCURACY,
                               f"fluid branch, packing fraction below {HS_FREEZING_ETA}",
                               max_density=6.0 * HS_FREEZING_ETA / math.pi)
    if model != "lennard-jones":
        raise ValueError(f"no equation of state for model {model!r}")
    shifted = tail != "corrected"  # "shifted" or "shifted-force": no tail beyond r_c

    def minus_tail(t: float, r: float) -> float:
        # The run's forces stop at r_c and it adds no tail: take the tail off the EOS.
        return -ref.lj_tail_pressure(r, cutoff) / (r * t) if shifted else 0.0

    if ref.available()["teqp"]:
        note = ("full LJ potential, as the run with the tail correction" if not shifted else
                f"full LJ potential less the mean-field tail beyond r_c = {cutoff:g} σ")
        return EquationOfState(
            "Thol 2016", ref.TEQP_LJ_MODELS["Thol 2016"][1] + " (via teqp)",
            lambda t, r: ref.teqp_lj("Thol 2016", r, t) + minus_tail(t, r),
            LJ_ACCURACY * (2.0 if shifted else 1.0), note)
    return EquationOfState(
        "virial B2", "B2(T) of the LJ potential by quadrature",
        lambda t, r: ref.virial_b2(ref.lj_b2(t, cutoff if shifted else None), r), None,
        "teqp is not installed: truncated virial series, trusted only while |B2 ρ| < 0.1",
        max_density=0.3)


@dataclass(frozen=True)
class StatePoint:
    """The density chosen for a requested (T, P), and by which equation."""

    temperature: float
    pressure: float
    density: float
    eos: EquationOfState
    warning: str = ""

    @property
    def z(self) -> float:
        return self.eos.z(self.temperature, self.density)


def density_for_pressure(model: str, temperature: float, pressure: float, *,
                         tail: str = "corrected", cutoff: float = 3.0,
                         source: str = "<settings>") -> StatePoint:
    """Lowest-density (gas-side) root of P_eos(T, ρ) = ``pressure`` (reduced units)."""
    eos = equation_for(model, tail, cutoff)
    t, p = float(temperature), float(pressure)
    if model == "ideal":
        return StatePoint(t, p, p / t, eos)

    def f(rho: float) -> float:
        return eos.pressure(t, rho) - p

    lo = 1e-3 * p / t
    if f(lo) >= 0:  # an extremely dilute state: the ideal law is exact to 1e-3 here
        lo = 1e-6 * p / t
    hi, prev_p = lo, eos.pressure(t, lo)
    while True:
        hi_next = min(hi * 1.25, eos.max_density)
        p_next = eos.pressure(t, hi_next)
        if p_next <= prev_p:
            raise ConfigError(source, "gas.pressure",
                              f"P = {p:.4g} ε/σ³ is above the highest pressure the "
                              f"{eos.name} gas branch reaches at T = {t:.4g} (a liquid or "
                              "two-phase state)", "give gas.density instead, or a lower "
                              "pressure or a higher temperature")
        if p_next >= p:
            lo, hi = hi, hi_next
            break
        if hi_next >= eos.max_density:
            raise ConfigError(source, "gas.pressure",
                              f"P = {p:.4g} ε/σ³ needs a density beyond the {eos.name} "
                              f"range (ρ ≤ {eos.max_density:.3g}) at T = {t:.4g}",
                              "give a lower pressure or gas.density")
        hi, prev_p = hi_next, p_next
    rho = float(optimize.brentq(f, lo, hi, xtol=1e-14, rtol=1e-13, maxiter=200))
    warning = ""
    if model == "lennard-jones":
        from .analysis.references import LJ_CRITICAL
        if t < LJ_CRITICAL["temperature"]:
            warning = (f"T = {t:.4g} is below the LJ critical temperature "
                       f"{LJ_CRITICAL['temperature']}: the state may be a supersaturated "
                       "vapour that condenses during the run")
    return StatePoint(t, p, rho, eos, warning)


def eos_of(settings) -> EquationOfState:
    """The equation of state matching a run's model and potential settings."""
    return equation_for(settings.gas.model, settings.potential.tail, settings.potential.cutoff)


# -- the real-gas view of a run ----------------------------------------------------------

def real_gas(run, temperature=None, pressure=None, z=None, pressure_source: str = ""
             ) -> dict[str, Any] | None:
    """SI figures, requested vs measured pressure, EOS and real-fluid Z, confinement.

    None when the run has no unit system (no gas.species, no gas.sigma). The summary
    passes its own estimates (``temperature``, ``pressure``, ``z`` as Estimates, and the
    pressure source) so that both show the same numbers; without them they are computed
    from the run's production samples. Values are SI unless a key ends in ``_reduced``;
    uncertain ones are {"mean", "stderr"}.
    """
    from . import species as _species
    from . import units
    from .analysis import references as ref
    from .analysis.statistics import estimate
    from .analysis.summary import compressibility, measured_pressure, wall_pressure

    s = run.settings
    us = units.system_of(s)
    if us is None:
        return None
    sp = _species.get(s.gas.species) if s.gas.species else None
    eos = eos_of(s)
    rho = s.gas.density
    t_est = temperature if temperature is not None else estimate(run.series("temperature")[1])
    kind, p_est = (pressure_source, pressure) if pressure is not None \
        else measured_pressure(run)
    if z is None:  # as the summary does: Z of the full potential (see verdict.tail_shift)
        from .analysis.statistics import Estimate
        from .analysis.verdict import tail_shift
        raw = compressibility(run)
        z = Estimate(raw.mean + tail_shift(run, kind), raw.stderr, raw.n_eff)
    z_est = z
    f_p, f_t = us.factor("pressure"), us.factor("temperature")

    def si(kind_: str, est, unit: str) -> dict | None:
        if est is None:
            return None
        j = est.as_json()
        scale = units.to_si(us, kind_, 1.0, unit)[0]
        return {"mean": None if j["mean"] is None else j["mean"] * scale,
                "stderr": None if j["stderr"] is None else j["stderr"] * scale}

    out: dict[str, Any] = {
        "species": us.species or "user-given",
        "parameters": {"sigma_nm": us.sigma * 1e9, "epsilon_over_k_K": us.epsilon / units.K_B,
                       "molar_mass_g_mol": us.mass * units.N_A * 1e3, "source": us.source,
                       "time_unit_ps": us.time * 1e12},
        "temperature_set_K": s.gas.temperature * f_t,
        "temperature_K": si("temperature", t_est, "K"),
        "density_kg_m3": units.to_si(us, "mass_density", rho)[0],
        "density_mol_L": units.to_si(us, "molar_density", rho, "mol/L")[0],
        "molar_volume_L_mol": units.to_si(us, "molar_volume", 1.0 / rho, "L/mol")[0],
        "pressure_source": kind,
        "pressure_bar": si("pressure", p_est, "bar"),
        "pressure_Pa": si("pressure", p_est, "Pa"),
        "Z": z_est.as_json(),
        "eos": {"name": eos.name, "source": eos.source, "note": eos.note,
                "accuracy": eos.accuracy_at(s.gas.temperature, rho),
                "Z": _safe(lambda: eos.z(t_est.mean, rho)),
                "pressure_bar": _safe(lambda: eos.pressure(t_est.mean, rho) * f_p / 1e5)},
        "cautions": list(CAUTIONS),
        "model_limits": list(MODEL_LIMITS) + ([sp.limits] if sp and sp.limits else []),
    }
    requested = getattr(s.gas, "pressure", None)
    if requested is not None:
        acc = eos.accuracy_at(s.gas.temperature, rho)
        diff = (p_est.mean - requested) / requested
        allowed = None if acc is None else acc + 4.0 * (p_est.stderr or 0.0) / requested
        bulk = s.container.walls == "none" or s.gas.model == "ideal"
        out["requested"] = {
            "note": "" if bulk else "walls: the requested pressure set the mean density (the "
                    "bulk fluid's density at that pressure); the wall pressure differs by "
                    "the effect of the walls, so no accuracy verdict",
            "pressure_bar": requested * f_p / 1e5, "pressure_reduced": requested,
            "measured_bar": p_est.mean * f_p / 1e5,
            "relative_difference": diff,
            "relative_stderr": None if p_est.stderr is None else p_est.stderr / requested,
            "eos_accuracy": acc,
            "within_eos_accuracy": None if allowed is None or not bulk
            else bool(abs(diff) <= allowed),
        }
    fluid = sp.coolprop if sp else ""
    out["real_fluid"] = _real_fluid(ref, fluid, t_est.mean * f_t, p_est.mean * f_p,
                                    units.to_si(us, "molar_density", rho)[0])
    if getattr(s.container, "pore_width", None) is not None:
        out["pore"] = _pore(run, us, eos, t_est, wall_pressure(run), z_est, ref, fluid, si)
    return out


def _safe(fn):
    try:
        v = float(fn())
        return v if math.isfinite(v) else None
    except Exception:  # noqa: BLE001 - an EOS outside its range reports nothing
        return None


def _real_fluid(ref, fluid: str, t_K: float, p_Pa: float, rho_mol_m3: float) -> dict:
    """The real fluid's Z at the same T and P, and at the same T and density."""
    if not fluid:
        return {"fluid": "", "skipped": "no reference equation for this species"}
    if not ref.available()["CoolProp"]:
        return {"fluid": fluid, "skipped": "CoolProp is not installed (pip install CoolProp)"}
    out: dict[str, Any] = {"fluid": fluid, "source": "CoolProp reference equation for "
                           f"'{fluid}'" + (" (Tegeler, Span & Wagner, J. Phys. Chem. Ref. Data "
                                           "28, 779 (1999))" if fluid == "Argon" else "")}
    try:
        out["Z_same_T_P"] = ref.coolprop_z(fluid, t_K, pressure_Pa=p_Pa)
        out["Z_same_T_density"] = ref.coolprop_z(fluid, t_K, density_mol_m3=rho_mol_m3)
    except (ValueError, RuntimeError) as exc:
        out["skipped"] = f"CoolProp refused the state: {str(exc)[:160]}"
    return out


def _pore(run, us, eos, t_est, pw_est, z_est, ref, fluid, si) -> dict:
    """Slit-pore figures: widths, densities, normal and tangential pressures, Z's."""
    import numpy as np

    from .analysis.statistics import estimate
    s = run.settings
    box = s.box
    rho = s.gas.density
    h_acc = box[2] - 2.0 * wall_zero(s)
    _, ptensor = run.series("pressure_tensor")
    p_t = estimate(ptensor[:, :2].mean(axis=1)) if len(ptensor) else None
    out: dict[str, Any] = {
        "width_nm": box[2] * us.sigma * 1e9,
        "area_nm2": box[0] * box[1] * (us.sigma * 1e9) ** 2,
        "volume_convention": volume_convention(),
        "mean_density_kg_m3": units_mass_density(us, rho),
        "normal_pressure_bar": si("pressure", pw_est, "bar"),
        "normal_pressure_note": "measured on the walls with forces cut at r_c; the full "
                                "potential's would differ by about the mean-field tail",
        "tail_pressure_bar": ref.lj_tail_pressure(rho, s.potential.cutoff)
        * us.factor("pressure") / 1e5 if s.gas.model == "lennard-jones" else 0.0,
        "tangential_pressure_bar": si("pressure", p_t, "bar"),
        "apparent_Z": z_est.as_json(),
        "accessible_width_nm": h_acc * us.sigma * 1e9,
        "apparent_Z_accessible": {"mean": z_est.mean * h_acc / box[2],
                                  "stderr": None if z_est.stderr is None
                                  else z_est.stderr * h_acc / box[2]},
        "bulk_Z_same_density": _safe(lambda: eos.z(t_est.mean, rho)),
        "bulk_eos": eos.name,
    }
    if fluid and ref.available()["CoolProp"]:
        from . import units
        rho_mol = units.to_si(us, "molar_density", rho)[0]
        out["real_fluid_bulk_Z_same_density"] = _safe(
            lambda: ref.coolprop_z(fluid, t_est.mean * us.factor("temperature"),
                                   density_mol_m3=rho_mol))
    h = run.histograms
    if "profile_counts" in h and int(np.asarray(h.get("samples", 0))) > 0:
        edges = np.asarray(h["profile_edges"])[2]
        counts = np.asarray(h["profile_counts"])[2]
        dz = np.diff(edges)
        n_rho = counts / (float(np.asarray(h["samples"])) * box[0] * box[1] * dz)
        out["profile_z_nm"] = list(0.5 * (edges[1:] + edges[:-1]) * us.sigma * 1e9)
        out["profile_kg_m3"] = [units_mass_density(us, float(x)) for x in n_rho]
        mid = len(n_rho) // 2
        centre = n_rho[max(0, mid - len(n_rho) // 10): mid + len(n_rho) // 10 + 1].mean()
        out["centre_density_kg_m3"] = units_mass_density(us, float(centre))
        out["peak_density_kg_m3"] = units_mass_density(us, float(n_rho.max()))
    return out


def units_mass_density(us, rho: float) -> float:
    from . import units
    return units.to_si(us, "mass_density", rho)[0]


def wall_zero(settings) -> float:
    """Distance from a wall plane where the wall potential crosses zero (σ).

    9-3 wall: (2/15)^(1/6) σ_w ≈ 0.715 σ_w; hard walls act on the particle centre: 0.
    """
    c = settings.container
    return (2.0 / 15.0) ** (1.0 / 6.0) * c.wall_sigma if c.wall == "lj93" else 0.0


def volume_convention() -> str:
    return ("V = L_x L_y H, with H the pore width: the distance between the two wall "
            "planes (the box edge along z). It is the geometric volume the pore width "
            "names and needs no choice of where the fluid 'begins', so runs, pores and "
            "experiments quoted by width compare directly. The fluid cannot reach the "
            "planes: the 9-3 wall potential is repulsive within (2/15)^(1/6) σ_w ≈ "
            "0.715 σ_w of each, so the pore-averaged density and the apparent "
            "Z = P_wall V/(N k T) include that excluded layer; the 'accessible' figures "
            "use H − 2 × 0.715 σ_w instead, to show how much of the difference from the "
            "bulk is the convention.")


# -- text -----------------------------------------------------------------------------

def _f(e: dict | None, digits: int = 4) -> str:
    if not e or e.get("mean") is None:
        return "n/a"
    if e.get("stderr") is None:
        return f"{e['mean']:.{digits}g} ± ?"
    return f"{e['mean']:.{digits}g} ± {e['stderr']:.2g}"


def render_real_gas(section: dict[str, Any] | None) -> list[str]:
    """Text lines for the real-gas section of a summary or report."""
    if not section:
        return []
    r = section
    par = r["parameters"]
    lines = [
        f"species   {r['species']}: σ = {par['sigma_nm']:.4g} nm, ε/k = "
        f"{par['epsilon_over_k_K']:.4g} K, M = {par['molar_mass_g_mol']:.5g} g/mol",
        f"          ({par['source']})",
        f"T (SI)    {_f(r['temperature_K'])} K   (set {r['temperature_set_K']:.5g} K)",
        f"ρ (SI)    {r['density_kg_m3']:.5g} kg/m³ = {r['density_mol_L']:.5g} mol/L; "
        f"molar volume {r['molar_volume_L_mol']:.5g} L/mol",
        f"P (SI)    {_f(r['pressure_bar'])} bar = {_f(r['pressure_Pa'])} Pa "
        f"({r['pressure_source']})",
    ]
    q = r.get("requested")
    if q:
        verdict = {True: "within", False: "OUTSIDE", None: "no stated accuracy for"}[
            q["within_eos_accuracy"]]
        acc = f"{100 * q['eos_accuracy']:.2g} %" if q["eos_accuracy"] is not None else "?"
        text = (f"requested {q['pressure_bar']:.5g} bar; measured {q['measured_bar']:.5g} "
                f"bar: {100 * q['relative_difference']:+.2f} %")
        if q.get("note"):
            lines += [text, f"          ({q['note']})"]
        else:
            lines.append(f"{text} — {verdict} the equation's stated accuracy ({acc})")
    eos, rf = r["eos"], r["real_fluid"]
    zline = f"Z side by side: ideal gas 1; simulated model {_f(r['Z'])}"
    if eos.get("Z") is not None:
        zline += f"; {eos['name']} EOS {eos['Z']:.4f}"
    if rf.get("Z_same_T_P") is not None:
        zline += f"; real {rf['fluid']} {rf['Z_same_T_P']:.4f} (same T, P)"
    lines.append(zline)
    if rf.get("skipped"):
        lines.append(f"          real fluid: {rf['skipped']}")
    elif rf.get("source"):
        lines.append(f"          real fluid: {rf['source']}")
    pore = r.get("pore")
    if pore:
        lines += [
            f"pore      width {pore['width_nm']:.4g} nm, mean density "
            f"{pore['mean_density_kg_m3']:.5g} kg/m³"
            + (f" (centre {pore['centre_density_kg_m3']:.5g}, peak "
               f"{pore['peak_density_kg_m3']:.5g})" if "centre_density_kg_m3" in pore else ""),
            f"          normal (wall) P {_f(pore['normal_pressure_bar'])} bar; tangential P "
            f"{_f(pore['tangential_pressure_bar'])} bar",
            f"          apparent Z = P_wall V/(NkT) {_f(pore['apparent_Z'])} "
            f"(accessible width {pore['accessible_width_nm']:.4g} nm: "
            f"{_f(pore['apparent_Z_accessible'])}); bulk Z at the "
            f"same mean density {_num(pore['bulk_Z_same_density'])} ({pore['bulk_eos']})"
            + (f", real fluid {_num(pore['real_fluid_bulk_Z_same_density'])}"
               if "real_fluid_bulk_Z_same_density" in pore else ""),
            f"          volume convention: {pore['volume_convention']}",
        ]
    for item in r["model_limits"]:
        lines.append(f"limits    {item}")
    for item in r["cautions"]:
        lines.append(f"caution   {item}")
    return lines


def _num(x: float | None) -> str:
    return "n/a" if x is None else f"{x:.4f}"


def describe_settings(settings) -> list[str]:
    """Text lines of a config's state in SI, for ``mdgas check`` (empty when reduced)."""
    from . import units
    us = units.system_of(settings)
    if us is None:
        return []
    g, box = settings.gas, settings.box
    rho = g.density
    lines = [f"  species             {us.species or 'user-given'}: σ = {us.sigma * 1e9:.4g} nm, "
             f"ε/k = {us.epsilon / units.K_B:.4g} K, M = {us.mass * units.N_A * 1e3:.5g} g/mol",
             f"  temperature         {g.temperature * us.factor('temperature'):.5g} K",
             f"  density             {units.describe(us, 'mass_density', rho)} = "
             f"{units.describe(us, 'molar_density', rho)}",
             f"  box edges           {' × '.join(f'{x * us.sigma * 1e9:.4g}' for x in box)} nm",
             f"  time unit τ         {us.time * 1e12:.4g} ps; production "
             f"{settings.schedule.produce * us.time * 1e9:.4g} ns, time step "
             f"{settings.schedule.timestep * us.time * 1e15:.4g} fs"]
    if g.pressure is not None:
        eos = eos_of(settings)
        acc = eos.accuracy_at(g.temperature, rho)
        lines.append(f"  requested pressure  {units.describe(us, 'pressure', g.pressure)}: "
                     f"density from {eos.name} (Z = {eos.z(g.temperature, rho):.4f}"
                     + (f", stated accuracy {100 * acc:.2g} %)" if acc is not None else ")"))
    if settings.container.pore_width is not None:
        lines.append(f"  pore width          {settings.container.pore_width * us.sigma * 1e9:.4g}"
                     " nm between the wall planes")
    lines.append(f"  caution             {CAUTIONS[0]}")
    return lines
