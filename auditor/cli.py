"""The ``auditor`` command line: a thin layer over the library.

Exit codes (contract): 0 conditions hold, 1 a required condition is violated,
2 bad input or usage (one line on stderr, no output file), 3 conditions hold
but the crew worldline exceeds its tidal limit.
"""

from __future__ import annotations

import argparse
import shlex
import os
import sys

from . import __version__
from .errors import AuditorError

__all__ = ["main", "build_parser"]

EXIT_OK, EXIT_VIOLATED, EXIT_INPUT, EXIT_CREW = 0, 1, 2, 3


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit 2, no usage dump
        self.exit(EXIT_INPUT, f"auditor: error: {message} (see 'auditor {self._sub} --help')\n"
                  if getattr(self, "_sub", "") else f"auditor: error: {message}\n")


def _at_least_one(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected an integer, got '{text}'") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {value}")
    return value


def _common(p: argparse.ArgumentParser):
    p.add_argument("file", help="metric file (TOML)")
    p.add_argument("--set", action="append", default=[], metavar="NAME=VALUE",
                   help="override a parameter for this run (repeatable)")
    p.add_argument("--points", type=int, default=None, metavar="N",
                   help="samples per sampled axis (overrides region.points)")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="auditor", description="Audit a proposed spacetime metric: exact "
                     "curvature, energy conditions for all observers, exotic matter and "
                     "crew tidal loads.")
    parser.add_argument("--version", action="version", version=f"auditor {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    p = sub.add_parser("probe", help="everything at one event")
    p._sub = "probe"
    _common(p)
    p.add_argument("--at", required=True, metavar="t=..,x=..",
                   help="the event, every coordinate as NAME=VALUE (expressions allowed)")
    p.add_argument("--json", metavar="PATH|-", help="write JSON to PATH, or '-' for stdout")
    p.set_defaults(func=_cmd_probe)

    p = sub.add_parser("check", help="audit the file's region; terminal summary")
    p._sub = "check"
    _common(p)
    p.add_argument("--json", metavar="PATH|-", help="write JSON to PATH, or '-' for stdout")
    p.add_argument("--require", default="NEC,WEC,SEC,DEC", metavar="NEC,WEC,...",
                   help="conditions that decide the exit code (default all four)")
    p.add_argument("--quiet", action="store_true", help="no progress on stderr")
    p.add_argument("--jobs", type=_at_least_one, default=1, metavar="N",
                   help="processes to use")
    p.add_argument("--dask", metavar="ADDRESS", help="spread the grid over a Dask scheduler")
    p.set_defaults(func=_cmd_check)

    p = sub.add_parser("report", help="audit and write the PDF report")
    p._sub = "report"
    _common(p)
    p.add_argument("-o", "--output", default="audit.pdf", metavar="PDF",
                   help="PDF report to write (default audit.pdf)")
    p.add_argument("--json", metavar="PATH|-", help="also write the audit JSON")
    p.add_argument("--latex", metavar="PATH", help="also write a LaTeX (booktabs) table")
    p.add_argument("--require", default="NEC,WEC,SEC,DEC", metavar="NEC,WEC,...",
                   help="conditions that decide the exit code (default all four)")
    p.add_argument("--quiet", action="store_true", help="no progress on stderr")
    p.set_defaults(func=_cmd_report)

    p = sub.add_parser("sweep", help="audit a grid of parameter values")
    p._sub = "sweep"
    _common(p)
    p.add_argument("--vary", action="append", default=[], metavar="NAME=START:STOP:COUNT",
                   help="values of a parameter: START:STOP:COUNT (both ends included) or "
                        "a,b,c (repeatable; every combination is audited)")
    p.add_argument("-o", "--output", default="sweep.csv", metavar="CSV",
                   help="table to write (default sweep.csv)")
    p.add_argument("--plot", metavar="PATH", help="figure of margins and energy (default: the "
                   "table's name with .pdf)")
    p.add_argument("--json", metavar="PATH|-", help="also write the rows as JSON")
    p.add_argument("--jobs", type=_at_least_one, default=1, metavar="N",
                   help="processes to use")
    p.add_argument("--dask", metavar="ADDRESS", help="run on an existing Dask scheduler")
    p.add_argument("--require", default="NEC,WEC,SEC,DEC", metavar="NEC,WEC,...",
                   help="conditions that decide the exit code (default all four)")
    p.add_argument("--quiet", action="store_true", help="no progress on stderr")
    p.set_defaults(func=_cmd_sweep)
    return parser


def _load(args):
    from .metric import load_metric, parse_overrides
    _check_points(args)
    return load_metric(args.file, overrides=parse_overrides(args.set), points=args.points)


def _check_points(args):
    if args.points is not None and args.points < 2:
        from .errors import UsageError
        raise UsageError(f"--points must be at least 2, got {args.points}")


def _open(args):
    """(metric, geometry); a repeat of the same input starts warm (auditor.warm)."""
    from .warm import open_metric
    _check_points(args)
    return open_metric(args.file, set_items=args.set, points=args.points)


def _cmd_probe(args) -> int:
    from .outputs import write_json
    from .probe import parse_event, probe
    from .textout import format_probe
    metric, geometry = _open(args)
    event = parse_event(metric, args.at)
    result = probe(metric, event, geometry)
    if args.json:
        write_json(result.to_json(), args.json)
    if args.json != "-":
        print(format_probe(result))
    return EXIT_OK


def _require(text: str) -> tuple[str, ...]:
    from .errors import UsageError
    from .pointwise import CONDITIONS
    items = tuple(s.strip().upper() for s in text.split(",") if s.strip())
    bad = [s for s in items if s not in CONDITIONS]
    if bad or not items:
        raise UsageError(f"--require takes a comma-separated subset of {','.join(CONDITIONS)}; "
                         f"got '{text}'")
    return items


def _cmd_check(args) -> int:
    from .audit import audit
    from .outputs import write_json
    from .textout import format_audit
    require = _require(args.require)
    metric, geometry = _open(args)
    result = audit(metric, geometry=geometry, progress=False if args.quiet else None,
                   jobs=args.jobs, dask=args.dask)
    if args.json:
        write_json(result.to_json(), args.json)
    if args.json != "-":
        print(format_audit(result, require))
    return result.exit_code(require)


def _cmd_report(args) -> int:
    from .audit import audit
    from .outputs import write_json
    from .report import write_latex, write_report
    require = _require(args.require)
    metric, geometry = _open(args)
    result = audit(metric, geometry=geometry, progress=False if args.quiet else None)
    command = "auditor " + shlex.join(args.argv)
    write_report(result, args.output, require=require, command=command)
    if args.json:
        write_json(result.to_json(), args.json)
    if args.latex:
        write_latex(result, args.latex)
    if args.json != "-":
        print(f"wrote {args.output}" + (f", {args.latex}" if args.latex else "")
              + (f", {args.json}" if args.json else ""))
    return result.exit_code(require)


def _cmd_sweep(args) -> int:
    import os
    from .outputs import atomic_write, write_json
    from .sweep import _journal_path, parse_vary, plot_sweep, sweep
    require = _require(args.require)
    metric = _load(args)
    varies = parse_vary(args.vary, metric)
    plot = args.plot or os.path.splitext(args.output)[0] + ".pdf"
    journal = _journal_path(args.output)
    from .metric import parse_overrides
    result = sweep(metric, varies, points=args.points, overrides=parse_overrides(args.set),
                   jobs=args.jobs, dask=args.dask, journal=journal, require=require,
                   progress=not args.quiet and sys.stderr.isatty())
    with atomic_write(args.output) as fh:
        fh.write(result.to_csv())
    plot_sweep(result, plot)
    if args.json:
        write_json(result.to_json(metric), args.json)
    if journal and os.path.exists(journal):
        os.unlink(journal)
    if args.json != "-":
        print(f"{len(result.rows)} combinations ({result.resumed} resumed) in "
              f"{result.seconds:.1f} s; wrote {args.output}, {plot}"
              + (f", {args.json}" if args.json else ""))
    return result.exit_code()


class _Terminated(BaseException):
    """SIGTERM, raised where the process is so that atomic writes clean up."""


def _terminate_cleanly() -> None:
    """Turn SIGTERM into an exception so that partial outputs are removed (atomic
    writes unlink their temporary file on any exception); exit code 143 = 128 + 15."""
    import signal
    import threading
    if threading.current_thread() is not threading.main_thread():
        return

    def handler(signum, frame):
        raise _Terminated

    try:
        signal.signal(signal.SIGTERM, handler)
    except (ValueError, OSError):
        pass


def _process_age() -> float | None:
    """Seconds since this process started (Linux /proc), else None."""
    try:
        with open("/proc/self/stat") as fh:
            start_ticks = float(fh.read().rsplit(")", 1)[1].split()[19])
        with open("/proc/uptime") as fh:
            uptime = float(fh.read().split()[0])
        return uptime - start_ticks / os.sysconf("SC_CLK_TCK")
    except (OSError, ValueError, IndexError):
        return None


def _report_start_up() -> None:
    """With AUDITOR_TIMINGS set: when the first event was evaluated, counted from
    the start of the process (benchmarks/bench_startup.py reads this line)."""
    import time
    from .geometry.points import FIRST_EVALUATION
    age = _process_age()
    if FIRST_EVALUATION[0] is None or age is None:
        return
    first = age - (time.perf_counter() - FIRST_EVALUATION[0])
    sympy = "imported" if "sympy" in sys.modules else "not imported"
    sys.stderr.write(f"auditor: timings: first event evaluated {first:.3f} s after the "
                     f"process started; SymPy {sympy}\n")


def _keep_working_memory() -> None:
    """Keep freed working memory in the process (glibc only).

    An audit allocates and frees the same few-megabyte working arrays chunk
    after chunk. By default glibc hands such memory back to the system as soon
    as enough is free and takes it back at the next chunk, and every page taken
    back is a page fault that the kernel zeroes: a fifth to a third of the
    audit's time. Raising the trim threshold to 256 MiB (and fixing the mmap
    threshold at 32 MiB, glibc's own upper value, so that large maps keep their
    own mappings) keeps that memory for reuse; the peak is unchanged.
    Elsewhere this does nothing."""
    if not sys.platform.startswith("linux"):
        return
    try:
        import ctypes
        libc = ctypes.CDLL("libc.so.6")
        mallopt = libc.mallopt
    except (OSError, AttributeError):
        return
    M_TRIM_THRESHOLD, M_MMAP_THRESHOLD = -1, -3
    mallopt(M_MMAP_THRESHOLD, 32 << 20)
    mallopt(M_TRIM_THRESHOLD, 256 << 20)


def main(argv=None) -> int:
    parser = build_parser()
    _terminate_cleanly()
    _keep_working_memory()
    argv = sys.argv[1:] if argv is None else list(argv)
    args = parser.parse_args(argv)
    args.argv = argv
    try:
        code = args.func(args)
        if os.environ.get("AUDITOR_TIMINGS"):
            _report_start_up()
        return code
    except AuditorError as exc:
        msg = str(exc).replace("\r", " ").replace("\n", " ")
        sys.stderr.write(f"auditor: error: {msg}\n")
        return exc.exit_code
    except KeyboardInterrupt:
        sys.stderr.write("auditor: interrupted; no partial output was written\n")
        return 130
    except _Terminated:
        sys.stderr.write("auditor: terminated; no partial output was written\n")
        return 143
    except BrokenPipeError:
        return 0
    except Exception as exc:  # a bug: still one line, unless debugging
        if os.environ.get("AUDITOR_DEBUG"):
            raise
        sys.stderr.write(f"auditor: internal error: {type(exc).__name__}: {exc} "
                         "(set AUDITOR_DEBUG=1 for a traceback)\n")
        return 70
