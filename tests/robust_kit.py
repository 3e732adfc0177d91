"""Shared kit of the bad-input, fault and fuzz tests: good inputs of every kind, and a CLI runner
that checks the error contract (exit 2, one stderr line naming the place, no traceback, nothing
new on disk)."""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import yaml

from ident.cli import main

DEMO = Path(__file__).resolve().parents[1] / "datasets_demo"
JOINTS = ["base_yaw", "shoulder_pitch", "elbow_pitch", "wrist_roll", "wrist_pitch", "flange_roll"]


def make_kit(folder: Path) -> Path:
    """Write good inputs into `folder`: arm.urdf, arm_dh.yaml, params.yaml, run.csv (3 s at 200 Hz),
    run.parquet, traj.csv (1 s reference), excite.yaml (a small design), profile.yaml."""
    folder.mkdir(parents=True, exist_ok=True)
    shutil.copy(DEMO / "sprout6.urdf", folder / "arm.urdf")
    shutil.copy(DEMO / "examples" / "glazer6_dh.yaml", folder / "arm_dh.yaml")
    shutil.copy(DEMO / "sprout6_truth.yaml", folder / "params.yaml")
    lines = (DEMO / "sprout6_excite.csv").read_text().splitlines()
    (folder / "run.csv").write_text("\n".join(lines[:601]) + "\n")
    import pandas as pd

    df = pd.read_csv(folder / "run.csv")
    df.to_parquet(folder / "run.parquet")
    traj = df[["time"] + [f"{j}.q" for j in JOINTS]].iloc[:201]
    traj.to_csv(folder / "traj.csv", index=False)
    cfg = yaml.safe_load((DEMO / "sprout6_excite_config.yaml").read_text())
    cfg.update(period=2.0, harmonics=3, periods=1, rate=100.0)
    cfg["optimizer"].update(starts=1, budget=5, max_iterations=5, design_samples=40, check_factor=2)
    (folder / "excite.yaml").write_text(yaml.safe_dump(cfg, sort_keys=False))
    (folder / "profile.yaml").write_text(yaml.safe_dump({"log_profile": 1, "time": {"column": "time", "unit": "s"}}))
    return folder


def snapshot(*folders: Path) -> dict:
    """Every file and folder under `folders` with its size and modification time."""
    out = {}
    for f in folders:
        for root, dirs, files in os.walk(f):
            for name in dirs:  # a folder's own time changes when a temporary file comes and goes
                out[str(Path(root) / name)] = "folder"
            for name in files:
                st = (Path(root) / name).stat()
                out[str(Path(root) / name)] = (st.st_size, st.st_mtime_ns)
    return out


def run_cli(argv: list[str], capsys) -> tuple[int, str, str]:
    """Run ``ident.cli.main(argv)`` in-process: (status, stdout, stderr)."""
    capsys.readouterr()
    try:
        code = main([str(a) for a in argv])
    except SystemExit as exc:  # argparse's own errors
        code = exc.code
    out, err = capsys.readouterr()
    return code, out, err


def assert_clean_refusal(code: int, err: str, place: str, before: dict, after: dict) -> None:
    """The error contract: exit 2, one stderr line naming `place`, no traceback, nothing new on disk."""
    lines = err.splitlines()
    assert code == 2, (code, err)
    assert "Traceback" not in err and "Warning" not in err, err
    assert len(lines) == 1, err
    assert place in lines[0], (place, lines[0])
    assert after == before, sorted(set(after) ^ set(before))
