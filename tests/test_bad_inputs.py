"""Every command refuses bad input cleanly: exit 2, one stderr line naming the place, no traceback,
no new file. Table-driven: each case writes one bad file (or passes one bad option) and runs the
CLI in-process; a few go through a real subprocess."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest
import yaml
from robust_kit import assert_clean_refusal, make_kit, run_cli, snapshot

KIT_FILES = ("arm.urdf", "arm_dh.yaml", "params.yaml", "run.csv", "traj.csv", "excite.yaml", "profile.yaml")


@pytest.fixture(scope="module")
def kit(tmp_path_factory) -> Path:
    return make_kit(tmp_path_factory.mktemp("kit"))


# ---------------------------------------------------------------- how each bad file is made

def urdf(old: str, new: str, count: int = 1):
    """arm.urdf with the first `count` occurrences of `old` replaced by `new`."""
    def make(kit: Path) -> str:
        text = (kit / "arm.urdf").read_text()
        assert old in text
        return text.replace(old, new, count)
    return make


def yaml_edit(name: str, edit):
    """The kit's YAML file `name` after `edit(doc)` (which may return a replacement document)."""
    def make(kit: Path) -> str:
        doc = yaml.safe_load((kit / name).read_text())
        out = edit(doc)
        return yaml.safe_dump(doc if out is None else out, sort_keys=False)
    return make


def raw_text(name: str, transform):
    """The kit's file `name` as text after `transform(text)`."""
    return lambda kit: transform((kit / name).read_text())


def alias_bomb(top: str) -> str:
    """Nine levels of anchors, each a list of ten aliases of the one before (10^9 leaves)."""
    lines = ["a0: &a0 [x, x, x, x, x, x, x, x, x, x]"]
    for k in range(1, 10):
        lines.append(f"a{k}: &a{k} [" + ", ".join([f"*a{k - 1}"] * 10) + "]")
    return top + "\n" + "\n".join(lines) + "\n"


def deep(prefix: str, levels: int = 10000) -> str:
    return prefix + "[" * levels + "]" * levels + "\n"


def csv_cell(column: str, row: int, value: str):
    """run.csv with one cell replaced (row counted from the first data row)."""
    def transform(text: str) -> str:
        lines = text.splitlines()
        header = lines[0].split(",")
        k = header.index(column)
        cells = lines[row + 1].split(",")
        cells[k] = value
        lines[row + 1] = ",".join(cells)
        return "\n".join(lines) + "\n"
    return transform


def set_key(path, value):
    def edit(doc):
        d = doc
        for k in path[:-1]:
            d = d[k]
        d[path[-1]] = value
    return edit


# ---------------------------------------------------------------- the commands

def argv_for(command: str, k: Path, t: Path, robot=None, params=None, log=None, config=None, traj=None, profile=None):
    robot = robot or k / "arm.urdf"
    params = params or k / "params.yaml"
    log = log or k / "run.csv"
    return {
        "model": ["model", robot],
        "fit": ["fit", robot, log, "--method", "ols", "--cutoff", "0", "--quiet", "--out", t / "fit.yaml"],
        "check": ["check", robot, params, log, "--cutoff", "0", "--quiet"],
        "payload": ["payload", robot, params, log, "--cutoff", "0", "--quiet", "--out", t / "payload.yaml"],
        "simulate": ["simulate", robot, "--trajectory", traj or k / "traj.csv", "--truth", params, "--quiet", "--out", t / "sim.csv"],
        "excite": ["excite", robot, "--config", config or k / "excite.yaml", "--quiet", "--out", t / "excite_out"],
        "logs": ["logs", log, "--robot", robot] + (["--profile", profile] if profile else []),
        "export": ["export", params, "--urdf", robot, "--out", t / "identified.urdf"],
    }[command]


ROBOT_COMMANDS = ("model", "fit", "check", "payload", "simulate", "excite", "logs", "export")


@pytest.mark.parametrize("command", ROBOT_COMMANDS)
def test_the_good_inputs_pass(kit, tmp_path, capsys, command):
    """Control: with the kit's own files every command succeeds, so each refusal below is caused
    by its one bad input."""
    code, _, err = run_cli(argv_for(command, kit, tmp_path), capsys)
    assert code == 0, err

