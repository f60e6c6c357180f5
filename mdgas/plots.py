"""Figures of one run file, in the slate style (:mod:`mdgas.style`), reduced units.

Each ``fig_*`` function takes a :class:`mdgas.run.Run` (and, where needed, its summary)
and returns a matplotlib Figure, or None when the run has nothing to show for it (no
walls, no frames, ...). :func:`plot_run` writes them all; :func:`animate` writes a GIF
of the stored frames. Reads run files only; never imports an engine.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any, Callable

import numpy as np
from scipy import stats

from . import style
from .analysis import structure
from .analysis.statistics import block_stderr, blocking_curve, estimate
from .config import FACES

AXES = "xyz"
#: Most particles drawn in a snapshot (a random subset beyond that, for legibility).
SNAPSHOT_POINTS = 4000


def _plt():
    import matplotlib
    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt
    return plt


def _mark_production(ax, run, cut: float | None = None) -> None:
    ax.axvline(run.production_start, color=style.INK[5], lw=1.0, ls="--")
    ax.text(run.production_start, 0.98, "production ", transform=ax.get_xaxis_transform(),
            va="top", ha="right", fontsize=8, color=style.INK[5])
    if cut is not None and cut > run.production_start + 1e-12:
        ax.axvline(cut, color=style.INK[4], lw=1.0, ls=":")
        ax.text(cut, 0.98, " stationary", transform=ax.get_xaxis_transform(), va="top",
                ha="left", fontsize=8, color=style.INK[4])


def _running_mean(x: np.ndarray) -> np.ndarray:
    return np.cumsum(x) / np.arange(1, len(x) + 1)


# -- pressure ------------------------------------------------------------------------------

def fig_pressure(run, summary: dict | None = None):
    """Pressure against time on every walled face (or the virial pressure in bulk), with
    the running mean and the final mean ± stderr band."""
    plt = _plt()
    t, pw = run.series("pressure_wall")
    faces = [k for k in range(6) if run.settings.walled[k // 2]]
    if faces:
        series = [(f"wall {FACES[k]}", pw[:, k]) for k in faces]
        what = "wall pressure"
    else:
        t, pv = run.series("pressure_virial")
        series = [("virial", np.asarray(pv))]
        what = "virial pressure"
    ncol = 2 if len(series) > 1 else 1
    nrow = math.ceil(len(series) / ncol)
    fig, axs = plt.subplots(nrow, ncol, figsize=(6.4 if ncol == 2 else 6.0, 1.9 * nrow + 0.8),
                            sharex=True, sharey=True, squeeze=False)
    for ax, (name, x) in zip(axs.flat, series):
        e = estimate(x)
        ax.plot(t, x, color=style.INK[5], lw=0.6, ls="-", alpha=0.8, label="samples")
        ax.plot(t, _running_mean(x), color=style.INK[0], lw=1.6, ls="-", label="running mean")
        if np.isfinite(e.stderr):
            ax.axhspan(e.mean - e.stderr, e.mean + e.stderr, color=style.BAND, alpha=0.9,
                       lw=0, label="mean ± stderr")
        ax.set_title(f"{name}: {e.mean:.4g} ± {e.stderr:.2g}", fontsize=9)
    for ax in axs.flat[len(series):]:
        ax.set_visible(False)
    for ax in axs[-1]:
        ax.set_xlabel("time (τ)")
    for ax in axs[:, 0]:
        ax.set_ylabel("P (ε/σ³)")
    fig.suptitle(f"{what.capitalize()} during production", x=0.01, ha="left",
                 fontweight="bold", fontsize=11)
    handles, labels = axs.flat[0].get_legend_handles_labels()
    fig.tight_layout(rect=(0, 0.06, 1, 1))
    fig.legend(handles, labels, loc="lower center", ncol=3)
    return fig


# -- velocity distributions ---------------------------------------------------------------

def _mean_temperature(run) -> float:
    _, temp = run.series("temperature")
    return float(np.mean(temp))


def fig_speed(run, summary: dict | None = None):
    """Speed histogram against Maxwell-Boltzmann at the measured T, residuals below.

    Residuals are (observed − expected)/sqrt(expected) with the histogram scaled to one
    snapshot (N counts), because successive snapshots are correlated.
    """
    h = run.histograms
    if not h or float(h.get("samples", 0)) <= 0 or h["speed_counts"].sum() <= 0:
        return None
    plt = _plt()
    edges, counts = h["speed_edges"], h["speed_counts"]
    width = np.diff(edges)
    centres = 0.5 * (edges[1:] + edges[:-1])
    total = counts.sum()
    temp = _mean_temperature(run)
    law = stats.maxwell(scale=math.sqrt(temp))
    fig, (ax, axr) = plt.subplots(2, 1, figsize=(6.0, 4.6), sharex=True,
                                  gridspec_kw={"height_ratios": [3, 1]})
    ax.bar(centres, counts / (total * width), width=width, color=style.BAND,
           edgecolor=style.INK[1], lw=0.5, label="simulation (production)")
    v = np.linspace(0, edges[-1], 400)
    ax.plot(v, law.pdf(v), color=style.INK[0], ls="-", label=f"Maxwell-Boltzmann, T = {temp:.4g}")
    ax.set_ylabel("probability density (τ/σ)")
    ax.set_title("Speed distribution")
    ax.legend()
    per_snap = counts / float(h["samples"])
    n = per_snap.sum()
    expected = n * np.diff(law.cdf(edges))
    with np.errstate(invalid="ignore", divide="ignore"):
        resid = np.where(expected > 0.5, (per_snap - expected) / np.sqrt(expected), np.nan)
    axr.axhline(0, color=style.INK[5], lw=0.8)
    axr.plot(centres, resid, ls="none", marker="o", color=style.INK[1], ms=3)
    axr.set_ylabel("residual (σ)")
    axr.set_xlabel("speed |v| (σ/τ)")
    fig.tight_layout()
    return fig


def fig_velocity(run, summary: dict | None = None):
    """Histograms of vx, vy, vz against the Gaussian of the measured temperature."""
    h = run.histograms
    if not h or float(h.get("samples", 0)) <= 0 or h["velocity_counts"].sum() <= 0:
        return None
    plt = _plt()
    edges = h["velocity_edges"]
    width = np.diff(edges)
    centres = 0.5 * (edges[1:] + edges[:-1])
    temp = _mean_temperature(run)
    v = np.linspace(edges[0], edges[-1], 400)
    gauss = stats.norm(scale=math.sqrt(temp)).pdf(v)
    fig, axs = plt.subplots(1, 3, figsize=(7.4, 2.8), sharey=True)
    for a, ax in enumerate(axs):
        c = h["velocity_counts"][a]
        ax.bar(centres, c / (c.sum() * width), width=width, color=style.BAND,
               edgecolor=style.INK[1], lw=0.4)
        ax.plot(v, gauss, color=style.INK[0], ls="-")
        ax.set_xlabel(f"v{AXES[a]} (σ/τ)")
        ax.set_title(f"v{AXES[a]}", fontsize=9)
    axs[0].set_ylabel("probability density (τ/σ)")
    fig.suptitle(f"Velocity components against a Gaussian with kT/m = {temp:.4g}", x=0.01,
                 ha="left", fontweight="bold", fontsize=11)
    fig.tight_layout()
    return fig


# -- structure -----------------------------------------------------------------------------

def fig_density(run, summary: dict | None = None):
    """Number-density profile across every walled axis, with the mean density N/V."""
    axes = [a for a in range(3) if run.settings.walled[a]]
    h = run.histograms
    if not axes or not h or float(h.get("samples", 0)) <= 0:
        return None
    plt = _plt()
    box = np.asarray(run.settings.box)
    fig, axs = plt.subplots(1, len(axes), figsize=(2.6 * len(axes) + 1.0, 2.9),
                            sharey=True, squeeze=False)
    for ax, a in zip(axs[0], axes):
        x, rho = structure.density_profile(h, box, a)
        ax.step(x, rho, where="mid", color=style.INK[1], ls="-", label="simulation")
        ax.axhline(run.settings.gas.density, color=style.INK[0], ls="--", lw=1.0,
                   label="N/V")
        ax.set_xlabel(f"{AXES[a]} (σ)")
        ax.set_xlim(0, box[a])
    axs[0, 0].set_ylabel("number density (σ⁻³)")
    axs[0, 0].legend(loc="lower center")
    fig.suptitle("Density across the walled axes", x=0.01, ha="left", fontweight="bold",
                 fontsize=11)
    fig.tight_layout()
    return fig


def fig_rdf(run, summary: dict | None = None):
    """Radial distribution function g(r) of a bulk (fully periodic) run."""
    h = run.histograms
    if run.settings.container.walls != "none" or not h or "rdf_counts" not in h \
            or float(np.sum(h["rdf_counts"])) <= 0:
        return None
    plt = _plt()
    r, g = structure.radial_distribution(h, run.settings.gas.particles, run.settings.volume)
    fig, ax = plt.subplots(figsize=(6.0, 3.4))
    ax.axhline(1.0, color=style.INK[5], lw=0.8, ls="--")
    ax.plot(r, g, color=style.INK[0], ls="-")
    ax.set_xlabel("r (σ)")
    ax.set_ylabel("g(r)")
    ax.set_xlim(0, r[-1])
    ax.set_title("Radial distribution function")
    fig.tight_layout()
    return fig


# -- traces and error bars ------------------------------------------------------------------

def fig_traces(run, summary: dict | None = None):
    """Energies per particle and temperature over the whole run, equilibration marked."""
    plt = _plt()
    cut = (summary or {}).get("equilibration", {}).get("detected_start")
    fig, (ax, axt) = plt.subplots(2, 1, figsize=(6.4, 4.8), sharex=True)
    t = run.times
    for k, (name, label) in enumerate((("total_energy", "total"), ("kinetic_energy", "kinetic"),
                                       ("potential_energy", "potential"))):
        if name in run.observables:
            ax.plot(t, run.observables[name], color=style.INK[k], ls=style.LINESTYLES[k],
                    lw=1.1, label=label)
    ax.set_ylabel("energy per particle (ε)")
    ax.set_title("Energy and temperature", pad=18)
    ax.legend(loc="lower right", ncol=3, bbox_to_anchor=(1.0, 1.0), borderaxespad=0.2)
    _mark_production(ax, run, cut)
    axt.plot(t, run.observables["temperature"], color=style.INK[1], lw=1.0, ls="-",
             label="kinetic")
    axt.axhline(run.settings.gas.temperature, color=style.INK[0], ls="--", lw=1.0,
                label="set")
    axt.set_ylabel("T (ε/k)")
    axt.set_xlabel("time (τ)")
    axt.legend(loc="lower right", ncol=2)
    _mark_production(axt, run, cut)
    fig.tight_layout()
    return fig


def _blocking_series(run) -> list[tuple[str, np.ndarray]]:
    from .analysis.summary import pressure_series
    out = []
    src, p = pressure_series(run)
    out.append((f"{src} pressure", p))
    _, temp = run.series("temperature")
    out.append(("temperature", np.asarray(temp)))
    if "potential_energy" in run.observables:
        _, u = run.series("potential_energy")
        if np.ptp(u) > 0:
            out.append(("potential energy", np.asarray(u)))
    return out


def fig_blocking(run, summary: dict | None = None):
    """Standard error against block size (Flyvbjerg-Petersen), plateau chosen marked.

    Each curve is relative to its naive (block size 1) stderr, so a plateau at height
    sqrt(g) shows the statistical inefficiency g directly.
    """
    plt = _plt()
    fig, ax = plt.subplots(figsize=(6.0, 3.6))
    for k, (name, x) in enumerate(_blocking_series(run)):
        if len(x) < 8 or np.ptp(x) <= 0:
            continue
        sizes, errs, de = blocking_curve(x)
        _, b = block_stderr(x)
        used = estimate(x)
        ax.errorbar(sizes, errs / errs[0], yerr=de / errs[0], color=style.INK[k],
                    ls=style.LINESTYLES[k], marker=style.MARKERS[k], capsize=2, lw=1.1,
                    label=f"{name} (plateau at {b}, n_eff = {used.n_eff:.0f})")
        ax.plot([b], [used.stderr / errs[0]], marker="o", ms=11, mfc="none",
                mec=style.INK[k], mew=1.4, ls="none")
    ax.set_xscale("log", base=2)
    ax.set_xlabel("block size (samples)")
    ax.set_ylabel("stderr / naive stderr")
    ax.set_title("Block averaging: where each error bar comes from")
    ax.legend(loc="upper left")
    fig.tight_layout()
    return fig


def fig_references(run, summary: dict):
    """The measured Z with every reference model's prediction on one axis."""
    plt = _plt()
    refs = summary.get("references") or {}
    z = summary["Z"]
    names = list(refs)
    fig, ax = plt.subplots(figsize=(6.4, 0.45 * len(names) + 1.6))
    y = np.arange(len(names))[::-1]
    if z["stderr"] is not None:
        ax.axvspan(z["mean"] - 2 * z["stderr"], z["mean"] + 2 * z["stderr"], color=style.BAND,
                   lw=0, label="measured Z ± 2 stderr")
    ax.axvline(z["mean"], color=style.INK[0], lw=1.5, label=f"measured Z = {z['mean']:.4g}")
    for k, (yy, name) in enumerate(zip(y, names)):
        r = refs[name]
        filled = r.get("in_range", True)
        ax.plot([r["Z"]], [yy], marker=style.MARKERS[k % len(style.MARKERS)], ms=7,
                color=style.INK[1], mfc=style.INK[1] if filled else "white", ls="none")
    tol = summary.get("verdict", {}).get("tolerance_percent")
    if tol:
        for sgn in (-1, 1):
            ax.axvline(1 + sgn * tol / 100, color=style.INK[5], ls=":", lw=1.0)
        ax.text(1 + tol / 100, 1.0, f" ±{tol:g} % of ideal", transform=ax.get_xaxis_transform(),
                fontsize=8, color=style.INK[5], va="bottom")
    ax.set_yticks(y, [n + ("" if refs[n].get("in_range", True) else " (out of range)")
                      for n in names])
    ax.set_xlabel("compressibility factor Z = PV/(NkT)")
    ax.set_ylim(-0.8, len(names) - 0.2)
    ax.set_title("Z against the reference models", pad=14)
    ax.legend(loc="lower right", fontsize=8)
    ax.grid(axis="y", visible=False)
    fig.tight_layout()
    return fig


