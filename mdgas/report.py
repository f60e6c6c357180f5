"""The reviewer's report: one self-contained HTML file (figures embedded, no network).

:func:`build_html` is the reusable part: a title, a lead paragraph, sections of HTML
and figures in, one HTML document out (the sweep report uses it too).
:func:`run_report` fills it for one run file. Reads run files only.
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import io
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable

from . import style

CAUTIONS = (
    "These results are estimates from a model (point particles, hard spheres or "
    "Lennard-Jones particles, simulated classically). They show where and by how much the "
    "ideal-gas law departs from that model; the model's own departure from a real gas "
    "is not part of the error bars.",
    "Pressurised gas stores energy and can injure or kill. The design, rating and "
    "inspection of any vessel, piping, valve or porous container follows the applicable "
    "pressure-equipment codes, uses certified property data for the real fluid, and is "
    "done or approved by licensed engineers. Do not use these numbers for that purpose.",
    "Error bars are one standard error of the mean from correlated samples (block "
    "averaging); systematic errors (finite size, cut-off, time step, wall model) are not "
    "included.",
)


@dataclass
class Figure:
    """A figure for the report: a matplotlib Figure (or PNG bytes) and its caption."""

    name: str
    caption: str
    figure: Any = None
    png: bytes | None = None

    def data_uri(self, dpi: int = 110) -> str:
        data = self.png
        if data is None:
            buf = io.BytesIO()
            self.figure.savefig(buf, format="png", dpi=dpi)
            data = buf.getvalue()
        return "data:image/png;base64," + base64.b64encode(data).decode("ascii")


@dataclass
class Section:
    """A titled block of the report. ``body`` is trusted HTML built with :func:`esc`."""

    title: str
    body: str
    anchor: str = ""
    figures: list[Figure] = field(default_factory=list)


def esc(x: Any) -> str:
    return html.escape(str(x), quote=True)


def table(rows: Iterable[Iterable[Any]], header: Iterable[str] | None = None,
          classes: str = "") -> str:
    """An HTML table of escaped cells; a cell given as ``("html", text)`` is inserted raw."""
    def cell(c: Any, tag: str) -> str:
        if isinstance(c, tuple) and len(c) == 2 and c[0] == "html":
            return f"<{tag}>{c[1]}</{tag}>"
        return f"<{tag}>{esc(c)}</{tag}>"
    out = [f'<table class="{esc(classes)}">']
    if header:
        out.append("<thead><tr>" + "".join(cell(h, "th") for h in header) + "</tr></thead>")
    out.append("<tbody>")
    for r in rows:
        out.append("<tr>" + "".join(cell(c, "td") for c in r) + "</tr>")
    out.append("</tbody></table>")
    return "".join(out)


def badge(status: str) -> str:
    return f'<span class="badge {esc(status)}">{esc(status)}</span>'


_CSS = f"""
:root {{ --ink: #1f2328; --muted: #5b6270; --line: #d8dde3; --accent: {style.ACCENT};
  --band: {style.BAND}; --pass: {style.PASS}; --warn: {style.WARN}; --fail: {style.FAIL}; }}
