"""``hcpsite serve``: build, serve the site on 127.0.0.1 and rebuild when an input changes.

The port is bound before the first build, so a port in use is reported at once. Pages
served (never the files written) carry a small script that asks this server for its
build counter once a second and reloads the page after a rebuild; it talks to
127.0.0.1 only.
"""
from __future__ import annotations

import errno
import functools
import http.server
import io
import logging
import os
import sys
import threading
import time
from pathlib import Path
from typing import BinaryIO, Callable

from .findings import HcpsiteError

log = logging.getLogger(__name__)

HOST = "127.0.0.1"
POLL_SECONDS = 1.0
#: programme entries whose changes trigger a rebuild
WATCHED = ("programme.yaml", "data", "pages", "templates")
#: the endpoint answering the build counter (served by ``serve`` only)
BUILD_ENDPOINT = "/__hcpsite/build"
#: the script put before </body> of each served page: reload when the build counter changes
RELOAD_SCRIPT = (
    '<script data-hcpsite-serve>/* added by hcpsite serve, not part of the site */'
    '(function(){{var b="{build}";setInterval(function(){{'
    'fetch("{endpoint}",{{cache:"no-store"}}).then(function(r){{return r.text();}})'
    '.then(function(t){{if(t.trim()!==b){{location.reload();}}}}).catch(function(){{}});'
    '}},1000);}})();</script>'
)


def _stat_entry(path: Path, rel: str) -> tuple[str, int, int] | None:
    try:
        st = path.stat()
    except OSError:  # vanished or unreadable between listing and stat
        return None
    return (rel, st.st_mtime_ns, st.st_size)


def input_state(root: Path) -> tuple[tuple[str, int, int], ...]:
    """Return (path, mtime_ns, size) of every input file, sorted; entries vanishing meanwhile are skipped."""
    root = Path(root)
    entries = []
    for name in WATCHED:
        p = root / name
        if p.is_file():
            entry = _stat_entry(p, name)
            if entry:
                entries.append(entry)
        elif p.is_dir():
            for here, dirs, files in os.walk(p):  # errors (a folder vanishing) are skipped by os.walk
                dirs[:] = sorted(d for d in dirs if not d.startswith("."))
                for f in sorted(files):
                    if f.startswith("."):
                        continue
                    full = Path(here) / f
                    entry = _stat_entry(full, full.relative_to(root).as_posix())
                    if entry and stat_is_file(full):
                        entries.append(entry)
    return tuple(sorted(entries))


def stat_is_file(path: Path) -> bool:
    """True when *path* is a regular file (False when it vanished)."""
    try:
        return path.is_file()
    except OSError:
        return False


def _rebuild(root: Path, out: Path | None, restricted: bool, have_site: bool = True) -> Path | None:
    """Build once; print findings; return the output folder or None when the build failed."""
    from .build import build_site
    kept = "the previous site is still served" if have_site else "there is no site to serve yet"
    try:
        report = build_site(root, out, restricted=restricted)
    except HcpsiteError as exc:
        if exc.findings:
            for line in exc.findings.lines():
                print(line)
        print(f"error: {exc}; {kept}", file=sys.stderr)
        return None
    except OSError as exc:
        from .cli import ENVIRONMENT_ERRNOS, REPORT_HINT, environment_message
        if exc.errno in ENVIRONMENT_ERRNOS:
            print(f"{environment_message(exc)}; {kept}", file=sys.stderr)
        else:
            print(f"internal error: {type(exc).__name__}: {exc} -- {REPORT_HINT}", file=sys.stderr)
        return None
    except Exception as exc:  # noqa: BLE001 - keep serving the previous site
        from .cli import REPORT_HINT
        print(f"internal error: {type(exc).__name__}: {exc} -- {REPORT_HINT}", file=sys.stderr)
        return None
    for line in report.findings.lines():
        print(line)
    print(f"built {len(report.pages)} pages into {report.out}; {report.findings.summary()}", file=sys.stderr)
    return report.out