# -- particles ---------------------------------------------------------------------------

def _subset(n: int, seed: int = 0) -> np.ndarray:
    if n <= SNAPSHOT_POINTS:
        return np.arange(n)
    return np.sort(np.random.default_rng(seed).choice(n, SNAPSHOT_POINTS, replace=False))


def _marker_size(run, ax_len: float) -> float:
    # Points of about one σ across (hard spheres and LJ), smaller for point particles.
    s = 72.0 * 2.2 / ax_len * 1.0  # σ in points on a ~2.2-inch panel
    size = (s ** 2) if run.settings.gas.model != "ideal" else 4.0
    return float(min(max(size, 1.0), 60.0))


def fig_snapshot(run, summary: dict | None = None, frame: int = -1):
    """Particle positions of one stored frame, projected on the xy, xz and yz planes."""
    if run.n_frames == 0:
        return None
    plt = _plt()
    idx = frame if frame >= 0 else run.n_frames + frame
    t, pos, _ = run.frames([idx])
    pos = pos[0]
    sel = _subset(len(pos))
    box = np.asarray(run.settings.box)
    fig, axs = plt.subplots(1, 3, figsize=(7.6, 2.9))
    for ax, (i, j) in zip(axs, ((0, 1), (0, 2), (1, 2))):
        ax.scatter(pos[sel, i], pos[sel, j], s=_marker_size(run, max(box)), c=style.INK[1],
                   alpha=0.55, linewidths=0)
        ax.set_xlim(0, box[i])
        ax.set_ylim(0, box[j])
        ax.set_aspect("equal")
        ax.set_xlabel(f"{AXES[i]} (σ)")
        ax.set_ylabel(f"{AXES[j]} (σ)")
        ax.grid(False)
        for a, spine in ((i, ("left", "right")), (j, ("bottom", "top"))):
            walled = run.settings.walled[a]
            for sname in spine:
                ax.spines[sname].set_visible(True)
                ax.spines[sname].set_linewidth(2.2 if walled else 0.6)
                ax.spines[sname].set_linestyle("-" if walled else "--")
    shown = "" if len(sel) == len(pos) else f", {len(sel)} of {len(pos)} shown"
    fig.suptitle(f"Positions at t = {float(t[0]):.4g} τ (frame {idx + 1} of {run.n_frames}"
                 f"{shown}); thick edges are walls", x=0.01, ha="left", fontsize=10,
                 fontweight="bold")
    fig.tight_layout()
    return fig


