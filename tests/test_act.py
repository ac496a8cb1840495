"""Commands run on events: real processes through a real pipeline and the real command line, no stand-ins for
subprocess. Each command is a small Python program (this interpreter), so the tests need no shell tools."""

from __future__ import annotations

import json
import re
import sys
import time
from pathlib import Path

import pandas as pd
import pytest
from devicestream import Device, Dip, Link, make_source
from fakes import wait_until

from logger.act import CommandOutlet, CommandRunner, environment, parse_kinds
from logger.act.command import split_command
from logger.act.environ import variable_text
from logger.act.runner import ActError
from logger.cli import main
from logger.events.model import KINDS, Event
from logger.ingest import Pipeline, Settings
from logger.ingest.state import LinkHealth, Snapshot
from logger.sim.simple import simple_rig
from logger.tui.status import status_text

# Writes the RAILTAP_* variables it was given to FOLDER/ID.json (under a temporary name first, then renamed).
DUMP_ENV = ("import json, os, sys; e = {k: v for k, v in os.environ.items() if k.startswith('RAILTAP_')}; "
            "p = os.path.join(sys.argv[1], e['RAILTAP_ID'] + '.json'); json.dump(e, open(p + '.tmp', 'w')); "
            "os.replace(p + '.tmp', p)")
# Writes its id, then waits until FOLDER/release exists.
HOLD = ("import os, sys, time; d = sys.argv[1]; open(os.path.join(d, os.environ['RAILTAP_ID']), 'w').close()\n"
        "while not os.path.exists(os.path.join(d, 'release')): time.sleep(0.01)")
# Starts a child in its own process group, then both sleep for a minute.
SLEEP_WITH_CHILD = ("import subprocess, sys, time; subprocess.Popen([sys.executable, '-c', 'import time; "
                    "time.sleep(60)']); time.sleep(60)")


def _pipeline_run(tmp_path: Path, outlets: list[CommandOutlet], script: tuple = (Dip(1.0, 0.2, 70.0),)) -> Path:
    """A 1 kHz tap on a 12 V rail with ``script`` through a real pipeline to a sealed run; returns its folder."""
    source, _ = make_source(Device(rate_hz=1000.0, duration_s=3.0, noise_lsb=1.0, script=script, seed=2),
                            Link(read_s=0.01, seed=4))
    pipeline = Pipeline(source, simple_rig(), Settings(record_root=tmp_path / "runs"), outlets=outlets)
    pipeline.start()
    assert pipeline.wait(120) and pipeline.error is None, pipeline.error
    (run,) = (tmp_path / "runs").iterdir()
    return run


def _python(code: str, *args: object) -> list[str]:
    return [sys.executable, "-c", code, *(str(a) for a in args)]


def _lines() -> tuple[list[str], object]:
    said: list[str] = []
    return said, said.append


