#!/usr/bin/env python3
"""Soak test of the runtime node: 1 kHz joint states for 10 minutes with 5 % adversarial messages.

Starts ``.venv/bin/wheel_dr_node`` as its own process on an isolated DDS domain (random
ROS_DOMAIN_ID, localhost-only discovery) with the Quokka demo parameters (TF on, one output per
input), drives it from this process and listens to its odometry with one subscriber. Adversarial
messages (``--bad`` fraction, default 5 %) are drawn from: NaN / inf positions, +-1e308 readings
(differences overflow), huge encoder jumps, a wheel joint missing, extra and non-ASCII names,
empty names, array lengths that disagree, stamps zero / repeated / backwards, and byte strings
that are not JointState messages at all. Prints:

* messages lost: sent minus the node's ``received`` counter (its /diagnostics), and odometry the
  node published (its accepted samples) that did not reach the subscriber;
* NaN published: odometry messages with any non-finite pose, twist or covariance entry;
* RSS of the node process at the start and end of the driven window, and its slope over the
  last 8 minutes (least-squares line through samples every 5 s; target: under 1 MB);
* latency p99: inside the node (receipt to odometry publish, whole run, its diagnostics) and end
  to end (stamp here to odometry back here);
* CPU share of the node process (% of one core over the driven window); handler errors.

The machine is shared: run it when little else is busy. Usage:
.venv/bin/python tools/soak_node.py [--seconds 600] [--rate 1000] [--bad 0.05] [--seed 1]
"""
from __future__ import annotations

import argparse
import math
import os
import random
import signal
import struct
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "tools"))

from bench_node import _cpu_ticks, _dedicated_group, _percentile  # noqa: E402
from wheel_dr.ros.env import isolated_dds_env, ros_environment  # noqa: E402

__all__ = ["main"]

PARAMS = """/**:
  ros__parameters:
    wheels:
      left_joints: [quokka_left_wheel_joint]
      right_joints: [quokka_right_wheel_joint]
      left_radius: 0.0825
      right_radius: 0.0825
      track_width: 0.412
      wrap_angle: true
    output:
      publish_tf: true
      diagnostics_period_s: 1.0
"""
LEFT, RIGHT = "quokka_left_wheel_joint", "quokka_right_wheel_joint"
KINDS = ("nan", "inf", "overflow", "jump", "missing", "extra_names", "odd_names", "empty", "lengths",
         "stamp_zero", "stamp_repeat", "stamp_back", "garbage")


def _rss_mb(pid: int) -> float:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) / 1024.0
    return math.nan


