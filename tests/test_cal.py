"""Calibration end to end: points taken from a simulated ADC with known errors, the settle check, profiles on
disk, the rig naming them, and readings outside the calibrated span flagged."""

from __future__ import annotations

import contextlib
import json
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest
from fakes import flip_page_bytes

from logger.cal.apply import Calibrator
from logger.cal.assess import CalPoint, assess, gain_only
from logger.cal.capture import judge
from logger.cal.profile import Profile, ProfileError, load_profile, save_profile
from logger.cal.session import (
    CalError,
    CalOptions,
    collect_points,
    fit_and_save,
    one_point,
    points_from_csv,
    wait_for_device,
)
from logger.cli import main
from logger.events.outside import OutsideWatch
from logger.ingest import Pipeline, Settings
from logger.rig import RigError, load_rig, parse_rig
from logger.sim.adc import Adc, AdcSpec
from logger.sim.device import SimDevice
from logger.sources.simulated import SimSource
from logger.wire import DeviceHeader

RIG_TEXT = """
name = "cal-bench"
[[channel]]
name = "out_v"
role = "volts"
input = 0
divider = 11.0
nominal = 12.0
"""
RIG = parse_rig(RIG_TEXT, "<test rig>")
LSB_V = 3.3 / 4096 * 11.0
"""One count of the 12-bit, 3.3 V converter behind an 11:1 divider, in rail volts (FS / 2^N; common practice)."""


class ReferenceBench:
    """A rail held wherever the test sets it, read by a converter with a known offset, gain error and a
    bow-shaped non-linearity (the errors a calibration has to take out)."""

    channels = ("in0",)
    adc_bits = 12
    vref_mv = 3300
    spec = AdcSpec(noise_lsb=0.8, inl_lsb=3.0, offset_lsb={"out_v": 7.0}, gain_error={"out_v": 0.004})

    def __init__(self) -> None:
        self.level_v = 1.0
        self.adc = Adc(self.spec, RIG.channels, np.random.default_rng(11))

    def counts(self, t_s: np.ndarray) -> np.ndarray:
        return self.adc.counts(np.full((len(t_s), 1), self.level_v))

    def true_code(self, volts: np.ndarray) -> np.ndarray:
        """What the converter reads on average at these rail volts (its errors, no noise)."""
        code = self.adc.ideal_codes(volts[:, None])[:, 0] * 1.004 + 7.0
        u = code / 4096
        return code + 3.0 * 4 * u * (1 - u)


def _session(bench: ReferenceBench, answers: list[str]):
    """Feeds scripted answers; a number also moves the rail there before the point is taken."""
    said: list[str] = []

    def ask(prompt: str) -> str:
        said.append(prompt)
        answer = answers.pop(0)
        with contextlib.suppress(ValueError):
            bench.level_v = float(answer)
        return answer

    return ask, said.append, said


def _pipeline(bench: ReferenceBench) -> Pipeline:
    device = SimDevice(bench, rate_hz=1000.0, seed=3)
    pipeline = Pipeline(SimSource(device, speed=20.0), RIG, Settings(record_root=None))
    pipeline.start()
    return pipeline


def test_five_points_from_a_nonlinear_adc_give_a_profile_good_to_half_an_lsb(tmp_path: Path) -> None:
    """Round trip: the converter's bow is quadratic in the code, so the quadratic is recommended, and it
    reads the true rail to within half an LSB over the whole span, where the rig's plain divider scaling
    is several LSB out (offset 7 counts, gain 0.4 %)."""
    bench = ReferenceBench()
    pipeline = _pipeline(bench)
    ask, say, said = _session(bench, ["1.0", "4.0", "7.0", "10.0", "13.0", ""])
    try:
        wait_for_device(pipeline)
        points = collect_points(pipeline, RIG.channels[0], 0, CalOptions(samples=1000), ask, say)
    finally:
        pipeline.stop()
    assert [p.reference for p in points] == [1.0, 4.0, 7.0, 10.0, 13.0]
    path = fit_and_save(RIG, RIG.channels[0], points, CalOptions(out=tmp_path / "out_v.json"), say, 12, 3300)
    profile = load_profile(path)
    report = "".join(said)
    assert profile.model == "quadratic", report
    assert "recommended: quadratic" in report and report.count("point ") >= 5
    volts = np.linspace(1.0, 13.0, 50)
    codes = bench.true_code(volts)
    assert np.max(np.abs(profile.value(codes) - volts)) < 0.5 * LSB_V
    assert np.max(np.abs(codes * LSB_V - volts)) > 3 * LSB_V  # the uncalibrated scaling, for contrast
    assert profile.adc_bits == 12 and profile.span_counts[0] == pytest.approx(points[0].counts)


