"""The shipped sample logs: a fresh recording of one matches it, and every one reviews and plots."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from logger.cli import main
from logger.review.summary import summarize
from logger.sample_logs import SAMPLES, record_sample

SAMPLE_LOGS = Path(__file__).resolve().parents[1] / "sample_logs"


def _events(run: Path) -> pd.DataFrame:
    return pd.read_parquet(run / "_events.parquet").drop(columns=["id", "episode"])


def test_the_split_supply_sample_is_what_its_scenario_records_today(tmp_path: Path) -> None:
    """Recorded again from its scenario, seed and start time, the sample has the same events and summary,
    so a change to the simulator, the detectors or the store that would make it stale fails here (remake the
    samples with `python -m logger.sample_logs sample_logs`)."""
    (sample,) = [s for s in SAMPLES if s.name == "split-supply"]
    fresh = record_sample(sample, SAMPLE_LOGS, tmp_path)
    shipped = SAMPLE_LOGS / sample.name
    got, want = _events(fresh), _events(shipped)
    assert list(got["kind"]) == list(want["kind"]) and list(got["channel"]) == list(want["channel"])
    assert (got["start"] - want["start"]).abs().max() < pd.Timedelta(milliseconds=1)  # stamped from the
    assert got["duration_s"].sub(want["duration_s"]).abs().max() < 2e-3  # same clock fit, read in other chunks
    assert got["value"].equals(want["value"])
    a, b = summarize(fresh), summarize(shipped)
    assert a.samples == b.samples and [c.minimum for c in a.channels] == [c.minimum for c in b.channels]
    assert [c.mean for c in a.channels] == pytest.approx([c.mean for c in b.channels], rel=1e-12)
    assert [r.energy_wh for r in a.rails] == pytest.approx([r.energy_wh for r in b.rails], rel=1e-6)


@pytest.mark.parametrize("name", [s.name for s in SAMPLES])
def test_each_sample_reviews_and_plots(name: str, tmp_path: Path, capsys) -> None:
    run = SAMPLE_LOGS / name
    assert main(["review", str(run), "--plot", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "| event | channel |" in out and "brownout" in out
    assert (tmp_path / f"{name}-overview.png").stat().st_size > 10_000
