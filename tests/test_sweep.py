"""Sweep files: expansion, names, resume, fault isolation, kill and interrupt, the CLI."""

from __future__ import annotations

import math
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import h5py
import pytest

from mdgas import config, sweep
from mdgas.errors import ConfigError, InstabilityError, RunInterrupted
from mdgas.run import load as load_run

BASE = """
[base.gas]
model = "ideal"
particles = 200
[base.schedule]
equilibrate = 1.0
produce = {produce}
[base.output]
frame_every = 0.0
sample_every = 0.5
"""


def _write(tmp_path: Path, body: str, produce: float = 20.0, name: str = "s") -> Path:
    p = tmp_path / f"{name}.toml"
    p.write_text(f'name = "{name}"\n' + body + BASE.format(produce=produce))
    return p


# -- expansion ---------------------------------------------------------------------------

def test_expansion_of_lists_ranges_linked_axes_and_replicas(tmp_path):
    sw = sweep.load(_write(tmp_path, """
replicas = 2
[axes]
"gas.temperature" = [1.0, 2.0]
"gas.density" = { start = 0.01, stop = 0.16, num = 5, spacing = "log" }
"gas.particles" = { start = 100, stop = 200, num = 3 }
[linked.pore]
"container.walls" = ["xyz", "z"]
"pore.width" = [0.0, 5.0]
"""))
    pts = sw.expand()
    assert len(pts) == 2 * 5 * 3 * 2 * 2
    rho = sorted({p.params["gas.density"] for p in pts})
    assert rho == pytest.approx([0.01, 0.02, 0.04, 0.08, 0.16])
    assert sorted({p.params["gas.particles"] for p in pts}) == [100, 150, 200]
    # Linked keys vary together: never walls "xyz" with a slit width.
    assert {(p.params["container.walls"], p.params["pore.width"]) for p in pts} == \
        {("xyz", 0.0), ("z", 5.0)}
    for p in pts:
        assert p.settings is not None, p.error
        assert p.settings.gas.density == p.params["gas.density"]
        if p.params["pore.width"]:
            assert p.settings.box[2] == pytest.approx(5.0)
            assert p.settings.box[0] == pytest.approx(p.settings.box[1])
            assert p.settings.volume == pytest.approx(p.settings.gas.particles / p.settings.gas.density)
    lin = sweep.from_text('[axes]\n"gas.density" = { start = 0.1, stop = 0.3, num = 3 }')
    assert [p.params["gas.density"] for p in lin.expand()] == pytest.approx([0.1, 0.2, 0.3])


def test_names_and_seeds_are_deterministic_and_distinct(tmp_path):
    path = _write(tmp_path, 'replicas = 3\n[axes]\n"gas.density" = [0.01, 0.02]\n')
    a, b = sweep.load(path).expand(), sweep.load(path).expand()
    assert [p.name for p in a] == [p.name for p in b]
    assert [p.seed for p in a] == [p.seed for p in b]
    assert len({p.name for p in a}) == len(a) == 6
    assert len({p.seed for p in a}) == 6
    assert all(p.settings.schedule.seed == p.seed for p in a)
    assert a[0].name.startswith("density0.01_r0_")
    # Adding a point never renames nor reseeds the others.
    more = sweep.from_text(path.read_text().replace("[0.01, 0.02]", "[0.01, 0.015, 0.02]"),
                           source=str(path)).expand()
    assert {p.name: p.seed for p in a}.items() <= {p.name: p.seed for p in more}.items()
    # A changed base config gives new names: a finished run is never taken for another.
    other = sweep.from_text(path.read_text().replace("produce = 20.0", "produce = 30.0"),
                            source=str(path)).expand()
    assert not {p.name for p in a} & {p.name for p in other}
    # An explicit seed axis is used as given, plus the replica number.
    seeded = sweep.from_text('replicas = 2\n[axes]\n"schedule.seed" = [7, 70]\n').expand()
    assert [p.seed for p in seeded] == [7, 8, 70, 71]


def test_base_path_is_relative_to_the_sweep_file(tmp_path):
    (tmp_path / "cfg").mkdir()
    (tmp_path / "cfg" / "base.toml").write_text('[gas]\nparticles = 123\n')
    p = tmp_path / "cfg" / "sw.toml"
    p.write_text('base = "base.toml"\n[axes]\n"gas.density" = [0.01]\n')
    (pt,) = sweep.load(p).expand()
    assert pt.settings.gas.particles == 123
    assert sweep.load(p).name == "sw"


