"""Benchmark: load and condition one hour of 1 kHz data for 7 joints (3.6 M rows) from Parquet and
CSV, the whole-file path against the block path, then four hours by the block path, and the fit
streaming from it.

Rows printed, each in a fresh child process so its peak resident memory is measured alone,
without the data generation (VmHWM of the child's own address space: Linux carries ru_maxrss
over from the parent across fork and exec, so that figure would include the generator's peak):

* 1 h, whole-file path (``load_dataset(..., stream=False)``: the log in memory), Parquet and CSV;
* 1 h and 4 h, block path (the default for logs this long: read, condition and store block by
  block), Parquet and CSV, with the ratio of its time to the whole-file path's at 1 h;
* 1 h and 4 h, block path + ``ident.fit`` (weighted least squares, default terms "auto" and the
  block jackknife) on a 7-joint chain of our own, Parquet;
* 1 h and 4 h, block path without decimation (every sample out, as with the default options),
  Parquet, alone and with the fit (what ``ident fit`` with no options does on such a log).

Targets: block path peak under 400 MB at 1 h and at 4 h (every block-path row), time no worse than the whole-file path.
The 4 h files are written to a temporary folder (about 2 GB Parquet + 4 GB CSV) and removed.

    python scripts/bench_logs.py [--hours 1.0] [--long-hours 4.0] [--rounds 2] [--keep DIR] [--skip-long]
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

N_JOINTS = 7
RATE = 1000.0  # Hz
FREQS = np.array([0.1, 0.2, 0.3, 0.4, 0.5])  # Hz: an excitation of 5 harmonics of 0.1 Hz
OPTIONS = {"period": 10.0, "harmonics": 5, "average": False, "decimate": 10}
AVERAGED = {"period": 10.0, "harmonics": 5}  # no decimation: every sample out (period noise variance only; average is off by default)


def generate(folder: Path, hours: float) -> tuple[Path, Path, int]:
    """Write the same synthetic log as Parquet and CSV, in chunks (bounded memory)."""
    import pyarrow as pa
    import pyarrow.csv as pacsv
    import pyarrow.parquet as pq

    rows = int(round(hours * 3600 * RATE))
    names = [f"j{k + 1}" for k in range(N_JOINTS)]
    cols = ["time"] + [f"{j}.q" for j in names] + [f"{j}.tau" for j in names]
    schema = pa.schema([(c, pa.float64()) for c in cols])
    rng = np.random.default_rng(0)
    amp = rng.uniform(0.05, 0.3, (N_JOINTS, FREQS.size))
    ph = rng.uniform(0, 2 * np.pi, (N_JOINTS, FREQS.size))
    pq_path, csv_path = folder / "hour.parquet", folder / "hour.csv"
    chunk = 200_000
    with pq.ParquetWriter(pq_path, schema) as pw, pacsv.CSVWriter(csv_path, schema) as cw:
        for s in range(0, rows, chunk):
            k = np.arange(s, min(rows, s + chunk))
            t = k / RATE
            arg = t[:, None, None] * (2 * np.pi * FREQS) + ph
            q = (amp * np.sin(arg)).sum(-1) + 2e-5 * rng.standard_normal((k.size, N_JOINTS))
            tau = 20 * q + (amp * np.cos(arg)).sum(-1) + 0.05 * rng.standard_normal((k.size, N_JOINTS))
            arrays = [pa.array(t)] + [pa.array(q[:, j]) for j in range(N_JOINTS)] + [pa.array(tau[:, j]) for j in range(N_JOINTS)]
            batch = pa.record_batch(arrays, schema=schema)
            pw.write_batch(batch, row_group_size=chunk)
            cw.write_batch(batch)
    return pq_path, csv_path, rows


CHAIN_AXES = ["0 0 1", "0 1 0", "0 0 1", "0 1 0", "0 0 1", "0 1 0", "0 0 1"]


def chain_urdf(path: Path) -> Path:
    """A 7-joint serial arm of our own with continuous joints j1..j7 (the log's joint names)."""
    links = "".join(f'<link name="l{k}"><inertial><origin xyz="0 0 0.08"/><mass value="{3.0 - 0.3 * k:.2f}"/>'
                    f'<inertia ixx="0.03" iyy="0.03" izz="0.01" ixy="0" ixz="0" iyz="0"/></inertial></link>' for k in range(N_JOINTS))
    joints = "".join(f'<joint name="j{k + 1}" type="continuous"><parent link="{"base" if k == 0 else f"l{k - 1}"}"/>'
                     f'<child link="l{k}"/><origin xyz="0 0 {0.1 if k == 0 else 0.25}"/><axis xyz="{CHAIN_AXES[k]}"/></joint>'
                     for k in range(N_JOINTS))
    path.write_text(f'<robot name="chain7"><link name="base"/>{links}{joints}</robot>')
    return path


def child(path: str, averaged: bool, mode: str) -> None:
    """Load + condition `path` (mode "memory", "stream" or "fit"), print timing and peak memory as
    JSON (run in a fresh process)."""
    import warnings

    t0 = time.perf_counter()
    import ident as L

    t1 = time.perf_counter()
    robot = L.load_robot(chain_urdf(Path(path).with_name("chain7.urdf"))) if mode == "fit" else None
    ds = L.load_dataset(path, robot=robot, options=AVERAGED if averaged else OPTIONS, stream=False if mode == "memory" else None)
    t2 = time.perf_counter()
    out = dict(seconds=t2 - t1, import_seconds=t1 - t0, samples=ds.n_samples, segments=len(ds.segments),
               cutoff=ds.info["cutoff"], warnings=len(ds.warnings), stored=bool(ds.info.get("stored")))
    if mode == "fit":
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = L.fit(robot, ds, "wls")
        t3 = time.perf_counter()
        out.update(seconds=t3 - t1, fit_seconds=t3 - t2, terms=",".join(res.term_choice.terms), blocks=res.uncertainty.get("blocks"))
    out["peak_mb"] = _hwm_mb()
    print(json.dumps(out))


def _hwm_mb() -> float:
    """Peak resident memory of this process's address space (VmHWM, MB); ru_maxrss if unreadable."""
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return float(line.split()[1]) / 1024.0
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def _rows(path: Path) -> int:
    import pyarrow.parquet as pq

    return pq.ParquetFile(path).metadata.num_rows


def _run(label: str, path: Path, mode: str, extra=()) -> dict | None:
    out = subprocess.run([sys.executable, __file__, "--child", str(path), "--mode", mode, *extra], capture_output=True, text=True)
    if out.returncode:
        print(f"{label}: FAILED\n{out.stderr}")
        return None
    r = json.loads(out.stdout.strip().splitlines()[-1])
    fit = f" (fit {r['fit_seconds']:.2f} s, terms {r['terms']}, {r['blocks']} blocks)" if "fit_seconds" in r else ""
    print(f"{label:24s}: {r['seconds']:7.2f} s{fit}, peak memory {r['peak_mb']:6.0f} MB, {r['samples']:,} samples out, "
          f"cutoff {r['cutoff']:g} Hz, {r['segments']} segment(s), {r['warnings']} warning(s){', on disk' if r['stored'] else ''}", flush=True)
    return r


def _files(folder: Path, hours: float, keep: bool, tag: str) -> tuple[Path, Path, int]:
    t0 = time.perf_counter()
    sub = folder / tag
    sub.mkdir(parents=True, exist_ok=True)
    pq_path, csv_path = sub / "hour.parquet", sub / "hour.csv"
    rows = int(round(hours * 3600 * RATE))
    if keep and pq_path.is_file() and csv_path.is_file() and _rows(pq_path) == rows:
        print(f"reusing {pq_path} and {csv_path}")
    else:
        pq_path, csv_path, rows = generate(sub, hours)
    print(f"data {tag}: {rows:,} rows x {N_JOINTS} joints (time, q, tau), ready in {time.perf_counter() - t0:.1f} s: "
          f"Parquet {pq_path.stat().st_size / 1e6:.0f} MB, CSV {csv_path.stat().st_size / 1e6:.0f} MB", flush=True)
    return pq_path, csv_path, rows


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--hours", type=float, default=1.0, help="log length (default 1 hour = 3.6 M rows)")
    ap.add_argument("--long-hours", type=float, default=4.0, help="the long log, block path only (default 4 hours)")
    ap.add_argument("--skip-long", action="store_true", help="leave out the long log")
    ap.add_argument("--rounds", type=int, default=2, help="interleaved rounds of the 1 h whole-file and block rows, best time kept (default 2)")
    ap.add_argument("--keep", metavar="DIR", help="write the test files here and keep them")
    ap.add_argument("--child", metavar="PATH", help=argparse.SUPPRESS)
    ap.add_argument("--mode", default="stream", help=argparse.SUPPRESS)
    ap.add_argument("--averaged", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        child(args.child, args.averaged, args.mode)
        return 0
    tmp = None
    if args.keep:
        folder = Path(args.keep)
        folder.mkdir(parents=True, exist_ok=True)
    else:
        tmp = tempfile.TemporaryDirectory(prefix="ident_bench_logs_")
        folder = Path(tmp.name)
    try:
        print(f"load average {os.getloadavg()[0]:.2f} {os.getloadavg()[1]:.2f} on {os.cpu_count()} cores")
        print(f"conditioning: {OPTIONS}; 'undecimated': {AVERAGED}")
        pq_path, csv_path, rows = _files(folder, args.hours, bool(args.keep), f"{args.hours:g}h")
        h = f"{args.hours:g} h"
        res = {}
        # interleaved rounds, the best time of each row kept (and its largest peak): on a shared
        # machine single runs minutes apart differ by 10 % or more
        for r in range(args.rounds):
            if args.rounds > 1:
                print(f"round {r + 1} of {args.rounds}:")
            for key, label, path, mode in (("pm", "Parquet whole-file", pq_path, "memory"), ("ps", "Parquet blocks", pq_path, "stream"),
                                           ("cm", "CSV whole-file", csv_path, "memory"), ("cs", "CSV blocks", csv_path, "stream")):
                got = _run(f"{h} {label}", path, mode)
                if got is None:
                    return 1
                if key in res:
                    got = dict(got, seconds=min(got["seconds"], res[key]["seconds"]), peak_mb=max(got["peak_mb"], res[key]["peak_mb"]))
                res[key] = got
        res["pf"] = _run(f"{h} Parquet blocks + fit", pq_path, "fit")
        res["pu"] = _run(f"{h} Parquet undecimated", pq_path, "stream", ["--averaged"])
        res["puf"] = _run(f"{h} Parquet undecimated + fit", pq_path, "fit", ["--averaged"])
        if None in res.values():
            return 1
        best = f" (best of {args.rounds} rounds)" if args.rounds > 1 else ""
        print(f"block path / whole-file path, {h}{best}: Parquet time {res['ps']['seconds'] / res['pm']['seconds']:.2f}, "
              f"peak {res['ps']['peak_mb'] / res['pm']['peak_mb']:.2f}; CSV time {res['cs']['seconds'] / res['cm']['seconds']:.2f}, "
              f"peak {res['cs']['peak_mb'] / res['cm']['peak_mb']:.2f}")
        peaks = [res[k]["peak_mb"] for k in ("ps", "cs", "pf", "pu", "puf")]
        if not args.skip_long:
            if not args.keep:  # make room: the long files are large
                for p in (pq_path, csv_path):
                    p.unlink()
            lpq, lcsv, _ = _files(folder, args.long_hours, bool(args.keep), f"{args.long_hours:g}h")
            lh = f"{args.long_hours:g} h"
            for label, path, mode, extra in ((f"{lh} Parquet blocks", lpq, "stream", []), (f"{lh} CSV blocks", lcsv, "stream", []),
                                             (f"{lh} Parquet blocks + fit", lpq, "fit", []),
                                             (f"{lh} Parquet undecimated", lpq, "stream", ["--averaged"]),
                                             (f"{lh} Parquet undecimated + fit", lpq, "fit", ["--averaged"])):
                r = _run(label, path, mode, extra)
                if r is None:
                    return 1
                peaks.append(r["peak_mb"])
        p = res["ps"]
        print(f"targets: block path peak < 400 MB -> {'met' if max(peaks) < 400 else 'MISSED'} (largest {max(peaks):.0f} MB); "
              f"time no worse than the whole-file path ({h}) -> "
              f"{'met' if p['seconds'] <= res['pm']['seconds'] and res['cs']['seconds'] <= res['cm']['seconds'] else 'MISSED'}")
    finally:
        if tmp is not None:
            tmp.cleanup()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
