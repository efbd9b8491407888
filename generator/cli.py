"""The ``hcpsite`` command line: new, check, build, export, serve, demo.

Exit codes: 0 success (warnings allowed unless --strict), 1 input errors (or warnings
under --strict), 2 usage errors. A user mistake never shows a traceback: findings are
printed as ``path:row:column: level: message`` on stdout and a summary on stderr.
"""
from __future__ import annotations

import argparse
import logging
import os
import sys
from pathlib import Path
from typing import Callable, Sequence

from . import __version__, progress
from .findings import Findings, HcpsiteError, UsageError

log = logging.getLogger("generator")

REPORT_HINT = ("this is a fault in hcpsite, not in your data; please report it to the hcpsite "
               "maintainers with the command you ran (set HCPSITE_DEBUG=1 for the full traceback)")


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
    ctx, _ = prepare(args.dir, strict=args.strict)
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
    write_demo(args.dir, people=args.people, years=args.years, seed=args.seed)
    _err(f"wrote a demo programme ({args.people} people, {args.years} years, seed {args.seed}) into {args.dir}")
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


def make_parser() -> argparse.ArgumentParser:
    """Return the argument parser of every command."""
    p = _Parser(prog="hcpsite", description="Turn hearing-conservation programme records into a "
                "static, offline review site.")
    p.add_argument("--version", action="version", version=f"hcpsite {__version__}")
    p.add_argument("-v", "--verbose", action="store_true",
                   help="print progress messages (one timed line per build phase; on by default on a terminal)")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    s = sub.add_parser("new", help="write a starter programme folder")
    s.add_argument("dir", type=_folder, metavar="DIR")
    s.set_defaults(func=cmd_new)

    s = sub.add_parser("check", help="validate a programme folder, write nothing")
    s.add_argument("dir", type=_folder, metavar="DIR")
    s.add_argument("--strict", action="store_true", help="fail on warnings too")
    s.set_defaults(func=cmd_check)

    s = sub.add_parser("build", help="check, compute and render the site")
    s.add_argument("dir", type=_folder, metavar="DIR")
    s.add_argument("--out", type=_folder, default=None, metavar="OUT", help="output folder (default DIR/_site)")
    s.add_argument("--strict", action="store_true", help="fail on warnings too")
    s.add_argument("--restricted", action="store_true",
                   help="add per-person pages (for the occupational-health office only)")
    s.set_defaults(func=cmd_build)

    s = sub.add_parser("export", help="write the computed results as CSV/JSON")
    s.add_argument("dir", type=_folder, metavar="DIR")
    s.add_argument("--to", type=_folder, required=True, metavar="FOLDER")
    s.add_argument("--strict", action="store_true", help="fail on warnings too")
    s.add_argument("--restricted", action="store_true", help="keep raw person ids (restricted use only)")
    s.set_defaults(func=cmd_export)

    s = sub.add_parser("serve", help="build, serve on 127.0.0.1 and rebuild on changes")
    s.add_argument("dir", type=_folder, metavar="DIR")
    s.add_argument("--port", type=_port, default=8000, metavar="N")
    s.add_argument("--out", type=_folder, default=None, metavar="OUT")
    s.add_argument("--restricted", action="store_true", help=argparse.SUPPRESS)
    s.set_defaults(func=cmd_serve)

    s = sub.add_parser("demo", help="write a synthetic programme of an invented workplace")
    s.add_argument("dir", type=_folder, metavar="DIR")
    s.add_argument("--people", type=_positive, default=250, metavar="N")
    s.add_argument("--years", type=_positive, default=6, metavar="Y")
    s.add_argument("--seed", type=int, default=2026, metavar="S")
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


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit code."""
    parser = make_parser()
    try:
        args = parser.parse_args(list(sys.argv[1:] if argv is None else argv))
    except UsageError as exc:
        _err(str(exc))
        return exc.exit_code
    except SystemExit as exc:  # --help and --version
        return int(exc.code or 0)
    _setup_logging(args.verbose)
    progress.configure(args.verbose)
    func: Callable[[argparse.Namespace], int] | None = getattr(args, "func", None)
    if func is None:
        parser.print_help(sys.stderr)
        return 2
    try:
        return func(args)
    except HcpsiteError as exc:
        _print_findings(exc.findings)
        _err(f"error: {exc}")
        return exc.exit_code
    except KeyboardInterrupt:
        _err("interrupted")
        return 130
    except Exception as exc:  # noqa: BLE001 - the one place that turns a fault into a message
        if os.environ.get("HCPSITE_DEBUG"):
            raise
        _err(f"internal error: {type(exc).__name__}: {exc} -- {REPORT_HINT}")
        return 1
