"""Small file-system helpers of the store: the error type, durable writes, the run lock, time text.

Everything that must survive a crash or a power cut goes through here: ``fsync`` of files and of their
folder, atomic replacement of ``_run.json``, and the ``_run.lock`` that a writer holds while a run is open.
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
import tempfile
from datetime import UTC, date, datetime
from pathlib import Path
from typing import Any

try:  # POSIX
    import fcntl
except ImportError:  # Windows
    fcntl = None  # type: ignore[assignment]
try:  # Windows
    import msvcrt
except ImportError:  # POSIX
    msvcrt = None  # type: ignore[assignment]

RUN_JSON = "_run.json"
LOCK_FILE = "_run.lock"


class StoreError(RuntimeError):
    """A run could not be written or recovered. The message is one line: what, which file, what to do."""


def os_error_text(exc: OSError, path: Path | str) -> str:
    """One-line description of an OS error while writing ``path``: 'disk full writing /x/y'."""
    reasons = {
        errno.ENOSPC: "disk full",
        errno.EDQUOT: "disk quota exceeded",
        errno.EACCES: "permission denied",
        errno.EPERM: "permission denied",
        errno.EROFS: "read-only file system",
        errno.ENOTDIR: "a path component is not a folder",
        errno.ENOENT: "folder does not exist",
        errno.EIO: "I/O error (failing disk or removed drive?)",
    }
    reason = reasons.get(exc.errno or 0) or (exc.strerror or type(exc).__name__).lower()
    return f"{reason} writing {path}"


def one_line(text: str, limit: int = 200) -> str:
    """``text`` squeezed onto one line and cut to ``limit`` characters (for error messages)."""
    flat = " ".join(text.split())
    return flat if len(flat) <= limit else flat[: limit - 3] + "..."


def fsync_dir(folder: Path) -> None:
    """Make file creations, renames and deletions in ``folder`` durable (a no-op where unsupported)."""
    if os.name != "posix":
        return
    fd = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _json_default(value: Any) -> Any:
    """Turn the odd non-JSON value of a metadata dict into something readable."""
    if isinstance(value, datetime) and value.tzinfo is not None:
        return utc_text(value)
    if isinstance(value, datetime | date):
        return value.isoformat()
    if hasattr(value, "item"):  # numpy scalar
        return value.item()
    return str(value)


def to_json(data: dict[str, Any]) -> str:
    """JSON text of a metadata dict; datetimes become ISO text, paths and other objects their str()."""
    return json.dumps(data, indent=2, default=_json_default, ensure_ascii=False)


def write_json_atomic(path: Path, data: dict[str, Any]) -> None:
    """Write ``data`` as JSON through a temporary file and ``os.replace``, so readers never see half a file.

    Raises:
        OSError: As raised by the file system; callers turn it into a StoreError with advice.
    """
    tmp = path.with_name(path.name + ".tmp")
    text = to_json(data) + "\n"
    with open(tmp, "w", encoding="utf-8") as handle:
        handle.write(text)
        handle.flush()
        os.fsync(handle.fileno())
    os.replace(tmp, path)
    fsync_dir(path.parent)


def check_writable(folder: Path) -> None:
    """Make ``folder`` if needed and prove that a file can be written in it, before a recording starts: a wrong
    or read-only output folder is one line at the start, not a failure once samples are flowing.

    Raises:
        StoreError: naming the folder and the reason (read-only, permission, not a folder...).
    """
    try:
        folder.mkdir(parents=True, exist_ok=True)
        handle, name = tempfile.mkstemp(prefix="_railtap-check-", suffix=".tmp", dir=folder)
        os.close(handle)
        os.unlink(name)
    except OSError as exc:
        raise StoreError(f"{os_error_text(exc, folder)}; choose an output folder you can write to (--out)") from None


RUN_JSON_TYPES: dict[str, type] = {
    "parts": list, "link": dict, "clock": dict, "power_pairs": list, "channels_info": list, "calibration": dict,
    "calibration_changes": list, "calibration_history": list, "status": str, "stop_reason": str, "rows": int,
    "events": int,
}
"""The keys readers rely on, and what each must be."""
_KIND_WORDS = {list: "list", dict: "table (JSON object)", str: "text", int: "whole number"}


def read_run_json(folder: Path) -> dict[str, Any]:
    """The run metadata of ``folder``.

    Raises:
        StoreError: ``_run.json`` is missing, is not a JSON object, or a key readers rely on has the wrong type.
    """
    path = folder / RUN_JSON
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise StoreError(f"{folder} is not a railtap run: {RUN_JSON} is missing") from None
    except (OSError, ValueError) as exc:
        raise StoreError(f"{path} is unreadable or not JSON ({one_line(str(exc))}); fix it by hand") from None
    if not isinstance(data, dict):
        raise StoreError(f"{path} is not a JSON object; fix or remove it by hand")
    for key, kind in RUN_JSON_TYPES.items():
        if key in data and data[key] is not None and not isinstance(data[key], kind):
            raise StoreError(f"{path}: {key!r} should be a {_KIND_WORDS[kind]}, not {type(data[key]).__name__}; "
                             "fix it by hand (the samples do not depend on it)")
    return data


def utc_text(value: datetime | int | None) -> str | None:
    """ISO 8601 UTC text with microseconds, from a datetime or from integer µs since the epoch."""
    if value is None:
        return None
    if isinstance(value, int):
        value = datetime.fromtimestamp(value // 1_000_000, UTC).replace(microsecond=value % 1_000_000)
    return value.astimezone(UTC).isoformat(timespec="microseconds").replace("+00:00", "Z")


def utc_now() -> datetime:
    """The host's current time in UTC."""
    return datetime.now(UTC)


