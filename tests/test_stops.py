"""Honest stops: a run that ends for any reason but a person's stop says why, exits non-zero and is sealed."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from logger.cli import main
from logger.core import Processor
from logger.ingest import Pipeline, Settings
from logger.sim.device import SimDevice
from logger.sim.simple import simple_rig
from logger.sources.simulated import SimSource


def _only_run(root: Path) -> Path:
    (run,) = [p for p in root.iterdir() if p.is_dir()]
    return run


def test_a_bug_in_the_ingest_thread_seals_the_run_and_says_so(tmp_path: Path, monkeypatch) -> None:
    calls = {"n": 0}
    feed = Processor.feed

    def failing_feed(self, block):
        calls["n"] += 1
        if calls["n"] == 3:
            raise RuntimeError("a detector fell over")
        return feed(self, block)

    monkeypatch.setattr(Processor, "feed", failing_feed)
    pipeline = Pipeline(SimSource(SimDevice(seed=1), speed=0, duration_s=30), simple_rig(),
                        Settings(record_root=tmp_path))
    pipeline.start()
    assert pipeline.wait(60)
    assert pipeline.error is not None and "a detector fell over" in pipeline.error
    meta = json.loads((_only_run(tmp_path) / "_run.json").read_text())
    assert meta["status"] == "complete" and meta["stop_reason"].startswith("failed: internal error")
    assert "RuntimeError: a detector fell over" in meta["crash"] and meta["rows"] > 0


def test_a_broken_screen_is_not_a_users_stop(tmp_path: Path, monkeypatch, capsys) -> None:
    import logger.tui

    def broken(pipeline, hangup):
        raise RuntimeError("deque mutated during iteration")

    monkeypatch.setattr(logger.tui, "run_screen", broken)
    code = main(["demo", "--speed", "0", "--out", str(tmp_path)])
    assert code == 1
    err = capsys.readouterr().err
    assert "the screen stopped: RuntimeError: deque mutated during iteration" in err
    meta = json.loads((_only_run(tmp_path) / "_run.json").read_text())
    assert meta["stop_reason"] == "failed: the screen stopped: RuntimeError: deque mutated during iteration"


@pytest.mark.parametrize("reason", ["source ended", "duration of 2 s reached"])
def test_a_run_that_ends_by_itself_says_how(tmp_path: Path, reason: str) -> None:
    duration = 2.0 if "duration" in reason else None
    source = SimSource(SimDevice(seed=2), speed=0, duration_s=None if duration else 3.0)
    pipeline = Pipeline(source, simple_rig(), Settings(record_root=tmp_path, duration_s=duration))
    pipeline.start()
    assert pipeline.wait(60) and pipeline.error is None
    assert json.loads((_only_run(tmp_path) / "_run.json").read_text())["stop_reason"] == reason
