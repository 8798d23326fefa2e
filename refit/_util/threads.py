"""Row blocks on threads: numpy only (the standard library's thread pool).

numpy releases the interpreter lock inside its array loops, so independent row blocks of
a large evaluation run side by side on the cores this process may use. Each block writes
only its own slice of the output, so the numbers do not depend on the number of threads.
"""

from __future__ import annotations

import os

#: most threads used, whatever the core count
MAX_THREADS = 4


def worker_count() -> int:
    """Threads for row blocks: the cores this process may use, at most
    :data:`MAX_THREADS`; ``REFIT_THREADS`` (a whole number >= 1) overrides."""
    given = os.environ.get("REFIT_THREADS", "")
    if given.isdigit() and int(given) >= 1:
        return int(given)
    try:
        n = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        n = os.cpu_count() or 1
    return max(1, min(MAX_THREADS, n))


def on_threads(work, starts) -> None:
    """Call ``work(start)`` for every block start, on :func:`worker_count` threads when
    there is more than one block (serially otherwise). Exceptions propagate."""
    starts = list(starts)
    n = worker_count()
    if len(starts) < 2 or n < 2:
        for s in starts:
            work(s)
        return
    from concurrent.futures import ThreadPoolExecutor

    with ThreadPoolExecutor(min(n, len(starts))) as pool:
        for _ in pool.map(work, starts):
            pass
