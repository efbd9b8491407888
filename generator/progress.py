"""Progress lines for long builds: one line per phase with its time, on stderr.

The command line turns progress on when stderr is a terminal or with ``-v``/``--verbose``
(``configure``); otherwise, and for library callers, nothing is printed. Code that runs a
phase wraps it in a step::

    from . import progress

    with progress.step("hearing"):
        ...

which, when progress is on, prints ``hcpsite: hearing 1.23 s`` after the phase ends
(steps may nest: an inner step's line comes before the outer one's). A phase that raises
prints nothing; the error is reported by the caller as usual.
"""
from __future__ import annotations

import contextlib
import sys
import time
from typing import Callable, Iterator, TextIO

PREFIX = "hcpsite:"


class Progress:
    """Print ``hcpsite: NAME SECONDS s`` on *stream* (default: the current sys.stderr) per step."""

    def __init__(self, enabled: bool = False, stream: TextIO | None = None,
                 clock: Callable[[], float] = time.perf_counter) -> None:
        self.enabled = enabled
        self.stream = stream
        self.clock = clock

    @contextlib.contextmanager
    def step(self, name: str) -> Iterator[None]:
        """Time the block; when enabled, print its line once it has finished."""
        start = self.clock()
        yield
        if self.enabled:
            self.line(f"{name} {self.clock() - start:.2f} s")

    def line(self, text: str) -> None:
        """Print one progress line (when enabled)."""
        if not self.enabled:
            return
        stream = self.stream if self.stream is not None else sys.stderr
        print(f"{PREFIX} {text}", file=stream)
        stream.flush()


_current = Progress()


def is_terminal(stream: TextIO | None) -> bool:
    """True when *stream* is an interactive terminal."""
    try:
        return bool(stream is not None and stream.isatty())
    except (AttributeError, ValueError, OSError):
        return False


def configure(verbose: bool, stream: TextIO | None = None) -> Progress:
    """Turn progress on (``verbose`` or a terminal on stderr) or off; return the active Progress."""
    global _current
    target = stream if stream is not None else sys.stderr
    _current = Progress(enabled=bool(verbose) or is_terminal(target), stream=stream)
    return _current


def current() -> Progress:
    """Return the active Progress."""
    return _current


def step(name: str) -> contextlib.AbstractContextManager[None]:
    """Return the active Progress's step *name* (a context manager)."""
    return _current.step(name)
