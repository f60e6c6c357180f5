"""Reference equations of state to put beside a measured compressibility factor Z.

Every function works in reduced units (σ, ε, kT/ε, Nσ³/V) unless its name says SI
(CoolProp). Each documents its source and the range where it can be trusted. teqp and
CoolProp are optional: :func:`available` says which are importable, and
:func:`predictions` lists what it skipped and why.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
from scipy import integrate, optimize

#: Second virial coefficient of hard spheres of diameter σ, exact: 2πσ³/3.
B2_HARD_SPHERE = 2.0 * math.pi / 3.0

#: Critical point of the full (untruncated) Lennard-Jones fluid used for van der Waals:
#: T* = 1.3120(7), P* = 0.1279(6), ρ* = 0.316(1); Potoff & Panagiotopoulos, J. Chem.
#: Phys. 109, 10914 (1998), Gibbs-ensemble/histogram reweighting (from memory).
LJ_CRITICAL = {"temperature": 1.3120, "pressure": 0.1279, "density": 0.316}

#: teqp model kinds for the Lennard-Jones 12-6 fluid (full potential), with their source
#: and the range each was fitted over (ranges from memory).
TEQP_LJ_MODELS = {
    "Thol 2016": ("LJ126_TholJPCRD2016",
                  "Thol, Rutkai, Köster, Lustig, Span & Vrabec, J. Phys. Chem. Ref. Data 45, "
                  "023101 (2016)", (0.66, 9.0), 1.1),
    "Kolafa-Nezbeda 1994": ("LJ126_KolafaNezbeda1994",
                            "Kolafa & Nezbeda, Fluid Phase Equilib. 100, 1 (1994)",
                            (0.68, 10.0), 1.2),
    "Johnson 1993": ("LJ126_Johnson1993",
                     "Johnson, Zollweg & Gubbins, Mol. Phys. 78, 591 (1993)",
                     (0.7, 6.0), 1.25),
}


@dataclass(frozen=True)
class Prediction:
    """One reference model's Z at the simulated state, and whether it applies there."""

    name: str
    Z: float
    source: str
    detail: str = ""
    in_range: bool = True


@dataclass
class Comparison:
    """All predictions for one state, and the comparisons that could not be made."""

    predictions: list[Prediction] = field(default_factory=list)
    skipped: dict[str, str] = field(default_factory=dict)


# -- the simple closed forms -----------------------------------------------------------

def ideal_gas() -> float:
    """Z = PV/(NkT) = 1: the ideal-gas law, exact for non-interacting point particles."""
    return 1.0


def virial_b2(b2: float, density: float) -> float:
    """Z = 1 + B2 ρ, the virial series truncated after the second coefficient.

    Valid while the neglected B3 ρ² is small: in practice |B2 ρ| ≲ 0.1 (common practice).
    """
    return 1.0 + b2 * density


def carnahan_starling(density: float) -> float:
    """Hard-sphere fluid Z = (1 + η + η² − η³)/(1 − η)³ with η = πρσ³/6.

    Carnahan & Starling, J. Chem. Phys. 51, 635 (1969). Accurate to a fraction of a
    percent against simulation across the stable fluid, η < 0.494 (freezing; Hoover &
    Ree, J. Chem. Phys. 49, 3609 (1968)).
    """
    eta = math.pi * density / 6.0
    return (1.0 + eta + eta ** 2 - eta ** 3) / (1.0 - eta) ** 3


def van_der_waals_constants(tc: float, pc: float) -> tuple[float, float]:
    """(a, b) of van der Waals from a critical point: a = 27 Tc²/(64 Pc), b = Tc/(8 Pc).

    Reduced units: a in εσ³, b in σ³ (textbook; common practice).
    """
    return 27.0 * tc * tc / (64.0 * pc), tc / (8.0 * pc)


def van_der_waals(density: float, temperature: float, a: float, b: float) -> float:
    """Z = 1/(1 − bρ) − aρ/T (van der Waals 1873). Qualitative only: right sign of the
    deviations and the right limit B2 = b − a/T at low density, tens of percent off
    near the critical point and in the liquid.
    """
    return 1.0 / (1.0 - b * density) - a * density / temperature


# -- Lennard-Jones second virial coefficient ------------------------------------------

def lj_potential(r: np.ndarray | float) -> np.ndarray | float:
    """u(r) = 4(r⁻¹² − r⁻⁶) in ε, r in σ."""
    ir6 = r ** -6.0
    return 4.0 * (ir6 * ir6 - ir6)


