"""Worker processes on this machine, shared by population audits and monitoring: a pool
whose processes never print a traceback on Ctrl-C (SIGINT is held while they start and
ignored in them: the main process handles it) and end when the main process dies."""

from __future__ import annotations

import contextlib
import multiprocessing
import os
import signal
import threading
import time
from collections.abc import Callable, Iterator
from concurrent.futures import ProcessPoolExecutor

PARENT_CHECK_SECONDS = 0.5  # how often a worker process checks that its parent lives


def start_pool(jobs: int, initializer: Callable[..., None],
               initargs: tuple) -> ProcessPoolExecutor:
    """A pool of `jobs` fresh ("spawn") processes, each set up by `initializer(parent,
    *initargs)`; the initializer should call `become_worker(parent)` first. Submit to it
    inside `sigint_held()` (a submit may start a process)."""
    with sigint_held():  # the pool's helper process starts here
        return ProcessPoolExecutor(max_workers=jobs,
                                   mp_context=multiprocessing.get_context("spawn"),
                                   initializer=initializer, initargs=(os.getpid(), *initargs))


@contextlib.contextmanager
def pool_running(jobs: int, initializer: Callable[..., None],
                 initargs: tuple) -> Iterator[ProcessPoolExecutor]:
    """`start_pool` for the length of a block: on an interruption or an error its processes
    are ended at once (no more work is needed), and it is always shut down."""
    pool = start_pool(jobs, initializer, initargs)
    try:
        yield pool
    except BaseException:
        stop_workers(pool)
        raise
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


def become_worker(parent: int) -> None:
    """In a pool process: leave SIGINT to the parent, and end when the parent dies."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    end_with_parent(parent)


def end_with_parent(parent: int) -> None:
    """On Linux the kernel kills this process when its parent dies (PR_SET_PDEATHSIG);
    everywhere a watchdog thread ends it within PARENT_CHECK_SECONDS once it is orphaned."""
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, signal.SIGKILL, 0, 0, 0)  # 1 = PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass  # not Linux: the watchdog alone

    def watch() -> None:
        while os.getppid() == parent:
            time.sleep(PARENT_CHECK_SECONDS)
        os._exit(1)

    if os.getppid() != parent:  # the parent died before the kernel was told
        os._exit(1)
    threading.Thread(target=watch, name="parent-watchdog", daemon=True).start()


def stop_workers(pool: ProcessPoolExecutor) -> None:
    """End a pool's processes now (after an interruption or an error: no more work)."""
    for process in list((getattr(pool, "_processes", None) or {}).values()):
        if process.is_alive():
            process.terminate()


@contextlib.contextmanager
def sigint_held() -> Iterator[None]:
    """SIGINT blocked (held, not lost) while worker processes may start: a process
    inherits the blocked signal mask across exec and keeps it, so a Ctrl-C during its
    start-up never prints a traceback from a half-started process. The main process gets
    a Ctrl-C that came meanwhile as soon as the block ends."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT})
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, previous)
