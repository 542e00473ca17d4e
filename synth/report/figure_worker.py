"""The figure worker process: ``python -m synth.report.figure_worker`` (synth.report.drawing).

A module of its own, imported by nothing else, so that ``-m`` runs it without the package
having imported it first."""

import signal
import sys

from synth.report.drawing import _serve

if __name__ == "__main__":
    signal.signal(signal.SIGINT, signal.SIG_IGN)   # Ctrl-C is the run's: it ends this worker
    _in, _out = sys.stdin.buffer, sys.stdout.buffer
    sys.stdout = sys.stderr          # nothing but results on the pipe
    _serve(_in, _out)
