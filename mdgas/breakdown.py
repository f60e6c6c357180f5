"""Where PV = NkT stops being good enough: the density and pressure at which |Z − 1|
reaches a tolerance, per isotherm (and pore width), with an uncertainty.

Method (per group of runs that differ only in density):

1. Replicas at the same density are combined by their inverse-variance weighted mean.
2. Walking up in density, the first point with |Z − 1| >= τ and the point before it
   bracket the crossing; its sign s (Z above or below 1) is that of the outer point.
   If the stderr of Z at those points exceeds half the tolerance, the data cannot tell
   and the crossing is reported as ``unresolved`` (no number), never guessed.
3. Z − 1 is fitted against ρ by weighted least squares (weights 1/stderr²) on a local
   window of up to two points on each side of the bracket: a quadratic when the window
   has four points, else a straight line. The crossing ρ* solves s·f(ρ*) = τ inside the
   bracket (a straight line through the bracket's two points when the quadratic has no
   root there).
4. Its standard error is propagated to first order from the fit's covariance C:
   δρ* = sqrt(gᵀ C g) / |f'(ρ*)| with g = (1, ρ*, ρ*²); C is scaled up by the reduced χ²
   when that exceeds 1 (the Birge ratio, common practice), so scatter beyond the stated
   error bars widens the result rather than being ignored.
5. At the crossing Z = 1 + sτ by definition, so the pressure there is
   P* = (1 + sτ) ρ* T̄ with T̄ the weighted mean measured temperature of the window, and
   δP* = (1 + sτ) sqrt((T̄ δρ*)² + (ρ* δT̄)²).

``--refine`` bisects: each round adds the geometric midpoint of every bracket that is
still wider than twice the crossing's error (beyond that the statistics, not the grid,
limit the answer), and half the lowest density where the tolerance is already exceeded.
Units are reduced: ρ in σ⁻³, P in ε/σ³, T in kT/ε.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from typing import Any, Callable, Iterable, Mapping, Sequence

import numpy as np

DENSITY_KEY = "gas.density"
#: Keys that never define a group (they distinguish replicas or are the swept variable).
NOT_GROUP = (DENSITY_KEY, "gas.pressure", "schedule.seed")  # a pressure sets the density
FOUND, BELOW, ABOVE, NO_DATA = "found", "below-grid", "not-reached", "no-data"
UNRESOLVED = "unresolved"
#: The data resolve a tolerance τ only where stderr(Z) <= RESOLUTION · τ.
RESOLUTION = 0.5


@dataclass
class Crossing:
    """Where |Z − 1| reaches ``tolerance`` (percent) on one isotherm / pore width."""

    group: dict[str, Any]
    tolerance: float
    status: str
    density: float | None = None
    density_stderr: float | None = None
    pressure: float | None = None
    pressure_stderr: float | None = None
    sign: int = 0
    bracket: tuple[float, float] | None = None
    temperature: float | None = None
    points: int = 0
    method: str = ""
    virial_estimate: float | None = None
    note: str = ""

    def as_json(self) -> dict[str, Any]:
        d = asdict(self)
        d["bracket"] = list(self.bracket) if self.bracket else None
        return d


@dataclass
class Curve:
    """One group's combined points: density, Z − 1 and its stderr, temperature, pressure."""

    group: dict[str, Any]
    density: np.ndarray
    y: np.ndarray
    stderr: np.ndarray
    temperature: np.ndarray
    temperature_stderr: np.ndarray
    pressure: np.ndarray
    pressure_stderr: np.ndarray
    model: str = ""
    extra: dict[str, Any] = field(default_factory=dict)


def _f(v: Any) -> float:
    try:
        x = float(v)
    except (TypeError, ValueError):
        return float("nan")
    return x


def group_keys(varied: Sequence[str]) -> list[str]:
    """The varied keys that define a group: everything but density and seed."""
    return [k for k in varied if k not in NOT_GROUP]


