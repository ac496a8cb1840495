"""Review's pictures and documents: PNG plots, the terminal chart, the report and the comparison of two runs.

Three short simulated runs are recorded once for the whole module: the simple rail (brownout at 30 s, dropout
at 50 s) with the link unplugged for 0.3 s at 40 s, cut into 20-second parts of 4096-row groups so that
anything streaming really streams; a +/-15 V split supply whose negative rail dips twice; and the demo bench,
which shares two channels with the first run and adds a third.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
import pytest
from rich.cells import cell_len

from logger.ingest import Pipeline, Settings
from logger.review.chart import run_limits
from logger.review.window import around_event
from logger.rig import Rig
from logger.sim.device import SimDevice
from logger.sim.scenario import load_scenario, parse_scenario
from logger.sources.simulated import SimSource
from logger.store import StoreError

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), section 5.2


def _record(source: SimSource, rig: Rig, root: Path, **settings: float) -> Path:
    pipeline = Pipeline(source, rig, Settings(record_root=root, retry_s=0.05, **settings))
    pipeline.start()
    assert pipeline.wait(60) and pipeline.error is None
    (run,) = root.iterdir()
    return run


@pytest.fixture(scope="module")
def runs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    from logger.sim.simple import simple_rig

    root = tmp_path_factory.mktemp("runs")
    simple = SimSource(SimDevice(seed=2), speed=0.0, duration_s=70.0)
    simple.unplug(at_s=40.0, down_s=0.3, reset=False)
    rail = _record(simple, simple_rig(), root / "rail", part_seconds=20.0)
    for part in rail.glob("part-*.parquet"):  # the same rows in row groups of 4096, as a long part has
        pq.write_table(pq.read_table(part), part, row_group_size=4096)
    text = (Path(__file__).parent.parent / "logger/sim/scenarios/split-15v.toml").read_text()
    split = parse_scenario(text.replace("start_s = 240.0", "start_s = 12.0").replace("start_s = 480.0",
                                                                                       "start_s = 25.0"))
    bench = load_scenario("demo-bench")
    return {
        "rail": rail,
        "split": _record(SimSource(split.make_device(seed=3), speed=0.0, duration_s=35.0), split.rig,
                         root / "split"),
        "bench": _record(SimSource(bench.make_device(seed=4), speed=0.0, duration_s=55.0), bench.rig,
                         root / "bench"),
    }


def _event_id(run: Path, kind: str, channel: str | None = None) -> int:
    rows = pq.read_table(run / "_events.parquet").to_pylist()
    return next(r["id"] for r in rows if r["kind"] == kind and (channel is None or r["channel"] == channel))


def _png_shape(path: Path) -> tuple[int, ...]:
    from matplotlib.image import imread

    assert path.read_bytes()[:8] == PNG_SIGNATURE
    image = imread(path)
    assert image[..., :3].std() > 0.05  # something is drawn, not a blank page
    return image.shape


def _only(folder: Path, names: set[str]) -> None:
    """The folder holds exactly these files: nothing half written left behind."""
    assert {p.name for p in folder.iterdir()} == names


def test_overview_png_has_a_panel_per_channel_at_100_dpi(runs: dict[str, Path], tmp_path: Path) -> None:
    from logger.review.plots import overview_png

    assert overview_png(runs["rail"], tmp_path / "all.png") == tmp_path / "all.png"
    assert _png_shape(tmp_path / "all.png") == (570, 1200, 4)  # 12 in by 1.3 + 2 x 2.2 in at 100 dpi
    overview_png(runs["split"], tmp_path / "neg.png", channels=["neg_v"])
    assert _png_shape(tmp_path / "neg.png") == (350, 1200, 4)
    _only(tmp_path, {"all.png", "neg.png"})
    before = {p.name for p in runs["rail"].iterdir()}
    with pytest.raises(StoreError, match="not inside a run folder"):
        overview_png(runs["rail"], runs["rail"] / "overview.png")
    assert {p.name for p in runs["rail"].iterdir()} == before
    with pytest.raises(StoreError, match="no channel 'nope'"):
        overview_png(runs["rail"], tmp_path / "x.png", channels=["nope"])
    _only(tmp_path, {"all.png", "neg.png"})


def test_event_png_for_rail_and_link_events(runs: dict[str, Path], tmp_path: Path) -> None:
    from logger.review.plots import event_png

    rail, split = runs["rail"], runs["split"]
    cases = [(rail, _event_id(rail, "dropout"), 0.5), (rail, _event_id(rail, "frame_gap"), 0.5),
             (split, _event_id(split, "brownout", "neg_v"), 0.5),
             (rail, _event_id(rail, "brownout"), 25.0)]  # 50,000 samples: drawn as an envelope
    for n, (run, event_id, pad) in enumerate(cases):
        window = around_event(run, event_id, pad, pad)
        event_png(window, tmp_path / f"{n}.png", run_limits(run))
    heights = [_png_shape(tmp_path / f"{n}.png")[0] for n in range(len(cases))]
    assert heights == [390, 650, 390, 390]  # the link event shows every channel
    _only(tmp_path, {"0.png", "1.png", "2.png", "3.png"})


def test_an_interrupted_plot_leaves_the_old_file_and_no_temporary(runs: dict[str, Path], tmp_path: Path,
                                                                  monkeypatch: pytest.MonkeyPatch) -> None:
    from matplotlib.figure import Figure

    from logger.review.plots import overview_png

    target = tmp_path / "all.png"
    target.write_bytes(b"the previous picture")

    def cut_short(self: Figure, fname: Path, **kwargs: object) -> None:
        Path(fname).write_bytes(PNG_SIGNATURE + b"half")
        raise KeyboardInterrupt

    monkeypatch.setattr(Figure, "savefig", cut_short)
    with pytest.raises(KeyboardInterrupt):
        overview_png(runs["rail"], target)
    assert target.read_bytes() == b"the previous picture"
    _only(tmp_path, {"all.png"})


def test_histogram_streamed_equals_numpy_over_every_sample(runs: dict[str, Path], tmp_path: Path) -> None:
    from logger.review.plots import histogram_counts, histogram_png

    run = runs["rail"]
    parts = sorted(run.glob("part-*.parquet"))
    assert len(parts) >= 3 and pq.ParquetFile(parts[0]).num_row_groups >= 3  # really streamed
    counts, edges = histogram_counts(run, "out_v", bins=120)
    whole = pq.read_table(parts, columns=["out_v"])["out_v"].to_numpy().astype(np.float64)
    # Reference: numpy.histogram over every sample at once, choosing its own 120 equal bins over the data's
    # range (a general-purpose library, not our code).
    expected, expected_edges = np.histogram(whole, bins=120)
    assert np.array_equal(counts, expected)
    assert np.array_equal(edges, expected_edges)
    histogram_png(run, "out_v", tmp_path / "h.png")
    assert _png_shape(tmp_path / "h.png") == (530, 1200, 4)
    _only(tmp_path, {"h.png"})


def _lines(text: object) -> list[str]:
    return str(text.plain).split("\n")  # type: ignore[attr-defined]


@pytest.mark.parametrize(("width", "height"), [(100, 14), (60, 6), (30, 4)])
def test_run_chart_fills_the_asked_size(runs: dict[str, Path], width: int, height: int) -> None:
    from logger.review.termplot import run_chart

    lines = _lines(run_chart(runs["rail"], "out_v", width, height))
    assert len(lines) == height
    assert [cell_len(line) for line in lines] == [width] * height
    assert lines[0].startswith("out_v (V), brownout below 10.8")


def test_event_chart_draws_a_negative_rail_as_its_size(runs: dict[str, Path]) -> None:
    from logger.review.termplot import event_chart

    split = runs["split"]
    lines = _lines(event_chart(split, _event_id(split, "brownout", "neg_v"), 80, 10, before_s=0.2, after_s=0.2))
    assert len(lines) == 10 and {cell_len(line) for line in lines} == {80}
    assert lines[0].startswith("|neg_v| (V), brownout below 13.5")
    top, bottom = float(lines[1].split("\u2524")[0]), float(lines[8].split("\u2524")[0])
    assert 15.0 < top < 16.0 and 5.0 < bottom < 6.5  # 15 V rail dipping to 40 %


def test_terminal_chart_refuses_a_size_too_small(runs: dict[str, Path]) -> None:
    from logger.review.termplot import run_chart

    with pytest.raises(ValueError, match="at least"):
        run_chart(runs["rail"], "out_v", 12, 10)
    with pytest.raises(StoreError, match="no channel 'nope'"):
        run_chart(runs["rail"], "nope")



def test_report_markdown_has_the_summary_the_overview_and_the_worst_events(runs: dict[str, Path],
                                                                          tmp_path: Path) -> None:
    from logger.review.report import report_markdown, worst_events

    run = runs["rail"]
    worst = worst_events(run, 3)
    assert [e["kind"] for e in worst] == ["dropout", "brownout", "link_lost"]  # deepest, then longest
    report = report_markdown(run, tmp_path / "out", worst=3)
    assert report == tmp_path / "out" / "report.md"
    pictures = {"overview.png", *(f"event-{e['id']}.png" for e in worst)}
    _only(tmp_path / "out", {"report.md", *pictures})
    text = report.read_text(encoding="utf-8")
    assert set(re.findall(r"!\[[^\]]*\]\(([^)]+)\)", text)) == pictures
    for name in pictures:
        _png_shape(tmp_path / "out" / name)
    assert "## Every event" in text and text.count("| frame_gap |") == 2  # in the summary and in the list


def test_report_html_is_one_self_contained_file_with_the_summary_numbers(runs: dict[str, Path],
                                                                         tmp_path: Path) -> None:
    import base64

    from logger.review.report import report_html
    from logger.review.summary import summarize

    run = runs["split"]
    page = report_html(run, tmp_path / "report.html").read_text(encoding="utf-8")
    _only(tmp_path, {"report.html"})
    sources = re.findall(r'src="([^"]*)"', page)
    assert len(sources) == 3 and all(s.startswith("data:image/png;base64,") for s in sources)  # overview, 2 dips
    assert all(base64.b64decode(s.split(",", 1)[1])[:8] == PNG_SIGNATURE for s in sources)
    rest = re.sub(r"data:image/png;base64,[A-Za-z0-9+/=]+", "", page)
    assert "http" not in rest and "url(" not in rest and "<link" not in rest and "<script" not in rest
    summary = summarize(run)
    assert f"{summary.samples:,} samples" in page
    from logger.figures import to_resolution

    for c in summary.channels:  # each figure to its channel's converter step
        assert (f"<td>{c.name}</td><td>{c.unit}</td><td>{to_resolution(c.minimum, c.resolution)}</td>"
                f"<td>{to_resolution(c.mean, c.resolution)}</td>") in page
    for r in summary.rails:
        assert f"<td>{r.rail}</td><td>{r.charge_ah:.6g} Ah</td><td>{r.energy_wh:.6g} Wh</td>" in page


def test_markdown_headings_tables_and_text_become_escaped_html(tmp_path: Path) -> None:
    from logger.review.report import markdown_html

    text = "# Run x\n\nline one & more\n#2 is not a heading\n\n| a | b |\n|---|---|\n| 1 | <2> |\n"
    assert markdown_html(text, tmp_path) == (
        "<h1>Run x</h1>\n<p>line one &amp; more<br>\n#2 is not a heading</p>\n<table>\n"
        "<thead><tr><th>a</th><th>b</th></tr></thead>\n<tbody>\n<tr><td>1</td><td>&lt;2&gt;</td></tr>\n"
        "</tbody>\n</table>")


def _rows(text: str) -> dict[tuple[str, str], list[str]]:
    """The comparison's table rows keyed by their first two cells."""
    rows = [[c.strip() for c in line.strip("|").split("|")] for line in text.splitlines() if line.startswith("| ")]
    return {(r[0], r[1]): r[2:] for r in rows if len(r) == 5}