# name -> (bad URDF maker, text the one error line must hold besides the file name)
BAD_URDF = {
    "mass_inf": (urdf('<mass value="2.8"/>', '<mass value="inf"/>'), "<mass>"),
    "mass_1e308": (urdf('<mass value="2.8"/>', '<mass value="1e308"/>'), "<mass>"),
    "mass_nan": (urdf('<mass value="2.8"/>', '<mass value="nan"/>'), "<mass>"),
    "mass_text": (urdf('<mass value="2.8"/>', '<mass value="heavy"/>'), "<mass>"),
    "mass_negative": (urdf('<mass value="2.8"/>', '<mass value="-2.8"/>'), "negative mass"),
    "inertia_1e400": (urdf('ixx="0.0125"', 'ixx="1e400"'), "ixx"),
    "inertia_1e300": (urdf('ixx="0.0125" ixy="0.0002" ixz="-0.0003" iyy="0.0118"', 'ixx="1e300" ixy="0" ixz="0" iyy="1e300"'), "<inertia>"),
    "origin_two_numbers": (urdf('xyz="0.004 -0.002 0.052"', 'xyz="0.004 -0.002"'), "<origin xyz>"),
    "origin_huge": (urdf('xyz="0.004 -0.002 0.052"', 'xyz="0.004 -0.002 1e200"'), "<origin xyz>"),
    "malformed_xml": (urdf("</robot>", "</robt>"), "malformed XML"),
    "entity": (lambda k: '<?xml version="1.0"?><!DOCTYPE r [<!ENTITY a "aaaa">]><robot name="x">&a;</robot>', "unsafe XML"),
    "limit_huge": (urdf('lower="-2.967"', 'lower="-1e300"'), "<limit>"),
}

URDF_CASES = [pytest.param(cmd, name, id=f"urdf-{name}-{cmd}") for name in BAD_URDF for cmd in ROBOT_COMMANDS]


@pytest.mark.parametrize("command,name", URDF_CASES)
def test_bad_urdf(kit, tmp_path, capsys, command, name):
    make, place = BAD_URDF[name]
    bad = tmp_path / "bad.urdf"
    bad.write_text(make(kit))
    before = snapshot(kit, tmp_path)
    code, _, err = run_cli(argv_for(command, kit, tmp_path, robot=bad), capsys)
    assert_clean_refusal(code, err, "bad.urdf", before, snapshot(kit, tmp_path))
    assert place in err


BAD_DH = {
    "alias_bomb": (lambda k: alias_bomb((k / "arm_dh.yaml").read_text()), "alias"),
    "deep": (lambda k: deep("format: ident-dh/1\nname: "), "nests deeper"),
    "huge_int": (raw_text("arm_dh.yaml", lambda s: s.replace("a: 50", "a: " + "1" + "0" * 400, 1)), "joint 'waist'.a"),
    "a_1e308": (raw_text("arm_dh.yaml", lambda s: s.replace("a: 50", "a: 1.0e308", 1)), "joint 'waist'.a"),
    "mass_1e308": (raw_text("arm_dh.yaml", lambda s: s.replace("mass: 4.2", "mass: 1.0e308", 1)), "link.mass"),
    "mass_inf": (raw_text("arm_dh.yaml", lambda s: s.replace("mass: 4.2", "mass: .inf", 1)), "link.mass"),
    "inertia_1e308": (raw_text("arm_dh.yaml", lambda s: s.replace("inertia: [21000, 0, 0, 14000, 0, 19000]", "inertia: [1.0e308, 0, 0, 1.0e308, 0, 1.0e308]", 1)), "link.inertia"),
    "int_5000_digits": (raw_text("arm_dh.yaml", lambda s: s.replace("a: 50", "a: " + "7" * 5000, 1)), "malformed YAML"),
    "units_typo": (raw_text("arm_dh.yaml", lambda s: s.replace("length: mm", "length: furlong", 1)), "units.length"),
    "not_a_mapping": (lambda k: "- just\n- a list\n", "top level"),
    "gravity_huge": (raw_text("arm_dh.yaml", lambda s: s.replace("gravity: [0, 0, -9.81]", "gravity: [0, 0, -1.0e300]", 1)), "gravity"),
}

DH_CASES = [pytest.param(cmd, name, id=f"dh-{name}-{cmd}") for name in BAD_DH for cmd in ("model", "fit")]


