"""Bad and unusual bag input for ``wheel-dr replay``: pipes, overflowing readings, Ctrl-C while starting,
runs killed mid-write, a corrupt-bag corpus in all three formats, bare .mcap files, and every layout
the official MCAP writer (the ``mcap`` and ``mcap-ros2-support`` packages) produces.

The promise checked (README, "bad input"): one sentence in the tool's own words and exit status 2,
or a correct result with exit 0; never a traceback, a hang, a warning or a partial output.
MCAP layouts follow the MCAP specification (an open standard, mcap.dev/spec): chunked or not,
zstd / lz4 / no compression, any chunk size, a recording split over several files.
"""
from __future__ import annotations

import os
import re
import shutil
import signal
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from rosbags.highlevel import AnyReader
from rosbags.rosbag1 import Writer as Writer1
from rosbags.rosbag2 import StoragePlugin, Writer as Writer2
from rosbags.typesys import Stores, get_typestore

from test_bags_support import write_short_bag
from wheel_dr.runs import load_settings_file, replay_run
from wheel_dr.bags import read_run
from wheel_dr.cli import main

EXE = Path(sys.executable).with_name("wheel-dr")
LIBRARY_WORDS = re.compile(r"\b\w*(Error|Exception)\b|rosbags|Traceback")


@pytest.fixture(scope="module")
def bags(tmp_path_factory):
    d = tmp_path_factory.mktemp("hardening")
    out = {fmt: write_short_bag(d / ("drive.bag" if fmt == "ros1" else f"drive_{fmt}"), fmt)[0]
           for fmt in ("mcap", "sqlite3", "ros1")}
    out["dir"] = d
    return out


def _replay(args: list[str], capsys, timeout_s: int = 60) -> tuple[int, str, str]:
    """Run ``wheel-dr`` in this process under an alarm (a hang fails the test)."""
    def on_alarm(signum, frame):
        raise TimeoutError(f"wheel-dr {' '.join(args)} did not finish in {timeout_s} s")
    old = signal.signal(signal.SIGALRM, on_alarm)
    signal.alarm(timeout_s)
    try:
        code = main(args)
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def _one_sentence(code: int, err: str) -> None:
    assert code == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert not LIBRARY_WORDS.search(lines[0].split("error: ", 1)[-1]), err


def _no_partial_output(out: Path, code: int) -> None:
    parts = list(out.rglob("*.part")) if out.exists() else []
    assert not parts, parts
    csv = out / "trajectory.csv"
    if code != 0:
        assert not csv.exists()
    else:
        text = csv.read_text()
        assert text.endswith("\n") and len(text.splitlines()) >= 2


# -- special files, warnings, interrupts, stale parts ---------------------------------------------------
def test_pipes_are_refused_not_read(bags, tmp_path, capsys) -> None:
    fifo = tmp_path / "x.bag"
    os.mkfifo(fifo)
    code, _, err = _replay(["replay", str(fifo), "--out", str(tmp_path / "o")], capsys, 20)
    _one_sentence(code, err)
    assert "not a regular file" in err
    inside = tmp_path / "rec"
    shutil.copytree(bags["mcap"], inside)
    mcap = next(inside.glob("*.mcap"))
    mcap.unlink()
    os.mkfifo(mcap)
    code, _, err = _replay(["replay", str(inside), "--out", str(tmp_path / "o")], capsys, 20)
    _one_sentence(code, err)
    params = tmp_path / "p.yaml"
    os.mkfifo(params)
    code, _, err = _replay(["replay", str(bags["mcap"]), "--params", str(params), "--out", str(tmp_path / "o")],
                           capsys, 20)
    _one_sentence(code, err)
    assert "not a regular file" in err