def test_a_brownout_runs_the_command_with_its_fields_in_the_environment(tmp_path: Path) -> None:
    """What the command reads is the run's own event table row, the run folder and the rig's name."""
    seen = tmp_path / "seen"
    seen.mkdir()
    said, log = _lines()
    runner = CommandRunner(_python(DUMP_ENV, seen), {"brownout"}, timeout_s=120.0, close_s=120.0, log=log)
    run = _pipeline_run(tmp_path, [CommandOutlet(runner, simple_rig())])
    (row,) = pd.read_parquet(run / "_events.parquet").query("kind == 'brownout'").itertuples()
    env = json.loads((seen / f"{row.id}.json").read_text())
    assert env["RAILTAP_KIND"] == "brownout" and env["RAILTAP_CHANNEL"] == "out_v" and env["RAILTAP_UNIT"] == "V"
    assert env["RAILTAP_ID"] == str(row.id) and env["RAILTAP_DETAIL"] == row.detail
    # ISO 8601 UTC, to the microsecond, as the event table holds them
    assert pd.Timestamp(env["RAILTAP_START"]) == pd.Timestamp(row.start).tz_convert("UTC")
    assert pd.Timestamp(env["RAILTAP_END"]) == pd.Timestamp(row.end).tz_convert("UTC")
    assert env["RAILTAP_START"].endswith("Z")
    assert float(env["RAILTAP_DURATION_S"]) == pytest.approx(row.duration_s, abs=1e-9)
    assert float(env["RAILTAP_DURATION_S"]) == pytest.approx(0.2, abs=0.005)  # the scripted dip
    assert float(env["RAILTAP_VALUE"]) == pytest.approx(row.value, rel=1e-9)
    assert float(env["RAILTAP_DEPTH_PCT"]) == pytest.approx(row.depth_pct, rel=1e-9)
    assert env["RAILTAP_RUN"] == str(run.resolve()) and env["RAILTAP_RIG"] == "simple-rail-12v"
    assert env["RAILTAP_EPISODE"] == ""  # a field without a value is there, empty
    assert runner.tally().ok == 1 and not runner.tally().failed and not said  # no problem to report
    account = json.loads((run / "_run.json").read_text())["on_event"]
    assert account["program"] == Path(sys.executable).name and account["kinds"] == ["brownout"]
    assert account["commands"] == 1 and account["ok"] + account["unfinished"] == 1
    assert row.detail not in (run / "_run.json").read_text()  # counts only, never the event's values
    assert str(seen) not in (run / "_run.json").read_text()  # nor the command's arguments


def test_failing_and_slow_commands_are_logged_and_the_run_ends_complete(tmp_path: Path) -> None:
    """A command that exits 3, one that is not there, and one past its time limit each cost a line; the
    recording does not notice."""
    said, log = _lines()
    rig = simple_rig()
    outlets = [
        CommandOutlet(CommandRunner(_python("raise SystemExit(3)"), {"brownout"}, timeout_s=120.0, close_s=120.0,
                                    log=log, name="exits-3"), rig, name="exits_3"),
        CommandOutlet(CommandRunner([str(tmp_path / "no-such-program")], {"brownout"}, log=log, name="missing"),
                      rig, name="missing"),
        CommandOutlet(CommandRunner(_python(SLEEP_WITH_CHILD), {"brownout"}, timeout_s=0.5, log=log, name="slow"),
                      rig, name="slow"),
    ]
    run = _pipeline_run(tmp_path, outlets)
    meta = json.loads((run / "_run.json").read_text())
    assert meta["status"] == "complete" and meta["stop_reason"] == "source ended"
    assert not any("stopped" in note for note in meta.get("notes", []))  # no outlet was dropped
    assert {"exits_3", "missing", "slow"} <= set(meta)
    exits, missing, slow = (o.runner.tally() for o in outlets)
    assert exits.failed == 1 and missing.failed == 1
    assert slow.timed_out + slow.cut_short == 1  # past 0.5 s during the run or at its end: killed either way
    assert any(line.startswith("exits-3 brownout #") and "exited with status 3" in line for line in said), said
    assert any(line.startswith("missing brownout #") and "no such program" in line for line in said), said
    assert any(line.startswith("slow brownout #") and "killed its process group" in line for line in said), said
    assert "exited with status 3" in outlets[0].summary()


def test_a_command_past_its_time_limit_is_killed_with_its_whole_process_group(tmp_path: Path) -> None:
    said, log = _lines()
    runner = CommandRunner(_python(SLEEP_WITH_CHILD), {"dropout"}, timeout_s=0.5, log=log)
    runner.offer("dropout", {"id": 7, "channel": "out_v"})
    wait_until(lambda: runner.tally().timed_out == 1, "the command to be killed")
    (line,) = said
    assert line.startswith("on-event dropout #7 on out_v: python") and "still running after 0.5 s" in line
    group = int(line.rsplit("(", 1)[1].rstrip(")"))
    if sys.platform.startswith("linux"):  # the leader and the child it started: none left running
        wait_until(lambda: not _live_members(group), f"process group {group} to be gone")
    runner.close()
    assert runner.tally().running == 0 and runner.account()["timed_out"] == 1