@pytest.mark.parametrize("command,name", DH_CASES)
def test_bad_dh(kit, tmp_path, capsys, command, name):
    make, place = BAD_DH[name]
    bad = tmp_path / "bad_dh.yaml"
    bad.write_text(make(kit))
    before = snapshot(kit, tmp_path)
    code, _, err = run_cli(argv_for(command, kit, tmp_path, robot=bad), capsys)
    assert_clean_refusal(code, err, "bad_dh.yaml", before, snapshot(kit, tmp_path))
    assert place in err


BAD_PARAMS = {
    "alias_bomb": (lambda k: alias_bomb((k / "params.yaml").read_text()), "alias"),
    "deep": (lambda k: deep("format: ident-parameters/1\nrobot: "), "nests deeper"),
    "mass_1e308": (yaml_edit("params.yaml", set_key(["links", "turret", "mass"], 1e308)), "links.turret.mass"),
    "mass_inf": (yaml_edit("params.yaml", set_key(["links", "turret", "mass"], float("inf"))), "links.turret.mass"),
    "com_huge_int": (raw_text("params.yaml", lambda s: s.replace("com: [0.004, -0.002, 0.052]", "com: [" + "1" + "0" * 400 + ", 0, 0]", 1)), "links.turret.com"),
    "inertia_1e308": (yaml_edit("params.yaml", set_key(["links", "turret", "inertia_com", "xx"], 1e308)), "inertia_com.xx"),
    "fv_text": (yaml_edit("params.yaml", lambda d: d["joint_terms"]["base_yaw"].update(fv="sticky")), "joint_terms.base_yaw.fv"),
    "fv_1e300": (yaml_edit("params.yaml", lambda d: d["joint_terms"]["base_yaw"].update(fv=1e300)), "joint_terms.base_yaw.fv"),
    "format": (yaml_edit("params.yaml", set_key(["format"], "ident-parameters/9")), "format"),
    "links_missing": (yaml_edit("params.yaml", lambda d: d.pop("links")), "links"),
    "malformed": (lambda k: "format: [unclosed\n", "malformed YAML"),
}

PARAM_CASES = [pytest.param(cmd, name, id=f"params-{name}-{cmd}") for name in BAD_PARAMS for cmd in ("check", "payload", "simulate", "export")]


@pytest.mark.parametrize("command,name", PARAM_CASES)
def test_bad_parameter_file(kit, tmp_path, capsys, command, name):
    make, place = BAD_PARAMS[name]
    bad = tmp_path / "bad_params.yaml"
    bad.write_text(make(kit))
    before = snapshot(kit, tmp_path)
    code, _, err = run_cli(argv_for(command, kit, tmp_path, params=bad), capsys)
    assert_clean_refusal(code, err, "bad_params.yaml", before, snapshot(kit, tmp_path))
    assert place in err


BAD_LOGS = {
    "tau_1e300": (raw_text("run.csv", csv_cell("shoulder_pitch.tau", 5, "1e300")), "shoulder_pitch.tau"),
    "q_nan": (raw_text("run.csv", csv_cell("elbow_pitch.q", 7, "nan")), "elbow_pitch.q"),
    "q_text": (raw_text("run.csv", csv_cell("elbow_pitch.q", 7, "abc")), "elbow_pitch.q"),
    "time_back": (raw_text("run.csv", csv_cell("time", 9, "0")), "timestamp"),
    "missing_column": (raw_text("run.csv", lambda s: s.replace("wrist_roll.tau", "wrist_rol.tau", 1)), "wrist_roll"),
    "empty": (lambda k: "", "bad_log.csv"),
    "q_far_out": (raw_text("run.csv", csv_cell("base_yaw.q", 3, "-51.5")), "base_yaw"),
}

LOG_CASES = [pytest.param(cmd, name, id=f"log-{name}-{cmd}") for name in BAD_LOGS for cmd in ("fit", "logs", "check", "payload")]


@pytest.mark.parametrize("command,name", LOG_CASES)
def test_bad_log(kit, tmp_path, capsys, command, name):
    make, place = BAD_LOGS[name]
    bad = tmp_path / "bad_log.csv"
    bad.write_text(make(kit))
    before = snapshot(kit, tmp_path)
    code, _, err = run_cli(argv_for(command, kit, tmp_path, log=bad), capsys)
    assert_clean_refusal(code, err, "bad_log.csv", before, snapshot(kit, tmp_path))
    assert place in err


