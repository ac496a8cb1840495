"""Exporting samples: the CSV and JSON lines read back by independent readers give the values in the parts, the
bytes are those Arrow's own writer gives, and the time text is Arrow's whatever the date."""

from __future__ import annotations

import csv
import io
import json
import subprocess
import sys
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
import pytest

from logger.review import window
from logger.review.export import export_samples, parse_when, run_start
from logger.review.sampletext import JSON_TIME, csv_time, json_time, stamp_text
from logger.review.window import Stretch
from logger.sim.simple import RIG_TOML
from logger.store import new_run, sample_schema
from logger.store.layout import parts_in
from logger.store.schema import UTC_TYPE

T0 = 1_800_000_000_000_000
EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
COLUMNS = ["utc", "out_v", "out_v_counts", "out_a", "out_a_counts"]


def _odd_run(root: Path) -> Path:
    """150 s at about 1 kHz in three parts, written by railtap's own writer: every time off the millisecond by a
    random number of microseconds, a gap from 100 s to 101.5 s, volts in converter steps (a few hundred distinct
    values a batch) beside amps that are all distinct, values whose shortest text is of every length (and a few
    odd ones) and counts of every width."""
    rng = np.random.default_rng(7)
    ticks = np.r_[np.arange(0, 100_000), np.arange(101_500, 150_000)]
    utc = T0 + ticks * 1000 + rng.integers(0, 1000, len(ticks))  # strictly increasing: steps of 1 to 1999 us
    volts = (np.rint(rng.normal(12.0, 0.5, len(utc)) / 0.0088623) * 0.0088623).astype(np.float32)  # ADC steps
    volts[:6] = [0.0, -0.0, 1e-7, -3.25, 65504.0, 3.4028235e38]
    amps = rng.uniform(0, 3, len(utc)).astype(np.float32)
    meta = {"rig": RIG_TOML, "channels_info": [{"name": "out_v", "unit": "V"}, {"name": "out_a", "unit": "A"}],
            "power_pairs": [{"rail": "out", "volts": "out_v", "amps": "out_a"}], "link": {"rate_hz": 1000},
            "device_header": "H fw=test ver=1 bits=12 vref_mv=3300 rate_hz=1000 ch=out_v,out_a why=boot"}
    schema = sample_schema(["out_v", "out_a"])
    writer = new_run(root, "export", schema, meta, part_seconds=60.0)
    for rows in np.array_split(np.arange(len(utc)), 6):
        writer.append(pa.record_batch([
            pa.array(utc[rows], pa.int64()).cast(UTC_TYPE), pa.array(utc[rows] - T0, pa.int64()),
            pa.array(rows, pa.int64()), pa.array(np.zeros(len(rows), np.int32)),
            pa.array(volts[rows]), pa.array(rng.integers(0, 65536, len(rows)).astype(np.uint16)),
            pa.array(amps[rows]), pa.array(rng.integers(0, 4096, len(rows)).astype(np.uint16)),
        ], schema=schema))
    writer.close("test data written")
    return writer.folder


def _us(when: datetime) -> int:
    """Microseconds since 1970 of an aware time."""
    return (when - EPOCH) // timedelta(microseconds=1)


def _parquet_rows(run: Path, start_us: int, end_us: int) -> pa.Table:
    """The stretch as pyarrow's Parquet reader gives it, part by part (a path apart from the export's)."""
    tables = [pq.read_table(part) for _, part in parts_in(run)]
    table = pa.concat_tables(tables)
    us = table.column("utc").cast(pa.int64())
    return table.filter(pc.and_(pc.greater_equal(us, start_us), pc.less_equal(us, end_us)))


