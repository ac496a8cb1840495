"""The ``railtap`` command: turns arguments into calls on the parts, and errors into one plain line."""

from __future__ import annotations

import argparse
import os
import signal
import sys
import threading
from datetime import datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pyarrow as pa

from logger import __version__
from logger.act.command import add_options as add_on_event_options
from logger.act.command import on_event_from_args, on_event_outlet, split_command
from logger.act.runner import ActError
from logger.cal.assess import MODELS
from logger.cal.capture import DEFAULT_MAX_SD, DEFAULT_SAMPLES
from logger.cal.session import CalError
from logger.console import print_status, report
from logger.durations import duration_arg
from logger.ingest import Pipeline, Settings
from logger.plan import PlanError, add_plan_command
from logger.review.command import add_review_commands
from logger.rig import Rig, RigError, demo_rig_text, load_rig
from logger.sim.spec import ScenarioError
from logger.sources.base import Source, SourceError
from logger.store import StoreError
from logger.store.check import check_readable
from logger.store.files import check_writable

if TYPE_CHECKING:
    from logger.sim.scenario import Scenario


DEFAULT_SCENARIO = "demo-bench"
"""The simulated rig of ``railtap demo`` and ``--sim``; ``railtap rig init`` writes its rig file."""


class UsageError(Exception):
    """A command line that cannot work; the message says what to do instead."""


