"""Command-line entry point: ``ident COMMAND ...``.

Each command lives in ``ident/commands/<name>.py`` and exposes ``add_parser(subparsers)`` (which
sets ``func``). Any :class:`ident.errors.IdentError` becomes one line on stderr and exit status 2.
"""

from __future__ import annotations

import argparse
import importlib
import os
import signal
import sys
import warnings

from . import interrupts
from .errors import IdentError

# Order here is the order in `ident --help`.
COMMANDS = [
    "model",
    "prior",
    "excite",
    "simulate",
    "logs",
    "fit",
    "payload",
    "check",
    "export",
    "fleet",
    "demo",
]


class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # argparse's own usage errors: one line, exit 2
        sys.stderr.write(f"ident: error: {message}\n")
        raise SystemExit(2)


def build_parser() -> argparse.ArgumentParser:
    """The argparse parser with every registered command."""
    parser = _Parser(
        prog="ident",
        description="Identify inertial, friction and rotor-inertia parameters of robot arms.",
    )
    parser.add_argument("--version", action="version", version=_version())
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True
    for name in COMMANDS:
        importlib.import_module(f"ident.commands.{name}").add_parser(sub)
    return parser


def _version() -> str:
    from . import __version__

    return f"ident {__version__}"


def main(argv: list[str] | None = None) -> int:
    """Run the CLI; returns the exit status (0 ok, 2 user error, 130 SIGINT, 143 SIGTERM)."""
    command = "ident"
    with interrupts.running():
        try:
            parser = build_parser()
            args = parser.parse_args(argv)
            command = f"ident {args.command}"
            with warnings.catch_warnings(record=True) as caught:
                # numpy's RuntimeWarnings (overflow, invalid value) are numerical trouble: they are
                # reported in words below, never as Python's raw two-line warning
                warnings.simplefilter("always", RuntimeWarning)
                refuse_overwrite(args)
                status = args.func(args)
            _report_numerical(command, caught)
        except IdentError as exc:
            sys.stderr.write(f"{command}: error: {_one_line(str(exc))}\n")
            return 2
        except OSError as exc:
            if isinstance(exc, BrokenPipeError):
                # The reader went away (`ident model ... | head`): not an error of ours; stop quietly.
                devnull = os.open(os.devnull, os.O_WRONLY)
                os.dup2(devnull, sys.stdout.fileno())
                return 0
            where = exc.filename if exc.filename is not None else "file system"
            sys.stderr.write(f"{command}: error: {where}: {exc.strerror or _one_line(str(exc))}\n")
            return 2
        except (RecursionError, MemoryError) as exc:
            what = "the input nests too deeply" if isinstance(exc, RecursionError) else "out of memory"
            sys.stderr.write(f"{command}: error: {what}\n")
            return 2
        except KeyboardInterrupt:
            sys.stderr.write(f"{command}: interrupted\n")
            return interrupts.STATUS[signal.SIGINT]
        except interrupts.Terminated:
            sys.stderr.write(f"{command}: terminated\n")
            return interrupts.STATUS[signal.SIGTERM]
    return int(status or 0)


#: option dests that name files a command reads, and those that name files it writes
INPUTS = ("robot", "logs", "config", "trajectory", "truth", "prior", "params", "urdf", "profile", "excitation",
          "augment", "from_coeffs")
OUTPUTS = ("out", "report")


def refuse_overwrite(args: argparse.Namespace) -> None:
    """Refuse an output path that is one of the input files (it would be replaced before or while
    it is read)."""
    inputs = []
    for dest in INPUTS:
        val = getattr(args, dest, None)
        inputs += [val] if isinstance(val, str) else list(val or [])
    for dest in OUTPUTS:
        out = getattr(args, dest, None)
        if not isinstance(out, str):
            continue
        for src in inputs:
            if _same_file(out, src):
                raise IdentError(f"--{dest} {out}: is also an input ({src}); write the output elsewhere")


def _same_file(a: str, b: str) -> bool:
    try:
        if os.path.exists(a) and os.path.exists(b):
            return os.path.samefile(a, b)
        return os.path.abspath(a) == os.path.abspath(b)
    except OSError:
        return False


def _report_numerical(command: str, caught) -> None:
    """One line in words for numerical trouble the computation did not report itself."""
    msgs = []
    for w in caught:
        if issubclass(w.category, RuntimeWarning):
            msg = _one_line(str(w.message))
            if msg not in msgs:
                msgs.append(msg)
        else:
            warnings.showwarning(w.message, w.category, w.filename, w.lineno)
    if msgs:
        sys.stderr.write(f"{command}: warning: numerical trouble during the computation ({'; '.join(msgs[:3])}); "
                         "check the inputs' magnitudes and treat the results with care\n")


def _one_line(text: str) -> str:
    return " ".join(text.split())


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
