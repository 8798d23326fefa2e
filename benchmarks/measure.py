"""Wall time and peak memory of one command, each measured in a fresh process.

Every measurement starts a new child process. Its peak resident set size comes from the
kernel's accounting of that one child: ``os.wait4`` returns the child's own ``rusage`` (the
same figure ``resource.getrusage(RUSAGE_CHILDREN)`` would give in a parent with no other
children, and the "Maximum resident set size" of ``/usr/bin/time -v``). Its ``ru_maxrss``
is in KiB on Linux and in bytes on macOS.
"""

from __future__ import annotations

import os
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from dataclasses import dataclass, field


@dataclass
class Run:
    """One measured run of a command."""

    wall_s: float
    peak_mb: float
    returncode: int
    stdout: str = ""
    stderr: str = ""


@dataclass
class Summary:
    """Median wall time and largest peak memory over repeated runs of one command."""

    wall_s: float
    peak_mb: float
    runs: list[Run] = field(default_factory=list)

    @property
    def returncodes(self) -> list[int]:
        return [r.returncode for r in self.runs]

    @property
    def last(self) -> Run:
        return self.runs[-1]


def _maxrss_mb(rusage) -> float:
    scale = 1.0 if sys.platform == "darwin" else 1024.0  # bytes on macOS, KiB on Linux
    return rusage.ru_maxrss * scale / 1e6


def run_once(argv: list[str], *, cwd=None, env=None, timeout: float = 1800.0,
             keep_output: int = 4000) -> Run:
    """Run ``argv`` in a fresh process; return wall time, peak RSS [MB], exit code and output.

    Output goes to temporary files (not pipes), so a chatty command cannot block and the
    parent does no work while the child runs. ``keep_output`` characters of each stream's
    tail are kept for diagnosis.
    """
    with tempfile.TemporaryFile() as out, tempfile.TemporaryFile() as err:
        start = time.perf_counter()
        proc = subprocess.Popen(argv, stdout=out, stderr=err, stdin=subprocess.DEVNULL,
                                cwd=cwd, env=env)
        timer = threading.Timer(timeout, proc.kill)
        timer.start()
        try:
            _, status, rusage = os.wait4(proc.pid, 0)
        finally:
            timer.cancel()
        wall = time.perf_counter() - start
        proc.returncode = os.waitstatus_to_exitcode(status)
        out.seek(0)
        err.seek(0)
        text_out = out.read().decode("utf-8", "replace")
        text_err = err.read().decode("utf-8", "replace")
    return Run(wall, _maxrss_mb(rusage), proc.returncode,
               text_out[-keep_output:], text_err[-keep_output:])


def run_repeated(argv: list[str], repeats: int, *, warmup: int = 0, **kwargs) -> Summary:
    """Median wall time and largest peak RSS of ``repeats`` runs after ``warmup`` unmeasured."""
    for _ in range(warmup):
        run_once(argv, **kwargs)
    runs = [run_once(argv, **kwargs) for _ in range(max(1, repeats))]
    return summarise(runs)


def summarise(runs: list[Run]) -> Summary:
    return Summary(statistics.median(r.wall_s for r in runs), max(r.peak_mb for r in runs), runs)


def interleaved(commands: dict[str, list[str]], repeats: int, **kwargs) -> dict[str, Summary]:
    """Run several commands in turn, ``repeats`` rounds, so machine load hits them alike."""
    runs: dict[str, list[Run]] = {name: [] for name in commands}
    for _ in range(max(1, repeats)):
        for name, argv in commands.items():
            runs[name].append(run_once(argv, **kwargs))
    return {name: summarise(r) for name, r in runs.items()}