@pytest.mark.parametrize("body, key, text", [
    ('[axes]\n"gas.densty" = [0.1]\n', "axes.gas.densty", "did you mean 'gas.density'?"),
    ('[axes]\n"container.wals" = ["z"]\n', "axes.container.wals", "'container.walls'"),
    ('[linked.a]\n"gas.density" = [0.1, 0.2]\n"gas.temperature" = [1.0]\n', "linked.a",
     "same number of values"),
    ('[axes]\n"gas.density" = { start = 0.0, stop = 0.3, num = 3, spacing = "log" }\n',
     "axes.gas.density", "log range"),
    ('replica = 2\n', "replica", "did you mean 'replicas'?"),
    ('base = "nowhere.toml"\n', "base", "no config file"),
])
def test_bad_sweep_files_name_the_file_the_key_and_a_fix(tmp_path, body, key, text):
    p = tmp_path / "bad.toml"
    p.write_text(body)
    with pytest.raises(ConfigError) as err:
        sweep.load(p)
    assert err.value.source == str(p) and err.value.key == key
    assert text in str(err.value)


# -- running -----------------------------------------------------------------------------

def test_run_twice_does_no_work_the_second_time_and_writes_table_and_index(tmp_path):
    sw = sweep.load(_write(tmp_path, '[axes]\n"gas.density" = [0.01, 0.03]\n'
                                     '"gas.temperature" = [1.0, 2.0]\n'))
    out = tmp_path / "out"
    first = sweep.run(sw, out, workers=1, progress=False)
    assert first.ran == 4 and first.reused == 0 and len(first.complete) == 4
    mtimes = {p.name: p.stat().st_mtime_ns for p in out.glob("*.h5")}
    second = sweep.run(sw, out, workers=1, progress=False)
    assert second.ran == 0 and second.reused == 4
    assert {p.name: p.stat().st_mtime_ns for p in out.glob("*.h5") if p.name != "sweep.h5"} \
        == {k: v for k, v in mtimes.items() if k != "sweep.h5"}
    rows = sweep.read_table(out / "table.csv")
    assert [r["name"] for r in rows] == [p.name for p in sw.expand()]
    for r in rows:
        summary = load_run(out / r["file"]).summary()
        assert r["status"] == "complete"
        assert r["Z"] == summary["Z"]["mean"] and r["Z_stderr"] == summary["Z"]["stderr"]
        assert r["gas.density"] == r["density"] and r["gas.temperature"] == r["temperature_set"]
        # The ideal gas: Z = 1 within 4 stderr plus round-off (common practice).
        assert abs(r["Z"] - 1.0) < 4 * r["Z_stderr"] + 1e-9
    with h5py.File(out / "sweep.h5", "r") as f:
        assert f["sweep"].attrs["name"] == "s"
        assert list(f["table/Z"][()]) == [r["Z"] for r in rows]
        for r in rows:  # each run is reachable through the index's external links
            assert f[f"runs/{r['name']}/mdgas"].attrs["status"] == "complete"


def test_a_failing_state_point_is_reported_and_the_others_complete(tmp_path, monkeypatch):
    import mdgas.driver
    sw = sweep.load(_write(tmp_path, '[axes]\n"gas.density" = [0.01, -0.5, 0.02, 0.03]\n'))
    real = mdgas.driver.simulate

    def unstable_at_003(settings, path=None, **kw):
        if settings.gas.density == 0.03:
            raise InstabilityError("the run became unstable at t = 1 τ: energy blew up")
        return real(settings, path, **kw)

    monkeypatch.setattr(mdgas.driver, "simulate", unstable_at_003)
    res = sweep.run(sw, tmp_path / "out", workers=1, progress=False)
    rows = {r["density"] if r.get("density") is not None else r["gas.density"]: r
            for r in res.rows}
    assert rows[0.01]["status"] == rows[0.02]["status"] == "complete"
    assert rows[-0.5]["status"] == "failed" and "gas.density" in rows[-0.5]["message"]
    assert rows[0.03]["status"] == "failed" and "unstable" in rows[0.03]["message"]
    table = {r["name"]: r for r in sweep.read_table(tmp_path / "out" / "table.csv")}
    assert {r["status"] for r in table.values()} == {"complete", "failed"}
    assert len(res.failed) == 2 and len(res.complete) == 2


