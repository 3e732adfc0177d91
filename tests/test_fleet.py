"""ident fleet: many simulated arms on a Dask cluster, equality with ident fit, drift flags, bad input.

The fleet comes from our closed-loop simulator (`ident.fleet.simulated.make_fleet`, which runs
`ident.simulate`) on the invented 4-joint arm tests/data/quad4.urdf: 8 arms of one description
over 6 weekly periods, each arm with its own as-built masses and friction; two arms' friction on
one joint rises by 30 % over the periods (the truth the drift flags are judged against).
"""

from __future__ import annotations

import contextlib
import datetime
import io
import json
import pickle
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

import ident
from ident.cli import main
from ident.estimation.blocks import BlockStore
from ident.estimation.compress import Compressor, compress
from ident.estimation.estimate import fit_compressed
from ident.fleet.catalog import catalog_from_pattern, period_of
from ident.fleet.drift import false_alarm_rate
from ident.fleet.simulated import FleetSpec, make_fleet
from ident.handover.paramfile import load_parameters

ROOT = Path(__file__).resolve().parents[1]
QUAD4 = ROOT / "tests" / "data" / "quad4.urdf"
#: arm index: (joint index, parameter, rise over the six periods)
DRIFT = {1: (1, "fv", 0.3), 5: (2, "fc", 0.3)}
#: watched code -> the simulated parameter it tracks
WATCHED = {"fv": "fv", "dry_pos": "fc", "dry_neg": "fc"}
JOINTS = ["yaw", "pitch", "roll", "wrist"]


