"""`mdgas plot` and `mdgas report` on every engine's run files; the HTML parsed and rendered."""

from __future__ import annotations

import os
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import pytest

import mdgas
from mdgas.cli import main

RUNS = {
    "ideal-box": {"gas.model": "ideal", "gas.particles": 400, "gas.density": 0.05,
                  "schedule.equilibrate": 1.0, "schedule.produce": 40.0,
                  "output.sample_every": 0.5, "output.frame_every": 10.0},
    "ideal-slit": {"gas.model": "ideal", "gas.particles": 400, "gas.density": 0.05,
                   "container.walls": "z", "container.wall": "thermal",
                   "container.wall_temperature": 1.0, "schedule.equilibrate": 1.0,
                   "schedule.produce": 40.0, "output.sample_every": 0.5,
                   "output.frame_every": 10.0},
    "hard-sphere": {"gas.model": "hard-sphere", "gas.particles": 256, "gas.density": 0.3,
                    "container.walls": "none", "schedule.equilibrate": 2.0,
                    "schedule.produce": 10.0, "output.sample_every": 0.25,
                    "output.frame_every": 2.5},
    "lennard-jones": {"gas.model": "lennard-jones", "gas.particles": 128,
                      "gas.density": 0.3, "gas.temperature": 1.5, "container.walls": "none",
                      "schedule.equilibrate": 2.0, "schedule.produce": 6.0,
                      "output.sample_every": 0.25, "output.frame_every": 2.0},
}


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    from mdgas.engines import available
    have = available()
    folder = tmp_path_factory.mktemp("runs")
    out = {}
    for name, keys in RUNS.items():
        if keys["gas.model"] in have:
            out[name] = mdgas.simulate(None, path=folder / f"{name}.h5", force=True, **keys)
    return out


def _run(runs, name):
    if name not in runs:
        pytest.skip(f"no {name} engine in this tree")
    return runs[name]


@pytest.mark.parametrize("name", list(RUNS))
def test_plot_command_writes_every_applicable_figure(runs, name, tmp_path, capsys):
    run = _run(runs, name)
    assert main(["plot", str(run.path), "-o", str(tmp_path)]) == 0
    printed = capsys.readouterr().out.split()
    files = {Path(p).name for p in printed}
    stem = run.path.stem
    expected = {f"{stem}-{f}.png" for f in
                ("references", "pressure", "traces", "blocking", "speed", "velocity",
                 "snapshot")}
    walled = run.settings.container.walls != "none"
    expected.add(f"{stem}-density.png" if walled else f"{stem}-rdf.png")
    if name == "ideal-box":
        expected.discard(f"{stem}-rdf.png")
    assert expected <= files, expected - files
    for f in files:
        data = (tmp_path / f).read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 5000, f


def test_svg_and_animated_gif(runs, tmp_path):
    run = _run(runs, "ideal-box")
    assert main(["plot", str(run.path), "-o", str(tmp_path), "--format", "svg",
                 "--animate"]) == 0
    svg = (tmp_path / f"{run.path.stem}-speed.svg").read_text()
    assert svg.lstrip().startswith("<?xml") and "<svg" in svg
    gif = (tmp_path / f"{run.path.stem}-frames.gif").read_bytes()
    assert gif[:6] == b"GIF89a" and len(gif) > 2000
    import PIL.Image
    with PIL.Image.open(tmp_path / f"{run.path.stem}-frames.gif") as im:
        assert im.n_frames == run.n_frames


