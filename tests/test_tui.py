"""The live screen, driven by the pilot over a pipeline fed by the simulated demo bench (100x faster than real
time, so its brownout at 30 s of simulated time comes 0.3 s after the start)."""

from __future__ import annotations

import asyncio
import time
from collections.abc import Callable, Iterator
from pathlib import Path

import numpy as np
import pytest
from fakes import WrongBaud
from textual.widgets import Digits, Static

from logger.ingest import Pipeline, Settings
from logger.ingest.state import LinkHealth, Ring, Snapshot
from logger.rig import Rig
from logger.sim.scenario import load_scenario
from logger.sources.simulated import SimSource
from logger.store import read_run_json
from logger.tui import RailtapApp
from logger.tui.banner import Banner
from logger.tui.channels import shown_channels
from logger.tui.events_table import EventTable
from logger.tui.fmt import value_text
from logger.tui.history import TrendHistory
from logger.tui.mark import MarkInput
from logger.tui.readouts import Readout
from logger.tui.status import StatusPanel
from logger.tui.trend import Trend

SCENARIO = load_scenario("demo-bench")
SIZE = (100, 30)


@pytest.fixture(autouse=True)
def patient_second_press(monkeypatch: pytest.MonkeyPatch) -> None:
    """Keys that ask for a second press wait long enough for it on a loaded machine."""
    import logger.tui.app

    monkeypatch.setattr(logger.tui.app, "AGAIN_S", 120.0)


@pytest.fixture
def start(tmp_path: Path) -> Iterator[Callable[..., Pipeline]]:
    """Starts a pipeline on the simulated demo bench; any still running at the end are stopped and sealed."""
    started: list[Pipeline] = []

    def make(speed: float = 100.0, unplug: tuple[float, float] | None = None, rig: Rig | None = None,
             **settings) -> Pipeline:
        source = SimSource(SCENARIO.make_device(1), speed=speed, duration_s=SCENARIO.duration_s)
        if unplug is not None:
            source.unplug(*unplug)
        pipeline = Pipeline(source, rig or SCENARIO.rig, Settings(record_root=tmp_path, **settings))
        pipeline.start()
        started.append(pipeline)
        return pipeline

    yield make
    for pipeline in started:
        pipeline.stop()


class FakePipeline:
    """Stands in for a pipeline with one fixed snapshot, so what the screen shows can be checked exactly."""

    def __init__(self, rig: Rig, latest: list[float], low: list[float], high: list[float]) -> None:
        self.rig = rig
        self.ring = Ring(1024, len(rig.channels))
        self.ring.extend(np.array([1_800_000_000_000_000]), np.array([latest], dtype=np.float32))
        self.stop_reason = "stopped by user"
        self.final = {"status": "complete"}
        self.marks: list[str] = []
        self.recording = False
        self._stopped = False
        self._snap = Snapshot(
            state="running", message="receiving", channels=tuple(c.name for c in rig.channels),
            units=tuple(c.unit for c in rig.channels), latest=np.array(latest), minimum=np.array(low),
            maximum=np.array(high), recording=None,
            link=LinkHealth("fake", True, 1000, 1000.0, 0, 0, 0, 0, 0, None),
        )

    def snapshot(self) -> Snapshot:
        return self._snap

    def wait(self, timeout: float | None = None) -> bool:
        return self._stopped

    def request_stop(self, reason: str = "stopped by user") -> None:
        self._stopped = True

    def reset_minmax(self) -> None:
        pass

    def mark(self, note: str) -> None:
        self.marks.append(note)


async def _until(pilot, ready: Callable[[], bool], timeout_s: float = 15.0) -> None:
    """Let the app run until ``ready()`` holds (fails after ``timeout_s``)."""
    deadline = time.monotonic() + timeout_s
    while not ready():
        assert time.monotonic() < deadline, "timed out"
        await pilot.pause(0.02)


def _kinds(app: RailtapApp) -> list[str]:
    table = app.query_one(EventTable)
    return [str(table.get_row_at(k)[0]) for k in range(table.row_count)]


async def _key(app: RailtapApp, pilot, key: str) -> None:
    """A key press without the pilot's wait for an idle process (the ingest thread keeps it busy)."""
    app.simulate_key(key)
    await pilot.pause(0.05)


async def _quit(app: RailtapApp, pilot, pipeline: Pipeline) -> None:
    """q twice: while a run is recorded, one q only asks. Then until the run is sealed and the app has left
    with its result (the app leaves just after the pipeline ends)."""
    await _key(app, pilot, "q")
    await _key(app, pilot, "q")
    await _until(pilot, lambda: pipeline.wait(0) and app.return_value is not None, 60.0)