def animate(run, path: str | Path, fps: int = 5) -> Path | None:
    """Animated GIF of the xy projection across all stored frames (PillowWriter)."""
    if run.n_frames == 0:
        return None
    plt = _plt()
    from matplotlib.animation import FuncAnimation, PillowWriter
    times, frames, _ = run.frames()
    box = np.asarray(run.settings.box)
    sel = _subset(frames.shape[1])
    path = Path(path)
    with style.use():
        fig, ax = plt.subplots(figsize=(4.0, 4.0 * box[1] / box[0] + 0.4))
        sc = ax.scatter(frames[0, sel, 0], frames[0, sel, 1], s=_marker_size(run, box[0]),
                        c=style.INK[1], alpha=0.6, linewidths=0)
        ax.set_xlim(0, box[0])
        ax.set_ylim(0, box[1])
        ax.set_aspect("equal")
        ax.set_xlabel("x (σ)")
        ax.set_ylabel("y (σ)")
        ax.grid(False)
        title = ax.set_title("")

        def update(k: int):
            sc.set_offsets(frames[k][sel][:, :2])
            title.set_text(f"t = {times[k]:.4g} τ")
            return sc, title

        anim = FuncAnimation(fig, update, frames=len(times), blit=False)
        anim.save(path, writer=PillowWriter(fps=fps))
        plt.close(fig)
    return path


