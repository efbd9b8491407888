"""The ``hcpsite`` command line: new, check, build, export, serve, demo.

Exit codes: 0 success (warnings allowed unless --strict), 1 input errors (or warnings
under --strict), 2 usage errors. A user mistake never shows a traceback: findings are
printed as ``path:row:column: level: message`` on stdout and a summary on stderr.
"""
from __future__ import annotations

import argparse
import errno
import gc
import logging
import os
import sys
from pathlib import Path
from typing import Callable, Sequence

from jinja2.exceptions import SecurityError

from . import __version__, progress
from .findings import Findings, HcpsiteError, UsageError

log = logging.getLogger("generator")

REPORT_HINT = ("this is a fault in hcpsite, not in your data; please report it to the hcpsite "
               "maintainers with the command you ran (set HCPSITE_DEBUG=1 for the full traceback)")


#: errors of the machine, not of hcpsite: a full disk, missing rights, a file where a folder
#: should be, a read-only file system, a port in use. They get a message naming the path.
ENVIRONMENT_ERRNOS = frozenset(getattr(errno, name) for name in (
    "ENOSPC", "EDQUOT", "EACCES", "EPERM", "EROFS", "ENOTDIR", "EISDIR", "EEXIST",
    "ENAMETOOLONG", "ELOOP", "EXDEV", "EBUSY", "ETXTBSY", "EIO", "EMFILE", "ENFILE", "EFBIG",
    "EADDRINUSE", "EADDRNOTAVAIL") if hasattr(errno, name))


def environment_message(exc: OSError) -> str:
    """Return the one-line message of an error of the machine: path, problem and what to do."""
    where = " -> ".join(str(f) for f in (exc.filename, exc.filename2) if f is not None)
    what = exc.strerror or os.strerror(exc.errno or 0)
    hint = {errno.ENOSPC: "free some disk space and run the command again",
            errno.EACCES: "check the rights on that folder or choose another one",
            errno.EPERM: "check the rights on that folder or choose another one",
            errno.EROFS: "choose a folder on a writable disk",
            errno.ENOTDIR: "a part of that path is a file, not a folder; choose another path"}.get(
                exc.errno or 0, "this is a problem of the machine, not of hcpsite or your data")
    return f"error: {where + ': ' if where else ''}{what}; {hint}"


class _Parser(argparse.ArgumentParser):
    """An argument parser whose mistakes raise UsageError (exit code 2)."""

    def error(self, message: str) -> None:  # type: ignore[override]
        """Raise a usage error instead of exiting."""
        raise UsageError(f"{self.prog}: {message}\n{self.format_usage().strip()}")


def _print_findings(findings: Findings | None) -> None:
    """Print every finding line on stdout."""
    if not findings:
        return
    for line in findings.lines():
        print(line)
    sys.stdout.flush()


def _err(text: str) -> None:
    print(text, file=sys.stderr)
    sys.stderr.flush()


def _folder(text: str) -> Path:
    return Path(text)


def cmd_new(args: argparse.Namespace) -> int:
    """Write a starter programme folder."""
    from .starter import write_starter
    written = write_starter(args.dir)
    _err(f"wrote a starter programme ({len(written)} files) into {args.dir}; "
         f"next: edit it, then run 'hcpsite check {args.dir}'")
    return 0


def cmd_check(args: argparse.Namespace) -> int:
    """Load, validate and compute without writing anything."""
    from .build import prepare
    ctx = prepare(args.dir, strict=args.strict)
    findings = ctx.programme.findings
    _print_findings(findings)
    _err(f"{args.dir}: {findings.summary()}; ok")
    return 0


def cmd_build(args: argparse.Namespace) -> int:
    """Build the site."""
    from .build import build_site
    report = build_site(args.dir, args.out, strict=args.strict, restricted=args.restricted)
    _print_findings(report.findings)
    extra = " (restricted: per-person pages included)" if report.restricted else ""
    _err(f"built {len(report.pages)} pages into {report.out}{extra}; {report.findings.summary()}")
    return 0


def cmd_export(args: argparse.Namespace) -> int:
    """Write the computed results as CSV/JSON."""
    from .export import export_results
    written = export_results(args.dir, args.to, restricted=args.restricted, strict=args.strict)
    _err(f"exported {len(written)} files into {args.to}")
    return 0


def cmd_serve(args: argparse.Namespace) -> int:
    """Build, serve on 127.0.0.1 and rebuild when inputs change."""
    from .serve import serve
    return serve(args.dir, port=args.port, out=args.out, restricted=args.restricted)


def cmd_demo(args: argparse.Namespace) -> int:
    """Write a synthetic programme of an invented workplace."""
    from .demo import write_demo
    n = write_demo(args.dir, people=args.people, years=args.years, seed=args.seed)
    _err(f"wrote a demo programme of an invented workplace into {args.dir}: {n['headcount']} people at a "
         f"time, {n['people']} over {n['years']} years with turnover, {n['audiograms']} audiograms, "
         f"{n['noise']} noise measurements ({n['noise_logs']} with time histories), {n['files']} files "
         f"(seed {args.seed})")
    return 0


