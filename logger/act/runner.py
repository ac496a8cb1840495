"""Runs a command for each event of the kinds asked for: never through a shell, a few at a time, each within
a time limit; commands that pile up are dropped, oldest first, and counted.

:class:`CommandRunner` takes an event as its kind and a plain mapping of field names to values (what a run's
event table holds, or what a broker carried), so any part that hears of events can act on them. It owns one
thread, which alone starts, watches and ends the commands and keeps their tally; callers only put events on
its queue (:meth:`CommandRunner.offer` never blocks) and read the frozen :class:`Tally` it publishes.

Each command runs in a session and process group of its own, with the event in its environment
(:mod:`logger.act.environ`) and nothing on its standard input. Past its time limit the whole group is killed.
A command that fails (a non-zero exit, a signal, a program that is missing or not executable) or is killed
costs one line through ``log``; the caller goes on regardless.
"""

from __future__ import annotations

import contextlib
import os
import queue
import signal
import subprocess
import threading
import time
from collections import deque
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from logger.act.environ import environment
from logger.events.model import KINDS

DEFAULT_TIMEOUT_S = 30.0
AT_ONCE = 4
"""Commands running at the same time, at most."""
WAITING = 16
"""Commands waiting for one of those places, at most; a newer one pushes out the oldest."""
CLOSE_S = 10.0
"""At the end, how long the commands still running or waiting are given (at most their own time limit)."""
POLL_S = 0.05
"""How often the runner's thread looks at its running commands (it sleeps on its queue while none run)."""


class ActError(Exception):
    """A command to run on events that cannot work; the message says what to give instead."""


def parse_kinds(text: str, option: str = "--on-event") -> frozenset[str]:
    """The event kinds in ``text``: a comma-separated list of :data:`logger.events.model.KINDS`, or ``all``.

    Raises:
        ActError: an unknown kind or an empty list, in one line that lists the known kinds.
    """
    names = [name.strip() for name in text.split(",") if name.strip()]
    if names == ["all"]:
        return frozenset(KINDS)
    unknown = [name for name in names if name not in KINDS]
    if unknown or not names:
        what = f"no kind of event is called {', '.join(unknown)}" if unknown else "no kinds given"
        raise ActError(f"{option} {text!r}: {what}; give a comma-separated list of {', '.join(KINDS)}, or all")
    return frozenset(names)


@dataclass(frozen=True, slots=True)
class Tally:
    """What the runner's thread has done so far. Every command it has taken ends in exactly one of ``ok``,
    ``failed``, ``timed_out``, ``dropped`` and ``cut_short``, or is still ``running`` or ``waiting``."""

    ok: int = 0
    failed: int = 0
    """Exited with a status other than 0, ended by a signal, or could not be started."""
    timed_out: int = 0
    """Still running at its time limit: killed, with its process group."""
    dropped: int = 0
    """Never started: pushed out of the waiting line by newer ones, or still waiting when the runner closed."""
    cut_short: int = 0
    """Still running when the runner closed and its last moments were over: killed, with its process group."""
    running: int = 0
    waiting: int = 0
    last_problem: str | None = None


@dataclass(slots=True)
class _Job:
    """One command to run for one event (the runner's thread's own)."""

    what: str
    env: dict[str, str]
    process: subprocess.Popen[bytes] | None = None
    started: float = 0.0


@dataclass(frozen=True, slots=True)
class _Close:
    grace_s: float


