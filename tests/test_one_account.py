"""One account of a run: the live totals, the review from rollups, the review of every sample, recovery's and
recal's pass with the unchanged profile all give the same figures and events, because they run the same core.

Each rate from 1 Hz to 10 kHz records a scripted rail (tests/devicestream.py) with a brownout, a silence of
missing frames, a restart without a header and a dropout, through a rig whose volts channel has a profile.
"""

from __future__ import annotations

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