def main(argv: list[str] | None = None) -> int:
    parser = _parser()
    try:
        argv, on_event_command = split_command(sys.argv[1:] if argv is None else argv)
        args = parser.parse_args(argv)
        if not hasattr(args, "run"):
            parser.print_help()
            return 2
        args.acting = on_event_from_args(args, on_event_command)
        return args.run(args)
    except (UsageError, RigError, ScenarioError, SourceError, StoreError, CalError, PlanError, ActError) as exc:
        print(f"railtap: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        return 130
    except BrokenPipeError:  # output cut short by `| head`: not an error worth a traceback
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 141
    except OSError as exc:
        where = f"{exc.filename}: " if exc.filename else ""
        print(f"railtap: {where}{exc.strerror or exc}", file=sys.stderr)
        return 1
    except pa.ArrowException as exc:  # a damaged page inside a file that opened: one line, not a traceback
        print(f"railtap: reading the run failed ({' '.join(str(exc).split())}); a file in it is damaged: move the "
              "damaged part out of the run folder, or recover the run from its journal", file=sys.stderr)
        return 1


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="railtap", description="Calibrated, crash-safe logging of DC rails.")
    p.add_argument("--version", action="version", version=f"railtap {__version__}")
    sub = p.add_subparsers(title="commands", metavar="COMMAND")

    rec = sub.add_parser("record", help="record a rig to a run folder, without a screen")
    _source_options(rec)
    _record_options(rec)
    rec.set_defaults(run=cmd_record)

    live = sub.add_parser("live", help="record a rig to a run folder, watching it on the live screen")
    live.add_argument("port_arg", nargs="?", metavar="PORT", help="serial port or pyserial URL (same as --port)")
    _source_options(live)
    _record_options(live)
    _screen_options(live)
    live.set_defaults(run=cmd_live)

    demo = sub.add_parser("demo", help="record the built-in simulated rig (no hardware needed)")
    _record_options(demo)
    demo.add_argument("--speed", type=float, default=1.0, help="simulated seconds per real second")
    demo.add_argument("--seed", type=int, default=1, help="random seed of the simulated rig")
    demo.add_argument("--scenario", metavar="NAME|FILE", help=f"a simulated scenario (default: {DEFAULT_SCENARIO})")
    demo.add_argument("--headless", action="store_true", help="status lines instead of the live screen")
    _screen_options(demo)
    demo.set_defaults(run=cmd_demo)

    watch = sub.add_parser("watch", help="every bench publishing to an MQTT broker on one screen (or in a browser)")
    watch.add_argument("url", metavar="URL", help="the broker and prefix the benches publish to: mqtt://HOST/PREFIX")
    watch.add_argument("--serve", action="store_true", help="serve the screen to web browsers instead")
    watch.add_argument("--host", default="127.0.0.1",
                       help="with --serve: the address to listen on (default 127.0.0.1, this machine only)")
    watch.add_argument("--port", type=int, default=8470, help="with --serve: the port to listen on (default 8470)")
    add_on_event_options(watch)
    watch.set_defaults(run=cmd_watch)

    sim = sub.add_parser("sim", help="serve the simulated rig on a pseudo-terminal, or list its scenarios")
    sim.add_argument("--pty", action="store_true", help="serve on a new pseudo-terminal")
    sim.add_argument("--list", action="store_true", help="list the shipped scenarios")
    sim.add_argument("--scenario", metavar="NAME|FILE", help=f"a simulated scenario (default: {DEFAULT_SCENARIO})")
    sim.add_argument("--speed", type=float, default=1.0,
                     help="simulated seconds per real second (0 = as fast as the reader takes it, nothing dropped)")
    sim.add_argument("--seed", type=int, default=1, help="random seed of the simulated rig")
    sim.add_argument("--write-rig", type=Path, metavar="FILE", help="also write the scenario's rig file here")
    sim.add_argument("--link", type=Path, metavar="PATH",
                     help="also name the pseudo-terminal PATH (a symlink), so a restarted simulator keeps its port")
    sim.set_defaults(run=cmd_sim)

    cal = sub.add_parser("cal", help="calibrate a channel against a reference meter (or from a CSV of points)")
    cal.add_argument("channel", help="the rig channel to calibrate, e.g. out_v")
    _source_options(cal)
    what = cal.add_mutually_exclusive_group()
    what.add_argument("--csv", type=Path, metavar="FILE", help="fit points from a CSV (columns reference,counts)")
    what.add_argument("--one-point", action="store_true", help="quick fix: adjust the gain only, from one point")
    what.add_argument("--zero", action="store_true", help="zero a current channel with no current flowing")
    cal.add_argument("--samples", type=int, default=DEFAULT_SAMPLES, help="raw samples averaged per point")
    cal.add_argument("--max-sd", type=float, default=DEFAULT_MAX_SD,
                     help="refuse a point noisier than this many counts (standard deviation)")
    cal.add_argument("--model", default="auto", choices=("auto", *MODELS), help="curve to save (default: recommended)")
    cal.add_argument("--out", type=Path, metavar="FILE", help="profile file (default: the rig's, or cal/CHANNEL.json)")
    cal.add_argument("--reference-note", default="", help="the reference instrument, e.g. its model and last check")
    cal.add_argument("--temperature-note", default="", help="e.g. 23 C bench, tap warmed up 20 min")
    cal.add_argument("--due-days", type=int, default=365, help="days until the profile is due again (0: never)")
    cal.add_argument("--u-ref", metavar="VALUE",
                     help="standard uncertainty of the reference readings, in the channel's unit, if known "
                          "(e.g. 0.001 or 1m)")
    cal.set_defaults(run=cmd_cal)

    recal = sub.add_parser("recal", help="calibrate a recorded run again from its raw counts with new profiles")
    recal.add_argument("folder", type=Path, metavar="RUN", help="the run folder")
    recal.add_argument("--profile", type=Path, action="append", required=True, metavar="FILE",
                       help="a calibration profile (repeat for more channels); its channel is named inside it")
    recal.set_defaults(run=cmd_recal)

    ports = sub.add_parser("ports", help="list serial ports")
    ports.set_defaults(run=cmd_ports)

    recover = sub.add_parser("recover", help="seal the parts of runs cut short by a crash or power loss")
    recover.add_argument("paths", nargs="*", type=Path, default=[Path("runs")],
                         help="run folders, or folders of runs (default: runs)")
    recover.set_defaults(run=cmd_recover)

    rig = sub.add_parser("rig", help="write or check a rig file")
    rig_sub = rig.add_subparsers(title="rig commands", metavar="ACTION", required=True)
    init = rig_sub.add_parser("init", help="write a commented example rig file")
    init.add_argument("file", type=Path)
    init.set_defaults(run=cmd_rig_init)
    check = rig_sub.add_parser("check", help="read a rig file and show what it describes")
    check.add_argument("file", type=Path)
    check.set_defaults(run=cmd_rig_check)

    add_plan_command(sub)
    add_review_commands(sub)
    return p


