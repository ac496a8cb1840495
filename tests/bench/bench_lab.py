"""Load benchmark of a lab (not a test): one broker, many benches publishing once a second with their events, and
one watcher; then what publishing adds to a 1 kHz recorder.

**The lab.** A Mosquitto broker on loopback (sessions kept, ``persistence true``, ``$SYS`` every second). Fifty
full recorders would need more cores than a small machine has (each simulates its rig at 1 kHz), so the benches
are fifty real :class:`~logger.publish.Publisher` outlets in one process, fed at 1 Hz in real time with what a
recorder would hand them: the per-second figures and the events of a demo-bench run recorded at the start (its
rollups and event table, each bench at its own point in the run, so their events do not come together), and a
recording state. The watcher is ``WatchApp`` with a real ``Feed``, in a process of its own on a 160x60
pseudo-terminal (it draws as it would for a person; its output is read and dropped). Printed: latency from
device time to the watcher's model (``Lab.lags_s``: each figure from the end of its second, each event from its
start), p50 and p99; the watcher's CPU share of one core over the window (all its threads, from its own process
time) and peak memory; the broker's PUBLISH messages per second in and out (its
``$SYS/broker/publish/messages/*`` counters) and its own CPU.

A real recorder's messages leave later than these: it hands a second over at its next batch (every 0.5 s while
nobody watches it), and an event when its detector has seen it; the second part measures that too.

**A recorder.** Two ``railtap record --port PTY`` processes side by side for the same window, each fed 1 kHz
by its own ``railtap sim --pty`` (as ``bench_record_cpu.py`` does), one with ``--publish``: the CPU share of
each, the difference, and the share of the publishing thread itself (threads are named for the kernel by a
bench-only shim, ``NAME_THREADS``). Beside them a third, ``railtap record --sim --speed 1 --publish``, whose
messages give a real recorder's latency to a ``Lab`` model in this process; the publishing pty recorder's is
printed too.

Goals: p99 under 1 s, the watcher under 20 % of a core, publishing adding under 0.5 % of a core.

Run with ``.venv/bin/python tests/bench/bench_lab.py [--benches 50] [--seconds 90] [--record-seconds 90]``.
Linux only (``/proc``); needs ``mosquitto`` (``apt-get install mosquitto``).
"""

from __future__ import annotations

import argparse
import fcntl
import getpass
import json
import math
import os
import shutil
import signal
import socket
import statistics
import struct
import subprocess
import sys
import tempfile
import termios
import threading
import time
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow.parquet as pq
from bench_record_cpu import cpu_s, serve, terminal, thread_cpu

from logger.events.model import Event
from logger.ingest.outlet import GOING_ON_KINDS, SecondFigures
from logger.ingest.state import LinkHealth, RecordingState, Snapshot

RAILTAP = [sys.executable, "-m", "logger"]
GOAL_P99_S, GOAL_WATCHER, GOAL_PUBLISH = 1.0, 0.20, 0.005
SCREEN = (60, 160)
"""The watcher's terminal, rows and columns: a large window on a laptop (with a line per channel, about twenty
demo benches show at once; the others are a scroll away, and the watcher takes in their messages all the same)."""
NAME_THREADS = """
import ctypes, threading
_libc, _run = ctypes.CDLL(None), threading.Thread.run
def _named(self):
    _libc.prctl(15, self.name.encode()[:15], 0, 0, 0)  # PR_SET_NAME: the name /proc shows for this thread
    _run(self)
threading.Thread.run = _named
"""
"""Python threads named for the kernel too, so /proc tells the publishing thread from the others (bench only)."""
RECORD = [sys.executable, "-c", NAME_THREADS + "import sys\nfrom logger.cli import main\nsys.exit(main(sys.argv[1:]))"]
SOURCE_S = 420
"""Device seconds of the recorded demo-bench run the benches replay: past its first flicker episode (at about
5 min 50 s), so some benches are in one during the window."""


# -- the broker ---------------------------------------------------------------------------------------------------

