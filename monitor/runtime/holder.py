"""Who holds the lease: ``host:pid:tag``, and whether that process is gone from this host.

A daemon killed outright (SIGKILL, a crash) cannot clear its lease; another instance would
wait for it to expire. On the same host the process table says at once whether the holder
still exists, so a new instance takes the lease over instead of waiting, and ``status`` does
not call a dead daemon running. A holder on another host (or a name that is not ours) is
trusted until its lease expires. A pid reused by an unrelated process looks alive: the
safe direction (the lease then just expires).
"""

from __future__ import annotations

import os
import socket
import uuid
from pathlib import Path


def holder_name() -> str:
    """This process as a lease holder: host, pid and a random tag."""
    return f"{socket.gethostname()}:{os.getpid()}:{uuid.uuid4().hex[:8]}"


def gone_from_this_host(holder: str | None) -> bool:
    """True when ``holder`` names a process on this host that no longer exists."""
    parts = (holder or "").rsplit(":", 2)
    if len(parts) != 3 or parts[0] != socket.gethostname() or not parts[1].isdigit():
        return False
    pid = int(parts[1])
    if pid == os.getpid():
        return False
    try:
        os.kill(pid, 0)  # signal 0: only asks whether the process exists
    except ProcessLookupError:
        return True
    except PermissionError:  # it exists, under another user
        return False
    return _zombie(pid)


def _zombie(pid: int) -> bool:
    """A process that ended and waits for its parent to collect it: gone for our purposes
    (Linux ``/proc``; elsewhere it counts as alive until reaped)."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return False
    return stat[stat.rfind(")") + 2:][:1] == "Z"  # the state follows "(command) "