BAD_PROFILE = {
    "alias_bomb": (lambda k: alias_bomb("log_profile: 1"), "alias"),
    "deep": (lambda k: deep("log_profile: 1\ncolumns: "), "nests deeper"),
    "rate_bool": (lambda k: "log_profile: 1\ntime: {rate: true}\n", "time.rate"),
    "rate_1e300": (lambda k: "log_profile: 1\ntime: {rate: 1.0e300}\n", "time.rate"),
    "offset_huge": (lambda k: "log_profile: 1\njoints:\n  base_yaw:\n    q: {offset: 1.0e300}\n", "offset"),
    "unknown_key": (lambda k: "log_profile: 1\ncolour: blue\n", "colour"),
}


@pytest.mark.parametrize("name", list(BAD_PROFILE))
def test_bad_profile(kit, tmp_path, capsys, name):
    make, place = BAD_PROFILE[name]
    bad = tmp_path / "bad_profile.yaml"
    bad.write_text(make(kit))
    before = snapshot(kit, tmp_path)
    code, _, err = run_cli(argv_for("logs", kit, tmp_path, profile=bad), capsys)
    assert_clean_refusal(code, err, "bad_profile.yaml", before, snapshot(kit, tmp_path))
    assert place in err


BAD_CONFIG = {
    "rate_1e9": (yaml_edit("excite.yaml", set_key(["rate"], 1e9)), "rate"),
    "period_1e30": (yaml_edit("excite.yaml", set_key(["period"], 1e30)), "period"),
    "terms_true": (yaml_edit("excite.yaml", set_key(["terms"], True)), "terms"),
    "terms_number": (yaml_edit("excite.yaml", set_key(["terms"], -100000)), "terms"),
    "terms_unknown": (yaml_edit("excite.yaml", set_key(["terms"], "fv,zz")), "terms"),
    "seed_negative": (yaml_edit("excite.yaml", lambda d: d["optimizer"].update(seed=-1)), "optimizer.seed"),
    "harmonics_huge_int": (raw_text("excite.yaml", lambda s: s.replace("harmonics: 3", "harmonics: 1" + "0" * 400, 1)), "harmonics"),
    "starts_1e9": (yaml_edit("excite.yaml", lambda d: d["optimizer"].update(starts=10**9)), "optimizer.starts"),
    "design_samples_1e9": (yaml_edit("excite.yaml", lambda d: d["optimizer"].update(design_samples=10**9)), "optimizer.design_samples"),
    "torque_guess_1e308": (yaml_edit("excite.yaml", lambda d: d["torque_model"].update(fv=[1e308] * 6)), "torque_model"),
    "home_nan": (yaml_edit("excite.yaml", set_key(["home"], [0.0, float("nan"), 0, 0, 0, 0])), "home"),
    "alias_bomb": (lambda k: alias_bomb("period: 2.0"), "alias"),
    "deep": (lambda k: deep("period: 2.0\nhome: "), "nests deeper"),
    "budget_1e300": (yaml_edit("excite.yaml", lambda d: d["optimizer"].update(budget=1e300)), "optimizer.budget"),
}


@pytest.mark.parametrize("name", list(BAD_CONFIG))
def test_bad_excitation_config(kit, tmp_path, capsys, name):
    make, place = BAD_CONFIG[name]
    bad = tmp_path / "bad_config.yaml"
    bad.write_text(make(kit))
    before = snapshot(kit, tmp_path)
    code, _, err = run_cli(argv_for("excite", kit, tmp_path, config=bad), capsys)
    assert_clean_refusal(code, err, "bad_config.yaml", before, snapshot(kit, tmp_path))
    assert place in err


