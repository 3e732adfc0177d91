"""SIGINT and SIGTERM end a command with one line and exit 130 or 143, leaving no partial output.

Two phases. During start-up (imports, parser set-up) nothing has been written, so the handler
prints its line and leaves at once (:func:`install_startup`, run from ``ident/__init__.py`` before
the heavy imports, only when the process is the ``ident`` command). While a command runs, the
handler raises (:class:`KeyboardInterrupt` or :class:`Terminated`) so every ``finally`` of the
atomic writers removes its temporary file or folder on the way out (:func:`running`); further
signals are ignored meanwhile so that clean-up is not cut short.
"""

from __future__ import annotations

import contextlib
import os
import signal
import sys

#: exit status of a command ended by a signal: 128 + the signal number (shell convention)
STATUS = {signal.SIGINT: 130, signal.SIGTERM: 143}
WORDS = {signal.SIGINT: "interrupted", signal.SIGTERM: "terminated"}


class Terminated(BaseException):
    """Raised in the main thread on SIGTERM (a BaseException, like KeyboardInterrupt, so that
    ``except Exception`` blocks do not swallow it)."""


def _leave_now(signum, frame):  # start-up: nothing to clean yet
    os.write(2, f"ident: {WORDS[signum]}\n".encode())
    os._exit(STATUS[signum])


def _raise(signum, frame):
    for s in STATUS:  # let the clean-up run undisturbed
        signal.signal(s, signal.SIG_IGN)
    if signum == signal.SIGINT:
        raise KeyboardInterrupt
    raise Terminated


def is_cli_process() -> bool:
    """True when this process is the ``ident`` command (console script or ``python -m ident``)."""
    if os.path.basename(sys.argv[0] if sys.argv else "") in ("ident", "ident.exe"):
        return True
    argv = list(getattr(sys, "orig_argv", []))
    if "-m" in argv:
        i = argv.index("-m")
        return i + 1 < len(argv) and argv[i + 1] in ("ident", "ident.cli")
    return False


def install_startup() -> None:
    """Make SIGINT/SIGTERM print one line and exit 130/143 right away (start-up phase)."""
    for s in STATUS:
        with contextlib.suppress(ValueError, OSError):  # not the main thread: leave signals alone
            signal.signal(s, _leave_now)


@contextlib.contextmanager
def running():
    """While the block runs, SIGINT raises KeyboardInterrupt and SIGTERM raises :class:`Terminated`;
    the previous handlers come back afterwards."""
    old = {}
    for s in STATUS:
        with contextlib.suppress(ValueError, OSError):
            old[s] = signal.signal(s, _raise)
    try:
        yield
    finally:
        for s, h in old.items():
            signal.signal(s, h)
