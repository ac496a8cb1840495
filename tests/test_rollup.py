"""Per-second rollups against the full-rate arrays they summarise."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from scipy.integrate import trapezoid

from logger.store.rollup import Pair, read_rollups, rollup_part
from logger.store.schema import sample_schema

T0 = 1_800_000_000_000_000


def _seq(utc: np.ndarray) -> np.ndarray:
    """One more per sample, and the frames of the 3 s hole lost (so it is a gap, not a slow step)."""
    seq = np.arange(len(utc))
    for hole in np.flatnonzero(np.diff(utc) > 1_000_000):
        seq[hole + 1 :] += 3000
    return seq


def _part(path: Path, utc: np.ndarray, volts: np.ndarray, amps: np.ndarray, group_rows: int = 4096,
          seq: np.ndarray | None = None, segment: np.ndarray | None = None) -> Path:
    schema = sample_schema(["out_v", "out_a"])
    n = len(utc)
    table = pa.table({
        "utc": pa.array(utc, pa.int64()).cast(schema.field("utc").type),
        "device_us": pa.array(utc - T0, pa.int64()),
        "seq": pa.array(_seq(utc) if seq is None else seq, pa.int64()),
        "segment": pa.array(np.zeros(n) if segment is None else segment, pa.int32()),
        "out_v": pa.array(volts, pa.float32()), "out_v_counts": pa.array(np.zeros(n), pa.uint16()),
        "out_a": pa.array(amps, pa.float32()), "out_a_counts": pa.array(np.zeros(n), pa.uint16()),
    }, schema=schema)
    pq.write_table(table, path, row_group_size=group_rows)
    return path


def _signal(seed: int, seconds: float, rate_hz: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Uneven timestamps with a 3 s hole (a lost link), a rail with ripple and a stepping load."""
    rng = np.random.default_rng(seed)
    steps = rng.uniform(0.5, 1.5, int(seconds * rate_hz)) * 1e6 / rate_hz
    utc = T0 + 250_000 + np.cumsum(steps).astype(np.int64)
    utc[len(utc) // 2:] += 3_000_000
    t = (utc - T0) / 1e6
    volts = (12.0 + 0.05 * np.sin(2 * np.pi * 100 * t) + rng.normal(0, 0.01, len(t))).astype(np.float32)
    amps = np.where((t % 4) < 2, 0.5, 2.0).astype(np.float32)
    return utc, volts, amps


def _integral(utc: np.ndarray, y: np.ndarray, cuts: np.ndarray | None = None) -> float:
    """Full-rate trapezoid left out across the lost link (3 s of missing frames) and at ``cuts``: scipy's
    trapezoid on each stretch between (scipy.integrate.trapezoid as the reference)."""
    cuts = np.flatnonzero(np.diff(utc) > 1_000_000) + 1 if cuts is None else cuts
    t = (utc - utc[0]) / 1e6  # seconds from the start: epoch seconds as floats would lose the microseconds
    return sum(trapezoid(y_s, t_s) for t_s, y_s in zip(np.split(t, cuts), np.split(y, cuts), strict=True))


def test_rollup_sums_match_the_full_rate_integrals_and_statistics(tmp_path: Path) -> None:
    utc, volts, amps = _signal(1, 30.0, 1000.0)
    part = _part(tmp_path / "part-00000.parquet", utc, volts, amps)
    table = rollup_part(part, [Pair("out", "out_v", "out_a")]).to_pydict()
    v64, a64 = volts.astype(np.float64), amps.astype(np.float64)
    assert sum(table["out_v_int"]) == pytest.approx(_integral(utc, v64), rel=1e-12)
    assert sum(table["out_a_int"]) == pytest.approx(_integral(utc, a64), rel=1e-12)
    assert sum(table["out_w_int"]) == pytest.approx(_integral(utc, v64 * a64), rel=1e-12)
    assert sum(table["count"]) == len(utc)
    second = (utc - T0) // 1_000_000  # rows are seconds of the device clock
    k = 7
    inside = second == np.unique(second)[k]
    assert table["out_v_min"][k] == v64[inside].min() and table["out_v_max"][k] == v64[inside].max()
    assert table["out_v_mean"][k] == pytest.approx(v64[inside].mean(), rel=1e-12)
    assert table["out_v_m2"][k] == pytest.approx(((v64[inside] - v64[inside].mean()) ** 2).sum(), rel=1e-9)


def test_rollup_is_the_same_whatever_the_row_groups(tmp_path: Path) -> None:
    utc, volts, amps = _signal(2, 12.0, 2000.0)
    pairs = [Pair("out", "out_v", "out_a")]
    one = rollup_part(_part(tmp_path / "a.parquet", utc, volts, amps, group_rows=len(utc)), pairs)
    many = rollup_part(_part(tmp_path / "b.parquet", utc, volts, amps, group_rows=777), pairs)
    assert one.column_names == many.column_names
    for name in one.column_names[1:]:
        assert np.allclose(one[name].to_numpy(), many[name].to_numpy(), rtol=1e-12, equal_nan=True), name


def test_rollups_of_several_parts_carry_the_interval_between_them(tmp_path: Path) -> None:
    utc, volts, amps = _signal(3, 20.0, 1000.0)
    cut = len(utc) // 3
    seq = _seq(utc)
    for index, rows in enumerate((slice(0, cut), slice(cut, None))):
        _part(tmp_path / f"part-{index:05d}.parquet", utc[rows], volts[rows], amps[rows], seq=seq[rows])
    table = read_rollups(tmp_path, [Pair("out", "out_v", "out_a")]).table
    assert (tmp_path / "_rollup-00001.parquet").exists()
    assert sum(table["out_v_int"].to_pylist()) == pytest.approx(_integral(utc, volts.astype(np.float64)), rel=1e-12)


def test_a_restart_is_never_integrated_across_however_short(tmp_path: Path) -> None:
    """The gap rule: a new boot segment starts a new integral even 2 ms after the last sample, and missing
    frames over more than 50 ms are a gap, while a few missing frames are bridged (common practice, no
    source; the rule is logger.core.gaps)."""
    n = 3000
    utc = T0 + np.arange(n, dtype=np.int64) * 1000
    seq = np.arange(n)
    segment = np.zeros(n, dtype=np.int32)
    segment[1000:] = 1  # a restart between rows 999 and 1000, 1 ms apart on the bridged clock
    seq[2000:] += 10  # 10 frames lost (10 ms): bridged
    utc[2000:] += 10_000
    seq[2500:] += 60  # 60 frames lost (60 ms): a gap
    utc[2500:] += 60_000
    volts = np.full(n, 12.0, dtype=np.float32)
    amps = np.full(n, 2.0, dtype=np.float32)
    part = _part(tmp_path / "part-00000.parquet", utc, volts, amps, seq=seq, segment=segment)
    table = rollup_part(part, [Pair("out", "out_v", "out_a")]).to_pydict()
    cuts = np.array([1000, 2500])
    assert sum(table["out_a_int"]) == pytest.approx(_integral(utc, amps.astype(np.float64), cuts), rel=1e-12)
    # every 1 ms step, less the restart and the gap, plus the 10 ms bridged
    assert sum(table["covered_s"]) == pytest.approx((n - 1) * 1e-3 - 2e-3 + 0.010, rel=1e-12)


def test_a_part_recorded_before_segments_were_kept_still_rolls_up(tmp_path: Path) -> None:
    """Format 1 parts have no ``segment`` column: every row counts as the first boot segment."""
    utc, volts, amps = _signal(4, 5.0, 1000.0)
    new = _part(tmp_path / "new.parquet", utc, volts, amps)
    old = tmp_path / "old.parquet"
    pq.write_table(pq.read_table(new).drop_columns(["segment"]), old)
    pairs = [Pair("out", "out_v", "out_a")]
    a, b = rollup_part(new, pairs), rollup_part(old, pairs)
    assert a.equals(b)