def _positive(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"{text!r} must be at least 1")
    return value


def _port(text: str) -> int:
    value = _positive(text)
    if value > 65535:
        raise argparse.ArgumentTypeError(f"{text!r} is not a port number (1-65535)")
    return value


#: the exit codes, printed under every command's --help.
EXIT_CODES = ("exit codes: 0 success (warnings allowed unless --strict); 1 errors in the input or the "
              "environment, or warnings under --strict; 2 a wrong command line (unknown command or option, "
              "bad option value, or a programme folder that does not exist)")
#: the programme folder argument of every command that reads one.
DIR_HELP = "the programme folder (holding programme.yaml and data/)"


def make_parser() -> argparse.ArgumentParser:
    """Return the argument parser of every command; every argument and option has a help text."""
    p = _Parser(prog="hcpsite", description="Turn hearing-conservation programme records into a "
                "static, offline review site.", epilog=EXIT_CODES)
    p.add_argument("--version", action="version", version=f"hcpsite {__version__}")
    p.add_argument("-v", "--verbose", action="store_true",
                   help="print progress messages (one timed line per build phase; on by default on a terminal)")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser,
                           help="one of the commands below; 'hcpsite COMMAND --help' shows its options")

    def command(name: str, summary: str, description: str) -> argparse.ArgumentParser:
        return sub.add_parser(name, help=summary, description=description, epilog=EXIT_CODES)

    s = command("new", "write a starter programme folder",
                "Write a starter programme folder: programme.yaml with every option and its documentation, "
                "and each data file with its header and example rows of an invented workplace. Refuses a "
                "folder that exists and is not empty.")
    s.add_argument("dir", type=_folder, metavar="DIR", help="the folder to create (new, or empty)")
    s.set_defaults(func=cmd_new)

    strict_help = "count warnings as failures, after printing all of them (default: off)"
    s = command("check", "validate a programme folder, write nothing",
                "Load, validate and compute a programme folder; print every finding as "
                "path:row:column: level: message. Writes nothing.")
    s.add_argument("dir", type=_folder, metavar="DIR", help=DIR_HELP)
    s.add_argument("--strict", action="store_true", help=strict_help)
    s.set_defaults(func=cmd_check)

    s = command("build", "check, compute and render the site",
                "Check, compute and write the static review site. It is written into a temporary folder "
                "and swapped in whole at the end, so a failed build leaves the previous site in place.")
    s.add_argument("dir", type=_folder, metavar="DIR", help=DIR_HELP)
    s.add_argument("--out", type=_folder, default=None, metavar="OUT",
                   help="the folder to write the site into (default: DIR/_site)")
    s.add_argument("--strict", action="store_true", help=strict_help)
    s.add_argument("--restricted", action="store_true",
                   help="add per-person pages, for the occupational-health office only; never publish such a "
                        "build (default: off)")
    s.set_defaults(func=cmd_build)

    s = command("export", "write the computed results as CSV, an xlsx workbook and JSON",
                "Write the computed results (exposure, group exposure, hearing, actions and a summary) as CSV "
                "files, one xlsx workbook (results.xlsx) and JSON, for records and for other tools.")
    s.add_argument("dir", type=_folder, metavar="DIR", help=DIR_HELP)
    s.add_argument("--to", type=_folder, required=True, metavar="FOLDER",
                   help="the folder to write the files into (required; no default)")
    s.add_argument("--strict", action="store_true", help=strict_help)
    s.add_argument("--restricted", action="store_true",
                   help="keep the raw person ids instead of pseudonymous codes, for restricted use only "
                        "(default: off)")
    s.set_defaults(func=cmd_export)

    s = command("serve", "build, serve on 127.0.0.1 and rebuild on changes",
                "Build the site, serve it on this machine only (127.0.0.1) and rebuild it whenever an input "
                "file changes. Stop with Ctrl-C.")
    s.add_argument("dir", type=_folder, metavar="DIR", help=DIR_HELP)
    s.add_argument("--port", type=_port, default=8000, metavar="N",
                   help="the port on 127.0.0.1, 1 to 65535 (default: %(default)s)")
    s.add_argument("--out", type=_folder, default=None, metavar="OUT",
                   help="the folder to build the site into (default: DIR/_site)")
    s.add_argument("--restricted", action="store_true",
                   help="build and serve the restricted site with per-person pages, for the occupational-health "
                        "office only (default: off)")
    s.set_defaults(func=cmd_serve)

    s = command("demo", "write a synthetic programme of an invented workplace",
                "Write a synthetic programme of an invented workplace (no real people or firms). The same "
                "arguments always write the same files; an existing folder is only overwritten when it holds "
                "an earlier demo.")
    s.add_argument("dir", type=_folder, metavar="DIR", help="the folder to write (new, empty, or an earlier demo)")
    s.add_argument("--people", type=_positive, default=250, metavar="N",
                   help="headcount of the invented workforce; leavers are replaced, so the records hold "
                        "somewhat more people (default: %(default)s)")
    s.add_argument("--years", type=_positive, default=6, metavar="Y",
                   help="years of records, ending with the review year (default: %(default)s)")
    s.add_argument("--seed", type=int, default=2026, metavar="S",
                   help="random seed; the same seed writes the same files (default: %(default)s)")
    s.set_defaults(func=cmd_demo)
    return p


