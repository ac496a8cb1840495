"""Tests of the run store: layout, round trip, Parquet options, crash safety, recovery, errors and the lock."""

from __future__ import annotations

import errno
import json
import os
import random
import shutil
import signal
import subprocess
import sys
import time
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.dataset as ds
import pyarrow.parquet as pq
import pytest
from fakes import wait_until

import logger.store.journal as journal_module
import logger.store.seal as seal_module
from logger.store import (
    RunWriter,
    StoreError,
    channels_of,
    event_schema,
    find_unfinished,
    new_run,
    read_run_json,
    recover_run,
    run_folder_name,
    sample_schema,
)
from logger.store.files import RunLock, lock_is_free
from logger.store.journal import open_journal
from logger.store.schema import event_batch

T0_US = 1_796_161_080_000_000  # 2026-12-01 21:38:00 UTC
CHANNELS = ["out_v", "out_a"]
SCHEMA = sample_schema(CHANNELS)


def make_batch(start: int, rows: int, *, rate_hz: float = 1000.0, schema: pa.Schema = SCHEMA) -> pa.RecordBatch:
    """Rows ``start .. start+rows-1`` of a deterministic run: seq = row number, utc at ``rate_hz``."""
    seq = np.arange(start, start + rows, dtype=np.int64)
    device_us = (seq * (1e6 / rate_hz)).astype(np.int64)
    arrays: list[pa.Array] = [pa.array(T0_US + device_us, pa.timestamp("us", tz="UTC")), device_us, seq,
                              pa.array(np.zeros(rows, dtype=np.int32))]
    for k, _ in enumerate(channels_of(schema)):
        counts = ((2048 + 700 * k + 5 * np.sin(seq / 5000.0) + (seq * 7919 % 5)) % 4096).astype(np.uint16)
        arrays += [pa.array(counts.astype(np.float32) * np.float32(0.0075)), pa.array(counts)]
    return pa.RecordBatch.from_arrays(arrays, schema=schema)


class FakeClock:
    """A monotonic clock that moves only when told to."""

    def __init__(self) -> None:
        self.now = 100.0

    def __call__(self) -> float:
        return self.now


def write_run(folder: Path, total: int, batch_rows: int, **options: float) -> dict:
    writer = RunWriter(folder, SCHEMA, {"rig": {"name": "bench"}}, **options)
    for start in range(0, total, batch_rows):
        writer.append(make_batch(start, min(batch_rows, total - start)))
    return writer.close("test done")


def read_seq(folder: Path) -> np.ndarray:
    return pq.read_table(folder, columns=["seq"]).column("seq").to_numpy()


# ---------------------------------------------------------------- schema and names


def test_sample_schema_layout() -> None:
    schema = sample_schema(["out_v", "neg_v"])
    assert schema.names == ["utc", "device_us", "seq", "segment", "out_v", "out_v_counts", "neg_v", "neg_v_counts"]
    assert schema.field("utc").type == pa.timestamp("us", tz="UTC")
    assert schema.field("out_v").type == pa.float32()
    assert schema.field("out_v_counts").type == pa.uint16()
    assert channels_of(schema) == ["out_v", "neg_v"]


@pytest.mark.parametrize(
    ("channels", "words"),
    [
        (["9v"], "not valid"),
        (["out v"], "not valid"),
        (["class"], "not valid"),
        (["utc"], "column 'utc'"),
        (["seq"], "column 'seq'"),
        (["a", "a"], "twice"),
        (["a", "a_counts"], "column 'a_counts'"),
        ([], "at least one"),
        ("out_v", "sequence"),
    ],
)
def test_sample_schema_rejects_bad_names(channels: list[str], words: str) -> None:
    with pytest.raises(ValueError, match=words):
        sample_schema(channels)


def test_event_schema_and_rows() -> None:
    schema = event_schema()
    assert schema.names == ["kind", "channel", "start", "end", "duration_s", "value", "depth_pct", "count",
                            "rate_hz", "duty", "peak", "detail", "id", "episode", "device_start_us", "device_end_us"]
    assert not schema.field("kind").nullable and not schema.field("start").nullable
    assert all(schema.field(name).nullable for name in schema.names[3:])
    batch = event_batch({"kind": "brownout", "channel": "out_v", "start": datetime(2026, 12, 1, tzinfo=UTC)})
    assert batch.num_rows == 1 and batch.column("depth_pct").null_count == 1
    with pytest.raises(ValueError, match="unknown columns"):
        event_batch({"kind": "mark", "start": T0_US, "colour": "red"})
    with pytest.raises(ValueError, match="'start'"):
        event_batch({"kind": "mark"})


