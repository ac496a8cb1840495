"""The time base end to end: a scripted device (tests/devicestream.py) through the whole pipeline into a run
folder, compared with what really happened.

What a recording must get right whatever the link does: every rail dip is one event, timed on the device clock
to within one sample; UTC stamps strictly increase; each boot segment's rows and lost frames add up to its
sequence span; a silence, a restart, one inconsistent line or a step of the host's wall clock moves nothing
it should not. The first tests check the harness itself, so a failure further down is the pipeline's.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from devicestream import (
    IEC_DURATIONS_S,
    IEC_LEVELS_PCT,
    Burst,
    Device,
    Dip,
    Inconsistent,
    Link,
    Reboot,
    ScriptedSource,
    Silence,
    Stream,
    Truth,
    WallStep,
    crc16,
    data_line,
    deliver,
    header_line,
    line_arrivals_s,
    make_source,
    play,
)
from hypothesis import HealthCheck, Phase, example, given, settings
from hypothesis import strategies as st

from logger.ingest import Pipeline, Settings
from logger.sim.simple import simple_rig
from logger.wire import Decoder, DeviceHeader, FrameBatch

RAIL_KINDS = ("brownout", "dropout")
CLOCK_WRAP_US = 1 << 32  # a 32-bit microsecond counter wraps every 71.58 min (PROTOCOL.md section 3; arithmetic)


# -- running the pipeline and reading the run back -----------------------------------------------------------


@dataclass
class Run:
    """One recording, read back."""

    pipeline: Pipeline
    folder: Path
    samples: pd.DataFrame
    events: pd.DataFrame
    event_schema: pa.Schema | None
    """The event table's own column types (pandas reads an int64 column with nulls as float64)."""
    meta: dict[str, Any]


def record(source: ScriptedSource, root: Path, **settings: Any) -> Run:
    """Run the pipeline over a scripted source until the source ends, and read back the one run it made. The
    scripted source returns at once; the pipeline batches reads by their own arrival times, as on a port."""
    pipeline = Pipeline(source, simple_rig(), Settings(record_root=root, **settings))
    pipeline.start()
    assert pipeline.wait(60), "pipeline did not finish"
    assert pipeline.error is None, pipeline.error
    (folder,) = [p for p in root.iterdir() if p.is_dir()]
    samples = pd.read_parquet(folder)
    events_file = folder / "_events.parquet"
    events = pd.read_parquet(events_file) if events_file.exists() else pd.DataFrame(columns=["kind"])
    schema = pq.read_schema(events_file) if events_file.exists() else None
    meta = json.loads((folder / "_run.json").read_text())
    return Run(pipeline, folder, samples, events, schema, meta)


def scripted_run(device: Device, link: Link, root: Path) -> tuple[Run, Stream]:
    source, stream = make_source(device, link)
    return record(source, root), stream


def utc_us(column: pd.Series) -> np.ndarray:
    """A UTC timestamp column as integer microseconds since the epoch."""
    return column.dt.tz_convert(None).to_numpy().astype("datetime64[us]").astype(np.int64)


def tolerance_s(truth: Truth) -> float:
    """One sample period: a level crossing shows at the first sample past it, so each edge of an event is up to
    one period late (IEC 61000-4-30 5.4.2 times a dip from the first sample past the threshold, from memory);
    plus the firmware's timestamp jitter on both edges and a microsecond of rounding."""
    return truth.period_s + 2 * truth.jitter_us * 1e-6 + 1e-6


# -- checks shared by the tests --------------------------------------------------------------------------------


def segments(samples: pd.DataFrame, truth: Truth) -> np.ndarray:
    """Boot segment of each row: the ``segment`` column (int32, 0 first, +1 at each device restart)."""
    if "segment" not in samples.columns:
        assert truth.segments == 1, "the sample table has no `segment` column to tell boot segments apart"
        return np.zeros(len(samples), dtype=np.int32)
    assert samples["segment"].dtype == np.int32, f"segment is {samples['segment'].dtype}, int32 expected"
    seg = samples["segment"].to_numpy()
    assert seg[0] == 0 and (np.diff(seg) >= 0).all() and (np.diff(seg) <= 1).all(), "segments must count up by one"
    assert int(seg[-1]) + 1 == truth.segments, f"{int(seg[-1]) + 1} boot segments recorded, {truth.segments} booted"
    return seg


def check_counts(samples: pd.DataFrame, truth: Truth) -> None:
    """Per boot segment: every intact consistent line is one row, seq strictly increases, and rows plus lost
    frames (seq steps less one) make the sequence span."""
    seg = segments(samples, truth)
    seq = samples["seq"].to_numpy()
    for k in range(truth.segments):
        s = seq[seg == k]
        steps = np.diff(s)
        assert (steps > 0).all(), f"segment {k}: seq repeats or goes back"
        lost = int((steps - 1).sum())
        assert len(s) == truth.rows[k], f"segment {k}: {len(s)} rows, {truth.rows[k]} lines should be recorded"
        assert len(s) + lost == truth.spans[k], (
            f"segment {k}: {len(s)} rows + {lost} lost = {len(s) + lost}, but the sequence spans {truth.spans[k]}"
        )