class _Page(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.imgs, self.ids, self.h2, self.text = [], [], set(), [], []
        self.external = []
        self._in_h2 = False

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append(tag)
        if "id" in a:
            self.ids.add(a["id"])
        if tag == "img":
            self.imgs.append(a.get("src", ""))
        for key in ("src", "href"):
            v = a.get(key, "")
            if v and not v.startswith(("data:", "#")):
                self.external.append(v)
        self._in_h2 = tag == "h2"

    def handle_endtag(self, tag):
        if tag == "h2":
            self._in_h2 = False

    def handle_data(self, data):
        self.text.append(data)
        if self._in_h2:
            self.h2.append(data.strip())


@pytest.mark.parametrize("name", ["ideal-slit", "hard-sphere", "lennard-jones"])
def test_report_is_one_self_contained_html_file(runs, name, tmp_path, capsys):
    run = _run(runs, name)
    out = tmp_path / "report.html"
    assert main(["report", str(run.path), "-o", str(out)]) == 0
    page = _Page()
    page.feed(out.read_text(encoding="utf-8"))
    assert page.tags[0] == "html"
    assert page.external == []  # nothing to fetch: opens without a network
    assert len(page.imgs) >= 8 and all(s.startswith("data:image/png;base64,")
                                       for s in page.imgs)
    assert {"Verdict", "Reference models", "Self-checks", "Settings", "Provenance",
            "Cautions"} <= set(page.h2)
    text = " ".join(page.text)
    summary = run.summary()
    assert summary["verdict"]["statement"] in text
    assert "pressure-equipment codes" in text and "licensed engineers" in text
    assert "The question." in text
    for check in summary["checks"]:
        assert check.replace("_", " ") in text


def test_report_default_path_and_bad_input(runs, tmp_path, capsys):
    run = _run(runs, "ideal-box")
    target = tmp_path / "copy.h5"
    shutil.copy(run.path, target)
    assert main(["report", str(target)]) == 0
    assert (tmp_path / "copy.html").stat().st_size > 10000
    assert main(["report", str(tmp_path / "missing.h5")]) == 2
    assert "no such run file" in capsys.readouterr().err


def test_a_folder_goes_to_the_sweep_hook(tmp_path, monkeypatch, capsys):
    import mdgas.sweep as sweep
    calls = []

    def fake_plot(folder, out, fmt="png"):
        calls.append(("plot", Path(folder), Path(out), fmt))
        return [Path(out) / "map.png"]

    def fake_report(folder, out):
        calls.append(("report", Path(folder), Path(out)))

    monkeypatch.setattr(sweep, "plot_sweep", fake_plot, raising=False)
    monkeypatch.setattr(sweep, "report_sweep", fake_report, raising=False)
    assert main(["plot", str(tmp_path), "--format", "pdf"]) == 0
    assert main(["report", str(tmp_path), "-o", str(tmp_path / "r.html")]) == 0
    assert calls == [("plot", tmp_path, tmp_path / "figures", "pdf"),
                     ("report", tmp_path, tmp_path / "r.html")]
    monkeypatch.delattr(sweep, "report_sweep")
    assert main(["report", str(tmp_path)]) == 2
    assert "sweep" in capsys.readouterr().err


def _browser() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


@pytest.mark.skipif(_browser() is None, reason="no headless browser installed")
def test_report_renders_in_headless_chromium(runs, tmp_path):
    run = _run(runs, "ideal-box")
    html_path = tmp_path / "report.html"
    from mdgas.report import run_report
    run_report(run, html_path)
    shot = tmp_path / "shot.png"
    flags = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
             "--no-first-run", "--disable-component-update", "--disable-sync",
             f"--user-data-dir={tmp_path / 'profile'}"]
    env = {**os.environ, "HOME": str(tmp_path)}
    dom = subprocess.run([_browser(), *flags, "--dump-dom", html_path.as_uri()],
                         capture_output=True, text=True, timeout=120, env=env)
    assert dom.returncode == 0, dom.stderr[-2000:]
    assert "Self-checks" in dom.stdout and "Cautions" in dom.stdout
    r = subprocess.run([_browser(), *flags, f"--screenshot={shot}", "--window-size=1200,2400",
                        "--hide-scrollbars", html_path.as_uri()],
                       capture_output=True, text=True, timeout=120, env=env)
    assert r.returncode == 0, r.stderr[-2000:]
    data = shot.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 20000
    # Not a blank page: the rendered screenshot has dark text and the header band.
    import PIL.Image
    with PIL.Image.open(shot) as im:
        grey = im.convert("L")
        lo, hi = grey.getextrema()
        assert lo < 60 and hi > 200