def test_an_unsettled_point_is_refused_with_its_numbers() -> None:
    # A window's halves differ by 2 sd / sqrt(n) from white noise alone (standard error of a difference of
    # two means: common practice, no source); four of those is allowed.
    rng = np.random.default_rng(5)
    quiet = 2000.0 + rng.normal(0, 1.0, 2000)
    assert judge(quiet).settled
    moving = quiet + np.linspace(0, 3.0, 2000)  # a slow creep of 3 counts, quieter than the noise
    verdict = judge(moving)
    assert not verdict.settled and "still moving" in verdict.why and verdict.drift == pytest.approx(1.5, abs=0.2)
    noisy = 2000.0 + rng.normal(0, 9.0, 2000)
    assert "too noisy: sd 9" in judge(noisy, max_sd=4.0).why
    assert "end of the converter's range" in judge(np.full(100, 4095.0), full_scale=4095).why


def test_gain_only_from_one_point_is_exact_there_and_keeps_the_zero(tmp_path: Path) -> None:
    point = CalPoint(12.07, 1370.0, 1.1, 2000, u_reference=0.006)
    curve = gain_only(point, offset_counts=4.0).curve
    assert curve.value(1370.0) == pytest.approx(12.07) and curve.value(4.0) == pytest.approx(0.0)
    assert curve.uncertainty(1370.0)[0] == pytest.approx(0.006)  # the reference's own, at the point
    said: list[str] = []
    path = one_point(RIG, RIG.channels[0], point, CalOptions(out=tmp_path / "q.json"), said.append)
    profile = load_profile(path)
    assert profile.model == "gain-only" and "not checked anywhere else" in profile.notes[0]
    assert any("warning: gain-only" in s for s in said)


def test_too_few_or_narrow_points_are_warned_about() -> None:
    two = [CalPoint(5.0, 560.0), CalPoint(6.0, 672.0)]
    a = assess(two, in_use=(0.0, 13.2), unit="V")
    assert a.recommended == "line" and "quadratic" not in a.candidates
    assert any("2 points" in w for w in a.warnings)
    assert any("cover 5 to 6 V but the channel is used from 0 to 13.2 V" in w for w in a.warnings)
    with pytest.raises(ValueError, match="at least 2 points"):
        assess(two[:1])


def test_a_straight_converter_gets_a_line(tmp_path: Path) -> None:
    rng = np.random.default_rng(9)
    counts = np.linspace(100, 4000, 7)
    points = [CalPoint(0.0089 * c - 0.03 + rng.normal(0, 0.001), c, 1.0, 2000) for c in counts]
    a = assess(points, unit="V")
    assert a.recommended == "line", a.why


def test_profile_round_trip_due_date_and_the_rig_naming_it(tmp_path: Path) -> None:
    points = [CalPoint(v, v / LSB_V + 3, 1.0, 1000) for v in (1.0, 5.0, 9.0, 13.0)]
    opts = CalOptions(out=tmp_path / "cal" / "out_v.json", reference_note="bench DMM, checked 2026-06",
                      temperature_note="23 C")
    path = fit_and_save(RIG, RIG.channels[0], points, opts, lambda s: None)
    saved = load_profile(path)
    assert saved.reference_note == "bench DMM, checked 2026-06" and saved.temperature_note == "23 C"
    assert saved.curve.value(500.0) == pytest.approx(load_profile(path).curve.value(500.0))
    rig_file = tmp_path / "rig.toml"
    rig_file.write_text(RIG_TEXT + 'profile = "cal/out_v.json"\n')
    rig = load_rig(rig_file)
    assert rig.channels[0].profile is not None and rig.warnings() == []
    past = (datetime.now(UTC) - timedelta(days=2)).date().isoformat()
    doc = json.loads(path.read_text())
    path.write_text(json.dumps({**doc, "due": past}))
    assert "was due" in load_rig(rig_file).warnings()[0]
    path.write_text(json.dumps({**doc, "channel": "out_a"}))
    with pytest.raises(RigError, match="made for 'out_a'"):
        load_rig(rig_file)
    path.write_text("{not json")
    with pytest.raises(RigError, match="not a calibration profile"):
        load_rig(rig_file)