def check_stamps(samples: pd.DataFrame, link: Link) -> None:
    """UTC strictly increases (no two samples share a stamp) and lies near the host's UTC, not in 1970."""
    utc = utc_us(samples["utc"])
    steps = np.diff(utc)
    assert (steps > 0).all(), f"{int((steps <= 0).sum())} stamps repeat or go back (smallest step {steps.min()} us)"
    # The host's UTC at the first sample is known to the second; a day is room for any fit (common practice,
    # no source): what fails here is an epoch-based stamp, not a slightly late one.
    assert abs(utc[0] / 1e6 - link.utc0_s) < 86_400, f"first stamp {samples['utc'].iloc[0]} is nowhere near the run"


def check_device_time(samples: pd.DataFrame, truth: Truth) -> None:
    """Within a boot segment the device clock steps as the sequence does: one period per frame, up to jitter
    (no 71.6-minute jump from a clock misread as wrapped)."""
    seg = segments(samples, truth)
    seq, dev = samples["seq"].to_numpy(), samples["device_us"].to_numpy()
    for k in range(truth.segments):
        inside = seg == k
        off = np.diff(dev[inside]) - np.diff(seq[inside]) * truth.period_us
        worst = int(np.abs(off).max()) if len(off) else 0
        assert worst <= 2 * truth.jitter_us, f"segment {k}: device_us departs from seq x period by {worst} us"


def rail_events(run: Run) -> pd.DataFrame:
    events = run.events
    found = events[events["kind"].isin(RAIL_KINDS)]
    by = "device_start_us" if "device_start_us" in events.columns else "start"
    return found.sort_values(by).reset_index(drop=True)


def check_rail_events(run: Run, truth: Truth) -> None:
    """Each scripted dip is one event of its kind, whose duration and start (on the device clock, from the
    first sample of its boot segment) match the truth within one sample period."""
    found = rail_events(run)
    expected = truth.events
    assert len(found) == len(expected), (
        f"{len(found)} rail events ({', '.join(found['kind'])}) for {len(expected)} scripted dips "
        f"({', '.join(e.kind for e in expected)})"
    )
    assert list(found["kind"]) == [e.kind for e in expected]
    tol = tolerance_s(truth)
    for (_, row), e in zip(found.iterrows(), expected, strict=True):
        assert abs(row["duration_s"] - e.duration_s) <= tol, (
            f"{e.kind} to {e.level_pct:g} % for {e.duration_s:.6f} s recorded as {row['duration_s']:.6f} s"
        )
    for column in ("device_start_us", "device_end_us"):
        assert run.event_schema is not None and column in run.event_schema.names, f"the events table has no {column}"
        kind = run.event_schema.field(column).type
        assert kind == pa.int64(), f"{column} is {kind}, int64 expected"
        assert found[column].notna().all(), f"a rail event has no {column}"
    seg = segments(run.samples, truth)
    dev = run.samples["device_us"].to_numpy()
    for (_, row), e in zip(found.iterrows(), expected, strict=True):
        first_us = int(dev[np.flatnonzero(seg == e.segment)[0]])
        start_s = (int(row["device_start_us"]) - first_us) / 1e6
        assert abs(start_s - e.start_s) <= tol, (
            f"{e.kind} at {e.start_s:.6f} s into segment {e.segment} recorded at {start_s:.6f} s"
        )
        span_s = (int(row["device_end_us"]) - int(row["device_start_us"])) / 1e6
        assert abs(span_s - e.duration_s) <= tol, f"device_end_us - device_start_us = {span_s:.6f} s"


def dips_at(starts: list[float], durations: list[float], levels: list[float]) -> tuple[Dip, ...]:
    return tuple(Dip(a, d, lv) for a, d, lv in zip(starts, durations, levels, strict=True))


# -- the harness itself ----------------------------------------------------------------------------------------


def test_harness_crc_is_the_protocol_check_value() -> None:
    # CRC-16/IBM-3740 check value of "123456789" (PROTOCOL.md section 2, RevEng CRC catalogue).
    assert crc16(b"123456789") == 0x29B1


def test_harness_encodes_the_protocol_examples() -> None:
    """Lines of PROTOCOL.md section 6, typed in from the document, come out of the harness byte for byte."""
    ch = ("out_v", "out_a")
    assert header_line(ch, 12, 3300, 1000, "boot") == (  # PROTOCOL.md 6.1
        b"H fw=railtap-fw ver=0.3 bits=12 vref_mv=3300 rate_hz=1000 ch=out_v,out_a why=boot*BEFC\n")
    assert header_line(ch, 12, 3300, 1000, "ask").endswith(b"why=ask*50BB\n")  # PROTOCOL.md 6.5
    assert data_line(0x0100, 0x0012D450, [0x0A3C, 0x01F4]) == b"D 0100 0012D450 0A3C 01F4*B3B3\n"  # 6.3
    assert data_line(0xFFFE, 0x2F3A1B40, [0x0A3C, 0x01F4]) == b"D FFFE 2F3A1B40 0A3C 01F4*5161\n"  # 6.11
    assert data_line(0x8A40, 0x1000001F4, [0x0A3C, 0x01F5]) == b"D 8A40 000001F4 0A3C 01F5*26DA\n"  # 6.12


