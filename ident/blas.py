"""BLAS threading control for the small, many-times-repeated dense steps.

OpenBLAS parallelizes even narrow products; for the tall, few-dozen-column QR updates of the
compression and the small matrices of the excitation design its threads cost more in
synchronisation than they gain (ten times more on a busy 2-core machine). This module limits it
to one thread for a block of code and restores it afterwards.
"""

from __future__ import annotations

import contextlib
import ctypes
import sys

_BLAS_SYMBOLS = ("openblas", "scipy_openblas", "scipy_openblas64_", "openblas64_")


_CACHE: dict = {}


def _openblas_handles() -> list:
    """(get, set) thread-count functions of every OpenBLAS loaded in this process (Linux).

    Cached until more modules are imported: reading the process map costs milliseconds, and a
    new BLAS arrives only with an import."""
    key = len(sys.modules)
    if key not in _CACHE:
        _CACHE.clear()
        _CACHE[key] = _scan_handles()
    return _CACHE[key]


def _scan_handles() -> list:
    try:
        with open("/proc/self/maps") as fh:
            paths = {line.split()[-1] for line in fh if "openblas" in line.lower() and line.split()[-1].startswith("/")}
    except OSError:
        return []
    out = []
    for path in sorted(paths):
        try:
            lib = ctypes.CDLL(path)
        except OSError:
            continue
        for stem in _BLAS_SYMBOLS:
            base, suffix = (stem[:-3], "64_") if stem.endswith("64_") else (stem, "")
            get = getattr(lib, f"{base}_get_num_threads{suffix}", None)
            put = getattr(lib, f"{base}_set_num_threads{suffix}", None)
            if get is not None and put is not None:
                out.append((get, put))
                break
    return out


@contextlib.contextmanager
def single_thread_blas():
    """Run the block with OpenBLAS limited to one thread, then restore its thread count.

    Why: the QR updates here are tall and only a few dozen columns wide; OpenBLAS's threads cost
    more in synchronisation than they gain, ten times more on a busy machine. No-op where the
    library or its controls are not found.
    """
    handles = _openblas_handles()
    saved = []
    for get, put in handles:
        try:
            saved.append((put, int(get())))
            put(1)
        except Exception:  # pragma: no cover - foreign library without the expected signature
            pass
    try:
        yield
    finally:
        for put, k in saved:
            put(k)