# command, extra options, text the line must hold (the option named)
BAD_OPTIONS = [
    ("simulate", ["--log-rate", "0"], "--log-rate"),
    ("simulate", ["--log-rate", "nan"], "--log-rate"),
    ("simulate", ["--log-rate", "inf"], "--log-rate"),
    ("simulate", ["--log-rate", "37"], "--log-rate"),
    ("simulate", ["--substeps", "1000000000"], "--substeps"),
    ("simulate", ["--substeps", "0"], "--substeps"),
    ("simulate", ["--seed", "-1"], "--seed"),
    ("simulate", ["--encoder-counts", "1"], "--encoder-counts"),
    ("simulate", ["--bandwidth", "nan"], "--bandwidth"),
    ("simulate", ["--torque-noise", "-1"], "--torque-noise"),
    ("simulate", ["--substeps", "ten"], "--substeps"),
    ("excite", ["--seed", "-1"], "--seed"),
    ("excite", ["--starts", "0"], "--starts"),
    ("excite", ["--starts", "1000000000"], "--starts"),
    ("excite", ["--budget", "nan"], "--budget"),
    ("excite", ["--budget", "-1"], "--budget"),
    ("excite", ["--budget", "1e300"], "--budget"),
    ("excite", ["--criterion", "best"], "--criterion"),
    ("model", ["--seed", "-1"], "--seed"),
    ("model", ["--lock", "base_yaw"], "--lock"),
    ("model", ["--gravity", "0,0"], "--gravity"),
    ("model", ["--gravity", "0,0,nan"], "--gravity"),
    ("model", ["--joints", "nosuchjoint"], "nosuchjoint"),
    ("model", ["--terms", "fv,zz"], "zz"),
    ("fit", ["--cutoff", "-1"], "cutoff"),
    ("fit", ["--cutoff", "inf"], "cutoff"),
    ("fit", ["--cutoff", "1e300"], "cutoff"),
    ("fit", ["--trim", "nan"], "trim"),
    ("fit", ["--trim", "1000"], "option trim"),  # the option that left nothing is named, not the log
    ("fit", ["--method", "consistent", "--total-mass", "1e-6"], "total mass 1e-06 kg"),  # why the solver failed, with the bound
    ("fit", ["--harmonics", "0"], "harmonics"),
    ("fit", ["--decimate", "0"], "decimate"),
    ("fit", ["--window", "5:1"], "window"),
    ("fit", ["--mass", "turret=1"], "--mass"),
    ("fit", ["--com", "turret=0,0:1,1,1"], "--com"),
    ("logs", ["--max-gap", "-3"], "max_gap"),
    ("logs", ["--slow-velocity", "1e300"], "slow_velocity"),
    ("logs", ["--period", "0"], "period"),
]


@pytest.mark.parametrize("command,extra,place", [pytest.param(c, e, p, id=f"{c}{''.join(e)}") for c, e, p in BAD_OPTIONS])
def test_bad_option(kit, tmp_path, capsys, command, extra, place):
    before = snapshot(kit, tmp_path)
    code, _, err = run_cli(argv_for(command, kit, tmp_path) + extra, capsys)
    assert_clean_refusal(code, err, place, before, snapshot(kit, tmp_path))


# an output path that is also an input is refused before anything is read or written
OVERWRITES = [
    ("fit", lambda k, t: ["fit", k / "arm.urdf", k / "run.csv", "--out", k / "run.csv"]),
    ("fit", lambda k, t: ["fit", k / "arm.urdf", k / "run.csv", "--out", k / "arm.urdf"]),
    ("fit", lambda k, t: ["fit", k / "arm.urdf", k / "run.csv", "--prior", k / "params.yaml", "--out", k / "params.yaml"]),
    ("export", lambda k, t: ["export", k / "params.yaml", "--urdf", k / "arm.urdf", "--out", k / "arm.urdf"]),
    ("export", lambda k, t: ["export", k / "params.yaml", "--out", k / "params.yaml", "--format", "yaml"]),
    ("simulate", lambda k, t: ["simulate", k / "arm.urdf", "--trajectory", k / "traj.csv", "--truth", k / "params.yaml", "--out", k / "traj.csv"]),
    ("simulate", lambda k, t: ["simulate", k / "arm.urdf", "--trajectory", k / "traj.csv", "--truth", k / "params.yaml", "--out", k / "params.yaml"]),
    ("payload", lambda k, t: ["payload", k / "arm.urdf", k / "params.yaml", k / "run.csv", "--out", k / "run.csv"]),
    ("logs", lambda k, t: ["logs", k / "run.csv", "--out", k / "run.csv"]),
    ("check", lambda k, t: ["check", k / "arm.urdf", k / "params.yaml", k / "run.csv", "--report", k / "run.csv"]),
    ("fit", lambda k, t: ["fit", k / "arm.urdf", k / "run.csv", "--out", Path(str(k / "sub" / ".." / "run.csv"))]),
]