def _busy_device(cut_line: bool = False) -> Device:
    """Every scripted thing at once: wraps of both counters, a silence, ticks, an inconsistent line, restarts."""
    return Device(
        rate_hz=1000.0, duration_s=80.0, drift_ppm=40.0, first_seq=65_000, first_clock_us=CLOCK_WRAP_US - 700_000,
        jitter_us=5, tick_s=1.0, noise_lsb=1.0,
        script=(Dip(0.5003, 0.01, 40.0), Silence(1.0, 70.0), Inconsistent(71.5),
                Reboot(72.0, 0.3, header=False, cut_line=cut_line), Dip(73.2, 0.1, 0.0),
                Reboot(74.5, 0.2, header=True), Dip(75.1, 0.03, 70.0)),
    )


def test_harness_stream_decodes_with_no_rejects() -> None:
    """The project's decoder accepts every line the harness sends and reads back the counters it sent."""
    stream = play(_busy_device())
    truth, frames = stream.truth, stream.truth.frames
    decoder = Decoder()
    items = decoder.feed(stream.data)
    c = decoder.counters
    assert c.rejected == 0 and c.partial == 0
    assert c.frames == truth.delivered == int(frames.delivered.sum())
    assert c.headers == truth.headers
    batches = [i for i in items if isinstance(i, FrameBatch)]
    assert (np.concatenate([b.seq for b in batches]) == frames.seq[frames.delivered]).all()
    assert (np.concatenate([b.device_us for b in batches]) == frames.clock_us[frames.delivered]).all()
    assert (np.concatenate([b.counts for b in batches]) == frames.counts[frames.delivered]).all()
    boots = [i.reason for i in items if isinstance(i, DeviceHeader) and i.reason == "boot"]
    assert len(boots) == 2  # the first boot and the second restart; the first restart sent none
    assert truth.segments == 3 and truth.inconsistent == 1 and truth.silences == (69_999,)
    assert [e.segment for e in truth.events] == [0, 1, 2] and all(e.samples >= 1 for e in truth.events)


def test_harness_cut_line_is_one_malformed_line() -> None:
    """The fragment a restart cuts off is one malformed line, as PROTOCOL.md 6.13 says; nothing else is lost."""
    stream = play(_busy_device(cut_line=True))
    decoder = Decoder()
    decoder.feed(stream.data)
    assert decoder.counters.malformed == 1 and decoder.counters.rejected == 1
    assert decoder.counters.frames == stream.truth.delivered


def test_harness_arrivals_hold_every_byte_once_and_never_early() -> None:
    """Reads, whatever their splits, backlog and bursts, hold the stream in order; none returns a byte before
    it reached the port, and the steady clock never goes back while the wall offset steps."""
    stream = play(Device(duration_s=6.0, script=(Dip(1.0, 0.1, 40.0),)))
    link = Link(read_s=0.02, jitter_s=0.01, backlog_s=2.0, bursts=(Burst(3.0, 0.5, 8.0),),
                wall_steps=(WallStep(4.0, -0.5),), seed=3)
    arrivals = deliver(stream, link)
    assert b"".join(a.data for a in arrivals) == stream.data
    host = np.array([a.host_time for a in arrivals])
    assert (np.diff(host) >= 0).all()
    ready = line_arrivals_s(stream, link) + link.host_t0_s
    ends = np.cumsum([len(line) for line in stream.lines])
    got = np.cumsum([len(a.data) for a in arrivals])
    whole = np.searchsorted(got, ends, side="left")  # the read that completes each line
    assert (host[whole] >= ready - 1e-9).all()
    first_read = int(np.flatnonzero(host == host[0])[-1])  # a read's bytes may come as two chunks
    first_lines = np.searchsorted(ends, got[first_read], side="right")
    assert stream.sent_s[first_lines - 1] >= 1.99  # the backlog: two seconds of lines in the first read
    offsets = {round(a.wall_offset - (link.utc0_s - link.host_t0_s), 6) for a in arrivals}
    assert offsets == {0.0, -0.5}
    assert any(b"\n" in a.data and not a.data.endswith(b"\n") for a in arrivals)  # reads cut lines


