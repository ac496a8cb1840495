"""Event detectors: the DC dip and interruption test levels, hysteresis, flicker, overcurrent, and the same
events whatever the batch sizes."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from logger.events import EventDetector
from logger.events.flicker import FlickerGrouper
from logger.events.levels import Comparator
from logger.events.model import Event
from logger.rig import parse_rig

RATE_HZ = 1000.0
PERIOD_US = 1000

RIG_24V = """
name = "test-24v"
[[channel]]
name = "rail_v"
role = "volts"
input = 0
divider = 11.0
nominal = 24.0
[[channel]]
name = "load_a"
role = "amps"
input = 1
shunt_ohm = 0.01
gain = 50.0
high = 5.0
"""


def _run(detector: EventDetector, utc: np.ndarray, values: np.ndarray, cuts: list[int] | None = None) -> list[Event]:
    bounds = [0, *sorted(cuts or []), len(utc)]
    events: list[Event] = []
    for a, b in itertools.pairwise(bounds):
        events += detector.feed(utc[a:b], values[a:b])
    return sorted(events + detector.finish(), key=lambda e: (e.start_us, e.kind, e.channel or ""))


def _rail(seconds: float, level_v: float = 24.0, amps: float = 1.0) -> tuple[np.ndarray, np.ndarray]:
    n = int(seconds * RATE_HZ)
    utc = 1_800_000_000_000_000 + np.arange(n, dtype=np.int64) * PERIOD_US
    values = np.column_stack((np.full(n, level_v), np.full(n, amps)))
    return utc, values


@pytest.mark.parametrize(
    ("level_pct", "kind"),
    [
        # DC dip and interruption test levels of IEC 61000-4-29 (value from memory): 70 % and 40 % of the
        # nominal voltage, and 0 % (an interruption); a 100 ms test duration lies within its 1 ms - 1 s range.
        (70.0, "brownout"),
        (40.0, "brownout"),
        (0.0, "dropout"),
    ],
)
def test_iec_dc_test_levels(level_pct: float, kind: str) -> None:
    utc, values = _rail(1.0)
    values[300:400, 0] = 24.0 * level_pct / 100.0  # 100 ms at 1 kHz
    events = _run(EventDetector(parse_rig(RIG_24V)), utc, values)
    assert [e.kind for e in events] == [kind]
    event = events[0]
    assert event.duration_s == pytest.approx(0.100, abs=1 / RATE_HZ)
    assert event.start_us == utc[300] and event.end_us == utc[400]
    assert event.value == pytest.approx(24.0 * level_pct / 100.0)
    assert event.depth_pct == pytest.approx(100.0 - level_pct)  # depth = nominal - residual (IEC 61000-4-30)


def test_hysteresis_holds_an_event_open_until_threshold_plus_two_percent() -> None:
    # Dip threshold 90 % and hysteresis 2 % of the declared value (IEC 61000-4-30, 5.4.2; value from memory).
    utc, values = _rail(1.0)
    values[100:200, 0] = 21.0  # below 21.6 V: starts
    values[200:300, 0] = 21.9  # above 21.6 but below 22.08 V: still in the dip
    values[300:400, 0] = 21.5  # below again: same event, not a new one
    events = _run(EventDetector(parse_rig(RIG_24V)), utc, values)
    assert len(events) == 1 and events[0].duration_s == pytest.approx(0.3)
    assert events[0].value == pytest.approx(21.0)


def test_noise_around_the_threshold_does_not_cry_wolf() -> None:
    rng = np.random.default_rng(3)
    utc, values = _rail(20.0)
    values[:, 0] = 22.6 + rng.normal(0.0, 0.12, len(utc))  # noisy but 4 sigma clear of the 21.6 V threshold
    assert _run(EventDetector(parse_rig(RIG_24V)), utc, values) == []


def test_overvoltage_and_overcurrent() -> None:
    utc, values = _rail(2.0)
    values[100:150, 0] = 27.0  # 112.5 % of 24 V: above the 110 % swell threshold
    values[500:550, 1] = 6.0  # 50 ms above the 5 A limit: shorter than the 0.1 s default, ignored
    values[1000:1300, 1] = 6.5  # 300 ms above: an overcurrent
    kinds = [(e.kind, e.channel) for e in _run(EventDetector(parse_rig(RIG_24V)), utc, values)]
    assert kinds == [("overvoltage", "rail_v"), ("overcurrent", "load_a")]


def test_negative_rail_dips_towards_zero() -> None:
    rig = parse_rig(RIG_24V.replace("nominal = 24.0", "nominal = -15.0\nnegative = true"))
    utc, values = _rail(1.0, level_v=-15.0)
    values[200:260, 0] = -10.0  # 67 % of the magnitude
    (event,) = _run(EventDetector(rig), utc, values)
    assert event.kind == "brownout" and event.value == pytest.approx(-10.0)
    assert event.depth_pct == pytest.approx(100.0 * 5.0 / 15.0)
    assert event.detail.startswith("sagged towards zero, to -10 V")  # signed like its value and its pictures


def test_event_still_open_at_the_end_is_closed_at_the_last_sample() -> None:
    utc, values = _rail(1.0)
    values[900:, 0] = 18.0
    (event,) = _run(EventDetector(parse_rig(RIG_24V)), utc, values)
    assert event.end_us == utc[-1] and "still below" in event.detail


def test_flicker_episode_groups_repeated_dips() -> None:
    utc, values = _rail(12.0)
    for k in range(5):  # five dips, one every 0.8 s, each 0.2 s long
        start = 1000 + 800 * k
        values[start : start + 200, 0] = 18.0
    values[11000:11050, 0] = 18.0  # a lone dip long after: not part of it
    events = _run(EventDetector(parse_rig(RIG_24V)), utc, values)
    episodes = [e for e in events if e.kind == "flicker"]
    assert len(episodes) == 1 and sum(e.kind == "brownout" for e in events) == 6
    ep = episodes[0]
    assert ep.count == 5 and ep.rate_hz == pytest.approx(1 / 0.8)
    assert ep.duty == pytest.approx(5 * 0.2 / (4 * 0.8 + 0.2))
    assert ep.start_us == utc[1000] and ep.end_us == utc[1000 + 800 * 4 + 200]


def test_two_dips_are_not_flicker() -> None:
    g = FlickerGrouper("v", 5.0)
    out = g.add(Event("brownout", 0, 100, "v", value=1.0))
    out += g.add(Event("brownout", 1_000_000, 1_000_100, "v", value=1.0))
    assert out + g.finish() == []


def test_flicker_group_waits_for_a_dip_under_way_at_a_batch_edge() -> None:
    rig = parse_rig(RIG_24V.replace("nominal = 24.0", "nominal = 24.0\n[channel.events]\nflicker_window_s = 0.6"))
    utc, values = _rail(2.0)
    values[0:100, 0] = 18.0
    values[500:900, 0] = 18.0  # under way at 0.7 s, more than the window after the first dip began
    values[1000:1100, 0] = 18.0
    whole = _run(EventDetector(rig), utc, values)
    assert [e.kind for e in whole].count("flicker") == 1
    assert _run(EventDetector(rig), utc, values, [700]) == whole


@settings(max_examples=150, deadline=None)
@given(seed=st.integers(0, 10_000), cuts=st.lists(st.integers(1, 5999), max_size=12))
def test_same_events_whatever_the_batches(seed: int, cuts: list[int]) -> None:
    rng = np.random.default_rng(seed)
    utc, values = _rail(6.0)
    values[:, 0] += rng.normal(0.0, 0.05, len(utc))
    for _ in range(rng.integers(0, 12)):  # dips, swells and current surges at random
        a = int(rng.integers(0, 5900))
        values[a : a + int(rng.integers(1, 400)), 0] = rng.choice([0.5, 10.0, 17.0, 21.7, 21.9, 27.0])
        b = int(rng.integers(0, 5900))
        values[b : b + int(rng.integers(1, 400)), 1] = rng.choice([4.0, 5.05, 7.0])
    start = int(rng.integers(0, 3000))
    for _ in range(rng.integers(0, 6)):  # a train of dips, as flicker makes, straddling batch edges
        values[start : start + int(rng.integers(50, 400)), 0] = 15.0
        start += int(rng.integers(300, 900))
        if start >= 5900:
            break
    # A short flicker window makes groups that close while a later dip is under way, across batch edges.
    rig = parse_rig(RIG_24V.replace("nominal = 24.0", "nominal = 24.0\n[channel.events]\nflicker_window_s = 0.6"))
    whole = _run(EventDetector(rig), utc, values)
    split = _run(EventDetector(rig), utc, values, cuts)
    assert split == whole


def test_sliding_mean_spans_batches() -> None:
    rig = parse_rig(RIG_24V.replace("nominal = 24.0", "nominal = 24.0\n[channel.events]\nmean_window_s = 0.004"))
    utc, values = _rail(1.0)
    values[500, 0] = 0.0  # one bad sample: a 4-sample mean stays at 18 V, a brownout of 4 samples
    whole = _run(EventDetector(rig), utc, values)
    split = _run(EventDetector(rig), utc, values, [501, 502, 503])
    assert whole == split and len(whole) == 1 and whole[0].kind == "brownout"
    assert whole[0].value == pytest.approx(18.0)


def test_comparator_refuses_a_release_on_the_wrong_side() -> None:
    with pytest.raises(ValueError):
        Comparator(10.0, 9.0, below=True)


def test_sealed_event_table_points_dips_at_their_episode(tmp_path) -> None:
    import pandas as pd
    import pyarrow.parquet as pq

    from logger.events.log import EventLog
    from logger.store import RunWriter, sample_schema

    writer = RunWriter(tmp_path / "run", sample_schema(["rail_v"]), {"rig": "test"})
    log = EventLog(sink=writer.add_event)
    detector = EventDetector(parse_rig(RIG_24V))
    utc, values = _rail(8.0)
    for k in range(4):
        values[1000 + 700 * k : 1100 + 700 * k, 0] = 18.0
    for event in _run(detector, utc, values):
        log.add(event)
    log.add(Event("mark", int(utc[-1]), detail="checked the fuse"))
    writer.close("test done")
    table = pd.read_parquet(tmp_path / "run" / "_events.parquet")
    (episode_id,) = table.loc[table["kind"] == "flicker", "id"]
    dips = table[table["kind"] == "brownout"]
    assert len(dips) == 4 and (dips["episode"] == episode_id).all()
    assert table.loc[table["kind"] == "mark", "detail"].item() == "checked the fuse"
    assert b"railtap.run" in pq.read_metadata(tmp_path / "run" / "_events.parquet").metadata


def test_a_flicker_episode_under_way_is_reported_as_going_on() -> None:
    """Two dips are not yet an episode; the third makes one (three or more within the window), reported as
    going on with its count so far, before the window closes it (the grouping rule of logger.events.flicker)."""
    g = FlickerGrouper("meter_v", 5.0, "V")
    dips = [Event("brownout", k * 500_000, end_us=k * 500_000 + 100_000, channel="meter_v", value=3.3,
                  depth_pct=55.0) for k in range(4)]
    for dip in dips[:2]:
        g.add(dip)
    assert g.ongoing() is None
    g.add(dips[2])
    episode = g.ongoing()
    assert episode is not None and episode.kind == "flicker" and episode.end_us is None
    assert episode.detail == "going on: 3 dips so far at 2.00 Hz" and episode.start_us == 0
    g.add(dips[3])
    assert g.ongoing().detail.startswith("going on: 4 dips so far")
    assert g.tick(10_000_000)[0].count == 4 and g.ongoing() is None