def test_compare_shows_each_runs_own_summary_figures_and_b_minus_a(runs: dict[str, Path]) -> None:
    from logger.review.compare import compare_text
    from logger.review.summary import summarize

    a, b = summarize(runs["rail"]), summarize(runs["bench"])
    text = compare_text(runs["rail"], runs["bench"])
    rows = _rows(text)
    for name in ("out_v", "out_a"):
        mine, theirs = (next(c for c in s.channels if c.name == name) for s in (a, b))
        unit = f" ({mine.unit})"
        for label, x, y in (("min", mine.minimum, theirs.minimum), ("mean", mine.mean, theirs.mean),
                            ("max", mine.maximum, theirs.maximum), ("std", mine.std, theirs.std),
                            ("ripple p-p, typical", mine.ripple_pp[0], theirs.ripple_pp[0])):
            got = [float(v) for v in rows[(name, label + unit)]]
            step = mine.resolution  # each figure to its converter step: within half a step of the exact one
            assert mine.resolution == theirs.resolution and step is not None and step > 0
            assert got[:2] == pytest.approx([x, y], abs=step / 2 + 1e-9)
            assert got[2] == pytest.approx(y - x, abs=step / 2 + 1e-9)
    (ra,), (rb,) = a.rails, b.rails
    assert [float(v) for v in rows[("out", "energy (Wh)")][:2]] == pytest.approx([ra.energy_wh, rb.energy_wh],
                                                                                 rel=1e-5)
    assert rows[("brownout", "meter_v")] == ["0", "1", "+1"]
    assert rows[("frame_gap", "-")] == ["1", "0", "-1"]
    assert f"| samples | {a.samples:,} | {b.samples:,} | {b.samples - a.samples:+,} |" in text
    assert "note: channels only run B has (not compared): meter_v" in text
    backwards = _rows(compare_text(runs["bench"], runs["rail"]))
    assert float(backwards[("out_v", "mean (V)")][2]) == -float(rows[("out_v", "mean (V)")][2])


def test_an_event_zoom_is_scaled_to_its_data_with_a_far_limit_named_at_the_edge() -> None:
    """A flicker between 3.3 V and 4.5 V on a 7.3 V node with its overvoltage limit at 13.2 V: the zoom's axis
    spans the data and the 3.8 V threshold near it, and the far limit is named at the top edge instead of
    squeezing the flicker into the bottom of the picture (common practice, no source)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from logger.review.chart import Limits
    from logger.review.plots import _limit_lines

    fig, ax = plt.subplots()
    y = np.where(np.arange(1000) % 100 < 50, 3.3, 4.5)
    ax.plot(np.arange(1000), y)
    _limit_lines(ax, Limits("V", low=3.8, high=13.2, high_kind="overvoltage"), data=y)
    bottom, top = ax.get_ylim()
    assert 3.0 < bottom < 3.3 and 4.5 < top < 4.8
    texts = [t.get_text() for t in ax.texts]
    assert any("overvoltage limit 13.2 V" in t and "↑" in t for t in texts) and "3.8 V" in texts
    plt.close(fig)