def curves(rows: Iterable[Mapping[str, Any]], keys: Sequence[str]) -> list[Curve]:
    """Complete rows with a finite Z and stderr, grouped by ``keys`` and sorted by density."""
    groups: dict[tuple, list[Mapping[str, Any]]] = {}
    for r in rows:
        if r.get("status") != "complete":
            continue
        z, e, rho = _f(r.get("Z")), _f(r.get("Z_stderr")), _f(r.get("density"))
        if not (math.isfinite(z) and math.isfinite(e) and e > 0 and math.isfinite(rho)):
            continue
        gk = tuple(_hashable(r.get(k)) for k in keys)
        groups.setdefault(gk, []).append(r)
    out = []
    for gk, rs in groups.items():
        by_rho: dict[float, list[Mapping[str, Any]]] = {}
        for r in rs:
            by_rho.setdefault(_f(r["density"]), []).append(r)
        cols: dict[str, list[float]] = {c: [] for c in ("rho", "y", "e", "t", "te", "p", "pe")}
        for rho in sorted(by_rho):
            reps = by_rho[rho]
            y, e = _wmean([_f(r["Z"]) - 1.0 for r in reps], [_f(r["Z_stderr"]) for r in reps])
            t, te = _wmean([_f(r.get("temperature")) for r in reps],
                           [_f(r.get("temperature_stderr")) for r in reps])
            p, pe = _wmean([_f(r.get("pressure")) for r in reps],
                           [_f(r.get("pressure_stderr")) for r in reps])
            for c, v in zip(cols, (rho, y, e, t, te, p, pe)):
                cols[c].append(v)
        group = {k: rs[0].get(k) for k in keys}
        out.append(Curve(group, *[np.array(cols[c]) for c in cols],
                         model=str(rs[0].get("model") or "")))
    return out


def _hashable(v: Any) -> Any:
    return tuple(v) if isinstance(v, list) else v


def _wmean(values: list[float], errs: list[float]) -> tuple[float, float]:
    """Inverse-variance weighted mean and its stderr; a plain mean when errors are missing."""
    v, e = np.asarray(values, float), np.asarray(errs, float)
    ok = np.isfinite(v)
    v, e = v[ok], e[ok]
    if len(v) == 0:
        return float("nan"), float("nan")
    good = np.isfinite(e) & (e > 0)
    if good.all():
        w = 1.0 / e ** 2
        return float((w * v).sum() / w.sum()), float(1.0 / math.sqrt(w.sum()))
    return float(v.mean()), float(e[good].max()) if good.any() else float("nan")


def _fit(x: np.ndarray, y: np.ndarray, e: np.ndarray, degree: int
         ) -> tuple[np.ndarray, np.ndarray]:
    """Weighted polynomial least squares: coefficients (c0, c1, ...) and their covariance."""
    X = np.vander(x, degree + 1, increasing=True)
    w = 1.0 / e ** 2
    A = X.T @ (w[:, None] * X)
    cov = np.linalg.inv(A)
    coef = cov @ (X.T @ (w * y))
    dof = len(x) - (degree + 1)
    if dof > 0:
        chi2 = float((w * (y - X @ coef) ** 2).sum()) / dof
        cov = cov * max(1.0, chi2)
    return coef, cov


def _root(coef: np.ndarray, target: float, lo: float, hi: float, near: float) -> float | None:
    """The root of poly(coef)(ρ) = target in [lo, hi] closest to ``near``."""
    c = np.array(coef, float)
    c[0] -= target
    roots = np.roots(c[::-1]) if len(c) > 1 else np.array([])
    real = [r.real for r in roots if abs(r.imag) <= 1e-12 * max(1.0, abs(r.real))
            and lo - 1e-12 <= r.real <= hi + 1e-12]
    if not real:
        return None
    return float(min(real, key=lambda r: abs(r - near)))