# -- everything ----------------------------------------------------------------------------

#: Figure name -> (function, caption). The report shows them in this order.
FIGURES: dict[str, tuple[Callable, str]] = {
    "references": (fig_references, "Measured Z (band: ±2 standard errors) beside each "
                   "reference model; open markers are outside the model's range."),
    "pressure": (fig_pressure, "Pressure samples, running mean and final mean ± stderr "
                 "for every walled face (virial pressure in a periodic box)."),
    "traces": (fig_traces, "Energies per particle and kinetic temperature; dashed line: "
               "scheduled start of production, dotted: detected end of equilibration."),
    "blocking": (fig_blocking, "Block averaging: the standard error rises with block size "
                 "until blocks are independent. Circles: the stderr used, the larger of "
                 "the plateau and the autocorrelation estimate."),
    "speed": (fig_speed, "Speeds during production against Maxwell-Boltzmann at the "
              "measured temperature; residuals for one snapshot's worth of counts."),
    "velocity": (fig_velocity, "Velocity components against a Gaussian of the measured "
                 "temperature."),
    "density": (fig_density, "Number density across each walled axis; dashed: N/V."),
    "rdf": (fig_rdf, "Radial distribution function g(r) of the bulk fluid."),
    "snapshot": (fig_snapshot, "Particle positions of the last stored frame in three "
                 "projections."),
}


