"""Fleet analysis on real Dask clusters over real simulated bags.

Real parts: bags written with rosbags by the simulator (three invented carts, one whose true left
radius shrinks with distance), a real ``distributed.LocalCluster`` of two worker processes, and a
``dask scheduler`` plus ``dask worker`` started here as separate processes on 127.0.0.1. The
in-process loop over the same bags is the reference the cluster runs must equal row for row.
"""
from __future__ import annotations

import csv
import io
import os
import shutil
import signal
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest

from wheel_dr.fleet.demo import DEMO_FLEET, _route_length_m, build_demo_fleet
from wheel_dr.fleet.discover import find_bags
from wheel_dr.fleet.run import IN_PROCESS, OUTPUT_NAMES, run_fleet
from wheel_dr.fleet.tables import BAG_COLUMNS, ROBOT_COLUMNS

BAGS_PER_ROBOT = 4
DURATION_S = 150.0
RATE_HZ = 20.0
SEED = 5


def _cli(*args: str, **kw) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "wheel_dr.cli", *args], capture_output=True, text=True,
                          timeout=240, **kw)


def _rows(path: Path) -> list[dict[str, str]]:
    return list(csv.DictReader(io.StringIO(path.read_text())))


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="module")
def fleet_root(tmp_path_factory) -> Path:
    """Three robots of four shifts (rosbag2 mcap, rosbag2 sqlite3, ROS 1), plus a truncated bag, a
    file that is not a bag and a bare .mcap file copied out of a rosbag2 directory."""
    root = tmp_path_factory.mktemp("fleet") / "ferncliff"
    build_demo_fleet(root, bags_per_robot=BAGS_PER_ROBOT, duration_s=DURATION_S, rate_hz=RATE_HZ, seed=SEED)
    good = root / "quokka-2" / "day01" / "shift"
    broken = root / "quokka-2" / "day09" / "truncated"
    shutil.copytree(good, broken)
    data = next(broken.glob("*.mcap"))
    data.write_bytes(data.read_bytes()[: data.stat().st_size // 2])
    (root / "bettong" / "junk").mkdir()
    (root / "bettong" / "junk" / "notes.bag").write_bytes(b"not a bag at all\n" * 40)
    (root / "potoroo" / "loose").mkdir()
    shutil.copy(next((root / "potoroo" / "day01" / "shift").glob("*.db3")), root / "potoroo" / "loose" / "x.db3")
    shutil.copy(next(good.glob("*.mcap")), root / "quokka-2" / "loose.mcap")
    return root


@pytest.fixture(scope="module")
def reference(fleet_root, tmp_path_factory):
    """The in-process loop over the same bags: what every cluster run must reproduce."""
    out = tmp_path_factory.mktemp("ref")
    fr = run_fleet(fleet_root, out, scheduler=IN_PROCESS, progress=False)
    return fr, out


@pytest.fixture(scope="module")
def dask_cluster():
    """`dask scheduler` and `dask worker` (two worker processes under their nannies) as separate
    processes on 127.0.0.1; yields the scheduler address."""
    port = _free_port()
    address = f"tcp://127.0.0.1:{port}"
    env = dict(os.environ)
    sched = subprocess.Popen([sys.executable, "-m", "dask", "scheduler", "--host", "127.0.0.1", "--port", str(port),
                              "--no-dashboard"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)
    worker = subprocess.Popen([sys.executable, "-m", "dask", "worker", address, "--nworkers", "2", "--nthreads", "1",
                               "--host", "127.0.0.1", "--no-dashboard"], stdout=subprocess.DEVNULL,
                              stderr=subprocess.DEVNULL, env=env)
    from distributed import Client
    try:
        with Client(address, timeout=60) as c:
            c.wait_for_workers(2, timeout=90)
        yield address
    finally:
        for p in (worker, sched):
            p.send_signal(signal.SIGINT)
        for p in (worker, sched):
            try:
                p.wait(timeout=20)
            except subprocess.TimeoutExpired:
                p.kill()
                p.wait()


# ------------------------------------------------------------------------------------------------
def test_discovery_finds_every_kind_at_any_depth(fleet_root):
    found, notes = find_bags(fleet_root)
    kinds = {b.rel: b.kind for b in found}
    assert kinds["quokka-2/day01/shift"] == "rosbag2"
    assert kinds["potoroo/day02/shift"] == "rosbag2"
    assert kinds["bettong/day03/shift.bag"] == "rosbag1"
    assert kinds["bettong/junk/notes.bag"] == "rosbag1"
    assert kinds["quokka-2/loose.mcap"] == "mcap"
    assert "potoroo/loose/x.db3" not in kinds            # a loose sqlite file is no bag by itself
    assert len(found) == 3 * BAGS_PER_ROBOT + 3 and not notes
    # a pattern with one group names the robot instead of the first component
    by_day, _ = find_bags(fleet_root, r"/(day0[12])/")
    assert {b.robot for b in by_day} == {"day01", "day02"}


def test_bad_pattern_and_root_are_one_sentence_errors(fleet_root, tmp_path):
    r = _cli("fleet", str(fleet_root), "--robot-pattern", "(a)(b)", "--out", str(tmp_path / "o"))
    assert r.returncode == 2 and "exactly one group" in r.stderr and "Traceback" not in r.stderr
    r = _cli("fleet", str(tmp_path / "nowhere"), "--out", str(tmp_path / "o"))
    assert r.returncode == 2 and "not a directory" in r.stderr and "Traceback" not in r.stderr


def test_reference_rows_columns_errors_and_order(reference):
    fr, out = reference
    rows = _rows(out / "bags.csv")
    header = (out / "bags.csv").read_text().splitlines()[0].split(",")
    assert header[:5] == list(BAG_COLUMNS[:5]) and header[-8:] == list(BAG_COLUMNS[-8:])
    assert (out / "robots.csv").read_text().splitlines()[0].split(",") == list(ROBOT_COLUMNS)
    by_bag = {r["bag"]: r for r in rows}
    assert len(rows) == 3 * BAGS_PER_ROBOT + 3
    assert "truncated" in by_bag["quokka-2/day09/truncated"]["error"]
    assert by_bag["bettong/junk/notes.bag"]["error"]
    assert by_bag["quokka-2/loose.mcap"]["error"] or by_bag["quokka-2/loose.mcap"]["fit_left_radius"]
    good = [r for r in rows if not r["error"]]
    assert len(good) >= 3 * BAGS_PER_ROBOT
    for r in good:       # every good bag has a start, metrics against its truth and a fit or a reason
        assert r["start"].endswith("Z") and float(r["duration_s"]) > 100
        assert float(r["ate_anchored_rmse_m"]) >= 0
        assert r["fit_left_radius"] or r["fit_note"]
    for robot in ("bettong", "potoroo", "quokka-2"):   # each robot's bags in start order
        starts = [r["start"] for r in good if r["robot"] == robot]
        assert starts == sorted(starts) and len(starts) >= BAGS_PER_ROBOT
    assert all(not (out / n).with_suffix(".part").exists() for n in OUTPUT_NAMES)
    page = (out / "index.html").read_text()
    assert "potoroo" in page and "Where the wheels slip" in page and "Caution" in page


def test_trend_and_alert_on_a_wearing_tyre(reference):
    """The simulator's potoroo loses 6 % of its left radius per km (true geometry per bag); the fitted
    trend must find that slope and the current radius within three of their standard errors (a
    normal deviate beyond 3 sigma has probability 0.3 %, common practice), and only it is alerted."""
    fr, _ = reference
    robots = {s.row["robot"]: s for s in fr.robots}
    potoroo = next(r for r in DEMO_FLEET if r.name == "potoroo")
    from wheel_dr.demo.scenarios import varied_drive_scenario
    driven = 0.0
    for k in range(BAGS_PER_ROBOT):      # the same routes build_demo_fleet drove (seed + 31 * 1 + k)
        driven += _route_length_m(varied_drive_scenario(DURATION_S, route_seed=SEED + 31 + k, rate_hz=RATE_HZ))
    s = robots["potoroo"]
    tr = s.trends["fit_left_radius"]
    true_slope = -potoroo.wear_per_km * potoroo.radius_m / 1000.0
    assert abs(tr.slope_per_m - true_slope) < 3 * tr.slope_se_per_m
    assert tr.slope_per_m < 0 and abs(tr.slope_per_m) > 3 * tr.slope_se_per_m      # the wear is resolved
    true_end = potoroo.true_geometry(tr.end_distance_m)[0]
    assert abs(tr.value_at_end - true_end) < 3 * tr.value_at_end_se
    assert abs(s.row["distance_m"] - driven) < 0.02 * driven          # wheel distance ~ route length
    assert "left_radius" in s.row["alert"] and "suggested wheels.left_radius" in s.row["alert"]
    assert "right_radius 0.076 ->" not in s.row["alert"]
    # the healthy carts stay within 0.5 % of their files: no alert; their slopes are not resolved as wear
    for name in ("quokka-2", "bettong"):
        assert robots[name].row["alert"] == ""
        t = robots[name].trends["fit_left_radius"]
        assert abs(t.slope_per_m) < 3 * t.slope_se_per_m + 1e-9


def test_local_cluster_two_workers_equals_in_process(fleet_root, reference, tmp_path):
    _, ref = reference
    out = tmp_path / "local"
    r = _cli("fleet", str(fleet_root), "--out", str(out), "--scheduler", "local", "--workers", "2")
    assert r.returncode == 0, r.stderr
    assert "fleet [" in r.stderr and "failed" in r.stderr          # the progress bar on stderr
    for name in ("bags.csv", "robots.csv"):
        assert (out / name).read_text() == (ref / name).read_text()
    assert "ALERT" in r.stdout and "potoroo" in r.stdout


def test_scheduler_and_worker_processes_equal_local(fleet_root, reference, dask_cluster, tmp_path):
    _, ref = reference
    out = tmp_path / "tcp"
    r = _cli("fleet", str(fleet_root), "--out", str(out), "--scheduler", dask_cluster, "--quiet")
    assert r.returncode == 0, r.stderr
    for name in ("bags.csv", "robots.csv"):
        assert (out / name).read_text() == (ref / name).read_text()


def _watch(proc: subprocess.Popen, lines: list[str], first: threading.Event) -> None:
    for line in proc.stderr:
        lines.append(line)
        if line.startswith("fleet [") and " 0/" not in line:
            first.set()


def test_worker_killed_mid_run_completes(fleet_root, reference, dask_cluster, tmp_path):
    from distributed import Client
    _, ref = reference
    out = tmp_path / "killed"
    with Client(dask_cluster, timeout=30) as c:
        pids = c.run(os.getpid)
    proc = subprocess.Popen([sys.executable, "-m", "wheel_dr.cli", "fleet", str(fleet_root), "--out", str(out),
                             "--scheduler", dask_cluster], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    lines: list[str] = []
    first = threading.Event()
    t = threading.Thread(target=_watch, args=(proc, lines, first), daemon=True)
    t.start()
    assert first.wait(120), "".join(lines)
    os.kill(next(iter(pids.values())), signal.SIGKILL)          # one worker process dies with its task
    stdout = proc.stdout.read()          # stderr is the watcher's: no second reader of it
    proc.wait(timeout=240)
    t.join(10)
    assert proc.returncode == 0, "".join(lines)
    assert "fleet [" in "".join(lines)
    assert (out / "bags.csv").read_text() == (ref / "bags.csv").read_text()
    with Client(dask_cluster, timeout=30) as c:                    # the nanny restarted it
        c.wait_for_workers(2, timeout=60)
    assert "analysed" in stdout


def test_ctrl_c_cancels_and_writes_nothing(fleet_root, dask_cluster, tmp_path):
    out = tmp_path / "interrupted"
    proc = subprocess.Popen([sys.executable, "-m", "wheel_dr.cli", "fleet", str(fleet_root), "--out", str(out),
                             "--scheduler", dask_cluster], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    lines: list[str] = []
    first = threading.Event()
    t = threading.Thread(target=_watch, args=(proc, lines, first), daemon=True)
    t.start()
    assert first.wait(120), "".join(lines)
    proc.send_signal(signal.SIGINT)
    proc.wait(timeout=60)
    t.join(10)
    proc.stdout.close()
    assert proc.returncode == 130, "".join(lines)
    assert "interrupted" in "".join(lines) and "Traceback" not in "".join(lines)
    for name in OUTPUT_NAMES:
        assert not (out / name).exists()
    assert not [p for p in out.rglob("*.part")]


def test_resume_processes_only_new_bags(fleet_root, reference, dask_cluster, tmp_path):
    from wheel_dr.bags import write_bag
    from wheel_dr.demo.scenarios import varied_drive_scenario
    from wheel_dr.sim import simulate
    _, ref = reference
    root = tmp_path / "grown"
    shutil.copytree(fleet_root, root)
    out = tmp_path / "resume"
    r1 = _cli("fleet", str(root), "--out", str(out), "--scheduler", dask_cluster, "--quiet", "--resume")
    assert r1.returncode == 0, r1.stderr
    n = 3 * BAGS_PER_ROBOT + 3
    assert f"{n} analysed, 0 from the cache" in r1.stdout
    sc = varied_drive_scenario(DURATION_S, route_seed=99, rate_hz=RATE_HZ, nominal_left_radius_m=0.09,
                               nominal_right_radius_m=0.09, nominal_track_m=0.45, true_left_radius_m=0.09,
                               true_right_radius_m=0.09, true_track_m=0.45, k_left_m=2e-5, k_right_m=2e-5,
                               start_stamp_ns=1_805_000_000 * 10 ** 9)
    write_bag(simulate(sc, 3), root / "bettong" / "day20" / "shift.bag", "ros1")
    r2 = _cli("fleet", str(root), "--out", str(out), "--scheduler", dask_cluster, "--quiet", "--resume")
    assert r2.returncode == 0, r2.stderr
    errors = sum(1 for r in _rows(ref / "bags.csv") if r["error"])   # never cached (may be re-copied): analysed again
    assert errors >= 2
    assert f"{1 + errors} analysed, {n - errors} from the cache" in r2.stdout
    rows = {r["bag"]: r for r in _rows(out / "bags.csv")}
    old = {r["bag"]: r for r in _rows(ref / "bags.csv")}
    assert set(rows) == set(old) | {"bettong/day20/shift.bag"}
    for bag, row in old.items():
        assert rows[bag] == row
    assert rows["bettong/day20/shift.bag"]["fit_left_radius"]


def test_compare_and_calibrate_on_the_cluster(fleet_root, dask_cluster, tmp_path):
    bags = [str(fleet_root / "quokka-2" / "day01" / "shift"), str(fleet_root / "quokka-2" / "day02" / "shift")]
    params = str(fleet_root / "quokka-2" / "params.yaml")
    a = _cli("compare", *bags, "--params", params, "--out", str(tmp_path / "pool"), "--quiet", "--jobs", "1")
    b = _cli("compare", *bags, "--params", params, "--out", str(tmp_path / "dask"), "--quiet",
             "--scheduler", dask_cluster)
    assert a.returncode == 0 and b.returncode == 0, a.stderr + b.stderr
    assert (tmp_path / "pool" / "summary.csv").read_text() == (tmp_path / "dask" / "summary.csv").read_text()
    c = _cli("calibrate", *bags, "--truth", "/ground_truth", "--params", params, "--no-noise",
             "--write", str(tmp_path / "t1.yaml"))
    d = _cli("calibrate", *bags, "--truth", "/ground_truth", "--params", params, "--no-noise",
             "--write", str(tmp_path / "t2.yaml"), "--scheduler", dask_cluster)
    assert c.returncode == 0 and d.returncode == 0, c.stderr + d.stderr
    strip = [ln for ln in (tmp_path / "t1.yaml").read_text().splitlines() if "Tuned by" not in ln]
    assert strip == [ln for ln in (tmp_path / "t2.yaml").read_text().splitlines() if "Tuned by" not in ln]
    e = _cli("compare", *bags, "--params", params, "--out", str(tmp_path / "x"), "--scheduler", "nonsense")
    assert e.returncode == 2 and "neither 'local' nor a scheduler address" in e.stderr


def test_weighted_trend_against_numpy_polyfit():
    """The line and its unscaled covariance equal numpy.polyfit(w=1/se, cov='unscaled') (numpy's
    documented weighted least squares, the reference here); scaling by the reduced chi-square when it
    is above one matches polyfit's default cov=True (which always scales by chi2 / (n - 2))."""
    from wheel_dr.analysis.trend import drift_alert, weighted_trend
    rng = np.random.default_rng(4)
    d = np.sort(rng.uniform(0, 5000, 9))
    se = rng.uniform(2e-5, 8e-5, 9)
    y = 0.0825 - 3e-7 * d + rng.normal(0, 1, 9) * se * 0.5      # scatter below the errors: chi2 < 1
    t = weighted_trend(d, y, se)
    p, cov = np.polyfit(d, y, 1, w=1 / se, cov="unscaled")
    assert t.slope_per_m == pytest.approx(p[0], rel=1e-9) and t.intercept == pytest.approx(p[1], rel=1e-9)
    assert t.slope_se_per_m == pytest.approx(np.sqrt(cov[0, 0]), rel=1e-9)
    assert t.intercept_se == pytest.approx(np.sqrt(cov[1, 1]), rel=1e-9)
    end_var = cov[1, 1] + 2 * d.max() * cov[0, 1] + d.max() ** 2 * cov[0, 0]
    assert t.value_at_end_se == pytest.approx(np.sqrt(end_var), rel=1e-7)
    y2 = 0.0825 - 3e-7 * d + rng.normal(0, 1, 9) * se * 4       # scatter above the errors: scaled
    t2 = weighted_trend(d, y2, se)
    _, cov2 = np.polyfit(d, y2, 1, w=1 / se, cov=True)
    assert t2.reduced_chi2 > 1
    assert t2.slope_se_per_m == pytest.approx(np.sqrt(cov2[0, 0]), rel=1e-9)
    one = weighted_trend([10.0], [0.08], [1e-4])
    assert one.value_at_end == 0.08 and np.isnan(one.slope_per_m)
    # alert: beyond the percentage and beyond three standard errors; else nothing
    assert "-1.7" in drift_alert("left_radius", 0.0825, t, 0.5)          # 1.5 mm over 5 km of 82.5 mm
    assert drift_alert("left_radius", t.value_at_end * 1.003, t, 0.5) == ""   # 0.3 %: below the percentage
    worn = weighted_trend([0, 1000, 2000], [0.0825, 0.0815, 0.0805], [1e-5] * 3)
    assert "-2.42 %" in drift_alert("left_radius", 0.0825, worn, 0.5)
    loose = weighted_trend([0, 1000, 2000], [0.0825, 0.0815, 0.0805], [5e-3] * 3)
    assert drift_alert("left_radius", 0.0825, loose, 0.5) == ""