def test_profile_is_applied_to_batches_and_outside_readings_are_flagged(tmp_path: Path) -> None:
    points = [CalPoint(v, v / LSB_V + 3, 1.0, 1000) for v in (2.0, 6.0, 10.0, 13.0)]
    path = fit_and_save(RIG, RIG.channels[0], points, CalOptions(out=tmp_path / "p.json", model="line"),
                        lambda s: None, adc_bits=12, vref_mv=3300)
    rig_file = tmp_path / "rig.toml"
    rig_file.write_text(RIG_TEXT + f'profile = "{path.name}"\n')
    rig = load_rig(rig_file)
    cal = Calibrator(rig, DeviceHeader("t", "1", 12, 3300, 1000.0, ("in0",), "boot"))
    counts = np.array([[3 + 1.0 / LSB_V], [3 + 7.0 / LSB_V], [3 + 14.0 / LSB_V]])
    assert cal.apply(counts)[:, 0] == pytest.approx([1.0, 7.0, 14.0], abs=1e-3)
    assert cal.outside(counts)[:, 0].tolist() == [True, False, True]
    with pytest.raises(RigError, match="10-bit"):
        Calibrator(rig, DeviceHeader("t", "1", 10, 3300, 1000.0, ("in0",), "boot"))


def test_outside_watch_makes_one_event_per_excursion() -> None:
    watch = OutsideWatch(("out_v",), {0: (2.0, 13.0)}, ("V",), merge_s=1.0)
    t = 1_800_000_000_000_000 + np.arange(0, 10_000_000, 1000)  # 10 s at 1 kHz
    v = np.full(len(t), 12.0)
    v[2000:2100] = 13.5  # 2.0-2.1 s
    v[2500:2600] = 13.8  # 0.4 s later: the same excursion
    v[6000:6200] = 1.0  # 6.0-6.2 s: another
    outside = ((v < 2.0) | (v > 13.0))[:, None]
    events = []
    for part in np.array_split(np.arange(len(t)), 13):
        events += watch.feed(t[part], t[part], outside[part], v[part, None])
    events += watch.finish()
    assert [(e.kind, e.value) for e in events] == [("outside_cal", 13.8), ("outside_cal", 1.0)]
    assert events[0].start_us == t[2000] and events[0].end_us == t[2599]
    assert "outside the calibrated 2 to 13 V" in events[0].detail


def test_csv_points_and_their_errors(tmp_path: Path, capsys) -> None:
    good = tmp_path / "points.csv"
    good.write_text("reference,counts,counts_sd\n0.5,60,1\n4,452,1\n8,900,1.2\n12,1350,1\n")
    assert [p.counts for p in points_from_csv(good)] == [60, 452, 900, 1350]
    rig_file = tmp_path / "rig.toml"
    rig_file.write_text(RIG_TEXT)
    assert main(["cal", "out_v", "--rig", str(rig_file), "--csv", str(good)]) == 0
    assert (tmp_path / "cal" / "out_v.json").exists()
    assert "recommended:" in capsys.readouterr().err
    bad = tmp_path / "bad.csv"
    bad.write_text("volts,raw\n1,2\n")
    with pytest.raises(CalError, match="reference,counts"):
        points_from_csv(bad)
    bad.write_text("reference,counts\n1,two\n")
    with pytest.raises(CalError, match="line 2"):
        points_from_csv(bad)
    assert main(["cal", "out_x", "--rig", str(rig_file), "--csv", str(good)]) == 2
    capsys.readouterr()
    # --u-ref reads SI prefixes as the planner does: 1m is 1 mV on a volts channel
    assert main(["cal", "out_v", "--rig", str(rig_file), "--csv", str(good), "--u-ref", "1m"]) == 0
    profile = json.loads((tmp_path / "cal" / "out_v.json").read_text())
    assert {p["u_reference"] for p in profile["points"]} == {0.001}
    assert main(["cal", "out_v", "--rig", str(rig_file), "--csv", str(good), "--u-ref", "1mA"]) == 2
    assert "--u-ref: '1mA' is not a value in volts" in capsys.readouterr().err
    with pytest.raises(ProfileError, match="no such calibration profile"):
        load_profile(tmp_path / "missing.json")
    save_profile(load_profile(tmp_path / "cal" / "out_v.json"), tmp_path / "copy.json")


