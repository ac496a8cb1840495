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


def _part(path: Path, utc: np.ndarray, volts: np.ndarray, amps: np.ndarray, group_rows: int = 4096) -> Path:
    schema = sample_schema(["out_v", "out_a"])
    n = len(utc)
    table = pa.table({
        "utc": pa.array(utc, pa.int64()).cast(schema.field("utc").type),
        "device_us": pa.array(utc - T0, pa.int64()), "seq": pa.array(np.arange(n), pa.int64()),
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


def _integral(utc: np.ndarray, y: np.ndarray) -> float:
    """Full-rate trapezoid with the same rule for a lost link (steps over 1 s left out): scipy's trapezoid on
    each stretch between such steps (scipy.integrate.trapezoid as the reference)."""
    cuts = np.flatnonzero(np.diff(utc) > 1_000_000) + 1
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
    second = (utc // 1_000_000)
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
    for index, rows in enumerate((slice(0, cut), slice(cut, None))):
        _part(tmp_path / f"part-{index:05d}.parquet", utc[rows], volts[rows], amps[rows])
    table = read_rollups(tmp_path, [Pair("out", "out_v", "out_a")])
    assert (tmp_path / "_rollup-00001.parquet").exists()
    assert sum(table["out_v_int"].to_pylist()) == pytest.approx(_integral(utc, volts.astype(np.float64)), rel=1e-12)