def test_harness_source_answers_a_header_request_between_lines() -> None:
    """A ``?H`` is answered after the lines already sent, never inside one; the chunks keep their times."""
    device = Device(duration_s=1.0, boot_header=False)
    source, stream = make_source(device, Link(seed=2))
    source.open()
    source.write(b"?H*C168\n")
    chunks = []
    while (chunk := source.read()) is not None:
        chunks.append(chunk)
    assert source.read() is None and source.answered == 1
    assert [(c.host_time, c.wall_offset) for c in chunks] == [(a.host_time, a.wall_offset) for a in source.arrivals]
    decoder = Decoder()
    items = [item for c in chunks for item in decoder.feed(c.data)]
    assert decoder.counters.rejected == 0 and decoder.counters.frames == stream.truth.delivered
    assert [i.reason for i in items if isinstance(i, DeviceHeader)] == ["ask"]


def test_harness_truth_of_a_long_silence() -> None:
    """100 s of silence at 1 kHz: the neighbours are 100 000 sequence steps apart, 99 999 sets never sent."""
    stream = play(Device(duration_s=102.0, first_seq=40_000, script=(Silence(1.0, 100.0),)))
    truth = stream.truth
    assert truth.silences == (99_999,) and truth.lost == (99_999,)
    assert truth.rows[0] + 99_999 == truth.spans[0]
    f = truth.frames
    sent = np.flatnonzero(f.delivered)
    jump = int(np.flatnonzero(np.diff(sent) > 1)[0])
    before, after = sent[jump], sent[jump + 1]
    assert after - before == 100_000 and f.device_us[after] - f.device_us[before] == 100_000_000
    assert f.seq[after] < f.seq[before]  # the 16-bit sequence wrapped during the silence


def test_harness_plain_run_records_the_scripted_rail(tmp_path: Path) -> None:
    """No fault at all: every line one row, the counts as sent, calibrated to the rail and current intended."""
    run, stream = scripted_run(Device(duration_s=2.0, first_seq=65_500), Link(seed=1), tmp_path)
    truth = stream.truth
    assert len(run.samples) == truth.delivered
    assert (run.samples[["out_v_counts", "out_a_counts"]].to_numpy() == truth.frames.counts).all()
    # Calibrated from counts with the rig's scaling: LSB = Vref / 2^N (Analog Devices MT-001), times the
    # divider of 11, or over shunt 0.01 ohm x gain 50; the rig file and the harness must agree.
    np.testing.assert_allclose(run.samples["out_v"], truth.volts_v, rtol=1e-6)
    np.testing.assert_allclose(run.samples["out_a"], truth.amps_a, rtol=1e-6)
    assert abs(truth.volts_v - 12.0) < 11 * 3.3 / 4096 and abs(truth.amps_a - 1.0) < 3.3 / 4096 / 0.5
    assert run.events["kind"].isin(RAIL_KINDS).sum() == 0
    assert (np.diff(run.samples["seq"]) == 1).all()


# -- the behaviour the time base must deliver ------------------------------------------------------------------


@pytest.mark.parametrize("level_pct", IEC_LEVELS_PCT)
def test_every_iec_dip_is_one_event_timed_to_a_sample(tmp_path: Path, level_pct: float) -> None:
    """Each dip of the IEC 61000-4-29 table at one level (its seven durations, 1 ms to 1 s) is one event whose
    duration and start are right to a sample, across wraps of both counters, with drift and jitter."""
    starts, t = [], 0.5003
    for duration in IEC_DURATIONS_S:
        starts.append(t)
        t += duration + 0.4
    device = Device(
        rate_hz=1000.0, duration_s=t + 0.3, drift_ppm=30.0, jitter_us=3, first_seq=63_000,
        first_clock_us=CLOCK_WRAP_US - 1_500_000,
        script=dips_at(starts, list(IEC_DURATIONS_S), [level_pct] * len(starts)),
    )
    run, stream = scripted_run(device, Link(jitter_s=0.002, seed=11), tmp_path)
    # 0 % is an interruption (a dropout), 40 % and 70 % are dips (brownouts) (IEC 61000-4-29, test levels, from
    # memory).
    assert all(e.kind == ("dropout" if level_pct == 0 else "brownout") for e in stream.truth.events)
    check_rail_events(run, stream.truth)


def test_dips_keep_their_timing_through_a_backlog_and_a_burst(tmp_path: Path) -> None:
    """Ten seconds of data in the first read and a buffer emptied at 20x real time move no event."""
    device = Device(
        rate_hz=500.0, duration_s=13.0, drift_ppm=-60.0, jitter_us=10, first_seq=1_000,
        script=dips_at([2.0011, 6.0007, 10.9013], [0.1, 0.01, 0.3], [70.0, 0.0, 40.0]),
    )
    link = Link(read_s=0.02, jitter_s=0.01, backlog_s=10.0, bursts=(Burst(10.5, 1.0, 20.0),), seed=5)
    run, stream = scripted_run(device, link, tmp_path)
    check_rail_events(run, stream.truth)