def test_run_folder_name() -> None:
    start = datetime(2026, 12, 1, 21, 58, 0, tzinfo=UTC)
    assert run_folder_name(start, "bench 30V") == "20261201T215800Z-bench-30V"
    assert run_folder_name(start, "  ../../etc/passwd ") == "20261201T215800Z-etc-passwd"
    assert run_folder_name(start, "") == "20261201T215800Z"
    with pytest.raises(ValueError, match="timezone"):
        run_folder_name(datetime(2026, 12, 1), "x")


# ---------------------------------------------------------------- round trip and Parquet options


def test_round_trip_across_part_boundaries(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    writer = RunWriter(folder, SCHEMA, {"rig": {"name": "bench"}, "sources": ["sim://"]}, part_seconds=1.0)
    expected = []
    for start in range(0, 3500, 300):  # 300-row batches straddle the 1000-row parts
        batch = make_batch(start, min(300, 3500 - start))
        expected.append(batch)
        writer.append(batch)
    writer.add_event({"kind": "mark", "start": T0_US + 5, "detail": "probe moved"})
    final = writer.close("user stop")

    assert sorted(p.name for p in folder.iterdir()) == [
        "_events.parquet",
        "_rollup-00000.parquet", "_rollup-00001.parquet", "_rollup-00002.parquet", "_rollup-00003.parquet",
        "_run.json", "_run.lock",
        "part-00000.parquet", "part-00001.parquet", "part-00002.parquet", "part-00003.parquet",
    ]  # fmt: skip
    want = pa.Table.from_batches(expected).to_pandas()
    got = pd.read_parquet(folder)  # a plain reader, no railtap: `_` files are skipped
    pd.testing.assert_frame_equal(got.reset_index(drop=True), want)
    table = ds.dataset(folder, format="parquet").to_table()
    assert table.num_rows == 3500 and table.schema.equals(SCHEMA)

    assert final == read_run_json(folder)
    assert final["status"] == "complete" and final["stop_reason"] == "user stop"
    assert final["rows"] == 3500 and final["events"] == 1
    assert [p["rows"] for p in final["parts"]] == [1000, 1000, 1000, 500]
    assert final["parts"][1]["first_utc"] == "2026-12-01T21:38:01.000000Z"
    assert final["last_sample_utc"] == "2026-12-01T21:38:03.499000Z"
    assert final["rig"] == {"name": "bench"} and final["columns"]["out_v_counts"] == "uint16"

    kv = pq.read_metadata(folder / "part-00001.parquet").metadata
    assert json.loads(kv[b"railtap.run"])["sources"] == ["sim://"]
    assert json.loads(kv[b"railtap.part"]) == {
        "index": 1, "rows": 1000,
        "first_utc": "2026-12-01T21:38:01.000000Z", "last_utc": "2026-12-01T21:38:01.999000Z",
    }  # fmt: skip
    events = pd.read_parquet(folder / "_events.parquet")
    assert events["detail"].tolist() == ["probe moved"]


def test_encodings_and_compression(tmp_path: Path) -> None:
    write_run(tmp_path / "run", 5000, 500)
    column_meta = pq.ParquetFile(tmp_path / "run" / "part-00000.parquet").metadata.row_group(0)
    by_name = {column_meta.column(i).path_in_schema: column_meta.column(i) for i in range(column_meta.num_columns)}
    for name in ("utc", "device_us", "seq"):
        assert "DELTA_BINARY_PACKED" in by_name[name].encodings
        assert "RLE_DICTIONARY" not in by_name[name].encodings
    for name in ("out_v", "out_v_counts", "out_a", "out_a_counts"):
        assert "RLE_DICTIONARY" in by_name[name].encodings
    assert {c.compression for c in by_name.values()} == {"ZSTD"}


def test_page_checksums_are_written(tmp_path: Path) -> None:
    write_run(tmp_path / "run", 2000, 500)
    path = tmp_path / "run" / "part-00000.parquet"
    seq = pq.ParquetFile(path).metadata.row_group(0).column(2)
    data = bytearray(path.read_bytes())
    end = seq.data_page_offset + seq.total_compressed_size
    data[end - 2] ^= 0xFF  # inside the last page's payload
    path.write_bytes(bytes(data))
    with pytest.raises(OSError, match=r"(?i)crc"):
        pq.ParquetFile(path, page_checksum_verification=True).read(columns=["seq"])


def test_small_batches_coalesce_into_bounded_row_groups(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    write_run(tmp_path / "big", 3000, 20, flush_seconds=0.0)
    assert pq.read_metadata(tmp_path / "big" / "part-00000.parquet").num_row_groups == 1
    monkeypatch.setattr(seal_module, "ROW_GROUP_ROWS", 2000)
    write_run(tmp_path / "small", 3000, 100, flush_seconds=0.0)
    meta = pq.read_metadata(tmp_path / "small" / "part-00000.parquet")
    assert [meta.row_group(i).num_rows for i in range(meta.num_row_groups)] == [2000, 1000]


def test_bytes_per_two_channel_row(tmp_path: Path) -> None:
    """Realistic data: 12-bit counts, slow drift plus a few LSB of noise, 1 kHz, 0.5 s journal batches."""
    rng = np.random.default_rng(7)
    rows = 300_000
    seq = np.arange(rows, dtype=np.int64)
    device_us = seq * 1000 + rng.integers(0, 3, rows)
    writer = RunWriter(tmp_path / "run", SCHEMA, {}, part_seconds=3600.0, flush_seconds=0.0)
    for start in range(0, rows, 500):
        part = slice(start, start + 500)
        t = seq[part]
        volts = np.round(2730 + 6 * np.sin(t / 600_000 * 2 * np.pi) + rng.normal(0, 1.5, t.size)).astype(np.uint16)
        amps = np.round(np.where(t // 120_000 % 2, 1400, 800) + rng.normal(0, 2.0, t.size)).astype(np.uint16)
        utc = pa.array(T0_US + device_us[part], pa.timestamp("us", tz="UTC"))
        arrays = [utc, device_us[part], t, np.zeros(t.size, dtype=np.int32), volts * np.float32(0.007326), volts,
                  amps * np.float32(0.00122), amps]
        writer.append(pa.RecordBatch.from_arrays(arrays, schema=SCHEMA))
    writer.close("done")
    size = (tmp_path / "run" / "part-00000.parquet").stat().st_size
    assert size / rows <= 6.0  # project target for a two-channel row; measured about 2.7


# ---------------------------------------------------------------- writer behaviour


def test_flush_is_timed_and_writes_one_batch(tmp_path: Path) -> None:
    clock = FakeClock()
    writer = RunWriter(tmp_path / "run", SCHEMA, {}, flush_seconds=0.5, clock=clock)
    journal = tmp_path / "run" / "_journal-00000.arrows"
    for start in range(0, 500, 100):
        writer.append(make_batch(start, 100))
        clock.now += 0.09
    assert writer.durable_rows == 0  # 0.45 s: still buffered
    clock.now += 0.1
    writer.append(make_batch(500, 100))
    assert writer.durable_rows == 600
    _, batches = open_journal(journal)
    assert [b.num_rows for b in batches] == [0, 600]  # schema + empty batch, then one batch per flush
    writer.append(make_batch(600, 50))
    clock.now += 0.6
    writer.tick()  # no samples came, but the buffered ones are due
    assert writer.durable_rows == 650
    writer.close("done")


def test_rotation_follows_data_time_and_numbers_parts_densely(tmp_path: Path) -> None:
    writer = RunWriter(tmp_path / "run", SCHEMA, {}, part_seconds=1.0, clock=FakeClock())
    writer.append(make_batch(0, 500))
    writer.append(make_batch(5000, 500))  # a 4.5 s gap in the data, no wall time at all
    writer.append(make_batch(5500, 800))
    final = writer.close("done")
    assert [(p["file"], p["rows"]) for p in final["parts"]] == [
        ("part-00000.parquet", 500), ("part-00001.parquet", 1000), ("part-00002.parquet", 300),
    ]  # fmt: skip


def test_append_conforms_or_rejects_batches(tmp_path: Path) -> None:
    writer = RunWriter(tmp_path / "run", SCHEMA, {})
    batch = make_batch(0, 10)
    shuffled = pa.RecordBatch.from_arrays(
        [batch.column(name).cast(pa.int64()) if name.endswith("_counts") else batch.column(name)
         for name in reversed(SCHEMA.names)],
        names=list(reversed(SCHEMA.names)),
    )  # fmt: skip
    writer.append(shuffled)
    with pytest.raises(ValueError, match="does not record"):
        writer.append(batch.append_column("extra", pa.array(range(10))))
    with pytest.raises(ValueError, match="lacks column 'seq'"):
        writer.append(batch.drop_columns(["seq"]))
    too_big = batch.set_column(5, "out_v_counts", pa.array([70000] * 10, pa.int64()))
    with pytest.raises(ValueError, match="out_v_counts"):
        writer.append(too_big)
    writer.close("done")
    assert read_seq(tmp_path / "run").tolist() == list(range(10))


def test_existing_folder_with_files_is_refused(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    folder.mkdir()
    RunWriter(folder, SCHEMA, {}).close("empty folders are fine")
    with pytest.raises(StoreError, match="already exists and holds files"):
        RunWriter(folder, SCHEMA, {})
    assert read_run_json(folder)["status"] == "complete"


def test_new_run_names_folders_and_never_reuses_one(tmp_path: Path) -> None:
    first = new_run(tmp_path, "bench 30V", SCHEMA, {})
    second = new_run(tmp_path, "bench 30V", SCHEMA, {})
    assert first.folder.name.endswith("-bench-30V") and first.folder != second.folder
    first.close("done")
    second.close("done")


def _start_together(root: Path, count: int) -> list[RunWriter | StoreError]:
    """``count`` runs started at once from as many threads, all with one label."""
    import threading

    barrier = threading.Barrier(count)
    made: list[RunWriter | StoreError] = []

    def start() -> None:
        barrier.wait()
        try:
            made.append(new_run(root, "bench", SCHEMA, {}))
        except StoreError as exc:
            made.append(exc)

    threads = [threading.Thread(target=start) for _ in range(count)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    return made


def test_recorders_starting_together_into_one_folder_never_share_a_run(tmp_path: Path) -> None:
    """Benches of a lab writing to one shared folder of runs may start in the same second with the same label:
    each gets a folder of its own (before, one of two could see the other's folder fill and fail)."""
    for round_ in range(4):
        made = _start_together(tmp_path / f"lab-{round_}", 8)
        writers = [m for m in made if isinstance(m, RunWriter)]
        for w in writers:
            w.close("done")
        assert len(writers) == 8, next(m for m in made if isinstance(m, StoreError))
        assert len({w.folder for w in writers}) == 8


def test_empty_run_still_reads(tmp_path: Path) -> None:
    final = RunWriter(tmp_path / "run", SCHEMA, {}).close("nothing came")
    assert final["rows"] == 0 and final["events"] == 0
    assert pd.read_parquet(tmp_path / "run").empty
    assert pq.read_table(tmp_path / "run" / "_events.parquet").schema.equals(event_schema())


def test_readers_skip_journal_and_temp_files_while_recording(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    writer = RunWriter(folder, SCHEMA, {}, part_seconds=1.0, flush_seconds=0.0)
    writer.append(make_batch(0, 1500))
    writer.add_event({"kind": "mark", "start": T0_US})
    (folder / "_part-00001.parquet.tmp").write_bytes(b"half a file")
    wait_until(lambda: (folder / "part-00000.parquet").exists(), "the first part sealed on the sealing thread")
    assert {p.name for p in folder.iterdir()} >= {"_journal-00001.arrows", "_events.arrows", "part-00000.parquet"}
    assert read_seq(folder).tolist() == list(range(1000))
    assert len(pd.read_parquet(folder)) == 1000
    writer.abandon()


# ---------------------------------------------------------------- crashes and recovery

KILL_SCRIPT = r"""
import sys
from pathlib import Path
sys.path.insert(0, "tests")
from tests.test_store import SCHEMA, T0_US, make_batch
from logger.store import RunWriter

writer = RunWriter(Path(sys.argv[1]), SCHEMA, {"test": "kill -9"}, part_seconds=0.5, flush_seconds=0.01,
                   seal_in_child=True)
start = 0
while True:
    writer.append(make_batch(start, 37))
    start += 37
    if start % 370 == 0:
        writer.add_event({"kind": "mark", "start": T0_US + start * 1000})
    print(writer.durable_rows, flush=True)
"""


@pytest.mark.parametrize("seed", [1, 2])
def test_kill_9_then_recover(tmp_path: Path, seed: int) -> None:
    folder = tmp_path / "run"
    repo = Path(__file__).resolve().parents[1]
    proc = subprocess.Popen(
        [sys.executable, "-c", KILL_SCRIPT, str(folder)], cwd=repo, stdout=subprocess.PIPE, text=True
    )
    try:
        assert proc.stdout is not None
        for line in proc.stdout:
            if int(line) >= 2500:
                break
        with pytest.raises(StoreError, match="another live railtap process"):
            recover_run(folder)  # the writer still holds the lock
        assert find_unfinished(tmp_path) == []
        time.sleep(random.Random(seed).uniform(0.0, 0.05))
        os.kill(proc.pid, signal.SIGKILL)
        rest = proc.stdout.read()
    finally:
        proc.kill()
        proc.wait()
    reported = [int(x) for x in (line + rest).splitlines()[:-1] if x.strip()]  # the last line may be torn
    assert read_run_json(folder)["status"] == "recording"
    # A part being sealed in a child process when the writer died keeps the run locked until it is sealed.
    wait_until(lambda: find_unfinished(tmp_path) == [folder], "the run to be unlocked and unfinished")

    final = recover_run(folder)
    seq = read_seq(folder)
    assert final["status"] == "recovered" and final["stop_reason"] == "recovered after an unclean stop"
    assert final["rows"] == len(seq) >= max(reported)
    np.testing.assert_array_equal(seq, np.arange(len(seq)))  # nothing invented, duplicated or skipped
    assert final["end_utc"] == final["parts"][-1]["last_utc"]
    assert not list(folder.glob("_journal-*")) and (folder / "_events.parquet").exists()
    assert find_unfinished(tmp_path) == []


def _journal_with_known_batches(tmp_path: Path) -> tuple[Path, list[int], list[int]]:
    """A run left unsealed, its journal, the file size after each flushed batch, and each batch's rows."""
    folder = tmp_path / "crashed"
    writer = RunWriter(folder, SCHEMA, {}, flush_seconds=0.0)
    journal = folder / "_journal-00000.arrows"
    ends, rows, start = [journal.stat().st_size], [0], 0
    for n in [1, 50, 7, 300, 2, 64, 128, 9]:
        writer.append(make_batch(start, n))
        start += n
        ends.append(journal.stat().st_size)
        rows.append(n)
    writer.abandon()  # like a crash: nothing sealed
    return folder, ends, rows


def test_torn_journal_keeps_exactly_the_complete_batches(tmp_path: Path) -> None:
    folder, ends, rows = _journal_with_known_batches(tmp_path)
    rng = random.Random(3)
    cuts = {0, 3, 8, 40, ends[0] - 1, *ends, *(e + 1 for e in ends[:-1]), *(e - 1 for e in ends[1:])}
    cuts |= {rng.randrange(ends[-1]) for _ in range(15)}
    for cut in sorted(cuts):
        copy = tmp_path / f"cut-{cut}"
        shutil.copytree(folder, copy)
        with open(copy / "_journal-00000.arrows", "r+b") as handle:
            handle.truncate(cut)
        final = recover_run(copy)
        expected = sum(n for end, n in zip(ends, rows, strict=True) if end <= cut)
        assert final["rows"] == expected, cut
        if expected:
            assert read_seq(copy).tolist() == list(range(expected))
        shutil.rmtree(copy)


def test_recovery_is_idempotent_and_a_no_op_on_clean_runs(tmp_path: Path) -> None:
    write_run(tmp_path / "clean", 1500, 500, part_seconds=1.0)

    def stamps() -> dict[str, int]:  # the lock file notes each holder's pid, so it is left out
        return {p.name: p.stat().st_mtime_ns for p in (tmp_path / "clean").iterdir() if p.name != "_run.lock"}

    before = stamps()
    assert recover_run(tmp_path / "clean")["status"] == "complete"
    assert stamps() == before

    folder, _, rows = _journal_with_known_batches(tmp_path)
    first = recover_run(folder)
    again = recover_run(folder)
    assert first == again and first["rows"] == sum(rows)


def test_crash_between_seal_and_journal_delete(tmp_path: Path) -> None:
    folder, _, rows = _journal_with_known_batches(tmp_path)
    shutil.copy(folder / "_journal-00000.arrows", tmp_path / "journal-copy")
    recover_run(folder)
    shutil.copy(tmp_path / "journal-copy", folder / "_journal-00000.arrows")  # as if never deleted
    (folder / "_part-00001.parquet.tmp").write_bytes(b"torn")
    final = recover_run(folder)
    assert final["rows"] == sum(rows) and read_seq(folder).tolist() == list(range(sum(rows)))
    assert sorted(p.name for p in folder.iterdir() if p.name.startswith(("_journal", "_part"))) == []


def test_events_survive_a_crash(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    writer = RunWriter(folder, SCHEMA, {})
    writer.add_event({"kind": "brownout", "channel": "out_v", "start": T0_US, "depth_pct": 31.5})
    writer.add_event({"kind": "dropout", "channel": "out_v", "start": T0_US + 10, "duration_s": 0.2})
    writer.abandon()
    final = recover_run(folder)
    events = pd.read_parquet(folder / "_events.parquet")
    assert final["events"] == 2 and events["kind"].tolist() == ["brownout", "dropout"]
    assert not (folder / "_events.arrows").exists()


@pytest.mark.parametrize(
    ("name", "content", "words"),
    [
        ("_journal-00000.arrows", b"PAR1 this is not a stream", "not a railtap journal"),
        ("part-00000.parquet", b"garbage", "not a readable Parquet file"),
    ],
)
def test_foreign_files_get_a_one_line_error(tmp_path: Path, name: str, content: bytes, words: str) -> None:
    folder, _, _ = _journal_with_known_batches(tmp_path)
    if name.startswith("part"):
        recover_run(folder)
        (folder / "_run.json").write_text(json.dumps({**read_run_json(folder), "status": "recording"}))
    (folder / name).write_bytes(content)
    with pytest.raises(StoreError, match=words) as caught:
        recover_run(folder)
    assert str(folder / name) in str(caught.value) and "\n" not in str(caught.value)


def test_journal_of_another_schema_is_refused(tmp_path: Path) -> None:
    folder, _, _ = _journal_with_known_batches(tmp_path)
    other = tmp_path / "other"
    RunWriter(other, sample_schema(["x"]), {}).abandon()
    shutil.copy(other / "_journal-00000.arrows", folder / "_journal-00007.arrows")
    with pytest.raises(StoreError, match="not this run's"):
        recover_run(folder)


def test_not_a_run_folder(tmp_path: Path) -> None:
    with pytest.raises(StoreError, match="not a railtap run"):
        recover_run(tmp_path)
    (tmp_path / "_run.json").write_text("{not json")
    with pytest.raises(StoreError, match="not JSON"):
        recover_run(tmp_path)


# ---------------------------------------------------------------- errors and the lock


def _fail_after(budget: int):
    """A stand-in for journal.write_all that writes ``budget`` more bytes, then reports a full disk."""
    left = [budget]

    def write_all(fd: int, data: bytes) -> None:
        if len(data) > left[0]:
            os.write(fd, data[: left[0]])  # a torn message, as a real full disk leaves
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        left[0] -= len(data)
        os.write(fd, data)

    return write_all


def test_disk_full_on_journal_gives_one_line_and_keeps_the_journal(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    folder = tmp_path / "run"
    writer = RunWriter(folder, SCHEMA, {}, flush_seconds=0.0)
    writer.append(make_batch(0, 400))
    monkeypatch.setattr(journal_module, "write_all", _fail_after(100))
    with pytest.raises(StoreError) as caught:
        writer.append(make_batch(400, 400))
    message = str(caught.value)
    journal = folder / "_journal-00000.arrows"
    assert "\n" not in message
    assert message.startswith(f"disk full writing {journal}; free space, then run `railtap recover {folder}`")
    assert message.endswith("samples up to 2026-12-01 21:38:00 UTC are safe on disk")
    assert journal.stat().st_size > 0
    assert read_run_json(folder)["status"] == "failed" and lock_is_free(folder)
    with pytest.raises(StoreError, match="disk full"):
        writer.append(make_batch(800, 1))  # the writer stays failed
    assert writer.close("stop")["status"] == "failed"
    assert journal.exists()

    monkeypatch.undo()  # space freed
    assert find_unfinished(tmp_path) == [folder]
    final = recover_run(folder)
    assert final["rows"] == 400 and read_seq(folder).tolist() == list(range(400))


def test_disk_full_while_sealing_keeps_the_journal(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    folder = tmp_path / "run"
    writer = RunWriter(folder, SCHEMA, {}, flush_seconds=0.0)
    writer.append(make_batch(0, 700))

    def no_space(*_: object) -> None:
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(seal_module, "_write_parquet", no_space)
    with pytest.raises(StoreError, match=r"^disk full writing .*_part-00000\.parquet\.tmp; free space"):
        writer.close("stop")
    assert (folder / "_journal-00000.arrows").exists() and not (folder / "part-00000.parquet").exists()
    monkeypatch.undo()
    assert recover_run(folder)["rows"] == 700


def test_a_part_closed_mid_run_is_sealed_in_a_child_process_while_the_journal_goes_on(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    writer = RunWriter(folder, SCHEMA, {}, part_seconds=1.0, flush_seconds=0.0, seal_in_child=True)
    writer.append(make_batch(0, 1500))  # rotates: part 0 goes to the sealer, rows of part 1 to its journal
    writer.append(make_batch(1500, 600))  # taken at once, whatever the seal is doing
    assert writer.durable_rows == 2100
    wait_until(lambda: (folder / "_rollup-00000.parquet").exists(), "part 0 and its rollup from the sealer")
    assert pq.read_metadata(folder / "part-00000.parquet").num_rows == 1000
    final = writer.close("done")
    assert [p["rows"] for p in final["parts"]] == [1000, 1000, 100]
    assert read_seq(folder).tolist() == list(range(2100))
    assert not list(folder.glob("_journal-*")) and (folder / "_rollup-00002.parquet").exists()


def test_a_seal_that_fails_in_the_child_fails_the_run_in_one_line_and_keeps_the_journal(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    writer = RunWriter(folder, SCHEMA, {}, part_seconds=1.0, flush_seconds=0.0, seal_in_child=True)
    (folder / "part-00000.parquet").mkdir()  # something in the way of the sealed file
    writer.append(make_batch(0, 1500))

    def failed() -> bool:
        try:
            writer.tick()
        except StoreError:
            return True
        return False

    wait_until(failed, "the sealer's failure to reach the writer")
    with pytest.raises(StoreError) as caught:
        writer.append(make_batch(1500, 10))
    message = str(caught.value)
    assert "\n" not in message and "part-00000.parquet" in message and f"railtap recover {folder}" in message
    assert (folder / "_journal-00000.arrows").exists() and read_run_json(folder)["status"] == "failed"
    (folder / "part-00000.parquet").rmdir()
    assert recover_run(folder)["rows"] == 1500


def test_unwritable_place_gives_one_line(tmp_path: Path) -> None:
    blocker = tmp_path / "not-a-folder"
    blocker.write_text("a file where the run root should be")
    with pytest.raises(StoreError) as caught:
        RunWriter(blocker / "run", SCHEMA, {})
    assert str(blocker / "run") in str(caught.value) and "\n" not in str(caught.value)


def test_lock_refuses_a_second_holder(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    writer = RunWriter(folder, SCHEMA, {})
    second = RunLock(folder)
    with pytest.raises(StoreError, match="open in another live railtap process"):
        second.acquire("record")
    with pytest.raises(StoreError, match="cannot recover"):
        recover_run(folder)
    assert not lock_is_free(folder)
    writer.close("done")
    assert lock_is_free(folder)
    second.acquire("record")
    second.release()


def test_find_unfinished_lists_only_recoverable_runs(tmp_path: Path) -> None:
    write_run(tmp_path / "a-clean", 10, 10)
    RunWriter(tmp_path / "b-crashed", SCHEMA, {}).abandon()
    live = RunWriter(tmp_path / "c-live", SCHEMA, {})
    (tmp_path / "d-not-a-run").mkdir()
    assert find_unfinished(tmp_path) == [tmp_path / "b-crashed"]
    live.close("done")


def test_split_by_slot_never_goes_back() -> None:
    from logger.store.batches import split_by_slot

    utc_ms = [0, 500, 1200, 900, 1500, 2100, 5000]  # 900 is a host clock step back
    batch = make_batch(0, len(utc_ms)).set_column(
        0, "utc", pa.array([T0_US + ms * 1000 for ms in utc_ms], pa.timestamp("us", tz="UTC"))
    )
    pieces = [(slot, piece.column("seq").to_pylist()) for slot, piece in split_by_slot(batch, T0_US, 1_000_000, 0)]
    assert pieces == [(0, [0, 1]), (1, [2, 3, 4]), (2, [5]), (5, [6])]
