"""Worker processes that end with the command that started them.

A pool's workers (joblib's loky workers, the search's process pool) outlive a parent that
was killed with SIGKILL: loky keeps idle workers for minutes, and nothing in the dead
parent can stop them. Each worker therefore watches its parent and leaves when it is gone.
"""

from __future__ import annotations

import os
import threading
import time

__all__ = ["exit_with_parent"]

#: Seconds between two looks at the parent.
POLL_S = 0.5
_watching: set[int] = set()


def exit_with_parent(parent_pid: int | None) -> None:
    """In a worker started by process ``parent_pid``: exit as soon as that process is gone.

    Only for direct children (a pool's initializer): a worker already orphaned when it
    starts exits at once. A no-op in the parent itself; starts at most one watcher per
    process (a daemon thread that compares ``os.getppid()`` with ``parent_pid``: an orphan
    is re-parented).
    """
    if parent_pid is None or os.getpid() == parent_pid or parent_pid in _watching:
        return
    _watching.add(parent_pid)

    def watch() -> None:
        while os.getppid() == parent_pid:
            time.sleep(POLL_S)
        os._exit(1)  # the command is gone: nobody will read our results

    threading.Thread(target=watch, name="exit-with-parent", daemon=True).start()
