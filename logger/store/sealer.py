"""Sealing finished parts while the run goes on: each part's journal into Parquet, then its rollup.

A part whose journal is closed is handed to a thread of its own, so the recorder thread goes straight back to
the next journal and never waits for a seal. A recorder seals each part in a short-lived child process
(``python -m logger.store.sealer``): whatever memory decoding and encoding an hour of samples takes leaves with
the child, so the recorder stays the same size over a day; other writers (tests, tools) seal on the thread.
Parts are sealed one at a time and in order, since a part's rollup starts from the last sample of the part
before, and an empty part is kept only when no part before it holds rows (a run always has one part).

The child is given the run's lock (an inherited descriptor of the same ``flock``), so a recorder killed with
``kill -9`` leaves its run locked until the seal in flight has finished: recovery never works on a journal a
seal is still reading. A seal that fails (a full disk) is reported to the writer, which fails the run as it
would have done sealing in place; the journal stays for ``railtap recover``. A rollup that fails is derived
data, rebuilt when first read, and is not an error.
"""

from __future__ import annotations

import contextlib
import json
import os
import signal
import subprocess
import sys
from concurrent.futures import Future, ThreadPoolExecutor
from pathlib import Path
from typing import Any

import pyarrow as pa

from logger.store.episodes import link_episodes
from logger.store.files import to_json
from logger.store.layout import EVENTS_JOURNAL, EVENTS_PARQUET, journal_name, part_name
from logger.store.rollup import Pair, pairs_of, write_rollup
from logger.store.schema import event_schema
from logger.store.seal import SealedFile, event_parquet_options, seal_journal, write_empty


class SealFailed(Exception):
    """Sealing a part failed; ``cause`` is the error as raised where the seal ran, ``path`` what it was writing."""

    def __init__(self, cause: BaseException, path: Path) -> None:
        super().__init__(str(cause))
        self.cause = cause
        self.path = path


def seal_part(folder: Path, index: int, start: dict[str, Any], *, keep_empty: bool, pairs: list[Pair],
              gap: int) -> SealedFile | None:
    """Seal part ``index``'s journal into its Parquet file and write its rollup; None when it held no rows
    and ``keep_empty`` is False.

    Raises:
        SealFailed: the seal itself failed; the journal is untouched.
    """
    target = folder / part_name(index)
    try:
        sealed = seal_journal(folder / journal_name(index), target, run_metadata=start, part_index=index,
                              time_column="utc", keep_empty=keep_empty)
    except (OSError, pa.ArrowException) as exc:
        raise SealFailed(exc, target) from None
    if sealed is not None:
        with contextlib.suppress(Exception):  # derived data: a reader that finds it missing writes it again
            write_rollup(folder, index, pairs, gap)
    return sealed


def seal_events(folder: Path, start: dict[str, Any]) -> None:
    """Seal the event journal into ``_events.parquet`` with each episode's rows linked, or write an empty
    event table when no event was recorded.

    Raises:
        SealFailed: as for :func:`seal_part`.
    """
    target = folder / EVENTS_PARQUET
    journal = folder / EVENTS_JOURNAL
    try:
        sealed = None
        if journal.exists():
            sealed = seal_journal(journal, target, run_metadata=start, part_index=None, time_column="start",
                                  options_for=event_parquet_options)
        if sealed is None:
            write_empty(target, event_schema(), run_metadata=start, part_index=None, options_for=event_parquet_options)
        else:
            link_episodes(target)
    except (OSError, pa.ArrowException) as exc:
        raise SealFailed(exc, target) from None


