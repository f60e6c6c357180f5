"""The command line: parse, call the library, print. User errors exit 2, success 0."""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
import tempfile
import time
import traceback
from pathlib import Path
from typing import Any, Callable

from . import __version__
from .errors import UserError

COMMANDS: dict[str, Callable[[argparse.Namespace], int]] = {}


def command(name: str):
    def deco(fn):
        COMMANDS[name] = fn
        return fn
    return deco


def _settings(args) -> "Any":
    from . import config
    overrides = dict(config.parse_override(item) for item in (args.set or []))
    return config.load(args.config, overrides)


# -- run / check ----------------------------------------------------------------------

def set_threads(n: int | None) -> None:
    """Set the engine kernels' thread count (``--threads``); None keeps numba's default,
    which NUMBA_NUM_THREADS sets."""
    if n is None:
        return
    import numba
    top = numba.config.NUMBA_NUM_THREADS
    if not 1 <= n <= top:
        raise UserError(f"--threads {n}: give a number from 1 to {top} (the most this process "
                        "may use; NUMBA_NUM_THREADS raises the limit)")
    numba.set_num_threads(n)


@command("run")
def cmd_run(args) -> int:
    from .driver import simulate
    from .run import load
    from .analysis.summary import render_text
    settings = _settings(args)
    out = Path(args.output or settings.output.path)
    set_threads(getattr(args, "threads", None))
    _print_warnings(settings)
    print(f"mdgas: running {settings.gas.model} N={settings.gas.particles} "
          f"-> {out}", file=sys.stderr)
    t0 = time.monotonic()
    simulate(settings, out, force=args.force, progress=None if not args.quiet else False)
    print(f"mdgas: finished in {time.monotonic() - t0:.1f} s wall time", file=sys.stderr)
    print(render_text(load(out).summary()))
    return 0


def _print_warnings(settings) -> None:
    """Legal but unwise settings, once each on stderr."""
    from .driver import warnings_for
    for w in warnings_for(settings):
        print(f"mdgas: warning: {w}", file=sys.stderr)


@command("resume")
def cmd_resume(args) -> int:
    from .driver import resume
    from .run import load
    from .analysis.summary import render_text
    print(f"mdgas: resuming {args.run} from its last checkpoint", file=sys.stderr)
    t0 = time.monotonic()
    resume(args.run, progress=None if not args.quiet else False)
    print(f"mdgas: finished in {time.monotonic() - t0:.1f} s wall time", file=sys.stderr)
    print(render_text(load(args.run).summary()))
    return 0


def derived_figures(settings) -> dict[str, Any]:
    """Figures a practitioner wants before spending CPU time (reduced units)."""
    from .driver import time_estimate
    from .engines import get_engine
    s = settings
    box = s.box
    rho, t = s.gas.density, s.gas.temperature
    mean_speed = math.sqrt(8.0 * t / math.pi)
    walled_area = sum(2 * box[(a + 1) % 3] * box[(a + 2) % 3] for a in range(3) if s.walled[a])
    mfp = 1.0 / (math.sqrt(2.0) * math.pi * rho)  # diameter σ = 1
    engine = get_engine(s.gas.model)(s)
    return {
        "box_edges": [float(x) for x in box],
        "volume": s.volume,
        "packing_fraction": math.pi / 6.0 * rho,
        "mean_free_path": mfp,
        "knudsen_number": mfp / float(min(box)),
        "wall_hits_per_time": 0.25 * rho * mean_speed * walled_area,
        "samples": int(round(s.schedule.produce / s.output.sample_every)),
        "estimated_seconds": time_estimate(s, engine),
        "estimated_memory_mb": _memory_estimate(s, engine) / 2 ** 20,
    }


def _memory_estimate(settings, engine) -> int:
    from .driver import memory_estimate
    return memory_estimate(settings, engine)


