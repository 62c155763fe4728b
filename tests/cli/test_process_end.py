"""The ``sounding`` script ends its process without the interpreter's
teardown, and loses nothing on the way: the output, the exit code, other
threads' work and ``atexit`` handlers all complete as on a normal exit."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]

# A command that leaves a thread writing a file and an atexit handler, then
# fails with exit code 3 after printing a long answer.
SCRIPT = r"""
import atexit, sys, threading, time
from pathlib import Path
import typer
from service.cli import base, main

out = Path(sys.argv[1])

@base.app.command("probe-end")
def probe_end() -> None:
    def slow() -> None:
        time.sleep(0.3)
        (out / "thread.txt").write_text("done")
    threading.Thread(target=slow).start()
    atexit.register(lambda: (out / "atexit.txt").write_text("ran"))
    sys.stdout.write("line\n" * 20000)  # more than a pipe's buffer
    raise typer.Exit(3)

sys.argv = ["sounding", "probe-end"]
main()
"""


def _env() -> dict[str, str]:
    return {**os.environ, "PYTHONPATH": str(ROOT), "HF_HUB_OFFLINE": "1"}


def test_nothing_is_lost_when_the_process_ends(tmp_path: Path) -> None:
    r = subprocess.run(
        [sys.executable, "-c", SCRIPT, str(tmp_path)], capture_output=True, text=True, env=_env(), timeout=120
    )
    assert r.returncode == 3, r.stderr
    assert r.stdout == "line\n" * 20000
    assert (tmp_path / "thread.txt").read_text() == "done"  # joined before the end
    assert (tmp_path / "atexit.txt").read_text() == "ran"


QUIET = r"""
import sys, time
import typer
from service.cli import base, main

@base.app.command("probe-late")
def probe_late() -> None:
    sys.stdout.write("answer\n" * 500)  # stays in the stream's buffer
    time.sleep(1.0)  # meanwhile the reader goes away

sys.argv = ["sounding", "probe-late"]
main()
"""


def test_a_reader_that_stops_early_is_not_an_error() -> None:
    # `sounding ... | head -1`, where head has ended before the answer is flushed.
    env = _env()
    env.pop("PYTHONUNBUFFERED", None)  # a shell's usual buffered output to a pipe
    p = subprocess.Popen(
        [sys.executable, "-c", QUIET], stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env, cwd=ROOT
    )
    assert p.stdout is not None and p.stderr is not None
    p.stdout.close()
    err = p.stderr.read().decode()
    assert p.wait(timeout=60) == 0, err
    assert "Traceback" not in err and "BrokenPipe" not in err
