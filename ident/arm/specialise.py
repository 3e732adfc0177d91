"""A packing kernel specialised to one arm: the per-sample formulas of :mod:`ident.arm.kernels`
with the arm's constant frames, axes and base-column choice folded in.

Why: a general kernel multiplies by every entry of every fixed rotation, axis and offset, and
computes all ten entries of every body for every joint. For a real arm most of those factors are
exact zeros and ones (joint axes along z, frames turned by right angles, offsets along one axis),
and the base set keeps only some columns (the Panda keeps 41 of its 70 rigid-body columns). The
compression pass (:mod:`ident.estimation.compress`) needs nothing else, so for long logs it runs a
kernel written for the arm at hand.

How: the general kernel's own Python functions (``py_func`` of :func:`ident.arm.kernels._motion_blocks`
and :func:`ident.arm.kernels._body_entries`, and the centring sum :func:`ident.arm.pack._centre_sum`) are run
once on symbolic values. Constants stay numbers; every other operation becomes one line of
straight-line code. Only products by an exact 0, 1 or -1, sums with an exact 0, sign changes and
operations on two constants are folded, all of which are exact in IEEE arithmetic, and Python's
evaluation order is kept (numba keeps it too: no fast-math), so the specialised kernel's rows are
bit for bit those of :func:`ident.arm.pack.pack_chunk` for finite inputs. Repeated operations on
the same operands are computed once, and operations no output needs are dropped.

The source is written to a cache directory (``IDENT_CACHE``, else ``$XDG_CACHE_HOME/ident`` or
``~/.cache/ident``) under a name that is the hash of its text, and compiled by numba with its
on-disk cache, so an arm is compiled once per machine (a few seconds), not once per process.
"""

from __future__ import annotations

import hashlib
import importlib.util
import os
import subprocess
import sys
import tempfile
import time
import types
import warnings
from pathlib import Path

import numba
import numpy as np
from numba.core.registry import CPUDispatcher

from . import kernels
from .pack import _centre_sum, _pack_layout

#: Bumped whenever the generated text's conventions change (part of the hashed text).
_FORMAT = 1


class _Sym:
    """A run-time value of the traced kernel: the name of a variable (or an array element of the
    kernel's inputs) and a pending sign, so that negation costs nothing."""

    __slots__ = ("name", "neg", "tape")

    def __init__(self, tape: "_Tape", name: str, neg: bool = False):
        self.tape, self.name, self.neg = tape, name, neg

    def __neg__(self):
        return _Sym(self.tape, self.name, not self.neg)

    def __pos__(self):
        return self

    def __add__(self, other):
        return self.tape.add(self, other)

    def __radd__(self, other):
        return self.tape.add(other, self)

    def __sub__(self, other):
        return self.tape.add(self, _neg(other))

    def __rsub__(self, other):
        return self.tape.add(other, -self)

    def __mul__(self, other):
        return self.tape.mul(self, other)

    def __rmul__(self, other):
        return self.tape.mul(other, self)

    def cos(self):
        return self.tape.call("np.cos", self)

    def sin(self):
        return self.tape.call("np.sin", self)

    def __bool__(self):  # pragma: no cover - a branch on a run-time value cannot be traced
        raise TypeError("the specialised kernel cannot branch on a run-time value")


def _neg(x):
    return -x


def _is_const(x) -> bool:
    return not isinstance(x, _Sym)