def _live_members(group: int) -> list[int]:
    """Processes of ``group`` that are not zombies (a killed child waits there for init to reap it)."""
    members = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[2]) == group and fields[0] != "Z":  # state, ppid, pgrp (proc(5))
            members.append(int(entry.name))
    return members


def test_a_flood_drops_the_oldest_waiting_commands_and_counts_them(tmp_path: Path) -> None:
    said, log = _lines()
    runner = CommandRunner(_python(HOLD, tmp_path), {"brownout"}, timeout_s=120.0, close_s=120.0, at_once=1,
                           waiting=2, log=log)
    runner.offer("brownout", {"id": 1})
    wait_until(lambda: (tmp_path / "1").exists(), "the first command to start")
    for event_id in range(2, 11):
        runner.offer("mark", {"id": 100 + event_id})  # not a kind asked for: never run, never counted
        runner.offer("brownout", {"id": event_id})
    wait_until(lambda: runner.tally().dropped == 7, "seven commands dropped")
    assert runner.tally().waiting == 2 and runner.tally().running == 1
    (tmp_path / "release").touch()
    wait_until(lambda: runner.tally().ok == 3, "the three kept commands to finish")
    runner.close()
    assert sorted(p.name for p in tmp_path.iterdir() if p.name != "release") == ["1", "10", "9"]
    assert [line.split(":")[0] for line in said] == [f"on-event brownout #{n}" for n in range(2, 9)]
    assert all("dropped for a newer one" in line for line in said)
    t = runner.tally()
    assert (runner.offered, t.ok, t.dropped, t.failed, t.timed_out) == (10, 3, 7, 0, 0)
    assert runner.summary() == "on-event: 3 ok, 7 dropped; last: " + said[-1].removeprefix("on-event ")


def test_record_on_event_from_the_command_line(tmp_path: Path, capsys) -> None:
    """The demo bench's brownout at 30 s runs the command, with the run folder; the run is complete."""
    out, seen = tmp_path / "runs", tmp_path / "seen"
    seen.mkdir()
    code = main(["record", "--sim", "--speed", "0", "--duration", "35", "--out", str(out), "--on-event", "brownout",
                 "--on-event-timeout", "2m", "--", *_python(DUMP_ENV, seen)])
    err = capsys.readouterr().err
    assert code == 0, err
    (run,) = out.iterdir()
    (found,) = seen.iterdir()
    env = json.loads(found.read_text())
    assert env["RAILTAP_KIND"] == "brownout" and env["RAILTAP_CHANNEL"] == "out_v"
    assert env["RAILTAP_RUN"] == str(run.resolve()) and env["RAILTAP_RIG"] == "demo-bench-12v"
    assert f"on-event brownout #{env['RAILTAP_ID']} on out_v: python" in err and "railtap: on-event: 1 ok" in err
    meta = json.loads((run / "_run.json").read_text())
    assert meta["status"] == "complete" and meta["on_event"]["commands"] == 1
    assert meta["on_event"]["timeout_s"] == 120.0


