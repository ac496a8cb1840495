"""Ingest: the one thread that reads a source, puts frames on the run's time axis, runs the processing core,
hands batches to the recorder and publishes a frozen snapshot for screens. Others read the snapshot and ask for
things (mark, zero, profile, reset, record on or off, stop); the ingest thread does them between batches."""

from __future__ import annotations

from logger.ingest.pipeline import Pipeline, Settings
from logger.ingest.recorder import Recorder, run_metadata
from logger.ingest.state import LinkHealth, RecordingState, Ring, Snapshot

__all__ = ["LinkHealth", "Pipeline", "Recorder", "RecordingState", "Ring", "Settings", "Snapshot", "run_metadata"]
