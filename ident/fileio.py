"""Atomic file output: every file `ident` writes appears whole or not at all."""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path
from typing import Iterator

from .errors import IdentError


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path beside `path`; rename it onto `path` only if the block succeeds.

    Writers that need a file name (matplotlib, pandas) write to the yielded path. On any exception
    the temporary file is removed, so no partial output is left behind.
    """
    target = Path(path)
    parent = target.parent if str(target.parent) else Path(".")
    if not parent.is_dir():
        raise IdentError(f"{target}: output folder {parent} does not exist")
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part" + target.suffix, dir=parent)
    os.close(fd)
    os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; outputs follow the user's umask like any file
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        os.replace(tmp_path, target)
    finally:
        if tmp_path.exists():
            tmp_path.unlink()


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_text(path: str | os.PathLike, text: str) -> None:
    """Write `text` (UTF-8) to `path` atomically."""
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")


def write_bytes(path: str | os.PathLike, data: bytes) -> None:
    """Write `data` to `path` atomically."""
    with atomic_path(path) as tmp:
        tmp.write_bytes(data)


def read_yaml(path: str | os.PathLike, what: str, error: type[IdentError] = IdentError):
    """Parse the YAML file `path` (a `what`, e.g. "parameter file") with one-line errors.

    Raises `error` naming the file when it is missing, unreadable or malformed (with the line).
    """
    import yaml

    p = Path(path)
    if not p.is_file():
        raise error(f"{p}: {what} not found")
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise error(f"{p}: cannot read the {what} ({exc})") from None
    try:
        return yaml.safe_load(text)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        at = f" at line {mark.line + 1}" if mark is not None else ""
        problem = getattr(exc, "problem", None) or str(exc).strip().splitlines()[0]
        raise error(f"{p}: malformed YAML{at} in the {what} ({problem})") from None