@lru_cache(maxsize=256)
def lj_b2(temperature: float, cutoff: float | None = None) -> float:
    """Second virial coefficient B2(T) of Lennard-Jones (σ³) by quadrature.

    B2 = −2π ∫ (exp(−u(r)/T) − 1) r² dr. ``cutoff`` None is the full potential;
    a number r_c is the truncated-and-shifted potential u(r) − u(r_c) for r < r_c, zero
    beyond, which is what a molecular-dynamics run with forces cut at r_c samples.
    Exact for the potential at any T > 0 (adaptive Gauss-Kronrod, scipy.integrate.quad).
    """
    t = float(temperature)
    shift = lj_potential(cutoff) if cutoff is not None else 0.0
    top = cutoff if cutoff is not None else np.inf

    def f(r: float) -> float:
        if r == 0.0:
            return -0.0
        return np.expm1(-(lj_potential(r) - shift) / t) * r * r

    # Split where the integrand changes character: hard core, well, tail.
    points = [0.0, 0.85, 1.12246, 1.6, 3.0]
    parts = [p for p in points if cutoff is None or p < cutoff] + [top]
    total = 0.0
    for lo, hi in zip(parts[:-1], parts[1:]):
        val, _ = integrate.quad(f, lo, hi, limit=200, epsabs=1e-13, epsrel=1e-11)
        total += val
    return -2.0 * math.pi * total


def lj_b2_series(temperature: float, terms: int = 60) -> float:
    """Full-potential LJ B2 (σ³) from its closed-form series in T^(−1/4).

    B2/(2πσ³/3) = −Σ_n 2^(n+1/2)/(4 n!) Γ((2n−1)/4) T^(−(2n+1)/4); Lennard-Jones,
    Proc. R. Soc. A 106, 463 (1924); Hirschfelder, Curtiss & Bird, "Molecular Theory of
    Gases and Liquids" (1954), eq. 3.6-8 (from memory). Converges for all T; used as an
    independent check of :func:`lj_b2`.
    """
    t = float(temperature)
    s = 0.0
    for n in range(terms):
        s += 2.0 ** (n + 0.5) / (4.0 * math.factorial(n)) * math.gamma((2 * n - 1) / 4.0) \
            * t ** (-(2 * n + 1) / 4.0)
    return -B2_HARD_SPHERE * s


def boyle_temperature(cutoff: float | None = None) -> float:
    """T where B2(T) = 0 (kT/ε); about 3.42 for the full potential."""
    return float(optimize.brentq(lambda t: lj_b2(t, cutoff), 1.5, 10.0, xtol=1e-12))


def lj_tail_pressure(density: float, cutoff: float) -> float:
    """Pressure the LJ interactions beyond r_c add, assuming g(r) = 1 there (ε/σ³).

    P_tail = (16/3)πρ² [(2/3) r_c⁻⁹ − r_c⁻³]; Allen & Tildesley, "Computer Simulation of
    Liquids" (1987), eq. 2.144 (common practice).
    """
    return 16.0 / 3.0 * math.pi * density ** 2 * (2.0 / 3.0 * cutoff ** -9 - cutoff ** -3)


# -- optional libraries ----------------------------------------------------------------

def _teqp():
    try:
        import teqp  # noqa: F401
        return teqp
    except ImportError:
        return None


def _coolprop():
    try:
        from CoolProp import CoolProp as CP  # noqa: N811
        return CP
    except ImportError:
        return None


def available() -> dict[str, bool]:
    """Which optional reference libraries can be imported here."""
    return {"teqp": _teqp() is not None, "CoolProp": _coolprop() is not None}


@lru_cache(maxsize=8)
def _teqp_model(kind: str):
    return _teqp().make_model({"kind": kind, "model": {}})


def teqp_lj(model: str, density: float, temperature: float) -> float:
    """Z of the full Lennard-Jones fluid from one of teqp's equations of state.

    ``model`` is a key of :data:`TEQP_LJ_MODELS`. teqp's LJ models take reduced T and ρ;
    Z = 1 + ρ ∂(α^r)/∂ρ (teqp's Ar01). Raises ImportError without teqp.
    """
    if _teqp() is None:
        raise ImportError("teqp is not installed (pip install teqp)")
    kind = TEQP_LJ_MODELS[model][0]
    m = _teqp_model(kind)
    return 1.0 + float(m.get_Ar01(float(temperature), float(density), np.array([1.0])))


