"""The wheel-dr command: help texts, synth/compare/demo outputs, and every bad input as one sentence."""
from __future__ import annotations

import json
import math
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from rosbags.rosbag2 import StoragePlugin, Writer as Writer2
from rosbags.typesys import Stores, get_typestore

from test_bags_support import write_short_bag
from wheel_dr.cli import main
from wheel_dr.params import atomic_write_text

REPO = Path(__file__).resolve().parents[1]
PARAMS = ("/**:\n  ros__parameters:\n    wheels:\n      left_joints: [quokka_left_wheel_joint]\n"
          "      right_joints: [quokka_right_wheel_joint]\n")


@pytest.fixture(scope="module")
def work(tmp_path_factory):
    d = tmp_path_factory.mktemp("cli")
    bag, sim = write_short_bag(d / "drive", "mcap")
    bag2, _ = write_short_bag(d / "drive2", "sqlite3", seed=4)
    a = d / "nominal.yaml"
    atomic_write_text(a, PARAMS)
    b = d / "corrected.yaml"
    atomic_write_text(b, PARAMS + "      left_radius: 0.0829\n      right_radius: 0.0822\n      track_width: 0.4185\n")
    return {"dir": d, "bag": bag, "bag2": bag2, "a": a, "b": b, "sim": sim}


@pytest.mark.parametrize("command, words", [("synth", ["--seed", "sqlite3"]), ("replay", ["trajectory.csv", "URDF"]),
                                            ("compare", ["--truth", "summary.csv", "index.html"]),
                                            ("demo", ["config/demo_nominal.yaml", "--out"])])
def test_every_subcommand_explains_itself(command, words, capsys):
    with pytest.raises(SystemExit) as ex:
        main([command, "--help"])
    assert ex.value.code == 0
    text = " ".join(capsys.readouterr().out.split())
    for w in words:
        assert w in text


def test_synth_is_deterministic_for_a_seed(tmp_path, capsys):
    for name in ("a", "b"):
        assert main(["synth", str(tmp_path / name), "--scenario", "square-ccw", "--seed", "5", "--rate", "20"]) == 0
    from wheel_dr.bags import read_run
    ra, rb = read_run(tmp_path / "a"), read_run(tmp_path / "b")
    assert np.array_equal(ra.samples.position, rb.samples.position)
    assert np.array_equal(ra.gyro_z_radps, rb.gyro_z_radps)
    assert main(["synth", str(tmp_path / "c.bag"), "--format", "ros1", "--rate", "20", "--no-slip"]) == 0
    assert read_run(tmp_path / "c.bag").storage == "rosbag1"
    assert "wrote" in capsys.readouterr().out


def test_compare_two_bags_two_settings_in_parallel(work, capsys):
    out = work["dir"] / "cmp"
    code = main(["compare", str(work["bag"]), str(work["bag2"]), "--params", str(work["a"]), "--params",
                 str(work["b"]), "--out", str(out), "--jobs", "2", "--quiet"])
    assert code == 0
    text = capsys.readouterr().out
    assert "report:" in text and "the URDF on /robot_description" in text
    rows = (out / "summary.csv").read_text().splitlines()
    assert len(rows) == 1 + 4
    doc = json.loads((out / "summary.json").read_text())
    got = {(r["bag"], r["settings"]): r for r in doc["rows"]}
    assert set(got) == {(b, s) for b in ("drive", "drive2") for s in ("nominal", "corrected")}
    # the true geometry must beat the nominal one on the drift it leaves (the drives are the same route)
    for bag in ("drive", "drive2"):
        assert got[(bag, "corrected")]["ate_aligned_rmse_m"] < got[(bag, "nominal")]["ate_aligned_rmse_m"]
        assert got[(bag, "corrected")]["slip_truth"]
    html = (out / "index.html").read_text()
    assert "<img" in html and "data:image/png;base64," in html
    assert not [p for p in out.iterdir() if p.name.endswith(".part")]


def test_one_bag_runs_its_settings_in_forked_workers(work, capsys):
    out = work["dir"] / "cmp1"
    assert main(["compare", str(work["bag"]), "--params", str(work["a"]), "--params", str(work["b"]), "--out",
                 str(out), "--jobs", "2"]) == 0
    err = capsys.readouterr().err
    assert "compare [" in err and "2/2" in err               # the progress bar
    doc = json.loads((out / "summary.json").read_text())
    assert [r["settings"] for r in doc["rows"]] == ["nominal", "corrected"]


def test_demo_writes_the_report(tmp_path, capsys):
    assert main(["demo", "--out", str(tmp_path / "demo"), "--quiet"]) == 0
    text = capsys.readouterr().out
    page = tmp_path / "demo" / "index.html"
    assert f"report: {page.resolve()}" in text
    doc = json.loads((tmp_path / "demo" / "summary.json").read_text())
    quokka = [r for r in doc["rows"] if r["bag"].startswith("ferncliff_night_round")]
    assert [r["settings"] for r in quokka] == ["demo_nominal", "demo_corrected", "demo_motion_model", "demo_gyro"]
    # the second vehicle (the Numbat mecanum trolley) is its own recording with its example parameters
    assert [(r["bag"].split("_s")[0], r["settings"]) for r in doc["rows"] if r not in quokka] == [
        ("ferncliff_germination_lab_numbat", "example_mecanum")]
    rows = {r["settings"]: r for r in quokka}
    # corrected geometry drifts less than the nominal one; gyro substitution leaves a smaller heading
    # error after the slip events than flags alone (gyrodometry, Borenstein & Feng 1996)
    assert rows["demo_corrected"]["drift_endpoint_pct"] < rows["demo_nominal"]["drift_endpoint_pct"]
    assert rows["demo_gyro"]["slip_heading_error_mean_deg"] < rows["demo_corrected"]["slip_heading_error_mean_deg"]
    assert "<h2>Calibration" in page.read_text()
    assert "<h2>Second vehicle: the Numbat trolley (mecanum)</h2>" in page.read_text()
    assert main(["demo", "--out", str(tmp_path / "demo"), "--quiet", "--no-calibration"]) == 0   # cached now
    assert "using the cached demo drive" in capsys.readouterr().out


