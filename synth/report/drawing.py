"""Figures drawn in a separate process while the run goes on.

Drawing with matplotlib is pure Python: it holds the interpreter lock, so figures drawn on
the observing threads wait for, and hold up, the Python parts of the observations. A run
that writes figures hands them to FIGURE_WORKERS (2) worker processes instead, each ``python
-m synth.report.figure_worker``, started at the beginning of the run (their imports overlap the
run's own work); a job goes to the worker with the fewest jobs waiting. Jobs (a module-level function and its arguments) go to it pickled through its
standard input, results come back through its standard output; the worker writes the PNG
files into the run folder and returns their names.

A plain subprocess rather than multiprocessing: multiprocessing's spawn and fork-server
workers import the caller's main module again, which would re-run a user's script that
has no ``if __name__ == "__main__"`` guard (and ``python -m synth`` itself).
"""

import os
import pickle
import queue
import subprocess
import sys
import threading
from concurrent.futures import Future

__all__ = ["FigureProcess", "figure_process", "resolved"]


class FigureProcess:
    """A worker process that runs figure jobs one after another; ``submit`` returns a
    Future at once (a writer thread feeds the worker, a reader thread collects results)."""

    def __init__(self):
        paths = [p for p in sys.path if p]
        env = dict(os.environ, PYTHONPATH=os.pathsep.join(paths))
        self._proc = subprocess.Popen([sys.executable, "-m", "synth.report.figure_worker"],
                                      stdin=subprocess.PIPE, stdout=subprocess.PIPE, env=env)
        self._jobs = queue.Queue()
        self._pending = {}
        self._lock = threading.Lock()
        self._count = 0
        self._ended = False
        self._writer = threading.Thread(target=self._write, daemon=True)
        self._reader = threading.Thread(target=self._read, daemon=True)
        self._writer.start()
        self._reader.start()

    def submit(self, fn, *args):
        fut = Future()
        with self._lock:
            if self._ended:
                fut.set_exception(self._ended_error())
                return fut
            key = self._count
            self._count += 1
            self._pending[key] = fut
        self._jobs.put((key, fn, args))
        return fut

    def _ended_error(self):
        return RuntimeError("the figure process ended before drawing this figure "
                            f"(exit code {self._proc.poll()}); its error is printed above")

    def _write(self):
        stream = self._proc.stdin
        try:
            while True:
                job = self._jobs.get()
                if job is None:
                    break
                pickle.dump(job, stream, protocol=pickle.HIGHEST_PROTOCOL)
                stream.flush()
        except (BrokenPipeError, OSError):
            pass                    # the worker ended: the reader fails what is pending
        finally:
            try:
                stream.close()
            except OSError:
                pass

    def _read(self):
        stream = self._proc.stdout
        while True:
            try:
                key, ok, value = pickle.load(stream)
            except (EOFError, OSError, pickle.UnpicklingError):
                break
            with self._lock:
                fut = self._pending.pop(key)
            (fut.set_result if ok else fut.set_exception)(value)
        with self._lock:
            left, self._pending, self._ended = list(self._pending.values()), {}, True
        for fut in left:
            if not fut.done():
                fut.set_exception(self._ended_error())

    def shutdown(self, wait=True, cancel_futures=False):
        """Finish (or, with ``cancel_futures``, drop) the queued jobs and end the worker."""
        if cancel_futures:
            while True:
                try:
                    job = self._jobs.get_nowait()
                except queue.Empty:
                    break
                if job is not None:
                    with self._lock:
                        fut = self._pending.pop(job[0], None)
                    if fut is not None:
                        fut.cancel()
        self._jobs.put(None)
        if wait:
            self._writer.join()
            self._proc.wait()
            self._reader.join()
            self._proc.stdout.close()


class _Workers:
    """Several FigureProcesses, each job sent to the one with the fewest jobs waiting."""

    def __init__(self, n):
        self._workers = [FigureProcess() for _ in range(n)]

    def submit(self, fn, *args):
        w = min(self._workers, key=lambda w: len(w._pending))
        return w.submit(fn, *args)

    def shutdown(self, wait=True, cancel_futures=False):
        for w in self._workers:
            w.shutdown(wait=False, cancel_futures=cancel_futures)
        if wait:
            for w in self._workers:
                w.shutdown(wait=True)


#: worker processes that draw a run's figures
FIGURE_WORKERS = 2


def figure_process(n=None):
    """``n`` started FigureProcesses behind one ``submit`` (shut them down with
    ``shutdown(wait=True)``)."""
    return _Workers(FIGURE_WORKERS if n is None else n)


def resolved(value):
    """``value``, or its result if it is a Future (a figure job's file names)."""
    return value.result() if isinstance(value, Future) else value


def _serve(inp, out):
    """The worker's loop: run each job, send back (key, ok, result or exception)."""
    import matplotlib
    matplotlib.use("Agg")
    import synth.report.run_analysis  # noqa: F401  (ready before the first job)
    while True:
        try:
            key, fn, args = pickle.load(inp)
        except EOFError:
            return
        try:
            reply = (key, True, fn(*args))
        except Exception as exc:        # sent back: raised where the figure is awaited
            reply = (key, False, exc)
        try:
            data = pickle.dumps(reply, protocol=pickle.HIGHEST_PROTOCOL)
        except Exception as exc:        # an exception that does not pickle
            data = pickle.dumps((key, False, RuntimeError(repr(reply[2]))))
            del exc
        out.write(data)
        out.flush()