@command("check")
def cmd_check(args) -> int:
    settings = _settings(args)
    fig = derived_figures(settings)
    _print_warnings(settings)
    if args.json:
        print(json.dumps({"settings": settings.as_dict(), "derived": fig}, indent=2))
        return 0
    print(f"{settings.source}: valid\n")
    for section, values in settings.as_dict().items():
        print(f"[{section}]")
        for k, v in values.items():
            print(f"  {k:<20} = {json.dumps(v)}")
    ideal = settings.gas.model == "ideal"
    note = "  (for particles of diameter σ; ideal ones are points)" if ideal else ""
    print("\nderived (reduced units)")
    print(f"  box edges           {' × '.join(f'{x:.4g}' for x in fig['box_edges'])} σ")
    print(f"  volume              {fig['volume']:.4g} σ³")
    print(f"  packing fraction    {fig['packing_fraction']:.4g}{note}")
    print(f"  mean free path      {fig['mean_free_path']:.4g} σ{note}")
    print(f"  Knudsen number      {fig['knudsen_number']:.4g} (mean free path / smallest edge)")
    print(f"  wall hits per τ     {fig['wall_hits_per_time']:.4g}")
    print(f"  production samples  {fig['samples']}")
    print(f"  estimated cost      {fig['estimated_seconds']:.3g} s wall time, "
          f"{fig['estimated_memory_mb']:.3g} MB")
    from .statepoint import describe_settings
    si_lines = describe_settings(settings)
    if si_lines:
        print("\nthe same state in SI units")
        print("\n".join(si_lines))
    return 0


@command("summary")
def cmd_summary(args) -> int:
    from .run import load
    from .analysis.summary import render_text
    summary = load(args.run).summary()
    if args.json:
        print(json.dumps(summary, indent=2, allow_nan=False, default=_json_default))
    else:
        print(render_text(summary))
    return 0


def _json_default(o):
    import numpy as np
    if isinstance(o, np.generic):
        return o.item()
    if isinstance(o, np.ndarray):
        return o.tolist()
    raise TypeError(type(o).__name__)


@command("demo")
def cmd_demo(args) -> int:
    from .sweep import demo
    return demo(args.output)


@command("sweep")
def cmd_sweep(args) -> int:
    from .sweep import command_line
    return command_line(args)


# -- plot / report (a folder is a sweep: handed to mdgas.sweep) ------------------------

def _sweep_hook(name: str, path: Path):
    """``mdgas.sweep.<name>`` for a sweep folder, or a clear error when it is absent."""
    from . import sweep as _sweep
    fn = getattr(_sweep, name, None)
    if fn is None:
        raise UserError(f"{path}: is a folder (a sweep), and this version has no "
                        f"mdgas.sweep.{name}; give a run file (.h5)")
    return fn


@command("plot")
def cmd_plot(args) -> int:
    target = Path(args.run)
    if target.is_dir():
        out = Path(args.output or target / "figures")
        written = _sweep_hook("plot_sweep", target)(target, out, fmt=args.format)
    else:
        from .plots import plot_run
        from .run import load
        run = load(target)
        out = Path(args.output or target.with_name(target.stem + "-figures"))
        written = plot_run(run, out, fmt=args.format, animate_frames=args.animate)
    for w in written:
        print(w)
    return 0


@command("report")
def cmd_report(args) -> int:
    target = Path(args.run)
    if target.is_dir():
        out = Path(args.output or target / "report.html")
        _sweep_hook("report_sweep", target)(target, out)
    else:
        from .report import run_report
        from .run import load
        run = load(target)
        out = Path(args.output or target.with_suffix(".html"))
        try:
            run_report(run, out)
        except OSError as exc:
            raise UserError(f"{out}: cannot write the report ({exc.strerror or exc})") \
                from None
    print(out)
    return 0


# -- parser -------------------------------------------------------------------------