def _source_options(p: argparse.ArgumentParser) -> None:
    where = p.add_mutually_exclusive_group()
    where.add_argument("--port", help="serial port or pyserial URL (COM5, /dev/ttyACM0, socket://host:7000)")
    where.add_argument("--sim", action="store_true", help="the built-in simulated rig")
    where.add_argument("--replay", type=Path, metavar="FILE", help="a raw capture (_raw.arrows or plain bytes)")
    p.add_argument("--rig", type=Path, help="rig file (default with --sim: the scenario's own)")
    p.add_argument("--baud", type=int,
                   help="baud rate (default: the rig file's, else 1000000, the reference firmware's)")
    p.add_argument("--speed", type=float, default=None,
                   help="for --sim and --replay: simulated seconds per real second (0 = as fast as possible)")
    p.add_argument("--seed", type=int, default=1, help="random seed of the simulated rig")
    p.add_argument("--start", metavar="DATE-TIME",
                   help="with --replay of a plain byte dump (no arrival times): the UTC date-time of its first "
                        "sample, e.g. 2026-11-30T22:15:00Z (default: the file's modification time)")
    p.add_argument("--scenario", metavar="NAME|FILE",
                   help=f"with --sim: a simulated scenario (`railtap sim --list`; default {DEFAULT_SCENARIO})")


def _record_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--out", type=Path, default=Path("runs"), help="folder that holds run folders (default: runs)")
    p.add_argument("--label", default="", help="words for the run folder's name (default: the rig's name)")
    p.add_argument("--duration", type=duration_arg, metavar="TIME",
                   help="stop after this much device time: seconds, or 90s, 10m, 1h30m, 12h")
    p.add_argument("--part-minutes", type=float, default=60.0, help="start a new Parquet part this often")
    p.add_argument("--keep-raw", action="store_true", help="also keep the raw bytes, for replay")
    p.add_argument("--quiet", action="store_true", help="no status lines, only the final summary")
    p.add_argument("--publish", metavar="URL",
                   help="also publish to an MQTT broker: mqtt://HOST[:PORT]/PREFIX (mqtts:// for TLS; login from "
                        "RAILTAP_MQTT_USER and RAILTAP_MQTT_PASSWORD)")
    p.add_argument("--bench", metavar="NAME", help="this bench's name under the prefix (default: --label, else the "
                                                    "rig's name)")
    add_on_event_options(p)


def _screen_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--no-record", action="store_true",
                   help="watch without recording; press w on the screen to start (and stop) a run")


# -- commands ----------------------------------------------------------------------------------------


def cmd_record(args: argparse.Namespace) -> int:
    rig = _rig(args)
    return _record(_source(args, rig), rig, args)


def cmd_live(args: argparse.Namespace) -> int:
    if args.port_arg is not None:
        if args.port is not None or args.sim or args.replay is not None:
            raise UsageError("give the port once: either PORT or --port, and not with --sim or --replay")
        args.port = args.port_arg
    rig = _rig(args)
    return _record(_source(args, rig), rig, args, screen=True)


def cmd_demo(args: argparse.Namespace) -> int:
    scenario = _scenario(args.scenario or DEFAULT_SCENARIO)
    source = _sim_source(scenario, args.speed, args.seed, args.duration)
    if args.headless:
        print(f"railtap demo: recording the simulated rig {scenario.name!r} ({scenario.description}); "
              "Ctrl-C stops.", file=sys.stderr)
    return _record(source, scenario.rig, args, screen=not args.headless)