def test_readouts_show_sign_unit_range_and_power() -> None:
    rig = load_scenario("split-15v").rig
    assert [c.name for c in rig.channels] == ["pos_v", "pos_a", "neg_v", "neg_a"]
    pipeline = FakePipeline(rig, [15.02, 0.5, -14.97, 0.25], [14.9, 0.4, -15.1, 0.2], [15.1, 0.6, -14.8, 0.3])

    async def run() -> None:
        app = RailtapApp(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            await _until(pilot, lambda: app.query(Readout).first().query_one(Digits).value == "+15.02", 30.0)
            cards = {card.channel_name: card for card in app.query(Readout)}
            assert list(cards) == ["pos_v", "pos_a", "neg_v", "neg_a", "pos_w", "neg_w"]
            assert cards["pos_v"].query_one(Digits).value == "+15.02"
            assert cards["neg_v"].query_one(Digits).value == "-14.97"  # a negative rail reads below zero
            assert str(cards["neg_v"].query_one(".range", Static).content) == "-15.10 .. -14.80"  # min .. max
            assert cards["pos_w"].query_one(Digits).value == "+7.510"  # 15.02 V x 0.5 A
            assert cards["neg_w"].query_one(Digits).value == "+3.743"  # delivered, counted positive: 14.97 V x 0.25 A
            assert cards["pos_w"].unit == "W"
            await _key(app, pilot, "q")
            await _until(pilot, lambda: app.return_value is not None, 30.0)

    asyncio.run(run())


def test_keys_change_span_channel_bell_and_pause_without_stopping_the_run() -> None:
    pipeline = FakePipeline(SCENARIO.rig, [12.0, 2.0, 7.3], [11.9, 0.5, 7.2], [12.1, 3.5, 7.4])

    async def run() -> None:
        app = RailtapApp(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            trend = app.query_one(Trend)
            assert str(trend.border_title).startswith("trend: out_v (V), last 10 s")
            def titled(text: str):
                return lambda: str(trend.border_title).startswith(text)

            for key in "ssc":
                await _key(app, pilot, key)
            await _until(pilot, titled("trend: out_a (A), last 10 min"), 30.0)
            for key in "ss":  # 1 h, then the whole run so far
                await _key(app, pilot, key)
            await _until(pilot, titled("trend: out_a (A), whole run"), 30.0)
            await _key(app, pilot, "s")  # and round again
            await _until(pilot, titled("trend: out_a (A), last 10 s"), 30.0)
            await _key(app, pilot, "b")
            await _key(app, pilot, "p")
            banner = app.query_one(Banner)
            await _until(pilot, lambda: "paused" in str(banner.content) and "[bell on]" in str(banner.content), 30.0)
            assert not pipeline.wait(0)  # pausing the display leaves the run alone
            await _key(app, pilot, "q")
            await _until(pilot, lambda: app.return_value is not None, 30.0)
        assert pipeline.wait(0)

    asyncio.run(run())


def test_brownout_reaches_the_event_list_within_a_second(start: Callable[..., Pipeline]) -> None:
    pipeline = start()

    async def run() -> None:
        app = RailtapApp(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            await _until(pilot, lambda: pipeline.events.counts["brownout"] > 0, 15.0)
            happened = time.monotonic()
            await _until(pilot, lambda: "brownout" in _kinds(app), 30.0)
            assert time.monotonic() - happened < 1.0
            out_v = app.query_one(Readout).query_one(Digits).value
            assert out_v.startswith("+") and 0.0 <= float(out_v) < 13.0  # the 12 V rail, live
            banner = str(app.query_one("#banner").content)
            assert "BROWNOUT" in banner or "DROPOUT" in banner  # at x100 the next minute's dropout is 0.2 s away
            await _quit(app, pilot, pipeline)

    asyncio.run(run())


def test_mark_key_adds_a_mark_row_and_quit_seals_the_run(start: Callable[..., Pipeline], tmp_path: Path) -> None:
    pipeline = start(speed=10.0)

    async def run() -> None:
        app = RailtapApp(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            await _until(pilot, lambda: pipeline.recorder is not None)
            await _key(app, pilot, "m")
            note = app.query_one(MarkInput)
            await _until(pilot, lambda: note.has_focus)
            note.value = "load to 3 A"
            await _key(app, pilot, "enter")
            await _until(pilot, lambda: "mark" in _kinds(app), 30.0)
            table = app.query_one(EventTable)
            rows = [table.get_row_at(k) for k in range(table.row_count)]
            assert [r[5] for r in rows] == sorted((r[5] for r in rows), reverse=True)  # newest first
            assert [str(r[4]) for r in rows if str(r[0]) == "mark"] == ["load to 3 A"]
            assert not note.has_class("-open")
            await _quit(app, pilot, pipeline)
        assert app.return_value is not None and app.return_value.startswith("complete")

    asyncio.run(run())
    (run_dir,) = [p for p in tmp_path.iterdir() if p.is_dir()]
    assert read_run_json(run_dir)["status"] == "complete"


def test_unplug_shows_a_disconnected_screen_and_it_comes_back_by_itself(start: Callable[..., Pipeline]) -> None:
    """Unplugged 0.5 s in for 2 s of wall time: a red DISCONNECTED banner with how long, greyed readouts
    marked "no data", then the same run carries on, with the outage as a link_lost row."""
    pipeline = start(speed=10.0, unplug=(5.0, 20.0), retry_s=0.2)

    async def run() -> None:
        app = RailtapApp(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            banner = app.query_one(Banner)
            await _until(pilot, lambda: "DISCONNECTED" in str(banner.content), 30.0)
            assert banner.has_class("-alert") and "retrying" in str(banner.content)
            cards = list(app.query(Readout))
            assert all(c.has_class("-stale") and "(no data)" in c.border_title for c in cards)
            await _until(pilot, lambda: pipeline.reconnects == 1 and "DISCONNECTED" not in str(banner.content), 30.0)
            await _until(pilot, lambda: not cards[0].has_class("-stale"), 30.0)
            await _until(pilot, lambda: "link_lost" in _kinds(app), 30.0)
            await _quit(app, pilot, pipeline)
        assert len(pipeline.sealed) == 1

    asyncio.run(run())


def test_w_stops_recording_and_starts_a_new_run(start: Callable[..., Pipeline]) -> None:
    pipeline = start(speed=10.0)

    async def run() -> None:
        app = RailtapApp(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            await _until(pilot, lambda: pipeline.recorder is not None)
            status = app.query_one(StatusPanel)
            await _key(app, pilot, "w")  # one press only asks: one key must not end a test by accident
            await _until(pilot, lambda: any("press w again" in str(n.message) for n in app._notifications), 30.0)
            assert pipeline.recording
            await _key(app, pilot, "w")
            await _until(pilot, lambda: len(pipeline.sealed) == 1, 30.0)
            await _until(pilot, lambda: "NOT RECORDING" in str(status.content), 30.0)
            banner = app.query_one(Banner)
            await _until(pilot, lambda: "NOT RECORDING: nothing is being kept" in str(banner.content), 30.0)
            await _until(pilot, lambda: "last: " in str(status.content), 30.0)
            await _key(app, pilot, "w")
            await _until(pilot, lambda: pipeline.recorder is not None, 30.0)
            await _key(app, pilot, "q")  # one q while recording only asks too
            assert not pipeline.wait(0) and not app.sealing
            await _quit(app, pilot, pipeline)
        assert len(pipeline.sealed) == 2

    asyncio.run(run())


def test_history_keeps_a_one_sample_dip_at_any_span() -> None:
    history = TrendHistory(shown_channels(SCENARIO.rig))
    t0 = 1_800_000_000_000_000
    utc = t0 + np.arange(0, 120_000_000, 1000, dtype=np.int64)  # two minutes at 1 kHz
    values = np.tile(np.array([12.0, 2.0, 7.3], dtype=np.float32), (len(utc), 1))
    values[60_000, 0] = 3.0
    for chunk in np.array_split(np.arange(len(utc)), 7):
        history.add(utc[chunk], values[chunk])
    for span_s in (10.0, 60.0, 600.0, 3600.0):  # the last from the 1 s tier
        lo, hi, _ = history.columns(0, span_s, 50)
        assert np.nanmax(hi) == pytest.approx(12.0)
        assert (np.nanmin(lo) == pytest.approx(3.0)) == (span_s > 60.0 - 1e-9)
    _, power_hi, _ = history.columns(3, 60.0, 50)
    assert np.nanmax(power_hi) == pytest.approx(24.0)  # out_w = out_v x out_a


def test_values_keep_their_sign_and_width() -> None:
    assert value_text(12.0) == "+12.00"
    assert value_text(-15.02) == "-15.02"
    assert value_text(3.4871) == "+3.487"
    assert value_text(None).strip() == "-.--"


def test_a_reading_at_the_adc_limit_is_flagged() -> None:
    from dataclasses import replace

    rig = load_scenario("split-15v").rig
    fake = FakePipeline(rig, [15.0, 0.5, -15.0, 0.4], [14.9, 0.4, -15.1, 0.3], [15.1, 0.6, -14.9, 0.5])
    fake._snap = replace(fake._snap, at_limit=(True, False, False, False))

    async def run() -> None:
        app = RailtapApp(fake)
        async with app.run_test(size=SIZE) as pilot:
            await _until(pilot, lambda: app.query(Readout).first().has_class("-at-limit"), 30.0)
            first = app.query(Readout).first()
            assert first.has_class("-at-limit") and "ADC limit" in str(first.border_title)
            assert not list(app.query(Readout))[1].has_class("-at-limit")
            await _quit(app, pilot, fake)

    asyncio.run(run())


def test_screen_and_headless_record_the_same_run(tmp_path: Path) -> None:
    """The screen only watches: the same input gives the same samples and events with or without it."""
    import pandas as pd

    def record(folder: Path, with_screen: bool) -> Path:
        source = SimSource(SCENARIO.make_device(3), speed=0, duration_s=75.0, start_utc=1.8e9, latency_s=0.0)
        pipeline = Pipeline(source, SCENARIO.rig, Settings(record_root=folder))
        pipeline.start()
        if with_screen:
            async def run() -> None:
                app = RailtapApp(pipeline)
                async with app.run_test(size=SIZE) as pilot:
                    await _until(pilot, lambda: pipeline.wait(0), 30.0)
                    app.exit()

            asyncio.run(run())
        assert pipeline.wait(60)
        (run_folder,) = folder.iterdir()
        return run_folder

    plain, watched = record(tmp_path / "plain", False), record(tmp_path / "watched", True)
    a, b = pd.read_parquet(plain), pd.read_parquet(watched)
    pd.testing.assert_frame_equal(a.drop(columns="utc"), b.drop(columns="utc"))
    assert (a["utc"] - b["utc"]).abs().max() < pd.Timedelta(milliseconds=2)  # same arrivals, batching may differ
    columns = ["kind", "channel", "duration_s", "value"]
    ea, eb = pd.read_parquet(plain / "_events.parquet"), pd.read_parquet(watched / "_events.parquet")
    pd.testing.assert_frame_equal(ea[columns], eb[columns], atol=0.002)


def _any_zero(rig: Rig) -> Rig:
    """The demo rig with out_a's zero allowed anywhere in range: the simulated load never stops drawing."""
    from dataclasses import replace

    return replace(rig, channels=tuple(replace(ch, zero_limit_pct=100.0) if ch.name == "out_a" else ch
                                       for ch in rig.channels))


def test_zero_key_refuses_a_reading_far_up_the_range(start: Callable[..., Pipeline]) -> None:
    """out_a draws 0.5 to 3.5 A of a 6.6 A range (3.3 V / (0.01 ohm x 50)): far more than the 5 % a zero may
    be, so z says why and zeroes nothing, not even on a second press."""
    pipeline = start(speed=5.0)

    async def run() -> None:
        app = RailtapApp(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            await _until(pilot, lambda: pipeline.counts_ring is not None and pipeline.counts_ring.written > 100)
            await _key(app, pilot, "z")
            await _key(app, pilot, "z")

            def told() -> list[str]:
                return [str(n.message) for n in app._notifications]

            await _until(pilot, lambda: sum("not taken as zero" in t for t in told()) == 2, 30.0)
            assert all("% of the ADC's range" in t for t in told() if "not taken" in t)
            assert not any("press z again" in t for t in told())
            await _quit(app, pilot, pipeline)

    asyncio.run(run())
    assert not pipeline.final.get("calibration_changes")


def test_zero_key_tares_the_current_channel(start: Callable[..., Pipeline]) -> None:
    pipeline = start(speed=5.0, rig=_any_zero(SCENARIO.rig))

    async def run() -> None:
        app = RailtapApp(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            await _until(pilot, lambda: pipeline.recorder is not None and pipeline.ring.written > 100)
            await _key(app, pilot, "z")  # the first press only asks
            await pilot.pause(0.3)
            assert "mark" not in _kinds(app) and not pipeline.calibration_changes
            await _key(app, pilot, "z")
            await _until(pilot, lambda: "mark" in _kinds(app), 30.0)
            (zeroed,) = [e for e in pipeline.events.recent() if e.kind == "mark"]
            assert zeroed.channel == "out_a" and "zeroed out_a" in zeroed.detail
            # From the tare on, each reading is its raw counts less the counts taken as zero, times one LSB
            # through the shunt and amplifier (LSB = Vref / 2^bits, common practice, no source). Checked on the
            # samples themselves, so a load step near the tare cannot mislead the test.
            await _until(pilot, lambda: pipeline.ring.latest(1)[0][-1] > zeroed.start_us + 20_000, 30.0)
            utc, values = pipeline.ring.latest(pipeline.ring.capacity)
            c_utc, counts = pipeline.counts_ring.latest(pipeline.counts_ring.capacity)
            after = (utc >= zeroed.start_us) & (utc < zeroed.start_us + 20_000)
            same = np.isin(c_utc, utc[after])
            lsb_a = pipeline.header.vref_mv / 1000 / 2 ** pipeline.header.adc_bits / (0.01 * 50.0)  # the rig's shunt
            assert after.sum() > 5 and same.sum() == after.sum()
            # The rig file's scaling only (the simulated ADC's own gain error is not corrected: no profile).
            assert np.allclose(values[after, 1], (counts[same, 1] - zeroed.value) * lsb_a, atol=lsb_a / 2)
            await _quit(app, pilot, pipeline)

    asyncio.run(run())
    (change,) = pipeline.final["calibration_changes"]  # the run says when and how it was zeroed
    assert change["channel"] == "out_a" and change["change"] == "zero" and change["counts"] > 0


SNAPSHOT = Path(__file__).parent / "snapshots" / "screen_100x30.svg"


def test_main_screen_snapshot_at_100x30() -> None:
    """The whole screen on fixed data, against a stored SVG made with Textual's own screenshot export.

    After a deliberate change to the screen, look at the new picture and store it with
    ``RAILTAP_UPDATE_SNAPSHOTS=1 .venv/bin/python -m pytest tests/test_tui.py -k snapshot``.
    """
    import os

    fake = FakePipeline(SCENARIO.rig, [12.0, 2.0, 7.3], [11.9, 0.5, 7.2], [12.1, 3.5, 7.4])

    async def run() -> str:
        app = RailtapApp(fake)
        async with app.run_test(size=(100, 30)) as pilot:
            await _until(pilot, lambda: app._polls >= 6)  # the fixed data drawn, the trend at least once
            await pilot.pause()  # and nothing left to draw (no ingest thread here)
            svg = app.export_screenshot()
            await _quit(app, pilot, fake)
        return svg

    import textual

    made_with = SNAPSHOT.with_suffix(".textual-version")
    svg = asyncio.run(run())
    if os.environ.get("RAILTAP_UPDATE_SNAPSHOTS"):
        SNAPSHOT.write_text(svg, encoding="utf-8")
        made_with.write_text(textual.__version__, encoding="utf-8")
    if made_with.read_text(encoding="utf-8").strip() != textual.__version__:
        pytest.skip(f"snapshot made with Textual {made_with.read_text().strip()}, this is {textual.__version__}: "
                    "look at the screen and store a new snapshot")
    assert svg == SNAPSHOT.read_text(encoding="utf-8"), f"the screen changed; compare with {SNAPSHOT}"


def test_a_wrong_baud_rate_is_named_on_the_screen(tmp_path: Path) -> None:
    pipeline = Pipeline(WrongBaud(), SCENARIO.rig, Settings(record_root=tmp_path))
    pipeline.start()

    async def run() -> None:
        app = RailtapApp(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            banner = app.query_one(Banner)
            await _until(pilot, lambda: "NO VALID DATA" in str(banner.content), 30.0)
            assert "baud rate is wrong" in str(banner.content) and banner.has_class("-alert")
            await _quit(app, pilot, pipeline)

    try:
        asyncio.run(run())
    finally:
        pipeline.stop()
    assert not list(tmp_path.iterdir())  # nothing decoded, nothing recorded


def test_a_negative_rails_dip_towards_zero_is_the_one_drawn_as_low() -> None:
    from logger.textplot import DEFAULT_STYLES, draw_columns

    lo = np.array([-15.0, -15.0, -9.0, -15.0])  # a -15 V rail dipping to -9 V in the third column
    hi = lo + 0.1
    text = draw_columns(lo, hi, -13.5, -16.0, -8.0, 6, DEFAULT_STYLES)
    low = DEFAULT_STYLES["low"]
    width = len(lo) + 8  # the gutter, then one cell per column, then a newline
    columns = {(span.start % (width + 1)) - 8 for span in text.spans if span.style == low}
    assert columns == {2}


def test_a_run_that_reaches_its_duration_keeps_the_screen_up_until_q(start: Callable[..., Pipeline]) -> None:
    """--duration ends the run and seals it; the screen stays with the whole run on it (a 12-hour test is read
    in the morning), says the run ended and why, and q leaves at once."""
    pipeline = start(speed=0.0, duration_s=3.0)

    async def run() -> None:
        app = RailtapApp(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            banner = app.query_one(Banner)
            await _until(pilot, lambda: pipeline.wait(0) and "RUN ENDED" in str(banner.content), 60.0)
            assert "RUN ENDED: duration of 3 s reached; every part is sealed; q leaves" in str(banner.content)
            assert app.return_value is None and pipeline.final["status"] == "complete"
            await _key(app, pilot, "q")  # the run is over: one press leaves
            await _until(pilot, lambda: app.return_value is not None, 30.0)
        assert app.return_value == "complete: duration of 3 s reached"

    asyncio.run(run())


def test_a_failed_run_keeps_the_screen_up_with_its_reason(start: Callable[..., Pipeline], monkeypatch) -> None:
    """A run that stops on an error is sealed, and the screen stays with a red FAILED banner saying why until q;
    the run says it failed, not that a user stopped it."""
    from logger.core import Processor

    feed, calls = Processor.feed, {"n": 0}

    def failing(self, block):
        calls["n"] += 1
        if calls["n"] == 30:
            raise RuntimeError("a detector fell over")
        return feed(self, block)

    monkeypatch.setattr(Processor, "feed", failing)
    pipeline = start(speed=10.0)

    async def run() -> None:
        app = RailtapApp(pipeline)
        async with app.run_test(size=SIZE) as pilot:
            banner = app.query_one(Banner)
            await _until(pilot, lambda: pipeline.wait(0) and "FAILED" in str(banner.content), 30.0)
            assert banner.has_class("-alert") and "a detector fell over" in str(banner.content)
            assert app.return_value is None  # still up: the reason is on screen until someone reads it
            await _key(app, pilot, "q")
            await _until(pilot, lambda: app.return_value is not None, 30.0)
        assert "failed: internal error" in app.return_value

    asyncio.run(run())
    assert pipeline.final is not None and pipeline.final["stop_reason"].startswith("failed: internal error")


def test_the_banner_tells_the_worst_fault_first_and_says_now_once() -> None:
    """A dropout on out_v and a brownout on meter_v at the same moment: the dropout leads, going on or just
    ended, and a later lesser fault does not hide it while it is held (common practice, no source: a rail that
    is gone is worse than one that sags)."""
    from dataclasses import replace

    from logger.events.model import Event
    from logger.sim.simple import simple_rig

    snap = FakePipeline(simple_rig(), [12.0, 1.0], [11.9, 0.9], [12.1, 1.1]).snapshot()
    t0 = 1_800_000_000_000_000
    brown = Event("brownout", t0, channel="meter_v", detail="down to 3.3 V (45 % of nominal)")
    drop = Event("dropout", t0 + 10, channel="out_v", detail="down to 0 V (0 % of nominal)")
    banner = Banner("bench")
    banner.show(replace(snap, active=(brown, drop)), [])
    line = str(banner.content)
    assert line.startswith("NOW: DROPOUT on out_v: down to 0 V") and line.index("DROPOUT") < line.index("BROWNOUT")
    assert " now" not in line.lower().replace("now:", "")  # no "NOW: ... now"
    ended = [replace(brown, end_us=t0 + 200_000, device_start_us=0, device_end_us=200_000),
             replace(drop, end_us=t0 + 150_000, device_start_us=10, device_end_us=150_010)]
    banner.show(snap, ended)
    assert str(banner.content).startswith("JUST NOW: DROPOUT on out_v for 150 ms")
    banner.show(snap, [replace(brown, start_us=t0 + 1_000_000, end_us=t0 + 1_100_000)])  # a lesser one, later
    assert str(banner.content).startswith("JUST NOW: DROPOUT on out_v")


def test_home_and_end_go_to_the_newest_and_the_oldest_event() -> None:
    from dataclasses import replace

    from logger.events.model import Event

    fake = FakePipeline(SCENARIO.rig, [12.0, 2.0, 7.3], [11.9, 0.5, 7.2], [12.1, 3.5, 7.4])
    t0 = 1_800_000_000_000_000
    events = tuple(Event("brownout", t0 + k * 1_000_000, end_us=t0 + k * 1_000_000 + 100_000, channel="out_v",
                         detail=f"dip {k}", id=k + 1) for k in range(30))[::-1]  # newest first, as published
    fake._snap = replace(fake._snap, events=events)

    async def run() -> None:
        app = RailtapApp(fake)
        async with app.run_test(size=(80, 24)) as pilot:
            table = app.query_one(EventTable)
            await _until(pilot, lambda: table.row_count == 30, 30.0)
            table.focus()
            await pilot.press("end")
            await _until(pilot, lambda: table.cursor_row == 29, 30.0)
            assert table.selected().detail == "dip 0"
            await pilot.press("home")
            await _until(pilot, lambda: table.cursor_row == 0, 30.0)
            assert table.selected().detail == "dip 29"
            await _key(app, pilot, "q")
            await _until(pilot, lambda: app.return_value is not None, 30.0)

    asyncio.run(run())


def test_a_column_that_spans_more_than_a_cell_marks_its_mean() -> None:
    """A column that held dips to 0 V but sat at 12 V marks the cell of its mean; a flat column has none."""
    from logger.textplot import DEFAULT_STYLES, draw_columns

    lo, hi, mean = np.array([0.0, 11.9]), np.array([12.1, 12.1]), np.array([11.95, 12.0])
    text = draw_columns(lo, hi, 10.8, 0.0, 12.6, 6, DEFAULT_STYLES, mean=mean)
    row_starts = np.cumsum([0] + [len(row) + 1 for row in text.plain.split("\n")])
    rows = [int(np.searchsorted(row_starts, span.start, side="right")) - 1 for span in text.spans
            if span.style == DEFAULT_STYLES["mean"]]
    marked = [(row, span.start - row_starts[row]) for row, span in
              zip(rows, (sp for sp in text.spans if sp.style == DEFAULT_STYLES["mean"]), strict=True)]
    assert marked == [(0, 8)]  # the top row, the first column (after the 8-cell gutter); not the flat one


def test_an_amps_trend_draws_its_overcurrent_limit_and_marks_columns_above_it() -> None:
    """The demo rig's out_a has `high = 5.0`: its trend draws that line, named, as out_v's draws its brownout
    threshold; a column that went above it is drawn in the alarm style, one that stayed below is not."""
    from logger.textplot import DEFAULT_STYLES, draw_columns

    shown = shown_channels(SCENARIO.rig)
    k = shown.names.index("out_a")
    assert shown.thresholds[k] == 5.0 and shown.over[k] and not shown.over[shown.names.index("out_v")]
    def alarmed(lo: float, hi: float) -> bool:
        text = draw_columns(np.array([lo]), np.array([hi]), 5.0, 0.0, 7.0, 6, DEFAULT_STYLES, over=True)
        return any(span.style == DEFAULT_STYLES["low"] for span in text.spans)

    assert alarmed(2.0, 6.0) and not alarmed(1.0, 2.0)  # above the limit is the alarm, below it is not

    fake = FakePipeline(SCENARIO.rig, [12.0, 2.0, 7.3], [11.9, 0.5, 7.2], [12.1, 3.5, 7.4])

    async def run() -> None:
        app = RailtapApp(fake)
        async with app.run_test(size=SIZE) as pilot:
            trend = app.query_one(Trend)
            await _key(app, pilot, "c")
            await _until(pilot, lambda: "overcurrent above 5" in str(trend.border_subtitle), 30.0)
            await _key(app, pilot, "q")
            await _until(pilot, lambda: app.return_value is not None, 30.0)

    asyncio.run(run())


def test_the_whole_run_span_covers_every_sample_with_its_ends_labelled() -> None:
    """Three hours at 1 kHz folded into the history, a 20 % dip of one sample at 40 min: the whole-run span
    shows it (min/max buckets keep a single sample at any span), the 1 h span does not reach back to it, and
    the title gives both ends in local time."""
    from datetime import datetime

    history = TrendHistory(shown_channels(SCENARIO.rig))
    t0 = 1_800_000_000_000_000
    for hour in range(3):
        utc = t0 + hour * 3_600_000_000 + np.arange(0, 3_600_000_000, 1000, dtype=np.int64)
        values = np.tile(np.array([[12.0, 2.0, 7.3]], dtype=np.float32), (len(utc), 1))
        if hour == 0:
            values[2_400_000, 0] = 9.6
        history.add(utc, values)
    assert history.run_s == pytest.approx(3 * 3600 - 0.001)
    lo, _, mean = history.columns(0, history.run_s, 90)
    assert np.nanmin(lo) == pytest.approx(9.6) and np.isnan(lo).sum() == 0
    # the column holding the one low sample keeps its mean at the rail: 12 V less 2.4 V over its ~120,000
    # samples (arithmetic mean, common fact)
    dip = int(np.nanargmin(lo))
    assert mean[dip] == pytest.approx(12.0 - 2.4 / 120_000, abs=1e-6) and np.nanmax(np.abs(mean - 12.0)) < 1e-4
    lo_hour, _, _ = history.columns(0, 3600.0, 90)
    assert np.nanmin(lo_hour) == pytest.approx(12.0)

    trend = Trend(history)
    trend.span_s = float("inf")
    trend.new_data()
    start, end = (datetime.fromtimestamp(us / 1e6).astimezone().strftime("%H:%M:%S")
                  for us in (t0, t0 + 3 * 3_600_000_000 - 1000))
    assert str(trend.border_title) == f"trend: out_v (V), whole run, {start} to {end}"


def test_a_flicker_episode_is_one_row_in_the_live_list() -> None:
    """Dips on meter_v while its flicker episode is going on get no row; when the episode ends, its row takes
    the place of the dips it counts, and the list's title says how many were folded into it."""
    from dataclasses import replace

    from logger.events.model import Event

    fake = FakePipeline(SCENARIO.rig, [12.0, 2.0, 7.3], [11.9, 0.5, 7.2], [12.1, 3.5, 7.4])
    t0 = 1_800_000_000_000_000
    dips = [Event("brownout", t0 + k * 400_000, end_us=t0 + k * 400_000 + 100_000, channel="meter_v",
                  detail=f"dip {k}", id=k + 2) for k in range(6)]
    other = Event("dropout", t0 - 5_000_000, end_us=t0 - 4_900_000, channel="out_v", detail="other", id=1)
    going = Event("flicker", t0, channel="meter_v", detail="going on: 3 dips so far at 2.50 Hz")
    episode = Event("flicker", t0, end_us=dips[-1].end_us, channel="meter_v", detail="6 dips", id=8)

    async def run() -> None:
        app = RailtapApp(fake)
        async with app.run_test(size=SIZE) as pilot:
            table = app.query_one(EventTable)
            fake._snap = replace(fake._snap, events=(*dips[:3][::-1], other))
            await _until(pilot, lambda: table.row_count == 4, 30.0)
            fake._snap = replace(fake._snap, events=(*dips[::-1], other), active=(going,))
            await _until(pilot, lambda: table.last_id == 7, 30.0)
            assert table.row_count == 4 and table.folded == 3  # dips 3 to 5: inside the episode going on
            fake._snap = replace(fake._snap, events=(episode, *dips[::-1], other), active=())
            await _until(pilot, lambda: table.last_id == 8, 30.0)
            details = [str(table.get_row_at(k)[4]) for k in range(table.row_count)]
            assert details == ["6 dips", "other"] and "6 dips inside flicker episodes" in str(table.border_title)
            await _key(app, pilot, "q")
            await _until(pilot, lambda: app.return_value is not None, 30.0)

    asyncio.run(run())


def test_f_filters_the_event_list_by_kind_and_shift_f_by_the_trends_channel() -> None:
    from dataclasses import replace

    from logger.events.model import Event

    fake = FakePipeline(SCENARIO.rig, [12.0, 2.0, 7.3], [11.9, 0.5, 7.2], [12.1, 3.5, 7.4])
    t0 = 1_800_000_000_000_000
    events = (Event("mark", t0 + 3_000_000, detail="a note", id=5),
              Event("brownout", t0 + 2_000_000, end_us=t0 + 2_100_000, channel="meter_v", detail="m", id=4),
              Event("link_lost", t0 + 1_000_000, end_us=t0 + 1_500_000, detail="unplugged", id=3),
              Event("brownout", t0 + 500_000, end_us=t0 + 600_000, channel="out_v", detail="b", id=2),
              Event("dropout", t0, end_us=t0 + 100_000, channel="out_v", detail="d", id=1))
    fake._snap = replace(fake._snap, events=events)

    async def run() -> None:
        app = RailtapApp(fake)
        async with app.run_test(size=SIZE) as pilot:
            table = app.query_one(EventTable)

            def kinds() -> list[str]:
                return [str(table.get_row_at(k)[0]) for k in range(table.row_count)]

            await _until(pilot, lambda: table.row_count == 5, 30.0)
            steps = [(["brownout", "brownout", "dropout"], "showing faults (f kind, F channel)"),
                     (["dropout"], "showing dropout"),  # then each kind seen, faults first
                     (["brownout", "brownout"], "showing brownout"),
                     (["link_lost"], "showing link_lost"),
                     (["mark"], "showing mark")]
            for rows, title in steps:
                await _key(app, pilot, "f")
                await _until(pilot, lambda rows=rows: kinds() == rows, 30.0)
                assert title in str(table.border_title)
            await _key(app, pilot, "f")  # round to every event again
            await _until(pilot, lambda: table.row_count == 5, 30.0)
            for _ in range(3):
                await _key(app, pilot, "f")  # brownouts
            await _key(app, pilot, "F")  # ... on the trend's channel, out_v
            await _until(pilot, lambda: table.row_count == 1 and table.channel == "out_v", 30.0)
            assert "showing brownout on out_v" in str(table.border_title)
            await _key(app, pilot, "c")  # the filter follows the trend to its next channel
            await _until(pilot, lambda: table.channel != "out_v", 30.0)
            await _key(app, pilot, "F")
            await _until(pilot, lambda: table.channel is None and table.row_count == 2, 30.0)
            await _key(app, pilot, "q")
            await _until(pilot, lambda: app.return_value is not None, 30.0)

    asyncio.run(run())
