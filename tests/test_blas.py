"""The one-thread BLAS guard reaches every OpenBLAS the process has loaded (numpy and scipy each
ship their own, one of them with 64-bit integers and suffixed symbol names)."""

from __future__ import annotations

import numpy as np
import scipy.linalg

from ident.blas import _openblas_handles, single_thread_blas


def test_guard_limits_every_loaded_openblas():
    np.ones((2, 2)) @ np.ones((2, 2))
    scipy.linalg.qr(np.ones((3, 2)))
    with open("/proc/self/maps") as fh:  # what the operating system says is loaded
        paths = {line.split()[-1] for line in fh}
    libs = {p for p in paths if "openblas" in p.rsplit("/", 1)[-1].lower() and ".so" in p}
    handles = _openblas_handles()
    assert len(handles) == len(libs) >= 1
    before = [get() for get, _ in handles]
    with single_thread_blas():
        assert [get() for get, _ in handles] == [1] * len(handles)
    assert [get() for get, _ in handles] == before