class CommandRunner:
    """Runs ``command`` for every event of ``kinds`` offered to it (see the module's docstring).

    Args:
        command: the program and its arguments, run as they are (no shell).
        kinds: the event kinds that run it.
        timeout_s: each command's time limit.
        at_once: commands running at once, at most.
        waiting: commands waiting to start, at most; past it, the oldest waiting one is dropped.
        log: receives one line for each problem (and each success, with ``log_done``), on the runner's thread.
        show_output: let the commands write to this process's standard output and error (else both are
            thrown away: under a full-screen display their text would garble it).
        name: how the lines and the summary name the runner.
        close_s: at the close, how long the commands still running or waiting are given, at most (never
            more than their own time limit).
    """

    def __init__(self, command: Sequence[str], kinds: Iterable[str], *, timeout_s: float = DEFAULT_TIMEOUT_S,
                 at_once: int = AT_ONCE, waiting: int = WAITING, log: Callable[[str], None] | None = None,
                 log_done: bool = False, show_output: bool = True, name: str = "on-event",
                 close_s: float = CLOSE_S) -> None:
        if not command:
            raise ActError(f"{name}: no command given")
        if not timeout_s > 0:
            raise ActError(f"{name}: the time limit must be above 0 s, not {timeout_s:g}")
        self.command = tuple(command)
        self.kinds = frozenset(kinds)
        self.timeout_s = timeout_s
        self.name = name
        self.program = os.path.basename(self.command[0])
        self.close_s = min(timeout_s, close_s)
        self._at_once = max(1, at_once)
        self._waiting_limit = max(1, waiting)
        self._log = log
        self._log_done = log_done
        self._output = None if show_output else subprocess.DEVNULL
        self._inherited = dict(os.environ)
        self._inbox: queue.SimpleQueue[tuple[str, dict[str, Any]] | _Close] = queue.SimpleQueue()
        self._tally = Tally()
        self._broken: str | None = None
        # The runner's thread's own state from here on, published as one Tally at the end of each round:
        self._running: list[_Job] = []
        self._queued: deque[_Job] = deque()
        self._counts = dict.fromkeys(("ok", "failed", "timed_out", "dropped", "cut_short"), 0)
        self._last_problem: str | None = None
        self.offered = 0
        """Events of the chosen kinds offered so far, each a command to run (counted by the offering thread)."""
        self._thread: threading.Thread | None = None
        """Started by the first event offered, so a runner that never hears of one leaves nothing behind."""
        self._closed = False

    # -- the caller's thread (one thread offers and closes); the tally from any thread -------------------

    def wants(self, kind: str) -> bool:
        """Whether an event of ``kind`` runs the command."""
        return kind in self.kinds

    def offer(self, kind: str, fields: Mapping[str, Any]) -> None:
        """Run the command for this event if its kind was asked for; returns at once.

        Raises:
            RuntimeError: the runner's thread has failed (so a pipeline drops this runner with a note).
        """
        if self._broken is not None:
            raise RuntimeError(self._broken)
        if kind not in self.kinds or self._closed:
            return
        if self._thread is None:
            self._thread = threading.Thread(target=self._serve, name=f"railtap-{self.name}", daemon=True)
            self._thread.start()
        self.offered += 1
        self._inbox.put((kind, dict(fields)))

    def tally(self) -> Tally:
        """What has been done so far (a frozen picture, safe from any thread)."""
        return self._tally

    def summary(self, last: bool = True) -> str:
        """One short line: what ran, failed, timed out, was dropped, and (``last``) the latest problem."""
        t = self._tally
        if not self.offered:
            return f"{self.name}: no command run yet"
        counts = [f"{t.ok} ok"] + [f"{n} {label}" for n, label in (
            (t.failed, "failed"), (t.timed_out, "timed out"), (t.cut_short, "cut short"), (t.dropped, "dropped"),
            (t.running, "running"), (t.waiting, "waiting")) if n]
        problem = f"; last: {t.last_problem}" if last and t.last_problem else ""
        return f"{self.name}: {', '.join(counts)}{problem}"

    def account(self) -> dict[str, Any]:
        """The tally for a run's ``_run.json``: counts and the program's name, never an event's values nor the
        command's arguments (they may hold a password or a token)."""
        t = self._tally
        kinds: Any = "all" if self.kinds == frozenset(KINDS) else sorted(self.kinds)
        ended = {"ok": t.ok, "failed": t.failed, "timed_out": t.timed_out, "dropped": t.dropped,
                 "cut_short": t.cut_short}
        return {"program": self.program, "kinds": kinds, "timeout_s": self.timeout_s, "commands": self.offered,
                **ended, "unfinished": self.offered - sum(ended.values())}

    def close(self) -> None:
        """Take no more events; give the commands running or waiting ``close_s`` to finish, then kill what
        still runs and drop what still waits."""
        self._closed = True
        if self._thread is None:
            return
        self._inbox.put(_Close(self.close_s))
        self._thread.join(self.close_s + 5.0)

    # -- the runner's thread ---------------------------------------------------------------------------

    def _serve(self) -> None:
        try:
            end_by: float | None = None
            while end_by is None or ((self._running or self._queued) and time.monotonic() < end_by):
                for message in self._messages(None if not self._running and end_by is None else POLL_S):
                    if isinstance(message, _Close):
                        end_by = time.monotonic() + message.grace_s if end_by is None else end_by
                    else:
                        self._queue(*message)
                self._reap()
                self._start_waiting()
                self._publish()
            self._end_leftovers()
        except Exception as exc:  # a bug: the caller hears of it at its next offer
            line = f"stopped: {type(exc).__name__}: {exc}"
            self._broken = f"{self.name} {line}"  # before the line is said: whoever hears it finds it set
            self._problem(line)
        finally:
            self._publish()

    def _messages(self, timeout: float | None) -> list[tuple[str, dict[str, Any]] | _Close]:
        """What has come: the first waited for up to ``timeout`` (None: until one comes), then the rest."""
        try:
            taken = [self._inbox.get(timeout=timeout)]
        except queue.Empty:
            return []
        with contextlib.suppress(queue.Empty):
            while True:
                taken.append(self._inbox.get_nowait())
        return taken

    def _queue(self, kind: str, fields: dict[str, Any]) -> None:
        """Line a command up; past the limit, the oldest waiting one is dropped."""
        if len(self._queued) >= self._waiting_limit:
            old = self._queued.popleft()
            self._count("dropped")
            self._problem(f"{old.what}: not run, dropped for a newer one ({self._waiting_limit} were waiting to start)")
        self._queued.append(_Job(describe(kind, fields), environment(kind, fields, self._inherited)))

    def _start_waiting(self) -> None:
        while self._queued and len(self._running) < self._at_once:
            job = self._queued.popleft()
            try:
                job.process = subprocess.Popen(self.command, env=job.env, stdin=subprocess.DEVNULL,
                                               stdout=self._output, stderr=self._output, start_new_session=True)
            except FileNotFoundError:
                self._failed(job, f"{self.program} could not start: no such program (check the command after --)")
                continue
            except PermissionError:
                self._failed(job, f"{self.program} could not start: not allowed to run it (is it executable?)")
                continue
            except OSError as exc:
                self._failed(job, f"{self.program} could not start: {exc.strerror or exc}")
                continue
            job.started = time.monotonic()
            self._running.append(job)

    def _reap(self) -> None:
        """Take the commands that have ended, and kill those past their time limit."""
        now = time.monotonic()
        for job in list(self._running):
            code = job.process.poll()
            if code is None and now < job.started + self.timeout_s:
                continue
            self._running.remove(job)
            if code is None:
                _kill_group(job.process)
                self._count("timed_out")
                self._problem(f"{job.what}: {self.program} still running after {self.timeout_s:g} s; killed its "
                              f"process group ({job.process.pid})")
            elif code == 0:
                self._count("ok")
                if self._log_done and self._log is not None:
                    self._log(f"{self.name} {job.what}: {self.program} done in {now - job.started:.1f} s")
            else:
                self._failed(job, _ending(self.program, code))

    def _end_leftovers(self) -> None:
        """At the close, once the grace is over: kill what still runs, drop what still waits."""
        self._reap()
        for job in self._running:
            _kill_group(job.process)
            self._count("cut_short")
            self._problem(f"{job.what}: {self.program} still running at the end; killed its process group "
                          f"({job.process.pid})")
        for job in self._queued:
            self._count("dropped")
            self._problem(f"{job.what}: not run, still waiting at the end")
        self._running, self._queued = [], deque()

    def _failed(self, job: _Job, why: str) -> None:
        self._count("failed")
        self._problem(f"{job.what}: {why}")

    def _count(self, what: str) -> None:
        self._counts[what] += 1

    def _problem(self, line: str) -> None:
        self._last_problem = line
        if self._log is not None:
            self._log(f"{self.name} {line}")

    def _publish(self) -> None:
        """Swap in the tally as of now: between rounds, every command is counted in exactly one place."""
        self._tally = Tally(**self._counts, running=len(self._running), waiting=len(self._queued),
                            last_problem=self._last_problem)


def describe(kind: str, fields: Mapping[str, Any]) -> str:
    """``brownout #3 on out_v``: the event's kind, its id and channel where it has them."""
    number = f" #{fields['id']}" if fields.get("id") is not None else ""
    where = f" on {fields['channel']}" if fields.get("channel") else ""
    return f"{kind}{number}{where}"


def _ending(program: str, code: int) -> str:
    if code < 0:
        with contextlib.suppress(ValueError):
            return f"{program} was ended by {signal.Signals(-code).name}"
        return f"{program} was ended by signal {-code}"
    return f"{program} exited with status {code}"


def _kill_group(process: subprocess.Popen[bytes]) -> None:
    """Kill a command and every process in its group (it leads a session of its own), then reap it."""
    if os.name == "posix":
        with contextlib.suppress(ProcessLookupError, PermissionError):
            os.killpg(process.pid, signal.SIGKILL)
    else:
        process.kill()
    process.wait()