def coolprop_z(fluid: str, temperature_K: float, pressure_Pa: float | None = None,
               density_mol_m3: float | None = None) -> float:
    """Z of a real fluid from CoolProp's reference (multiparameter) equation of state.

    Give T (K) and either P (Pa) or the molar density (mol/m³). CoolProp, Bell, Wronski,
    Quoilin & Lemort, Ind. Eng. Chem. Res. 53, 2498 (2014); each fluid's equation has
    its own source and range (CoolProp's documentation). Raises ImportError without
    CoolProp and ValueError for a state or fluid CoolProp rejects.
    """
    cp = _coolprop()
    if cp is None:
        raise ImportError("CoolProp is not installed (pip install CoolProp)")
    if (pressure_Pa is None) == (density_mol_m3 is None):
        raise ValueError("give exactly one of pressure_Pa and density_mol_m3")
    if pressure_Pa is not None:
        return float(cp.PropsSI("Z", "T", float(temperature_K), "P", float(pressure_Pa), fluid))
    return float(cp.PropsSI("Z", "T", float(temperature_K), "Dmolar", float(density_mol_m3),
                            fluid))


# -- which references apply to a run ---------------------------------------------------

def predictions(model: str, density: float, temperature: float, *, tail: str = "corrected",
                cutoff: float = 3.0) -> Comparison:
    """Every applicable reference's Z at (ρ, T) for ``model`` (reduced units).

    ideal: the ideal-gas law. hard-sphere: Carnahan-Starling and B2. lennard-jones: B2,
    van der Waals from the critical point, and teqp's three EOSs. The LJ equations of
    state describe the full potential; their detail says so when ``tail`` is "shifted".
    """
    out = Comparison()
    add = out.predictions.append
    add(Prediction("ideal gas", ideal_gas(), "PV = NkT",
                   "exact only for non-interacting particles"))
    if model == "hard-sphere":
        eta = math.pi * density / 6.0
        add(Prediction("Carnahan-Starling", carnahan_starling(density),
                       "Carnahan & Starling, J. Chem. Phys. 51, 635 (1969)",
                       f"packing fraction η = {eta:.4g}; fluid branch valid for η < 0.494",
                       in_range=eta < 0.494))
        b2rho = B2_HARD_SPHERE * density
        add(Prediction("virial B2", virial_b2(B2_HARD_SPHERE, density),
                       "exact hard-sphere B2 = 2πσ³/3",
                       f"B2ρ = {b2rho:.3g}; truncated series, good for |B2ρ| < 0.1",
                       in_range=abs(b2rho) < 0.1))
    elif model == "lennard-jones":
        shifted = tail != "corrected"  # "shifted" or "shifted-force": no tail beyond r_c
        full_note = ("describes the full potential; this run used the potential truncated "
                     f"at r_c = {cutoff:g} σ ({tail}) without tail correction, so a "
                     "systematic difference is expected" if shifted else
                     "full potential; comparable because the run adds the tail correction")
        b2 = lj_b2(temperature, cutoff if shifted else None)
        b2rho = b2 * density
        which = (f"truncated-shifted potential at r_c = {cutoff:g} σ" if shifted
                 else "full potential")
        add(Prediction("virial B2", virial_b2(b2, density),
                       "B2(T) by quadrature of the Mayer function",
                       f"B2 = {b2:.4g} σ³ for the {which}; B2ρ = {b2rho:.3g}; "
                       "good for |B2ρ| < 0.1", in_range=abs(b2rho) < 0.1))
        a, b = van_der_waals_constants(LJ_CRITICAL["temperature"], LJ_CRITICAL["pressure"])
        add(Prediction("van der Waals", van_der_waals(density, temperature, a, b),
                       "a, b from the LJ critical point of Potoff & Panagiotopoulos (1998)",
                       f"a = {a:.4g} εσ³, b = {b:.4g} σ³; qualitative; {full_note}",
                       in_range=b * density < 1.0))
        if _teqp() is None:
            for name in TEQP_LJ_MODELS:
                out.skipped[name] = "teqp is not installed (pip install teqp)"
        else:
            for name, (_, source, (tlo, thi), rmax) in TEQP_LJ_MODELS.items():
                ok = tlo <= temperature <= thi and density <= rmax
                rng = f"fitted for {tlo:g} ≤ T ≤ {thi:g}, ρ ≤ {rmax:g} (from memory)"
                try:
                    z = teqp_lj(name, density, temperature)
                except Exception as exc:  # teqp refuses a state: skip, say why
                    out.skipped[name] = f"teqp failed: {exc}"
                    continue
                add(Prediction(name, z, source + " (via teqp)", f"{rng}; {full_note}",
                               in_range=ok))
    return out