class _Server(http.server.ThreadingHTTPServer):
    """The HTTP server; ``build`` counts the successful builds (read by the reload script)."""

    daemon_threads = True
    build = 0


class _Handler(http.server.SimpleHTTPRequestHandler):
    """Serve the site folder quietly; answer the build counter; add the reload script to pages."""

    server: _Server

    def log_message(self, format: str, *args: object) -> None:  # noqa: A002 - stdlib signature
        """Send request lines to the debug log only."""
        log.debug("%s - %s", self.address_string(), format % args)

    def _send_bytes(self, data: bytes, ctype: str) -> io.BytesIO:
        self.send_response(200)
        self.send_header("Content-Type", ctype)
        self.send_header("Content-Length", str(len(data)))
        self.send_header("Cache-Control", "no-store")
        self.end_headers()
        return io.BytesIO(data)

    def send_head(self) -> io.BytesIO | BinaryIO | None:
        """Return the build counter, a page with the reload script, or any other file unchanged."""
        path = self.path.split("?", 1)[0].split("#", 1)[0]
        if path == BUILD_ENDPOINT:
            return self._send_bytes(str(self.server.build).encode("ascii"), "text/plain; charset=utf-8")
        local = self.translate_path(self.path)
        if os.path.isdir(local) and path.endswith("/"):
            local = os.path.join(local, "index.html")
        if not local.endswith(".html") or not os.path.isfile(local):
            return super().send_head()
        try:
            with open(local, "rb") as fh:
                page = fh.read()
        except OSError:
            self.send_error(404, "File not found")
            return None
        script = RELOAD_SCRIPT.format(build=self.server.build, endpoint=BUILD_ENDPOINT).encode("utf-8")
        at = page.rfind(b"</body>")
        page = page[:at] + script + page[at:] if at >= 0 else page + script
        return self._send_bytes(page, "text/html; charset=utf-8")


def make_server(site: Path, port: int) -> _Server:
    """Return an HTTP server for *site* bound to 127.0.0.1 only; a port in use is a clear error."""
    handler = functools.partial(_Handler, directory=str(site))
    try:
        return _Server((HOST, port), handler)
    except OSError as exc:
        if exc.errno in (errno.EADDRINUSE, errno.EACCES, errno.EADDRNOTAVAIL):
            raise HcpsiteError(f"{HOST}:{port}: cannot listen there ({exc.strerror}); another program may "
                               f"use this port: choose another with --port N") from None
        raise


def serve(root: Path, port: int = 8000, out: Path | None = None, restricted: bool = False,
          max_polls: int | None = None, on_ready: Callable[[int], None] | None = None,
          stop: threading.Event | None = None) -> int:
    """Build and serve *root* until Ctrl-C (or *stop*); rebuild when an input changes. Return the exit code."""
    from .build import DEFAULT_OUT, MARKER, check_output
    root = Path(root)
    site = Path(out) if out is not None else root / DEFAULT_OUT
    check_output(root, site)
    server = make_server(site.resolve(), port)  # bind first: a port in use stops before any build
    try:
        state = input_state(root)
        had_site = (site / MARKER).is_file()
        if _rebuild(root, out, restricted, have_site=had_site) is None and not had_site:
            return 1
        server.build = 1
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
                try:
                    now = input_state(root)
                except OSError as exc:  # the programme folder itself is gone or unreadable for a moment
                    log.warning("%s: cannot read the inputs (%s); trying again", root, exc.strerror or exc)
                    continue
                if now != state:
                    state = now
                    print("inputs changed; rebuilding", file=sys.stderr)
                    if _rebuild(root, out, restricted, have_site=True) is not None:
                        server.build += 1
        except KeyboardInterrupt:
            print("stopped", file=sys.stderr)
        finally:
            server.shutdown()
    finally:
        server.server_close()
    return 0