def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def start_broker(folder: Path) -> tuple[subprocess.Popen, int]:
    """Mosquitto on a free loopback port, configured as a lab's would be, with ``$SYS`` every second."""
    mosquitto = shutil.which("mosquitto") or "/usr/sbin/mosquitto"
    if not Path(mosquitto).exists():
        sys.exit("no mosquitto: apt-get install mosquitto")
    port = free_port()
    conf = folder / "mosquitto.conf"
    # ``user``: started as root, Mosquitto would switch to a user who cannot write this folder.
    conf.write_text(f"listener {port} 127.0.0.1\nallow_anonymous true\npersistence true\n"
                    f"persistence_location {folder}/\nsys_interval 1\nmax_queued_messages 100000\n"
                    f"log_dest file {folder}/mosquitto.log\nuser {getpass.getuser()}\n")
    broker = subprocess.Popen([mosquitto, "-c", str(conf)], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 60
    while True:
        try:
            socket.create_connection(("127.0.0.1", port), timeout=1).close()
            return broker, port
        except OSError:
            if broker.poll() is not None or time.monotonic() > deadline:
                sys.exit(f"mosquitto did not start: {(folder / 'mosquitto.log').read_text()[-400:]}")
            time.sleep(0.1)


class SysCounters:
    """The broker's own counters from ``$SYS``, each with the steady-clock time its latest value came."""

    TOPICS = ("$SYS/broker/publish/messages/received", "$SYS/broker/publish/messages/sent")

    def __init__(self, port: int) -> None:
        import paho.mqtt.client as mqtt

        self.latest: dict[str, tuple[int, float]] = {}
        self.client = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id=f"bench-sys-{os.getpid()}")
        self.client.on_connect = lambda c, u, f, r, p: [c.subscribe(t) for t in self.TOPICS]
        self.client.on_message = self._on_message
        self.client.connect("127.0.0.1", port)
        self.client.loop_start()

    def _on_message(self, client: Any, userdata: Any, message: Any) -> None:
        self.latest[message.topic] = (int(message.payload), time.monotonic())

    def mark(self) -> dict[str, tuple[int, float]]:
        return dict(self.latest)

    @staticmethod
    def rate(topic: str, before: dict[str, tuple[int, float]], after: dict[str, tuple[int, float]]) -> float:
        (n0, t0), (n1, t1) = before.get(topic, (0, 0.0)), after.get(topic, (0, 0.0))
        return (n1 - n0) / (t1 - t0) if t1 > t0 else math.nan

    def close(self) -> None:
        self.client.loop_stop()
        self.client.disconnect()


# -- what the benches replay -------------------------------------------------------------------------------------

class Source:
    """A recorded demo-bench run: its per-second figures and its events, by offset from its first second."""

    def __init__(self, run: Path) -> None:
        from logger.sim.scenario import load_scenario

        rig = load_scenario("demo-bench").rig
        self.channels = tuple(c.name for c in rig.channels)
        self.units = tuple(c.unit for c in rig.channels)
        self.rails = tuple(p.rail for p in rig.power_pairs())
        table = pq.read_table(sorted(run.glob("_rollup-*.parquet"))).sort_by("device_s")
        col = {name: table.column(name).to_numpy() for name in table.column_names}
        count = col["count"].astype(float)
        self.n = len(count)
        self.count = col["count"]
        self.minimum = np.column_stack([col[f"{c}_min"] for c in self.channels])
        self.mean = np.column_stack([col[f"{c}_mean"] for c in self.channels])
        self.maximum = np.column_stack([col[f"{c}_max"] for c in self.channels])
        self.sd = np.sqrt(np.column_stack([col[f"{c}_m2"] for c in self.channels]) / count[:, None])
        self.joules = np.column_stack([col[f"{r}_w_int"] for r in self.rails])
        first_s = table.column("utc")[0].as_py().timestamp()
        self.events: list[tuple[float, float, dict[str, Any]]] = []
        """(start, end) in seconds from the first second, and the event's row; an instant ends as it starts."""
        for e in pq.read_table(run / "_events.parquet").to_pylist():
            start = e["start"].timestamp() - first_s
            end = start if e["end"] is None else e["end"].timestamp() - first_s
            if 0 <= start < self.n:
                self.events.append((start, end, e))
        self.events.sort(key=lambda item: item[0])

    def figures(self, row: int, utc_s: int, device_s: int) -> SecondFigures:
        def one(a: np.ndarray) -> np.ndarray:
            out = a[row:row + 1].copy()
            out.flags.writeable = False
            return out

        return SecondFigures(self.channels, self.rails, np.array([device_s]), np.array([utc_s * 1_000_000]),
                             one(self.count), np.array([1.0]), one(self.minimum), one(self.mean), one(self.maximum),
                             one(self.sd), one(self.joules))