def _overflow_bag(path: Path) -> Path:
    """Joint positions of +-1e308 between normal ones (IEEE 754: their difference overflows)."""
    ts = get_typestore(Stores.ROS2_KILTED)
    js = ts.types["sensor_msgs/msg/JointState"]
    header, stamp = ts.types["std_msgs/msg/Header"], ts.types["builtin_interfaces/msg/Time"]
    values = [0.0, 0.01, 1e308, -1e308, 1e308, 0.03, 0.04, -1.7e308, 0.05] + [0.05 + 0.01 * k for k in range(1, 40)]
    with Writer2(path, version=9, storage_plugin=StoragePlugin.MCAP) as w:
        c = w.add_connection("/joint_states", "sensor_msgs/msg/JointState", typestore=ts)
        for k, v in enumerate(values):
            t = 1_800_000_000_000_000_000 + k * 10_000_000
            msg = js(header=header(stamp=stamp(sec=t // 10**9, nanosec=t % 10**9), frame_id=""),
                     name=["left_wheel_joint", "right_wheel_joint"], position=np.array([v, -v]),
                     velocity=np.array([v, v]), effort=np.zeros(0))
            w.write(c, t, ts.serialize_cdr(msg, "sensor_msgs/msg/JointState"))
    return path


@pytest.mark.parametrize("params", ["", "    wheels:\n      wrap_angle: true\n",
                                    "    wheels:\n      source: velocity\n"])
def test_overflowing_readings_print_no_warning(tmp_path, params) -> None:
    bag = _overflow_bag(tmp_path / "overflow")
    cfg = tmp_path / "p.yaml"
    cfg.write_text("/**:\n  ros__parameters:\n" + (params or "    integration: exact\n"))
    r = subprocess.run([str(EXE), "replay", str(bag), "--params", str(cfg), "--out", str(tmp_path / "o")],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 0 and r.stderr == "", r.stderr
    assert "Warning" not in r.stdout and "nan" not in (tmp_path / "o" / "trajectory.csv").read_text().lower()


# Ctrl-C lands at a chosen moment after the command's module is loaded: while main() imports
# numpy, rosbags and the analysis, reads the bag or writes. (Before that, the interpreter's own
# start-up is not the tool's to handle.)
_INTERRUPTED = """
import os, signal, sys, threading
from wheel_dr.cli import main
timer = threading.Timer(float(sys.argv[1]), lambda: os.kill(os.getpid(), signal.SIGINT))
timer.daemon = True
timer.start()
sys.exit(main(sys.argv[2:]))
"""


def test_ctrl_c_while_importing_prints_no_traceback(bags, tmp_path) -> None:
    """SIGINT at several moments of start-up and work: exit 130 with one line, or the finished run."""
    codes = set()
    for delay_s in (0.005, 0.01, 0.03, 0.06, 0.1, 0.2, 0.35, 0.6):
        out = tmp_path / f"o{delay_s}"
        r = subprocess.run([sys.executable, "-c", _INTERRUPTED, str(delay_s), "replay", str(bags["mcap"]),
                            "--out", str(out)], capture_output=True, text=True, timeout=120)
        assert "Traceback" not in r.stderr and "KeyboardInterrupt" not in r.stderr, (delay_s, r.stderr)
        assert r.returncode in (0, 130), (delay_s, r.returncode, r.stderr)
        if r.returncode == 130:
            assert len(r.stderr.strip().splitlines()) == 1 and "interrupted" in r.stderr
        codes.add(r.returncode)
        _no_partial_output(out, 0 if r.returncode == 0 else 1)
    assert 130 in codes                  # the early interrupts did land during start-up


def _dead_pid() -> int:
    pid = 4_000_000
    while True:
        try:
            os.kill(pid, 0)
        except ProcessLookupError:
            return pid
        pid += 1


def test_parts_left_by_a_killed_run_are_cleaned(bags, tmp_path, capsys) -> None:
    stale_dir = tmp_path / f".copy.{_dead_pid()}.abc123.part"
    stale_dir.mkdir()
    (stale_dir / "copy").mkdir()
    out = tmp_path / "o"
    out.mkdir()
    stale_csv = out / f".trajectory.csv.{_dead_pid()}.x1.part"
    stale_csv.write_text("t,x\n1,")
    live = tmp_path / f".copy.{os.getpid()}.keep.part"     # this process is alive: not touched
    live.mkdir()
    code, _, err = _replay(["replay", str(bags["mcap"]), "--out", str(out), "--bag-out", str(tmp_path / "copy")],
                           capsys)
    assert code == 0, err
    assert not stale_dir.exists() and not stale_csv.exists() and live.exists()
    assert (tmp_path / "copy" / "metadata.yaml").is_file()


# -- the corrupt-bag corpus ---------------------------------------------------------------------------
def _storage_file(bag: Path) -> Path:
    return bag if bag.is_file() else next(f for f in bag.iterdir() if f.suffix in (".mcap", ".db3"))


def _variants(src: Path, fmt: str, into: Path):
    """(name, path) of damaged copies of ``src``: truncations, byte flips by region, zeroed blocks,
    broken metadata.yaml (rosbag2) and crafted messages."""
    rng = np.random.default_rng(11)

    def copy(name: str) -> Path:
        dst = into / (f"{name}.bag" if fmt == "ros1" else name)
        (shutil.copy if src.is_file() else shutil.copytree)(src, dst)
        return dst

    data = _storage_file(src).read_bytes()
    n = len(data)
    for frac in (0.0, 0.02, 0.3, 0.6, 0.95, 0.999):
        dst = copy(f"trunc{frac}")
        _storage_file(dst).write_bytes(data[:int(n * frac)])
        yield f"truncated to {frac:.1%}", dst
    regions = {"head": (0, min(64, n)), "start": (0, n // 10), "middle": (n // 3, 2 * n // 3), "tail": (n - 512, n)}
    for region, (lo, hi) in regions.items():
        for k in range(2):
            dst = copy(f"flip_{region}{k}")
            buf = bytearray(data)
            for at in rng.integers(lo, hi, 12):
                buf[int(at)] ^= int(rng.integers(1, 256))
            _storage_file(dst).write_bytes(bytes(buf))
            yield f"bytes flipped in the {region}", dst
    for frac in (0.2, 0.5, 0.8):
        dst = copy(f"zero{frac}")
        buf = bytearray(data)
        at = int(n * frac)
        buf[at:at + 4096] = bytes(min(4096, n - at))
        _storage_file(dst).write_bytes(bytes(buf))
        yield f"zeroed 4 KiB at {frac:.0%}", dst
    if fmt != "ros1":
        meta = (src / "metadata.yaml").read_text()
        for name, text in (("meta_empty", ""), ("meta_truncated", meta[:len(meta) // 2]),
                           ("meta_garbage", "rosbag2_bagfile_information: [\n  : :"),
                           ("meta_wrong_file", meta.replace(_storage_file(src).name, "other.mcap")),
                           ("meta_wrong_version", meta.replace("version: 9", "version: 999")),
                           ("meta_binary", "\x00\xff\xfe" * 50)):
            dst = copy(name)
            (dst / "metadata.yaml").write_text(text, errors="surrogateescape")
            yield f"metadata.yaml {name[5:]}", dst
    yield "crafted joint-state messages", _crafted_bag(into / ("crafted.bag" if fmt == "ros1" else "crafted"), fmt)


def _crafted_bag(path: Path, fmt: str) -> Path:
    """Valid bag structure, joint-state payloads that are not JointStates (and a few that are)."""
    ros1 = fmt == "ros1"
    ts = get_typestore(Stores.ROS1_NOETIC if ros1 else Stores.ROS2_KILTED)
    js = ts.types["sensor_msgs/msg/JointState"]
    header, stamp = ts.types["std_msgs/msg/Header"], ts.types["builtin_interfaces/msg/Time"]
    ser = ts.serialize_ros1 if ros1 else ts.serialize_cdr

    def good(k: int) -> bytes:
        t = 1_800_000_000_000_000_000 + k * 20_000_000
        kw = {"seq": k} if ros1 else {}
        m = js(header=header(**kw, stamp=stamp(sec=t // 10**9, nanosec=t % 10**9), frame_id=""),
               name=["left_wheel_joint", "right_wheel_joint"], position=np.array([0.01 * k, 0.012 * k]),
               velocity=np.zeros(0), effort=np.zeros(0))
        return bytes(ser(m, "sensor_msgs/msg/JointState"))

    sample = good(1)
    crafted = [sample[:9], sample[:-5], b"\x00" * len(sample), bytes(len(sample) // 2),
               sample[:len(sample) - 24] + b"\xff" * 24, b"\x00\x01\x00\x00" + b"\xff\xff\xff\x7f" * 6]
    rows = [good(k) for k in range(1, 30)]
    rows[5:5] = crafted
    if ros1:
        writer = Writer1(path)
        with writer:
            c = writer.add_connection("/joint_states", "sensor_msgs/msg/JointState", typestore=ts)
            for k, raw in enumerate(rows):
                writer.write(c, 1_800_000_000_000_000_000 + k * 20_000_000, raw)
    else:
        plugin = StoragePlugin.MCAP if fmt == "mcap" else StoragePlugin.SQLITE3
        with Writer2(path, version=9, storage_plugin=plugin) as writer:
            c = writer.add_connection("/joint_states", "sensor_msgs/msg/JointState", typestore=ts)
            for k, raw in enumerate(rows):
                writer.write(c, 1_800_000_000_000_000_000 + k * 20_000_000, raw)
    return path


@pytest.mark.parametrize("fmt", ["mcap", "sqlite3", "ros1"])
def test_corrupt_bag_corpus(bags, fmt, tmp_path, capsys) -> None:
    """Every damaged copy gives one sentence and exit 2, or a correct result (exit 0); the damaged
    copies that still replay give the original's trajectory on the samples they kept."""
    original = read_run(bags[fmt], use_imu=False)
    seen = {0: 0, 2: 0}
    for what, bag in _variants(bags[fmt], fmt, tmp_path):
        out = tmp_path / f"out_{bag.name}"
        code, _, err = _replay(["replay", str(bag), "--out", str(out), "--no-imu"], capsys)
        assert code in (0, 2), (what, code, err)
        seen[code] += 1
        if code == 2:
            _one_sentence(code, err)
        else:
            assert err == "", (what, err)
        _no_partial_output(out, code)
        if code == 0 and what.startswith("truncated"):
            # a bag cut short that still reads holds a prefix of the original's samples
            got = read_run(bag, use_imu=False).samples
            assert np.array_equal(got.stamp_ns, original.samples.stamp_ns[:len(got)])
    assert seen[2] >= 10, seen          # most damage is detected and reported


# -- bare .mcap files and the official MCAP writer --------------------------------------------------------
def _raw_messages(bag: Path):
    with AnyReader([bag]) as reader:
        schemas = {}
        for c in reader.connections:
            schemas[c.topic] = (c.msgtype, c.msgdef.data if hasattr(c.msgdef, "data") else c.msgdef)
        msgs = [(c.topic, t, bytes(raw)) for c, t, raw in reader.messages()]
    return schemas, msgs


def _mcap_write(path: Path, schemas, msgs, **options) -> None:
    from mcap.writer import Writer as McapWriter

    ts = get_typestore(Stores.ROS2_KILTED)
    with open(path, "wb") as fh:
        w = McapWriter(fh, **options)
        w.start(profile="ros2", library="wheel_dr test")
        channels = {}
        for topic, (msgtype, _) in schemas.items():
            text, _ = ts.generate_msgdef(msgtype, ros_version=2)
            sid = w.register_schema(name=msgtype, encoding="ros2msg", data=text.encode())
            channels[topic] = w.register_channel(topic=topic, message_encoding="cdr", schema_id=sid)
        for seq, (topic, t, raw) in enumerate(msgs):
            w.add_message(channels[topic], log_time=t, data=raw, publish_time=t, sequence=seq)
        w.finish()


def _to_plain(value):
    if hasattr(value, "__dataclass_fields__"):
        return {k: _to_plain(getattr(value, k)) for k in value.__dataclass_fields__ if k != "__msgtype__"}
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (list, tuple)):
        return [_to_plain(v) for v in value]
    return value


def _mcap_ros2_write(path: Path, bag: Path, topics: set[str]) -> None:
    """Serialised by mcap-ros2-support's own CDR encoder from the decoded messages."""
    from mcap_ros2.writer import Writer as Ros2Writer

    ts = get_typestore(Stores.ROS2_KILTED)
    with open(path, "wb") as fh, AnyReader([bag]) as reader:
        w = Ros2Writer(fh)
        schemas = {}
        for c in reader.connections:
            if c.topic in topics:
                text, _ = ts.generate_msgdef(c.msgtype, ros_version=2)
                schemas[c.topic] = w.register_msgdef(c.msgtype, text)
        for c, t, raw in reader.messages():
            if c.topic in topics:
                w.write_message(c.topic, schemas[c.topic], _to_plain(reader.deserialize(raw, c.msgtype)),
                                log_time=t, publish_time=t)
        w.finish()


def _trajectory(bag: Path):
    data = read_run(bag, truth="none")
    res = replay_run(data, load_settings_file(None))
    return data, res.trajectory


def _assert_same(a, b) -> None:
    (da, ta), (db, tb) = a, b
    assert np.array_equal(da.samples.stamp_ns, db.samples.stamp_ns)
    assert np.array_equal(ta.status, tb.status)
    for name in ("x_m", "y_m", "yaw_rad", "cov", "v_mps", "w_radps"):
        assert np.array_equal(getattr(ta, name), getattr(tb, name)), name
    assert np.array_equal(ta.slip.slip, tb.slip.slip)
    assert (da.gyro_z_radps is None) == (db.gyro_z_radps is None)
    if da.gyro_z_radps is not None:
        assert np.array_equal(da.gyro_z_radps, db.gyro_z_radps, equal_nan=True)


@pytest.fixture(scope="module")
def original(bags):
    return _trajectory(bags["mcap"])


def test_a_bare_mcap_file_reads_like_its_bag(bags, original, tmp_path) -> None:
    bare = tmp_path / "copied.mcap"
    shutil.copy(_storage_file(bags["mcap"]), bare)
    _assert_same(original, _trajectory(bare))


@pytest.mark.parametrize("layout", [
    {"compression": "ZSTD"},
    {"compression": "LZ4"},
    {"compression": "NONE"},
    {"compression": "ZSTD", "chunk_size": 200},        # tiny chunks: a few messages each
    {"compression": "NONE", "use_chunking": False},    # no chunks at all
    {"compression": "LZ4", "use_summary_offsets": False, "use_statistics": False},
])
def test_official_mcap_writer_layouts_replay_equal(bags, original, tmp_path, layout) -> None:
    from mcap.writer import CompressionType

    schemas, msgs = _raw_messages(bags["mcap"])
    options = dict(layout, compression=CompressionType[layout["compression"]])
    path = tmp_path / "written.mcap"
    _mcap_write(path, schemas, msgs, **options)
    _assert_same(original, _trajectory(path))


def test_official_mcap_writer_split_recording_replays_equal(bags, original, tmp_path) -> None:
    """Several .mcap files of one recording in one folder, with the recorder's metadata.yaml
    listing them and, as when copied around without it, alone."""
    from mcap.writer import CompressionType

    schemas, msgs = _raw_messages(bags["mcap"])
    split = tmp_path / "split"
    split.mkdir()
    thirds = np.array_split(np.arange(len(msgs)), 3)
    names = [f"split_{k}.mcap" for k in range(3)]
    for name, part in zip(names, thirds):
        _mcap_write(split / name, schemas, [msgs[i] for i in part], compression=CompressionType.ZSTD,
                    chunk_size=4096)
    _assert_same(original, _trajectory(split))                     # no metadata.yaml
    meta = (bags["mcap"] / "metadata.yaml").read_text()
    old = _storage_file(bags["mcap"]).name
    listing = "".join(f"  - {n}\n" for n in names)
    meta = re.sub(r"  relative_file_paths:\n(  - .*\n)+", "  relative_file_paths:\n" + listing, meta)
    meta = meta.replace(f"path: {old}", f"path: {names[0]}")
    (split / "metadata.yaml").write_text(meta)
    _assert_same(original, _trajectory(split))                     # with the recorder's listing


def test_mcap_ros2_encoder_output_replays_equal(bags, original, tmp_path) -> None:
    path = tmp_path / "encoded.mcap"
    with AnyReader([bags["mcap"]]) as reader:
        topics = {c.topic for c in reader.connections}
    _mcap_ros2_write(path, bags["mcap"], topics)
    _assert_same(original, _trajectory(path))


def test_help_imports_no_numerical_or_bag_library() -> None:
    """`wheel-dr --help` lists every command (calibrate included) without importing numpy, scipy or
    rosbags: commands import what they need when they run (start-up figures: tools/bench_startup.py)."""
    probe = ("import sys\nfrom wheel_dr.cli import main\n"
             "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
             "print(sorted(m for m in ('numpy', 'scipy', 'rosbags', 'matplotlib') if m in sys.modules))")
    r = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, timeout=60)
    assert r.stdout.strip().splitlines()[-1] == "[]", r.stdout
    assert "calibrate" in r.stdout and "replay" in r.stdout
