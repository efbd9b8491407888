"""``hcpsite serve``: build, serve the site on 127.0.0.1 and rebuild when an input changes."""
from __future__ import annotations

import functools
import http.server
import logging
import sys
import threading
import time
from pathlib import Path
from typing import Callable

from .findings import HcpsiteError

log = logging.getLogger(__name__)

HOST = "127.0.0.1"
POLL_SECONDS = 1.0
#: programme entries whose changes trigger a rebuild
WATCHED = ("programme.yaml", "data", "pages", "templates")


def input_state(root: Path) -> tuple[tuple[str, int, int], ...]:
    """Return (path, mtime_ns, size) of every input file, sorted."""
    root = Path(root)
    entries = []
    for name in WATCHED:
        p = root / name
        if p.is_file():
            st = p.stat()
            entries.append((name, st.st_mtime_ns, st.st_size))
        elif p.is_dir():
            for f in sorted(p.rglob("*")):
                if f.is_file() and not any(part.startswith(".") for part in f.relative_to(root).parts):
                    st = f.stat()
                    entries.append((f.relative_to(root).as_posix(), st.st_mtime_ns, st.st_size))
    return tuple(entries)


def _rebuild(root: Path, out: Path | None, restricted: bool) -> Path | None:
    """Build once; print findings; return the output folder or None when the build failed."""
    from .build import build_site
    try:
        report = build_site(root, out, restricted=restricted)
    except HcpsiteError as exc:
        if exc.findings:
            for line in exc.findings.lines():
                print(line)
        print(f"error: {exc}; the previous site is still served", file=sys.stderr)
        return None
    except Exception as exc:  # noqa: BLE001 - keep serving the previous site
        from .cli import REPORT_HINT
        print(f"internal error: {type(exc).__name__}: {exc} -- {REPORT_HINT}", file=sys.stderr)
        return None
    for line in report.findings.lines():
        print(line)
    print(f"built {len(report.pages)} pages into {report.out}; {report.findings.summary()}", file=sys.stderr)
    return report.out


class _Handler(http.server.SimpleHTTPRequestHandler):
    """Serve the site folder quietly."""

    def log_message(self, format: str, *args: object) -> None:  # noqa: A002 - stdlib signature
        """Send request lines to the debug log only."""
        log.debug("%s - %s", self.address_string(), format % args)


def make_server(site: Path, port: int) -> http.server.ThreadingHTTPServer:
    """Return an HTTP server for *site* bound to 127.0.0.1 only."""
    handler = functools.partial(_Handler, directory=str(site))
    return http.server.ThreadingHTTPServer((HOST, port), handler)


def serve(root: Path, port: int = 8000, out: Path | None = None, restricted: bool = False,
          max_polls: int | None = None, on_ready: Callable[[int], None] | None = None,
          stop: threading.Event | None = None) -> int:
    """Build and serve *root* until Ctrl-C (or *stop*); rebuild when an input changes. Return the exit code."""
    from .build import DEFAULT_OUT, check_output
    root = Path(root)
    site = Path(out) if out is not None else root / DEFAULT_OUT
    check_output(root, site)
    state = input_state(root)
    if _rebuild(root, out, restricted) is None and not site.is_dir():
        return 1
    server = make_server(site.resolve(), port)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    print(f"serving {site} at http://{HOST}:{server.server_address[1]}/index.html (Ctrl-C to stop)",
          file=sys.stderr)
    if on_ready is not None:
        on_ready(int(server.server_address[1]))
    polls = 0
    try:
        while (max_polls is None or polls < max_polls) and not (stop is not None and stop.is_set()):
            time.sleep(POLL_SECONDS)
            polls += 1
            now = input_state(root)
            if now != state:
                state = now
                print("inputs changed; rebuilding", file=sys.stderr)
                _rebuild(root, out, restricted)
    except KeyboardInterrupt:
        print("stopped", file=sys.stderr)
    finally:
        server.shutdown()
        server.server_close()
    return 0
