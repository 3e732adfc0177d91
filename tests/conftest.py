"""Shared test helpers: where the reference robot descriptions live, and common robots."""

from __future__ import annotations

import importlib.metadata
import os
import tempfile
from pathlib import Path

import pytest

import ident


def erd_root() -> Path:
    """Folder of the URDFs shipped by the `example-robot-data` package (reference data)."""
    dist = importlib.metadata.distribution("example-robot-data")
    return Path(dist.locate_file("cmeel.prefix/share/example-robot-data/robots"))


def erd_path(rel: str) -> Path:
    """Path of a description shipped by `example-robot-data`, e.g. ``ur_description/urdf/ur5_robot.urdf``."""
    path = erd_root() / rel
    if not path.is_file():
        pytest.skip(f"example-robot-data does not ship {rel}")
    return path


UR5 = "ur_description/urdf/ur5_robot.urdf"
PANDA = "panda_description/urdf/panda.urdf"
PANDA_FINGERS_LOCKED = {"panda_finger_joint1": 0.02, "panda_finger_joint2": 0.02}


@pytest.fixture(scope="session")
def ur5() -> ident.Robot:
    """The 6-joint industrial arm from example-robot-data."""
    return ident.load_robot(erd_path(UR5))


@pytest.fixture(scope="session")
def panda() -> ident.Robot:
    """The 7-joint arm from example-robot-data, fingers locked."""
    return ident.load_robot(erd_path(PANDA), locked=PANDA_FINGERS_LOCKED)


@pytest.fixture(scope="session")
def cluster():
    """A Dask LocalCluster of 2 single-threaded worker processes, shared by the fleet tests."""
    from distributed import LocalCluster

    c = LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None)
    yield c
    c.close()


# Kernels specialised to an arm (ident.arm.specialise) are compiled into a cache folder: the
# suite uses a folder of its own, so it neither reads nor fills the user's cache.
os.environ.setdefault("IDENT_CACHE", tempfile.mkdtemp(prefix="ident-test-kernels-"))