* {{ box-sizing: border-box; }}
body {{ margin: 0; font: 15px/1.55 "DejaVu Sans", "Segoe UI", Helvetica, Arial, sans-serif;
  color: var(--ink); background: #f4f5f7; }}
header {{ background: #22303c; color: #fff; padding: 28px 0 22px; }}
header .wrap, main {{ max-width: 1000px; margin: 0 auto; padding: 0 28px; }}
header h1 {{ margin: 0 0 6px; font-size: 25px; font-weight: 600; letter-spacing: .2px; }}
header p {{ margin: 0; color: #c9d3dc; }}
nav {{ margin-top: 14px; font-size: 13px; }}
nav a {{ color: #dfe7ee; margin-right: 14px; text-decoration: none;
  border-bottom: 1px dotted #8fa3b5; }}
main {{ padding-top: 22px; padding-bottom: 40px; }}
section {{ background: #fff; border: 1px solid var(--line); border-radius: 6px;
  padding: 18px 24px; margin: 0 0 18px; }}
h2 {{ margin: 0 0 12px; font-size: 18px; color: #22303c;
  border-bottom: 2px solid var(--band); padding-bottom: 6px; }}
.lead {{ font-size: 16px; }}
.verdict {{ border-left: 6px solid var(--accent); padding: 10px 16px; background: #eef3f8;
  font-size: 17px; margin: 6px 0 12px; }}
.verdict.no {{ border-left-color: var(--fail); background: #f8eeee; }}
.verdict.open {{ border-left-color: var(--warn); background: #f8f3e8; }}
.verdict.ok {{ border-left-color: var(--pass); background: #edf5ec; }}
table {{ border-collapse: collapse; width: 100%; margin: 8px 0 4px; font-size: 14px; }}
th, td {{ text-align: left; padding: 6px 10px; border-bottom: 1px solid var(--line);
  vertical-align: top; }}
th {{ background: #f0f2f5; font-weight: 600; }}
td.num, th.num {{ text-align: right; font-variant-numeric: tabular-nums; }}
table.kv td:first-child {{ width: 34%; color: var(--muted); }}
.badge {{ display: inline-block; min-width: 44px; text-align: center; border-radius: 10px;
  padding: 1px 8px; font-size: 12px; font-weight: 700; color: #fff; text-transform: uppercase; }}
.badge.pass {{ background: var(--pass); }} .badge.warn {{ background: var(--warn); }}
.badge.fail {{ background: var(--fail); }}
figure {{ margin: 14px 0 22px; }}
figure img {{ max-width: 100%; height: auto; display: block; margin: 0 auto;
  border: 1px solid var(--line); border-radius: 4px; background: #fff; }}
figcaption {{ color: var(--muted); font-size: 13px; margin-top: 6px; }}
.muted {{ color: var(--muted); }}
.caution {{ border: 1px solid #e0c48a; background: #fbf6ea; border-radius: 6px;
  padding: 12px 18px; }}
.caution li {{ margin: 6px 0; }}
code, pre {{ font-family: "DejaVu Sans Mono", Menlo, Consolas, monospace; font-size: 13px; }}
pre {{ background: #f6f8fa; border: 1px solid var(--line); padding: 10px; overflow-x: auto; }}
footer {{ color: var(--muted); font-size: 12px; text-align: center; padding: 0 0 28px; }}
@media print {{ body {{ background: #fff; }} section {{ break-inside: avoid; }} }}
"""


def build_html(title: str, lead: str, sections: list[Section], *,
               subtitle: str = "", footer: str = "") -> str:
    """One complete, self-contained HTML document (inline CSS, base64 PNG figures).

    ``lead`` and each section's ``body`` are HTML (escape text with :func:`esc`);
    figures are appended to their section with captions.
    """
    for i, s in enumerate(sections):
        if not s.anchor:
            s.anchor = f"s{i + 1}"
    nav = "".join(f'<a href="#{esc(s.anchor)}">{esc(s.title)}</a>' for s in sections)
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{esc(title)}</title>",
        '<meta name="generator" content="mdgas">',
        f"<style>{_CSS}</style></head><body>",
        f'<header><div class="wrap"><h1>{esc(title)}</h1>',
        f"<p>{esc(subtitle)}</p>" if subtitle else "",
        f"<nav>{nav}</nav></div></header>",
        "<main>",
        f'<section class="lead-section"><div class="lead">{lead}</div></section>' if lead else "",
    ]
    for s in sections:
        parts.append(f'<section id="{esc(s.anchor)}"><h2>{esc(s.title)}</h2>{s.body}')
        for f in s.figures:
            parts.append(f'<figure id="fig-{esc(f.name)}"><img alt="{esc(f.caption)}" '
                         f'src="{f.data_uri()}"><figcaption>{esc(f.caption)}</figcaption>'
                         "</figure>")
        parts.append("</section>")
    parts.append("</main>")
    parts.append(f"<footer>{footer}</footer>" if footer else "")
    parts.append("</body></html>")
    return "\n".join(p for p in parts if p)


def cautions_section() -> Section:
    items = "".join(f"<li>{esc(c)}</li>" for c in CAUTIONS)
    return Section("Cautions", f'<div class="caution"><ul>{items}</ul></div>', "cautions")


# -- one run ---------------------------------------------------------------------------

def _pm(e: dict | None, digits: int = 5) -> str:
    if e is None or e.get("mean") is None:
        return "n/a"
    if e.get("stderr") is None:
        return f"{e['mean']:.{digits}g} ± ?"
    return f"{e['mean']:.{digits}g} ± {e['stderr']:.2g}"


def _question(s: dict, settings) -> str:
    walls = settings.container.walls
    where = "a fully periodic (bulk) box" if walls == "none" else \
        f"a container closed by {settings.container.wall} walls on axes {walls}"
    q = (f"For {esc(s['particles'])} {esc(s['model'])} particles at number density "
         f"ρ = {s['density']:.4g} σ⁻³ and temperature kT/ε = {s['temperature_set']:.4g} "
         f"in {esc(where)}, how far is the pressure from PV = NkT, and is that within "
         f"the tolerance of {s['verdict']['tolerance_percent']:g} %?")
    return f"<p><strong>The question.</strong> {q}</p>"


def _verdict_block(s: dict) -> str:
    v = s["verdict"]
    cls = "open" if not v["decided"] else ("ok" if v["ideal_ok"] else "no")
    z = s["Z"]
    dev = v["deviation_percent"]
    rows = [("Compressibility factor Z = PV/(NkT)", _pm(z)),
            ("Deviation from ideal, 100 (Z − 1)", f"{_pm(dev, 4)} %"),
            ("Tolerance ([analysis] tolerance)", f"{v['tolerance_percent']:g} %"),
            ("Ideal-gas law good enough", "yes" if v["ideal_ok"] else "no"),
            ("Settled by the error bar", "yes" if v["decided"] else
             "no: run longer to decide"),
            ("Pressure measured from", f"{s['pressure_source']} ({_pm(s['pressure'])} ε/σ³)"),
            ("Independent samples behind Z", f"{s['effective_samples']['Z']:.0f}")]
    if "tail_correction_Z" in s:
        rows.append(("Tail correction included in Z", f"{s['tail_correction_Z']:+.4g}"))
    return (f'<div class="verdict {cls}">{esc(v["statement"])}</div>'
            + table(rows, classes="kv"))


def _references_block(s: dict) -> str:
    rows = []
    for name, r in s["references"].items():
        sig = "n/a" if r["sigma_away"] is None else f"{r['sigma_away']:+.1f}"
        rng = "yes" if r.get("in_range", True) else "no"
        rows.append((name, ("html", f'<span class="num">{r["Z"]:.5g}</span>'), sig, rng,
                     r.get("source", ""), r.get("detail", "")))
    body = table(rows, ["model", "Z", "measured − model (stderr)", "in range", "source",
                        "notes"])
    sk = s.get("references_skipped") or {}
    if sk:
        body += "<p class='muted'>Skipped: " + "; ".join(
            f"{esc(k)} ({esc(v)})" for k, v in sk.items()) + "</p>"
    return body


def _checks_block(s: dict) -> str:
    rows = [(("html", badge(c["status"])), name.replace("_", " "), c["detail"])
            for name, c in s["checks"].items()]
    rows += [(("html", '<span class="muted">n/a</span>'), name.replace("_", " "),
              f"not applicable: {why}") for name, why in (s.get("checks_skipped") or {}).items()]
    body = table(rows, ["status", "check", "detail"])
    warn = s.get("warnings") or []
    if warn:
        body += "<p><strong>Warnings</strong></p><ul>" + "".join(
            f"<li>{esc(w)}</li>" for w in warn) + "</ul>"
    return body


def _settings_block(run, s: dict) -> str:
    rows = []
    for section, values in run.settings.as_dict().items():
        for k, v in values.items():
            rows.append((f"{section}.{k}", json.dumps(v, ensure_ascii=False)))
    derived = [("box edges (σ)", " × ".join(f"{x:.4g}" for x in s["box"])),
               ("volume V (σ³)", f"{run.settings.volume:.5g}"),
               ("production time (τ)", f"{s['production_time']:.4g}"),
               ("measured temperature (ε/k)", _pm(s["temperature"])),
               ("wall hits", f"{s['wall_hits']:,}")]
    body = "<p>Reduced units: σ, ε, m; T as kT/ε; τ = σ√(m/ε); P in ε/σ³.</p>"
    si = s.get("si")
    if si:
        t, p = si["temperature_K"], si["pressure_Pa"]
        pe = "" if p["stderr"] is None else f" ± {p['stderr'] / 1e5:.2g}"
        derived += [("mapped species", si.get("species") or "user σ, ε, m"),
                    ("σ (nm)", f"{si['sigma_m'] * 1e9:.4g}"),
                    ("ε/k (K)", f"{si['epsilon_over_k_K']:.4g}"),
                    ("set temperature (K)", f"{si['temperature_set_K']:.5g}"),
                    ("measured temperature (K)", f"{t['mean']:.5g}"),
                    ("pressure (bar)", f"{p['mean'] / 1e5:.5g}{pe}"),
                    ("density (mol/L)", f"{si['density_mol_m3'] / 1e3:.5g}"),
                    ("mass density (kg/m³)", f"{si['mass_density_kg_m3']:.5g}")]
    return body + table(derived, classes="kv") + \
        "<p><strong>Every configuration key</strong></p>" + table(rows, ["key", "value"],
                                                                    classes="kv")


def _real_gas_block(s: dict) -> str:
    """The real-gas section (mdgas.statepoint.render_real_gas) as preformatted text."""
    from .statepoint import render_real_gas
    return "<pre>" + esc("\n".join(render_real_gas(s["real_gas"]))) + "</pre>"


def _provenance_block(run) -> str:
    keys = ("mdgas_version", "git_commit", "started", "finished", "status", "message",
            "source", "seed", "python_version", "numpy_version", "numba_version",
            "scipy_version", "h5py_version", "host")
    rows = [(k, run.meta.get(k, "")) for k in keys if k in run.meta]
    rows.insert(0, ("run file", str(run.path)))
    rows.append(("report made", _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")))
    body = table(rows, classes="kv")
    if run.settings.text:
        body += "<p><strong>Config file as given</strong></p><pre>" + esc(run.settings.text) \
            + "</pre>"
    body += ("<p class='muted'>Reproduce: <code>mdgas summary RUN</code>, <code>mdgas plot "
             "RUN</code>, <code>mdgas report RUN</code> read this run file only.</p>")
    return body


def run_report(run, path: str | Path | None = None, summary: dict | None = None) -> str:
    """The HTML report of one run; written to ``path`` when given. Returns the HTML."""
    from . import plots
    s = summary if summary is not None else run.summary()
    figs = plots.figures(run, s)
    import matplotlib.pyplot as plt
    fig_list = []
    with style.use():
        for name, f in figs.items():
            fig_list.append(Figure(name, plots.FIGURES[name][1], png=_png(f)))
            plt.close(f)
    by = {f.name: f for f in fig_list}
    pick = lambda *names: [by[n] for n in names if n in by]  # noqa: E731
    sections = [
        Section("Verdict", _verdict_block(s), "verdict", pick("references")),
        Section("Reference models", _references_block(s), "references"),
        Section("Self-checks", _checks_block(s), "checks",
                pick("pressure", "traces", "blocking")),
        Section("Distributions and structure",
                "<p>Velocity distributions from production snapshots, and how the "
                "particles arrange themselves.</p>", "structure",
                pick("speed", "velocity", "density", "rdf", "snapshot")),
        *([Section("Real gas in SI units", _real_gas_block(s), "real-gas",
                   pick("real_gas", "pore_si"))] if s.get("real_gas") else []),
        Section("Settings", _settings_block(run, s), "settings"),
        Section("Provenance", _provenance_block(run), "provenance"),
        cautions_section(),
    ]
    doc = build_html(f"mdgas report: {Path(run.path).name}", _question(s, run.settings),
                     sections,
                     subtitle=f"{s['model']} · N = {s['particles']} · ρ = {s['density']:.4g} σ⁻³"
                              f" · kT/ε = {s['temperature_set']:.4g} · status {s['status']}",
                     footer="Made by mdgas from the run file alone. Figures are embedded; "
                            "the file opens without a network.")
    if path is not None:
        Path(path).write_text(doc, encoding="utf-8")
    return doc


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100)
    return buf.getvalue()