def record_source(folder: Path) -> Path:
    """A demo-bench run recorded as fast as it goes, for the benches to replay."""
    subprocess.run([*RAILTAP, "record", "--sim", "--speed", "0", "--duration", str(SOURCE_S), "--out", str(folder),
                    "--quiet", "--seed", "5"], check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    (run,) = folder.iterdir()
    return run


class Bench:
    """One simulated bench: a real Publisher, fed from the source at its own point in the run."""

    def __init__(self, source: Source, publisher: Any, name: str, offset_s: int, t0: float) -> None:
        self.source, self.publisher, self.name, self.offset_s, self.t0 = source, publisher, name, offset_s, t0
        self.next_event = 0
        self.cycle = 0
        self.going_on: list[tuple[float, Event]] = []
        self.ids = 0
        self.started = math.floor(t0)

    def cycle_start(self) -> float:
        """Wall time at which the current pass through the source began."""
        return self.t0 - self.offset_s + self.cycle * self.source.n

    def tick(self, now: float) -> None:
        """Hand over the events that have begun or ended by ``now``."""
        events = self.source.events
        while True:
            if self.next_event >= len(events):
                self.next_event, self.cycle = 0, self.cycle + 1
            start, end, doc = events[self.next_event]
            at = self.cycle_start() + start
            if at > now:
                break
            self.next_event += 1
            if at < self.t0:
                continue  # before this bench started
            ev = self._event(doc, at)
            if doc["kind"] in GOING_ON_KINDS:
                self.publisher.event_started(ev)
            self.going_on.append((self.cycle_start() + end, ev))
        for item in [g for g in self.going_on if g[0] <= now]:
            self.going_on.remove(item)
            self.ids += 1
            began = item[1]
            end_us = int(item[0] * 1e6)
            self.publisher.event_ended(replace(began, end_us=end_us, device_end_us=end_us, id=self.ids))

    @staticmethod
    def _event(doc: dict[str, Any], at: float) -> Event:
        """The recorded event as it begins at ``at`` (wall seconds); the device clock is taken to run with it."""
        start_us = int(at * 1e6)
        return Event(doc["kind"], start_us, None, doc["channel"], doc["value"], doc["depth_pct"], doc["count"],
                     doc["rate_hz"], doc["duty"], doc["peak"], doc["detail"] or "", None, None, start_us, None)

    def second(self, utc_s: int) -> None:
        """The figures of the second that ended at ``utc_s + 1``, and the bench's state."""
        device_s = utc_s - self.started
        row = (device_s + self.offset_s) % self.source.n
        self.publisher.seconds(self.source.figures(row, utc_s, device_s))
        link = LinkHealth("simulated rig", True, device_s * 1000, 1000.0, 0, 0, 0, 0, 0, None)
        recording = RecordingState(f"runs/{self.name}", device_s * 1000, 0, float(device_s), 0)
        self.publisher.status(Snapshot("running", "receiving", self.source.channels, self.source.units, None, None,
                                       None, link, recording, elapsed_s=float(device_s)))


# -- the watcher, in a process of its own --------------------------------------------------------------------------

def watcher_main(url: str, settle_s: float, seconds: float, report: Path) -> None:
    """Run the lab screen on this process's terminal; write what it measured over the window to ``report``."""
    from logger.publish import parse_broker
    from logger.watch import WatchApp
    from logger.watch.feed import Feed

    exec(NAME_THREADS, {})

    class TimedWatch(WatchApp):
        def on_ready(self) -> None:
            self.set_timer(settle_s, self.begin_window)
            self.set_timer(settle_s + seconds, self.end_window)

        def begin_window(self) -> None:
            self.window = (time.monotonic(), time.process_time(), len(self.lab.lags_s), thread_cpu(os.getpid()))

        def end_window(self) -> None:
            t0, c0, k0, threads0 = self.window
            wall, cpu = time.monotonic() - t0, time.process_time() - c0
            threads: dict[str, float] = {}
            for key, cpu_now in thread_cpu(os.getpid()).items():
                name = key.split(" ", 1)[1]
                threads[name] = threads.get(name, 0.0) + (cpu_now - threads0.get(key, 0.0)) / wall
            lags = list(self.lab.lags_s)[k0:]
            rows = self.lab.rows(time.time())
            report.write_text(json.dumps({
                "wall_s": wall, "cpu_s": cpu, "lags_s": lags, "benches": len(rows),
                "threads": threads,
                "peak_mb": _status_mb("VmHWM"), "ignored": self.lab.ignored}))
            self.exit()

    broker = parse_broker(url)
    TimedWatch(Feed(broker), broker.prefix, broker.url).run()


def _status_mb(field: str) -> float:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return int(line.split()[1]) / 1024
    return math.nan


def start_watcher(url: str, settle_s: float, seconds: float, report: Path) -> tuple[subprocess.Popen, int]:
    """The watcher on a pseudo-terminal of ``SCREEN`` size whose output is read and dropped."""
    master, slave = terminal()
    fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", SCREEN[0], SCREEN[1], 0, 0))
    env = {**os.environ, "TERM": "xterm-256color"}
    watcher = subprocess.Popen([sys.executable, __file__, "--as-watcher", url, "--settle", str(settle_s),
                                "--seconds", str(seconds), "--report", str(report)],
                               stdin=slave, stdout=slave, stderr=slave, env=env, start_new_session=True)
    os.close(slave)
    return watcher, master


# -- the two parts -----------------------------------------------------------------------------------------------

def percentile(values: list[float], q: float) -> float:
    return float(np.percentile(values, q)) if values else math.nan


def verdict(ok: bool) -> str:
    return "met" if ok else "NOT met"


def lab_part(args: argparse.Namespace, port: int, broker: subprocess.Popen, tmp: Path) -> None:
    from logger.publish import Publisher, parse_broker

    print(f"recording the demo-bench run the benches replay ({SOURCE_S} s of device time, unpaced)...", flush=True)
    source = Source(record_source(tmp / "source"))
    kinds = sorted({doc["kind"] for _, _, doc in source.events})
    print(f"  {source.n} seconds, {len(source.events)} events ({', '.join(kinds)}); each bench starts at its "
          "own point in it", flush=True)
    url = f"mqtt://127.0.0.1:{port}/lab"
    counters = SysCounters(port)
    t0 = time.time()
    publishers = [Publisher(parse_broker(url, {}), f"bench-{k:02d}", "demo-bench-12v", source.rails)
                  for k in range(args.benches)]
    benches = [Bench(source, p, p.bench, (k * 97) % source.n, t0) for k, p in enumerate(publishers)]
    report = tmp / "watcher.json"
    watcher, master = start_watcher(url, args.settle, args.seconds, report)
    window: dict[str, Any] = {}
    began = time.monotonic()
    last_s = math.floor(time.time())
    try:
        while watcher.poll() is None:
            now = time.time()
            for b in benches:
                b.tick(now)
            if math.floor(now) > last_s:
                last_s = math.floor(now)
                for b in benches:
                    b.second(last_s - 1)
            elapsed = time.monotonic() - began
            if "start" not in window and elapsed >= args.settle + 2:
                window["start"] = (time.monotonic(), counters.mark(), cpu_s(Path(f"/proc/{broker.pid}/stat")),
                                   time.process_time())
            if "end" not in window and elapsed >= args.settle + 2 + args.seconds - 4:
                window["end"] = (time.monotonic(), counters.mark(), cpu_s(Path(f"/proc/{broker.pid}/stat")),
                                 time.process_time())
            if elapsed > args.settle + args.seconds + 120:
                raise SystemExit("the watcher did not finish its window in time")
            time.sleep(0.05)
    finally:
        if watcher.poll() is None:
            os.killpg(watcher.pid, signal.SIGTERM)
        watcher.wait(30)
        os.close(master)
        for p in publishers:
            p.close()
        counters.close()
    if not report.exists():
        raise SystemExit(f"the watcher wrote no report (exit status {watcher.returncode})")
    w = json.loads(report.read_text())
    (a0, sys0, b0, d0), (a1, sys1, b1, d1) = window["start"], window["end"]
    wall = a1 - a0
    lags = w["lags_s"]
    p50, p99 = percentile(lags, 50), percentile(lags, 99)
    share = w["cpu_s"] / w["wall_s"]
    busy = ", ".join(f"{name} {s:.1%}" for name, s in sorted(w["threads"].items(), key=lambda kv: -kv[1])
                     if s > 0.0005)
    drops = sum(p.account()["dropped"]["seconds"] + p.account()["dropped"]["events"] for p in publishers)
    print(f"lab: {args.benches} benches at 1 Hz with events, one watcher, {w['wall_s']:.0f} s measured after "
          f"{args.settle:g} s settling; {w['benches']} benches on the watcher's screen, "
          f"{drops} messages dropped by the publishers")
    print(f"  latency, device time to the watcher's model (Lab.lags_s, {len(lags):,} figures and event "
          f"beginnings): p50 {p50:.3f} s, p99 {p99:.3f} s, max {max(lags, default=math.nan):.3f} s"
          f"    goal p99 < {GOAL_P99_S:g} s: {verdict(p99 < GOAL_P99_S)}")
    print(f"  watcher (WatchApp + Feed, its own process, {SCREEN[1]}x{SCREEN[0]} terminal): {share:.1%} of one "
          f"core, peak {w['peak_mb']:.0f} MB; threads: {busy}    goal < {GOAL_WATCHER:.0%}: "
          f"{verdict(share < GOAL_WATCHER)}")
    inn = SysCounters.rate(SysCounters.TOPICS[0], sys0, sys1)
    out = SysCounters.rate(SysCounters.TOPICS[1], sys0, sys1)
    print(f"  broker: {inn:.1f} PUBLISH messages/s in, {out:.1f} out ($SYS counters); mosquitto "
          f"{(b1 - b0) / wall:.1%} of one core")
    print(f"  the {args.benches} Publisher outlets and their feeder (one process): {(d1 - d0) / wall:.1%} of one "
          "core", flush=True)


class Listening:
    """One ``Feed`` (a process has one: its client id is the process's) and a ``Lab`` model per bench under a
    prefix: the latency of what each bench publishes, taken in as the lab screen takes it."""

    def __init__(self, port: int, prefix: str) -> None:
        from logger.publish import parse_broker
        from logger.watch.feed import Feed

        self.prefix = prefix
        self.feed = Feed(parse_broker(f"mqtt://127.0.0.1:{port}/{prefix}", {}))
        self.labs: dict[str, Any] = {}
        self.marks: dict[str, int] = {}
        self.feed.start()

    def drain(self) -> None:
        from logger.publish.topics import read_message
        from logger.watch.model import Lab

        for heard in self.feed.take():
            message = None if heard.topic is None else read_message(self.prefix, heard.topic, heard.payload)
            if message is not None:
                self.labs.setdefault(message.bench, Lab()).apply(message, heard.at)

    def lags(self, bench: str) -> list[float]:
        """The lags of ``bench`` taken in since the last call."""
        lab = self.labs.get(bench)
        if lab is None:
            return []
        lags = list(lab.lags_s)[self.marks.get(bench, 0):]
        self.marks[bench] = len(lab.lags_s)
        return lags

    def close(self) -> None:
        self.feed.stop()


def record_part(args: argparse.Namespace, port: int, tmp: Path) -> None:
    """Two recorders fed by pseudo-terminals, one publishing, for CPU; a third, ``--sim --speed 1 --publish``, for
    the latency of a real recorder's messages (its labels come from the simulator's own reads, so no bytes left
    waiting in a pseudo-terminal before the recorder opened it can shift them)."""
    listen = Listening(port, "rec")
    shares: dict[str, list[float]] = {"plain": [], "publishing": [], "publish thread": []}
    lags: dict[str, list[float]] = {"pty": [], "sim": []}
    busy: dict[str, str] = {}
    for k in range(args.record_runs):
        folder = tmp / f"record-{k}"
        folder.mkdir()
        procs: dict[str, tuple[subprocess.Popen | None, subprocess.Popen]] = {}
        try:
            for name in ("plain", "publishing"):
                rig = folder / f"{name}.toml"
                server, path = serve("demo-bench", rig, seed=3 + k)
                while not rig.exists():
                    time.sleep(0.05)
                more = ["--publish", f"mqtt://127.0.0.1:{port}/rec", "--bench", "pty"] * (name == "publishing")
                procs[name] = (server, subprocess.Popen(
                    [*RECORD, "record", "--port", path, "--rig", str(rig), "--out", str(folder / name), *more],
                    stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL))
            procs["sim"] = (None, subprocess.Popen(
                [*RAILTAP, "record", "--sim", "--speed", "1", "--seed", str(3 + k), "--quiet", "--out",
                 str(folder / "sim"), "--publish", f"mqtt://127.0.0.1:{port}/rec", "--bench", "sim"],
                stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL))
            _wait(listen, args.settle)
            for name in lags:
                listen.lags(name)
            pair = {n: procs[n][1] for n in ("plain", "publishing")}
            start = {n: (cpu_s(Path(f"/proc/{r.pid}/stat")), thread_cpu(r.pid)) for n, r in pair.items()}
            t0 = time.monotonic()
            _wait(listen, args.record_seconds)
            wall = time.monotonic() - t0
            for name, record in pair.items():
                shares[name].append((cpu_s(Path(f"/proc/{record.pid}/stat")) - start[name][0]) / wall)
                per = {t.split(" ", 1)[1]: (v - start[name][1].get(t, 0.0)) / wall
                       for t, v in thread_cpu(record.pid).items()}
                busy[name] = ", ".join(f"{t} {v:.2%}" for t, v in sorted(per.items(), key=lambda kv: -kv[1])
                                       if v >= 0.0005)
                if name == "publishing":
                    shares["publish thread"].append(per.get("railtap-publish", 0.0))
            for name in lags:
                lags[name] += listen.lags(name)
        finally:
            for server, record in procs.values():
                record.send_signal(signal.SIGINT)
                record.wait(60)
                if server is not None:
                    server.terminate()
                    server.wait(10)
    listen.close()
    plain, publishing, thread = (statistics.median(shares[n]) for n in ("plain", "publishing", "publish thread"))
    print(f"recorder at 1 kHz (railtap record --port PTY, demo-bench served by railtap sim --pty), two side by side "
          f"for {args.record_seconds:g} s x {args.record_runs}:")
    print(f"  without --publish: {plain:.2%} of one core ({', '.join(f'{s:.2%}' for s in shares['plain'])}); "
          f"threads (last run): {busy['plain']}")
    print(f"  with --publish:    {publishing:.2%} ({', '.join(f'{s:.2%}' for s in shares['publishing'])}); "
          f"threads (last run): {busy['publishing']}")
    print(f"  publishing adds {publishing - plain:+.2%} of one core (the difference of two processes, which differ "
          f"by some tenths on a loaded machine anyway); its own thread {thread:.2%}    goal < {GOAL_PUBLISH:.1%}: "
          f"{verdict(max(publishing - plain, thread) < GOAL_PUBLISH)}")
    sim, pty = lags["sim"], lags["pty"]
    print(f"  a recorder's own messages to a Lab model here, railtap record --sim --speed 1 --publish "
          f"({len(sim):,}): p50 {percentile(sim, 50):.3f} s, p99 {percentile(sim, 99):.3f} s (a second goes out "
          "at the recorder's next batch, every 0.5 s while nobody watches it)")
    ahead = percentile(pty, 50) < 0
    print(f"  the same for the publishing pty recorder above ({len(pty):,}): p50 {percentile(pty, 50):.3f} s, "
          f"p99 {percentile(pty, 99):.3f} s" + (" (below zero: its UTC labels run ahead of this machine's clock)"
                                                  if ahead else ""), flush=True)


def _wait(listen: Listening, seconds: float) -> None:
    """Take in what is heard for ``seconds``, five times a second as the screen does."""
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        listen.drain()
        time.sleep(0.2)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--benches", type=int, default=50)
    parser.add_argument("--seconds", type=float, default=90.0, help="wall seconds the lab is measured")
    parser.add_argument("--settle", type=float, default=10.0, help="seconds left out at the start of each part")
    parser.add_argument("--record-seconds", type=float, default=90.0, help="wall seconds the recorders are measured")
    parser.add_argument("--record-runs", type=int, default=1)
    parser.add_argument("--skip-lab", action="store_true")
    parser.add_argument("--skip-record", action="store_true")
    parser.add_argument("--as-watcher", metavar="URL", help=argparse.SUPPRESS)
    parser.add_argument("--report", type=Path, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.as_watcher:
        watcher_main(args.as_watcher, args.settle, args.seconds, args.report)
        return
    print(f"bench_lab: {os.cpu_count()} cores, load average before {' '.join(f'{x:.2f}' for x in os.getloadavg())}",
          flush=True)
    with tempfile.TemporaryDirectory() as tmp_name:
        tmp = Path(tmp_name)
        (tmp / "broker").mkdir()
        broker, port = start_broker(tmp / "broker")
        try:
            if not args.skip_lab:
                lab_part(args, port, broker, tmp)
            if not args.skip_record:
                record_part(args, port, tmp)
        finally:
            broker.terminate()
            broker.wait(30)
    print(f"load average after: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")


if __name__ == "__main__":
    threading.current_thread().name = "bench"
    main()
