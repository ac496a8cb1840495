"""The live text screen: readouts, trend, events, link and recording state, all read from pipeline snapshots.

The screen only reads :meth:`logger.ingest.Pipeline.snapshot` and the live ring; ingest and recording go on
in the pipeline's own threads whatever the screen does, so a slow or paused screen never costs a sample.
"""

from __future__ import annotations

from logger.tui.app import RailtapApp, run_screen

__all__ = ["RailtapApp", "run_screen"]