def cmd_watch(args: argparse.Namespace) -> int:
    from logger.publish import AddressError, parse_broker

    try:
        broker = parse_broker(args.url)
    except AddressError as exc:
        raise UsageError(str(exc)) from None
    if args.serve:
        if args.acting is not None:
            raise UsageError("--on-event runs on the watcher of a terminal, not on each browser's: leave it out of "
                             "--serve and run a watcher with it apart")
        from logger.watch.serve import serve

        return serve(args.url, args.host, args.port)
    if args.host != "127.0.0.1" or args.port != 8470:
        raise UsageError("--host and --port are for --serve")
    from logger.act.runner import CommandRunner
    from logger.watch import WatchApp
    from logger.watch.feed import Feed

    on = args.acting
    runner = None if on is None else CommandRunner(on.command, on.kinds, timeout_s=on.timeout_s, show_output=False)
    try:
        WatchApp(Feed(broker), broker.prefix, broker.url, runner=runner).run()
    finally:
        if runner is not None:
            runner.close()
            print(f"railtap: {runner.summary()}", file=sys.stderr)
    return 0


def cmd_sim(args: argparse.Namespace) -> int:
    from logger.sources.pty_server import serve_on_pty

    if args.list:
        from logger.sim.scenario import load_scenario, scenario_names

        for name in scenario_names():
            print(f"{name:20} {load_scenario(name).description}")
        return 0
    if not args.pty:
        raise UsageError("say --pty to serve the simulated rig, or --list to see its scenarios")
    if not 0 <= args.speed < float("inf"):
        raise UsageError(f"--speed {args.speed:g}: give 0 (as fast as the reader takes it) or a positive speed")
    stop = threading.Event()
    _on_signals(lambda: stop.set())
    scenario = _scenario(args.scenario or DEFAULT_SCENARIO)
    rig_file = args.write_rig or Path(f"{scenario.name}.rig.toml")
    if args.write_rig is not None:
        args.write_rig.write_text(scenario.rig.text, encoding="utf-8")
        how = f"its rig file is {rig_file}"
    else:
        how = f"write its rig file with `railtap sim --scenario {scenario.name} --pty --write-rig {rig_file}`"

    def ready(path: str) -> None:
        if args.link is not None:
            args.link.unlink(missing_ok=True)
            args.link.symlink_to(path)
            path = str(args.link)
        print(f"simulated rig {scenario.name!r} on {path}; {how}; watch it with "
              f"`railtap live {path} --rig {rig_file}`; Ctrl-C stops", flush=True)

    device = scenario.make_device(args.seed)
    try:
        serve_on_pty(device, speed=args.speed, seed=args.seed, stop_event=stop, on_ready=ready)
    except KeyboardInterrupt:
        stop.set()
    finally:
        if args.link is not None and args.link.is_symlink():
            args.link.unlink()
    return 0


def _u_ref(text: str | None, unit: str) -> float | None:
    """``--u-ref`` in the channel's unit, SI prefixes allowed as the planner reads them (``1m``, ``500u``)."""
    if text is None:
        return None
    from logger.plan.values import PlanError, parse_value

    try:
        value = parse_value(text, unit if unit in ("V", "A") else "x", "--u-ref")
    except PlanError as exc:
        raise UsageError(str(exc)) from None
    if not value >= 0:
        raise UsageError(f"--u-ref: expected an uncertainty of zero or more, got {text!r}")
    return value


def cmd_cal(args: argparse.Namespace) -> int:
    from logger.cal import session

    rig = _rig(args)
    names = [ch.name for ch in rig.channels]
    if args.channel not in names:
        raise UsageError(f"{args.channel}: no such channel in {rig.source or rig.name}; it has {', '.join(names)}")
    ch, k = rig.channel(args.channel), names.index(args.channel)
    u_ref = _u_ref(args.u_ref, ch.unit)
    opts = session.CalOptions(args.samples, args.max_sd, args.model, args.out, args.reference_note,
                              args.temperature_note, args.due_days, u_ref)
    say = session.terminal_say
    if args.csv is not None:
        session.fit_and_save(rig, ch, session.points_from_csv(args.csv, u_ref), opts, say)
        return 0
    pipeline = Pipeline(_source(args, rig), rig, Settings(record_root=None))
    pipeline.start()
    try:
        session.wait_for_device(pipeline)
        bits, vref = pipeline.header.adc_bits, pipeline.header.vref_mv
        if args.zero:
            session.zero(pipeline, rig, ch, k, opts, input, say)
        elif args.one_point:
            points = session.collect_points(pipeline, ch, k, opts, input, say, most=1)
            if not points:
                raise UsageError("no point taken; nothing saved")
            session.one_point(rig, ch, points[0], opts, say, bits, vref)
        else:
            points = session.collect_points(pipeline, ch, k, opts, input, say)
            session.fit_and_save(rig, ch, points, opts, say, bits, vref)
    except (KeyboardInterrupt, EOFError):
        print("\nrailtap: calibration given up; nothing saved", file=sys.stderr)
        return 130
    finally:
        pipeline.stop("calibration over")
    return 0


