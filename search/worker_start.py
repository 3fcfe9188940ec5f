"""How local worker processes start, and how they end with their search.

**Start.** On Linux the workers are forked from multiprocessing's fork server
(the ``forkserver`` start method), which imports :mod:`search.warm_server`
once before it forks any: NumPy, Numba, Numba's first-use machinery (its
typing and lowering registries, the run-time library, the modules those pull
in) and the cached machine code of the kernels the warm-up network calls are
then in the server's memory, and every worker forked from it shares them
instead of loading its own. A spawned worker pays about 0.6 CPU-seconds for
this; a forked one a few hundredths, and the server pays it once. The server
is a fresh interpreter started by fork and exec, so the search process (which
runs threads) is never forked itself; the server runs no thread while it
forks (its thread pools are limited to one thread before NumPy loads, and the
engine never uses Numba's parallel targets, the only part of Numba whose
threads are unsafe across a fork according to Numba's documentation, "The
Threading Layers"). Elsewhere (macOS, whose system libraries are not
documented safe to use across a fork without exec, so that Python spawns
there by default) each worker is spawned, a new interpreter that warms on its
own.

The fork server is one per process (multiprocessing keeps it). The first pool
of local workers that starts it stops it again when the last such pool shuts
down (:func:`release_server`), so its CPU time and its workers' are counted in
the search process's own (the server then is a child that the search process
has waited for) and no server outlives the search in a long-lived process.

**End.** Each worker ends with its search process however that ends
(:func:`end_with_parent`): a spawned worker's parent is the search process
itself; a forked worker's parent is the fork server, whose parent is the
search process, and the worker watches both. The server ends once the search
and every worker it forked are gone.
"""

from __future__ import annotations

import contextlib
import ctypes
import multiprocessing
import os
import signal
import sys
import threading
import time

#: What the fork server imports before forking the first worker (only for the real
#: unit work; tests with work functions of their own start an empty server).
SERVER_PRELOAD = ("search.warm_server",)

#: How often a worker looks whether its parent process is still there (seconds).
PARENT_POLL_S = 0.5

_server_lock = threading.Lock()
_server_users = 0        # pools of local workers forking from the server now
_server_ours = False     # whether those pools started it (then the last one stops it)


def start_method() -> str:
    """``"forkserver"`` on Linux, ``"spawn"`` elsewhere (see the module notes)."""
    return "forkserver" if sys.platform.startswith("linux") else "spawn"


def worker_context(warm: bool) -> multiprocessing.context.BaseContext:
    """The multiprocessing context local workers start from; with ``warm`` a fork
    server that starts from here preloads the warmed engine."""
    method = start_method()
    context = multiprocessing.get_context(method)
    if method == "forkserver":
        context.set_forkserver_preload(list(SERVER_PRELOAD) if warm else [])
    return context


def _server():
    """multiprocessing's fork server object (private to it; None if it has none)."""
    from multiprocessing import forkserver
    return getattr(forkserver, "_forkserver", None)


def hold_server() -> None:
    """Count one more pool forking from the server (call before its first worker)."""
    global _server_users, _server_ours
    with _server_lock:
        if _server_users == 0:
            _server_ours = getattr(_server(), "_forkserver_pid", None) is None
        _server_users += 1


def release_server(kill: bool = False) -> None:
    """One pool less; the last one stops a server that the pools started.

    Stopping closes the server's end-of-parent pipe and waits for it (its
    reaped workers' CPU time joins this process's children's). With ``kill`` the
    server is killed first, so that a search ending on an error or an interrupt
    does not wait for a warm-up still in progress there.
    """
    global _server_users
    with _server_lock:
        _server_users = max(_server_users - 1, 0)
        if _server_users or not _server_ours:
            return
        server = _server()
        pid = getattr(server, "_forkserver_pid", None)
        stop = getattr(server, "_stop", None)  # multiprocessing's own way to stop it
        if pid is None or stop is None:
            return
        if kill:
            with contextlib.suppress(ProcessLookupError):
                os.kill(pid, signal.SIGKILL)
        with contextlib.suppress(OSError):
            stop()


def end_with_parent(search: int) -> None:
    """Make this worker end soon after its search process ``search`` ends, however it ends.

    The worker's parent is the search process (a spawned worker) or the fork
    server that it started (a forked one); anything else means that it ended
    before this guard was set, and the worker ends at once. Two guards, since a
    killed search (``kill -9``) runs no clean-up: on Linux the kernel sends this
    process SIGKILL when its parent ends (``prctl`` with ``PR_SET_PDEATHSIG``,
    value 1 in ``linux/prctl.h``; prctl(2) notes it fires when the parent
    *thread* that started the process ends: the thread running the whole
    search, or the fork server's only thread); and everywhere a daemon thread
    that sees the parent id change (an orphan is adopted by another process;
    POSIX ``getppid``) and, below a fork server, the server's parent change,
    and ends the process within :data:`PARENT_POLL_S` seconds. The server
    itself does not end before its workers (each holds the pipe whose end tells
    it that no process needs it any more), so a forked worker must watch the
    search above it.
    """
    if sys.platform.startswith("linux"):
        try:
            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(1, int(signal.SIGKILL), 0, 0, 0)
        except (OSError, AttributeError):  # no prctl here: the thread below suffices
            pass
    parent = os.getppid()
    above = None if parent == search else search  # the search above the fork server
    if above is not None and parent_of(parent) != above:
        os._exit(1)
    threading.Thread(target=_watch_parent, args=(parent, above), daemon=True,
                     name="tinyconv-parent-watch").start()


def parent_of(pid: int) -> int | None:
    """The parent id of process ``pid`` from Linux's ``/proc/PID/stat`` (proc(5): field
    4, after the command name in parentheses); None when it cannot be read."""
    try:
        with open(f"/proc/{pid}/stat", encoding="utf-8", errors="replace") as fh:
            text = fh.read()
        return int(text[text.rindex(")") + 2:].split()[1])
    except (OSError, ValueError, IndexError):
        return None


def _watch_parent(parent: int, above: int | None) -> None:
    while os.getppid() == parent and (above is None or parent_of(parent) == above):
        time.sleep(PARENT_POLL_S)
    os._exit(1)  # no clean-up: the search that would read our results is gone