class PartSealer:
    """Seals closed parts in order on a thread of its own, each in a child process (``in_child``) or here.

    The recorder thread calls :meth:`add` and later :meth:`collect`; the thread only runs jobs. Results travel
    back in futures, so no container is shared between the two.
    """

    def __init__(self, folder: Path, start: dict[str, Any], gap: int, *, in_child: bool = True,
                 lock_fd: int | None = None) -> None:
        self.folder = folder
        self.start = start
        self.pairs = pairs_of(start)
        self.gap = gap
        self.in_child = in_child and os.name == "posix"  # the lock is handed down as a POSIX descriptor
        self.lock_fd = lock_fd
        self._pool: ThreadPoolExecutor | None = None
        self._pending: list[Future[SealedFile | None]] = []
        self._sealed_any = False  # touched by the sealing thread only

    def add(self, index: int) -> None:
        """Queue part ``index`` (its journal closed) for sealing."""
        self._submit(index)

    def add_events(self) -> None:
        """Queue the event journal (closed: the run is ending) for sealing, after every part."""
        self._submit(None)

    def _submit(self, index: int | None) -> None:
        if self._pool is None:
            self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="railtap-sealer")
        self._pending.append(self._pool.submit(self._seal, index))

    def collect(self, wait: bool = False) -> list[SealedFile]:
        """Parts sealed since the last call, in order (all queued ones with ``wait``).

        Raises:
            SealFailed: a part could not be sealed; parts after it are not reported.
        """
        done: list[SealedFile] = []
        while self._pending and (wait or self._pending[0].done()):
            sealed = self._pending.pop(0).result()
            if sealed is not None:
                done.append(sealed)
        return done

    def shutdown(self, cancel: bool = False) -> None:
        """Stop the thread once the part being sealed is done, and the queued ones unless ``cancel`` (results
        not collected before are lost)."""
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=cancel)
            self._pool = None

    def _seal(self, index: int | None) -> SealedFile | None:
        job = {"folder": str(self.folder), "index": index, "start": self.start, "keep_empty": not self._sealed_any,
               "gap": self.gap}
        sealed = _in_child(job, self.lock_fd) if self.in_child else run_job(job)
        self._sealed_any = self._sealed_any or sealed is not None
        return sealed


def run_job(job: dict[str, Any]) -> SealedFile | None:
    """Run one sealing job as described by ``job`` (what the child process reads on its standard input): a part
    by its ``index``, or the event journal when the index is None."""
    start = job["start"]
    if job["index"] is None:
        seal_events(Path(job["folder"]), start)
        return None
    return seal_part(Path(job["folder"]), job["index"], start, keep_empty=job["keep_empty"], pairs=pairs_of(start),
                     gap=job["gap"])


def _in_child(job: dict[str, Any], lock_fd: int | None) -> SealedFile | None:
    """Run ``job`` in a fresh Python process holding the run's lock, in a session of its own so a Ctrl-C meant
    for the recorder (which then closes the run cleanly) does not cut a seal short."""
    done = subprocess.run([sys.executable, "-m", "logger.store.sealer"], input=to_json(job), capture_output=True,
                          text=True, start_new_session=True, check=False,
                          pass_fds=() if lock_fd is None else (lock_fd,))
    lines = done.stdout.strip().splitlines()
    try:
        answer = json.loads(lines[-1])
    except (IndexError, ValueError):
        trace = done.stderr.strip().splitlines()
        why = trace[-1] if trace else f"exit status {done.returncode}"
        raise SealFailed(RuntimeError(f"the sealing process failed ({why})"), Path(job["folder"])) from None
    if "error" in answer:
        error = answer["error"]
        cause: BaseException = (OSError(error["errno"], error["strerror"], error["filename"])
                                if error.get("errno") is not None else RuntimeError(error["text"]))
        raise SealFailed(cause, Path(error["path"]))
    return SealedFile(**answer["sealed"]) if answer["sealed"] is not None else None


def _main() -> int:
    """The child: read a job on standard input, seal, print one JSON line with the result or the error."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    job = json.loads(sys.stdin.read())
    try:
        sealed = run_job(job)
    except SealFailed as exc:
        cause = exc.cause
        error = {"path": str(exc.path), "text": str(cause)}
        if isinstance(cause, OSError):
            error |= {"errno": cause.errno, "strerror": cause.strerror, "filename": cause.filename}
        print(json.dumps({"error": error}))
        return 1
    print(json.dumps({"sealed": sealed.as_dict() if sealed is not None else None}))
    return 0


if __name__ == "__main__":
    sys.exit(_main())