def cmd_recal(args: argparse.Namespace) -> int:
    from collections import Counter

    import pyarrow.parquet as pq

    from logger.cal.profile import ProfileError, load_profile
    from logger.store.recal import EVENTS, recalibrate

    try:
        profiles = [load_profile(path) for path in args.profile]
    except ProfileError as exc:
        raise UsageError(str(exc)) from None
    check_readable(args.folder)  # before its events are counted: a damaged file is named, nothing is touched
    events = args.folder / EVENTS

    def kinds() -> Counter[str]:
        return Counter(pq.read_table(events, columns=["kind"])["kind"].to_pylist()) if events.exists() else Counter()

    before = kinds()
    meta = recalibrate(args.folder, profiles, lambda s: print(f"railtap: {s}", file=sys.stderr, flush=True))
    after = kinds()
    for profile, path in zip(profiles, args.profile, strict=True):
        print(f"{args.folder}: {profile.channel} calibrated again with {path} ({profile.model}, "
              f"{len(profile.points)} points); {meta.get('rows', 0)} rows in {len(meta.get('parts', []))} part(s)")
    changed = [f"{k} {before[k]} -> {after[k]}" for k in sorted(set(before) | set(after)) if before[k] != after[k]]
    print("events detected again: " + (", ".join(changed) if changed else "the same counts as before"))
    return 0


def cmd_ports(args: argparse.Namespace) -> int:
    from logger.sources.serial_port import list_ports, no_ports_hint

    found = list_ports()
    for line in found:
        print(line)
    if not found:
        print(no_ports_hint(), file=sys.stderr)
    return 0


def cmd_recover(args: argparse.Namespace) -> int:
    from logger.store import find_unfinished

    runs: list[Path] = []
    for path in args.paths:
        if (path / "_run.json").exists():
            runs.append(path)
        elif path.is_dir():
            runs.extend(find_unfinished(path))
        else:
            raise UsageError(f"{path}: not a run folder or a folder of runs")
    if not runs:
        print("nothing to recover", file=sys.stderr)
    failed = 0
    for run in runs:  # one run that cannot be recovered does not hold up the others
        try:
            meta = _recover(run)
        except StoreError as exc:
            print(f"railtap: {exc}", file=sys.stderr)
            failed += 1
            continue
        print(f"{run}: {meta.get('status')}, {meta.get('rows', 0)} rows in {len(meta.get('parts', []))} part(s), "
              f"{meta.get('events', 0)} events")
        try:
            check_readable(run)
        except StoreError as exc:  # sealed, but a file in it is damaged: recovery cannot mend that, say so
            print(f"railtap: warning: {exc}", file=sys.stderr)
            failed += 1
    return 2 if failed else 0


def cmd_rig_init(args: argparse.Namespace) -> int:
    if args.file.exists():
        raise UsageError(f"{args.file} exists; choose another name or delete it first")
    args.file.write_text(demo_rig_text(), encoding="utf-8")
    print(f"wrote {args.file}; edit it to match your wiring, then `railtap rig check {args.file}`")
    return 0


