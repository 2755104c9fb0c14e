"""Worker processes for rendering: fresh interpreters that never run the caller's script.

:func:`run_unordered` calls one function on many items in ``workers`` child
processes and yields the results as they finish.  Each child is a new
``python -c`` interpreter that imports only what the work needs: the function
and its arguments travel by pickle (a module-level function pickles as its
name), so nothing of the calling program is imported or re-run in a worker.

Why not :mod:`multiprocessing` or :class:`concurrent.futures.ProcessPoolExecutor`:
their ``spawn`` and ``forkserver`` start methods import the caller's main
module again in every worker, so a plain script that calls
:func:`synthgen.run.make.make_dataset` without an ``if __name__ == "__main__":``
guard would run again in each worker; ``fork`` copies the caller's threads'
locks into the child (OpenCV's thread pool, a Dask client) and can deadlock it.

A worker exits when the run ends, when the run's process dies (it watches
the process and its task pipe), and never handles Ctrl-C itself: the run
does, and stops its workers.  POSIX only (pipes passed by descriptor).
"""

from __future__ import annotations

import os
import pickle
import selectors
import signal
import subprocess
import sys
import time
import traceback
from collections.abc import Callable, Iterable, Iterator

__all__ = ["run_unordered", "usable_cores", "WorkerFailed"]

# The child's whole program before it can unpickle anything: take the caller's
# import path (so synthgen imports from the same place), then serve.
_BOOT = (
    "import os, pickle, sys\n"
    "tasks = os.fdopen(int(sys.argv[1]), 'rb')\n"
    "sys.path[:] = pickle.load(tasks)\n"
    "from synthgen.run.pool import _serve\n"
    "_serve(tasks, os.fdopen(int(sys.argv[2]), 'wb'))\n"
)


class WorkerFailed(RuntimeError):
    """A worker process ended without answering (killed, out of memory, crashed), or could not start."""