# -- bad input -------------------------------------------------------------------------------------
def _bad(args, capsys, *words):
    code = main(args)
    captured = capsys.readouterr()
    err = "\n".join(ln for ln in captured.err.strip().splitlines() if not ln.startswith("compare ["))
    assert code == 2, captured
    assert "Traceback" not in err and len(err.splitlines()) == 1, err
    for w in words:
        assert w in err, err
    return err


def _truncated(src: Path, dst: Path, keep: float) -> Path:
    shutil.copytree(src, dst)
    f = next(dst.glob("*.mcap"))
    data = f.read_bytes()
    f.write_bytes(data[: int(len(data) * keep)])
    return dst


def _corrupt(src: Path, dst: Path) -> Path:
    shutil.copytree(src, dst)
    f = next(dst.glob("*.mcap"))
    data = bytearray(f.read_bytes())
    rng = np.random.default_rng(0)
    start = len(data) // 3
    data[start:start + 4000] = rng.integers(0, 256, 4000, dtype=np.uint8).tobytes()
    f.write_bytes(bytes(data))
    return dst


def test_bad_inputs_are_one_sentence(work, tmp_path, capsys):
    d = work["dir"]
    _bad(["replay", str(tmp_path / "missing")], capsys, "does not exist")
    notbag = tmp_path / "notes.txt"
    notbag.write_text("hello")
    _bad(["replay", str(notbag)], capsys, "not a bag")
    fake = tmp_path / "fake.bag"
    fake.write_bytes(b"#ROSBAG V2.0\n" + b"\x00" * 50)
    _bad(["replay", str(fake)], capsys, "cannot be", "re-")
    _bad(["replay", str(_truncated(work["bag"], tmp_path / "trunc", 0.5))], capsys, "truncated")
    _bad(["replay", str(_corrupt(work["bag"], tmp_path / "corrupt"))], capsys, "corrupt")
    # no joint-state topic
    ts = get_typestore(Stores.ROS2_KILTED)
    with Writer2(tmp_path / "nojoints", version=9, storage_plugin=StoragePlugin.MCAP) as w:
        c = w.add_connection("/chatter", "std_msgs/msg/String", typestore=ts)
        w.write(c, 1, ts.serialize_cdr(ts.types["std_msgs/msg/String"](data="hi"), "std_msgs/msg/String"))
    _bad(["replay", str(tmp_path / "nojoints")], capsys, "no sensor_msgs/JointState topic", "/chatter")
    # configured joints not in the bag
    wrong = tmp_path / "wrong.yaml"
    atomic_write_text(wrong, "/**:\n  ros__parameters:\n    wheels:\n      left_joints: [front_left]\n"
                      "      right_joints: [front_right]\n")
    _bad(["replay", str(work["bag"]), "--params", str(wrong), "--out", str(tmp_path / "o")], capsys, "front_left",
         "left_joints")
    _bad(["replay", str(work["bag"]), "--params", str(tmp_path / "nope.yaml")], capsys, "does not exist")
    # truth absent / too short / not a pose topic
    _bad(["compare", str(tmp_path / "nojoints"), "--out", str(tmp_path / "o")], capsys, "JointState")
    _bad(["compare", str(work["bag"]), "--truth", "/nope", "--out", str(tmp_path / "o")], capsys, "/nope", "--truth")
    _bad(["compare", str(work["bag"]), "--truth", "/imu", "--out", str(tmp_path / "o")], capsys, "--truth")
    short = tmp_path / "short.txt"
    short.write_text("1800000001.0 0 0 0 0 0 0 1\n")
    _bad(["compare", str(work["bag"]), "--params", str(work["a"]), "--truth", str(short), "--out",
          str(tmp_path / "o")], capsys, "at least two")
    far = tmp_path / "far.txt"
    far.write_text("1.0 0 0 0 0 0 0 1\n2.0 1 0 0 0 0 0 1\n")    # truth that does not overlap the drive in time
    _bad(["compare", str(work["bag"]), "--params", str(work["a"]), "--truth", str(far), "--out",
          str(tmp_path / "o"), "--jobs", "1"], capsys)
    _bad(["synth", str(d / "drive")], capsys, "already exists")
    _bad(["synth", str(tmp_path / "x"), "--format", "ros1"], capsys, ".bag")
    assert not (tmp_path / "o" / "summary.csv").exists()


def test_console_script_prints_no_traceback(tmp_path):
    exe = Path(sys.executable).with_name("wheel-dr")
    cmd = [str(exe)] if exe.exists() else [sys.executable, "-m", "wheel_dr.cli"]
    r = subprocess.run(cmd + ["replay", str(tmp_path / "missing_bag")], capture_output=True, text=True, timeout=60,
                       cwd=REPO)
    assert r.returncode == 2 and "Traceback" not in r.stderr and "does not exist" in r.stderr
