"""One kkcheck run per output folder at a time: a lock file holding the owner's pid.

The lock is the file ``.kkcheck.lock`` in the output folder, created with ``O_CREAT | O_EXCL``
(atomic on local file systems) and holding the owner's pid, host, command and start time as
JSON. A second run into the same folder finds it and stops with one line naming the owner. A
lock whose pid no longer runs on this host is stale (the run was killed): it is taken over and
the takeover is said on stderr. The lock is reentrant within one process (the command line
holds it for the whole command, the writer takes it again for the write).
"""

from __future__ import annotations

import contextlib
import json
import os
import secrets
import socket
import sys
import time
from pathlib import Path

from .errors import OutputError

__all__ = ["LOCK_NAME", "folder_lock", "pid_running"]

LOCK_NAME = ".kkcheck.lock"

#: Folders whose lock this process holds -> how many times (reentrant).
_HELD: dict[str, int] = {}


def pid_running(pid: int) -> bool:
    """True when a process ``pid`` runs on this host (a zombie, dead but not reaped, does not)."""
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # exists, another user's
        pass
    try:  # Linux: state letter after the command name in /proc/<pid>/stat
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except (OSError, IndexError):
        return True
    return state not in ("Z", "X")


def _read_owner(lock: Path) -> dict | None:
    try:
        return json.loads(lock.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def _owner_text(owner: dict) -> str:
    cmd = str(owner.get("command") or "kkcheck")[:120]
    return f"pid {owner.get('pid')} on {owner.get('host')}, '{cmd}', since {owner.get('started')}"


def _try_create(lock: Path, command: str) -> bool:
    try:
        fd = os.open(lock, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
    except FileExistsError:
        return False
    except OSError as exc:
        raise OutputError.from_os_error(exc, lock.parent, "cannot use the output folder") from None
    owner = {
        "pid": os.getpid(),
        "host": socket.gethostname(),
        "command": command,
        "started": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
    }
    try:
        os.write(fd, json.dumps(owner).encode("utf-8"))
    except OSError as exc:
        os.close(fd)
        os.unlink(lock)
        raise OutputError.from_os_error(exc, lock.parent, "cannot use the output folder") from None
    os.close(fd)
    return True


def _take_stale(lock: Path, owner: dict) -> None:
    """Move a dead run's lock aside (re-checking that it is still that run's lock)."""
    aside = lock.with_name(f"{LOCK_NAME}.stale-{secrets.token_hex(4)}")
    try:
        os.replace(lock, aside)
    except FileNotFoundError:
        return  # someone else took it over first
    if _read_owner(aside) != owner:  # a fresh lock appeared in between: give it back
        with contextlib.suppress(OSError):
            os.replace(aside, lock)
        return
    with contextlib.suppress(OSError):
        os.unlink(aside)
    print(
        f"kkcheck: {lock}: took over the lock of a run that no longer runs ({_owner_text(owner)})",
        file=sys.stderr,
    )


def _acquire(folder: Path, command: str) -> None:
    lock = folder / LOCK_NAME
    for _ in range(5):
        if _try_create(lock, command):
            return
        owner = _read_owner(lock)
        if owner is None:  # being written right now, or unreadable
            time.sleep(0.05)
            owner = _read_owner(lock)
            if owner is None:
                raise OutputError(
                    "the output folder has an unreadable lock file; if no kkcheck run is "
                    "writing there, remove it",
                    lock,
                )
        same_host = owner.get("host") == socket.gethostname()
        if same_host and not pid_running(int(owner.get("pid") or 0)):
            _take_stale(lock, owner)
            continue
        where = "" if same_host else " (another host: remove the lock file if that run is gone)"
        raise OutputError(
            f"another kkcheck run is writing to this folder ({_owner_text(owner)}){where}; "
            "wait for it to finish or choose another output folder",
            folder,
        )
    raise OutputError("could not take the output folder's lock; try again", folder)


@contextlib.contextmanager
def folder_lock(folder, command: str = ""):
    """Hold the lock of the existing ``folder`` for the duration of the ``with`` block.

    Raises
    ------
    OutputError
        Another live run holds the lock, or the folder cannot take a lock file (read-only,
        no permission, disk full).
    """
    key = os.path.realpath(folder)
    if _HELD.get(key):
        _HELD[key] += 1
        try:
            yield
        finally:
            _HELD[key] -= 1
        return
    lock = Path(folder) / LOCK_NAME
    _acquire(Path(folder), command or " ".join(sys.argv))
    _HELD[key] = 1
    try:
        yield
    finally:
        _HELD.pop(key, None)
        owner = _read_owner(lock)
        if owner is not None and owner.get("pid") == os.getpid():
            with contextlib.suppress(OSError):
                os.unlink(lock)