def crossing(curve: Curve, tolerance: float, b2: float | None = None) -> Crossing:
    """The first crossing of |Z − 1| = tolerance (percent) along ``curve``."""
    tau = tolerance / 100.0
    rho, y, e = curve.density, curve.y, curve.stderr
    n = len(rho)
    out = Crossing(group=dict(curve.group), tolerance=tolerance, status=NO_DATA, points=n)
    if b2 is not None and b2 != 0.0 and math.isfinite(b2):
        out.virial_estimate = tau / abs(b2)
    if n == 0:
        return out
    over = np.flatnonzero(np.abs(y) >= tau)

    def unresolved(idx) -> Crossing:
        worst = float(np.max(e[idx]))
        out.status = UNRESOLVED
        out.note = (f"stderr(Z) up to {100 * worst:.2g}% where it matters, more than "
                    f"{RESOLUTION:g} × the {tolerance:g}% tolerance; lengthen production "
                    "(schedule.produce or schedule.target_stderr)")
        return out

    if len(over) == 0:
        if e[-1] > RESOLUTION * tau:
            return unresolved([n - 1])
        out.status, out.bracket = ABOVE, (float(rho[-1]), math.inf)
        out.note = f"|Z − 1| < {tolerance:g}% up to ρ = {rho[-1]:.4g}"
        return out
    i = int(over[0])
    s = 1 if y[i] > 0 else -1
    out.sign = s
    if e[max(0, i - 1):i + 1].max() > RESOLUTION * tau:
        return unresolved(list(range(max(0, i - 1), i + 1)))
    if i == 0:
        out.status, out.bracket = BELOW, (0.0, float(rho[0]))
        out.note = f"|Z − 1| >= {tolerance:g}% already at the lowest density ρ = {rho[0]:.4g}"
        return out
    lo, hi = float(rho[i - 1]), float(rho[i])
    w0, w1 = max(0, i - 2), min(n, i + 2)
    xs, ys, es = rho[w0:w1], s * y[w0:w1], e[w0:w1]
    degree = 2 if len(xs) >= 4 else 1
    coef, cov = _fit(xs, ys, es, degree)
    # The root may leave the bracket within the window: noise can put the bracket one
    # step off, and the fit (not the single points) is what locates the crossing.
    r = _root(coef, tau, float(xs[0]), float(xs[-1]), 0.5 * (lo + hi))
    method = f"weighted {'quadratic' if degree == 2 else 'linear'} fit of {len(xs)} points"
    if r is None:
        xs, ys, es = rho[i - 1:i + 1], s * y[i - 1:i + 1], e[i - 1:i + 1]
        coef, cov = _fit(xs, ys, es, 1)
        r = _root(coef, tau, lo, hi, 0.5 * (lo + hi))
        method = "straight line through the bracketing points"
        if r is None:  # only if both ends sit exactly at the tolerance
            r = 0.5 * (lo + hi)
    deg = len(coef) - 1
    g = np.array([r ** k for k in range(deg + 1)])
    slope = sum(k * coef[k] * r ** (k - 1) for k in range(1, deg + 1))
    d_rho = math.sqrt(max(0.0, float(g @ cov @ g))) / abs(slope) if slope != 0 else math.inf
    t_bar, t_err = _wmean(list(curve.temperature[w0:w1]), list(curve.temperature_stderr[w0:w1]))
    if not math.isfinite(t_bar):
        t_bar, t_err = float(curve.group.get("gas.temperature") or "nan"), 0.0
    t_err = t_err if math.isfinite(t_err) else 0.0
    zc = 1.0 + s * tau
    out.status, out.bracket, out.method = FOUND, (lo, hi), method
    out.density, out.density_stderr = r, d_rho
    out.temperature = t_bar
    out.pressure = zc * r * t_bar
    out.pressure_stderr = zc * math.hypot(t_bar * d_rho, r * t_err)
    return out


def find(rows: Iterable[Mapping[str, Any]], keys: Sequence[str],
         tolerances: Sequence[float] = (1.0, 5.0),
         second_virial: Callable[[str, float], float | None] | None = None) -> list[Crossing]:
    """Every group's crossing of every tolerance (percent), in group then tolerance order.

    ``second_virial(model, T)`` gives B2 (σ³) for the B2 estimate ρ ≈ τ/|B2|.
    """
    out = []
    for c in curves(rows, keys):
        t = _f(c.group.get("gas.temperature"))
        if not math.isfinite(t):
            t = float(np.nanmean(c.temperature)) if len(c.temperature) else float("nan")
        b2 = second_virial(c.model, t) if second_virial and math.isfinite(t) else None
        for tol in tolerances:
            out.append(crossing(c, tol, b2))
    return out