def test_calibration_panel_on_the_live_screen(tmp_path: Path, monkeypatch) -> None:
    """k opens the panel for the trend's channel; three typed references become settled points while the
    screen runs; ctrl+s saves the profile beside the rig and applies it to the live readings."""
    import asyncio

    from textual.widgets import Input

    from logger.tui import RailtapApp
    from logger.tui.calpanel import CalPanel

    monkeypatch.chdir(tmp_path)
    bench = ReferenceBench()
    pipeline = _pipeline(bench)

    async def run() -> None:
        app = RailtapApp(pipeline)
        async with app.run_test(size=(100, 30)) as pilot:
            app.simulate_key("k")
            panel = app.query_one(CalPanel)
            field = panel.query_one(Input)
            for _ in range(600):  # generous: a loaded machine is slow to open the panel and focus its field
                await pilot.pause(0.05)
                if panel.has_class("-open") and field.has_focus:
                    break
            assert panel.has_class("-open") and field.has_focus
            for n, volts in enumerate((2.0, 7.0, 12.0), start=1):
                bench.level_v = volts
                field.value = str(volts)
                app.simulate_key("enter")
                for _ in range(600):  # generous: the rail settles in 0.1 s, but a loaded machine is slow
                    await pilot.pause(0.05)
                    if len(panel.points) == n:
                        break
                assert len(panel.points) == n
            app.simulate_key("ctrl+s")
            await pilot.pause(0.1)
            for _ in range(100):
                await pilot.pause(0.05)
                if 0 in pipeline.processor.calibrator.curves:
                    break
            assert 0 in pipeline.processor.calibrator.curves
            app.simulate_key("escape")
            for _ in range(600):
                await pilot.pause(0.05)
                if not panel.has_class("-open"):
                    break
            assert not panel.has_class("-open")
            pipeline.request_stop()

    try:
        asyncio.run(run())
    finally:
        pipeline.stop()
    profile = load_profile(tmp_path / "cal" / "out_v.json")
    assert [p.reference for p in profile.points] == [2.0, 7.0, 12.0]
    assert any(e.detail.startswith("calibration applied") for e in pipeline.events.recent(20))


def _recorded_run(tmp_path: Path) -> Path:
    from logger.sim.simple import simple_rig

    pipeline = Pipeline(SimSource(SimDevice(seed=2), speed=0.0, duration_s=70.0), simple_rig(),
                        Settings(record_root=tmp_path / "runs"))
    pipeline.start()
    assert pipeline.wait(60) and pipeline.error is None
    (run,) = (tmp_path / "runs").iterdir()
    return run


def _line_profile(channel: str, unit: str, gain: float, span: tuple[float, float]) -> Profile:
    from logger.cal.fit import Polynomial

    curve = Polynomial((0.0, gain), ((0.0, 0.0), (0.0, 0.0)))
    return Profile(channel, unit, "line", curve, (), span, "2026-12-01T00:00:00+00:00")