class _Tape:
    """Straight-line code recorded from the traced operations (see the module notes)."""

    def __init__(self):
        self.lines: list[tuple[str, str, tuple[str, ...]]] = []  # (target, expression, operands)
        self.memo: dict[tuple, str] = {}
        self.count = 0

    def leaf(self, name: str) -> _Sym:
        return _Sym(self, name)

    def _emit(self, key: tuple, expr: str, operands: tuple[str, ...]) -> str:
        name = self.memo.get(key)
        if name is None:
            name = f"t{self.count}"
            self.count += 1
            self.lines.append((name, expr, operands))
            self.memo[key] = name
        return name

    def call(self, fn: str, x: _Sym) -> _Sym:
        if x.neg:  # pragma: no cover - joint positions are never negated before cos/sin
            raise TypeError("traced call on a negated value")
        return _Sym(self, self._emit((fn, x.name), f"{fn}({x.name})", (x.name,)))

    def mul(self, a, b):
        if _is_const(a) and _is_const(b):
            return float(a) * float(b)
        if _is_const(a):
            a, b = b, a  # IEEE products commute exactly
        if _is_const(b):
            b = float(b)
            if b == 0.0:
                return 0.0
            if b == 1.0:
                return a
            if b == -1.0:
                return -a
            neg = a.neg != (b < 0.0)
            name = self._emit(("*", a.name, abs(b)), f"{a.name} * {abs(b)!r}", (a.name,))
            return _Sym(self, name, neg)
        x, y = sorted((a.name, b.name))
        return _Sym(self, self._emit(("*", x, y), f"{x} * {y}", (x, y)), a.neg != b.neg)

    def add(self, a, b):
        if _is_const(a) and _is_const(b):
            return float(a) + float(b)
        if _is_const(a):
            a, b = b, a  # IEEE sums commute exactly
        if _is_const(b):
            b = float(b)
            if b == 0.0:
                return a
            # c + a = -(-c - a): keep the sign on the variable's side pending
            c = -b if a.neg else b
            name = self._emit(("+c", a.name, c), f"{c!r} + {a.name}", (a.name,))
            return _Sym(self, name, a.neg)
        if a.neg == b.neg:  # x + y, or -x + -y = -(x + y)
            x, y = sorted((a.name, b.name))
            return _Sym(self, self._emit(("+", x, y), f"{x} + {y}", (x, y)), a.neg)
        if a.neg:  # -x + y = y - x
            a, b = b, a
        return _Sym(self, self._emit(("-", a.name, b.name), f"{a.name} - {b.name}", (a.name, b.name)))

    def needed(self, outputs) -> list[tuple[str, str]]:
        """The recorded lines the given values depend on, in recording order."""
        want = {x.name for x in outputs if isinstance(x, _Sym)}
        keep = []
        for target, expr, operands in reversed(self.lines):
            if target in want:
                keep.append((target, expr))
                want.update(operands)
        return keep[::-1]


def _value(x) -> str:
    """Source text of a traced value."""
    if _is_const(x):
        return repr(float(x))
    return f"-{x.name}" if x.neg else x.name


def _traceable(fn):
    """A plain-Python copy of a compiled kernel helper whose calls to other compiled helpers of the
    same module go to their plain-Python copies too (so the whole call tree can be traced)."""
    py = fn.py_func
    glb = dict(py.__globals__)
    out = types.FunctionType(py.__code__, glb, py.__name__, py.__defaults__, py.__closure__)
    for name, val in list(glb.items()):
        if isinstance(val, CPUDispatcher) and val.py_func.__module__ == py.__module__:
            glb[name] = types.FunctionType(val.py_func.__code__, glb, val.py_func.__name__, val.py_func.__defaults__)
    return out


def _objects(a) -> np.ndarray:
    """An object array of plain Python numbers (constants the tracer folds)."""
    a = np.asarray(a)
    out = np.empty(a.shape, dtype=object)
    out[...] = a.tolist() if a.ndim else a.item()
    return out


