"""Command-line entry point: ``ident COMMAND ...``.

Each command lives in ``ident/commands/<name>.py`` and exposes ``add_parser(subparsers)`` (which
sets ``func``). Any :class:`ident.errors.IdentError` becomes one line on stderr and exit status 2.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys

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
    """Run the CLI; returns the exit status (0 ok, 2 user error)."""
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        status = args.func(args)
    except IdentError as exc:
        sys.stderr.write(f"ident {args.command}: error: {_one_line(str(exc))}\n")
        return 2
    except KeyboardInterrupt:
        sys.stderr.write("ident: interrupted\n")
        return 130
    except BrokenPipeError:
        # The reader went away (`ident model ... | head`): not an error of ours; stop quietly.
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0
    return int(status or 0)


def _one_line(text: str) -> str:
    return " ".join(text.split())


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