def test_recal_rewrites_values_from_counts_and_detects_events_again(tmp_path: Path) -> None:
    import pandas as pd

    from logger.store import StoreError, read_run_json
    from logger.store.recal import recalibrate

    run = _recorded_run(tmp_path)
    before = pd.read_parquet(run / "_events.parquet")
    lsb = 3.3 / 4096  # the simple rig's 12-bit, 3.3 V converter; FS / 2^N (common practice, no source)
    same = _line_profile("out_v", "V", lsb * 11.0, (0.0, 4095.0))  # the rig's own scaling, as a profile
    recalibrate(run, [same])
    again = pd.read_parquet(run / "_events.parquet")
    rail = ["brownout", "dropout", "flicker"]
    assert before[before.kind.isin(rail)][["kind", "start"]].equals(again[again.kind.isin(rail)][["kind", "start"]])
    low = _line_profile("out_v", "V", lsb * 11.0 * 1.02, (500.0, 1500.0))  # 2 % higher; span 4.4 to 13.3 V
    meta = recalibrate(run, [low])
    samples = pd.read_parquet(run, columns=["out_v", "out_v_counts", "out_a"])
    expected = (samples["out_v_counts"].to_numpy() * lsb * 11.0 * 1.02).astype(np.float32)
    assert np.array_equal(samples["out_v"].to_numpy(), expected)
    assert np.allclose(samples["out_a"].max(), pd.read_parquet(run, columns=["out_a"])["out_a"].max())
    events = pd.read_parquet(run / "_events.parquet")
    assert "outside_cal" in set(events.kind)  # the dropouts read below the 4.4 V the profile covers
    assert events["id"].tolist() == list(range(1, len(events) + 1))
    stored = read_run_json(run)
    assert stored == meta and stored["calibration"]["out_v"]["by"] == "railtap recal"
    history = stored["calibration_history"]
    assert [h["was"].get("profile", {}).get("curve", {}).get("coefficients") for h in history] == [
        None, [0.0, lsb * 11.0]]
    assert not [p for p in run.iterdir() if p.name.startswith("_recal")]
    with pytest.raises(StoreError, match="no channel 'out_x'"):
        recalibrate(run, [_line_profile("out_x", "V", 1.0, (0, 1))])


def test_a_killed_recal_leaves_the_old_calibration_or_the_new_never_a_mix(tmp_path: Path, monkeypatch) -> None:
    """Killed while writing its new files: recovery clears them and the old values stand. Killed after its
    point of no return: recovery finishes it, and every part, the events and _run.json have the new values."""
    import pandas as pd

    import logger.store.recal as recal
    from logger.store import find_unfinished, read_run_json, recover_run
    from logger.store.recal import recalibrate

    run = _recorded_run(tmp_path)
    old = pd.read_parquet(run, columns=["out_v"])["out_v"].to_numpy()
    lsb = 3.3 / 4096  # FS / 2^N (common practice, no source)
    new = _line_profile("out_v", "V", lsb * 11.0 * 1.02, (0.0, 4095.0))

    def killed(*_args, **_kwargs):
        raise KeyboardInterrupt  # as if the process had died here

    monkeypatch.setattr(recal, "write_events", killed)  # the last new file: parts already written aside
    with pytest.raises(KeyboardInterrupt):
        recalibrate(run, [new])
    assert find_unfinished(run.parent) == [] and not list(run.glob("_recal-*"))
    assert (pd.read_parquet(run, columns=["out_v"])["out_v"].to_numpy() == old).all()
    (run / "_recal-part-00000.parquet").write_bytes(b"half a file")  # what a kill -9 there would leave
    assert find_unfinished(run.parent) == [run]
    recover_run(run)
    assert not list(run.glob("_recal-*"))
    assert (pd.read_parquet(run, columns=["out_v"])["out_v"].to_numpy() == old).all()

    monkeypatch.undo()
    monkeypatch.setattr(recal, "finish_recal", killed)  # after the point of no return
    with pytest.raises(KeyboardInterrupt):
        recalibrate(run, [new])
    assert list(run.glob("_recal-*")) and find_unfinished(run.parent) == [run]
    meta = recover_run(run)
    values = pd.read_parquet(run, columns=["out_v", "out_v_counts"])
    expected = (values["out_v_counts"].to_numpy() * lsb * 11.0 * 1.02).astype(np.float32)
    assert np.array_equal(values["out_v"].to_numpy(), expected)
    assert meta == read_run_json(run) and "recalibrating" not in meta
    assert meta["calibration"]["out_v"]["by"] == "railtap recal" and not list(run.glob("_recal-*"))


@pytest.mark.parametrize("damage", ["truncated", "flipped page"])
def test_recal_of_a_run_with_a_damaged_part_names_it_and_changes_nothing(tmp_path: Path, damage: str) -> None:
    """A part whose footer is gone is found before anything is written; one whose page fails its checksum is
    found while rewriting: either way one StoreError naming the part, no temporary file left, the run as it was."""

    from logger.store import StoreError, read_run_json
    from logger.store.recal import recalibrate

    run = _recorded_run(tmp_path)
    part = sorted(run.glob("part-*.parquet"))[0]
    if damage == "truncated":
        part.write_bytes(part.read_bytes()[:3000])
    else:
        flip_page_bytes(part)
    before = read_run_json(run)
    with pytest.raises(StoreError, match=part.name):
        recalibrate(run, [_line_profile("out_v", "V", 3.3 / 4096 * 11.0, (0.0, 4095.0))])
    assert read_run_json(run) == before and not list(run.glob("_recal-*"))


