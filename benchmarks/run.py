"""Run every benchmark and print refit's figures beside the naive way's, with the ratio.

Usage::

    python benchmarks/run.py                       # sizes 1e3,1e4,1e5,1e6; results/latest.json
    python benchmarks/run.py --quick               # smoke size for CI; results/quick.json
    python benchmarks/run.py --sizes 1e3,1e5 --cases check --json /tmp/out.json
    python benchmarks/run.py --update-readme       # also put the table into benchmarks/README.md

Exit code 0 whatever the timings (they are reported, not asserted) unless ``--strict``,
which exits 1 when a target fails. See benchmarks/README.md.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import os
import platform
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import cases  # noqa: E402
from cases import CASES, Context, Row, Target  # noqa: E402

README = HERE / "README.md"
BEGIN, END = "<!-- results:begin -->", "<!-- results:end -->"


def parse_sizes(text: str) -> list[int]:
    try:
        sizes = [int(float(part)) for part in text.split(",") if part.strip()]
    except ValueError:
        raise argparse.ArgumentTypeError(f"--sizes wants numbers like 1e3,1e4; got {text!r}")
    if not sizes or any(s < 1 for s in sizes):
        raise argparse.ArgumentTypeError(f"--sizes wants positive row counts; got {text!r}")
    return sizes


def parse_args(argv: list[str] | None) -> argparse.Namespace:
    names = [name for name, _, _ in CASES]
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--sizes", type=parse_sizes, default=None,
                   help="row counts, comma-separated (default 1e3,1e4,1e5,1e6; --quick: 1e3)")
    p.add_argument("--quick", action="store_true", help="smoke run: small size, few repeats")
    p.add_argument("--json", type=Path, default=None,
                   help="where to write results (default results/latest.json; --quick: "
                        "results/quick.json)")
    p.add_argument("--cases", default=",".join(names), help=f"subset of {names}")
    p.add_argument("--repeats", type=int, default=None, help="runs per figure (default by size)")
    p.add_argument("--seed", type=int, default=20261201, help="seed of the generated tables")
    p.add_argument("--data-dir", type=Path, default=HERE / "_data",
                   help="where generated tables are cached (gitignored)")
    p.add_argument("--update-readme", action="store_true",
                   help="replace the results table in benchmarks/README.md")
    p.add_argument("--strict", action="store_true", help="exit 1 when a target fails")
    args = p.parse_args(argv)
    unknown = set(args.cases.split(",")) - set(names)
    if unknown:
        p.error(f"--cases: unknown {sorted(unknown)}; choose from {names}")
    if args.sizes is None:
        args.sizes = [1000] if args.quick else [1000, 10_000, 100_000, 1_000_000]
    if args.json is None:
        args.json = HERE / "results" / ("quick.json" if args.quick else "latest.json")
    return args


# --------------------------------------------------------------------------- formatting


def fmt_s(v: float | None) -> str:
    if v is None:
        return "–"
    if v < 0.01:
        return f"{v:.5f}"
    return f"{v:.3f}" if v < 10 else f"{v:.1f}"


def fmt_mb(v: float | None) -> str:
    return "–" if v is None else f"{v:,.0f}"


def fmt_ratio(v: float | None) -> str:
    """refit / naive; below 0.01 as 1/k (k = the speed-up)."""
    if v is None:
        return "–"
    return f"1/{1 / v:,.0f}" if 0 < v < 0.01 else f"{v:.2f}"


def fmt_n(n: int | None) -> str:
    return "–" if n is None else f"{n:,}"


def markdown_table(header: list[str], lines: list[list[str]]) -> str:
    widths = [max(len(h), *(len(r[i]) for r in lines)) if lines else len(h)
              for i, h in enumerate(header)]
    def fmt(cells):
        return "| " + " | ".join(c.ljust(w) for c, w in zip(cells, widths)) + " |"
    rule = "|" + "|".join("-" * (w + 2) for w in widths) + "|"
    return "\n".join([fmt(header), rule, *(fmt(r) for r in lines)])


def rows_table(rows: list[Row]) -> str:
    header = ["case", "n rows", "refit", "refit [s]", "naive", "naive [s]", "ratio",
              "refit peak [MB]", "naive peak [MB]"]
    lines = [[r.case, fmt_n(r.n), r.refit, fmt_s(r.refit_s), r.naive, fmt_s(r.naive_s),
              fmt_ratio(r.ratio), fmt_mb(r.refit_mb), fmt_mb(r.naive_mb)] for r in rows]
    return markdown_table(header, lines)


def targets_table(targets: list[Target]) -> str:
    header = ["target", "measured", "limit", "result"]
    def val(t, v):
        if v is None:
            return "–"
        if t.unit == "MB":
            return fmt_mb(v) + " MB"
        if t.unit == "abs":
            return f"{v:.1e}"
        if t.unit == "x" and t.kind == "min":
            return f"{v:,.0f}×" if v >= 10 else f"{v:.2f}×"
        return (f"{v:.3f}" if t.unit == "s" and v < 0.1 else f"{v:.2f}") + \
            (" s" if t.unit == "s" else "×")
    signs = {"below": "< ", "max": "≤ ", "min": "≥ "}
    lines = [[t.name, val(t, t.measured), signs[t.kind] + val(t, t.limit),
              t.status + (f" ({t.note})" if t.note else "")] for t in targets]
    return markdown_table(header, lines)


def notes_list(rows: list[Row]) -> str:
    return "\n".join(f"- {r.case}, {fmt_n(r.n)} rows, {r.refit}: {r.note}" for r in rows if r.note)


# --------------------------------------------------------------------------- machine & output


def machine() -> dict:
    cpu = platform.processor() or ""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    mem_gb = None
    try:
        mem_gb = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") / 1e9
    except (ValueError, OSError, AttributeError):
        pass
    return {"cores": os.cpu_count(), "cpu": cpu, "memory_gb": mem_gb,
            "load_average_1min_at_start": _load(),
            "platform": platform.platform(), "python": platform.python_version()}


def _load() -> float | None:
    try:
        return round(os.getloadavg()[0], 2)
    except (OSError, AttributeError):
        return None


def versions() -> dict:
    from importlib import metadata

    out = {}
    for dist in ("refit", "pandas", "numpy", "pyarrow", "pandera", "click"):
        try:
            out[dist] = metadata.version(dist)
        except metadata.PackageNotFoundError:
            out[dist] = None
    return out


def report_text(result: dict) -> str:
    rows = [Row(**{k: v for k, v in r.items() if k != "ratio"}) for r in result["rows"]]
    for r in rows:
        if len(r.refit_runs) > 1 and r.refit_s is not None:
            r.note += f"; runs refit {min(r.refit_runs):.4g}–{max(r.refit_runs):.4g} s"
            if r.naive_runs:
                r.note += f", naive {min(r.naive_runs):.4g}–{max(r.naive_runs):.4g} s"
    targets = [Target(**{k: v for k, v in t.items() if k != "status"}) for t in result["targets"]]
    m = result["machine"]
    head = (f"Run {result['date']} on {m['cores']} cores ({m['cpu']}), Python {m['python']}, "
            f"pandas {result['versions']['pandas']}; sizes "
            f"{', '.join(fmt_n(s) for s in result['sizes'])}; {result['total_s']:.0f} s in all; "
            f"1-minute load average {m['load_average_1min_at_start']} at start, "
            f"{m['load_average_1min_at_end']} at end.")
    parts = [head, "", rows_table(rows), "", targets_table(targets)]
    notes = notes_list(rows)
    if notes:
        parts += ["", "Notes:", "", notes]
    return "\n".join(parts)


def update_readme(text: str) -> None:
    body = README.read_text(encoding="utf-8")
    if BEGIN not in body or END not in body:
        raise SystemExit(f"benchmarks: {README.name} has no {BEGIN} ... {END} markers")
    before, rest = body.split(BEGIN, 1)
    _, after = rest.split(END, 1)
    README.write_text(f"{before}{BEGIN}\n{text}\n{END}{after}", encoding="utf-8")


def main(argv: list[str] | None = None) -> int:
    args = parse_args(argv)
    python, refit = cases.python_and_refit()
    ctx = Context(sizes=args.sizes, quick=args.quick, seed=args.seed, data_dir=args.data_dir,
                  python=python, refit=refit, repeats=args.repeats,
                  log=lambda msg: print(msg, file=sys.stderr, flush=True))
    chosen = args.cases.split(",")
    info = machine()  # before the cases run, so the load average is the background load
    rows, targets, start = [], [], time.perf_counter()
    for name, title, fn in CASES:
        if name not in chosen:
            continue
        ctx.log(f"[{name}] {title}")
        got = fn(ctx)
        rows += got.rows
        targets += got.targets
    result = {
        "date": dt.datetime.now().astimezone().isoformat(timespec="seconds"),
        "machine": {**info, "load_average_1min_at_end": _load()},
        "versions": versions(), "sizes": args.sizes,
        "quick": args.quick, "seed": args.seed, "cases": chosen,
        "total_s": time.perf_counter() - start,
        "rows": [r.to_dict() for r in rows], "targets": [t.to_dict() for t in targets],
    }
    args.json.parent.mkdir(parents=True, exist_ok=True)
    tmp = args.json.with_suffix(".json.part")
    tmp.write_text(json.dumps(result, indent=2) + "\n", encoding="utf-8")
    os.replace(tmp, args.json)
    text = report_text(result)
    print(text)
    print(f"\nResults written to {args.json}", file=sys.stderr)
    if args.update_readme:
        update_readme(text)
    return 1 if args.strict and any(t.status == "FAIL" for t in targets) else 0


if __name__ == "__main__":
    sys.exit(main())
