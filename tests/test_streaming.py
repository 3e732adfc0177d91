"""Long logs block by block: block-wise reading and conditioning equal the whole-log path, the fit
on a log kept on disk equals the fit in memory, and bad input in a late block is still named."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import signal

import ident
import ident.data.load as load_mod
from ident.data import conditioning as C
from ident.data import segments as seg_mod
from ident.data import streaming
from ident.data.load import load_dataset
from ident.data.spill import StoredSegment, store_dataset
from ident.errors import DataError
from ident.estimation.estimate import fit

FS = 1000.0
STATS = 15_000  # a small statistics window, so the bounded look-ahead is exercised too
OPTIONS = {"period": 10.0, "harmonics": 5, "decimate": 7}


@pytest.fixture
def small_stats(monkeypatch):
    for mod in (seg_mod, streaming, load_mod):
        monkeypatch.setattr(mod, "STAT_SAMPLES", STATS)


def _log(folder, n_rows=60_000, gap=(40_000, 40_100), bad=None):
    """A 3-joint multi-sine log (period 10 s) with a stuck stretch and a gap, as Parquet and CSV."""
    rng = np.random.default_rng(0)
    t = np.arange(n_rows) / FS
    freqs = np.array([0.1, 0.2, 0.5])
    q = np.stack([0.3 * np.sin(2 * np.pi * f * t + k) for k, f in enumerate(freqs)], axis=1)
    q[20_000:26_000, 1] = q[20_000, 1]  # joint 2 stands still for 6 s
    q += 2e-5 * rng.standard_normal(q.shape)
    tau = 20 * q + 0.05 * rng.standard_normal(q.shape)
    keep = np.ones(n_rows, dtype=bool)
    if gap:
        keep[gap[0] : gap[1]] = False
    df = pd.DataFrame({"time": t})
    for k in range(3):
        df[f"j{k}.q"] = q[:, k]
        df[f"j{k}.tau"] = tau[:, k]
    df = df[keep].reset_index(drop=True)
    if bad is not None:
        row, col = bad
        df[col] = df[col].astype(object)
        df.loc[row, col] = "oops"
    csv, pq = folder / "log.csv", folder / "log.parquet"
    df.to_csv(csv, index=False)
    if bad is None:
        df.to_parquet(pq, row_group_size=7_000)
    return pq, csv


def _same(a, b, tol):
    assert len(a.segments) == len(b.segments)
    assert a.n_samples == b.n_samples
    for sa, sb in zip(a.segments, b.segments):
        np.testing.assert_array_equal(sa.t, sb.t)
        for f in ("q", "dq", "ddq", "tau", "dry"):
            x, y = getattr(sa, f), getattr(sb, f)
            assert np.max(np.abs(x - y)) <= tol * np.max(np.abs(x)), f
        np.testing.assert_array_equal(sa.slow, sb.slow)
        np.testing.assert_array_equal(sa.stuck, sb.stuck)
    assert a.info["counts"] == b.info["counts"]
    assert a.warnings == b.warnings
    assert a.info["cutoff"] == b.info["cutoff"]
    np.testing.assert_allclose(a.info["slow_velocity"], b.info["slow_velocity"], rtol=1e-9)
    np.testing.assert_allclose(a.noise_var, b.noise_var, rtol=1e-9)


def test_block_filter_equals_scipy_on_the_whole_signal():
    # reference: scipy.signal.sosfiltfilt over the whole signal; blocks of 3000 samples, each
    # filtered with the overlap of settle_samples on both sides and the whole signal's padding
    rng = np.random.default_rng(3)
    x = np.cumsum(rng.standard_normal(40_000)) * 1e-3
    cutoff = 4.0
    sos = signal.butter(C.FILTER_ORDER, cutoff, fs=FS, output="sos")
    ref = signal.sosfiltfilt(sos, x, padtype="odd", padlen=C.pad_length(x.size, FS, cutoff))
    ov = C.settle_samples(FS, cutoff) + C.pad_length(x.size, FS, cutoff)
    out = np.empty_like(x)
    for c0 in range(0, x.size, 3000):
        c1 = min(x.size, c0 + 3000)
        w0, w1 = max(0, c0 - ov), min(x.size, c1 + ov)
        y = C.lowpass(x[w0:w1], FS, cutoff, padlen=C.pad_length(x.size, FS, cutoff))
        out[c0:c1] = y[c0 - w0 : c1 - w0]
    assert np.max(np.abs(out - ref)) <= 1e-9 * np.max(np.abs(ref))


def test_block_conditioning_equals_whole_log(tmp_path, small_stats):
    # gap (two segments), stuck stretch, decimation phase 7, statistics window shorter than the log;
    # blocks of 4000 samples, so block edges fall everywhere, including inside the stuck stretch
    pq, csv = _log(tmp_path)
    for path in (pq, csv):
        whole = load_dataset(path, options=OPTIONS, stream=False)
        assert len(whole.segments) == 2
        blocks = load_dataset(path, options=OPTIONS, stream=True, block=4000)
        assert isinstance(blocks.segments[0], StoredSegment)
        assert blocks.info.get("stored")
        _same(whole, blocks, 1e-9)
    assert whole.info["counts"]["stuck"] > 0  # the stuck stretch was flagged in both


def test_block_path_is_taken_by_size_and_falls_back_for_windows(tmp_path, monkeypatch):
    pq, _ = _log(tmp_path, n_rows=30_000, gap=None)
    monkeypatch.setattr(streaming, "STREAM_ROWS", 10_000)
    opts = {**OPTIONS, "cutoff": 3.0}
    assert isinstance(load_dataset(pq, options=opts, block=4000).segments[0], StoredSegment)
    assert not isinstance(load_dataset(pq, options=opts, block=4000, stream=False).segments[0], StoredSegment)
    ds = load_dataset(pq, options={**opts, "windows": [[1.0, 25.0]]}, block=4000)
    assert not isinstance(ds.segments[0], StoredSegment)


def _chain_urdf(folder):
    """A 3-joint serial arm of our own (continuous joints j0..j2, about z, y, y)."""
    links = "".join(
        f'<link name="l{k}"><inertial><origin xyz="0 0 0.1"/><mass value="{2.0 - 0.4 * k}"/>'
        f'<inertia ixx="0.02" iyy="0.02" izz="0.01" ixy="0" ixz="0" iyz="0"/></inertial></link>' for k in range(3))
    axes = ["0 0 1", "0 1 0", "0 1 0"]
    joints = "".join(
        f'<joint name="j{k}" type="continuous"><parent link="{"base" if k == 0 else f"l{k - 1}"}"/><child link="l{k}"/>'
        f'<origin xyz="0 0 {0.1 if k == 0 else 0.3}"/><axis xyz="{axes[k]}"/></joint>' for k in range(3))
    path = folder / "chain.urdf"
    path.write_text(f'<robot name="chain"><link name="base"/>{links}{joints}</robot>')
    return path


def test_fit_on_stored_segments_equals_fit_in_memory(tmp_path, small_stats):
    # the same conditioned samples, once in memory and once on disk read back block by block
    pq, _ = _log(tmp_path)
    robot = ident.load_robot(_chain_urdf(tmp_path))
    whole = load_dataset(pq, robot=robot, options=OPTIONS, stream=False)
    stored = store_dataset(whole)
    assert isinstance(stored.segments[0], StoredSegment)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for method in ("ols", "wls"):  # (the consistent fit needs physical torques; these are not)
            # default terms="auto" (held-out choice over blocks) and block-jackknife uncertainty
            a, b = fit(robot, whole, method), fit(robot, stored, method)
            assert a.term_choice.terms == b.term_choice.terms
            assert a.term_choice.scores == pytest.approx(b.term_choice.scores, rel=1e-10)
            assert a.uncertainty["method"] == b.uncertainty["method"] == "blocks"
            assert a.uncertainty["blocks"] == b.uncertainty["blocks"]
            assert a.samples == b.samples and a.sources == b.sources
            assert np.max(np.abs(a.beta - b.beta)) <= 1e-10 * np.abs(a.beta).max(), method
            assert np.max(np.abs(a.cov - b.cov)) <= 1e-10 * np.abs(a.cov).max(), method


def test_fit_from_the_block_path_equals_fit_in_memory(tmp_path, small_stats):
    # file -> blocks -> fit against file -> memory -> fit: the conditioned samples agree to the
    # rounding of the filter (about 1e-13 of q, more in q''), the estimates to well below 1e-10
    pq, _ = _log(tmp_path)
    robot = ident.load_robot(_chain_urdf(tmp_path))
    whole = load_dataset(pq, robot=robot, options=OPTIONS, stream=False)
    blocks = load_dataset(pq, robot=robot, options=OPTIONS, stream=True, block=4000)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        a, b = fit(robot, whole, "wls"), fit(robot, blocks, "wls")
    assert a.term_choice.terms == b.term_choice.terms
    assert np.max(np.abs(a.beta - b.beta)) <= 1e-10 * np.abs(a.beta).max()
    assert np.max(np.abs(a.cov - b.cov)) <= 1e-6 * np.abs(a.cov).max()


def test_bad_value_in_a_late_block_names_file_column_and_row(tmp_path):
    _, csv = _log(tmp_path, n_rows=30_000, gap=None, bad=(27_345, "j1.tau"))
    with pytest.raises(DataError, match=r"log\.csv: column 'j1\.tau' has a non-numeric value 'oops' at data row 27346"):
        load_dataset(csv, options=OPTIONS, stream=True, block=4000)


def test_time_going_back_across_a_block_edge_names_the_row(tmp_path):
    pq, _ = _log(tmp_path, n_rows=30_000, gap=None)
    df = pd.read_parquet(pq)
    df.loc[21_000, "time"] = df.loc[20_999, "time"]  # a duplicate at the first row of the fourth row group
    df.to_parquet(pq, row_group_size=7_000)
    with pytest.raises(DataError, match=r"duplicate timestamp at data row 21001"):
        load_dataset(pq, options=OPTIONS, stream=True, block=7_000)


def test_fit_command_takes_the_block_path_for_a_long_log(tmp_path, monkeypatch, small_stats):
    from ident.cli import main

    pq, _ = _log(tmp_path, gap=None)
    urdf = _chain_urdf(tmp_path)
    seen = []
    real = load_mod.load_dataset

    def spy(*a, **k):
        ds = real(*a, **k)
        seen.append(isinstance(ds.segments[0], StoredSegment))
        return ds

    monkeypatch.setattr("ident.commands.logs.load_dataset", spy)
    monkeypatch.setattr(streaming, "STREAM_ROWS", 50_000)  # the log's 60 000 rows count as long
    monkeypatch.setattr(streaming, "BLOCK", 4000)
    monkeypatch.setattr(streaming, "MAX_BLOCK", 4000)
    out = tmp_path / "params.yaml"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rc = main(["fit", str(urdf), str(pq), "--method", "wls", "--cutoff", "3", "--decimate", "7", "--quiet", "--out", str(out)])
    assert rc == 0 and out.is_file()
    assert seen == [True]


def test_csv_read_ahead_forwards_errors_and_stops_with_its_reader():
    # The thread that parses CSV blocks ahead: items arrive in order, a reader's error is raised
    # at the item where it occurred, and a consumer that stops early leaves no thread behind.
    import threading

    from ident.data.tables import _read_ahead

    assert list(_read_ahead(iter(range(50)), 3)) == list(range(50))

    def failing():
        yield 1
        yield 2
        raise ValueError("broken block")

    got = []
    with pytest.raises(ValueError, match="broken block"):
        for x in _read_ahead(failing(), 2):
            got.append(x)
    assert got == [1, 2]
    it = _read_ahead(iter(range(10**6)), 2)
    assert next(it) == 0
    it.close()
    assert not any(t.name == "ident-csv-read-ahead" and t.is_alive() for t in threading.enumerate())


def test_block_rows_kept_without_an_index_of_the_piece():
    # Each block computes the samples it keeps (every k-th of each run, counted from the run's
    # start) instead of slicing an index of the whole piece, which at 8 bytes a sample grew with
    # an undecimated log. Same rows as that index, for random runs, steps and blocks.
    rng = np.random.default_rng(0)
    for _ in range(500):
        m, d = int(rng.integers(5, 400)), int(rng.integers(1, 12))
        cuts = np.sort(rng.choice(np.arange(1, m), size=min(m - 1, 2 * int(rng.integers(0, 6))), replace=False))
        edges = [0, *cuts.tolist(), m]
        runs = [(edges[i], edges[i + 1]) for i in range(0, len(edges) - 1, 2)]
        index = np.concatenate([np.arange(a, b, d) for a, b in runs])
        c0 = int(rng.integers(0, m))
        c1 = int(rng.integers(c0, m + 1))
        np.testing.assert_array_equal(streaming.selected_rows(runs, d, c0, c1), index[(index >= c0) & (index < c1)])
        x = int(rng.integers(-3, m + 5))  # the count before a row (the fleet's chunk sizes), beyond the ends too
        assert streaming.selected_count(runs, d, x) == int(np.sum(index < x))