def test_a_zero_far_up_the_range_is_refused_and_the_limit_is_the_rigs() -> None:
    """A 12-bit converter spans 4096 counts (2^N, common practice, no source): 204 counts is 4.98 % and may be
    a zero under the default 5 %; 205 is 5.005 % and is refused, with the share and the rig key named; 3.48 A
    on a 6.6 A range (2160 counts) is refused outright; a rig can allow more."""
    from dataclasses import replace

    from logger.cal.zero import zero_refusal
    from logger.sim.simple import simple_rig

    out_a = simple_rig().channel("out_a")
    assert zero_refusal(out_a, 204.0, 12) is None
    refusal = zero_refusal(out_a, 205.0, 12)
    assert refusal is not None and "5 % of the ADC's range" in refusal and "zero_limit_pct" in refusal
    assert "53 %" in zero_refusal(out_a, 2160.0, 12)
    assert zero_refusal(replace(out_a, zero_limit_pct=60.0), 2160.0, 12) is None


def test_scatter_beyond_the_stated_uncertainty_is_caught_and_scales_u_as_numpy_does() -> None:
    """A reference claimed to 1 mV with 20 mV of scatter about a straight converter: chi-squared far above its
    95 % limit on 6 degrees of freedom (ISO/TS 28037's consistency test; the limit checked against scipy's
    chi-squared quantile), a warning, and u scaled by the Birge ratio. With equal weights that is exactly the
    covariance numpy.polyfit reports when it scales by chi2/dof (numpy's documented default), so u(value) at
    each point is checked against numpy."""
    from scipy.stats import chi2

    rng = np.random.default_rng(5)
    counts = np.linspace(200, 3800, 8)
    refs = 0.0089 * counts + rng.normal(0, 0.020, len(counts))
    points = [CalPoint(float(r), float(c), 0.0, 1, u_reference=0.001) for r, c in zip(refs, counts, strict=True)]
    a = assess(points, unit="V")
    line = a.candidates["line"]
    assert line.fit.dof == 6 and line.chi2_limit == pytest.approx(chi2.ppf(0.95, 6))
    assert line.fit.chi2 > 10 * line.chi2_limit and not line.consistent and line.birge > 3
    assert any("line: the points scatter more than their uncertainties allow" in w for w in a.warnings)
    from logger.cal.assess import point_uncertainty

    u_points = point_uncertainty(counts, refs, tuple(points))  # the reference's 1 mV and one LSB's 1/sqrt(12)
    assert u_points == pytest.approx(np.sqrt(0.001**2 + (0.0089 / np.sqrt(12)) ** 2), rel=0.05)
    _, cov = np.polyfit(counts, refs, 1, w=1 / u_points, cov=True)
    jac = np.column_stack([counts, np.ones(len(counts))])
    u_numpy = np.sqrt(np.einsum("ij,jk,ik->i", jac, cov, jac))
    assert line.curve.uncertainty(counts) == pytest.approx(u_numpy, rel=1e-3)


def test_points_with_no_spread_still_carry_the_converters_step() -> None:
    """CSV points with neither a spread nor a reference uncertainty: each still carries one LSB of quantisation
    (8.9 mV steps: u = 8.9 / sqrt(12) = 2.57 mV per point, JCGM 100 4.3.7), so a line through six exact points
    claims no better than 2.57 / sqrt(6) mV at its centre, and the report says the reference's u is missing."""
    counts = np.array([100.0, 800.0, 1500.0, 2200.0, 2900.0, 3600.0])
    a = assess([CalPoint(0.0089 * c, c) for c in counts], unit="V")
    line = a.candidates["line"]
    assert line.curve.uncertainty(float(counts.mean()))[0] == pytest.approx(0.0089 / np.sqrt(12) / np.sqrt(6),
                                                                            rel=1e-6)
    assert any("the reference's uncertainty was not given" in w for w in a.warnings)
