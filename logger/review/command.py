"""The after-the-test commands: ``railtap review``, ``railtap export`` (and their options).

Thin: each parses its options, calls the review modules and prints. Errors are :class:`StoreError` lines, which
the main command line prints with exit status 2.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from logger.review.progress import Bar
from logger.store.files import StoreError


def add_review_commands(sub: argparse._SubParsersAction) -> None:
    review = sub.add_parser("review", help="what happened in a run: summary, events, a look at an event")
    review.add_argument("folder", type=Path, metavar="RUN",
                        help="a run folder (or a folder of runs: one line per run)")
    review.add_argument("--full", action="store_true",
                        help="scan every sample instead of the per-second rollups (exact, slower)")
    review.add_argument("--event", type=int, metavar="N", help="show the samples around event number N")
    review.add_argument("--before", type=float, default=1.0, metavar="S", help="seconds before the event (1)")
    review.add_argument("--after", type=float, default=1.0, metavar="S", help="seconds after the event (1)")
    review.add_argument("--channels", metavar="A,B", help="channels to show (default: the event's, or all)")
    review.add_argument("--events", action="store_true", help="list every event")
    review.set_defaults(run=cmd_review)

    export = sub.add_parser("export", help="write a run's samples as CSV or JSON lines, for other tools")
    export.add_argument("folder", type=Path, metavar="RUN")
    export.add_argument("out", type=Path, metavar="FILE", help="FILE.csv or FILE.jsonl")
    export.add_argument("--from", dest="start", metavar="WHEN",
                        help="start: an offset from the run's start (90s, 10m, 1.5h) or a date-time")
    export.add_argument("--until", dest="end", metavar="WHEN", help="end, the same way")
    export.add_argument("--channels", metavar="A,B", help="channels to write (default: all)")
    export.add_argument("--counts", action="store_true", help="also write each channel's raw ADC counts")
    export.set_defaults(run=cmd_export)


def cmd_review(args: argparse.Namespace) -> int:
    from logger.review.text import events_text, summary_text, window_text

    folder: Path = args.folder
    if not (folder / "_run.json").exists():
        return _review_many(folder)
    channels = _channels(args.channels)
    if args.event is not None:
        from logger.review.window import around_event

        print(window_text(around_event(folder, args.event, args.before, args.after, channels)))
        return 0
    from logger.review.summary import summarize

    with Bar("scanning every sample") as bar:
        summary = summarize(folder, full=args.full, progress=bar)
    print(summary_text(summary))
    if args.events:
        print()
        print(events_text(folder))
    return 0


def _review_many(root: Path) -> int:
    from logger.review.runs import run_folders, runs_text, summarize_runs

    if not root.is_dir():
        raise StoreError(f"{root}: no such run folder")
    if not run_folders(root):
        raise StoreError(f"{root}: not a run folder (no _run.json) and no run folders in it")
    print(runs_text(summarize_runs(root)))
    return 0


def cmd_export(args: argparse.Namespace) -> int:
    from logger.review.export import export_samples, parse_when, run_start

    start = end = None
    if args.start or args.end:
        first = run_start(args.folder)
        start = parse_when(args.start, first) if args.start else None
        end = parse_when(args.end, first) if args.end else None
    with Bar(f"writing {args.out.name}") as bar:
        rows = export_samples(args.folder, args.out, start=start, end=end, channels=_channels(args.channels),
                              counts=args.counts, progress=bar)
    print(f"{args.out}: {rows:,} rows", file=sys.stderr)
    return 0


def _channels(text: str | None) -> list[str] | None:
    return [c.strip() for c in text.split(",") if c.strip()] if text else None