def test_local_worker_processes_give_the_same_table_as_in_process(tmp_path):
    sw = sweep.load(_write(tmp_path, 'replicas = 2\n[axes]\n"gas.density" = [0.01, 0.02]\n'))
    sweep.run(sw, tmp_path / "a", workers=1, progress=False)
    sweep.run(sw, tmp_path / "b", workers=2, progress=False)
    assert (tmp_path / "a" / "table.csv").read_text() == (tmp_path / "b" / "table.csv").read_text()


def _cli(args, **kw):
    return subprocess.Popen([sys.executable, "-m", "mdgas.cli", *args], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, start_new_session=True, **kw)


def _complete_rows(table: Path) -> int:
    try:
        return sum(r["status"] == "complete" for r in sweep.read_table(table))
    except (OSError, KeyError):
        return 0


def _wait_for(table: Path, n: int, proc, limit: float = 90.0) -> int:
    t0 = time.monotonic()
    while time.monotonic() - t0 < limit and proc.poll() is None:
        k = _complete_rows(table)
        if k >= n:
            return k
        time.sleep(0.05)
    return _complete_rows(table)


DENSITIES = "[0.01, 0.015, 0.02, 0.025, 0.03, 0.035, 0.04, 0.045, 0.05, 0.055]"


def test_sigkill_midway_then_rerun_completes_every_run_exactly_once(tmp_path):
    path = _write(tmp_path, f'[axes]\n"gas.density" = {DENSITIES}\n', produce=300.0)
    out = tmp_path / "out"
    proc = _cli(["sweep", str(path), "-o", str(out), "--workers", "2", "-q"])
    done = _wait_for(out / "table.csv", 2, proc)
    proc.send_signal(signal.SIGKILL)
    proc.wait(timeout=30)
    assert 2 <= done < 10, "the sweep must be killed midway for this test to mean anything"
    time.sleep(1.0)  # the workers die with the sweep process (no orphan goes on writing)
    before = {p.name: p.stat().st_mtime_ns for p in out.glob("*.h5") if p.name != "sweep.h5"}
    time.sleep(0.5)
    assert before == {p.name: p.stat().st_mtime_ns for p in out.glob("*.h5")
                      if p.name != "sweep.h5"}
    # Complete is what a file says (one may have finished after the table's last write).
    finished = {f for f in before if sweep.existing_result(out / f) is not None}
    assert finished >= {r["file"] for r in sweep.read_table(out / "table.csv")
                        if r["status"] == "complete"}
    res = sweep.run(sweep.load(path), out, workers=1, progress=False)
    assert res.reused == len(finished) and res.ran == 10 - len(finished)
    rows = sweep.read_table(out / "table.csv")
    assert len(rows) == 10 and len({r["name"] for r in rows}) == 10
    assert all(r["status"] == "complete" for r in rows)
    for f in finished:  # finished before the kill: not run again
        assert (out / f).stat().st_mtime_ns == before[f]
    files = sorted(p.name for p in out.glob("*.h5") if p.name != "sweep.h5")
    assert files == sorted(r["file"] for r in rows)
    for f in files:
        assert load_run(out / f).status == "complete"
    assert not list(out.glob(".*tmp"))


def test_ctrl_c_writes_the_table_and_a_rerun_resumes_bit_exactly(tmp_path):
    path = _write(tmp_path, f'[axes]\n"gas.density" = {DENSITIES}\n', produce=300.0)
    out = tmp_path / "out"
    proc = _cli(["sweep", str(path), "-o", str(out), "--workers", "2", "-q"])
    done = _wait_for(out / "table.csv", 2, proc)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err
    assert "interrupted" in err and "table is written" in err and "Traceback" not in err
    rows = sweep.read_table(out / "table.csv")
    assert len(rows) == 10 and 2 <= done
    assert {r["status"] for r in rows} <= {"complete", "pending", "interrupted"}
    assert any(r["status"] != "complete" for r in rows)
    res = sweep.run(sweep.load(path), out, workers=1, progress=False)
    assert len(res.complete) == 10
    ref = tmp_path / "ref"
    sweep.run(sweep.load(path), ref, workers=1, progress=False)
    assert (ref / "table.csv").read_text() == (out / "table.csv").read_text()