@pytest.mark.parametrize(
    "link",
    [
        Link(seed=1),
        Link(read_s=0.05, jitter_s=0.03, seed=2),
        Link(backlog_s=10.0, seed=3),
        Link(read_s=0.003, bursts=(Burst(2.0, 2.0, 5.0), Burst(7.0, 0.4, 50.0)), seed=4),
        Link(bursts=(Burst(0.0, 2.0, 5.0),), jitter_s=0.005, seed=5),
    ],
    ids=["plain", "jittery-reads", "backlog-10s", "bursts", "burst-at-start"],
)
def test_stamps_strictly_increase_and_are_not_in_1970(tmp_path: Path, link: Link) -> None:
    """No two samples share a UTC stamp, however the reads came (the first two seconds may arrive late and all
    at once, at five times real time, before arrivals settle); the stamps are the host's UTC."""
    device = Device(rate_hz=1000.0, duration_s=12.0, drift_ppm=80.0, jitter_us=20, seed=7)
    run, _ = scripted_run(device, link, tmp_path)
    check_stamps(run.samples, link)


def test_rows_and_lost_frames_add_up_to_the_span(tmp_path: Path) -> None:
    """Two silences (0.5 s and 3 s): rows plus lost frames make the sequence span, each intact line one row."""
    device = Device(
        rate_hz=1000.0, duration_s=6.0, first_seq=64_000, jitter_us=5,
        script=(Silence(1.0, 0.5), Silence(2.2, 3.0)),
    )
    run, stream = scripted_run(device, Link(read_s=0.02, jitter_s=0.01, seed=8), tmp_path)
    assert stream.truth.lost == (499 + 2_999,)
    check_counts(run.samples, stream.truth)


def test_the_run_counts_the_link_from_the_first_byte(tmp_path: Path) -> None:
    """A first read that holds the header, a garbled line and 10,000 data lines: the run's link counters include
    every one of them (frames = rows, the garbled line rejected), so rows + lost = the sequence span. (A garbled
    first line would be a fragment of a line cut by opening the port, not an error.)"""
    from devicestream import Arrival

    device = Device(rate_hz=1000.0, duration_s=10.0)
    stream = play(device)
    data = b"".join(stream.lines[:2]) + b"D 00 garbled by a loose cable\n" + b"".join(stream.lines[2:])
    run = record(ScriptedSource([Arrival(5000.0 + 10.0, 1_800_000_000.0 - 5000.0, data)], answer=None), tmp_path)
    link = run.meta["link"]
    assert len(run.samples) == 10_000 == link["frames"]
    assert link["rejected"] == 1 and link["lost"] == 0