def cmd_rig_check(args: argparse.Namespace) -> int:
    rig = load_rig(args.file)
    print(f"{args.file}: rig {rig.name!r}, {len(rig.channels)} channel(s)")
    for ch in rig.channels:
        scale = f"shunt {ch.shunt_ohm:g} ohm x gain {ch.gain:g}" if ch.role == "amps" else f"divider {ch.divider:g}"
        sign = ", negative rail" if ch.negative else ""
        nominal = f", nominal {ch.nominal:g} {ch.unit}" if ch.nominal is not None else ""
        print(f"  input {ch.input}: {ch.name} ({ch.role}, {scale}{sign}{nominal})")
        if ch.profile is not None:
            prof = ch.profile
            lo, hi = sorted(float(v) for v in prof.value(list(prof.span_counts)))
            print(f"    calibration profile {ch.profile_path} replaces that scaling: {prof.model}, "
                  f"{len(prof.points)} point(s), {lo:.4g} to {hi:.4g} {ch.unit}, made {prof.created[:10]}, "
                  f"due {prof.due or 'never'}")
    for warning in rig.warnings():
        print(f"warning: {warning}")
    return 0


# -- helpers -----------------------------------------------------------------------------------------


def _scenario(name: str) -> Scenario:
    """A shipped scenario by name, or a scenario file (imported here: only simulator commands need it)."""
    from logger.sim.scenario import load_scenario

    return load_scenario(name)


def _rig(args: argparse.Namespace) -> Rig:
    if args.rig is not None:
        return load_rig(args.rig)
    if args.scenario is not None:
        return _scenario(args.scenario).rig
    if args.port is not None:
        raise UsageError("--port needs --rig FILE to know what each input measures; "
                         "write one with `railtap rig init rig.toml`")
    return _scenario(DEFAULT_SCENARIO).rig


def _source(args: argparse.Namespace, rig: Rig) -> Source:
    if args.replay is not None:
        from logger.sources.replay import ReplaySource

        return ReplaySource(args.replay, speed=args.speed or 0.0)
    if args.port is not None or (rig.device.port and not args.sim and args.scenario is None):
        from logger.sources.serial_port import SerialSource

        return SerialSource(args.port or rig.device.port, args.baud or rig.device.baud)
    return _sim_source(_scenario(args.scenario or DEFAULT_SCENARIO), args.speed, args.seed, args.duration)


def _sim_source(scenario: Scenario, speed: float | None, seed: int, duration_s: float | None) -> Source:
    """The simulated rig, for the scenario's own length or ``duration_s`` (repeating it if it may)."""
    from logger.sources.simulated import SimSource

    return SimSource(scenario.make_device(seed), speed=1.0 if speed is None else speed,
                     duration_s=scenario.run_length_s(duration_s))


def _record(source: Source, rig: Rig, args: argparse.Namespace, screen: bool = False) -> int:
    """Record until stopped, showing the live screen (``screen``) or status lines; then seal and report."""
    acting = on_event_outlet(args.acting, rig, screen, args.quiet) if args.acting is not None else None
    check_writable(args.out)
    _recover_leftovers(args.out)
    # A recorder's Arrow buffers are small and short-lived (its parts are sealed in child processes): the C
    # library's allocator hands them back, where Arrow's default pool kept ~15 MB more (tests/bench/bench_memory.py).
    pa.set_memory_pool(pa.system_memory_pool())
    settings = Settings(
        record_root=args.out,
        label=args.label,
        part_seconds=args.part_minutes * 60.0,
        keep_raw=args.keep_raw,
        duration_s=args.duration,
        record_at_start=not getattr(args, "no_record", False),
        **_start_time(args),
    )
    for warning in rig.warnings():
        print(f"railtap: warning: {warning}", file=sys.stderr)
    pipeline = Pipeline(source, rig, settings, outlets=_outlets(args, rig) + ([acting] if acting is not None else []))
    pipeline.start()
    if args.run is cmd_record and not args.quiet:
        print(f"railtap record: {rig.name} from {source.name} into {args.out}/; Ctrl-C stops and seals the run",
              file=sys.stderr)
    hangup = threading.Event()

    def on_signal() -> None:
        pipeline.request_stop("stopped by signal")
        hangup.set()

    _on_signals(on_signal)
    failure = None
    try:
        if screen:
            from logger.tui import run_screen

            run_screen(pipeline, hangup)
        else:
            print_status(pipeline, args.quiet)
    except KeyboardInterrupt:
        pipeline.request_stop("stopped by user")
    except Exception as exc:  # the screen or the status log broke: the run is sealed and says so, never "by user"
        failure = f"the {'screen' if screen else 'status log'} stopped: {type(exc).__name__}: {exc}"
        pipeline.request_stop(f"failed: {failure}")
    finally:
        pipeline.request_stop(pipeline.stop_reason)
        _wait_for_seal(pipeline)
    code = report(pipeline)
    if acting is not None:
        print(f"railtap: {acting.runner.summary(last=screen)}", file=sys.stderr)  # the log said each problem
    if failure is not None:
        print(f"railtap: {failure}; the run is sealed (please report this)", file=sys.stderr)
        return 1
    return code


