"""Ending a command's process without tearing the interpreter down.

A forecasting command has imported some 700 modules and holds an ONNX
Runtime session, a FAISS index and NumPy arrays. After its answer is
written, Python's own shutdown frees all of them one by one, which took
0.25-0.3 s of a 1.3 s ``check`` on two cores: a fifth of the wait, for memory
the operating system takes back at once. So the process ends as Python's
shutdown would begin (other threads joined, ``atexit`` handlers run, both
streams flushed) and then leaves through ``os._exit``.
"""

from __future__ import annotations

import atexit
import contextlib
import os
import sys
import threading


def _flush() -> None:
    for stream in (sys.stdout, sys.stderr):
        # `sounding ... | head`: the reader has what it wanted and closed
        # the pipe; that is not a failure of the command.
        with contextlib.suppress(ValueError, OSError):
            stream.flush()


def end_process(code: int) -> None:
    """End the process with ``code`` once its work is safely out."""
    me = threading.current_thread()
    for thread in threading.enumerate():
        if thread is not me and not thread.daemon:
            thread.join()  # as the interpreter would before exiting
    atexit._run_exitfuncs()  # logging's flush, Ray's shutdown, temporary directories
    _flush()
    os._exit(code)
