"""ROS 1 and ROS 2 bags of sensor_msgs/JointState, written here with the rosbags writers and read back."""

from __future__ import annotations

import numpy as np
import pytest

pytest.importorskip("rosbags")
from rosbags.rosbag1 import Writer as Writer1  # noqa: E402
from rosbags.rosbag2 import StoragePlugin  # noqa: E402
from rosbags.rosbag2 import Writer as Writer2
from rosbags.typesys import Stores, get_typestore  # noqa: E402

from ident.cli import main  # noqa: E402
from ident.data.load import load_dataset, read_logs  # noqa: E402
from ident.errors import DataError  # noqa: E402

JOINTS = ["base_yaw", "shoulder", "elbow"]
T0 = 1_764_600_000_000_000_000  # ns, an epoch stamp of the kind real bags carry


def samples(m=400, seed=0):
    rng = np.random.default_rng(seed)
    ns = T0 + np.arange(m, dtype=np.int64) * 2_000_000  # 500 Hz
    ns[1:] += rng.integers(-20_000, 20_000, m - 1)  # a little jitter, as real stamps have
    pos = rng.uniform(-1, 1, (m, 3))
    vel = rng.standard_normal((m, 3))
    eff = 10 * rng.standard_normal((m, 3))
    return ns, pos, vel, eff