@pytest.mark.parametrize("command,make", [pytest.param(c, m, id=f"overwrite-{c}-{i}") for i, (c, m) in enumerate(OVERWRITES)])
def test_output_equal_to_input_is_refused(kit, tmp_path, capsys, command, make):
    before = snapshot(kit, tmp_path)
    code, _, err = run_cli(make(kit, tmp_path), capsys)
    assert_clean_refusal(code, err, "is also an input", before, snapshot(kit, tmp_path))


MISSING = [
    (lambda k, t: ["model", t / "nothere.urdf"], "nothere.urdf"),
    (lambda k, t: ["fit", k / "arm.urdf", t / "nothere.csv", "--out", t / "p.yaml"], "nothere.csv"),
    (lambda k, t: ["fit", k / "arm.urdf", k / "run.csv", "--method", "ols", "--cutoff", "0", "--out", t / "nodir" / "p.yaml"], "nodir"),
    (lambda k, t: ["check", k / "arm.urdf", t / "nothere.yaml", k / "run.csv"], "nothere.yaml"),
    (lambda k, t: ["export", t / "nothere.yaml", "--out", t / "x.json"], "nothere.yaml"),
    (lambda k, t: ["excite", k / "arm.urdf", "--config", t / "nothere.yaml", "--out", t / "ex"], "nothere.yaml"),
    (lambda k, t: ["simulate", k / "arm.urdf", "--trajectory", t / "nothere.csv", "--truth", k / "params.yaml", "--out", t / "s.csv"], "nothere.csv"),
    (lambda k, t: ["logs", k / "run.csv", "--profile", t / "nothere.yaml"], "nothere.yaml"),
    (lambda k, t: ["demo", "--out", k / "run.csv"], "run.csv"),
    (lambda k, t: ["model", k / "run.csv"], "run.csv"),
]


@pytest.mark.parametrize("make,place", [pytest.param(m, p, id=f"missing-{i}") for i, (m, p) in enumerate(MISSING)])
def test_missing_or_wrong_paths(kit, tmp_path, capsys, make, place):
    before = snapshot(kit, tmp_path)
    code, _, err = run_cli(make(kit, tmp_path), capsys)
    assert_clean_refusal(code, err, place, before, snapshot(kit, tmp_path))


def test_case_count():
    """The issue asks for at least 150 bad-input cases over every command."""
    n = (len(URDF_CASES) + len(DH_CASES) + len(PARAM_CASES) + len(LOG_CASES) + len(BAD_PROFILE) + len(BAD_CONFIG)
         + len(BAD_OPTIONS) + len(OVERWRITES) + len(MISSING) + len(SUBPROCESS_CASES))
    assert n >= 150


# a handful through a real process: the console entry point, not only main()
SUBPROCESS_CASES = [
    (lambda k, t: ["model", k / "arm.urdf", "--seed", "-1"], "--seed"),
    (lambda k, t: ["fit", k / "arm.urdf", k / "run.csv", "--out", k / "run.csv"], "is also an input"),
    (lambda k, t: ["simulate", k / "arm.urdf", "--trajectory", k / "traj.csv", "--truth", k / "params.yaml", "--log-rate", "0", "--out", t / "s.csv"], "--log-rate"),
    (lambda k, t: ["excite", k / "arm.urdf", "--config", t / "bomb.yaml", "--out", t / "ex"], "alias"),
]


@pytest.mark.parametrize("make,place", [pytest.param(m, p, id=f"process-{i}") for i, (m, p) in enumerate(SUBPROCESS_CASES)])
def test_refusals_through_a_process(kit, tmp_path, make, place):
    (tmp_path / "bomb.yaml").write_text(alias_bomb("period: 2.0"))
    before = snapshot(kit, tmp_path)
    proc = subprocess.run([sys.executable, "-m", "ident", *map(str, make(kit, tmp_path))], capture_output=True, text=True, timeout=120)
    assert_clean_refusal(proc.returncode, proc.stderr, place, before, snapshot(kit, tmp_path))
    assert re.match(r"^ident \w+: error: ", proc.stderr)
