"""Figures of a sweep folder: Z − 1 per isotherm and the breakdown map (slate style).

- ``isotherms-density`` / ``isotherms-pressure``: Z − 1 against ρ (or the measured P)
  per isotherm, with error bars (± 1 stderr), the tolerance band, reference equations of
  state from :mod:`mdgas.analysis.references`, and the crossings with their errors.
- ``map``: temperature against density (and against pressure) with each state point
  shaded by |Z − 1|, the tolerance contours interpolated over the points, and the
  crossings with their uncertainties.

One panel per geometry (every varied key other than temperature and density). Reads the
table and run files only; never imports an engine. Reduced units.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from . import breakdown as bd
from . import style

TEMPERATURE_KEY = "gas.temperature"
#: Preferred reference curve per model, best first (names as in analysis.references).
PREFERRED = {
    "lennard-jones": ("Thol 2016", "Kolafa-Nezbeda 1994", "Johnson 1993", "virial B2"),
    "hard-sphere": ("Carnahan-Starling", "virial B2"),
}


def _plt():
    import matplotlib
    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt
    return plt


def _geometry_keys(varied: Sequence[str]) -> list[str]:
    return [k for k in bd.group_keys(varied) if k != TEMPERATURE_KEY]


def _label(group: dict[str, Any], keys: Sequence[str]) -> str:
    if not keys:
        return ""
    return ", ".join(f"{k.rsplit('.', 1)[-1]} = {_fmt(group.get(k))}" for k in keys)


def _fmt(v: Any) -> str:
    if isinstance(v, float):
        return f"{v:.4g}"
    if isinstance(v, list):
        return "×".join(_fmt(x) for x in v)
    return str(v)


def _temperature(c: bd.Curve) -> float:
    t = c.group.get(TEMPERATURE_KEY)
    if t is None:
        t = float(np.nanmean(c.temperature)) if len(c.temperature) else float("nan")
    return float(t)


def _panels(folder) -> tuple[list[str], list[tuple[dict, list[bd.Curve]]]]:
    """(geometry keys, [(geometry, curves sorted by temperature)])."""
    keys = bd.group_keys(folder.varied_keys)
    geo = _geometry_keys(folder.varied_keys)
    panels: dict[tuple, tuple[dict, list[bd.Curve]]] = {}
    for c in bd.curves(folder.rows, keys):
        g = {k: c.group.get(k) for k in geo}
        panels.setdefault(tuple(bd._hashable(v) for v in g.values()), (g, []))[1].append(c)
    out = [(g, sorted(cs, key=_temperature)) for g, cs in panels.values()]
    return geo, out


def reference_curve(model: str, temperature: float, rho: np.ndarray, tail: str = "corrected",
                    cutoff: float = 3.0) -> tuple[str, np.ndarray] | None:
    """(name, Z − 1 on ``rho``) of the preferred applicable reference, or None."""
    from .analysis import references
    prefs = PREFERRED.get(model)
    if not prefs:
        return None
    values: dict[str, list[float]] = {}
    for r in rho:
        try:
            comp = references.predictions(model, float(r), float(temperature), tail=tail,
                                          cutoff=cutoff)
        except Exception:  # a reference refusing a state just leaves a gap
            continue
        for p in comp.predictions:
            values.setdefault(p.name, []).append(p.Z - 1.0)
    for name in prefs:
        if name in values and len(values[name]) == len(rho):
            return name, np.array(values[name])
    return None


def _crossings_by_group(crossings: Sequence[bd.Crossing], keys: Sequence[str]) -> dict:
    out: dict[tuple, list[bd.Crossing]] = {}
    for c in crossings:
        out.setdefault(tuple(bd._hashable(c.group.get(k)) for k in keys), []).append(c)
    return out


def fig_isotherms(folder, crossings: Sequence[bd.Crossing], x: str = "density",
                  potential: tuple[str, float] = ("corrected", 3.0)):
    """Z − 1 against density or measured pressure, one panel per geometry."""
    plt = _plt()
    geo, panels = _panels(folder)
    if not panels:
        return None
    keys = bd.group_keys(folder.varied_keys)
    by_group = _crossings_by_group(crossings, keys)
    n = len(panels)
    fig, axes = plt.subplots(1, n, figsize=(6.0 * n, 4.4), squeeze=False, sharey=True)
    for ax, (g, curves) in zip(axes[0], panels):
        for k, c in enumerate(curves):
            colour = style.INK[k % len(style.INK)]
            t = _temperature(c)
            xs = c.density if x == "density" else c.pressure
            ax.errorbar(xs, c.y, yerr=c.stderr, fmt=style.MARKERS[k % len(style.MARKERS)],
                        color=colour, ms=5, capsize=2, lw=1.0, label=f"T = {t:.4g}")
            if len(c.density) >= 2:
                grid = np.geomspace(max(c.density.min() / 1.5, 1e-6), c.density.max() * 1.2, 60)
                ref = reference_curve(c.model, t, grid, *potential)
                if ref is not None:
                    name, zr = ref
                    gx = grid if x == "density" else (1.0 + zr) * grid * t
                    ax.plot(gx, zr, color=colour, lw=0.9, ls="--", alpha=0.8,
                            label=f"{name}, T = {t:.4g}")
            for cr in by_group.get(tuple(bd._hashable(c.group.get(kk)) for kk in keys), []):
                if cr.status != bd.FOUND:
                    continue
                cx, cxe = ((cr.density, cr.density_stderr) if x == "density"
                           else (cr.pressure, cr.pressure_stderr))
                ax.errorbar([cx], [cr.sign * cr.tolerance / 100], xerr=[cxe], fmt="*",
                            ms=11, color=colour, mec=style.INK[0], mew=0.6, capsize=3)
        for tol in folder.tolerances:
            for s in (-1, 1):
                ax.axhline(s * tol / 100, color=style.INK[5], lw=0.9, ls=":")
            ax.text(1.0, tol / 100, f" {tol:g} %", transform=ax.get_yaxis_transform(),
                    fontsize=8, color=style.INK[5], va="center", clip_on=False)
        ax.axhline(0.0, color=style.INK[0], lw=0.8)
        ax.set_xscale("log")
        ax.set_xlabel("number density ρ (σ⁻³)" if x == "density"
                      else "measured pressure P (ε/σ³)")
        ax.set_title(_label(g, geo) or "Z − 1 per isotherm", fontsize=10)
        ax.legend(fontsize=7, loc="best")
    axes[0][0].set_ylabel("Z − 1   (0 is PV = NkT)")
    fig.suptitle(f"sweep {folder.name}: deviation from the ideal-gas law "
                 "(★ crossings ± stderr)", x=0.01, ha="left", fontsize=11, fontweight="bold")
    fig.tight_layout()
    return fig


def fig_map(folder, crossings: Sequence[bd.Crossing]):
    """Temperature against density and against pressure, shaded by |Z − 1|, with the
    tolerance contours and the crossings (± stderr)."""
    plt = _plt()
    from matplotlib import colors, tri
    geo, panels = _panels(folder)
    if not panels:
        return None
    keys = bd.group_keys(folder.varied_keys)
    n = len(panels)
    fig, axes = plt.subplots(n, 2, figsize=(11.0, 4.2 * n + 0.6), squeeze=False,
                             layout="constrained")
    allz = np.concatenate([np.abs(c.y) for _, cs in panels for c in cs])
    lo = max(float(np.nanmin(allz[allz > 0])) if (allz > 0).any() else 1e-4, 1e-5)
    norm = colors.LogNorm(vmin=lo, vmax=max(float(np.nanmax(allz)), lo * 10))
    sc = None
    for row, (g, curves) in enumerate(panels):
        pts = [(r, _temperature(c), p, abs(y)) for c in curves
               for r, p, y in zip(c.density, c.pressure, c.y)]
        rho, temp, pres, dev = (np.array(v, float) for v in zip(*pts))
        for col, (xv, xlabel) in enumerate(((rho, "number density ρ (σ⁻³)"),
                                            (pres, "measured pressure P (ε/σ³)"))):
            ax = axes[row][col]
            sc = ax.scatter(xv, temp, c=np.maximum(dev, lo), cmap="Greys", norm=norm, s=55,
                            edgecolors=style.INK[0], linewidths=0.5, zorder=3)
            ok = np.isfinite(xv) & (xv > 0)
            if len(set(temp[ok])) >= 2 and len(set(np.round(np.log(xv[ok]), 6))) >= 2 \
                    and ok.sum() >= 3:
                try:
                    tr = tri.Triangulation(np.log10(xv[ok]), temp[ok])
                    levels = sorted(t / 100 for t in folder.tolerances)
                    cs = ax.tricontour(10 ** tr.x, tr.y, tr.triangles, dev[ok], levels=levels,
                                       colors=[style.ACCENT], linestyles=list(style.LINESTYLES),
                                       linewidths=1.2)
                    ax.clabel(cs, fmt={lv: f"{100 * lv:g} %" for lv in levels}, fontsize=8)
                except (ValueError, RuntimeError):  # collinear points: no contour to draw
                    pass
            for k, tol in enumerate(sorted(folder.tolerances)):
                found = [c for c in crossings if c.tolerance == tol and c.status == bd.FOUND
                         and all(bd._hashable(c.group.get(kk)) == bd._hashable(g.get(kk))
                                 for kk in geo)]
                if not found:
                    continue
                cx = [c.density if col == 0 else c.pressure for c in found]
                ce = [c.density_stderr if col == 0 else c.pressure_stderr for c in found]
                ct = [float(c.group.get(TEMPERATURE_KEY) or c.temperature) for c in found]
                ax.errorbar(cx, ct, xerr=ce, fmt=style.MARKERS[(k + 1) % len(style.MARKERS)],
                            color=style.INK[2 + k % 3], ms=8, capsize=3, zorder=4,
                            label=f"|Z − 1| = {tol:g} % crossing")
            if col == 0 and curves:
                _b2_lines(ax, curves[0].model, temp, sorted(folder.tolerances))
            ax.set_xscale("log")
            ax.set_xlabel(xlabel)
            ax.set_ylabel("temperature kT/ε")
            title = _label(g, geo)
            ax.set_title(("where PV = NkT holds" + (f" ({title})" if title else "")),
                         fontsize=10)
            if col == 0:
                ax.legend(fontsize=7, loc="upper left")
    if sc is not None:
        cb = fig.colorbar(sc, ax=axes.ravel().tolist(), shrink=0.8, pad=0.02)
        cb.set_label("|Z − 1| at each state point")
    fig.suptitle(f"sweep {folder.name}: breakdown map (lines: tolerance contours over the "
                 "points; markers: crossings ± stderr)", x=0.01, ha="left", fontsize=11,
                 fontweight="bold")
    return fig


def _b2_lines(ax, model: str, temps: np.ndarray, tolerances: Sequence[float]) -> None:
    """The second-virial estimate ρ = τ/|B2(T)| of each crossing, over the sweep's T range."""
    if model not in ("hard-sphere", "lennard-jones") or len(temps) == 0:
        return
    tt = np.linspace(float(np.min(temps)), float(np.max(temps)), 40) if np.ptp(temps) > 0 \
        else np.array([float(temps[0])])
    b2 = np.array([bd.second_virial(model, float(t)) or np.nan for t in tt])
    for k, tol in enumerate(tolerances):
        with np.errstate(divide="ignore"):
            rho = tol / 100 / np.abs(b2)
        ax.plot(rho, tt, color=style.INK[2 + k % 3], lw=0.9, ls=(0, (1, 2)),
                label=f"B2 estimate of the {tol:g} % crossing")