def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="mdgas",
        description="Where does PV = NkT stop being good enough? Simulate, measure, compare.")
    p.add_argument("--version", action="version", version=f"mdgas {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")

    r = sub.add_parser("run", help="run a config file and write a run file")
    r.add_argument("config", help="TOML config file")
    r.add_argument("-o", "--output", help="run file path (default: [output] path)")
    r.add_argument("--set", action="append", metavar="KEY=VALUE",
                   help="override a config key, e.g. --set gas.density=0.05 (repeatable)")
    r.add_argument("--force", action="store_true", help="overwrite an existing run file")
    r.add_argument("-q", "--quiet", action="store_true", help="no progress bar")
    r.add_argument("--threads", type=int, metavar="N",
                   help="compute threads for the engine kernels (default: NUMBA_NUM_THREADS "
                        "or all cores)")

    c = sub.add_parser("check", help="validate a config and print derived figures")
    c.add_argument("config")
    c.add_argument("--set", action="append", metavar="KEY=VALUE")
    c.add_argument("--json", action="store_true", help="print one JSON object")

    s = sub.add_parser("summary", help="summarise a run file")
    s.add_argument("run", help="run file (.h5)")
    s.add_argument("--json", action="store_true", help="print one JSON object")

    rs = sub.add_parser("resume", help="continue an interrupted run from its last checkpoint")
    rs.add_argument("run", help="run file (.h5) of an interrupted or killed run")
    rs.add_argument("-q", "--quiet", action="store_true", help="no progress bar")

    from .sweep import add_parser as _add_sweep_parser
    _add_sweep_parser(sub)

    pl = sub.add_parser("plot", help="draw every figure of a run file (or a sweep folder)")
    pl.add_argument("run", help="run file (.h5), or a sweep folder")
    pl.add_argument("-o", "--output", metavar="DIR",
                    help="folder for the figures (default: RUN-figures/ beside the run file)")
    pl.add_argument("--format", choices=("png", "svg", "pdf"), default="png",
                    help="file format (default png)")
    pl.add_argument("--animate", action="store_true",
                    help="also write an animated GIF across the stored frames")

    rp = sub.add_parser("report", help="write a self-contained HTML report of a run file")
    rp.add_argument("run", help="run file (.h5), or a sweep folder")
    rp.add_argument("-o", "--output", metavar="FILE",
                    help="report path (default: the run file with .html)")

    d = sub.add_parser("demo", help="run the embedded demo sweep: its map and report")
    d.add_argument("-o", "--output", help="sweep folder (default: runs/demo/)")
    return p


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not args.command:
        parser.print_help()
        return 2
    _route_warnings()
    try:
        return COMMANDS[args.command](args)
    except UserError as exc:
        status = getattr(exc, "exit_status", 2)
        print(f"mdgas: {'stopped' if status == 130 else 'error'}: {exc}", file=sys.stderr)
        if getattr(exc, "hard_exit", False):
            # HDF5 cannot close a file whose writes failed and crashes at exit: leave now.
            sys.stdout.flush()
            sys.stderr.flush()
            os._exit(status)
        return status
    except BrokenPipeError:  # output piped into `head` and the like
        sys.stderr.close()
        return 0
    except KeyboardInterrupt:
        print("\nmdgas: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # an internal error: short message, full traceback to a file
        log = Path(tempfile.gettempdir()) / f"mdgas-crash-{int(time.time())}.log"
        log.write_text(traceback.format_exc())
        print(f"mdgas: internal error: {exc.__class__.__name__}: {exc}\n"
              f"the full traceback was written to {log}; please include it in a bug report",
              file=sys.stderr)
        return 1


def _route_warnings() -> None:
    """Our own warnings (e.g. a damaged run file) as one line each, not a source dump."""
    import warnings
    from .store import RunFileWarning
    default = warnings.showwarning

    here = str(Path(__file__).resolve().parent)

    def show(message, category, filename, lineno, file=None, line=None):
        if issubclass(category, RunFileWarning) or (
                issubclass(category, UserWarning) and str(filename).startswith(here)):
            print(f"mdgas: warning: {message}", file=sys.stderr)
        else:
            default(message, category, filename, lineno, file, line)
    warnings.showwarning = show


if __name__ == "__main__":
    sys.exit(main())