# -- real gases in SI units (sections built by mdgas.statepoint.real_gas) ------------------

def fig_real_gas(run, summary: dict):
    """Ideal gas, the simulated model, its equation of state and the real fluid: Z in SI."""
    rg = (summary or {}).get("real_gas")
    if not rg:
        return None
    plt = _plt()
    rows = [("ideal gas (PV = NkT)", 1.0, None)]
    z = rg["Z"]
    pore = rg.get("pore")
    if pore:
        za = pore["apparent_Z_accessible"]
        rows.append(("pore: apparent Z, V between wall planes", z["mean"], z["stderr"]))
        rows.append(("pore: with the accessible width", za["mean"], za["stderr"]))
    else:
        rows.append(("simulated model", z["mean"], z["stderr"]))
    if rg["eos"].get("Z") is not None:
        rows.append((f"{rg['eos']['name']} (model EOS{', bulk' if pore else ''})",
                     rg["eos"]["Z"], None))
    rf = rg["real_fluid"]
    if rf.get("Z_same_T_P") is not None:
        rows.append((f"real {rf['fluid']} (same T, P)", rf["Z_same_T_P"], None))
    fig, ax = plt.subplots(figsize=(6.4, 0.45 * len(rows) + 1.7))
    y = np.arange(len(rows))[::-1]
    for k, (yy, (name, val, err)) in enumerate(zip(y, rows)):
        ax.errorbar([val], [yy], xerr=None if err is None else [2 * err], capsize=4,
                    marker=style.MARKERS[k % len(style.MARKERS)], ms=7, color=style.INK[1],
                    ls="none")
    ax.set_yticks(y, [r[0] for r in rows])
    p, t = rg["pressure_bar"], rg["temperature_K"]
    ax.set_title(f"{rg['species']}: {t['mean']:.4g} K, {p['mean']:.4g} bar, "
                 f"{rg['density_kg_m3']:.4g} kg/m³", pad=10)
    ax.set_xlabel("compressibility factor Z = PV/(NkT)  (error bar: ±2 stderr)")
    ax.set_ylim(-0.7, len(rows) - 0.3)
    ax.grid(axis="y", visible=False)
    fig.tight_layout()
    return fig


