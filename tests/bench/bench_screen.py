"""Screen benchmark: CPU share of the live screen on top of ingest and recording (not a test).

The simulated demo rig runs paced at 10,000 samples per second in this process, recorded to a temporary
folder, once without a screen and once with the Textual app drawing it headlessly at 160x48; the script prints
the process's CPU share for each, the difference (the screen's cost), and the frames lost on a link without
faults (none expected: ingest never waits for the screen).

Run with ``.venv/bin/python tests/bench/bench_screen.py [--seconds 15]``.
"""

from __future__ import annotations

import argparse
import asyncio
import resource
import tempfile
import time
from pathlib import Path

from logger.ingest import Pipeline, Settings
from logger.sim.device import LinkFaults, SimDevice
from logger.sim.scenario import load_scenario
from logger.sources.simulated import SimSource
from logger.tui import RailtapApp

SAMPLES_PER_S = 10_000


def cpu_s() -> float:
    usage = resource.getrusage(resource.RUSAGE_SELF)
    return usage.ru_utime + usage.ru_stime


def pipeline(root: Path) -> Pipeline:
    scenario = load_scenario("demo-bench")
    rows_per_s = SAMPLES_PER_S / len(scenario.rig.channels)
    # A clean link, so any lost frame would be the screen's doing.
    device = SimDevice(scenario.make_model(4), rate_hz=scenario.link.rate_hz, seed=4, faults=LinkFaults())
    source = SimSource(device, speed=rows_per_s / scenario.link.rate_hz)
    p = Pipeline(source, scenario.rig, Settings(record_root=root))
    p.start()
    return p


def measure_headless(root: Path, seconds: float) -> tuple[float, int, int]:
    p = pipeline(root)
    time.sleep(2.0)
    c0, t0 = cpu_s(), time.perf_counter()
    time.sleep(seconds)
    share = (cpu_s() - c0) / (time.perf_counter() - t0)
    p.stop()
    return share, p.decoder.counters.frames, p.timebase.counters.lost


def measure_screen(root: Path, seconds: float) -> tuple[float, int, int]:
    p = pipeline(root)

    async def run() -> float:
        app = RailtapApp(p)
        async with app.run_test(size=(160, 48)) as pilot:
            await pilot.pause(2.0)
            c0, t0 = cpu_s(), time.perf_counter()
            await pilot.pause(seconds)
            share = (cpu_s() - c0) / (time.perf_counter() - t0)
            app.exit()
        return share

    share = asyncio.run(run())
    p.stop()
    return share, p.decoder.counters.frames, p.timebase.counters.lost


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=15.0)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        bare, frames_a, lost_a = measure_headless(Path(tmp) / "a", args.seconds)
        screen, frames_b, lost_b = measure_screen(Path(tmp) / "b", args.seconds)
    print(f"{SAMPLES_PER_S} samples/s from the simulated demo rig, recorded, {args.seconds:g} s measured")
    print(f"  without a screen: {bare:6.1%} of one core  ({frames_a} frames, {lost_a} lost)")
    print(f"  with the screen:  {screen:6.1%} of one core  ({frames_b} frames, {lost_b} lost)")
    print(f"  the screen's own cost: {screen - bare:6.1%} of one core (target: under 25 %)")


if __name__ == "__main__":
    main()
