"""The parameter file: layout, round trip, validation.

External reference: the per-link mass, COM and inertia at the COM written for a URDF's own values
are compared with pinocchio's reading of the same URDF (`pin.buildModelFromUrdf`).
"""

from __future__ import annotations

import json

import numpy as np
import pinocchio as pin
import pytest
import yaml
from conftest import PANDA, PANDA_FINGERS_LOCKED, UR5, erd_path

import ident
from ident.arm.parameters import FORMAT, BaseTable, parameter_set_from_vector
from ident.cli import main
from ident.errors import DataError, IdentError
from ident.handover.paramfile import load_parameters, save_parameters


@pytest.fixture(scope="module")
def ur5():
    return ident.load_robot(erd_path(UR5))


def _write(tmp_path, doc, name="p.yaml"):
    path = tmp_path / name
    path.write_text(yaml.safe_dump(doc, sort_keys=False))
    return path


def test_urdf_values_match_pinocchio(ur5, tmp_path):
    # Reference: pinocchio's Inertia (mass, lever = COM, inertia about the COM) of each joint's body.
    path = tmp_path / "ur5.yaml"
    save_parameters(path, parameter_set_from_vector(ur5, ur5.prior.reshape(-1)))
    doc = yaml.safe_load(path.read_text())
    assert doc["format"] == FORMAT
    model = pin.buildModelFromUrdf(str(erd_path(UR5)))
    for i, body in enumerate(ur5.body_names):
        ref = model.inertias[i + 1]
        link = doc["links"][body]
        assert link["joint"] == ur5.joint_names[i]
        assert link["mass"] == pytest.approx(ref.mass, rel=1e-12)
        np.testing.assert_allclose(link["com"], ref.lever, atol=1e-12)
        I = link["inertia_com"]
        got = np.array([[I["xx"], I["xy"], I["xz"]], [I["xy"], I["yy"], I["yz"]], [I["xz"], I["yz"], I["zz"]]])
        np.testing.assert_allclose(got, ref.inertia, atol=1e-12)
        assert link["physical"] is True


def test_roundtrip_with_terms_base_and_metadata(tmp_path):
    robot = ident.load_robot(erd_path(PANDA), locked=PANDA_FINGERS_LOCKED)
    rng = np.random.default_rng(0)
    terms = ("fv", "fc", "fo", "ia")
    vec = np.concatenate([robot.prior.reshape(-1), rng.uniform(0.1, 2.0, robot.n * len(terms))])
    base = BaseTable(["a.m", "b.zzR"], [1.5, 0.25], [0.01, float("nan")], ["a.m", "b.zzR = b.zz + 0.1*c.m"])
    ps = parameter_set_from_vector(robot, vec, terms, base=base, method={"name": "wls"}, data={"files": ["x.csv"], "samples": 10},
                                   diagnostics={"condition_number": np.float64(12.5), "residual_rms": {"j": 0.1}})
    path = tmp_path / "panda.yaml"
    save_parameters(path, ps)
    back = load_parameters(path, robot)
    np.testing.assert_allclose(back.vector(), vec, rtol=1e-13, atol=1e-16)
    assert back.terms == terms and back.joint_names == robot.joint_names
    assert back.base.names == ["a.m", "b.zzR"] and np.isnan(back.base.std[1])
    assert back.base.relations[1] == "b.zzR = b.zz + 0.1*c.m"
    assert back.method == {"name": "wls"} and back.data["samples"] == 10
    assert back.diagnostics["condition_number"] == 12.5


def test_nonphysical_link_stored_in_first_moment_form(ur5, tmp_path):
    pi = ur5.prior.copy()
    pi[2, 0] = -0.5  # negative mass: no COM exists
    path = tmp_path / "bad.yaml"
    save_parameters(path, parameter_set_from_vector(ur5, pi.reshape(-1)))
    doc = yaml.safe_load(path.read_text())
    link = doc["links"][ur5.body_names[2]]
    assert "first_moment" in link and "inertia_origin" in link and link["physical"] is False
    back = load_parameters(path, ur5)
    np.testing.assert_allclose(back.inertial, pi, rtol=1e-14, atol=1e-16)
    assert list(back.physical()) == [True, True, False, True, True, True]