@pytest.mark.parametrize(("args", "expected"), [
    (["--on-event", "brownot,dropout", "--", "true"], "no kind of event is called brownot; give a comma-separated "
                                                       "list of brownout, dropout, overvoltage"),
    (["--on-event", "brownout"], "needs -- and the command"),
    (["--on-event", "brownout", "--"], "no command after --"),
    (["--on-event", "--", "true"], "needs the kinds of event"),
    (["--on-event"], "needs the kinds of event"),
    (["--on-event", "brownout", "--", "railtap-no-such-program"], "railtap-no-such-program: no such program"),
    (["--on-event", "all", "--on-event-timeout", "0", "--", "true"], "--on-event-timeout 0: give a time limit"),
    (["--on-event-timeout", "5"], "--on-event-timeout is for --on-event"),
])
def test_on_event_mistakes_are_one_line(tmp_path: Path, capsys, args: list[str], expected: str) -> None:
    assert main(["record", "--sim", "--speed", "0", "--duration", "1", "--out", str(tmp_path / "runs"), *args]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and expected in err[0], err
    assert not (tmp_path / "runs").exists()  # refused before anything started


def test_the_command_is_everything_after_the_dash_dash_that_follows_on_event() -> None:
    argv = ["record", "--sim", "--on-event", "brownout", "--quiet", "--", "curl", "--quiet", "--", "-x"]
    assert split_command(argv) == (["record", "--sim", "--on-event", "brownout", "--quiet"],
                                   ["curl", "--quiet", "--", "-x"])
    assert split_command(["record", "--on-event=all", "--", "x"]) == (["record", "--on-event=all"], ["x"])
    assert split_command(["live", "--", "--on-event"]) == (["live", "--", "--on-event"], None)  # railtap's own --
    assert split_command(["record", "--on-event-timeout", "5"]) == (["record", "--on-event-timeout", "5"], None)


def test_kinds_are_checked_against_the_event_kinds() -> None:
    assert parse_kinds("all") == frozenset(KINDS)
    assert parse_kinds(" brownout, dropout ") == {"brownout", "dropout"}
    for bad in ("", ",", "all,brownout", "Brownout"):
        with pytest.raises(ActError, match="give a comma-separated list of brownout"):
            parse_kinds(bad)


def test_the_environment_is_ours_plus_what_was_inherited() -> None:
    env = environment("brownout", {"id": 3, "value": 9.25, "end": None, "flag": True, "rate hz": 2.5},
                      {"PATH": "/bin", "RAILTAP_STALE": "from another run"})
    assert env == {"PATH": "/bin", "RAILTAP_KIND": "brownout", "RAILTAP_ID": "3", "RAILTAP_VALUE": "9.25",
                   "RAILTAP_END": "", "RAILTAP_FLAG": "1", "RAILTAP_RATE_HZ": "2.5"}
    assert variable_text(float("nan")) == "" and variable_text(0.1 + 0.2) == "0.30000000000000004"


def test_a_runner_that_never_heard_of_an_event_closes_at_once() -> None:
    runner = CommandRunner(["true"], {"brownout"})
    runner.offer("mark", {"id": 1})
    runner.close()
    assert runner.summary() == "on-event: none yet" and runner.account()["commands"] == 0


def test_each_run_accounts_for_the_commands_of_its_own_time() -> None:
    """The live screen can stop and start recording: each run's _run.json counts what happened during it."""
    outlet = CommandOutlet(CommandRunner(_python("pass"), {"mark"}, timeout_s=120.0, close_s=120.0), simple_rig())
    outlet.event_ended(Event("mark", 1_000_000, detail="first run", id=1))
    first = outlet.account()
    wait_until(lambda: outlet.runner.tally().ok == 1, "the first command to finish")
    for n in (2, 3):
        outlet.event_ended(Event("mark", n * 1_000_000, detail="second run", id=n))
    outlet.event_ended(Event("brownout", 4_000_000, 4_100_000, channel="out_v", id=4))  # not asked for
    second = outlet.account()
    outlet.close()
    assert first["commands"] == 1 and first["ok"] + first["unfinished"] == 1
    assert second["commands"] == 2 and first["ok"] + second["ok"] + second["unfinished"] == 3
    assert outlet.runner.tally().ok == 3 and outlet.account()["commands"] == 0


def test_under_the_live_screen_a_failing_command_shows_in_the_link_panel_and_writes_nothing(
        tmp_path: Path, capfd) -> None:
    """The demo bench at 100x: its brownout at 30 s comes 0.3 s in. The command's text would garble the screen,
    so it goes nowhere; its exit status is shown in the panel."""
    import asyncio

    from logger.act.command import OnEvent, on_event_outlet
    from logger.sim.scenario import load_scenario
    from logger.sources.simulated import SimSource
    from logger.tui import RailtapApp
    from logger.tui.status import StatusPanel

    scenario = load_scenario("demo-bench")
    outlet = on_event_outlet(OnEvent(tuple(_python("import sys; print('out'); sys.exit('err')")),
                                     frozenset({"brownout"}), 120.0), scenario.rig, screen=True, quiet=False)
    pipeline = Pipeline(SimSource(scenario.make_device(1), speed=100.0, duration_s=scenario.duration_s),
                        scenario.rig, Settings(record_root=tmp_path), outlets=[outlet])
    pipeline.start()

    async def run() -> None:
        app = RailtapApp(pipeline)
        async with app.run_test(size=(100, 30)) as pilot:
            status = app.query_one(StatusPanel)
            deadline = time.monotonic() + 60.0
            while "exited with status 1" not in str(status.content):
                assert time.monotonic() < deadline, str(status.content)
                await pilot.pause(0.02)
            # At 100x the next dip's command may already be running, or have failed too, when the panel is read.
            text = str(status.content)
            assert re.search(r"on-event: 0 ok, [1-9]\d* failed(, \d+ running)?(, \d+ waiting)?; "
                             r"last: brownout #\d+ on \w+: python exited with status 1", text), text

    try:
        asyncio.run(run())
    finally:
        pipeline.stop()
    captured = capfd.readouterr()
    assert "out" not in captured.out.split() and "err" not in captured.err.split()


def test_a_runner_whose_thread_failed_says_so_at_the_next_offer() -> None:
    """A pipeline drops an outlet that raises, with a note: a broken runner must not fail silently."""

    class Unprintable:
        def __str__(self) -> str:
            raise ValueError("no text")

    said, log = _lines()
    runner = CommandRunner(["true"], {"mark"}, log=log)
    runner.offer("mark", {"id": 1, "odd": Unprintable()})
    wait_until(lambda: said, "the runner to say it stopped")
    assert said == ["on-event stopped: ValueError: no text"]
    with pytest.raises(RuntimeError, match="on-event stopped: ValueError: no text"):
        runner.offer("mark", {"id": 2})
    runner.close()


def test_the_link_panel_shows_each_outlets_line() -> None:
    link = LinkHealth("sim", True, 0, 0.0, 0, 0, 0, 0, 0, None)
    snap = Snapshot("running", "ok", (), (), None, None, None, link, None,
                    outlets=("on-event: 2 ok, 1 failed; last: brownout #3 on out_v: x exited with status 3",))
    text = status_text(snap)
    assert "on-event: 2 ok, 1 failed" in text.plain
    line = text.plain.index("on-event")
    assert any(span.start <= line < span.end and "yellow" in str(span.style) for span in text.spans)  # stands out


def test_the_inherited_environment_is_taken_when_the_runner_is_made(monkeypatch: pytest.MonkeyPatch,
                                                                    tmp_path: Path) -> None:
    """The runner's thread reads no shared state: the environment is copied once, when it is made."""
    monkeypatch.setenv("TEST_ACT_BEFORE", "seen")
    runner = CommandRunner(_python(DUMP_ENV.replace("'RAILTAP_'", "'TEST_ACT_'").replace(
        "e['RAILTAP_ID']", "os.environ['RAILTAP_ID']"), tmp_path), {"mark"}, timeout_s=120.0, close_s=120.0)
    monkeypatch.setenv("TEST_ACT_AFTER", "not seen")
    runner.offer("mark", {"id": 1})
    wait_until(lambda: (tmp_path / "1.json").exists(), "the command to write its environment")
    runner.close()
    assert json.loads((tmp_path / "1.json").read_text()) == {"TEST_ACT_BEFORE": "seen"}
