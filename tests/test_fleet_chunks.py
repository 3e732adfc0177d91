"""ident fleet on long logs: a log cut into row-range chunks that any worker reads and conditions.

One simulated 24 s log at 1 kHz of the invented 4-joint arm tests/data/quad4.urdf (our closed-loop
simulator, `ident.fleet.simulated.make_fleet`) is written as Parquet (small row groups), as CSV, as
a CSV with a corrupt cell in its third chunk, with a gap in its timestamps, and with one joint's
torque held at its effort limit for a while. The fleet runs them with the chunk length lowered to
6000 rows (4 chunks a log) on a LocalCluster of 2 workers; the reference is `ident fit` on each log.
"""

from __future__ import annotations

import contextlib
import io
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

import ident
from ident.cli import main
from ident.data.chunks import condition_chunk, read_head, settle
from ident.data.load import load_dataset
from ident.data.options import excitation_options
from ident.fleet.catalog import group_logs, read_catalog
from ident.fleet.engine import FitSettings, run_fleet, run_serial
from ident.fleet.simulated import FleetSpec, make_fleet

ROOT = Path(__file__).resolve().parents[1]
QUAD4 = ROOT / "tests" / "data" / "quad4.urdf"
CHUNK = 6000
BAD_ROW = 15_000  # data row of the corrupt cell (1-based, as the readers count), in the third chunk


@pytest.fixture(scope="module")
def logs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("long")
    made = make_fleet(folder / "sim", QUAD4, FleetSpec(arms=1, periods=1, cycles=6, control_rate=1000.0, log_rate=1000.0,
                                                       substeps=1, seed=4))
    sim = pd.read_csv(made["catalog"]).iloc[0]
    df = pd.read_parquet(folder / "sim" / sim["log"])
    paths = {"parquet": folder / "long.parquet", "csv": folder / "long.csv", "corrupt": folder / "corrupt.csv",
             "gap": folder / "gap.parquet", "clipped": folder / "clipped.parquet"}
    df.to_parquet(paths["parquet"], row_group_size=2000)
    df.to_csv(paths["csv"], index=False)
    bad = df.astype(object)
    bad.loc[BAD_ROW - 1, "pitch.tau"] = "x1.5"
    bad.to_csv(paths["corrupt"], index=False)
    gap = df.copy()
    gap.loc[12_000:, "time"] += 1.0
    gap.to_parquet(paths["gap"], row_group_size=2000)
    clip = df.copy()
    clip.loc[9_000:9_299, "yaw.tau"] = 40.0  # yaw's effort limit: samples a saturated drive would log
    clip.to_parquet(paths["clipped"], row_group_size=2000)
    excitation = folder / "sim" / "coefficients.yaml"
    cat = folder / "catalog.csv"
    pd.DataFrame([{"arm": name, "time": "2026-01-05 08:00", "log": str(p), "description": str(QUAD4), "excitation": str(excitation)}
                  for name, p in paths.items()]).to_csv(cat, index=False)
    return {"paths": paths, "catalog": cat, "excitation": excitation}


def _settings(logs, **kw):
    ex = excitation_options(logs["excitation"])
    return FitSettings(log_options=lambda e: dict(ex), chunk_rows=CHUNK, **kw)


def _run(logs, cluster, arms):
    from distributed import Client

    groups = [g for g in group_logs(read_catalog(logs["catalog"]), "week") if g.arm in arms]
    with Client(cluster.scheduler_address) as client:
        return run_fleet(client, groups, _settings(logs), progress=False, quiet=True)


@pytest.fixture(scope="module")
def fleet_run(logs, cluster):
    # a corrupt log among logs that fall back to the one-task path
    return _run(logs, cluster, {"corrupt", "gap", "clipped"})


@pytest.fixture(scope="module")
def solo_runs(logs, cluster):
    # one long log alone on the cluster, so both workers are free when its chunks are submitted
    return {fmt: _run(logs, cluster, {fmt}) for fmt in ("parquet", "csv")}


def _ident_fit(log, excitation, out: Path):
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
        assert main(["fit", str(QUAD4), str(log), "--excitation", str(excitation), "--out", str(out), "--quiet"]) == 0
    return {r["name"]: r for r in yaml.safe_load(out.read_text())["base_parameters"]}


def _fit_of(run, arm):
    return next(pf for (a, _), pf in run.fits.items() if a == arm).result


def test_chunks_condition_like_the_whole_log(logs):
    # the chunks' samples put end to end against load_dataset on the whole file (the reference the
    # block path is held to: 1e-9 of each signal's size; measured 3e-11 for ddq, 1e-12 or less otherwise)
    robot = ident.load_robot(QUAD4)
    opts = excitation_options(logs["excitation"])
    for fmt in ("parquet", "csv"):
        path = logs["paths"][fmt]
        head, why = read_head(path, robot, None, opts, CHUNK)
        assert why is None and head.chunks == 4
        parts = [condition_chunk(head, i) for i in range(head.chunks)]
        assert settle(head, [p.info["chunk"] for p in parts], robot) == ([], None)
        ref = load_dataset([path], robot, None, opts)
        assert head.cutoff == ref.info["cutoff"]
        for name in ("t", "q", "dq", "ddq", "tau", "dry"):
            a, b = np.concatenate([getattr(p.segments[0], name) for p in parts]), getattr(ref, name)
            assert a.shape == b.shape
            assert np.max(np.abs(a - b)) <= 1e-9 * np.max(np.abs(b)), (fmt, name)
        for name in ("slow", "stuck"):
            np.testing.assert_array_equal(np.concatenate([getattr(p.segments[0], name) for p in parts]), getattr(ref, name))


