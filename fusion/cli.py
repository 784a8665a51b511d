"""The ``fusion`` command line: a thin layer over the Python API.

Exit codes: 0 success; 1 bad input or a failed run (one line naming the file or
key and what was expected; a traceback only with ``--debug``); 2 bad usage.
"""

from __future__ import annotations

import argparse
import json
import logging
import os
import sys
from pathlib import Path

from . import __version__
from .errors import FusionError

log = logging.getLogger("fusion")

CAUTION = ("Results support engineering judgement; they do not certify a component. Test rigs "
           "under load are hazardous: follow your laboratory's procedures and the applicable test "
           "standards.")


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        value = 0
    if value < 1:
        raise argparse.ArgumentTypeError(f"expected a whole number of at least 1, got {text!r}")
    return value


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="fusion",
        description="Fuse thermoelastic (infrared lock-in) and correlation (strain) measurements on "
                    "laminated composites: predicted dT/T0 per candidate source, residuals, the "
                    "source-layer map and the loading-frequency band.",
        epilog=CAUTION)
    p.add_argument("--version", action="version", version=f"fusion {__version__}")
    p.add_argument("--debug", action="store_true", help="show tracebacks and debug logging")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bars, warnings only")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    r = sub.add_parser("run", help="process every run of a campaign config")
    r.add_argument("config", type=Path)
    r.add_argument("--out", type=Path, help="output folder (default: [output] folder of the config)")
    r.add_argument("--overwrite", action="store_true", help="replace existing results")
    r.add_argument("--only", action="append", metavar="NAME", help="process only this run (repeatable)")
    r.add_argument("--scheduler", metavar="ADDRESS",
                   help="Dask scheduler: tcp://HOST:PORT, 'processes', 'threads' or 'synchronous'")
    r.add_argument("--workers", type=_positive_int, metavar="N", help="runs processed at once")

    w = sub.add_parser("watch", help="stay running and process each run as soon as its input files are "
                                      "complete; refresh the report after each (Ctrl-C stops)")
    w.add_argument("config", type=Path)
    w.add_argument("--out", type=Path, help="output folder (default: [output] folder of the config)")
    w.add_argument("--overwrite", action="store_true", help="replace results made from other inputs or settings")
    w.add_argument("--settle", type=float, default=5.0, metavar="S",
                   help="seconds a run's files must stay unchanged before it is processed (default 5)")
    w.add_argument("--interval", type=float, default=1.0, metavar="S",
                   help="seconds between two looks at the input files (default 1)")

    c = sub.add_parser("check", help="validate a config and its input files without processing")
    c.add_argument("config", type=Path)

    pl = sub.add_parser("plan", help="frequency response of a laminate: which layer the camera "
                                     "sees at which loading frequency (no measured data needed)")
    pl.add_argument("config", type=Path)
    pl.add_argument("--out", type=Path, help="folder for plan.nc and plan.png (default: [output] folder of "
                                              "the config); an earlier plan there is replaced")
    pl.add_argument("--laminate", metavar="NAME", help="laminate to plan (default: [plan] laminate or [laminate])")
    pl.add_argument("--overwrite", action="store_true",
                    help="no effect, kept for old scripts: a plan always replaces its own earlier files "
                         "and never a file fusion did not make")

    g = sub.add_parser("gauge", help="correlation settings for a feature size: spatial resolution "
                                      "and noise floor of each subset, step and strain window")
    g.add_argument("--radius", type=float, required=True, metavar="PX",
                   help="feature radius (e.g. a hole's) in visible-camera px")
    g.add_argument("--noise", type=float, required=True, metavar="GREY",
                   help="grey-level noise std of each speckle image")
    g.add_argument("--image", type=Path, help="reference speckle image (PNG or TIFF)")
    g.add_argument("--contrast", type=float, metavar="GREY",
                   help="grey-level std of the pattern when no image is given (default 50)")
    g.add_argument("--speckle", type=float, default=4.0, metavar="PX",
                   help="speckle size when no image is given (default 4)")
    g.add_argument("--strain", type=float, default=2000.0, metavar="MICROSTRAIN",
                   help="strain range to measure (default 2000)")
    g.add_argument("--target", type=float, default=0.1,
                   help="noise floor target as a fraction of the strain range (default 0.1)")
    g.add_argument("--pixel-size", type=float, metavar="MM", help="mm per visible px")

    d = sub.add_parser("demo", help="generate the built-in demo campaign and process it")
    d.add_argument("--out", type=Path, default=Path("fusion-demo"), help="output folder (default: ./fusion-demo)")
    d.add_argument("--overwrite", action="store_true", help="recompute runs that exist already")

    b = sub.add_parser("bench", help="measure the speed of the hot kernels on this machine")
    b.add_argument("--quick", action="store_true", help="small sizes (CI smoke test)")
    b.add_argument("--json", action="store_true", help="print one flat JSON object")
    b.add_argument("--only", action="append", metavar="NAME",
                   help="run only these benchmarks (lockin, dic, predict, heat, lateral, campaign, run_realistic); "
                        "--quick skips campaign and run_realistic unless named here")
    return p