def _outlets(args: argparse.Namespace, rig: Rig) -> list[Any]:
    """What hears of the run beyond its screen and folder: a broker (``--publish``)."""
    outlets: list[Any] = []
    if args.publish:
        from logger.publish import AddressError, Publisher, bench_name, parse_broker, slug

        try:
            broker = parse_broker(args.publish)
            bench = bench_name(args.bench) if args.bench else slug(args.label or rig.name)
        except AddressError as exc:
            raise UsageError(f"--publish: {exc}") from None
        outlets.append(Publisher(broker, bench, rig.name, tuple(p.rail for p in rig.power_pairs())))
    elif args.bench:
        raise UsageError("--bench names this bench on a broker: give --publish mqtt://HOST/PREFIX too")
    return outlets


def _start_time(args: argparse.Namespace) -> dict[str, Any]:
    """Where the labels of a replay without arrival times start: ``--start``, else the file's own time."""
    if getattr(args, "start", None):
        if getattr(args, "replay", None) is None:
            raise UsageError("--start is for --replay (a live port or the simulator have their own clock)")
        try:
            when = datetime.fromisoformat(args.start)
        except ValueError:
            raise UsageError(f"--start {args.start!r}: not a date-time; write e.g. 2026-11-30T22:15:00Z") from None
        if when.tzinfo is None:
            raise UsageError(f"--start {args.start!r}: say the time zone, e.g. 2026-11-30T22:15:00Z or +01:00")
        return {"start_utc": when.timestamp(), "start_from": f"--start {args.start}"}
    replay = getattr(args, "replay", None)
    if replay is not None and replay.is_file():
        return {"start_utc": replay.stat().st_mtime, "start_from": f"the modification time of {replay}"}
    return {}


def _wait_for_seal(pipeline: Pipeline) -> None:
    """Wait until the parts are sealed, even through more Ctrl-C presses (the journal is safe either way)."""
    while True:
        try:
            if pipeline.wait(0.5):
                return
        except KeyboardInterrupt:
            print("railtap: sealing the run's parts, one moment (the journal keeps every sample meanwhile)",
                  file=sys.stderr, flush=True)


def _recover(run: Path) -> dict[str, Any]:
    """Seal a run cut short (its rail events are detected again from the samples)."""
    from logger.store import recover_run

    meta = recover_run(run)
    if meta.get("events_note"):
        print(f"railtap: {run}: {meta['events_note']}", file=sys.stderr)
    return meta


def _recover_leftovers(root: Path) -> None:
    from logger.store import find_unfinished

    if not root.is_dir():
        return
    for run in find_unfinished(root):
        try:
            meta = _recover(run)
        except StoreError as exc:  # an old run that cannot be sealed must not stop a new recording
            print(f"railtap: warning: {exc}; recording goes on, run `railtap recover {run}` later", file=sys.stderr)
            continue
        print(f"railtap: recovered {run} ({meta.get('rows', 0)} rows) left by an unclean stop", file=sys.stderr)


def _on_signals(handler: Any) -> None:
    """SIGTERM and SIGHUP stop as cleanly as Ctrl-C (an unattended run gets parts sealed either way)."""
    if threading.current_thread() is not threading.main_thread():
        return
    for name in ("SIGTERM", "SIGHUP"):
        sig = getattr(signal, name, None)
        if sig is not None:
            signal.signal(sig, lambda *_: handler())