def fig_pore_si(run, summary: dict):
    """Density across a slit pore in kg/m³ against nm, with the pore-average density."""
    pore = ((summary or {}).get("real_gas") or {}).get("pore")
    if not pore or "profile_z_nm" not in pore:
        return None
    plt = _plt()
    fig, ax = plt.subplots(figsize=(6.4, 3.0))
    ax.step(pore["profile_z_nm"], pore["profile_kg_m3"], where="mid", color=style.INK[1],
            label="simulation")
    ax.axhline(pore["mean_density_kg_m3"], color=style.INK[0], ls="--", lw=1.0,
               label="pore average N/V")
    ax.set_xlim(0, pore["width_nm"])
    ax.set_xlabel("distance from the lower wall plane (nm)")
    ax.set_ylabel("density (kg/m³)")
    ax.set_title(f"Density across the {pore['width_nm']:.3g} nm pore", pad=10)
    ax.legend(loc="upper center", fontsize=8)
    fig.tight_layout()
    return fig


FIGURES["real_gas"] = (fig_real_gas, "Z side by side in SI: the ideal-gas law, the "
                       "simulated model (±2 stderr), the model's equation of state and the "
                       "real fluid's reference equation (CoolProp).")
FIGURES["pore_si"] = (fig_pore_si, "Density profile across the slit pore in kg/m³ against "
                      "nm; dashed: pore average with V between the wall planes.")


def figures(run, summary: dict | None = None) -> dict[str, Any]:
    """Every figure that applies to ``run``: name -> matplotlib Figure."""
    if summary is None:
        summary = run.summary()
    out = {}
    with style.use():
        for name, (fn, _) in FIGURES.items():
            fig = fn(run, summary)
            if fig is not None:
                out[name] = fig
    return out


def plot_run(run, outdir: str | Path, fmt: str = "png", animate_frames: bool = False,
             summary: dict | None = None) -> list[Path]:
    """Write every figure of ``run`` to ``outdir`` as ``<run stem>-<figure>.<fmt>``."""
    plt = _plt()
    outdir = Path(outdir)
    outdir.mkdir(parents=True, exist_ok=True)
    stem = Path(run.path).stem
    written = []
    with style.use():
        for name, fig in figures(run, summary).items():
            p = outdir / f"{stem}-{name}.{fmt}"
            fig.savefig(p, format=fmt, metadata=_metadata(fmt))
            plt.close(fig)
            written.append(p)
    if animate_frames:
        gif = animate(run, outdir / f"{stem}-frames.gif")
        if gif is not None:
            written.append(gif)
    return written


def _metadata(fmt: str) -> dict | None:
    # Reproducible files: no creation dates in SVG/PDF.
    if fmt == "svg":
        return {"Date": None}
    if fmt == "pdf":
        return {"CreationDate": None}
    return None