def test_time_text_is_arrows_own_from_year_1_to_9999() -> None:
    """The second-by-second text with the microseconds written in equals Arrow's text of every value (what the
    export wrote before), and reads back as the same instant."""
    rng = np.random.default_rng(3)
    edges = [-62135596800_000000, -1_000_001, -1, 0, 1, 951_782_400_000_000, 253402300799_999999]  # 1 Jan 1, 29 Feb
    us = np.sort(np.r_[rng.integers(-62135596800_000000, 253402300799_999999, 20_000), edges])
    utc = pa.array(us, pa.int64()).cast(UTC_TYPE)
    assert csv_time(utc).cast(pa.string()).equals(pc.cast(utc, pa.string()))
    assert json_time(utc).cast(pa.string()).equals(pc.strftime(utc, format=JSON_TIME))
    # ISO 8601 extended format with "Z" for UTC (RFC 3339 section 5.6), read by Python's own parser
    for text, value in zip(json_time(utc).to_pylist()[::997], us[::997], strict=True):
        assert datetime.fromisoformat(text) == EPOCH + timedelta(microseconds=int(value))


def test_time_text_falls_back_to_arrow_where_the_seconds_do_not_fit() -> None:
    """A formatter whose whole seconds do not end in ``.000000Z``, a unit other than microseconds, an empty
    column: each is formatted by the formatter whole, so the text is still its own; a slice of a column and a
    formatter of large strings take the fast way and give the same text."""
    utc = pa.array([T0, T0 + 1, T0 + 1_500_000], pa.int64()).cast(UTC_TYPE)
    clock = lambda t: pc.strftime(t, format="%H:%M:%S")  # noqa: E731
    assert stamp_text(utc, clock).equals(clock(utc))
    millis = pa.array([T0 // 1000, T0 // 1000 + 1], pa.int64()).cast(pa.timestamp("ms", tz="UTC"))
    assert csv_time(millis).equals(pc.cast(millis, pa.string()))
    assert len(csv_time(utc.slice(0, 0))) == 0
    wide = lambda t: pc.cast(t, pa.large_string())  # noqa: E731
    assert stamp_text(utc.slice(1), wide).equals(wide(utc.slice(1)))  # a slice, and text with 64-bit offsets


@pytest.mark.parametrize("batch_rows", [7001, window.BATCH_ROWS])
def test_csv_reads_back_as_the_parts_values(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, batch_rows: int) -> None:
    """Read with Python's csv module and with pandas, the export gives the header, times and values the parts
    hold, for a stretch that starts and ends inside parts and batches; and the bytes are Arrow's own writer's."""
    monkeypatch.setattr(window, "BATCH_ROWS", batch_rows)
    run = _odd_run(tmp_path)
    first = run_start(run)
    out = tmp_path / "out.csv"
    rows = export_samples(run, out, start=parse_when("30.5s", first), end=parse_when("130.25s", first), counts=True)
    want = _parquet_rows(run, _us(parse_when("30.5s", first)), _us(parse_when("130.25s", first))).select(COLUMNS)
    assert rows == want.num_rows > 90_000
    # RFC 4180 section 2: one record per line, fields split on commas, the header a record of names
    with open(out, newline="") as handle:
        records = list(csv.reader(handle))
    assert records[0] == COLUMNS and len(records) == rows + 1
    body = list(zip(*records[1:], strict=True))
    for name in ("out_v", "out_a"):  # shortest text that reads back as the same float32 (common practice, no source)
        assert np.array_equal(np.array(body[COLUMNS.index(name)], np.float64).astype(np.float32),
                              want.column(name).to_numpy())
    for name in ("out_v_counts", "out_a_counts"):
        assert np.array_equal(np.array(body[COLUMNS.index(name)], np.int64), want.column(name).to_numpy())
    table = pd.read_csv(out)
    assert list(table.columns) == COLUMNS
    got_us = pd.to_datetime(table["utc"], utc=True).dt.as_unit("us").astype("int64").to_numpy()
    assert np.array_equal(got_us, want.column("utc").cast(pa.int64()).to_numpy())
    assert np.array_equal(table["out_v"].to_numpy().astype(np.float32), want.column("out_v").to_numpy())
    assert out.read_bytes() == _arrow_csv(want)


def _arrow_csv(table: pa.Table) -> bytes:
    """The table as Arrow's CSV writer writes it with its defaults (how the export wrote every row before)."""
    sink = io.BytesIO()
    pacsv.write_csv(table, sink)
    return sink.getvalue()


def test_json_lines_read_back_as_the_parts_values(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Each line is one JSON object (RFC 8259) with the time as ISO 8601 text and the values as numbers that
    read back as the parts' float32; the lines are those a Python string per row made before."""
    monkeypatch.setattr(window, "BATCH_ROWS", 5003)
    run = _odd_run(tmp_path)
    first = run_start(run)
    out = tmp_path / "out.jsonl"
    rows = export_samples(run, out, channels=["out_a", "out_v"], end=parse_when("61s", first))
    want = _parquet_rows(run, 0, _us(parse_when("61s", first)))
    text = out.read_text()
    objects = [json.loads(line) for line in text.splitlines()]
    assert rows == len(objects) == want.num_rows and text.endswith("\n")
    assert list(objects[0]) == ["utc", "out_a", "out_v"]
    got_us = [_us(datetime.fromisoformat(o["utc"])) for o in objects]
    assert got_us == want.column("utc").cast(pa.int64()).to_pylist()
    for name in ("out_a", "out_v"):  # shortest text that reads back as the same float32 (common practice, no source)
        assert np.array_equal(np.array([o[name] for o in objects], np.float64).astype(np.float32),
                              want.column(name).to_numpy())
    assert text == _per_row_lines(want.select(["utc", "out_a", "out_v"]))


def _per_row_lines(table: pa.Table) -> str:
    """JSON lines built a Python string per row, as the export built them before."""
    utc = pc.strftime(table.column("utc"), format=JSON_TIME).to_pylist()
    names = table.column_names[1:]
    cols = [pc.cast(table.column(n), pa.string()).to_pylist() for n in names]
    return "".join('{"utc": "' + t + '", ' + ", ".join(f'"{n}": {v}' for n, v in zip(names, row, strict=True))
                   + "}\n" for t, *row in zip(utc, *cols, strict=True))


def test_a_stretch_reads_only_the_row_groups_that_reach_into_it(tmp_path: Path) -> None:
    """The plan keeps the parts whose row groups' ``utc`` range meets the stretch; samples at its ends are in
    it; a stretch in the gap has no rows and leaves an empty file, as before."""
    run = _odd_run(tmp_path)
    parts = [part for _, part in parts_in(run)]
    first = run_start(run)
    middle = Stretch.of(parts, ["utc"], parse_when("65s", first), parse_when("70s", first))
    assert [part.name for part, _ in middle.plan] == [parts[1].name]
    assert sum(b.num_rows for b in middle.batches()) <= middle.rows == pq.read_metadata(parts[1]).num_rows
    assert Stretch.of(parts, ["utc"], parse_when("200s", first), None).plan == ()
    times = pq.read_table(parts[1], columns=["utc"]).column("utc").to_pylist()
    ends = tmp_path / "ends.csv"
    assert export_samples(run, ends, start=times[1000], end=times[2000]) == 1001  # both ends are inside
    gap = tmp_path / "gap.csv"
    assert export_samples(run, gap, start=parse_when("100.2s", first), end=parse_when("101.2s", first)) == 0
    assert gap.read_bytes() == b""


def test_export_loads_no_pandas(tmp_path: Path) -> None:
    """``railtap export`` writes CSV and JSON lines, a stretch of them too, without importing pandas (some 40 MB
    of a process whose own work needs about 100): the export neither reads through a dataset nor hands Python
    values to Arrow's converters."""
    run = _odd_run(tmp_path)
    script = f"""
import sys
from logger.cli import main
for out, more in (("all.csv", []), ("some.jsonl", ["--from", "10s", "--until", "20s", "--counts"])):
    assert main(["export", {str(run)!r}, {str(tmp_path)!r} + "/" + out, *more]) == 0
print(sorted(m for m in ("pandas", "scipy", "matplotlib") if m in sys.modules))
"""
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=300, check=True)
    assert out.stdout.strip() == "[]"
    first = run_start(run)
    want = _parquet_rows(run, _us(parse_when("10s", first)), _us(parse_when("20s", first)))
    assert (tmp_path / "some.jsonl").read_text().count("\n") == want.num_rows > 9_000