def _setup_logging(debug: bool, quiet: bool) -> None:
    level = logging.DEBUG if debug else logging.WARNING if quiet else logging.INFO
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(logging.Formatter("%(message)s" if not debug else "%(levelname)s %(name)s: %(message)s"))
    root = logging.getLogger("fusion")
    root.handlers[:] = [handler]
    root.setLevel(level)
    root.propagate = False


def _cmd_run(args) -> int:
    from .campaign import run_campaign

    outcome = run_campaign(args.config, out=args.out, overwrite=args.overwrite, only=args.only,
                           scheduler=args.scheduler, workers=args.workers, progress=not args.quiet)
    print(outcome.describe())
    return 0 if outcome.ok else 1


def _cmd_watch(args) -> int:
    import signal

    from .campaign import watch_campaign

    if not args.settle >= 0 or not args.interval > 0:
        print("fusion: error: --settle must be >= 0 and --interval > 0 seconds", file=sys.stderr)
        return 2

    def _terminate(signum, frame):
        raise KeyboardInterrupt   # SIGTERM stops like Ctrl-C: the run in progress is cleaned up

    previous = signal.signal(signal.SIGTERM, _terminate)
    try:
        watch_campaign(args.config, out=args.out, settle=args.settle, interval=args.interval,
                       overwrite=args.overwrite, emit=lambda line: print(line, flush=True))
    finally:
        signal.signal(signal.SIGTERM, previous)
    return 0


def _cmd_check(args) -> int:
    from .campaign import check_campaign

    lines = check_campaign(args.config)
    for line in lines:
        print(line)
    return 0


def _cmd_plan(args) -> int:
    from .plan import plan_command

    print(plan_command(args.config, out=args.out, laminate=args.laminate))
    return 0


def _cmd_gauge(args) -> int:
    from .plan import gauge_command

    print(gauge_command(radius=args.radius, noise=args.noise, image=args.image, contrast=args.contrast,
                        speckle_size=args.speckle, strain=args.strain * 1e-6, target=args.target,
                        pixel_size=args.pixel_size))
    return 0


def _cmd_demo(args) -> int:
    from .demo import run_demo

    outcome = run_demo(args.out, overwrite=args.overwrite, progress=not args.quiet)
    print(outcome.describe())
    return 0 if outcome.ok else 1


def _cmd_bench(args) -> int:
    from .bench import run_benchmarks, format_table

    results = run_benchmarks(quick=args.quick, only=args.only)
    if args.json:
        print(json.dumps(results, sort_keys=True))
    else:
        print(format_table(results))
    return 0


_COMMANDS = {"run": _cmd_run, "watch": _cmd_watch, "check": _cmd_check, "plan": _cmd_plan, "gauge": _cmd_gauge, "demo": _cmd_demo,
             "bench": _cmd_bench}


def main(argv=None) -> int:
    """Entry point of the ``fusion`` command; returns the exit code."""
    args = _parser().parse_args(argv)
    _setup_logging(args.debug, args.quiet)
    try:
        return _COMMANDS[args.command](args)
    except FusionError as e:
        if args.debug:
            raise
        print(f"fusion: error: {e}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("fusion: interrupted", file=sys.stderr)
        return 130
    except MemoryError:
        if args.debug:
            raise
        print("fusion: error: out of memory; lower [compute] memory_budget or process fewer runs at once",
              file=sys.stderr)
        return 1
    except OSError as e:
        # the system refused a read or write outside a run (disk full, a file-size limit,
        # a share gone): one line naming the file, not a bug to report
        if args.debug:
            raise
        where = f"{e.filename}: " if e.filename else ""
        print(f"fusion: error: {where}{e.strerror or e}", file=sys.stderr)
        return 1


def entry() -> None:  # pragma: no cover - exits the process
    """The console script: :func:`main`, its return value as the exit code."""
    leave(main())


def leave(code: int) -> None:
    """End the process with ``code`` without the interpreter's teardown.

    Tearing down the compiled-kernel machinery (numba, LLVM) and the loaded libraries takes a
    noticeable part of a second after all work is done. Everything that should happen at exit
    still happens: buffered output is flushed and the exit handlers run (logging, temporary
    folders, worker pools). With threads of our own still running the usual exit is taken.
    """
    import atexit
    import threading

    if any(t.is_alive() and not t.daemon for t in threading.enumerate() if t is not threading.main_thread()):
        sys.exit(code)
    try:
        atexit._run_exitfuncs()
    finally:
        for stream in (sys.stdout, sys.stderr):
            try:
                stream.flush()
            except (AttributeError, OSError, ValueError):
                pass
        os._exit(code if isinstance(code, int) else 1)


if __name__ == "__main__":  # pragma: no cover
    entry()
