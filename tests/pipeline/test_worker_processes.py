"""Tests of slicer.pipeline.worker_processes that need no pool: how workers' processes end
and what they leave on stderr."""

import subprocess
import sys


def test_the_resource_tracker_adds_no_lines_to_an_error(tmp_path):
    # a process that ends without its semaphore's finalizer (as one whose pool was stopped
    # by an error can): Python's tracker removes the semaphore and, unless told by the -W
    # options it starts with, warns in two lines of its own on stderr
    script = tmp_path / "leak.py"
    script.write_text("import os, sys\n"
                      "from slicer.pipeline.worker_processes import worker_context\n"
                      "semaphore = worker_context().Semaphore(1)\n"
                      "sys.stdout.flush()\n"
                      "os._exit(0)\n")
    done = subprocess.run([sys.executable, str(script)], capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 0
    assert "leaked semaphore" not in done.stderr, done.stderr