def test_chunked_fit_equals_ident_fit_and_spreads_over_workers(logs, solo_runs, tmp_path):
    for fmt in ("parquet", "csv"):
        fleet_run = solo_runs[fmt]
        assert not fleet_run.failures and not fleet_run.notes
        path = str(logs["paths"][fmt])
        # the four chunks of the one log ran on both workers of the cluster
        placed = fleet_run.placement[path]
        assert len(placed) == 4 and None not in placed and len(set(placed)) == 2, placed
        ref = _ident_fit(path, logs["excitation"], tmp_path / f"{fmt}.yaml")
        res = _fit_of(fleet_run, fmt)
        got = dict(zip(res.names, zip(res.beta, res.std)))
        assert got.keys() == ref.keys()
        # the consistent fit's trade-off stage agrees to its solver's tolerance, as with --split-logs
        # on logs read whole (measured: within 2e-6 of a std and 1.4e-8 of the largest estimate; the
        # least-squares estimates agree to 2e-10 relative); the jackknife std to 1e-9 relative
        scale = max(abs(r["value"]) for r in ref.values())
        for n, r in ref.items():
            assert abs(got[n][0] - r["value"]) <= 1e-5 * r["std"] + 1e-7 * scale, (fmt, n, got[n][0], r["value"])
            np.testing.assert_allclose(got[n][1], r["std"], rtol=1e-7)


def test_corrupt_row_in_a_chunk_named_and_others_fitted(logs, fleet_run):
    bad = str(logs["paths"]["corrupt"])
    # the log, and its period, which had no other log
    assert [f.name for f in fleet_run.failures] == [bad, "arm corrupt, period 2026-W02"]
    msg = fleet_run.failures[0].message
    # the whole-file reader's words: file, column and the file's own data row
    assert "column 'pitch.tau'" in msg and f"data row {BAD_ROW}" in msg and "x1.5" in msg, msg
    assert {a for a, _ in fleet_run.fits} == {"gap", "clipped"}


def test_fallback_logs_read_whole_and_equal_ident_fit(logs, fleet_run, tmp_path):
    # a gap (seen in the head) and clipped torques (seen only by the chunks, settled over the whole
    # log) send the log to the one-task path, which is bit for bit `ident fit` (the exact mode)
    notes = "\n".join(fleet_run.notes)
    assert f"{logs['paths']['gap']}: read and conditioned whole by one worker (not cut into chunks: a gap in the timestamps)" in notes
    assert f"{logs['paths']['clipped']}: read and conditioned whole by one worker (not cut into chunks: torques at their limit" in notes
    for name in ("gap", "clipped"):
        assert str(logs["paths"][name]) not in fleet_run.placement
        ref = _ident_fit(logs["paths"][name], logs["excitation"], tmp_path / f"{name}.yaml")
        res = _fit_of(fleet_run, name)
        np.testing.assert_allclose(res.beta, [ref[n]["value"] for n in res.names], rtol=1e-10, atol=0)
        np.testing.assert_allclose(res.std, [ref[n]["std"] for n in res.names], rtol=1e-10, atol=0)
    pf = next(pf for (a, _), pf in fleet_run.fits.items() if a == "clipped")
    assert any("at its torque limit" in w for w in pf.warnings)


def test_plain_loop_runs_the_same_chunks(logs):
    # run_serial: the same task functions; ordinary least squares shows the agreement without the
    # consistent fit's solver tolerance
    groups = [g for g in group_logs(read_catalog(logs["catalog"]), "week") if g.arm == "parquet"]
    cut = run_serial(groups, _settings(logs, method="ols", terms=("fv", "fc", "ia")))
    whole = run_serial(groups, FitSettings(method="ols", terms=("fv", "fc", "ia"), log_options=_settings(logs).log_options, chunk_rows=0))
    assert cut.placement[str(logs["paths"]["parquet"])] == [None] * 4 and not whole.placement
    a, b = _fit_of(cut, "parquet"), _fit_of(whole, "parquet")
    np.testing.assert_allclose(a.beta, b.beta, rtol=1e-8, atol=1e-10 * np.max(np.abs(b.beta)))
    np.testing.assert_allclose(a.std, b.std, rtol=1e-8)


def test_gap_seen_only_by_the_chunks_falls_back_to_the_whole_log(logs, monkeypatch, tmp_path):
    # the head judges the first STAT_SAMPLES rows only; with that window shortened to 4000 rows the
    # gap at row 12 000 is met by a chunk, and the settling step must send the log to the one-task
    # path as the head would have (plain loop: the same task functions, in this process)
    from ident.data import chunks

    monkeypatch.setattr(chunks, "STAT_SAMPLES", 4000)
    groups = [g for g in group_logs(read_catalog(logs["catalog"]), "week") if g.arm == "gap"]
    run = run_serial(groups, _settings(logs, method="ols", terms=("fv", "fc", "ia")))
    notes = "\n".join(run.notes)
    assert f"{logs['paths']['gap']}: read and conditioned whole by one worker (not cut into chunks: 1 gap(s) in the timestamps" in notes, notes
    assert str(logs["paths"]["gap"]) not in run.placement and not run.failures
    out = tmp_path / "gap.yaml"
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
        assert main(["fit", str(QUAD4), str(logs["paths"]["gap"]), "--excitation", str(logs["excitation"]), "--method", "ols",
                     "--terms", "fv,fc,ia", "--out", str(out), "--quiet"]) == 0
    ref = {r["name"]: r["value"] for r in yaml.safe_load(out.read_text())["base_parameters"]}
    res = _fit_of(run, "gap")
    np.testing.assert_allclose(res.beta, [ref[n] for n in res.names], rtol=1e-10, atol=0)