class RunLock:
    """``_run.lock`` of a run folder, held while a writer (or recovery) has the run open.

    On POSIX it is an exclusive, non-blocking ``fcntl.flock``: the kernel drops it when the process ends
    in any way, ``kill -9`` included, so a stale lock never outlives its writer. On Windows it falls back to
    ``msvcrt.locking`` on the first byte, which Windows also drops at process exit. Where neither exists
    the lock is advisory only: it is taken without checking, and two writers on one run are not prevented.
    The lock file itself stays in the folder; only the lock on it matters.
    """

    def __init__(self, folder: Path) -> None:
        self.path = folder / LOCK_FILE
        self._fd: int | None = None

    def acquire(self, purpose: str) -> None:
        """Take the lock or raise.

        Args:
            purpose: What the caller is about to do, for the error message ("record", "recover").

        Raises:
            StoreError: Another live process holds the lock, or the lock file cannot be created.
        """
        try:
            fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as exc:
            problem = os_error_text(exc, self.path)
            raise StoreError(f"cannot {purpose} {self.path.parent}: {problem}; check the folder and its permissions, "
                             "or copy the run folder to a disk you can write to") from None
        try:
            _lock_fd(fd)
        except OSError:
            holder = _read_holder(fd)
            os.close(fd)
            raise StoreError(
                f"cannot {purpose} {self.path.parent}: it is open in another live railtap process{holder}; "
                "stop that process first"
            ) from None
        with contextlib.suppress(OSError):
            os.ftruncate(fd, 0)
            os.write(fd, f"pid {os.getpid()}\n".encode())
        self._fd = fd

    def release(self) -> None:
        """Drop the lock (closing the descriptor releases it). Safe to call twice."""
        if self._fd is not None:
            with contextlib.suppress(OSError):
                _unlock_fd(self._fd)
            os.close(self._fd)
            self._fd = None

    @property
    def held(self) -> bool:
        """True while this object holds the lock."""
        return self._fd is not None

    def fileno(self) -> int | None:
        """The locked descriptor while held: a child process given it holds the lock with its parent, until
        both have ended (POSIX)."""
        return self._fd


def lock_is_free(folder: Path) -> bool:
    """True when no live process holds the run lock of ``folder``. Checked through a read-only descriptor, so a
    run on a read-only disk still shows as free (and its recovery then says why it cannot write)."""
    try:
        fd = os.open(folder / LOCK_FILE, os.O_RDONLY)
    except FileNotFoundError:
        return True
    except OSError:
        return False
    try:
        _lock_fd(fd)
    except OSError:
        return False
    finally:
        os.close(fd)  # closing drops a lock taken here
    return True


def _lock_fd(fd: int) -> None:
    if fcntl is not None:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    elif msvcrt is not None:
        msvcrt.locking(fd, msvcrt.LK_NBLCK, 1)


def _unlock_fd(fd: int) -> None:
    if fcntl is not None:
        fcntl.flock(fd, fcntl.LOCK_UN)
    elif msvcrt is not None:
        os.lseek(fd, 0, os.SEEK_SET)
        msvcrt.locking(fd, msvcrt.LK_UNLCK, 1)


def _read_holder(fd: int) -> str:
    """' (pid 1234)' from the lock file, or '' when it says nothing useful."""
    try:
        text = os.pread(fd, 64, 0).decode(errors="replace").strip() if hasattr(os, "pread") else ""
    except OSError:
        return ""
    return f" ({text})" if text.startswith("pid ") else ""
