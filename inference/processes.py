"""Facts about processes and this machine that every layer may use (standard library only).

Hidden folders and scratch folders carry the pid and host that made them, so a later process can tell whether
their owner still runs: never remove what a live process (or another machine sharing the folder) may use.
"""

from __future__ import annotations

import os
import re
import socket

#: This machine's name as it appears in hidden and scratch folder names (letters and digits only).
HOST = re.sub(r"[^A-Za-z0-9]", "", socket.gethostname())[:32]


def pid_alive(pid: int) -> bool:
    """Whether a process with this pid runs on this machine (another user's process counts as running)."""
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True
