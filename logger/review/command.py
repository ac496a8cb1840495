"""The after-the-test commands: ``railtap review``, ``export``, ``report`` and ``compare``.

Thin: each parses its options, calls the review modules and prints. Errors are :class:`StoreError` lines, which
the main command line prints with exit status 2. A review that had to leave out a damaged part prints its
figures, says so, and exits with :data:`INCOMPLETE`.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from logger.durations import duration_arg
from logger.review.progress import Bar
from logger.review.show import show
from logger.store.check import check_readable
from logger.store.files import StoreError

INCOMPLETE = 3
"""Exit status of a review that printed its figures without a part it could not read."""


def add_review_commands(sub: argparse._SubParsersAction) -> None:
    review = sub.add_parser("review", help="what happened in a run: summary, events, a look at an event")
    review.add_argument("folder", type=Path, metavar="RUN",
                        help="a run folder (or a folder of runs: one line per run)")
    review.add_argument("--full", action="store_true",
                        help="scan every sample instead of the per-second rollups (exact, slower)")
    review.add_argument("--event", type=int, metavar="N", help="show the samples around event number N")
    review.add_argument("--before", type=duration_arg, default=1.0, metavar="TIME",
                        help="time before the event: seconds, or 250ms, 2s, 1m (default 1)")
    review.add_argument("--after", type=duration_arg, default=1.0, metavar="TIME", help="time after the event (1)")
    review.add_argument("--channels", metavar="A,B", help="channels to show (default: the event's, or all)")
    review.add_argument("--events", action="store_true",
                        help="list every event (a flicker episode is one row; --dips lists its dips too)")
    review.add_argument("--kind", metavar="K,K", help="with --events: only these kinds (brownout,dropout...)")
    review.add_argument("--channel", metavar="C,C", help="with --events: only these channels")
    review.add_argument("--dips", action="store_true", help="with --events: also each dip inside a flicker episode")
    review.add_argument("--plot", type=Path, metavar="DIR",
                        help="also draw PNGs into DIR: the overview and a histogram per channel, or the event's zoom")
    review.add_argument("--term", action="store_true", help="also draw the channels (or the event) in the terminal")
    review.add_argument("--utc", action="store_true",
                        help="show times in UTC (default: this computer's local time, named on every output)")
    review.set_defaults(run=cmd_review)

    report = sub.add_parser("report", help="a run's report: Markdown with PNGs, or one self-contained HTML file")
    report.add_argument("folder", type=Path, metavar="RUN")
    where = report.add_mutually_exclusive_group(required=True)
    where.add_argument("--html", type=Path, metavar="FILE", help="one HTML file, pictures inside")
    where.add_argument("--md", type=Path, metavar="DIR", help="report.md and its PNGs in DIR")
    report.add_argument("--worst", type=int, default=5, metavar="N", help="zoom on the N worst events (5)")
    report.add_argument("--utc", action="store_true",
                        help="show times in UTC (default: this computer's local time, named on every output)")
    report.set_defaults(run=cmd_report)

    compare = sub.add_parser("compare", help="two runs side by side, with the difference B - A")
    compare.add_argument("a", type=Path, metavar="RUN_A")
    compare.add_argument("b", type=Path, metavar="RUN_B")
    compare.add_argument("--full", action="store_true", help="from every sample instead of the rollups")
    compare.add_argument("--utc", action="store_true",
                        help="show times in UTC (default: this computer's local time, named on every output)")
    compare.set_defaults(run=cmd_compare)

    export = sub.add_parser("export", help="write a run's samples as CSV or JSON lines, for other tools")
    export.add_argument("folder", type=Path, metavar="RUN")
    export.add_argument("out", type=Path, metavar="FILE", help="FILE.csv or FILE.jsonl")
    export.add_argument("--from", dest="start", metavar="WHEN",
                        help="start: an offset from the run's start (90s, 10m, 1h30m) or a date-time (local time "
                             "unless it ends in Z or +hh:mm)")
    export.add_argument("--until", dest="end", metavar="WHEN", help="end, the same way")
    export.add_argument("--channels", metavar="A,B", help="channels to write (default: all)")
    export.add_argument("--counts", action="store_true", help="also write each channel's raw ADC counts")
    export.set_defaults(run=cmd_export)


def cmd_review(args: argparse.Namespace) -> int:
    _zone(args)
    from logger.review.text import events_text, summary_text, window_text

    folder: Path = args.folder
    if not (folder / "_run.json").exists():
        return _review_many(folder)
    check_readable(folder, parts=args.event is not None)  # the summary leaves out a damaged part and says so
    channels = _channels(args.channels)
    if args.event is not None:
        from logger.review.window import around_event

        window = around_event(folder, args.event, args.before, args.after, channels)
        show(window_text(window))
        _event_pictures(folder, window, args)
        return 0
    from logger.review.summary import summarize

    with Bar("scanning every sample") as bar:
        summary = summarize(folder, full=args.full, progress=bar)
    show(summary_text(summary))
    if args.events:
        print()
        show(events_text(folder, _channels(args.kind), _channels(args.channel), unfold=args.dips))
    _run_pictures(folder, [c.name for c in summary.channels if not channels or c.name in channels], args)
    for line in summary.skipped:
        print(f"railtap: incomplete: {line}", file=sys.stderr)
    return INCOMPLETE if summary.skipped else 0


def _event_pictures(folder: Path, window, args: argparse.Namespace) -> None:
    if args.term:
        from logger.review.termplot import event_chart

        channel = window.samples.column_names[1] if window.samples.num_columns > 1 else None
        _print_chart(event_chart(folder, args.event, _width(), 16, args.before, args.after, channel))
    if args.plot is not None:
        from logger.review.chart import run_limits
        from logger.review.plots import event_png

        args.plot.mkdir(parents=True, exist_ok=True)
        drawn = event_png(window, args.plot / f"{folder.name}-event-{args.event}.png", run_limits(folder))
        print(f"drew {drawn}", file=sys.stderr)


def _run_pictures(folder: Path, channels: list[str], args: argparse.Namespace) -> None:
    if args.term:
        from logger.review.termplot import run_chart

        for channel in channels:
            _print_chart(run_chart(folder, channel, _width(), 14))
    if args.plot is not None:
        from logger.review.plots import histogram_png, overview_png

        args.plot.mkdir(parents=True, exist_ok=True)
        with Bar("drawing") as bar:
            drawn = [overview_png(folder, args.plot / f"{folder.name}-overview.png", channels)]
            for n, channel in enumerate(channels, start=1):
                drawn.append(histogram_png(folder, channel, args.plot / f"{folder.name}-histogram-{channel}.png"))
                bar(n, len(channels))
        print("drew " + ", ".join(str(p) for p in drawn), file=sys.stderr)


def _width() -> int:
    import shutil

    return max(shutil.get_terminal_size((100, 24)).columns, 16)


def _print_chart(text) -> None:
    from rich.console import Console

    Console(highlight=False, width=_width(), soft_wrap=True).print(text)


def cmd_report(args: argparse.Namespace) -> int:
    _zone(args)
    from logger.review.report import report_html, report_markdown

    check_readable(args.folder)
    with Bar("drawing the report") as bar:
        if args.html is not None:
            path = report_html(args.folder, args.html, args.worst, progress=bar)
        else:
            args.md.mkdir(parents=True, exist_ok=True)
            path = report_markdown(args.folder, args.md, args.worst, progress=bar)
    print(f"wrote {path}", file=sys.stderr)
    return 0


def cmd_compare(args: argparse.Namespace) -> int:
    _zone(args)
    from logger.review.compare import summaries_text
    from logger.review.summary import summarize

    check_readable(args.a)
    check_readable(args.b)
    a, b = summarize(args.a, full=args.full), summarize(args.b, full=args.full)
    show(summaries_text(a, b))
    return INCOMPLETE if a.skipped or b.skipped else 0


def _review_many(root: Path) -> int:
    from logger.review.runs import run_folders, runs_text, summarize_runs

    if not root.is_dir():
        raise StoreError(f"{root}: no such run folder")
    if not run_folders(root):
        from logger.store import find_unfinished

        cut = find_unfinished(root)
        if cut:
            raise StoreError(f"{root}: {len(cut)} run(s) here were cut short and are not sealed yet; seal them with "
                             f"`railtap recover {root}`")
        raise StoreError(f"{root}: not a run folder (no _run.json) and no run folders in it")
    lines = summarize_runs(root)
    show(runs_text(lines))
    return INCOMPLETE if any(line.summary is None or line.summary.skipped for line in lines) else 0


def cmd_export(args: argparse.Namespace) -> int:
    from logger.review.export import check_span, export_samples, parse_when, run_start

    check_readable(args.folder)
    start = end = None
    if args.start or args.end:
        first = run_start(args.folder)
        start = parse_when(args.start, first) if args.start else None
        end = parse_when(args.end, first) if args.end else None
        check_span(args.folder, start, end)
    with Bar(f"writing {args.out.name}") as bar:
        rows = export_samples(args.folder, args.out, start=start, end=end, channels=_channels(args.channels),
                              counts=args.counts, progress=bar)
    print(f"{args.out}: {rows:,} rows", file=sys.stderr)
    return 0


def _zone(args: argparse.Namespace) -> None:
    from logger.review.chart import show_utc

    show_utc(bool(getattr(args, "utc", False)))


def _channels(text: str | None) -> list[str] | None:
    return [c.strip() for c in text.split(",") if c.strip()] if text else None
