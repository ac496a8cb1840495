"""One account of a run: the live totals, the review from rollups, the review of every sample, recovery's and
recal's pass with the unchanged profile all give the same figures and events, because they run the same core.

Each rate from 1 Hz to 10 kHz records a scripted rail (tests/devicestream.py) with a brownout, a silence of
missing frames, a restart without a header and a dropout, through a rig whose volts channel has a profile.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from devicestream import Device, Dip, Link, Reboot, Silence, make_source
from scipy.integrate import trapezoid

from logger.cal.fit import Polynomial
from logger.cal.profile import Profile, save_profile
from logger.core import GAP_S
from logger.ingest import Pipeline, Settings
from logger.ingest.outlet import GOING_ON_KINDS, event_key
from logger.review.summary import summarize
from logger.rig import load_rig
from logger.sim.simple import RIG_TOML
from logger.store.recal import recalibrate
from logger.store.reprocess import detect_again

LSB_V = 3.3 / 4096  # the simple rig's 12-bit, 3.3 V converter: FS / 2^N (common practice, no source)
SECONDS = {1.0: 400.0, 10.0: 60.0, 100.0: 20.0, 1000.0: 8.0, 10_000.0: 4.0}


def _rig_with_profile(folder: Path) -> Path:
    """The simple rig, its volts channel calibrated by a line 0.5 % steep with a 3-count offset."""
    gain = LSB_V * 11.0 * 1.005
    profile = Profile("out_v", "V", "line", Polynomial((-3 * gain, gain), ((0.0, 0.0), (0.0, 0.0))), (),
                      (0.0, 4095.0), "2026-12-01T00:00:00+00:00")
    save_profile(profile, folder / "out_v.json")
    rig = folder / "rig.toml"
    rig.write_text(RIG_TOML.replace("nominal = 12.0\n", 'nominal = 12.0\nprofile = "out_v.json"\n'))
    return rig


def _device(rate: float) -> Device:
    t = SECONDS[rate]
    return Device(rate_hz=rate, duration_s=t, drift_ppm=40.0, jitter_us=0, amps_a=1.5, noise_lsb=1.0, seed=3,
                  script=(Dip(0.2 * t, 0.05 * t, 70.0), Silence(0.4 * t, 0.1 * t),
                          Reboot(0.6 * t, 0.02 * t, header=False), Dip(0.8 * t, 0.03 * t, 0.0)))


def _figures(folder: Path, full: bool = False) -> tuple[float, float, float, float]:
    s = summarize(folder, full=full)
    out_v = next(c for c in s.channels if c.name == "out_v")
    return s.rails[0].charge_ah, s.rails[0].energy_wh, out_v.minimum, out_v.maximum


def _events(folder: Path) -> pd.DataFrame:
    events = pd.read_parquet(folder / "_events.parquet")
    rail = events[events.kind.isin(["brownout", "dropout", "flicker", "outside_cal"])]
    return rail[["kind", "channel", "device_start_us", "device_end_us", "value"]].reset_index(drop=True)


def _reference_ah_wh(folder: Path) -> tuple[float, float]:
    """scipy.integrate.trapezoid over each stretch the gap rule keeps (same boot segment; missing frames for
    no more than 50 ms), on the device clock: the outside reference for charge and energy."""
    df = pd.read_parquet(folder)
    t = df["device_us"].to_numpy()
    cut = (np.diff(df["segment"].to_numpy()) != 0) | ((np.diff(df["seq"].to_numpy()) > 1)
                                                      & (np.diff(t) > GAP_S * 1e6))
    pieces = np.split(np.arange(len(df)), np.flatnonzero(cut) + 1)
    v = df["out_v"].to_numpy().astype(np.float64)
    a = df["out_a"].to_numpy().astype(np.float64)
    s = (t - t[0]) / 1e6
    charge = sum(trapezoid(a[p], s[p]) for p in pieces if len(p) > 1)
    energy = sum(trapezoid(v[p] * a[p], s[p]) for p in pieces if len(p) > 1)
    return charge / 3600, energy / 3600


@pytest.mark.parametrize("rate", list(SECONDS))
def test_live_review_full_recovery_and_recal_agree(tmp_path: Path, rate: float) -> None:
    rig = load_rig(_rig_with_profile(tmp_path))
    source, _ = make_source(_device(rate), Link(read_s=max(0.01, 2 / rate), seed=5))
    pipeline = Pipeline(source, rig, Settings(record_root=tmp_path / "runs"))
    pipeline.start()
    assert pipeline.wait(120) and pipeline.error is None, pipeline.error
    (run,) = (tmp_path / "runs").iterdir()
    snap = pipeline.snapshot()
    live = (snap.charge_ah[0], snap.energy_wh[0], float(snap.minimum[0]), float(snap.maximum[0]))
    rollups, full = _figures(run), _figures(run, full=True)
    assert rollups == pytest.approx(live, rel=1e-9) and full == pytest.approx(live, rel=1e-9)
    ah, wh = _reference_ah_wh(run)
    assert live[:2] == pytest.approx((ah, wh), rel=1e-9)
    kinds = set(pd.read_parquet(run / "_events.parquet").kind)
    assert {"brownout", "dropout", "device_reset", "frame_gap"} <= kinds, kinds
    events = _events(run)

    copy = tmp_path / "copy"
    shutil.copytree(run, copy)
    detect_again(copy)  # what recovery runs after a crash
    pd.testing.assert_frame_equal(_events(copy), events)

    recalibrate(run, [rig.channel("out_v").profile])  # the profile the run already had
    pd.testing.assert_frame_equal(_events(run), events)
    assert _figures(run) == pytest.approx(live, rel=1e-9)
    assert _figures(run, full=True) == pytest.approx(live, rel=1e-9)


def test_a_zero_made_while_running_is_replayed_by_recal_at_its_sample(tmp_path: Path) -> None:
    """A tare asked for while recording takes effect from a sample; recal and recovery apply it at the same
    sample, so their values, figures and events are the live ones (common practice, no source)."""
    rig = load_rig(_rig_with_profile(tmp_path))
    source, _ = make_source(_device(1000.0), Link(read_s=0.002, seed=6))
    pipeline = Pipeline(source, rig, Settings(record_root=tmp_path / "runs"))
    pipeline.zero("out_a")  # taken by the ingest thread with the first batch it processes
    pipeline.start()
    assert pipeline.wait(120) and pipeline.error is None, pipeline.error
    (run,) = (tmp_path / "runs").iterdir()
    (change,) = pipeline.calibration_changes
    assert change["change"] == "zero" and change["device_us"] > 0
    before = pd.read_parquet(run, columns=["out_v", "out_a"])
    assert abs(float(before["out_a"].iloc[:40].mean())) < 0.01  # the tare took the constant current to 0 A
    live = _figures(run)
    recalibrate(run, [rig.channel("out_v").profile])
    pd.testing.assert_frame_equal(pd.read_parquet(run, columns=["out_v", "out_a"]), before)
    assert _figures(run) == pytest.approx(live, rel=1e-12)


class _Heard:
    """An outlet that keeps what it is told (the pipeline calls it on the ingest thread; read after the end)."""

    name = "heard"

    def __init__(self) -> None:
        self.figures, self.started, self.ended, self.states, self.closed = [], [], [], [], False

    def event_started(self, event):
        self.started.append(event)

    def event_ended(self, event):
        self.ended.append(event)

    def seconds(self, figures):
        self.figures.append(figures)

    def status(self, snapshot):
        self.states.append(snapshot.state)

    def summary(self):
        return "heard: all of it"

    def account(self):
        return {"told": len(self.figures)}

    def close(self):
        self.closed = True


@pytest.mark.parametrize("rate", [10.0, 1000.0])
def test_an_outlet_hears_the_rollups_seconds_and_each_event_begin_and_end(tmp_path: Path, rate: float) -> None:
    """What a broker is sent each second is the run's own rollup row for that second (one computation), and
    every rail event is heard once as it begins and once as it ends (common practice, no source)."""
    rig = load_rig(_rig_with_profile(tmp_path))
    source, _ = make_source(_device(rate), Link(read_s=max(0.01, 2 / rate), seed=5))
    heard = _Heard()
    pipeline = Pipeline(source, rig, Settings(record_root=tmp_path / "runs"), outlets=[heard])
    pipeline.start()
    assert pipeline.wait(120) and pipeline.error is None, pipeline.error
    (run,) = (tmp_path / "runs").iterdir()
    rollup = pd.read_parquet(sorted(run.glob("_rollup-*.parquet"))).sort_values("device_s", ignore_index=True)
    device_s = np.concatenate([f.device_s for f in heard.figures])
    assert (np.diff(device_s) > 0).all()  # each second told once, in order
    np.testing.assert_array_equal(device_s, rollup["device_s"].to_numpy())
    k = heard.figures[0].channels.index("out_v")
    for stat, column in (("minimum", "out_v_min"), ("mean", "out_v_mean"), ("maximum", "out_v_max")):
        told = np.concatenate([getattr(f, stat)[:, k] for f in heard.figures])
        np.testing.assert_allclose(told, rollup[column].to_numpy(), rtol=1e-12, equal_nan=True)
    joules = np.concatenate([f.joules[:, 0] for f in heard.figures])
    np.testing.assert_allclose(joules, rollup[f"{heard.figures[0].rails[0]}_w_int"].to_numpy(), rtol=1e-9)
    dips = [e for e in heard.ended if e.kind in ("brownout", "dropout")]
    assert len(dips) == 2
    begun = [event_key(e) for e in heard.started]
    assert len(begun) == len(set(begun)) and sorted(begun) == sorted(event_key(e) for e in heard.ended
                                                                      if e.kind in GOING_ON_KINDS)
    assert {event_key(e) for e in dips} <= set(begun)
    assert heard.closed and heard.states[-1] == "stopped"
    assert json.loads((run / "_run.json").read_text())["heard"]["told"] == len(heard.figures)