def source(parent, jtype, Rf, pf, ax, anc, a0, kept, nrigid, ncol) -> str:
    """Python source of the specialised packing kernel module for these kernel arrays (see
    :func:`ident.arm.pack.pack_chunk` for their meaning). The module defines one compiled function,
    ``rows(q, dq, ddq, tau, signals, keep, rowpos, center, centered, tsrc, offs, out, start, stop)``,
    that writes the packed rows of samples start..stop-1 (``rowpos``, ``offs`` from
    :func:`ident.arm.pack._pack_layout`)."""
    n = int(len(parent))
    tape = _Tape()
    q = np.empty((1, n), dtype=object)
    dq = np.empty((1, n), dtype=object)
    ddq = np.empty((1, n), dtype=object)
    for k in range(n):
        q[0, k] = tape.leaf(f"q[s, {k}]")
        dq[0, k] = tape.leaf(f"dq[s, {k}]")
        ddq[0, k] = tape.leaf(f"ddq[s, {k}]")
    R = np.empty((n, 3, 3), dtype=object)
    p = np.empty((n, 3), dtype=object)
    w = np.empty((n, 3), dtype=object)
    dw = np.empty((n, 3), dtype=object)
    a = np.empty((n, 3), dtype=object)
    S = np.empty((n, n, 6), dtype=object)
    BC = np.empty((n, 27), dtype=object)
    anc = np.asarray(anc, dtype=bool)
    kept = np.asarray(kept)
    _traceable(kernels._motion_blocks)(q, dq, ddq, 0, _objects(parent), _objects(jtype), _objects(Rf), _objects(pf), _objects(ax),
                                       _objects(anc), _objects(a0), R, p, w, dw, a, S, BC)
    entries = _traceable(kernels._body_entries)
    centre_sum = _traceable(_centre_sum)
    rows, fits = [], []
    for j in range(n):
        row, fit = [], 0.0
        for k in range(j, n):
            if not anc[k, j]:
                continue
            e = entries(a, S, BC, j, k)
            row += [e[i] for i in range(10) if kept[k, i]]
            c = [tape.leaf(f"center[{j}, {10 * k + i}]") if kept[k, i] else 0.0 for i in range(10)]
            fit = fit + centre_sum(*e, *c)
        rows.append(row)
        fits.append(fit)
    values = [x for row in rows for x in row]
    body = tape.needed(values)
    done = {t for t, _ in body}
    fit_lines = []
    for j in range(n):
        more = [(t, e) for t, e in tape.needed([fits[j]]) if t not in done]
        done.update(t for t, _ in more)
        fit_lines.append(more)

    ind = " " * 8
    out = [f"# generated by ident.arm.specialise (format {_FORMAT}); do not edit",
           "import numpy as np",
           "from numba import njit, types",
           "",
           "_F2 = types.Array(types.float64, 2, 'C', readonly=True)",
           "_F3 = types.Array(types.float64, 3, 'C', readonly=True)",
           "_B2 = types.Array(types.boolean, 2, 'C', readonly=True)",
           "_I2 = types.Array(types.int64, 2, 'C', readonly=True)",
           "_I1 = types.Array(types.int64, 1, 'C', readonly=True)",
           "_OUT = types.Array(types.float64, 1, 'C')",
           "",
           "",
           # one explicit signature: compiled once (by a helper process, see load), never again here
           "@njit(types.void(_F2, _F2, _F2, _F2, _F3, _B2, _I2, _F2, types.boolean, _I2, _I1, _OUT, types.int64, types.int64),",
           "      cache=True, nogil=True)",
           "def rows(q, dq, ddq, tau, signals, keep, rowpos, center, centered, tsrc, offs, out, start, stop):",
           "    for s in range(start, stop):"]
    out += [f"{ind}{t} = {e}" for t, e in body]
    for j in range(n):
        c = int(ncol[j])
        out.append(f"{ind}if keep[s, {j}]:")
        out.append(f"{ind}    at = offs[{j}] + rowpos[s, {j}] * {c + 1}")
        out += [f"{ind}    out[at + {i}] = {_value(x)}" for i, x in enumerate(rows[j])]
        out.append(f"{ind}    fit = 0.0")
        out.append(f"{ind}    if centered:")
        out += [f"{ind}        {t} = {e}" for t, e in fit_lines[j]]
        out.append(f"{ind}        fit = {_value(fits[j])}")
        if int(nrigid[j]) < c:
            out.append(f"{ind}    for col in range({int(nrigid[j])}, {c}):")
            out.append(f"{ind}        v = signals[s, {j}, tsrc[{j}, col]]")
            out.append(f"{ind}        out[at + col] = v")
            out.append(f"{ind}        if centered:")
            out.append(f"{ind}            fit += v * center[{j}, {10 * n} + tsrc[{j}, col]]")
        out.append(f"{ind}    out[at + {c}] = tau[s, {j}] - fit if centered else tau[s, {j}]")
    out.append("")
    return "\n".join(out)


