"""Atomic file output: every file `ident` writes appears whole or not at all."""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path
from typing import Iterator

from .errors import IdentError, first_line


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
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part" + target.suffix, dir=parent)
        os.close(fd)
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; outputs follow the user's umask like any file
    except OSError as exc:
        raise IdentError(f"{target}: cannot write ({_reason(exc)})") from None
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        os.replace(tmp_path, target)
    except OSError as exc:
        # a full disk or a folder gone read-only half-way: name the output, not our temp file
        raise IdentError(f"{target}: cannot write ({_reason(exc)})") from None
    finally:
        with contextlib.suppress(OSError):
            if tmp_path.exists():
                tmp_path.unlink()


@contextlib.contextmanager
def atomic_folder(path: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary folder beside `path`; its files appear in `path` only if the block succeeds.

    A missing `path` is created by renaming the finished folder onto it (all files at once); an
    existing one receives the files by one rename each, with SIGINT and SIGTERM held back while
    they move, so an interrupt leaves either the whole set or none of it.
    """
    import shutil
    import signal

    target = Path(path)
    if target.exists() and not target.is_dir():
        raise IdentError(f"{target}: exists and is not a folder")
    # the temporary folder lives in the nearest existing ancestor, so missing parents are created
    # only once the set is complete
    parent = target.absolute().parent
    while not parent.is_dir() and parent != parent.parent:
        parent = parent.parent
    try:
        tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".part", dir=parent))
        os.chmod(tmp, 0o777 & ~_umask())
    except OSError as exc:
        raise IdentError(f"{target}: cannot create the output folder ({_reason(exc)})") from None
    held = {signal.SIGINT, signal.SIGTERM}
    try:
        yield tmp
        old = signal.pthread_sigmask(signal.SIG_BLOCK, held)
        try:
            if not target.exists():
                target.parent.mkdir(parents=True, exist_ok=True)
                os.rename(tmp, target)
            else:
                for f in sorted(tmp.iterdir()):
                    os.replace(f, target / f.name)
        finally:
            signal.pthread_sigmask(signal.SIG_SETMASK, old)
    except OSError as exc:
        raise IdentError(f"{target}: cannot write ({_reason(exc)})") from None
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def _reason(exc: OSError) -> str:
    return exc.strerror or type(exc).__name__


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
        _check_yaml_shape(yaml.parse(text, Loader=yaml.SafeLoader), p, what, error)
        return yaml.safe_load(text)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        at = f" at line {mark.line + 1}" if mark is not None else ""
        problem = getattr(exc, "problem", None) or str(exc).strip().splitlines()[0]
        raise error(f"{p}: malformed YAML{at} in the {what} ({problem})") from None
    except (ValueError, OverflowError, TypeError) as exc:
        # a scalar the YAML constructors cannot build (a date like 2001-13-45, an integer of
        # more than 4300 digits)
        raise error(f"{p}: malformed YAML in the {what} ({first_line(exc)[:80]})") from None


def _check_yaml_shape(events, p: Path, what: str, error: type[IdentError]) -> None:
    """Walk the parser's events (flat, no recursion) and refuse, before any tree is built,
    aliases of a mapping or list (they can expand exponentially: an alias bomb) and nesting
    deeper than :data:`ident.intake.MAX_YAML_DEPTH`."""
    import yaml

    from .intake import MAX_YAML_DEPTH

    depth = 0
    collections = set()  # anchors of mappings and lists
    for ev in events:
        if isinstance(ev, (yaml.MappingStartEvent, yaml.SequenceStartEvent)):
            depth += 1
            if depth > MAX_YAML_DEPTH:
                line = ev.start_mark.line + 1 if ev.start_mark else "?"
                raise error(f"{p}: the {what} nests deeper than {MAX_YAML_DEPTH} levels at line {line}")
            if ev.anchor is not None:
                collections.add(ev.anchor)
        elif isinstance(ev, (yaml.MappingEndEvent, yaml.SequenceEndEvent)):
            depth -= 1
        elif isinstance(ev, yaml.AliasEvent) and ev.anchor in collections:
            line = ev.start_mark.line + 1 if ev.start_mark else "?"
            raise error(f"{p}: the {what} uses an alias (*{ev.anchor}) of a mapping or list at line {line}; "
                        "write the values out (aliases can expand without bound)")