def _ident(*args):
    """Run the CLI in this process: (status, stdout, stderr)."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main([str(a) for a in args])
    return status, out.getvalue(), err.getvalue()


@pytest.fixture(scope="session")
def fleet(tmp_path_factory):
    folder = tmp_path_factory.mktemp("fleet")
    made = make_fleet(folder, QUAD4, FleetSpec(arms=8, periods=6), drift=DRIFT)
    # a corrupt log among the good ones: a second log of arm03 in its fourth week
    bad = folder / "arm03" / "corrupt.parquet"
    bad.write_bytes(b"this is not a parquet file")
    cat = pd.read_csv(made["catalog"])
    row = cat[cat["arm"] == "arm03"].iloc[3].copy()
    row["log"], row["time"] = "arm03/corrupt.parquet", str(pd.Timestamp(row["time"]) + pd.Timedelta(hours=2))
    cat = pd.concat([cat, row.to_frame().T], ignore_index=True)
    cat.to_csv(made["catalog"], index=False)
    made["bad"] = bad
    made["week4"] = period_of(pd.Timestamp(row["time"]), "week")[0]
    return made


@pytest.fixture(scope="session")
def fleet_run(fleet, cluster, tmp_path_factory):
    out = tmp_path_factory.mktemp("run") / "out"
    # every option at its default (friction terms chosen from the data per arm and period)
    done = _ident("fleet", fleet["catalog"], "--out", out, "--scheduler", cluster.scheduler_address, "--json")
    return done, out


def test_drifting_arms_flagged_at_the_right_joint(fleet_run):
    (status, _, err), out = fleet_run
    assert status == 0, err
    flags = pd.read_csv(out / "flags.csv")
    hits = {(r.arm, r.joint, WATCHED[r.parameter]) for r in flags.itertuples()}
    # the truth set by the simulation: arm02 pitch viscous, arm06 roll Coulomb, both +30 % (a
    # Coulomb rise shows in the dry-friction level at speed, in either direction)
    for a, (j, code, _) in DRIFT.items():
        arm = f"arm{a + 1:02d}"
        assert (arm, JOINTS[j], code) in hits, (arm, flags)
        f = flags[(flags["arm"] == arm) & (flags["joint"] == JOINTS[j]) & (flags["parameter"].map(WATCHED) == code)].iloc[0]
        assert f["change"] > 0 and f["sigmas"] > 4 and f["date"] and f["period"]
    truth = {(f"arm{a + 1:02d}", JOINTS[j], code) for a, (j, code, _) in DRIFT.items()}
    assert len(hits - truth) <= 1, flags


def test_corrupt_log_reported_by_name_and_the_rest_fitted(fleet, fleet_run):
    (status, stdout, err), out = fleet_run
    assert status == 0
    assert "corrupt.parquet" in err
    summary = json.loads(stdout)
    assert [f["name"] for f in summary["failures"]] == [str(fleet["bad"])]
    table = pd.read_parquet(out / "fleet.parquet")
    # every arm and period was fitted, arm03's fourth week from its one good log
    assert table[["arm", "period"]].drop_duplicates().shape[0] == 8 * 6
    wk = table[(table["arm"] == "arm03") & (table["period"] == fleet["week4"])]
    assert not wk.empty and set(wk["logs"]) == {1}
    assert {"estimate", "std", "samples", "condition", "residual_rms", "blocks"} <= set(table.columns)
    assert (table["uncertainty"] == "blocks").all() and np.all(table["std"] > 0)
    failures = pd.read_csv(out / "failures.csv")
    assert failures["name"].tolist() == [str(fleet["bad"])]


def test_outputs_parameter_files_and_report(fleet, fleet_run):
    _, out = fleet_run
    robot = ident.load_robot(QUAD4)
    table = pd.read_parquet(out / "fleet.parquet")
    for arm in fleet["arms"]:
        ps = load_parameters(out / "params" / f"{arm}.yaml", robot)
        last = table[table["arm"] == arm].sort_values("period_start")["period"].iloc[-1]
        rows = table[(table["arm"] == arm) & (table["period"] == last)].set_index("parameter")
        np.testing.assert_allclose([rows.loc[n, "estimate"] for n in ps.base.names], ps.base.values, rtol=1e-12)
    # the latest viscous friction of a steady arm lies near its simulated truth (within 5 sigma)
    truth = fleet["truth"]["arm01"][-1]["joint_params"]["fv"]
    last = table[table["arm"] == "arm01"].sort_values("period_start")["period"].iloc[-1]
    for j, name in enumerate(JOINTS):
        r = table[(table["arm"] == "arm01") & (table["period"] == last) & (table["parameter"] == f"{name}.fv")].iloc[0]
        assert abs(r["estimate"] - truth[j]) < 5 * r["std"], (name, r["estimate"], truth[j], r["std"])
    html = (out / "report.html").read_text()
    assert html.count("data:image/png;base64,") >= 2 and "http://" not in html and "https://" not in html
    assert "arm02" in html and "Flagged arms" in html


def test_fleet_equals_ident_fit(tmp_path, cluster):
    # one arm, one period of two logs, the fleet's defaults (terms auto, consistent fit, block
    # jackknife) on an existing cluster; the reference is `ident fit` on the same logs
    made = make_fleet(tmp_path / "solo", QUAD4, FleetSpec(arms=1, periods=1, logs_per_period=2, seed=3))
    out = tmp_path / "out"
    status, _, err = _ident("fleet", made["catalog"], "--out", out, "--scheduler", cluster.scheduler_address, "--quiet")
    assert status == 0, err
    cat = pd.read_csv(made["catalog"])
    logs = [str(tmp_path / "solo" / p) for p in cat["log"]]
    ref = tmp_path / "ref.yaml"
    assert main(["fit", str(QUAD4), *logs, "--excitation", str(tmp_path / "solo" / "coefficients.yaml"), "--out", str(ref), "--quiet"]) == 0
    a = yaml.safe_load(ref.read_text())
    b = yaml.safe_load((out / "params" / "arm01.yaml").read_text())
    ra = {r["name"]: r for r in a["base_parameters"]}
    rb = {r["name"]: r for r in b["base_parameters"]}
    assert ra.keys() == rb.keys() and a["method"] == b["method"]
    for n in ra:
        np.testing.assert_allclose(rb[n]["value"], ra[n]["value"], rtol=1e-10, atol=0)
        np.testing.assert_allclose(rb[n]["std"], ra[n]["std"], rtol=1e-10, atol=0)
    assert a["links"] == b["links"] and a["joints"] == b["joints"]
    table = pd.read_parquet(out / "fleet.parquet").set_index("parameter")
    np.testing.assert_allclose([table.loc[n, "estimate"] for n in ra], [ra[n]["value"] for n in ra], rtol=1e-10)


def test_compressed_state_travels_and_merges(tmp_path):
    # pickling (how Dask ships it) keeps every bit and drops the kernel's megabyte buffers
    robot = ident.load_robot(QUAD4)
    rng = np.random.default_rng(5)
    t = np.arange(3000) * 0.01
    q = 0.6 * np.sin(np.outer(t, [0.7, 1.1, 1.6, 2.3]) + rng.uniform(0, 6, 4))
    dq = 0.6 * np.cos(np.outer(t, [0.7, 1.1, 1.6, 2.3])) * [0.7, 1.1, 1.6, 2.3]
    ddq = -q * np.array([0.7, 1.1, 1.6, 2.3]) ** 2
    terms = ("fv", "fc", "ia")
    pi = np.concatenate([robot.prior.ravel(), np.tile([0.3, 0.5, 0.02], robot.n)])
    tau = ident.predict(robot, q, dq, ddq, pi, terms) + 0.05 * rng.standard_normal(q.shape)
    one = compress(robot, (q, dq, ddq, tau), terms, block=20)
    blob = pickle.dumps(one)
    tri_bytes = sum(T.nbytes for T in one.triangles) + sum(T.nbytes for blk in one.blocks.blocks for T in blk)
    assert len(blob) < 1.1 * tri_bytes + 50_000  # the triangles and little else
    back = pickle.loads(blob)
    for A, B in zip(one.triangles, back.triangles):
        np.testing.assert_array_equal(A, B)
    # two halves merged equal one pass (up to rounding), blocks grouped as one pass groups them
    h = 1500
    parts = [Compressor(robot, terms, max_blocks=10**6).add(q[s], dq[s], ddq[s], tau[s], block=20) for s in (slice(0, h), slice(h, None))]
    two = Compressor(robot, terms).merge(parts[0]).merge(parts[1])  # the cap applied block by block, as in one pass
    merged = fit_compressed(two, "ols")
    ref = fit_compressed(one, "ols")
    assert len(two.blocks) == len(one.blocks) and [r.sum() for r in two.blocks.rows] == [r.sum() for r in one.blocks.rows]
    np.testing.assert_allclose(merged.beta, ref.beta, rtol=1e-9)
    np.testing.assert_allclose(merged.std, ref.std, rtol=1e-8)
    # against numpy's least squares on the stacked base regressor (an outside reference)
    bp = ident.base_parameters(robot, terms)
    Y = ident.regressor(robot, q, dq, ddq, terms)[..., bp.independent]  # Y pi = Y_b beta
    beta = np.linalg.lstsq(Y.reshape(-1, bp.n_base), tau.reshape(-1), rcond=None)[0]
    np.testing.assert_allclose(ref.beta, beta, rtol=1e-7, atol=1e-9)


def test_block_store_extend_groups_like_appends():
    # appending 150 blocks one by one, or 70 then a store of 80, gives the same grouping
    one, a, b = BlockStore(64), BlockStore(64), BlockStore(10**6)
    for k in range(150):
        one.append([np.eye(2) * (k + 1)], [k + 1])
        (a if k < 70 else b).append([np.eye(2) * (k + 1)], [k + 1])
    a.extend(b)
    assert len(a) == len(one) and [int(r[0]) for r in a.rows] == [int(r[0]) for r in one.rows]


def test_periods_and_pattern(tmp_path):
    # ISO weeks as Python's datetime counts them (standard library reference)
    for day in ("2026-01-01", "2026-03-05", "2026-12-31", "2027-01-03"):
        d = datetime.date.fromisoformat(day)
        y, w, wd = d.isocalendar()
        label, start = period_of(pd.Timestamp(day), "week")
        assert label == f"{y:04d}-W{w:02d}" and start.date() == d - datetime.timedelta(days=wd - 1)
    assert period_of(pd.Timestamp("2026-03-05 17:00"), "month") == ("2026-03", pd.Timestamp("2026-03-01"))
    assert period_of(pd.Timestamp("2026-03-05 17:00"), "day")[0] == "2026-03-05"
    for arm in ("a1", "b2"):
        (tmp_path / arm).mkdir()
        for day in ("2026-02-02", "2026-02-09"):
            (tmp_path / arm / f"{day}.parquet").write_bytes(b"")
    entries = catalog_from_pattern(str(tmp_path / "{arm}" / "{date}.parquet"), str(QUAD4))
    assert sorted((e.arm, str(e.time.date())) for e in entries) == [("a1", "2026-02-02"), ("a1", "2026-02-09"),
                                                                    ("b2", "2026-02-02"), ("b2", "2026-02-09")]


def test_false_alarm_rate():
    # two-sided normal tail beyond 4 sigma: 6.334e-5 (handbook value, from memory); t with 19
    # degrees of freedom is heavier (scipy.stats is the reference)
    assert false_alarm_rate(4.0) == pytest.approx(6.334e-5, rel=1e-3)
    from scipy import stats

    assert false_alarm_rate(4.0, 19) == pytest.approx(2 * stats.t.sf(4.0, 19)) and false_alarm_rate(4.0, 19) > 5e-4


# -- bad input: one line, exit 2, no output -------------------------------------------------------


def _bad(capsys, tmp_path, *args):
    out = tmp_path / "out"
    status = main(["fleet", *map(str, args), "--out", str(out)])
    err = capsys.readouterr().err.strip()
    assert status == 2 and len(err.splitlines()) == 1 and err.startswith("ident fleet: error:")
    assert not out.exists()
    return err


def _catalog(tmp_path, rows, columns=("arm", "time", "log", "description")):
    p = tmp_path / "cat.csv"
    pd.DataFrame(rows, columns=list(columns)).to_csv(p, index=False)
    return p


def test_missing_catalog_column(capsys, tmp_path):
    p = _catalog(tmp_path, [["a1", "2026-01-05", "x.parquet"]], ("arm", "time", "log"))
    assert "'description'" in _bad(capsys, tmp_path, p)


def test_missing_log_file(capsys, tmp_path):
    p = _catalog(tmp_path, [["a1", "2026-01-05", "nowhere.parquet", str(QUAD4)]])
    err = _bad(capsys, tmp_path, p)
    assert "nowhere.parquet" in err and "row 2" in err


def test_missing_catalog(capsys, tmp_path):
    assert "catalog not found" in _bad(capsys, tmp_path, tmp_path / "none.csv")


def test_bad_period(capsys, tmp_path):
    p = _catalog(tmp_path, [["a1", "2026-01-05", "x.parquet", str(QUAD4)]])
    assert "--per" in _bad(capsys, tmp_path, p, "--per", "fortnight")


def test_bad_time(capsys, tmp_path):
    (tmp_path / "x.parquet").write_bytes(b"")
    p = _catalog(tmp_path, [["a1", "last tuesday", "x.parquet", str(QUAD4)]])
    assert "last tuesday" in _bad(capsys, tmp_path, p)


def test_unreachable_scheduler(capsys, tmp_path):
    (tmp_path / "x.parquet").write_bytes(b"")
    p = _catalog(tmp_path, [["a1", "2026-01-05", "x.parquet", str(QUAD4)]])
    err = _bad(capsys, tmp_path, p, "--scheduler", "tcp://127.0.0.1:9", "--connect-timeout", "2")
    assert "tcp://127.0.0.1:9" in err and "cannot reach" in err


def test_fleet_with_locked_joints_equals_ident_fit(tmp_path, cluster):
    # a 7-joint arm with a two-finger hand (example-robot-data's Panda): the logs carry the arm's
    # joints only, so the fleet, as `ident fit`, must lock the fingers; the reference is `ident fit`
    # with the same --lock on the same logs
    from conftest import PANDA, PANDA_FINGERS_LOCKED, erd_path

    urdf = erd_path(PANDA)
    spec = FleetSpec(arms=1, periods=1, period=3.0, harmonics=2, cycles=3, seed=4)
    made = make_fleet(tmp_path / "hands", urdf, spec, selection={"locked": PANDA_FINGERS_LOCKED})
    lock = ",".join(f"{k}={v}" for k, v in PANDA_FINGERS_LOCKED.items())
    log = str(tmp_path / "hands" / pd.read_csv(made["catalog"])["log"].iloc[0])
    excitation = str(tmp_path / "hands" / "coefficients.yaml")
    ref = tmp_path / "ref.yaml"
    assert main(["fit", str(urdf), log, "--lock", lock, "--excitation", excitation, "--terms", "fv,fc", "--out", str(ref), "--quiet"]) == 0
    out = tmp_path / "out"
    status, _, err = _ident("fleet", made["catalog"], "--lock", lock, "--terms", "fv,fc", "--out", out,
                            "--scheduler", cluster.scheduler_address, "--quiet")
    assert status == 0, err
    a = yaml.safe_load(ref.read_text())
    b = yaml.safe_load((out / "params" / "arm01.yaml").read_text())
    assert b["context"]["locked"] == PANDA_FINGERS_LOCKED and len(b["joints"]) == 7
    ra = {r["name"]: r["value"] for r in a["base_parameters"]}
    rb = {r["name"]: r["value"] for r in b["base_parameters"]}
    assert ra.keys() == rb.keys()
    np.testing.assert_allclose([rb[n] for n in ra], [ra[n] for n in ra], rtol=1e-10, atol=0)
    # without the lock the description itself is refused before any work (its second finger
    # mimics the first), in one line that names the joint and says what to do
    status, _, err = _ident("fleet", made["catalog"], "--terms", "fv,fc", "--out", tmp_path / "none", "--scheduler", cluster.scheduler_address,
                            "--quiet")
    assert status == 2 and "panda_finger_joint2" in err and "lock it" in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "none").exists()
    # a lock on a joint the description does not have is a bad input, refused before any work
    status, _, err = _ident("fleet", made["catalog"], "--lock", f"{lock},wrist9=0", "--out", tmp_path / "bad", "--scheduler", cluster.scheduler_address)
    assert status == 2 and "wrist9" in err and not (tmp_path / "bad").exists()