def msg(ts, ros1, stamp_ns, names, pos, vel, eff):
    Time = ts.types["builtin_interfaces/msg/Time"]
    Header = ts.types["std_msgs/msg/Header"]
    JointState = ts.types["sensor_msgs/msg/JointState"]
    stamp = Time(sec=int(stamp_ns // 1_000_000_000), nanosec=int(stamp_ns % 1_000_000_000))
    header = Header(seq=0, stamp=stamp, frame_id="") if ros1 else Header(stamp=stamp, frame_id="")
    return JointState(header=header, name=list(names), position=np.asarray(pos, float), velocity=np.asarray(vel, float), effort=np.asarray(eff, float))


def write_bag(path, kind, data, topic="/joint_states", extra=()):
    """Write JointState messages: kind 'ros1', 'sqlite3' or 'mcap'. `extra` = (stamp_ns, names, pos, vel, eff) messages."""
    ns, pos, vel, eff = data
    ros1 = kind == "ros1"
    ts = get_typestore(Stores.ROS1_NOETIC if ros1 else Stores.ROS2_HUMBLE)
    msgs = [(int(ns[k]), JOINTS, pos[k], vel[k], eff[k]) for k in range(len(ns))] + list(extra)
    msgs.sort(key=lambda m: m[0])
    if ros1:
        with Writer1(path) as w:
            conn = w.add_connection(topic, "sensor_msgs/msg/JointState", typestore=ts)
            for m in msgs:
                w.write(conn, m[0], ts.serialize_ros1(msg(ts, True, *m), "sensor_msgs/msg/JointState"))
    else:
        plugin = StoragePlugin.MCAP if kind == "mcap" else StoragePlugin.SQLITE3
        with Writer2(path, version=9, storage_plugin=plugin) as w:
            conn = w.add_connection(topic, "sensor_msgs/msg/JointState", typestore=ts)
            for m in msgs:
                w.write(conn, m[0], ts.serialize_cdr(msg(ts, False, *m), "sensor_msgs/msg/JointState"))
    return path


@pytest.mark.parametrize("kind", ["ros1", "sqlite3", "mcap"])
def test_bag_read_back_exactly(tmp_path, kind):
    data = samples()
    path = write_bag(tmp_path / ("run.bag" if kind == "ros1" else f"run_{kind}"), kind, data)
    ds = read_logs(path, options={"jitter": 0.5})  # keep the jittered stamps as they are
    ns, pos, vel, eff = data
    assert ds.joint_names == JOINTS
    np.testing.assert_array_equal(ds.t, ns * 1e-9)
    np.testing.assert_array_equal(ds.q, pos)
    np.testing.assert_array_equal(ds.dq, vel)
    np.testing.assert_array_equal(ds.tau, eff)
    assert ds.warnings == []


def test_ros2_storage_file_path_and_conditioning(tmp_path):
    rng = np.random.default_rng(3)
    ns = T0 + np.arange(3000, dtype=np.int64) * 2_000_000
    t = (ns - T0) * 1e-9
    pos = np.stack([0.5 * np.sin(2 * np.pi * 0.4 * t + p) for p in rng.uniform(0, 6, 3)], 1)
    eff = 3 * pos
    path = write_bag(tmp_path / "arm", "mcap", (ns, pos, np.zeros_like(pos), eff))
    storage = next(path.glob("*.mcap"))  # the storage file inside the folder also works
    ds = load_dataset(storage, options={"max_frequency": 0.4})
    np.testing.assert_allclose(ds.tau, 3 * ds.q, atol=1e-9)
    w = 2 * np.pi * 0.4
    i = np.rint((ds.t - T0 * 1e-9) * 500).astype(int)
    ref = -w * w * pos[i]
    assert np.sqrt(np.mean((ds.ddq - ref) ** 2)) < 1e-3 * np.sqrt(np.mean(ref**2))


def test_profile_maps_names_units_and_skips_other_publishers(tmp_path):
    ns, pos, vel, eff = samples(200, seed=4)
    # a gripper publishes its own JointState messages on the same topic
    grip = [(int(ns[k]) + 1000, ["finger"], [0.01], [0.0], [1.0]) for k in range(0, 200, 10)]
    deg = np.degrees(pos)
    path = write_bag(tmp_path / "deg.bag", "ros1", (ns, deg, np.degrees(vel), eff), extra=grip)
    prof = {"units": {"q": "deg", "dq": "deg/s"}, "joints": {"yaw": {"name": "base_yaw", "sign": -1}, "shoulder": {}, "elbow": {}}}
    ds = read_logs(path, profile=prof, options={"jitter": 0.5})
    assert ds.joint_names == ["yaw", "shoulder", "elbow"]
    np.testing.assert_allclose(ds.q, pos * [-1, 1, 1], atol=1e-12)
    np.testing.assert_allclose(ds.dq, vel * [-1, 1, 1], atol=1e-12)
    assert any("skipped 20 JointState messages" in w for w in ds.warnings)


def test_bad_bags_raise_data_error(tmp_path, capsys):
    data = samples(50)
    path = write_bag(tmp_path / "a.bag", "ros1", data, topic="/arm/joint_states")
    with pytest.raises(DataError, match="no sensor_msgs/JointState topic '/joint_states'.*/arm/joint_states"):
        read_logs(path, profile={"topic": "/joint_states"})
    with pytest.raises(DataError, match="never seen: wrist"):
        read_logs(path, profile={"joints": {"wrist": {}}})
    ns, pos, vel, eff = data
    pos = pos.copy()
    pos[17, 1] = np.nan
    nan_bag = write_bag(tmp_path / "nan.bag", "ros1", (ns, pos, vel, eff))
    with pytest.raises(DataError, match="non-finite position of joint 'shoulder' in message 18"):
        read_logs(nan_bag)
    ns2 = ns.copy()
    ns2[30] = ns2[29]  # duplicate header stamp
    dup = write_bag(tmp_path / "dup.bag", "ros1", (ns2, data[1], vel, eff))
    with pytest.raises(DataError, match="duplicate timestamp at data message 31"):
        read_logs(dup)
    broken = tmp_path / "broken.bag"
    broken.write_bytes(b"#ROSBAG V2.0\n garbage")
    with pytest.raises(DataError, match="broken.bag"):
        read_logs(broken)
    assert main(["logs", str(broken)]) == 2
    assert capsys.readouterr().err.count("\n") == 1
    # a bad bag of each storage through the CLI: one line naming the bag and the message, no output
    for kind, name in (("ros1", "nan.bag"), ("sqlite3", "nan_db3"), ("mcap", "nan_mcap")):
        bag = nan_bag if kind == "ros1" else write_bag(tmp_path / name, kind, (ns, pos, vel, eff))
        out = tmp_path / f"{name}.csv"
        assert main(["logs", str(bag), "--cutoff", "20", "--out", str(out)]) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and name in err and "message 18" in err, err
        assert not out.exists() and not list(tmp_path.glob(f".{name}.csv.*"))
