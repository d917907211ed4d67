"""Facts about processes and this machine, and how to fork, that every layer may use (standard library only).

Hidden folders and scratch folders carry the pid and host that made them, so a later process can tell whether
their owner still runs: never remove what a live process (or another machine sharing the folder) may use.
"""

from __future__ import annotations

import gc
import os
import re
import socket
from collections.abc import Iterator
from contextlib import contextmanager

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


@contextmanager
def heap_frozen_for_fork() -> Iterator[None]:
    """Fork inside this block: the children inherit a heap their garbage collector leaves alone (frozen), so it
    does not walk, and so copy, every page of this process's memory; this process unfreezes at the block's end.
    Measured: figures drew 2.5 times slower in a child than here unfrozen, 1.2 times frozen; NUTS chains about 5 %
    faster."""
    gc.freeze()
    try:
        yield
    finally:
        gc.unfreeze()