def test_a_rate_change_moves_the_sliding_mean_with_it(tmp_path: Path) -> None:
    """10 kHz, then a header that says 1 kHz from here, then a 3 ms drop to 0 V: a 3 ms dropout (the sliding
    mean is 1 ms of device time at any rate; one frozen at 10 samples made it a 12 ms brownout)."""
    from devicestream import Arrival, RailTap, data_line, header_line

    tap = RailTap()
    volts, amps = int(tap.volts_counts(12.0)), int(tap.amps_counts(1.0))
    lines, seq, clock = [b"\n", header_line(tap.channels, tap.bits, tap.vref_mv, 10_000.0, "boot")], 0, 5_000_000
    for _ in range(10_000):  # 1 s at 10 kHz
        lines.append(data_line(seq, clock, (volts, amps)))
        seq, clock = seq + 1, clock + 100
    lines.append(header_line(tap.channels, tap.bits, tap.vref_mv, 1000.0, "rate"))
    clock += 900  # the first period at the new rate
    for k in range(2000):  # 2 s at 1 kHz, the rail at 0 V for 3 samples in the middle
        lines.append(data_line(seq, clock, (0 if 1000 <= k < 1003 else volts, amps)))
        seq, clock = seq + 1, clock + 1000
    arrivals = [Arrival(5000.0 + 0.1 * (i + 1), 1_800_000_000.0 - 5000.0, b"".join(lines[i * 400 : (i + 1) * 400]))
                for i in range((len(lines) + 399) // 400)]
    run = record(ScriptedSource(arrivals, answer=None), tmp_path)
    (dip,) = run.events[run.events.kind.isin(RAIL_KINDS)].itertuples()
    assert dip.kind == "dropout" and dip.duration_s == pytest.approx(0.003, abs=1e-6)
    assert run.meta["link"]["lost"] == 0 and "device_reset" not in set(run.events.kind)


@pytest.mark.parametrize("error_us", [8168, -8168])
def test_a_single_inconsistent_line_is_dropped_and_moves_nothing(tmp_path: Path, error_us: int) -> None:
    """One line with a good CRC and a clock 8168 us off while its sequence steps by one: dropped, counted as
    `inconsistent`, and the stamps after it stay where they were (no jump of 71.6 min)."""
    device = Device(
        rate_hz=1000.0, duration_s=4.0, jitter_us=4, first_clock_us=123_456_789,
        script=(Dip(1.0003, 0.1, 40.0), Inconsistent(2.0004, error_us), Dip(3.0002, 0.03, 0.0)),
    )
    link = Link(seed=9)
    run, stream = scripted_run(device, link, tmp_path)
    truth, f = stream.truth, stream.truth.frames
    bad = int(np.flatnonzero(f.inconsistent)[0])
    seq = run.samples["seq"].to_numpy()
    assert bad not in set((seq - seq[0]).tolist()), "the inconsistent line became a sample"
    check_counts(run.samples, truth)
    check_device_time(run.samples, truth)
    utc_steps = np.diff(utc_us(run.samples["utc"]))
    assert utc_steps.max() < 100_000, f"a stamp jumps by {utc_steps.max() / 1e6:.3f} s"
    check_stamps(run.samples, link)
    assert run.meta["link"].get("inconsistent") == 1, f"link counters: {run.meta['link']}"
    check_rail_events(run, truth)


def test_a_100_s_silence_at_1_khz_is_99999_lost_frames(tmp_path: Path) -> None:
    """The device says nothing for 100 s but keeps counting; its sequence wraps meanwhile. The gap is 99 999
    lost frames and 100 s of device time, and a dip after it is timed from the start of the run."""
    device = Device(
        rate_hz=1000.0, duration_s=102.5, first_seq=30_000, jitter_us=2,
        script=(Dip(0.5002, 0.1, 70.0), Silence(1.0, 100.0), Dip(101.5004, 0.3, 40.0)),
    )
    link = Link(seed=10)
    run, stream = scripted_run(device, link, tmp_path)
    truth = stream.truth
    seq = run.samples["seq"].to_numpy()
    lost = int((np.diff(seq) - 1).sum())
    assert lost == 99_999, f"{lost} frames counted lost"  # 100 s x 1000 Hz, less the line after it (arithmetic)
    assert run.meta["link"]["lost"] == 99_999
    check_counts(run.samples, truth)
    check_device_time(run.samples, truth)
    check_stamps(run.samples, link)
    check_rail_events(run, truth)


def test_a_silence_read_from_a_backlog_is_not_a_restart(tmp_path: Path) -> None:
    """The port opens 9.5 s after the first line, while the device has been silent since 1.5 s: the lines
    before the silence all arrive in the first read, so arrivals show less time across the silence than the
    device clock does. The counters agree with each other (1000 steps, 10 s), so it is a silence, not a
    restart: 999 lost frames, one boot segment, 10 s of device time."""
    device = Device(
        rate_hz=100.0, duration_s=13.0, first_seq=6_475, jitter_us=20,
        script=(Dip(1.0007, 0.1, 70.0), Silence(1.5003, 10.0), Dip(12.0004, 0.3, 0.0)),
    )
    link = Link(read_s=0.1, backlog_s=9.5, seed=14)
    run, stream = scripted_run(device, link, tmp_path)
    truth = stream.truth
    assert truth.lost == (999,)  # 10 s x 100 Hz, less the line after it (arithmetic)
    assert "device_reset" not in set(run.events["kind"]), "the silence was taken for a restart"
    check_counts(run.samples, truth)
    check_device_time(run.samples, truth)
    check_stamps(run.samples, link)
    check_rail_events(run, truth)


@pytest.mark.parametrize("header", [False, True], ids=["no-header", "boot-header"])
def test_a_reboot_starts_a_new_segment_without_a_jump(tmp_path: Path, header: bool) -> None:
    """The device restarts for 0.3 s (sequence from 0, clock from 50 ms): a device_reset event, a new boot
    segment, device time across it about 0.3 s (not thousands of seconds), each segment's counts and dips right."""
    device = Device(
        rate_hz=1000.0, duration_s=4.5, first_seq=50_000, first_clock_us=3_000_000_000, jitter_us=3,
        script=(Dip(1.0004, 0.1, 40.0), Reboot(2.0, 0.3, header=header), Dip(3.5003, 0.3, 0.0)),
    )
    link = Link(read_s=0.01, jitter_s=0.003, seed=12)
    run, stream = scripted_run(device, link, tmp_path)
    truth = stream.truth
    assert "device_reset" in set(run.events["kind"]), f"events: {sorted(set(run.events['kind']))}"
    dev = run.samples["device_us"].to_numpy()
    steps = np.diff(dev)
    assert steps.min() > 0, f"device time goes back by {-steps.min() / 1e6:.1f} s"
    assert steps.max() < 1_000_000_000, f"device time jumps by {steps.max() / 1e6:.1f} s"
    seg = segments(run.samples, truth)
    boundary = int(np.flatnonzero(np.diff(seg))[0])
    gap_s = (dev[boundary + 1] - dev[boundary]) / 1e6
    # Nothing on the device bridges a restart; the host's steady clock does, to about a read interval plus the
    # arrival jitter: 0.1 s is ample (common practice, no source).
    assert abs(gap_s - truth.reboot_gaps_s[0]) < 0.1, f"device time across the restart: {gap_s:.3f} s"
    check_counts(run.samples, truth)
    check_stamps(run.samples, link)
    check_rail_events(run, truth)


@pytest.mark.parametrize("step_s", [-0.5, 0.5])
def test_a_wall_clock_step_changes_no_duration(tmp_path: Path, step_s: float) -> None:
    """The host's wall clock is stepped by half a second in the middle of a dip: a clock_step event, the same
    durations, stamps still strictly increasing, the same charge."""
    device = Device(
        rate_hz=1000.0, duration_s=5.0, drift_ppm=20.0, jitter_us=2,
        script=(Dip(1.0002, 0.3, 70.0), Dip(2.4006, 1.0, 40.0), Dip(4.2003, 0.1, 0.0)),
    )
    link = Link(wall_steps=(WallStep(2.9, step_s),), jitter_s=0.002, seed=13)
    run, stream = scripted_run(device, link, tmp_path)
    truth = stream.truth
    check_stamps(run.samples, link)
    check_rail_events(run, truth)
    assert "clock_step" in set(run.events["kind"]), f"events: {sorted(set(run.events['kind']))}"
    # A constant current integrates to I x time exactly under the trapezoid rule (common practice, no source);
    # allow one sample's worth and the crystal's drift over the run.
    dev = run.samples["device_us"].to_numpy()
    expected_as = truth.amps_a * (dev[-1] - dev[0]) / 1e6
    charge_as = run.pipeline.snapshot().charge_ah[0] * 3600.0  # what the screen shows for out_v/out_a
    allowed = truth.amps_a * (truth.period_s + abs(truth.drift_ppm) * 1e-6 * device.duration_s)
    assert abs(charge_as - expected_as) <= allowed, f"charge {charge_as:.6f} As, {expected_as:.6f} As expected"


# -- the same, over random links and scripts -------------------------------------------------------------------


@st.composite
def timelines(draw: st.DrawFn) -> tuple[Device, Link]:
    """A few seconds of a device with one or two IEC dips, maybe a silence of up to 200 s, maybe a restart
    with or without its header, maybe one inconsistent line, in random order; over a link with random reads,
    arrival jitter, a backlog of up to 10 s and maybe a step of the host's wall clock."""
    rate = draw(st.sampled_from([100.0, 250.0, 500.0, 1000.0]))
    period_s = 1.0 / rate
    # Crystal tolerance of tens of ppm (common practice, no source); jitter well under a period.
    drift = draw(st.floats(-100.0, 100.0))
    jitter_us = draw(st.integers(0, min(20, round(period_s * 1e6) // 10)))
    first_seq = draw(st.integers(0, 65_535))
    first_clock = draw(st.one_of(st.integers(0, CLOCK_WRAP_US - 1), st.integers(CLOCK_WRAP_US - 3_000_000,
                                                                                 CLOCK_WRAP_US - 1)))
    things = ["dip"] * draw(st.integers(1, 2))
    silence_s = draw(st.one_of(st.none(), st.floats(0.2, 200.0)))
    things += ["silence"] if silence_s is not None else []
    things += ["reboot"] if draw(st.booleans()) else []
    things += ["inconsistent"] if draw(st.booleans()) else []
    things = draw(st.permutations(things))
    durations = [d for d in IEC_DURATIONS_S if d >= 2 * period_s]  # a dip must hold a sample to be seen
    backlog_s = draw(st.one_of(st.just(0.0), st.floats(0.3, 10.0)))
    script: list[Any] = []
    t = draw(st.floats(0.3, max(1.5, backlog_s)))  # the first read may hold up to 10 s of lines
    for thing in things:
        at = t + draw(st.floats(0.0, period_s))  # edges anywhere between two samples
        if thing == "dip":
            duration = draw(st.sampled_from(durations))
            script.append(Dip(at, duration, draw(st.sampled_from(IEC_LEVELS_PCT))))
            t = at + duration
        elif thing == "silence":
            assert silence_s is not None
            script.append(Silence(at, silence_s))
            t = at + silence_s * 1.001
        elif thing == "reboot":
            off = draw(st.floats(0.05, 2.0))
            script.append(Reboot(at, off, header=draw(st.booleans()), cut_line=draw(st.booleans()),
                                 boot_clock_us=draw(st.integers(1_000, 200_000))))
            t = at + off
        else:
            error = draw(st.integers(max(2 * round(period_s * 1e6), 5_000), 500_000)) * draw(st.sampled_from([1, -1]))
            script.append(Inconsistent(at, error))
        t += draw(st.floats(0.15, 0.5))
    device = Device(rate_hz=rate, duration_s=t + draw(st.floats(0.2, 0.6)), drift_ppm=drift, jitter_us=jitter_us,
                    first_seq=first_seq, first_clock_us=first_clock, noise_lsb=draw(st.sampled_from([0.0, 1.0])),
                    script=tuple(script), seed=draw(st.integers(0, 1000)))
    step = st.builds(WallStep, st.floats(0.0, t), st.sampled_from([-0.5, 2.0]))  # NTP steps back, a user forward
    steps = draw(st.one_of(st.just(()), st.tuples(step)))
    link = Link(
        read_s=draw(st.sampled_from([0.001, 0.005, 0.02, 0.1])),
        jitter_s=draw(st.floats(0.0, 0.05)),
        backlog_s=backlog_s,
        split=draw(st.booleans()),
        wall_steps=steps,
        seed=draw(st.integers(0, 1000)),
    )
    return device, link


# Each example runs a whole pipeline, so there are few of them and no shrinking: a failure is reported as drawn.
@settings(max_examples=25, deadline=None, phases=(Phase.explicit, Phase.reuse, Phase.generate),
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(timelines())
@example(case=(  # found by the search: a 73 s silence (a sequence wrap) 0.5 s after a restart, at -69 ppm
    Device(rate_hz=1000.0, duration_s=78.59, drift_ppm=-69.0, first_seq=18622, first_clock_us=702, jitter_us=20,
           script=(Reboot(3.7221, 0.3574, header=True, boot_clock_us=1000, cut_line=True), Dip(4.2748, 0.1, 0.0),
                   Silence(4.5488, 72.995), Inconsistent(78.0192, -5323)), seed=90),
    Link(read_s=0.001, idle_s=0.1, latency_s=0.002, jitter_s=6.1e-05, backlog_s=6.224, seed=166)))
def test_any_link_and_script_keeps_the_timeline(tmp_path_factory: pytest.TempPathFactory,
                                               case: tuple[Device, Link]) -> None:
    """Whatever the reads, jitter and backlog, and whatever the script: every dip's duration and start within a
    sample, stamps strictly increasing, rows plus lost frames equal to the span in each boot segment."""
    device, link = case
    run, stream = scripted_run(device, link, tmp_path_factory.mktemp("timeline"))
    check_rail_events(run, stream.truth)
    check_stamps(run.samples, link)
    check_counts(run.samples, stream.truth)


def test_hostile_headers_and_lines_of_the_wrong_width_are_refused_and_the_run_goes_on(tmp_path: Path) -> None:
    """A header with a good CRC but rate_hz=1e308 is refused with its reason (it would have sized buffers from
    it); data lines narrower than the header's channels are counted and not recorded; the rest is recorded."""
    from devicestream import Arrival, RailTap

    tap = RailTap()
    volts, amps = int(tap.volts_counts(12.0)), int(tap.amps_counts(1.0))
    hostile = header_line(tap.channels, tap.bits, tap.vref_mv, 1e308, "boot")
    lines = [b"\n", header_line(tap.channels, tap.bits, tap.vref_mv, 1000.0, "boot"), hostile]
    lines += [data_line(k, 1_000 * k, (volts, amps)) for k in range(1000)]
    lines += [data_line(k, 1_000 * k, (volts,)) for k in range(1000, 1100)]  # one count each: the wrong width
    lines += [data_line(k, 1_000 * k, (volts, amps)) for k in range(1100, 2000)]
    arrivals = [Arrival(5000.0 + 0.1 * (i + 1), 1_800_000_000.0 - 5000.0, b"".join(lines[i * 100 : (i + 1) * 100]))
                for i in range((len(lines) + 99) // 100)]
    run = record(ScriptedSource(arrivals, answer=None), tmp_path)
    assert len(run.samples) == 1900 and run.pipeline.stream.wrong_width == 100
    assert run.pipeline.header.rate_hz == 1000.0 and run.pipeline.decoder.counters.malformed == 1
    assert run.meta["link"]["lost"] == 100  # the sequence says they were sent; none of them was recorded
    notes = run.meta["notes"]  # each refusal is said with its reason, in _run.json and in the final report
    assert any("rate_hz=1e+308" in n and "0.001 to 100000" in n for n in notes)
    assert any("100 data lines with 1 count(s)" in n for n in notes)


def test_a_stream_whose_only_header_is_refused_fails_naming_the_reason(tmp_path: Path) -> None:
    """A good CRC but bits=40: the header is refused, so no sample can be read; the run fails in one line that
    says why (not "never a header line")."""
    from devicestream import Arrival, RailTap

    tap = RailTap()
    lines = [b"\n", header_line(tap.channels, 40, tap.vref_mv, 1000.0, "boot")]
    lines += [data_line(k, 1_000 * k, (1363, 100)) for k in range(500)]
    source = ScriptedSource([Arrival(5000.1, 1_800_000_000.0 - 5000.0, b"".join(lines))], answer=None)
    pipeline = Pipeline(source, simple_rig(), Settings(record_root=tmp_path))
    pipeline.start()
    assert pipeline.wait(60), "pipeline did not finish"
    assert pipeline.error is not None and "bits=40: 1 to 16 expected" in pipeline.error
    assert "never a header" not in pipeline.error and pipeline.notes == {}