def test_reorders_to_the_robot(ur5, tmp_path):
    path = tmp_path / "p.yaml"
    save_parameters(path, parameter_set_from_vector(ur5, ur5.prior.reshape(-1)))
    doc = yaml.safe_load(path.read_text())
    doc["joints"] = list(reversed(doc["joints"]))
    back = load_parameters(_write(tmp_path, doc, "rev.yaml"), ur5)
    np.testing.assert_allclose(back.inertial, ur5.prior, atol=1e-15)


@pytest.mark.parametrize(
    "edit, message",
    [
        (lambda d: d.update(colour="red"), "unknown key 'colour'"),
        (lambda d: d.pop("links"), "missing key 'links'"),
        (lambda d: d.update(format="ident-parameters/9"), "format 'ident-parameters/9' is not supported"),
        (lambda d: d["links"]["forearm_link"].update(mass=float("nan")), "links.forearm_link.mass: value is not finite"),
        (lambda d: d["links"]["forearm_link"].update(com=[0.0, 0.1]), "links.forearm_link.com: expected a list of 3 numbers"),
        (lambda d: d["links"]["forearm_link"].update(mass="heavy"), "links.forearm_link.mass: 'heavy' is not a number"),
        (lambda d: d["links"]["forearm_link"]["inertia_com"].pop("yz"), "inertia_com: expected the six entries"),
        (lambda d: d["links"]["forearm_link"].update(joint="elbow"), "links.forearm_link.joint: 'elbow' is not one of the listed joints"),
        (lambda d: d["joint_terms"]["elbow_joint"].pop("fc"), "joint_terms.elbow_joint.fc: missing"),
        (lambda d: d["joint_terms"]["elbow_joint"].update(ia=0.1), "joint_terms.elbow_joint.ia: not a declared term"),
        (lambda d: d.update(terms=["fv", "spring"]), "unknown joint term 'spring'"),
        (lambda d: d["links"].pop("forearm_link"), "'links' must map 6 link names"),
    ],
)
def test_malformed_files_name_the_key(ur5, tmp_path, edit, message):
    path = tmp_path / "p.yaml"
    save_parameters(path, parameter_set_from_vector(ur5, np.concatenate([ur5.prior.reshape(-1), np.ones(12)]), ("fv", "fc")))
    doc = yaml.safe_load(path.read_text())
    edit(doc)
    bad = _write(tmp_path, doc, "bad.yaml")
    with pytest.raises(DataError) as err:
        load_parameters(bad, ur5)
    assert message in str(err.value) and str(bad) in str(err.value)


def test_file_of_another_robot_is_refused(ur5, tmp_path):
    panda = ident.load_robot(erd_path(PANDA), locked=PANDA_FINGERS_LOCKED)
    path = tmp_path / "panda.yaml"
    save_parameters(path, parameter_set_from_vector(panda, panda.prior.reshape(-1)))
    with pytest.raises(DataError, match="does not belong to this robot model.*shoulder_pan_joint"):
        load_parameters(path, ur5)


def test_not_yaml_and_missing(tmp_path, ur5):
    p = tmp_path / "x.yaml"
    p.write_text("links: [unclosed\n")
    with pytest.raises(DataError, match="malformed YAML"):
        load_parameters(p)
    with pytest.raises(DataError, match="not found"):
        load_parameters(tmp_path / "nope.yaml")
    with pytest.raises(IdentError, match="expected 60 values"):
        parameter_set_from_vector(ur5, np.zeros(59))


# -- a parameter file from a description, and the context it carries --------------------------