def test_in_process_interrupt_stops_the_sweep_with_the_table_written(tmp_path, monkeypatch):
    import mdgas.driver
    sw = sweep.load(_write(tmp_path, '[axes]\n"gas.density" = [0.01, 0.02, 0.03]\n'))
    real = mdgas.driver.simulate

    def stop_at_002(settings, path=None, **kw):
        if settings.gas.density == 0.02:
            raise RunInterrupted(f"{path}: interrupted")
        return real(settings, path, **kw)

    monkeypatch.setattr(mdgas.driver, "simulate", stop_at_002)
    with pytest.raises(RunInterrupted, match="1 of 3 run"):
        sweep.run(sw, tmp_path / "out", workers=1, progress=False)
    rows = sweep.read_table(tmp_path / "out" / "table.csv")
    assert [r["status"] for r in rows] == ["complete", "pending", "pending"]


# -- the command line --------------------------------------------------------------------

def test_cli_dry_run_lists_runs_and_cost_and_bad_axis_exits_2(tmp_path, capsys):
    from mdgas.cli import main
    path = _write(tmp_path, 'replicas = 2\n[axes]\n"gas.density" = [0.01, 0.02, 0.04]\n')
    assert main(["sweep", str(path), "--dry-run", "-o", str(tmp_path / "o")]) == 0
    out = capsys.readouterr().out
    assert "6 run(s)" in out and "estimated cost" in out
    assert sum(line.rstrip().endswith("to run") for line in out.splitlines()) == 6
    assert not (tmp_path / "o").exists()
    bad = tmp_path / "bad.toml"
    bad.write_text('[axes]\n"gas.temprature" = [1.0]\n')
    assert main(["sweep", str(bad)]) == 2
    err = capsys.readouterr().err
    assert str(bad) in err and "gas.temprature" in err and "gas.temperature" in err
    assert len(err.strip().splitlines()) == 1


def test_cli_sweep_runs_and_reports_failures_with_exit_1(tmp_path, capsys):
    from mdgas.cli import main
    path = _write(tmp_path, '[axes]\n"gas.density" = [0.01, 0.02]\n"output.sample_every" = [0.5, 99.0]\n')
    assert main(["sweep", str(path), "-o", str(tmp_path / "o"), "--workers", "1", "-q"]) == 1
    out = capsys.readouterr().out
    assert "2 complete, 2 failed" in out and "sample_every" in out
    assert (tmp_path / "o" / "breakdown.csv").is_file()


def test_plot_and_report_of_a_sweep_folder(tmp_path, capsys):
    from mdgas.cli import main
    path = _write(tmp_path, '[axes]\n"gas.temperature" = [1.0, 2.0]\n"gas.density" = [0.01, 0.03]\n')
    assert main(["sweep", str(path), "-o", str(tmp_path / "o"), "--workers", "1", "-q"]) == 0
    capsys.readouterr()
    assert main(["plot", str(tmp_path / "o")]) == 0
    written = [Path(p) for p in capsys.readouterr().out.split()]
    assert {p.name for p in written} == {"s-map.png", "s-isotherms-density.png",
                                         "s-isotherms-pressure.png"}
    assert all(p.stat().st_size > 5000 for p in written)
    assert main(["report", str(tmp_path / "o")]) == 0
    html = (tmp_path / "o" / "report.html").read_text()
    assert html.startswith("<!DOCTYPE html>") and "data:image/png;base64," in html
    for text in ("Breakdown", "density0.03_", "Sweep file"):
        assert text in html
    # Tiny ideal-gas runs: PV = NkT holds, so no crossing can be claimed.
    assert "not-reached" in html or "unresolved" in html
    assert "found" not in html.split('id="breakdown"')[1].split("</table>")[0]


def test_example_sweep_files_expand_to_valid_runs():
    configs = Path(__file__).resolve().parents[1] / "configs"
    sweeps = [f for f in sorted(configs.glob("sweep-*.toml"))
              if not f.name.startswith("sweep-base-")]  # sweep-base-*: a sweep's base config
    assert len(sweeps) >= 2
    for f in sweeps:
        assert f.read_text().lstrip().startswith("#")
        pts = sweep.load(f).expand()
        assert pts and all(p.settings is not None for p in pts), f
    demo = sweep.from_text(sweep.DEMO_TEXT, source="<embedded demo sweep>").expand()
    assert len(demo) == 30 and all(p.settings is not None for p in demo)
