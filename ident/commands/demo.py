"""``ident demo [--out DIR]``: the whole chain (fit, check, export, report) on the bundled demo arm."""

from __future__ import annotations

import argparse
import time
import warnings
from importlib import resources
from pathlib import Path

from ..arm.loader import load_robot
from ..data.load import load_dataset
from ..errors import IdentError
from ..estimation.estimate import fit
from ..fileio import atomic_folder
from ..handover.check import validate_dataset
from ..handover.export import export_urdf
from ..handover.paramfile import load_parameters, save_parameters
from ..handover.report import write_report
from ..progress import Progress
from .common import print_json

EXAMPLE = """\
examples:
  ident demo
  ident demo --out /tmp/sprout6_demo --json

The demo arm (sprout6, a bench-top arm that moves seedling trays in a greenhouse; invented) comes
with its CAD description, its as-built true parameters and two simulated logs: an excitation run and
a held-out run. The demo fits the consistent model on the first, checks it on the second, exports
the identified URDF and writes the HTML report into DIR.
"""

ROBOT_FILE = "sprout6.urdf"
TRUTH_FILE = "sprout6_truth.yaml"
FIT_LOG = "sprout6_excite.csv"
HELDOUT_LOG = "sprout6_heldout.csv"
#: Conditioning of the demo logs: the defaults a user gets (cutoff chosen from the data, slow zone
#: from the velocity noise, dry-friction columns filtered like the torque).
LOG_OPTIONS: dict = {}


def demo_data_dir() -> Path:
    """Folder of the demo data: the packaged copy (``ident/demo_data``), else the repository's datasets_demo/."""
    packaged = Path(str(resources.files("ident") / "demo_data"))
    repo = Path(__file__).resolve().parents[2] / "datasets_demo"
    for folder in (packaged, repo):
        if all((folder / f).is_file() for f in (ROBOT_FILE, TRUTH_FILE, FIT_LOG, HELDOUT_LOG)):
            return folder
    raise IdentError(f"demo data not found in {packaged} or {repo}: reinstall ident or run scripts/make_demo_data.py")


def add_parser(sub) -> None:
    p = sub.add_parser(
        "demo",
        help="run fit, check, export and report on the bundled demo arm (one command, under a minute)",
        description="Run the whole identification chain on the bundled demo data and write the parameter file, "
        "the identified URDF and the HTML report into DIR.",
        epilog=EXAMPLE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("--out", default="ident_demo", metavar="DIR", help="output folder (created if missing; default ./ident_demo)")
    p.add_argument("--quiet", action="store_true", help="print only where the report is")
    p.add_argument("--json", action="store_true", help="print the outcome as JSON")
    p.set_defaults(func=run)


def run(args) -> int:
    start = time.monotonic()
    src = demo_data_dir()
    out = Path(args.out)
    if out.exists() and not out.is_dir():
        raise IdentError(f"--out: '{out}' exists and is not a folder")
    talk = not (args.quiet or args.json)

    def say(msg):
        if talk:
            print(msg, flush=True)

    robot = load_robot(src / ROBOT_FILE)
    truth = load_parameters(src / TRUTH_FILE, robot)
    say(f"demo arm: {robot.describe()} (data from {src})")
    fit_data = load_dataset([src / FIT_LOG], robot=robot, options=LOG_OPTIONS)
    held = load_dataset([src / HELDOUT_LOG], robot=robot, options=LOG_OPTIONS)
    # the fit leaves out each joint's equation where that joint is slower than the slow-velocity
    # threshold (sign(q') of the Coulomb term undefined); the check does the same
    say(f"1/4 fit: consistent method, friction terms chosen from the data, {fit_data.n_samples} samples of {FIT_LOG}")
    with warnings.catch_warnings(), Progress(fit_data.n_samples, "fit", enabled=talk) as bar:
        warnings.simplefilter("ignore")  # the fit records its warnings in the result; they go to the report
        result = fit(robot, fit_data, method="consistent", progress=lambda done, total: bar.update(done, "compressing"))
    ps = result.to_parameter_set(data={"logs": [FIT_LOG], "conditioning": dict(LOG_OPTIONS)})
    params_path = out / "sprout6_identified.yaml"
    urdf_path = out / "sprout6_identified.urdf"
    report_path = out / "sprout6_report.html"
    # the three files are written into a temporary folder and moved into DIR whole (atomic_folder)
    with atomic_folder(out) as tmp:
        save_parameters(tmp / params_path.name, ps)
        say(f"2/4 check on the held-out log {HELDOUT_LOG}")
        val = validate_dataset(robot, ps, held)
        say(val.table())
        say("3/4 export the identified URDF")
        export_urdf(src / ROBOT_FILE, robot, ps, tmp / urdf_path.name)
        say("4/4 report")
        write_report(tmp / report_path.name, robot, ps, validation=val, validation_data=held, fit_data=fit_data, reference=truth,
                     title="ident demo: sprout6 seedling-tray arm", progress=talk)
    noise = truth.data.get("torque_noise_std") if isinstance(truth.data, dict) else None
    summary = {
        "report": str(report_path),
        "parameters": str(params_path),
        "urdf": str(urdf_path),
        "seconds": round(time.monotonic() - start, 2),
        "all_physical": val.all_physical,
        "heldout_rms": {j: float(v) for j, v in zip(robot.joint_names, val.rms)},
        "torque_noise_std": noise,
    }
    if args.json:
        print_json(summary)
    elif args.quiet:
        print(report_path)
    else:
        print(f"parameters: {params_path}\nidentified URDF: {urdf_path}\nreport: {report_path}  (open it in a browser)")
        print(f"done in {summary['seconds']:.1f} s")
    return 0
