"""Fuzzing every reader: a mutated file either reads or is refused with the project's error type
(one line naming the file), never another exception, a hang or a raw numpy warning. Bounded
example counts keep the file to a few tens of seconds."""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from robust_kit import make_kit

import ident
from ident.errors import IdentError

FUZZ = settings(max_examples=40, deadline=None, derandomize=True, suppress_health_check=list(HealthCheck), database=None)


@pytest.fixture(scope="module")
def kit(tmp_path_factory) -> Path:
    return make_kit(tmp_path_factory.mktemp("kit"))


@pytest.fixture(scope="module")
def robot(kit):
    return ident.load_robot(kit / "arm.urdf")


# values a careless or hostile file holds in place of a number
NASTY_NUMBERS = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.integers(min_value=-(10**400), max_value=10**400),
    st.sampled_from([1e308, -1e308, 1e-320, 0, -0.0, "nan", ".inf", "1e400", "", "x", True, None]),
)
YAML_VALUES = st.recursive(
    st.one_of(NASTY_NUMBERS, st.text(max_size=8)),
    lambda inner: st.one_of(st.lists(inner, max_size=4), st.dictionaries(st.text(max_size=6), inner, max_size=4)),
    max_leaves=12,
)


def _refused_or_read(read, path: Path):
    """Run `read(path)`: it returns, or raises an IdentError whose message is one line naming the file."""
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)  # a raw numpy warning is a failure
        try:
            return read(path)
        except IdentError as exc:
            msg = str(exc)
            assert "\n" not in msg.strip() and path.name in msg, msg
            return None


def _paths_in(doc, prefix=()):
    """Every (path, leaf) of a parsed YAML document, to pick one leaf to replace."""
    if isinstance(doc, dict):
        for k, v in doc.items():
            yield from _paths_in(v, prefix + (k,))
    elif isinstance(doc, list):
        for i, v in enumerate(doc):
            yield from _paths_in(v, prefix + (i,))
    else:
        yield prefix


def _replace(doc, path, value):
    d = doc
    for k in path[:-1]:
        d = d[k]
    d[path[-1]] = value
    return doc


def _fuzz_yaml(kit: Path, tmp: Path, name: str, read, data):
    doc = yaml.safe_load((kit / name).read_text())
    leaves = list(_paths_in(doc))
    path = data.draw(st.sampled_from(leaves))
    value = data.draw(YAML_VALUES)
    bad = tmp / f"fuzz_{name}"
    try:
        text = yaml.safe_dump(_replace(doc, path, value), sort_keys=False)
    except (OverflowError, ValueError, yaml.YAMLError):
        return
    bad.write_text(text)
    _refused_or_read(read, bad)


@FUZZ
@given(data=st.data())
def test_fuzz_dh_file(kit, tmp_path_factory, data):
    _fuzz_yaml(kit, tmp_path_factory.mktemp("f"), "arm_dh.yaml", ident.load_robot, data)


@FUZZ
@given(data=st.data())
def test_fuzz_parameter_file(kit, robot, tmp_path_factory, data):
    _fuzz_yaml(kit, tmp_path_factory.mktemp("f"), "params.yaml", lambda p: ident.load_parameters(p, robot), data)


@FUZZ
@given(data=st.data())
def test_fuzz_excitation_config(kit, robot, tmp_path_factory, data):
    _fuzz_yaml(kit, tmp_path_factory.mktemp("f"), "excite.yaml", lambda p: ident.load_excitation_config(p, robot), data)


PROFILE = {"log_profile": 1, "time": {"column": "time", "unit": "s"}, "units": {"q": "rad"},
           "joints": {"base_yaw": {"sign": 1, "q": {"offset": 0.0}, "tau": {"limit": 45.0}}}}


@FUZZ
@given(data=st.data())
def test_fuzz_profile(kit, tmp_path_factory, data):
    tmp = tmp_path_factory.mktemp("f")
    (tmp / "profile.yaml").write_text(yaml.safe_dump(PROFILE))
    _fuzz_yaml(tmp, tmp, "profile.yaml", ident.load_profile, data)


@FUZZ
@given(text=st.text(max_size=400))
def test_fuzz_yaml_text(kit, tmp_path_factory, text):
    """Arbitrary text as a DH file: refused in one line (or read, when it happens to be valid)."""
    bad = tmp_path_factory.mktemp("f") / "fuzz.yaml"
    bad.write_text(text)
    _refused_or_read(ident.load_robot, bad)


URDF_ATTRS = [("mass", "value"), ("inertia", "ixx"), ("inertia", "iyz"), ("origin", "xyz"), ("origin", "rpy"),
              ("limit", "lower"), ("limit", "upper"), ("limit", "effort"), ("limit", "velocity"), ("axis", "xyz")]


@FUZZ
@given(data=st.data())
def test_fuzz_urdf(kit, tmp_path_factory, data):
    import re

    text = (kit / "arm.urdf").read_text()
    tag, attr = data.draw(st.sampled_from(URDF_ATTRS))
    spots = [m.span(1) for m in re.finditer(rf'<{tag}\b[^>]*\b{attr}="([^"]*)"', text)]
    a, b = data.draw(st.sampled_from(spots))
    value = data.draw(st.one_of(st.text(alphabet="0123456789.eE+-naif ", max_size=12), NASTY_NUMBERS.map(str)))
    value = value.replace('"', "").replace("<", "").replace("&", "")
    bad = tmp_path_factory.mktemp("f") / "fuzz.urdf"
    bad.write_text(text[:a] + value + text[b:])
    _refused_or_read(ident.load_robot, bad)


CELLS = st.one_of(st.sampled_from(["nan", "inf", "-inf", "1e300", "-1e308", "", "x", "1e400", "0x10", "1,5"]),
                  st.floats(allow_nan=True, allow_infinity=True).map(repr))


def _fuzz_log(kit, robot, tmp, data, suffix):
    import pandas as pd

    df = pd.read_csv(kit / "run.csv")
    n = data.draw(st.integers(1, 3))
    df = df.astype(object)
    for _ in range(n):
        row = data.draw(st.integers(0, len(df) - 1))
        col = data.draw(st.sampled_from(list(df.columns)))
        df.iat[row, df.columns.get_loc(col)] = data.draw(CELLS)
    bad = tmp / f"fuzz{suffix}"
    if suffix == ".csv":
        df.to_csv(bad, index=False)
    else:
        df.astype(str).to_parquet(bad) if data.draw(st.booleans()) else df.apply(pd.to_numeric, errors="coerce").to_parquet(bad)
    _refused_or_read(lambda p: ident.read_logs([p], robot=robot), bad)


@FUZZ
@given(data=st.data())
def test_fuzz_csv_log(kit, robot, tmp_path_factory, data):
    _fuzz_log(kit, robot, tmp_path_factory.mktemp("f"), data, ".csv")


@FUZZ
@given(data=st.data())
def test_fuzz_parquet_log(kit, robot, tmp_path_factory, data):
    _fuzz_log(kit, robot, tmp_path_factory.mktemp("f"), data, ".parquet")


def test_alias_of_a_scalar_still_reads(tmp_path):
    """Only aliases of mappings and lists are refused: a repeated scalar cannot expand."""
    from ident.fileio import read_yaml

    p = tmp_path / "ok.yaml"
    p.write_text("a: &x 1.5\nb: *x\n")
    assert read_yaml(p, "file") == {"a": 1.5, "b": 1.5}
    assert np.isclose(read_yaml(p, "file")["b"], 1.5)
