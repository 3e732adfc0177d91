"""ROS 1 and ROS 2 bags: ``sensor_msgs/msg/JointState`` messages (name, position, velocity, effort)
on one topic, time from the message header.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import DataError, IdentError, first_line
from .profile import LogProfile
from .rawlog import RawLog, channel_factor, channel_spec, check_magnitude, check_times, convert_channel, joint_map

_BAG_FIELDS = {"q": "position", "dq": "velocity", "tau": "effort"}


BAG_SUFFIXES = {".bag": "bag", ".db3": "bag", ".mcap": "bag"}


def read_bag(path: Path, robot, prof: LogProfile) -> RawLog:
    try:
        from rosbags.highlevel import AnyReader
    except ImportError:  # pragma: no cover - rosbags is a dependency
        raise DataError("reading ROS bags needs the 'rosbags' package") from None
    where = str(path)
    if path.suffix.lower() in (".db3", ".mcap") and (path.parent / "metadata.yaml").is_file():
        path = path.parent  # a ROS 2 bag is its folder (metadata.yaml + storage files)
    msgs = []
    try:
        with AnyReader([path]) as reader:
            conns = [c for c in reader.connections if c.msgtype == "sensor_msgs/msg/JointState"]
            if prof.topic is not None:
                sel = [c for c in conns if c.topic == prof.topic]
                if not sel:
                    topics = sorted({c.topic for c in conns}) or ["none"]
                    raise DataError(f"{where}: no sensor_msgs/JointState topic '{prof.topic}' (JointState topics: {', '.join(topics)})")
            else:
                topics = sorted({c.topic for c in conns})
                if not topics:
                    raise DataError(f"{where}: no sensor_msgs/JointState messages in the bag")
                if len(topics) > 1:
                    raise DataError(f"{where}: several JointState topics ({', '.join(topics)}); choose one with 'topic:' in the profile")
                sel = conns
            for conn, stamp, data in reader.messages(connections=sel):
                msg = reader.deserialize(data, conn.msgtype)
                hs = msg.header.stamp
                msgs.append((stamp, int(hs.sec) * 1_000_000_000 + int(hs.nanosec), list(msg.name),
                             np.asarray(msg.position, float), np.asarray(msg.velocity, float), np.asarray(msg.effort, float)))
    except IdentError:
        raise
    except Exception as exc:  # rosbags raises its own reader errors for broken bags
        raise DataError(f"{where}: cannot read the bag ({first_line(exc)})") from None
    if not msgs:
        raise DataError(f"{where}: the JointState topic has no messages")
    seen = []
    for m_ in msgs:
        for nm in m_[2]:
            if nm not in seen:
                seen.append(nm)
    model, log_names, warns = joint_map(seen, robot, prof, where)
    n = len(model)
    rows = []
    skipped = 0
    for k, (stamp, hstamp, names, pos, vel, eff) in enumerate(msgs):
        if len(pos) != len(names) or (len(vel) and len(vel) != len(names)) or (len(eff) and len(eff) != len(names)):
            raise DataError(f"{where}: JointState message {k + 1} has {len(names)} names but {len(pos)} positions, {len(vel)} velocities, {len(eff)} efforts")
        idx = {nm: i for i, nm in enumerate(names)}
        if not all(ln in idx for ln in log_names):
            skipped += 1  # another publisher's joints (e.g. a gripper) on the same topic
            continue
        if not len(eff):
            raise DataError(f"{where}: JointState message {k + 1} carries no effort (torque) values")
        sel = [idx[ln] for ln in log_names]
        rows.append((stamp, hstamp, pos[sel], vel[sel] if len(vel) else None, eff[sel]))
    if not rows:
        missing = [ln for ln in log_names if ln not in seen]
        raise DataError(f"{where}: no JointState message carries every joint (never seen: {', '.join(missing) or 'none; they are never together'})")
    if skipped:
        warns.append(f"{where}: skipped {skipped} JointState messages that lack some of the model's joints")
    use_header = prof.time_source == "header" and any(r[1] for r in rows)
    if prof.time_source == "header" and not use_header:
        warns.append(f"{where}: header stamps are all zero; using the bag's record time")
    ns = np.array([r[1] if use_header else r[0] for r in rows], dtype=np.int64)
    t = ns * 1e-9
    q = np.stack([r[2] for r in rows])
    tau = np.stack([r[4] for r in rows])
    has_v = [r[3] is not None for r in rows]
    dq = np.stack([r[3] for r in rows]) if all(has_v) else None
    if any(has_v) and not all(has_v):
        warns.append(f"{where}: velocities missing in some messages; logged velocity not used")
    jt = robot.joint_type if robot is not None else [None] * n
    limit = np.full(n, np.inf) if robot is None else robot.effort_limit.astype(float).copy()
    for ch, arr in (("q", q), ("dq", dq), ("tau", tau)):
        if arr is None:
            continue
        if not np.all(np.isfinite(arr)):
            r, c = np.argwhere(~np.isfinite(arr))[0]
            raise DataError(f"{where}: non-finite {_BAG_FIELDS[ch]} of joint '{log_names[c]}' in message {r + 1}")
        for k in range(n):
            spec = channel_spec(prof, model[k], ch)
            f = channel_factor(spec, ch, prof, jt[k], f"{where}: {_BAG_FIELDS[ch]} of '{log_names[k]}'")
            convert_channel(arr[:, k], spec, f)
            check_magnitude(arr[:, k], ch, f"{where}: {_BAG_FIELDS[ch]} of '{log_names[k]}'", "message")
            if ch == "tau" and spec.limit is not None:
                limit[k] = spec.limit
    raw = RawLog(where, model, t, q, dq, None, tau, limit, warns)
    check_times(t, where, "message")
    return raw