def test_prior_from_the_ur5_description_reads_back_exactly_and_simulates(tmp_path, capsys):
    from conftest import UR5, erd_path

    path = erd_path(UR5)
    robot = ident.load_robot(path)
    out = tmp_path / "ur5_prior.yaml"
    assert main(["prior", str(path), "--term", "fv=0.5", "--term", "shoulder_pan_joint.fc=1.5", "--out", str(out), "--quiet"]) == 0
    ps = ident.load_parameters(out, robot)
    # the description's values (as our URDF reader merges them; pin agrees with that reader in test_dynamics_reference)
    assert np.allclose(ps.inertial, robot.prior, rtol=1e-12, atol=1e-15)
    assert ps.joint_params["fv"].tolist() == [0.5] * 6 and ps.joint_params["fc"][0] == 1.5
    assert ps.context["locked"] == {} and ps.context["gravity"] == [0.0, 0.0, -9.81]
    # ident simulate takes it as the truth
    traj = tmp_path / "traj.csv"
    t = np.arange(200) / 100.0
    cols = {"time": t}
    for k, j in enumerate(robot.joint_names):
        cols[f"{j}.q"] = 0.2 * np.sin(2 * np.pi * 0.5 * t + k)
    import pandas as pd

    pd.DataFrame(cols).to_csv(traj, index=False)
    log = tmp_path / "sim.csv"
    assert main(["simulate", str(path), "--trajectory", str(traj), "--truth", str(out), "--out", str(log), "--quiet"]) == 0
    assert log.exists()


def test_context_is_taken_from_the_file_and_a_conflicting_option_is_refused(tmp_path, capsys):
    from conftest import PANDA, PANDA_FINGERS_LOCKED, erd_path

    path = erd_path(PANDA)
    locks = ",".join(f"{k}={v}" for k, v in PANDA_FINGERS_LOCKED.items())
    params = tmp_path / "panda.yaml"
    assert main(["prior", str(path), "--lock", locks, "--out", str(params), "--quiet"]) == 0
    # export needs no --lock: the file says where the fingers were
    out = tmp_path / "panda.urdf"
    assert main(["export", str(params), "--urdf", str(path), "--out", str(out), "--quiet"]) == 0
    # the same lock is accepted, another position is refused naming both values
    assert main(["export", str(params), "--urdf", str(path), "--lock", locks, "--out", str(out), "--quiet"]) == 0
    finger = next(iter(PANDA_FINGERS_LOCKED))
    bad = tmp_path / "bad.urdf"
    assert main(["export", str(params), "--urdf", str(path), "--lock", f"{finger}=0.035", "--out", str(bad)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "0.035" in err and f"{PANDA_FINGERS_LOCKED[finger]:g}" in err and not bad.exists()
    assert main(["export", str(params), "--urdf", str(path), "--gravity", "0,0,-9.7", "--out", str(bad)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "-9.7" in err and "-9.81" in err


def test_a_fit_records_its_conditioning_and_check_refuses_another(tmp_path, capsys):
    from pathlib import Path

    demo = Path(__file__).resolve().parents[1] / "datasets_demo"
    params = tmp_path / "fit.yaml"
    assert main(["fit", str(demo / "sprout6.urdf"), str(demo / "sprout6_excite.csv"), "--period", "10", "--harmonics", "5",
                 "--cutoff", "8", "--method", "ols", "--out", str(params), "--quiet"]) == 0
    ps = ident.load_parameters(params)
    assert ps.context["conditioning"]["cutoff"] == 8.0
    held = [str(demo / "sprout6.urdf"), str(params), str(demo / "sprout6_heldout.csv"), "--period", "8", "--harmonics", "4"]
    assert main(["check", *held, "--cutoff", "5"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--cutoff 5" in err and "cutoff 8" in err
    assert main(["check", *held, "--json"]) == 0  # the file's 8 Hz is used
    out = json.loads(capsys.readouterr().out)
    assert "8 Hz" in out["noise_floor"]["method"]