def usable_cores() -> int:
    """Number of cores this process may run on."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


def run_unordered(
    fn: Callable,
    items: Iterable,
    workers: int,
    *,
    setup: Callable[[], None] | None = None,
) -> Iterator:
    """Yield ``fn(item)`` for every item, in order of completion, computed in ``workers`` processes.

    Parameters
    ----------
    fn : callable
        A module-level function, or a :func:`functools.partial` of one (pickled by
        name and sent to each worker once; its module is imported there).
    items : iterable
        One call per item; each worker holds one item at a time.
    workers : int
        Processes to start (at most one per item).
    setup : callable or None
        Module-level function each worker calls once before its first item.

    Raises
    ------
    Exception
        The exception of the first call that raised, re-raised here (the worker's
        traceback is attached as its ``__cause__``).
    WorkerFailed
        A worker ended without answering.

    Closing the generator early (or an exception) stops every worker at once.
    """
    items = iter(items)
    first = [item for _, item in zip(range(workers), items)]
    if not first:
        return
    procs = [_Worker(fn, setup) for _ in first]
    finished = False
    try:
        with selectors.DefaultSelector() as sel:
            for proc, item in zip(procs, first):
                proc.send(item)
                sel.register(proc.results, selectors.EVENT_READ, proc)
            while sel.get_map():
                for key, _ in sel.select():
                    proc = key.data
                    result = proc.receive()
                    nxt = next(items, _DONE)
                    if nxt is _DONE:
                        sel.unregister(proc.results)
                        proc.close()
                    else:
                        proc.send(nxt)
                    yield result
        finished = True
    finally:
        for proc in procs:
            proc.stop(kill=not finished)


_DONE = object()


class _RemoteTraceback(Exception):
    def __init__(self, text: str):
        super().__init__(text)
        self.text = text

    def __str__(self) -> str:
        return f"\n\nin the worker process:\n{self.text}"


class _Worker:
    """One child process, its task pipe (run -> worker) and its result pipe (worker -> run)."""

    def __init__(self, fn, setup):
        task_r, task_w = os.pipe()
        result_r, result_w = os.pipe()
        try:
            self.process = subprocess.Popen(
                [sys.executable, "-c", _BOOT, str(task_r), str(result_w)],
                pass_fds=(task_r, result_w), stdin=subprocess.DEVNULL,
            )
        except OSError as exc:
            for fd in (task_r, task_w, result_r, result_w):
                os.close(fd)
            raise WorkerFailed(f"cannot start a worker process ({exc.strerror or exc})") from None
        os.close(task_r)
        os.close(result_w)
        self.tasks = os.fdopen(task_w, "wb")
        self.results = os.fdopen(result_r, "rb")
        self._put(sys.path)
        self._put((fn, setup, os.getpid()))

    def _put(self, obj) -> None:
        try:
            pickle.dump(obj, self.tasks, protocol=pickle.HIGHEST_PROTOCOL)
            self.tasks.flush()
        except BrokenPipeError:
            raise self._failed() from None

    def send(self, item) -> None:
        self._put(item)

    def receive(self):
        try:
            status, value, text = pickle.load(self.results)
        except (EOFError, pickle.UnpicklingError):
            raise self._failed() from None
        if status == "error":
            raise value from _RemoteTraceback(text)
        return value

    def _failed(self) -> WorkerFailed:
        try:
            code = self.process.wait(timeout=5)
        except subprocess.TimeoutExpired:
            code = None
        why = f"exit code {code}" if code is not None and code >= 0 else f"signal {-code}" if code else "no answer"
        return WorkerFailed(
            f"a worker process ended without finishing its images ({why}; out of memory?); "
            "run the same command with --resume to continue"
        )

    def close(self) -> None:
        """No more items: the worker exits when it reads the end of its task pipe."""
        if not self.tasks.closed:
            try:
                self.tasks.close()
            except BrokenPipeError:
                pass

    def stop(self, *, kill: bool) -> None:
        if kill and self.process.poll() is None:
            self.process.kill()
        self.close()
        self.results.close()
        try:
            self.process.wait(timeout=None if not kill else 10)
        except subprocess.TimeoutExpired:  # pragma: no cover - a killed process always ends
            pass


# --------------------------------------------------------------------------- the worker's side


def _serve(tasks, results) -> None:
    """Worker loop: read the work's set-up, then answer items until the task pipe ends."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C reaches the whole group; the run stops us
    fn, setup, parent = pickle.load(tasks)
    _exit_with(parent)
    if setup is not None:
        setup()
    while True:
        try:
            item = pickle.load(tasks)
        except EOFError:
            return
        try:
            reply = ("ok", fn(item), "")
        except Exception as exc:  # sent to the run, which raises it
            reply = ("error", _picklable(exc), traceback.format_exc())
        try:
            pickle.dump(reply, results, protocol=pickle.HIGHEST_PROTOCOL)
            results.flush()
        except BrokenPipeError:  # the run is gone
            return


def _picklable(exc: BaseException) -> BaseException:
    """``exc`` if it survives a pickle round trip, else a RuntimeError with its text."""
    try:
        pickle.loads(pickle.dumps(exc))
        return exc
    except Exception:
        return RuntimeError(f"{type(exc).__name__}: {exc}")


def _exit_with(main_pid: int) -> None:
    """Exit this worker as soon as process ``main_pid`` (the run) is gone, e.g. after a SIGKILL.

    Without this a worker would finish its current item first; a daemon thread
    watches the run's pidfd (or polls the pid where there is no pidfd).
    """
    import select
    import threading

    def watch():
        try:
            fd = os.pidfd_open(main_pid)
        except (AttributeError, OSError):
            fd = None
        if fd is not None:
            select.select([fd], [], [])
        else:
            while True:
                time.sleep(0.5)
                try:
                    os.kill(main_pid, 0)
                except ProcessLookupError:
                    break
                except PermissionError:
                    pass
        os._exit(1)

    threading.Thread(target=watch, name="synthgen-watch-run", daemon=True).start()