def cache_dir() -> Path:
    """Where generated kernels and numba's compiled copies are kept."""
    env = os.environ.get("IDENT_CACHE")
    if env:
        return Path(env)
    xdg = os.environ.get("XDG_CACHE_HOME")
    return (Path(xdg) if xdg else Path.home() / ".cache") / "ident"


#: Samples a compressor must have been given before it asks for its arm's kernel: below that the
#: general kernel finishes sooner than a first compilation would (a few seconds).
SPECIALISE_FROM = 1 << 18
#: Arms whose kernel would be longer than this are left to the general kernel (compile time grows
#: with the text; a 7-joint arm has about 2 500 lines).
MAX_LINES = 8000

_KERNELS: dict[str, object] = {}  # digest -> module, a compiling helper process, or None (failed)


def enabled() -> bool:
    """Whether specialised kernels are used (``IDENT_SPECIALISE=0`` turns them off)."""
    return os.environ.get("IDENT_SPECIALISE", "1").strip().lower() not in ("0", "off", "no", "false")


def _module_path(text: str) -> Path:
    digest = hashlib.sha256(text.encode()).hexdigest()[:20]
    folder = cache_dir()
    path = folder / f"ident_pack_{digest}.py"
    try:
        folder.mkdir(parents=True, exist_ok=True)
        if not path.exists() or path.read_text() != text:
            fd, tmp = tempfile.mkstemp(dir=folder, suffix=".tmp")
            with os.fdopen(fd, "w") as fh:
                fh.write(text)
            os.replace(tmp, path)  # atomic: another process may be writing the same kernel
    except OSError:  # no writable cache: a private folder (compiled again by the next process)
        folder = Path(tempfile.mkdtemp(prefix="ident-kernels-"))
        path = folder / f"ident_pack_{digest}.py"
        path.write_text(text)
    return path


def _import(path: Path) -> types.ModuleType:
    """Import a generated module; its explicit signature compiles it now, or loads numba's cache."""
    spec = importlib.util.spec_from_file_location(path.stem, path)
    mod = importlib.util.module_from_spec(spec)
    sys.modules[path.stem] = mod
    spec.loader.exec_module(mod)
    return mod


