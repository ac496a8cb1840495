"""Run the whole suite several times in a row with a CPU hog on every core, as a busy CI machine would be.

    .venv/bin/python tests/bench/suite_under_load.py [RUNS]      (also `make test-loaded`)

Prints each run's outcome (pytest's summary line, with its time); exits non-zero if any run failed. Not
a test itself: it shows the suite waits on conditions rather than on the clock.
"""

from __future__ import annotations

import multiprocessing
import os
import subprocess
import sys


def _hog(stop: multiprocessing.Event) -> None:  # type: ignore[valid-type]
    while not stop.is_set():
        sum(range(10_000))


def main() -> int:
    runs = int(sys.argv[1]) if len(sys.argv) > 1 else 5
    stop = multiprocessing.Event()
    hogs = [multiprocessing.Process(target=_hog, args=(stop,), daemon=True) for _ in range(os.cpu_count() or 1)]
    for hog in hogs:
        hog.start()
    failed = 0
    try:
        for n in range(1, runs + 1):
            done = subprocess.run([sys.executable, "-m", "pytest", "-p", "no:cacheprovider"],
                                  capture_output=True, text=True)
            last = (done.stdout.strip().splitlines() or ["(no output)"])[-1]
            print(f"run {n} of {runs} with {len(hogs)} CPU hogs: {last}", flush=True)  # the summary has the time
            if done.returncode:
                failed += 1
                print("\n".join(line for line in done.stdout.splitlines() if line.startswith("FAILED")), flush=True)
    finally:
        stop.set()
        for hog in hogs:
            hog.join(5)
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