def second_virial(model: str, temperature: float, tail: str = "corrected",
                  cutoff: float = 3.0) -> float | None:
    """B2 (σ³) of the model at kT/ε, or None when no estimate is at hand.

    From :mod:`mdgas.analysis.references`: hard spheres B2 = 2πσ³/3 (exact); Lennard-Jones
    by quadrature of the Mayer function, for the full potential when the tail is
    corrected, else for the potential truncated and shifted at ``cutoff``.
    """
    from .analysis import references as ref
    if model == "ideal":
        return 0.0
    if model == "hard-sphere":
        return ref.B2_HARD_SPHERE
    if model == "lennard-jones":
        return ref.lj_b2(float(temperature), None if tail == "corrected" else float(cutoff))
    return None


def propose(rows: Sequence[Mapping[str, Any]], sweep) -> list[dict[str, Any]]:
    """New state points (parameter dicts) that bisect every unresolved crossing."""
    keys = group_keys(sweep.varied_keys)
    if DENSITY_KEY not in sweep.varied_keys:
        return []
    new: dict[tuple, dict[str, Any]] = {}
    reps = {}
    for r in rows:
        reps.setdefault(tuple(_hashable(r.get(k)) for k in keys), r)
    for cr in find(rows, keys, sweep.tolerances):
        if cr.status == FOUND:
            lo, hi = cr.bracket
            if hi - lo <= 2.0 * (cr.density_stderr or 0.0):
                continue
            rho = math.sqrt(lo * hi)
        elif cr.status == BELOW:
            rho = 0.5 * cr.bracket[1]
        else:
            continue
        rho = float(f"{rho:.6g}")
        gk = tuple(_hashable(cr.group.get(k)) for k in keys)
        base = reps.get(gk)
        if base is None:
            continue
        params = {k: base.get(k) for k in sweep.varied_keys if k != "schedule.seed"}
        params[DENSITY_KEY] = rho
        new[(gk, rho)] = params
    return list(new.values())


def render_text(crossings: Sequence[Crossing]) -> str:
    """A plain-text table of the crossings."""
    if not crossings:
        return "breakdown: no complete runs with a Z error bar to work from"
    lines = ["breakdown of PV = NkT (first density where |Z − 1| reaches the tolerance)"]
    for c in crossings:
        grp = ", ".join(f"{k.rsplit('.', 1)[-1]}={_short(v)}" for k, v in c.group.items())
        head = f"  [{grp or 'all'}] {c.tolerance:g}%: "
        if c.status == FOUND:
            side = "above" if c.sign > 0 else "below"
            line = (f"{head}ρ* = {c.density:.4g} ± {c.density_stderr:.2g} σ⁻³, "
                    f"P* = {c.pressure:.4g} ± {c.pressure_stderr:.2g} ε/σ³ (Z {side} 1)")
            if c.virial_estimate:
                line += f"; B2 estimate ρ ≈ {c.virial_estimate:.4g}"
        else:
            line = f"{head}{c.status}: {c.note}"
            if c.virial_estimate:
                line += f" (B2 estimate ρ ≈ {c.virial_estimate:.4g})"
        lines.append(line)
    return "\n".join(lines)


def _short(v: Any) -> str:
    if isinstance(v, float):
        return f"{v:.4g}"
    return str(v)


def write_csv(crossings: Sequence[Crossing], path) -> None:
    """The crossings as CSV (one row per group and tolerance)."""
    import csv
    import io
    import os
    from pathlib import Path
    path = Path(path)
    gkeys = list(dict.fromkeys(k for c in crossings for k in c.group))
    cols = gkeys + ["tolerance_percent", "status", "density", "density_stderr", "pressure",
                    "pressure_stderr", "sign", "bracket_low", "bracket_high", "temperature",
                    "virial_estimate", "method", "note"]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(cols)
    for c in crossings:
        b = c.bracket or (None, None)
        vals = [c.group.get(k) for k in gkeys] + [
            c.tolerance, c.status, c.density, c.density_stderr, c.pressure, c.pressure_stderr,
            c.sign, b[0], b[1], c.temperature, c.virial_estimate, c.method, c.note]
        w.writerow(["" if v is None or (isinstance(v, float) and not math.isfinite(v))
                    else (repr(v) if isinstance(v, float) else v) for v in vals])
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    tmp.write_text(buf.getvalue())
    os.replace(tmp, path)