def kernel(text: str, wait: bool = False):
    """The compiled module of generated source `text`, or None while it is still being compiled.

    The first request writes the source to the cache and starts a helper process that compiles it
    into numba's cache, so the caller goes on with the general kernel meanwhile and no compiler
    shares its interpreter; later requests, in this process or another, import the cached result.
    Other processes that ask while it compiles wait for it rather than compile it too.
    ``wait=True`` blocks until it is ready. None also when compiling failed (a warning says why;
    the general kernel gives the same rows).
    """
    digest = hashlib.sha256(text.encode()).hexdigest()[:20]
    state = _KERNELS.get(digest, "new")
    if state == "new":
        path = _module_path(text)
        state = _KERNELS[digest] = _import(path) if _cached(path) else _start(path)
    while isinstance(state, tuple):
        proc, path, since = state
        if proc is None:  # another process compiles it
            if _cached(path):
                state = _KERNELS[digest] = _import(path)
            elif not _lock(path).exists() or time.time() - since > COMPILE_WAIT:
                state = _KERNELS[digest] = _start(path)  # it gave up or died: compile here
                if state[0] is None:  # and a third process took over meanwhile
                    state = _KERNELS[digest] = (None, path, time.time())
            elif wait:
                time.sleep(0.2)
            else:
                break
            continue
        if wait:
            proc.wait()
        if proc.poll() is None:
            break
        err = proc.stderr.read().decode(errors="replace") if proc.stderr else ""
        if proc.stderr:
            proc.stderr.close()
        try:
            _lock(path).unlink()
        except OSError:
            pass
        if proc.returncode != 0:
            errors = [ln.strip() for ln in err.splitlines() if ln.split(":")[0].strip().endswith("Error")]
            why = errors[-1] if errors else f"exit status {proc.returncode}"
            warnings.warn(f"compiling the specialised kernel {path} failed ({why}); the general kernel is used", RuntimeWarning, stacklevel=2)
            state = _KERNELS[digest] = None
        else:
            state = _KERNELS[digest] = _import(path)
    return None if isinstance(state, tuple) else state


#: Seconds a process waits for another one's compilation before it compiles the kernel itself.
COMPILE_WAIT = 300.0


def _lock(path: Path) -> Path:
    return path.with_suffix(".compiling")


def _start(path: Path):
    """Start the helper that compiles `path`, unless another process already does (its lock file)."""
    lock = _lock(path)
    for _ in range(2):
        try:
            os.close(os.open(lock, os.O_CREAT | os.O_EXCL | os.O_WRONLY))
            break
        except FileExistsError:
            try:
                stale = time.time() - lock.stat().st_mtime > COMPILE_WAIT
                if stale:  # left by a process that died while compiling
                    lock.unlink()
                    continue
            except OSError:
                continue
            return (None, path, time.time())
        except OSError:
            break  # no lock possible: compile anyway
    cmd = [sys.executable, "-m", "ident.arm.specialise", str(path)]
    return (subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE), path, time.time())


def _cached(path: Path) -> bool:
    """Whether numba's cache already holds the compiled kernel of this generated file."""
    return any((path.parent / "__pycache__").glob(f"{path.stem}.rows-*.nbi"))


_POOL = None


def pack_rows(mod, q, dq, ddq, tau, signals, keep, center, centered, tsrc, ncol, out, counts, offs) -> None:
    """:func:`ident.arm.pack.pack_chunk` with the specialised kernel `mod` (same arguments and rows;
    the arm's arrays are in the kernel). With threads (:func:`ident.arm.kernels.use_threads`) the
    samples are split between Python threads: the kernel releases the interpreter lock."""
    global _POOL
    N = q.shape[0]
    rowpos = np.empty(keep.shape, dtype=np.int64)
    _pack_layout(keep, ncol, rowpos, counts, offs)
    args = (q, dq, ddq, tau, signals, keep, rowpos, center, centered, tsrc, offs, out)
    if not kernels.use_threads(N):
        mod.rows(*args, 0, N)
        return
    if _POOL is None:
        from concurrent.futures import ThreadPoolExecutor
        _POOL = ThreadPoolExecutor(max_workers=numba.get_num_threads(), thread_name_prefix="ident-pack")
    parts = numba.get_num_threads()
    cuts = [N * i // parts for i in range(parts + 1)]
    for f in [_POOL.submit(mod.rows, *args, a, b) for a, b in zip(cuts[:-1], cuts[1:])]:
        f.result()


def _compile_main(argv) -> int:
    """Helper process: import (and so compile into numba's cache) the generated module argv[0]."""
    try:
        os.nice(10)  # the fit that asked goes on meanwhile: it comes first
    except OSError:
        pass
    _import(Path(argv[0]))
    return 0


if __name__ == "__main__":
    raise SystemExit(_compile_main(sys.argv[1:]))