def _slope_per_window(samples: list[tuple[float, float]], window_s: float) -> tuple[float, float]:
    """(least-squares slope x window, max - min) of (t, value) samples in the last ``window_s``."""
    import numpy as np

    if not samples:
        return math.nan, math.nan
    t_end = samples[-1][0]
    tail = [(t, v) for t, v in samples if t >= t_end - window_s]
    if len(tail) < 3:
        return math.nan, math.nan
    t = np.array([p[0] for p in tail])
    v = np.array([p[1] for p in tail])
    slope = float(np.polyfit(t - t[0], v, 1)[0])
    return slope * window_s, float(v.max() - v.min())


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=600.0, help="driven window, s (default 600)")
    ap.add_argument("--rate", type=float, default=1000.0, help="joint-state rate, Hz (default 1000)")
    ap.add_argument("--bad", type=float, default=0.05, help="fraction of adversarial messages (default 0.05)")
    ap.add_argument("--seed", type=int, default=1, help="random seed of the adversarial mix")
    args = ap.parse_args(argv)

    env = isolated_dds_env(ros_environment(os.environ))
    os.environ.update({k: env[k] for k in ("ROS_DOMAIN_ID", "ROS_AUTOMATIC_DISCOVERY_RANGE",
                                           "ROS_LOCALHOST_ONLY", "ROS_STATIC_PEERS")})
    import rclpy
    from diagnostic_msgs.msg import DiagnosticArray
    from nav_msgs.msg import Odometry
    from rclpy.context import Context
    from rclpy.executors import SingleThreadedExecutor
    from rclpy.node import Node
    from rclpy.qos import QoSProfile, qos_profile_sensor_data
    from rclpy.serialization import deserialize_message
    from sensor_msgs.msg import JointState

    workdir = Path(tempfile.mkdtemp(prefix="wheel_dr_soak_"))
    params = workdir / "soak.yaml"
    params.write_text(PARAMS)
    log_path = workdir / "node.log"
    log = log_path.open("w")
    proc = subprocess.Popen([str(Path(sys.executable).parent / "wheel_dr_node"), "--ros-args", "--params-file",
                             str(params), "-r", "joint_states:=/soak_js", "-r", "__ns:=/soak"],
                            env=env, stdout=log, stderr=subprocess.STDOUT)
    ctx = Context()
    rclpy.init(context=ctx)
    node = Node("wheel_dr_soak_driver", context=ctx)
    lock = threading.Lock()
    diag: list[dict[str, str]] = []
    e2e_ns: list[int] = []
    counts = {"odom": 0, "nan": 0}
    stop = threading.Event()

    def on_diag(msg: DiagnosticArray) -> None:
        for st in msg.status:
            if st.name.startswith("/soak/wheel_dr_node"):
                with lock:
                    diag.append({kv.key: kv.value for kv in st.values})

    node.create_subscription(DiagnosticArray, "/diagnostics", on_diag, 50)
    odom_sub = node.create_subscription(Odometry, "/soak/odom", lambda _: None, QoSProfile(depth=5000),
                                        raw=True, callback_group=_dedicated_group())
    pub = node.create_publisher(JointState, "/soak_js", QoSProfile(
        depth=100, reliability=qos_profile_sensor_data.reliability, durability=qos_profile_sensor_data.durability))
    executor = SingleThreadedExecutor(context=ctx)
    executor.add_node(node)

    def spin() -> None:
        while not stop.is_set():
            executor.spin_once(timeout_sec=0.05)

    def take_odom() -> None:
        """Every odometry message: stamp for the end-to-end latency, every number checked finite."""
        from rclpy.impl.implementation_singleton import rclpy_implementation as _rclpy

        stamp = struct.Struct("<iI")
        wait_set = _rclpy.WaitSet(1, 0, 0, 0, 0, 0, ctx.handle)
        with odom_sub.handle:
            while not stop.is_set():
                wait_set.clear_entities()
                wait_set.add_subscription(odom_sub.handle)
                wait_set.wait(50_000_000)
                while True:
                    got = odom_sub.handle.take_message(Odometry, True)
                    if got is None:
                        break
                    now = time.time_ns()
                    raw = got[0]
                    sec, nanosec = stamp.unpack_from(raw, 4)
                    m = deserialize_message(raw, Odometry)
                    p, t = m.pose.pose, m.twist.twist
                    numbers = (p.position.x, p.position.y, p.orientation.z, p.orientation.w, t.linear.x,
                               t.angular.z, *m.pose.covariance, *m.twist.covariance)
                    finite = all(math.isfinite(v) for v in numbers)
                    with lock:
                        counts["odom"] += 1
                        counts["nan"] += 0 if finite else 1
                        e2e_ns.append(now - (sec * 1_000_000_000 + nanosec))

    threads = [threading.Thread(target=spin, daemon=True), threading.Thread(target=take_odom, daemon=True)]
    for th in threads:
        th.start()
    rng = random.Random(args.seed)
    msg = JointState()
    w_l, w_r = 4.0, 6.0            # rad/s: the Quokka cart turning left at 0.4 rad/s
    sent = {"good": 0, "bad": 0, **{k: 0 for k in KINDS}}
    rss: list[tuple[float, float]] = []
    last_ns = [0]
    t0_ns = time.time_ns()

    def one(i: int, t_s: float) -> None:
        ns = time.time_ns()
        t_s = (ns - t0_ns) * 1e-9      # wheel angles at the stamp (an encoder read when stamped)
        names = [LEFT, RIGHT]
        pos = [w_l * t_s, w_r * t_s]
        vel: list[float] = []
        if rng.random() >= args.bad:
            sent["good"] += 1
        else:
            kind = rng.choice(KINDS)
            sent["bad"] += 1
            sent[kind] += 1
            if kind == "nan":
                pos[rng.randrange(2)] = math.nan
            elif kind == "inf":
                pos[rng.randrange(2)] = -math.inf
            elif kind == "overflow":
                pos[0] = rng.choice((1e308, -1e308, 1.7e308))
            elif kind == "jump":
                pos[1] += 1e6
            elif kind == "missing":
                names, pos = [LEFT], pos[:1]
            elif kind == "extra_names":
                names, pos = names + ["quokka_caster_swivel_joint", LEFT], pos + [0.3, pos[0]]
            elif kind == "odd_names":
                names = ["räd_joint", "\u5de6\u8f2a"]
            elif kind == "empty":
                names, pos = [], []
            elif kind == "lengths":
                pos, vel = pos[:1], [0.0, 0.0, 0.0]
            elif kind == "stamp_zero":
                ns = 0
            elif kind == "stamp_repeat":
                ns = last_ns[0]                      # the stamp of the last good message again
            elif kind == "stamp_back":
                ns -= 5_000_000_000
            elif kind == "garbage":
                pub.publish(bytes(rng.getrandbits(8) for _ in range(rng.randrange(1, 200))))
                return
        msg.header.stamp.sec, msg.header.stamp.nanosec = divmod(max(ns, 0), 1_000_000_000)
        msg.name, msg.position, msg.velocity = names, pos, vel
        pub.publish(msg)
        if names == [LEFT, RIGHT] and ns > last_ns[0]:
            last_ns[0] = ns

    try:
        deadline = time.monotonic() + 30
        while pub.get_subscription_count() == 0:
            if proc.poll() is not None or time.monotonic() > deadline:
                print(f"soak_node: the node did not start; its log is {log_path}:\n{log_path.read_text()}")
                return 1
            time.sleep(0.05)
        period = 1.0 / args.rate
        warm = int(args.rate)                                   # one second of clean warm-up
        start = time.perf_counter()
        for i in range(warm):
            ns = time.time_ns()
            t_s = (ns - t0_ns) * 1e-9
            msg.header.stamp.sec, msg.header.stamp.nanosec = divmod(ns, 1_000_000_000)
            msg.name, msg.position, msg.velocity = [LEFT, RIGHT], [w_l * t_s, w_r * t_s], []
            pub.publish(msg)
            delay = start + (i + 1) * period - time.perf_counter()
            if delay > 0:
                time.sleep(delay)
        time.sleep(1.5)
        with lock:
            before = dict(diag[-1]) if diag else {}
            counts["odom"] = counts["nan"] = 0
            e2e_ns[:] = []
        cpu0, wall0 = _cpu_ticks(proc.pid), time.monotonic()
        rss.append((0.0, _rss_mb(proc.pid)))
        n = int(round(args.rate * args.seconds))
        start = time.perf_counter()
        next_rss = 5.0
        last_print = 0.0
        for i in range(n):
            one(i, 1.0 + i * period)
            elapsed = time.perf_counter() - start
            if elapsed >= next_rss:
                rss.append((elapsed, _rss_mb(proc.pid)))
                next_rss += 5.0
                if elapsed - last_print >= 60.0:
                    last_print = elapsed
                    print(f"  {elapsed:5.0f} s: RSS {rss[-1][1]:.1f} MB, odometry back {counts['odom']}",
                          flush=True)
            delay = start + (i + 1) * period - time.perf_counter()
            if delay > 0:
                time.sleep(delay)
        wall1 = time.monotonic()
        cpu1 = _cpu_ticks(proc.pid)
        rss.append((wall1 - wall0, _rss_mb(proc.pid)))
        time.sleep(2.5)
        with lock:
            after = dict(diag[-1])
            e2e = [v * 1e-3 for v in e2e_ns]
            odom_back, nan_back = counts["odom"], counts["nan"]
        alive = proc.poll() is None
    finally:
        stop.set()
        for th in threads:
            th.join(timeout=2)
        executor.shutdown()
        node.destroy_node()
        ctx.try_shutdown()
        if proc.poll() is None:
            proc.send_signal(signal.SIGTERM)
        try:
            rc = proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            rc = proc.wait()
        log.close()

    wall = wall1 - wall0
    received = int(after["received"]) - int(before.get("received", 0))
    accepted = sum(int(after[k]) - int(before.get(k, 0)) for k in ("used", "chain_restarts"))
    total = sent["good"] + sent["bad"]
    slope8, spread8 = _slope_per_window(rss, 480.0)
    cpu_pct = 100.0 * (cpu1 - cpu0) / os.sysconf("SC_CLK_TCK") / wall
    print(f"wheel_dr_node soak: {total} joint states at {args.rate:g} Hz over {wall:.1f} s "
          f"(achieved {total / wall:.0f} Hz), {sent['bad']} adversarial ({100.0 * sent['bad'] / total:.1f} %), "
          f"node alive to the end: {alive}, exit code {rc}")
    print("  adversarial mix: " + ", ".join(f"{k} {sent[k]}" for k in KINDS))
    print(f"  messages lost at the node: {total - received} of {total} (node counted {received})")
    print(f"  odometry the node published for accepted samples: {accepted}; back here: {odom_back} "
          f"(lost {accepted - odom_back})")
    print(f"  NaN published: {nan_back} odometry messages with a non-finite number")
    print(f"  RSS: start {rss[0][1]:.1f} MB, end {rss[-1][1]:.1f} MB; over the last 8 min: slope "
          f"{slope8:+.2f} MB per 8 min, range {spread8:.2f} MB")
    print(f"  latency receipt -> odom publish (inside the node, whole run): "
          f"p50 {float(after.get('latency_total_p50_us', 'nan')):.0f} us, "
          f"p99 {float(after.get('latency_total_p99_us', 'nan')):.0f} us")
    print(f"  latency end to end (stamp here -> odom back here): p50 {_percentile(e2e, 50):.0f} us, "
          f"p99 {_percentile(e2e, 99):.0f} us")
    print(f"  CPU of the node process: {cpu_pct:.1f} % of one core")
    print(f"  skipped by the node: {int(after.get('skipped', 0)) - int(before.get('skipped', 0))}, "
          f"undecodable: {after.get('undecodable_messages')}, handler errors: {after.get('handler_errors')}")
    return 0 if alive and rc == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
