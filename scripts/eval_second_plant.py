"""How biased are ident's default fits? Held-out torque errors on the MuJoCo test plant.

For the UR5 and the Panda (example-robot-data descriptions) the MuJoCo plant of
``tests/mujoco_plant.py`` (as-built masses, viscous and dry friction, rotor inertia, 1 kHz closed
loop, 2^17-count encoders, torque noise) logs an identification run (3 periods of a 10 s, 5-harmonic
Fourier trajectory) and a held-out run on another trajectory (2 periods). Fitted on the first and
judged on the second in one common way (``tests/heldout_check.py``):

* ``ident defaults``: ``ident.fit(robot, ident.load_dataset(log, options={"period", "harmonics"}))``;
* ``ident 0.2/10``: the same with ``slow_velocity: 0.2`` and ``cutoff: 10`` (the CLI's
  ``--slow-velocity 0.2 --cutoff 10``);
* ``textbook``: ``tests/textbook_fit.py`` (15 Hz filtfilt, np.gradient, |q'| >= 0.2 rad/s, OLS);
* ``truth``: the plant's own parameters with fc sign(q') (a floor, not a fit).

A fifth row, ``truth, plant's ramp``, gives the plant's parameters with its own dry-friction curve
fc clip(q'/vs, -1, 1): what a perfect model scores.

Printed per joint: held-out RMS error over moving samples (|q'| > 0.2 rad/s, noise filtered out)
and over all samples (raw measured torque: a perfect model scores the noise sigma), the noise sigma
and ident's estimate of it, fv and fc estimates against the truth; then MuJoCo's dry friction
against speed, measured by a slow torque ramp on every joint, for the plant's designed softness
and for MuJoCo's default one (``--no-ramp`` skips it).

    python scripts/eval_second_plant.py [--arms ur5,panda] [--no-ramp]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

import heldout_check as hc  # noqa: E402
import mujoco_plant as mp  # noqa: E402
import textbook_fit as tb  # noqa: E402

import ident  # noqa: E402


def fits(sc: mp.Scenario) -> dict:
    """{label: (predict, fv (n,), fc (n,), physical (n,) or None)} for the four models."""
    rob = sc.plant.description
    out = {}
    for label, extra in (("ident defaults", {}), ("ident 0.2/10", {"slow_velocity": 0.2, "cutoff": 10.0})):
        data = ident.load_dataset([sc.id_csv], robot=rob, options={**sc.options, **extra})
        res = ident.fit(rob, data)
        out[label] = (res.predict, res.joint_params["fv"], res.joint_params["fc"], res.physical,
                      np.sqrt(data.noise_var) if data.noise_var is not None else None)
    t, q, tau = tb.read_log(sc.id_csv, rob.joint_names)
    model = tb.textbook_fit(rob, t, q, tau)
    out["textbook"] = (model.predict, model.joint_term("fv"), model.joint_term("fc"), None, None)
    truth = sc.plant.true_parameters(tb.TERMS)
    out["truth"] = (lambda q_, dq_, ddq_: ident.predict(rob, q_, dq_, ddq_, truth, tb.TERMS), sc.plant.fv, sc.plant.fc, None, None)
    rigid = sc.plant.true_parameters(("fv", "ia"))
    out["truth, plant's ramp"] = (lambda q_, dq_, ddq_: ident.predict(rob, q_, dq_, ddq_, rigid, ("fv", "ia")) + sc.plant.dry_friction(dq_),
                                  sc.plant.fv, sc.plant.fc, None, None)
    return out


def row(label: str, values, fmt: str = "{:7.3f}") -> str:
    return f"  {label:<26s}" + " ".join(fmt.format(v) for v in values)


def report_arm(key: str, folder: Path) -> mp.Scenario:
    t0 = time.perf_counter()
    sc = mp.scenario(key, folder)
    t_sim = time.perf_counter() - t0
    rob = sc.plant.description
    sigma = sc.id_log.noise
    t0 = time.perf_counter()
    models = fits(sc)
    t_fit = time.perf_counter() - t0
    t, q, tau = tb.read_log(sc.held_out_csv, rob.joint_names)
    errs = {label: hc.held_out_errors(t, q, tau, m[0]) for label, m in models.items()}
    print(f"\n=== {key}: {rob.n} joints, {sc.id_log.t.size} + {sc.held_out_log.t.size} samples at 1 kHz "
          f"(simulated in {t_sim:.1f} s, four models fitted in {t_fit:.1f} s); torque noise sigma {sigma:g} N m")
    print("  as built: " + ", ".join(f"{k} mass x{s:.3f}, COM +{1000 * np.linalg.norm(d):.1f} mm" for k, (s, d) in sc.plant.changes.items()))
    print(row("joint", range(1, rob.n + 1), "{:>7d}"))
    for what, title in (("moving", "RMS moving (N m)"), ("all", "RMS all samples (N m)")):
        print(f" {title}:")
        for label, e in errs.items():
            print(row(label, getattr(e, what)))
        if what != "moving":
            print(row("1.2 x sigma", np.full(rob.n, 1.2 * sigma)))
    print(" ratio to textbook, moving:")
    for label in ("ident defaults", "ident 0.2/10"):
        print(row(label, errs[label].moving / errs["textbook"].moving))
    print(" noise sigma per joint estimated by ident (period averaging):")
    print(row("ident estimate", models["ident defaults"][4]))
    for code, k in (("fv (N m s/rad)", 1), ("fc (N m)", 2)):
        print(f" {code}:")
        for label in ("truth", "ident defaults", "ident 0.2/10", "textbook"):
            print(row(label, models[label][k]))
    for label in ("ident defaults", "ident 0.2/10"):
        print(f" {label}: links physically consistent: {bool(np.all(models[label][3]))}")
    return sc


def ramp_levels(plant: mp.Plant, j: int):
    """Speeds (mrad/s) where the ramp's friction reaches 50/90/99 % of fc, and its slope at zero (N m s/rad)."""
    v, f, _, _ = mp.friction_ramp(plant, j)
    r = -f / plant.fc[j]
    levels = [1000 * v[np.argmax(r >= lev)] if np.any(r >= lev) else np.nan for lev in (0.5, 0.9, 0.99)]
    lin = (r > 0.05) & (r < 0.8)
    slope = np.polyfit(v[lin], -f[lin], 1)[0] if lin.sum() > 10 else np.nan
    return levels, slope


