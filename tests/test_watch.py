"""The lab's screen: its model of benches from the topic tree's messages, and the screen under Textual's pilot."""

from __future__ import annotations

import asyncio
import json
import time
from dataclasses import dataclass

import pytest
from textual.widgets import DataTable

from logger.publish.topics import read_message
from logger.watch import Lab, WatchApp
from logger.watch.detail import BenchScreen

NOW = time.time()


def _utc(t: float) -> str:
    return time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(t)) + f".{int(t % 1 * 1e6):06d}Z"


def _state(word: str, **more) -> dict:
    return {"v": 1, "state": word, "rig": "psu", "channels": [{"name": "out_v", "unit": "V"}], "elapsed_s": 3723.0,
            "events": {"day": time.strftime("%Y-%m-%d"), "today": {"brownout": 2}, "total": 2}, **more}


def _second(t: float, v: float) -> dict:
    return {"v": 1, "utc": _utc(t), "device_s": int(t), "count": 1000, "ch": {"out_v": [v - 0.1, v, v + 0.1, 0.01]}}


def _begin(t: float, kind: str = "brownout") -> dict:
    return {"v": 1, "phase": "begin", "key": f"brownout/out_v/{int(t * 1e6)}", "kind": kind, "channel": "out_v",
            "start": _utc(t), "value": 9.1}


@dataclass
class _Heard:
    topic: str | None
    payload: bytes
    at: float
    text: str = ""


class ListFeed:
    """A feed that hands over what a test puts in it, in order, heard as it is taken: the screen judges a bench
    quiet by the real clock, and a whole suite may run for minutes after this module was imported."""

    def __init__(self, messages: list[tuple[str, dict]]) -> None:
        self.waiting = [(t, json.dumps(d).encode()) for t, d in messages]
        self.started = self.stopped = False

    def start(self) -> None:
        self.started = True

    def stop(self) -> None:
        self.stopped = True

    def take(self) -> list[_Heard]:
        out, self.waiting = self.waiting, []
        return [_Heard(t, payload, time.time()) for t, payload in out]


LAB = [("lab/b-ok/state", _state("recording")), ("lab/b-ok/second", _second(NOW - 30, 12.0)),
       ("lab/b-ok/second", _second(NOW - 1, 12.2)),
       ("lab/b-dip/state", _state("recording")), ("lab/b-dip/second", _second(NOW - 1, 9.5)),
       ("lab/b-dip/event", _begin(NOW - 0.5)),
       ("lab/b-gone/state", {"v": 1, "state": "offline"}), ("lab/b-done/state", _state("stopped")),
       ("lab/stray/thing", {"hello": 1})]


def _lab(messages: list[tuple[str, dict]], now: float = NOW) -> tuple[Lab, list[dict]]:
    lab, begun = Lab(), []
    for topic, doc in messages:
        begun += lab.apply(read_message("lab", topic, json.dumps(doc).encode()), now)
    return lab, begun


def test_benches_needing_attention_come_first() -> None:
    """Offline first, then a bench with a dip going on, then the ones recording well, then finished ones
    (common practice for an alarm list, no source)."""
    lab, begun = _lab(LAB)
    rows = lab.rows(NOW)
    assert [(r.name, r.shown_state) for r in rows] == [("b-gone", "offline"), ("b-dip", "event"),
                                                      ("b-ok", "recording"), ("b-done", "stopped")]
    ok = rows[2]
    assert ok.channels == (("out_v", 12.2, 11.9, pytest.approx(12.3), "V"),) and ok.today == 2
    assert ok.elapsed_s == 3723.0
    assert [d["kind"] for d in begun] == ["brownout"] and lab.ignored == 1
    lab.apply(read_message("lab", "lab/b-ok/second", json.dumps(_second(NOW - 1, 12.2)).encode()), NOW)
    assert len(lab.benches["b-ok"].seconds) == 2  # a figure delivered twice is kept once
    assert lab.apply(read_message("lab", "lab/b-dip/event", json.dumps(_begin(NOW - 0.5)).encode()), NOW) == []
    quiet = lab.rows(NOW + 60)  # nothing heard from b-ok for a minute although it says it records
    assert next(r for r in quiet if r.name == "b-ok").shown_state == "no data"


