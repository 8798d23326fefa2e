"""In-process timings, run by the harness in a fresh child: ``python probes.py WHAT FILE``.

Separates start-up cost (imports) from the work itself. Prints one JSON object:
``{"import_s": ..., "work_s": ..., ...}``. WHAT is one of:

``check_file``  import refit.curate.checks, then time ``refit.curate.checks.check_file(FILE)``;
``read_csv``    import pandas, then time ``pandas.read_csv(FILE)``.
"""

from __future__ import annotations

import json
import sys
import time


def probe_check_file(path: str) -> dict:
    t0 = time.perf_counter()
    from refit.curate.checks import check_file

    t1 = time.perf_counter()
    report = check_file(path)
    t2 = time.perf_counter()
    problems = report.problems
    severity = problems["severity"] if "severity" in problems else []
    return {
        "import_s": t1 - t0,
        "work_s": t2 - t1,
        "n_rows": int(report.n_rows),
        "ok": bool(report.ok),
        "errors": int((severity == "error").sum()) if len(problems) else 0,
        "warnings": int((severity == "warning").sum()) if len(problems) else 0,
        "rules": sorted(set(problems["rule"])) if len(problems) else [],
    }


def probe_read_csv(path: str) -> dict:
    t0 = time.perf_counter()
    import pandas

    t1 = time.perf_counter()
    frame = pandas.read_csv(path)
    t2 = time.perf_counter()
    return {"import_s": t1 - t0, "work_s": t2 - t1, "n_rows": int(len(frame))}


PROBES = {"check_file": probe_check_file, "read_csv": probe_read_csv}

if __name__ == "__main__":
    what, file = sys.argv[1], sys.argv[2]
    print(json.dumps(PROBES[what](file)))