def report_ramp(sc: mp.Scenario) -> None:
    key = sc.plant.spec.key
    designed = mp.build_plant(key)
    default = mp.build_plant(key, designed_friction=False)
    log = sc.id_log
    dev = log.friction + sc.plant.dry_friction(log.dq_true)  # friction force minus the designed law
    print(f"\n=== {key}: MuJoCo dry friction against speed (slow torque ramp to 1.2 fc over 10 s, open loop, gravity off, other joints held)")
    print("  f reaches 50/90/99 % of fc at |v| (mrad/s); slope of the ramp at 0 (N m s/rad);")
    print("  closed loop: RMS and largest |f - fc clip(v/vs)| over the identification log (N m)")
    print("  joint    fc   vs mrad/s |   designed: 50%   90%   99%   slope  fc/vs |  MuJoCo default: 50%   90%   99%   slope | closed loop rms   max")
    for j in range(designed.n):
        (l1, s1), (l2, s2) = ramp_levels(designed, j), ramp_levels(default, j)
        print(f"  {j + 1:>5d} {designed.fc[j]:5.2f} {1000 * designed.vs[j]:9.0f} | {l1[0]:15.2f} {l1[1]:5.2f} {l1[2]:5.2f} {s1:7.1f} {designed.fc[j] / designed.vs[j]:6.1f} |"
              f" {l2[0]:19.2f} {l2[1]:5.2f} {l2[2]:5.2f} {s2:7.1f} | {np.sqrt(np.mean(dev[:, j] ** 2)):15.4f} {np.abs(dev[:, j]).max():5.3f}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--arms", default="ur5,panda")
    ap.add_argument("--no-ramp", action="store_true", help="skip the dry-friction ramp measurement")
    args = ap.parse_args(argv)
    keys = [k for k in args.arms.split(",") if k]
    with tempfile.TemporaryDirectory() as tmp:
        scenarios = [report_arm(key, Path(tmp) / key) for key in keys]
        if not args.no_ramp:
            for sc in scenarios:
                report_ramp(sc)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
