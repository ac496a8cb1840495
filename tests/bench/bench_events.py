"""Detector benchmark: prints samples per second per channel through the event detectors (not a test).

A two-channel 1 kHz stream of one simulated hour with noise, dips, swells and current surges is fed in
batches of the sizes the pipeline uses (about 0.1 s of data) and in large batches, side by side.

Run with ``.venv/bin/python tests/bench/bench_events.py``.
"""

from __future__ import annotations

import time

import numpy as np

from logger.events import EventDetector
from logger.sim.simple import simple_rig


def stream(seconds: float, rate_hz: float = 1000.0) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(5)
    n = int(seconds * rate_hz)
    utc = 1_800_000_000_000_000 + np.arange(n, dtype=np.int64) * int(1e6 / rate_hz)
    values = np.column_stack((12.0 + rng.normal(0, 0.02, n), 2.0 + rng.normal(0, 0.01, n))).astype(np.float32)
    for start in rng.integers(0, n - 1000, 400):
        values[start : start + rng.integers(1, 800), 0] = rng.choice([0.2, 8.0, 10.5, 13.5])
    for start in rng.integers(0, n - 1000, 100):
        values[start : start + rng.integers(50, 500), 1] = 6.0
    return utc, values


def run(utc: np.ndarray, values: np.ndarray, batch: int) -> tuple[float, int]:
    detector = EventDetector(simple_rig())
    events = 0
    t0 = time.perf_counter()
    for i in range(0, len(utc), batch):
        events += len(detector.feed(utc[i : i + batch], values[i : i + batch]))
    events += len(detector.finish())
    return time.perf_counter() - t0, events


def main() -> None:
    utc, values = stream(3600.0)
    samples_per_channel = len(utc)
    print(f"stream: {samples_per_channel} rows x {values.shape[1]} channels (one hour at 1 kHz)")
    for batch in (100, 1000, 100_000):
        seconds, events = run(utc, values, batch)
        print(f"  batches of {batch:>7} rows: {samples_per_channel / seconds / 1e6:6.2f} M samples/s per channel "
              f"({seconds:.2f} s, {events} events)")


if __name__ == "__main__":
    main()
