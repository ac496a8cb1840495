"""The sample logs shipped in ``sample_logs/``: recorded by railtap itself from simulated scenarios.

Each sample is a scenario file in ``sample_logs/scenarios/``, a seed and an invented start time; recording it
again gives the same samples and events (the simulator runs on its own clock, as fast as it can, stamped from
that start time), so a test can check the shipped files against a fresh recording. Remake them all with
``python -m logger.sample_logs sample_logs``.
"""

from __future__ import annotations

import shutil
import sys
import tempfile
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

from logger.ingest import Pipeline, Settings
from logger.sim.scenario import load_scenario
from logger.sources.simulated import SimSource


@dataclass(frozen=True)
class Sample:
    name: str
    scenario: str
    """File name in ``sample_logs/scenarios/``."""
    seed: int
    start_utc: str


SAMPLES = (
    Sample("overnight-soak", "overnight-soak.toml", 11, "2026-03-13T22:00:00+00:00"),
    Sample("pack-discharge", "battery-discharge.toml", 12, "2026-03-14T09:30:00+00:00"),
    Sample("split-supply", "split-15v.toml", 13, "2026-03-14T15:10:00+00:00"),
)


def record_sample(sample: Sample, folder: Path, out_root: Path) -> Path:
    """Record ``sample`` from the scenarios in ``folder`` into ``out_root/<name>`` (replacing it)."""
    scenario = load_scenario(str(folder / "scenarios" / sample.scenario))
    start = datetime.fromisoformat(sample.start_utc).timestamp()
    source = SimSource(scenario.make_device(sample.seed), speed=0.0, duration_s=scenario.duration_s,
                       start_utc=start, latency_s=0.002)
    with tempfile.TemporaryDirectory(dir=out_root) as scratch:
        pipeline = Pipeline(source, scenario.rig, Settings(record_root=Path(scratch), label=sample.name))
        pipeline.start()
        pipeline.wait()
        if pipeline.error:
            raise RuntimeError(f"{sample.name}: {pipeline.error}")
        (recorded,) = Path(scratch).iterdir()
        (recorded / "_run.lock").unlink(missing_ok=True)
        target = out_root / sample.name
        if target.exists():
            shutil.rmtree(target)
        recorded.rename(target)
    return target


def main(argv: list[str]) -> int:
    folder = Path(argv[0]) if argv else Path("sample_logs")
    for sample in SAMPLES:
        path = record_sample(sample, folder, folder)
        size = sum(f.stat().st_size for f in path.iterdir())
        print(f"{path}: {size / 1e6:.2f} MB")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))


def make_screenshot(path: Path, size: tuple[int, int] = (120, 34), seconds: float = 35.0) -> Path:
    """The live screen on the demo bench, ``seconds`` of simulated time in (recorded to a scratch folder),
    saved with Textual's own SVG export: the picture the README shows."""
    import asyncio

    from logger.tui import RailtapApp
    from logger.tui.trend import Trend

    scenario = load_scenario("demo-bench")
    source = SimSource(scenario.make_device(1), speed=20.0, duration_s=scenario.duration_s,
                       start_utc=datetime.fromisoformat("2026-03-14T20:15:00+00:00").timestamp())
    with tempfile.TemporaryDirectory() as scratch:
        pipeline = Pipeline(source, scenario.rig, Settings(record_root=Path(scratch)))
        pipeline.start()

        async def run() -> None:
            app = RailtapApp(pipeline)
            async with app.run_test(size=size) as pilot:
                while pipeline.ring is None or source.device.now_s < seconds:
                    await pilot.pause(0.1)
                app.action_pause()  # hold the picture still while it is taken
                app.query_one(Trend).refresh()
                await pilot.pause(0.3)
                app.save_screenshot(path.name, str(path.parent))

        try:
            asyncio.run(run())
        finally:
            pipeline.stop()
    return path
