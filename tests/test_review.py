"""Reviewing a run: summary figures against outside references, event drill-down, export, a folder of runs."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest
from fakes import flip_page_bytes
from scipy.integrate import trapezoid

from logger.cal.apply import Calibrator
from logger.cli import main
from logger.review.export import export_samples, parse_when, run_start
from logger.review.runs import open_runs, summarize_runs
from logger.review.summary import summarize
from logger.review.window import around_event
from logger.rig import parse_rig
from logger.sim.simple import RIG_TOML
from logger.store import new_run, sample_schema
from logger.store.files import StoreError
from logger.store.schema import UTC_TYPE
from logger.wire import DeviceHeader

T0 = 1_800_000_000_000_000
RIG = RIG_TOML  # the simple simulated rail's rig: out_v and out_a


def _write_run(root: Path, t_s: np.ndarray, volts: np.ndarray, amps: np.ndarray, rate_hz: float,
               part_seconds: float = 3600.0, events: list[dict] | None = None) -> Path:
    """A run folder made by railtap's own writer from given samples (counts are not used by the review)."""
    header = f"H fw=test ver=1 bits=12 vref_mv=3300 rate_hz={rate_hz:g} ch=out_v,out_a why=boot"
    meta = {"rig": RIG, "device_header": header,
            "channels_info": [{"name": "out_v", "unit": "V"}, {"name": "out_a", "unit": "A"}],
            "power_pairs": [{"rail": "out", "volts": "out_v", "amps": "out_a"}], "link": {"rate_hz": rate_hz}}
    schema = sample_schema(["out_v", "out_a"])
    writer = new_run(root, "review", schema, meta, part_seconds=part_seconds)
    utc = T0 + np.round(np.asarray(t_s) * 1e6).astype(np.int64)
    n = len(utc)
    for rows in np.array_split(np.arange(n), max(1, n // 50_000)):
        writer.append(pa.record_batch([
            pa.array(utc[rows], pa.int64()).cast(UTC_TYPE), pa.array(utc[rows] - T0, pa.int64()),
            pa.array(rows, pa.int64()), pa.array(np.zeros(len(rows), np.int32)),
            pa.array(np.asarray(volts, np.float32)[rows]), pa.array(np.zeros(len(rows), np.uint16)),
            pa.array(np.asarray(amps, np.float32)[rows]), pa.array(np.zeros(len(rows), np.uint16)),
        ], schema=schema))
    for event in events or []:
        writer.add_event(event)
    writer.close("test data written")
    return writer.folder


def test_charge_on_uneven_timestamps_matches_scipy(tmp_path: Path) -> None:
    t = np.array([0.0, 1.0, 2.0, 4.0, 5.0, 10.0])
    amps = np.array([1.0, 1.0, 2.0, 2.0, 0.0, 0.0])
    run = _write_run(tmp_path, t, np.full(6, 12.0), amps, rate_hz=0.5)
    for full in (False, True):
        s = summarize(run, full=full)
        out_a = next(c for c in s.channels if c.name == "out_a")
        # Reference: scipy.integrate.trapezoid on the same arrays; 7.5 A s by hand (trapezoid rule).
        assert out_a.integral == pytest.approx(trapezoid(amps, t)) == pytest.approx(7.5)
        assert s.rails[0].charge_ah == pytest.approx(7.5 / 3600)
        assert s.rails[0].energy_wh == pytest.approx(12.0 * 7.5 / 3600)


def test_ripple_leaves_out_the_slow_trend_and_the_events_and_names_the_largest_excursion(tmp_path: Path) -> None:
    """The same 50 mV sine riding on a rail that creeps up 0.1 V a second, with a 200 ms dip to 9 V at 5 s: the
    ripple RMS is still A / sqrt(2) (common fact of the trade) because each second's straight-line trend is
    taken out, and the dip's second is left out of the ripple and reported as the largest excursion instead.
    Without the trend taken out the creep alone would add 0.1 / sqrt(12) V = 28.9 mV (RMS of a ramp, common
    fact) in quadrature."""
    a = 0.05
    t = np.arange(0, 10.0, 1 / 2000)
    volts = 12.0 + 0.1 * t + a * np.sin(2 * np.pi * 100 * t)
    dip = (t >= 5.2) & (t < 5.4)
    volts[dip] = 9.0
    event = {"kind": "brownout", "channel": "out_v", "start": T0 + 5_200_000, "end": T0 + 5_400_000,
             "duration_s": 0.2, "value": 9.0, "depth_pct": 25.0, "detail": "down to 9 V", "id": 1,
             "device_start_us": 5_200_000, "device_end_us": 5_400_000}
    s = summarize(_write_run(tmp_path, t, volts, np.ones(len(t)), rate_hz=2000.0, events=[event]))
    out_v = next(c for c in s.channels if c.name == "out_v")
    assert out_v.ripple_rms[0] == pytest.approx(a / np.sqrt(2), rel=1e-3)
    assert out_v.ripple_rms[1] == pytest.approx(a / np.sqrt(2), rel=1e-3)  # the dip's second is not ripple
    assert out_v.ripple_pp[1] < 2 * a + 0.1 + 1e-3  # a second holds 2 A plus its 0.1 V of creep at most
    assert out_v.excursion == pytest.approx(12.0 + 0.1 * 6.0 + a - 9.0, abs=0.01)  # its second's top to the dip


def test_a_load_step_is_not_ripple_and_a_ramp_is_taken_out_of_the_peak_to_peak(tmp_path: Path) -> None:
    """5 mV peak-to-peak of 100 Hz ripple (A = 2.5 mV) sampled at 1 kHz, with a 0.2 V load step at 5.5 s: the
    step's second is left out of the ripple (it read 204.8 mV of ripple when the second's max - min was the
    ripple) and is the largest excursion instead. On a 0.1 V/s ramp the peak-to-peak is the ripple's, not the
    ramp's 0.1 V, to within the slope times two ripple cycles (2 mV). A sine's RMS is A / sqrt(2) and its
    peak-to-peak 2 A (common fact of the trade); at 1 kHz the 100 Hz peaks fall between samples, so 2 A reads
    2 A sin(72 deg) = 4.76 mV (sampling arithmetic, common practice, no source)."""
    a = 0.0025
    t = np.arange(0, 10.0, 1 / 1000)
    ripple = a * np.sin(2 * np.pi * 100 * t)
    sampled_pp = 2 * a * np.sin(np.deg2rad(72))
    stepped = summarize(_write_run(tmp_path / "step", t, 12.0 + ripple - 0.2 * (t >= 5.5), np.ones(len(t)),
                                   rate_hz=1000.0)).channels[0]
    assert stepped.ripple_pp == pytest.approx((sampled_pp, sampled_pp), abs=1e-4)
    assert stepped.ripple_rms == pytest.approx((a / np.sqrt(2), a / np.sqrt(2)), rel=1e-3)
    assert stepped.excursion == pytest.approx(0.2 + sampled_pp, abs=1e-3)
    for at_s in (5.02, 5.1, 5.9, 5.97):  # near a second's edge a line through the step explains some of it
        edge = summarize(_write_run(tmp_path / f"edge{at_s}", t, 12.0 + ripple - 0.2 * (t >= at_s),
                                    np.ones(len(t)), rate_hz=1000.0)).channels[0]
        assert edge.ripple_pp[1] == pytest.approx(sampled_pp, abs=1e-4)
    ramp = summarize(_write_run(tmp_path / "ramp", t, 12.0 + ripple + 0.1 * t, np.ones(len(t)),
                                rate_hz=1000.0)).channels[0]
    assert ramp.ripple_pp[1] == pytest.approx(sampled_pp, abs=0.1 * 2 / 100)
    assert ramp.ripple_rms[1] == pytest.approx(a / np.sqrt(2), rel=1e-3)
    burst = ripple * (1 + 4 * ((t >= 3) & (t < 4)))  # five times the ripple for one second: that is ripple
    assert summarize(_write_run(tmp_path / "burst", t, 12.0 + burst, np.ones(len(t)),
                                rate_hz=1000.0)).channels[0].ripple_pp[1] == pytest.approx(5 * sampled_pp, rel=0.01)


def test_a_2_ah_cell_at_0_2_it_for_5_hours_gives_2_ah(tmp_path: Path) -> None:
    # IEC 61960-3 rated capacity: discharge at 0.2 It, here 0.4 A for a 2.0 Ah cell, for 5 h (value from
    # memory); one sample a second, in five one-hour parts, so the interval between parts counts too.
    t = np.arange(0, 5 * 3600 + 1, 1.0)
    volts = np.linspace(4.1, 3.0, len(t))
    run = _write_run(tmp_path, t, volts, np.full(len(t), 0.4), rate_hz=1.0)
    s = summarize(run)
    assert len(list(run.glob("part-*.parquet"))) >= 5
    assert s.rails[0].charge_ah == pytest.approx(2.000, abs=1e-6)  # values are stored as float32: 0.4 + 6e-9
    stored = volts.astype(np.float32).astype(np.float64) * np.float64(np.float32(0.4))
    assert s.rails[0].energy_wh == pytest.approx(trapezoid(stored, t) / 3600, rel=1e-9)


def test_ripple_of_a_sine_is_its_peak_to_peak_and_a_over_root_two(tmp_path: Path) -> None:
    # A sine of amplitude A has RMS A / sqrt(2) and peak-to-peak 2 A (common fact of the trade). Sampled at
    # 2 kHz, a 100 Hz sine is hit at its peaks and every second holds whole cycles, so both are exact.
    a = 0.05
    t = np.arange(0, 10.0, 1 / 2000)
    volts = 12.0 + a * np.sin(2 * np.pi * 100 * t)
    s = summarize(_write_run(tmp_path, t, volts, np.ones(len(t)), rate_hz=2000.0))
    out_v = next(c for c in s.channels if c.name == "out_v")
    assert out_v.ripple_rms[0] == pytest.approx(a / np.sqrt(2), rel=1e-4)
    assert out_v.ripple_pp[0] == pytest.approx(2 * a, rel=1e-4)
    assert out_v.mean == pytest.approx(12.0, abs=1e-6) and out_v.std == pytest.approx(a / np.sqrt(2), rel=1e-3)


def test_summary_events_agree_with_the_simulator_truth(tmp_path: Path) -> None:
    """The simple simulated rail dips to 9.5 V for 0.4 s at 30 s and drops to 0.3 V for 0.15 s at 50 s."""
    from logger.ingest import Pipeline, Settings
    from logger.sim.device import SimDevice
    from logger.sim.simple import DEFAULT_SCRIPT, simple_rig
    from logger.sources.simulated import SimSource

    pipeline = Pipeline(SimSource(SimDevice(seed=5), speed=0.0, duration_s=65.0), simple_rig(),
                        Settings(record_root=tmp_path))
    pipeline.start()
    assert pipeline.wait(60)
    (run,) = tmp_path.iterdir()
    s = summarize(run)
    kinds = {k.kind: k for k in s.events if k.channel == "out_v"}
    sag, drop = DEFAULT_SCRIPT
    assert kinds["brownout"].count == 1 and kinds["dropout"].count == 1
    assert kinds["brownout"].longest_s == pytest.approx(sag.duration_s, abs=0.005)
    assert kinds["dropout"].longest_s == pytest.approx(drop.duration_s, abs=0.005)
    assert kinds["brownout"].worst_value == pytest.approx(sag.level_v, abs=0.1)
    out_v = next(c for c in s.channels if c.name == "out_v")
    assert out_v.below_s == pytest.approx(sag.duration_s + drop.duration_s, abs=0.01)
    full = summarize(run, full=True)
    assert full.rails[0].energy_wh == pytest.approx(s.rails[0].energy_wh, rel=1e-12)
    assert full.channels[0].std == pytest.approx(s.channels[0].std, rel=1e-9)


def test_event_window_export_and_a_folder_of_runs(tmp_path: Path, capsys) -> None:
    t = np.arange(0, 20.0, 1 / 1000)
    volts = np.where((t > 10.0) & (t < 10.2), 9.0, 12.0)
    dip = {"kind": "brownout", "channel": "out_v", "start": T0 + 10_000_000, "end": T0 + 10_200_000,
           "duration_s": 0.2, "value": 9.0, "depth_pct": 25.0, "detail": "down to 9 V", "id": 1}
    run = _write_run(tmp_path, t, volts, np.ones(len(t)), rate_hz=1000.0, events=[dip])
    w = around_event(run, 1, before_s=0.5, after_s=0.25)
    got = w.samples["utc"].cast(pa.int64()).to_numpy()
    assert w.samples.column_names == ["utc", "out_v"]
    assert got.min() == T0 + 9_500_000 and got.max() == T0 + 10_450_000 and len(got) == 951
    first = run_start(run)
    out = tmp_path / "span.csv"
    assert export_samples(run, out, start=parse_when("5s", first), end=parse_when("6s", first)) == 1001
    table = pd.read_csv(out)
    assert list(table.columns) == ["utc", "out_v", "out_a"] and table["out_v"].eq(12.0).all()
    lines = (tmp_path / "span.jsonl")
    export_samples(run, lines, channels=["out_v"], start=parse_when("10.1s", first), end=parse_when("10.1s", first))
    assert [json.loads(x) for x in lines.read_text().splitlines()] == [
        {"utc": "2027-01-15T08:00:10.100000Z", "out_v": 9}]

    def interrupted(done: int, total: int) -> None:
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        export_samples(run, tmp_path / "cut.csv", progress=interrupted)
    assert not list(tmp_path.glob("*cut.csv*"))  # no half file, no temporary left
    second = _write_run(tmp_path, t, volts - 1.0, np.ones(len(t)), rate_hz=1000.0)
    runs = open_runs(tmp_path)
    lowest = runs.to_table(columns=["run", "out_v"]).group_by("run").aggregate([("out_v", "min")]).to_pylist()
    assert sorted(r["out_v_min"] for r in lowest) == [8.0, 9.0]
    assert {line.folder for line in summarize_runs(tmp_path)} == {run, second}
    assert main(["review", str(tmp_path)]) == 0 and "review" in capsys.readouterr().out
    assert main(["review", str(run), "--event", "1"]) == 0 and "event #1: brownout" in capsys.readouterr().out
    assert main(["review", str(run), "--event", "7"]) == 2
    with pytest.raises(StoreError, match="offset from the run's start"):
        parse_when("yesterday", first)


def test_recovery_detects_the_brownout_a_crash_cut_short(tmp_path: Path) -> None:
    """A run killed in the middle of a brownout: its journal has the samples but not the event, which only
    is written when it ends. Recovery detects the rail events again from the samples."""
    from logger.cli import _recover

    t = np.arange(0, 10.0, 1 / 1000)
    volts = np.where(t > 7.0, 6.0, 12.0)  # the rail sags at 7 s and is still down when the process dies
    meta = {"rig": RIG, "channels_info": [{"name": "out_v", "unit": "V"}, {"name": "out_a", "unit": "A"}],
            "power_pairs": [{"rail": "out", "volts": "out_v", "amps": "out_a"}],
            "device_header": "H fw=t ver=1 bits=12 vref_mv=3300 rate_hz=1000 ch=a0,a1 why=boot"}
    schema = sample_schema(["out_v", "out_a"])
    writer = new_run(tmp_path, "crash", schema, meta)
    utc = T0 + np.round(t * 1e6).astype(np.int64)
    # counts that the rig's own scaling turns into these volts and amps (recovery works from the counts)
    gain = Calibrator(parse_rig(RIG), DeviceHeader.parse(meta["device_header"])).gain
    v_counts, a_counts = (np.round(x / g).astype(np.uint16) for x, g in ((volts, gain[0]), (np.ones(len(t)), gain[1])))
    writer.append(pa.record_batch([
        pa.array(utc, pa.int64()).cast(UTC_TYPE), pa.array(utc - T0, pa.int64()),
        pa.array(np.arange(len(t)), pa.int64()), pa.array(np.zeros(len(t), np.int32)),
        pa.array((v_counts * gain[0]).astype(np.float32)), pa.array(v_counts),
        pa.array((a_counts * gain[1]).astype(np.float32)), pa.array(a_counts)], schema=schema))
    writer.flush()
    writer.abandon("killed")  # as if the process had died: journal kept, nothing sealed
    meta = _recover(writer.folder)
    events = pd.read_parquet(writer.folder / "_events.parquet")
    (dip,) = events[events.kind.isin(["brownout", "dropout"])].itertuples()
    assert dip.channel == "out_v" and dip.value == pytest.approx(6.0, abs=0.01) and "still below" in dip.detail
    assert meta["status"] == "recovered" and meta["events"] == len(events)


@pytest.mark.parametrize("damage", ["truncated part", "empty part", "garbage events", "garbage rollup",
                                    "wrong types in _run.json"])
@pytest.mark.parametrize("command", ["review", "review --full", "report", "export", "compare", "recal", "recover"])
def test_a_damaged_run_gets_one_line_naming_the_file(tmp_path: Path, capsys, damage: str, command: str) -> None:
    """Every reading command on a damaged run folder: one line naming the damaged file and what to do, exit 2,
    never a traceback; a damaged rollup is derived data and is simply written again (common practice)."""
    t = np.arange(0, 30.0, 1 / 100)
    good = _write_run(tmp_path / "good", t, np.full(len(t), 12.0), np.full(len(t), 1.0), rate_hz=100.0)
    run = _write_run(tmp_path / "bad", t, np.full(len(t), 12.0), np.full(len(t), 1.0), rate_hz=100.0)
    part, named = run / "part-00000.parquet", "part-00000.parquet"
    if damage == "truncated part":
        part.write_bytes(part.read_bytes()[:3000])
    elif damage == "empty part":
        part.write_bytes(b"")
    elif damage == "garbage events":
        (run / "_events.parquet").write_bytes(b"not parquet at all" * 100)
        named = "_events.parquet"
    elif damage == "garbage rollup":
        main(["review", str(run)])  # makes the rollup
        (run / "_rollup-00000.parquet").write_bytes(b"PAR1" + b"\0" * 500)
        named = None
    else:
        meta = json.loads((run / "_run.json").read_text())
        (run / "_run.json").write_text(json.dumps({**meta, "parts": "p", "link": 5}))
        named = "_run.json"
    capsys.readouterr()
    args = {"review": ["review", str(run)], "review --full": ["review", str(run), "--full"],
            "report": ["report", str(run), "--md", str(tmp_path / "md")],
            "export": ["export", str(run), str(tmp_path / "out.csv")], "compare": ["compare", str(good), str(run)],
            "recal": ["recal", str(run), "--profile", str(_same_scaling_profile(tmp_path))],
            "recover": ["recover", str(run)]}  # a sealed run: recovery cannot mend a file, and says so
    code = main(args[command])
    err = [line for line in capsys.readouterr().err.strip().splitlines() if not line.startswith("railtap: part ")]
    if named is None:
        assert code == 0
        return
    assert code == 2 and len(err) == 1 and named in err[0] and err[0].startswith("railtap: "), err


def _same_scaling_profile(folder: Path) -> Path:
    """A profile for out_v with the simple rig's own scaling (12-bit, 3.3 V, divider 11; LSB = FS / 2^N, common
    practice, no source)."""
    from logger.cal.fit import Polynomial
    from logger.cal.profile import Profile, save_profile

    curve = Polynomial((0.0, 3.3 / 4096 * 11.0), ((0.0, 0.0), (0.0, 0.0)))
    path = folder / "out_v.json"
    save_profile(Profile("out_v", "V", "line", curve, (), (0.0, 4095.0), "2026-12-01T00:00:00+00:00"), path)
    return path


@pytest.mark.parametrize("full", [False, True])
def test_a_damaged_page_inside_a_part_is_named(tmp_path: Path, capsys, full: bool) -> None:
    """Bytes flipped inside a data page (the footer still opens): the part is named in one line."""

    t = np.arange(0, 30.0, 1 / 100)
    run = _write_run(tmp_path, t, 12.0 + 0.1 * np.sin(t), np.full(len(t), 1.0), rate_hz=100.0)
    part = run / "part-00000.parquet"
    flip_page_bytes(part)
    for rollup in run.glob("_rollup-*.parquet"):
        rollup.unlink()
    capsys.readouterr()
    code = main(["review", str(run), *(["--full"] if full else [])])
    err = capsys.readouterr().err.strip().splitlines()
    assert code in (1, 2) and len(err) == 1 and err[0].startswith("railtap: "), err
    assert "part-00000.parquet" in err[0] or "damaged" in err[0]


@pytest.mark.parametrize("damage", ["truncated", "flipped page"])
@pytest.mark.parametrize("full", [False, True])
def test_review_leaves_out_a_damaged_part_and_says_the_run_is_incomplete(tmp_path: Path, capsys, damage: str,
                                                                          full: bool) -> None:
    """A three-part run whose middle part is damaged: review prints the figures of the other two, names the
    part in an INCOMPLETE line and exits 3; the sample count is exactly what the two readable parts hold
    (common practice, no source: a reader that cannot vouch for a file leaves it out and says so)."""
    import pyarrow.parquet as pq

    t = np.arange(0, 30.0, 1 / 100)
    run = _write_run(tmp_path, t, 12.0 + 0.1 * np.sin(t), np.full(len(t), 1.0), rate_hz=100.0, part_seconds=10.0)
    parts = sorted(run.glob("part-*.parquet"))
    assert len(parts) == 3
    middle = parts[1]
    readable = sum(pq.read_metadata(p).num_rows for p in (parts[0], parts[2]))
    for rollup in run.glob("_rollup-*.parquet"):
        rollup.unlink()
    if damage == "truncated":
        middle.write_bytes(middle.read_bytes()[:2000])
    else:
        flip_page_bytes(middle)
    s = summarize(run, full=full)
    assert s.samples == readable and len(s.skipped) == 1 and middle.name in s.skipped[0]
    capsys.readouterr()
    code = main(["review", str(run), *(["--full"] if full else []), "--plot", str(tmp_path / "png")])
    out, err = capsys.readouterr()
    assert code == 3
    assert "INCOMPLETE" in out and middle.name in out
    assert [line for line in err.splitlines() if line.startswith("railtap: ")] == [
        f"railtap: incomplete: {s.skipped[0]}"]
    assert (tmp_path / "png" / f"{run.name}-overview.png").exists()
    assert main(["review", str(tmp_path)]) == 3 and "INCOMPLETE" in capsys.readouterr().out  # a folder of runs
    assert main(["export", str(run), str(tmp_path / "out.csv")]) in (1, 2)  # export refuses, naming the part
    assert middle.name in capsys.readouterr().err
    # compare: a footer that is gone is refused up front; a page found bad while scanning leaves B incomplete
    code = main(["compare", str(run), str(run), *(["--full"] if full else [])])
    out, err = capsys.readouterr()
    if damage == "truncated":
        assert code == 2 and middle.name in err
    else:
        assert code == 3 and "INCOMPLETE: B leaves out a part" in out and middle.name in out


def test_sealed_events_are_numbered_in_time_order_with_dips_pointing_at_their_episode(tmp_path: Path,
                                                                                       capsys) -> None:
    """Events are written as they end: a long brownout and a flicker episode come after shorter events that
    started later. The sealed table numbers them by start (an episode before its first dip at the same start),
    and `review --events` lists #1, #2, #3... in that order."""
    from logger.events.model import Event

    s = 1_000_000
    def event(kind: str, start_s: int, end_s: int, channel: str, detail: str, n: int) -> Event:
        return Event(kind, T0 + start_s * s, end_us=T0 + end_s * s, channel=channel, detail=detail, id=n)

    written = [event("brownout", 10, 11, "out_v", "dip 1", 1), event("brownout", 12, 13, "out_v", "dip 2", 2),
               event("dropout", 2, 25, "out_a", "long one", 3), event("flicker", 10, 14, "out_v", "2 dips", 4)]
    # ... in the order they ended
    t = np.arange(0, 30.0, 1 / 100)
    run = _write_run(tmp_path, t, np.full(len(t), 12.0), np.ones(len(t)), rate_hz=100.0,
                     events=[e.row() for e in written])
    table = pd.read_parquet(run / "_events.parquet")
    assert table["detail"].tolist() == ["long one", "2 dips", "dip 1", "dip 2"]
    assert table["id"].tolist() == [1, 2, 3, 4]
    assert table["episode"].tolist()[2:] == [2, 2] and pd.isna(table["episode"].iloc[0])

    def listed(*options: str) -> list[str]:
        capsys.readouterr()
        assert main(["review", str(run), "--events", *options]) == 0
        return [line.split("|")[1].strip() for line in capsys.readouterr().out.splitlines()
                if line.startswith("| ") and line.split("|")[1].strip().isdigit()]

    assert listed() == ["1", "2"]  # one row per flicker episode: its dips are counted in it
    assert listed("--dips") == ["1", "2", "3", "4"]
    assert listed("--kind", "dropout") == ["1"] and listed("--channel", "out_v") == ["2"]
    assert listed("--dips", "--kind", "brownout") == ["3", "4"]


@pytest.mark.parametrize(("value", "step", "signed", "text"), [
    (11.3367141, 0.0088623, False, "11.337"),   # 8.86 mV steps: three places
    (1.776e-15, 0.0088623, False, "0"),         # float noise is zero
    (-0.0004, 0.0088623, True, "0"),            # below half the last place: zero, no sign
    (0.0123, 0.0016113, True, "+0.012"),
    (2.99393e-05, None, True, "+2.994e-05"),    # no step known: four significant digits
    (0.0, None, False, "0"),
    (float("nan"), 0.01, False, "-"),
])  # a figure to the place of one converter step, LSB = Vref / 2^N (common practice, no source)
def test_figures_are_printed_to_their_resolution(value: float, step: float | None, signed: bool, text: str) -> None:
    from logger.figures import to_resolution

    assert to_resolution(value, step, signed=signed) == text


def test_one_time_zone_on_every_review_output_named_and_utc_on_request(capsys, monkeypatch) -> None:
    """On a computer one hour east of UTC (the POSIX zone string "CET-1": UTC+01:00, no tz database needed) the
    overnight sample that starts at 22:00 UTC reads 23:00 local time in the summary and the event list, each
    naming its zone; with --utc both read 22:00 and say UTC."""
    import time

    from logger.review.chart import show_utc

    if not hasattr(time, "tzset"):
        pytest.skip("needs time.tzset")
    monkeypatch.setenv("TZ", "CET-1")
    time.tzset()
    run = str(Path(__file__).parents[1] / "sample_logs" / "overnight-soak")
    try:
        assert main(["review", run, "--events"]) == 0
        local = capsys.readouterr().out
        assert main(["review", run, "--events", "--utc"]) == 0
        utc = capsys.readouterr().out
    finally:
        show_utc(False)
        monkeypatch.delenv("TZ")
        time.tzset()
    assert "from 2026-03-13 23:00:00.002 to 2026-03-13 23:20:00.000 (local time, UTC+01:00)" in local
    assert "| start (local time, UTC+01:00) |" in local and "| 2026-03-13 23:02:30.003 |" in local
    assert "from 2026-03-13 22:00:00.002 to 2026-03-13 22:20:00.000 (UTC)" in utc and "| start (UTC) |" in utc