def _setup_logging(verbose: bool) -> None:
    root = logging.getLogger("generator")
    if not any(getattr(h, "_hcpsite", False) for h in root.handlers):
        handler = logging.StreamHandler(sys.stderr)
        handler.setFormatter(logging.Formatter("%(levelname)s: %(message)s"))
        handler._hcpsite = True  # type: ignore[attr-defined]
        root.addHandler(handler)
    root.setLevel(logging.INFO if verbose else logging.WARNING)
    root.propagate = False


#: the cyclic garbage collector's thresholds while a command runs as its own process (see _tune_gc)
GC_THRESHOLDS = (50_000, 20, 100)


def _tune_gc() -> None:
    """Tune Python's cyclic garbage collector for one command run as its own process.

    A build allocates millions of short-lived objects and makes few reference cycles (reference
    counting frees everything else): collecting the youngest generation every 50,000 allocations
    instead of every 700, and leaving the objects of the modules already imported out of every
    collection (``gc.freeze``), saves about 4 % of a build's CPU time at the same peak memory
    (the 20,000-person benchmark programme). Cycles are still collected.
    """
    gc.freeze()
    gc.set_threshold(*GC_THRESHOLDS)


#: commands that run to their end and close every file they write: their own process leaves
#: without tearing the interpreter down (see _leave)
QUICK_EXIT_COMMANDS = frozenset({"check", "build", "export"})


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit code.

    Called without *argv* (the ``hcpsite`` command, ``python -m generator``) the process is this
    command's: the garbage collector is tuned for it, and after check, build and export the
    process ends at once (_leave). Called with *argv* from Python (tests, a script), the
    caller's collector is left as it is and main returns.
    """
    if argv is None:
        _tune_gc()
        code, command = _run(None)
        if command in QUICK_EXIT_COMMANDS and sys.getprofile() is None and sys.gettrace() is None:
            _leave(code)  # (not under a profiler or a coverage tracer: they write their data at exit)
        return code
    return _run(argv)[0]


def _leave(code: int) -> None:
    """End this command's process with *code* now: log handlers and the standard streams are
    flushed, and the interpreter is not torn down.

    Tearing it down frees, one by one, every object the modules made (pandas, numpy, plotly,
    jinja), which cost about 0.2 s after each build of the 20,000-person benchmark programme,
    for nothing: the files are written and closed by then, and the system takes the memory
    back whole. Only for the commands of QUICK_EXIT_COMMANDS, which register nothing that
    must run at exit, and not while a profiler or tracer (cProfile, coverage) runs, which
    writes its data at exit.
    """
    logging.shutdown()
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):  # (a closed or broken pipe: nothing more can be said on it)
            pass
    os._exit(code)


def _run(argv: Sequence[str] | None) -> tuple[int, str | None]:
    """Parse *argv* (None: the process's own arguments) and run its command; return
    (exit code, the command's name, None when no command ran)."""
    parser = make_parser()
    try:
        args = parser.parse_args(list(sys.argv[1:] if argv is None else argv))
    except UsageError as exc:
        _err(str(exc))
        return exc.exit_code, None
    except SystemExit as exc:  # --help and --version
        return int(exc.code or 0), None
    _setup_logging(args.verbose)
    progress.configure(args.verbose)
    func: Callable[[argparse.Namespace], int] | None = getattr(args, "func", None)
    if func is None:
        parser.print_help(sys.stderr)
        return 2, None
    return _call(func, args), getattr(args, "command", None)


def _call(func: Callable[[argparse.Namespace], int], args: argparse.Namespace) -> int:
    """Run one command's function; turn the failures a user can meet into messages and exit codes."""
    try:
        return func(args)
    except HcpsiteError as exc:
        _print_findings(exc.findings)
        _err(f"error: {exc}")
        return exc.exit_code
    except KeyboardInterrupt:
        _err("interrupted")
        return 130
    except SecurityError as exc:
        _err(f"error: a template of the programme's templates/ folder tried an operation the template "
             f"sandbox forbids ({exc}); review the programme's templates before building it")
        return 1
    except OSError as exc:
        if exc.errno not in ENVIRONMENT_ERRNOS or os.environ.get("HCPSITE_DEBUG"):
            return _internal(exc)
        _err(environment_message(exc))
        return 1
    except Exception as exc:  # noqa: BLE001 - the one place that turns a fault into a message
        return _internal(exc)


def _internal(exc: BaseException) -> int:
    """Report a fault of hcpsite itself (the full traceback with HCPSITE_DEBUG=1)."""
    if os.environ.get("HCPSITE_DEBUG"):
        raise exc
    _err(f"internal error: {type(exc).__name__}: {exc} -- {REPORT_HINT}")
    return 1