def test_an_event_that_ends_replaces_its_beginning() -> None:
    start = NOW - 3
    end = {**_begin(start), "phase": "end", "id": 7, "end": _utc(start + 0.4), "duration_s": 0.4}
    lab, _ = _lab([("lab/b/state", _state("recording")), ("lab/b/event", _begin(start)), ("lab/b/event", end)])
    (row,) = lab.rows(NOW)
    assert row.shown_state == "recording" and row.last_event["phase"] == "end"
    assert len(lab.benches["b"].events) == 1


def test_the_lab_screen_filters_opens_a_bench_and_rings() -> None:
    app = WatchApp(ListFeed(LAB), "lab", "mqtt://test:1883/lab")
    rang = []
    app.bell = lambda: rang.append(1)
    asyncio.run(_drive(app, rang))
    assert app.feed.stopped


async def _until(pilot, ready, what: str, deadline_s: float = 30.0) -> None:
    """Let the app run until ``ready`` (a loaded machine may take a while to redraw)."""
    deadline = time.monotonic() + deadline_s
    while not ready():
        assert time.monotonic() < deadline, f"timed out waiting for {what}"
        await pilot.pause(0.05)


async def _drive(app: WatchApp, rang: list[int]) -> None:
    async with app.run_test(size=(120, 30)) as pilot:
        table = app.query_one("#benches", DataTable)
        await _until(pilot, lambda: table.row_count == 4, "four benches")
        assert [str(table.get_row_at(i)[0]) for i in range(table.row_count)] == ["b-gone", "b-dip", "b-ok", "b-done"]
        assert rang == [1]  # one brownout began
        await pilot.press("s")  # attention only
        await _until(pilot, lambda: table.row_count == 2, "the attention filter")
        await pilot.press("s", "s", "s")  # recording, offline, all
        await _until(pilot, lambda: app.state_filter == "all" and table.row_count == 4, "all benches again")
        table.move_cursor(row=2)
        await pilot.press("enter")
        await _until(pilot, lambda: isinstance(app.screen, BenchScreen), "the bench's screen")
        assert app.screen.bench == "b-ok"
        await pilot.press("escape")
        await _until(pilot, lambda: not isinstance(app.screen, BenchScreen), "the lab again")
        await pilot.press("b")
        await _until(pilot, lambda: app.bell_on is False, "the bell off")


def test_a_watcher_runs_a_command_for_each_event_that_ends(tmp_path) -> None:
    """--on-event on the watcher: the command gets the same RAILTAP_* fields a recorder gives it, plus the
    bench it came from, and runs once however often the broker delivers the end (common practice, no source)."""
    import sys

    from logger.act.runner import CommandRunner

    out = tmp_path / "env.json"
    runner = CommandRunner([sys.executable, "-c", "import json, os, sys; json.dump({k: v for k, v in os.environ.items()"
                            " if k.startswith('RAILTAP_')}, open(sys.argv[1], 'w'))", str(out)], {"brownout"},
                           timeout_s=30, show_output=False)
    start = NOW - 3
    end = {**_begin(start), "phase": "end", "id": 7, "end": _utc(start + 0.4), "duration_s": 0.4, "depth_pct": 24.0}
    app = WatchApp(ListFeed([("lab/b-dip/state", _state("recording", run="runs/r1")), ("lab/b-dip/event", end)]),
                   "lab", "mqtt://test/lab", runner=runner)

    async def drive() -> None:
        async with app.run_test(size=(120, 30)) as pilot:
            await _until(pilot, out.exists, "the command to run")

    asyncio.run(drive())
    runner.close()
    from fakes import wait_until

    wait_until(lambda: out.stat().st_size > 0, "the command's file")
    env = json.loads(out.read_text())
    assert env["RAILTAP_KIND"] == "brownout" and env["RAILTAP_BENCH"] == "b-dip" and env["RAILTAP_RUN"] == "runs/r1"
    assert env["RAILTAP_START"] == end["start"] and env["RAILTAP_DURATION_S"] == "0.4" and env["RAILTAP_ID"] == "7"
    assert runner.tally().ok == 1


def test_a_bench_gone_offline_keeps_what_was_known_of_it() -> None:
    lab, _ = _lab([("lab/b/state", _state("recording")), ("lab/b/second", _second(NOW - 1, 12.0)),
                   ("lab/b/state", {"v": 1, "state": "offline"})])
    (row,) = lab.rows(NOW)
    assert row.shown_state == "offline" and row.today == 2 and row.channels[0][4] == "V"
