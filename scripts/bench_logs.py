"""Benchmark: load and condition one hour of 1 kHz data for 7 joints (3.6 M rows) from Parquet and CSV.

Targets: under 30 s from Parquet, under 2 GB peak memory. Each load runs in a fresh child process
so its peak resident memory (ru_maxrss) is measured alone, without the data generation.

    /work/venv/bin/python scripts/bench_logs.py [--hours 1.0] [--keep DIR]
"""

from __future__ import annotations

import argparse
import json
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
AVERAGED = {"period": 10.0, "harmonics": 5}  # 360 periods averaged into one, with the noise variance


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


def child(path: str, averaged: bool) -> None:
    """Load + condition `path`, print timing and peak memory as JSON (run in a fresh process)."""
    t0 = time.perf_counter()
    import ident as L

    t1 = time.perf_counter()
    ds = L.load_dataset(path, options=AVERAGED if averaged else OPTIONS)
    t2 = time.perf_counter()
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(json.dumps(dict(seconds=t2 - t1, import_seconds=t1 - t0, peak_mb=peak_mb, samples=ds.n_samples,
                          segments=len(ds.segments), cutoff=ds.info["cutoff"], warnings=len(ds.warnings))))


def _rows(path: Path) -> int:
    import pyarrow.parquet as pq

    return pq.ParquetFile(path).metadata.num_rows


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--hours", type=float, default=1.0, help="log length (default 1 hour = 3.6 M rows)")
    ap.add_argument("--keep", metavar="DIR", help="write the test files here and keep them")
    ap.add_argument("--child", metavar="PATH", help=argparse.SUPPRESS)
    ap.add_argument("--averaged", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        child(args.child, args.averaged)
        return 0
    tmp = None
    if args.keep:
        folder = Path(args.keep)
        folder.mkdir(parents=True, exist_ok=True)
    else:
        tmp = tempfile.TemporaryDirectory(prefix="ident_bench_logs_")
        folder = Path(tmp.name)
    try:
        t0 = time.perf_counter()
        pq_path, csv_path = folder / "hour.parquet", folder / "hour.csv"
        rows = int(round(args.hours * 3600 * RATE))
        if args.keep and pq_path.is_file() and csv_path.is_file() and _rows(pq_path) == rows:
            print(f"reusing {pq_path} and {csv_path}")
        else:
            pq_path, csv_path, rows = generate(folder, args.hours)
        print(f"data: {rows:,} rows x {N_JOINTS} joints (time, q, tau), ready in {time.perf_counter() - t0:.1f} s: "
              f"Parquet {pq_path.stat().st_size / 1e6:.0f} MB, CSV {csv_path.stat().st_size / 1e6:.0f} MB")
        print(f"conditioning: {OPTIONS}; 'parquet avg': {AVERAGED}")
        results = {}
        for label, path, extra in (("parquet", pq_path, []), ("csv", csv_path, []), ("parquet avg", pq_path, ["--averaged"])):
            out = subprocess.run([sys.executable, __file__, "--child", str(path)] + extra, capture_output=True, text=True)
            if out.returncode:
                print(f"{label}: FAILED\n{out.stderr}")
                return 1
            r = json.loads(out.stdout.strip().splitlines()[-1])
            results[label] = r
            print(f"{label:11s}: load + condition {r['seconds']:6.2f} s (import {r['import_seconds']:.2f} s), "
                  f"peak memory {r['peak_mb']:7.0f} MB, {r['samples']:,} samples out, cutoff {r['cutoff']:g} Hz, "
                  f"{r['segments']} segment(s), {r['warnings']} warning(s)")
        p = results["parquet"]
        print(f"targets (1 h): Parquet < 30 s -> {'met' if p['seconds'] < 30 else 'MISSED'}; "
              f"peak < 2048 MB -> {'met' if max(r['peak_mb'] for r in results.values()) < 2048 else 'MISSED'}")
    finally:
        if tmp is not None:
            tmp.cleanup()
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
