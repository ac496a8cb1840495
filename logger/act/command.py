"""``--on-event KINDS -- COMMAND [ARGS...]`` on the recording commands: the options, and the outlet they ask for.

The command is everything after the ``--`` that follows ``--on-event KINDS``, taken from the command line before
argparse sees it: argparse cannot tell a command's own options (``curl -s``) from railtap's.
"""

from __future__ import annotations

import argparse
import shutil
import sys
from collections.abc import Sequence
from dataclasses import dataclass

from logger.act.outlet import CommandOutlet
from logger.act.runner import DEFAULT_TIMEOUT_S, ActError, CommandRunner, parse_kinds
from logger.durations import duration_arg
from logger.rig import Rig

OPTION = "--on-event"
EXAMPLE = "e.g. --on-event brownout,dropout -- notify-send 'rail dipped'"


def split_command(argv: Sequence[str]) -> tuple[list[str], list[str] | None]:
    """``argv`` without the command that follows ``--on-event KINDS --``, and that command (None without
    ``--on-event``). A ``--`` before any ``--on-event`` belongs to railtap's own arguments.

    Raises:
        ActError: ``--on-event`` without kinds or without a command after ``--``.
    """
    argv = list(argv)
    at = next((k for k, token in enumerate(argv) if token in ("--", OPTION) or token.startswith(f"{OPTION}=")),
              None)
    if at is None or argv[at] == "--":
        return argv, None
    rest = argv[at + 1:]
    if argv[at] == OPTION and (not rest or rest[0] == "--"):
        raise ActError(f"{OPTION} needs the kinds of event, then -- and the command to run; {EXAMPLE}")
    if "--" not in rest:
        raise ActError(f"{OPTION} needs -- and the command to run after its kinds; {EXAMPLE}")
    end = at + 1 + rest.index("--")
    command = argv[end + 1:]
    if not command:
        raise ActError(f"{OPTION}: no command after --; {EXAMPLE}")
    return argv[:end], command


def add_options(p: argparse.ArgumentParser) -> None:
    """``--on-event`` and its time limit, for a command that records."""
    p.add_argument(OPTION, metavar="KINDS", dest="on_event",
                   help="when an event of these kinds ends (comma-separated, or all), run the command given after "
                        "-- (last on the line), with the event in RAILTAP_* environment variables; no shell")
    p.add_argument("--on-event-timeout", type=duration_arg, metavar="TIME",
                   help=f"kill an --on-event command still running after this long (default {DEFAULT_TIMEOUT_S:g}s)")


@dataclass(frozen=True)
class OnEvent:
    """What ``--on-event`` asked for, checked: run ``command`` when an event of ``kinds`` ends."""

    command: tuple[str, ...]
    kinds: frozenset[str]
    timeout_s: float = DEFAULT_TIMEOUT_S


def on_event_from_args(args: argparse.Namespace, command: list[str] | None) -> OnEvent | None:
    """``--on-event`` and ``--on-event-timeout`` checked before anything starts (None without them).

    Raises:
        ActError: unknown kinds, no command, a time limit of 0 or without ``--on-event``, a program not found.
    """
    kinds_text = getattr(args, "on_event", None)
    timeout_s = getattr(args, "on_event_timeout", None)
    if kinds_text is None:
        if timeout_s is not None:
            raise ActError(f"--on-event-timeout is for {OPTION}; {EXAMPLE}")
        return None
    if command is None:
        raise ActError(f"{OPTION} {kinds_text}: no command; write -- and the command last on the line; {EXAMPLE}")
    kinds = parse_kinds(kinds_text, OPTION)
    if timeout_s is not None and not timeout_s > 0:
        raise ActError(f"--on-event-timeout {timeout_s:g}: give a time limit above 0, e.g. 30s or 2m")
    if shutil.which(command[0]) is None:
        raise ActError(f"{OPTION}: {command[0]}: no such program, or not executable (give its path, or a "
                       "program on PATH); it is run directly, not through a shell")
    return OnEvent(tuple(command), kinds, DEFAULT_TIMEOUT_S if timeout_s is None else timeout_s)


def on_event_outlet(on_event: OnEvent, rig: Rig, screen: bool, quiet: bool) -> CommandOutlet:
    """The outlet that runs the command. Under the live screen the commands' output is thrown away and their
    problems show in the link panel; without it, each problem (and unless ``quiet``, each command done) is a
    line on stderr."""
    runner = CommandRunner(on_event.command, on_event.kinds, timeout_s=on_event.timeout_s,
                           log=None if screen else _log, log_done=not screen and not quiet, show_output=not screen)
    return CommandOutlet(runner, rig)


def _log(line: str) -> None:
    print(f"railtap: {line}", file=sys.stderr, flush=True)