def _potential(folder) -> tuple[str, float]:
    from .run import load as load_run
    for r in folder.rows:
        if r.get("status") == "complete":
            try:
                s = load_run(folder.path / r["file"]).settings
                return s.potential.tail, s.potential.cutoff
            except Exception:  # the default potential still gives a usable curve
                break
    return "corrected", 3.0


def figures(folder, crossings: Sequence[bd.Crossing] | None = None) -> dict[str, Any]:
    """Every sweep figure: name -> matplotlib Figure."""
    from .sweep import analyse
    if crossings is None:
        crossings = analyse(folder)
    pot = _potential(folder)
    out = {}
    with style.use():
        for name, fig in (("map", fig_map(folder, crossings)),
                          ("isotherms-density", fig_isotherms(folder, crossings, "density", pot)),
                          ("isotherms-pressure",
                           fig_isotherms(folder, crossings, "pressure", pot))):
            if fig is not None:
                out[name] = fig
    return out


def plot_folder(path: str | Path, outdir: str | Path | None = None, fmt: str = "png"
                ) -> list[Path]:
    """Write the sweep's figures to ``outdir`` (default ``<folder>/plots``)."""
    from .sweep import open_folder
    plt = _plt()
    folder = open_folder(path)
    out = Path(outdir) if outdir else folder.path / "plots"
    out.mkdir(parents=True, exist_ok=True)
    written = []
    with style.use():
        for name, fig in figures(folder).items():
            p = out / f"{folder.name}-{name}.{fmt}"
            fig.savefig(p, format=fmt, **({"metadata": {"Date": None}} if fmt == "svg" else {}))
            plt.close(fig)
            written.append(p)
    return written
