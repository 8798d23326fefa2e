"""Pieces shared by the CLI verbs: error handling, output streams, shared options and printers.

The one module every verb may import besides the library: a verb module imports
``refit.cli.common`` and library modules, never another verb's module. Heavy libraries
(rich, pandas) are imported inside the functions, so ``refit --help`` stays fast.
"""

from __future__ import annotations

import functools
import os
import sys
import traceback
from typing import Callable, TypeVar

import click

F = TypeVar("F", bound=Callable[..., object])

LEADERBOARD_SHOWN = 20  # leaderboard rows printed (all are in the files)
LEADERBOARD_WIDTH = 150  # columns of the printed leaderboard when stdout is not a terminal
ADMIT_MAX_LISTED = 40  # rejected rows listed by an admit report (all are in quarantine)


def guarded(fn: F) -> F:
    """Run a command body; turn refit's errors into ``Error: ...`` and an exit code.

    An unexpected exception is still reported in one line (set ``REFIT_DEBUG=1`` for the
    traceback), so users never see a raw traceback.
    """

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        import warnings

        from refit.errors import RefitError

        try:
            with warnings.catch_warnings():
                if is_quiet():   # -q: nothing but errors, not even a library's warning
                    warnings.simplefilter("ignore")
                return fn(*args, **kwargs)
        except RefitError as exc:
            click.echo(f"Error: {exc}", err=True)
            sys.exit(exc.exit_code)
        except (click.exceptions.Exit, click.ClickException, click.Abort, SystemExit):
            raise
        except KeyboardInterrupt:
            click.echo("Error: interrupted; nothing was half-written.", err=True)
            sys.exit(1)
        except OSError as exc:
            message = os_error_message(exc)
            if message is None:
                raise_unexpected(exc)
            click.echo(f"Error: {message}", err=True)
            sys.exit(2 if _is_path_problem(exc) else 1)
        except RecursionError:
            click.echo("Error: an input is nested too deeply to be read (JSON or TOML nested "
                       "thousands of levels); check the files named on the command line",
                       err=True)
            sys.exit(1)
        except Exception as exc:  # last resort: one line, not a traceback
            raise_unexpected(exc)

    return wrapper  # type: ignore[return-value]


#: errno values that mean "the file system refuses the write", whatever the command
_WRITE_REFUSED = {"EACCES": "permission denied", "EPERM": "not permitted",
                  "EROFS": "the file system is read-only", "ENOSPC": "the disk is full",
                  "EDQUOT": "the disk quota is used up"}


#: errno values that mean a path on the command line names nothing usable
_PATH_PROBLEM = {"ENOENT": "no such file or folder", "ENOTDIR": "a part of the path is a file",
                 "EEXIST": "a file stands where a folder is needed",
                 "EISDIR": "a folder stands where a file is needed"}


def os_error_message(exc: OSError) -> str | None:
    """One line for a write the file system refused (read-only, full, no permission);
    None for any other OSError. Nothing half-written stays: writes are atomic."""
    import errno

    name = errno.errorcode.get(exc.errno or 0, "")
    if name in _PATH_PROBLEM:
        return (f"{exc.filename or 'a path'}: {_PATH_PROBLEM[name]} ({exc.strerror}); check "
                "the paths on the command line: an input must exist, an output folder must "
                "be one that can be made there")
    if name not in _WRITE_REFUSED:
        return None
    where = exc.filename or "a file"
    return (f"{where}: {_WRITE_REFUSED[name]} ({exc.strerror}); nothing was changed (writes "
            "are atomic): free space, make the folder writable or choose another one, then "
            "run the command again")


def _is_path_problem(exc: OSError) -> bool:
    import errno

    return errno.errorcode.get(exc.errno or 0, "") in _PATH_PROBLEM


def raise_unexpected(exc: BaseException) -> None:
    """Report an exception refit did not foresee in one line and exit 1 (the traceback
    with ``-v/--verbose`` or ``REFIT_DEBUG=1``)."""
    if is_verbose():
        traceback.print_exc()
    text = " ".join(str(exc).split())
    text = text if len(text) <= 300 else text[:300] + "..."
    click.echo(f"Error: unexpected {type(exc).__name__}: {text}. This is a refit bug; please "
               "report it with the command you ran (-v or REFIT_DEBUG=1 shows details).", err=True)
    sys.exit(1)


def usage_line(exc: click.UsageError) -> str:
    """A click usage error as one line: what is wrong, the usage and where help is."""
    message = " ".join(exc.format_message().split())
    ctx = exc.ctx
    if ctx is None:
        return f"Error: {message}"
    usage = " ".join(ctx.get_usage().split()).removeprefix("Usage: ")
    return (f"Error: {message.rstrip('.')}; usage: {usage} "
            f"(see `{ctx.command_path} --help`)")


class RefitGroup(click.Group):
    """The command group: a usage error is one ``Error: ...`` line (exit code 2), not
    click's usage block followed by the error."""

    def main(self, args=None, prog_name=None, complete_var=None, standalone_mode=True,
             **extra):
        encode_safely()
        if not standalone_mode:
            return super().main(args, prog_name, complete_var, False, **extra)
        try:
            code = super().main(args, prog_name, complete_var, False, **extra)
        except click.UsageError as exc:
            click.echo(usage_line(exc), err=True)
            sys.exit(exc.exit_code)
        except click.ClickException as exc:
            click.echo(f"Error: {' '.join(exc.format_message().split())}", err=True)
            sys.exit(exc.exit_code)
        except click.Abort:
            click.echo("Error: aborted; nothing was half-written.", err=True)
            sys.exit(1)
        sys.exit(code if isinstance(code, int) else 0)


#: width of a console that is not a terminal (a file, a pipe, a log): wide enough that no
#: table is ever cut; rich draws tables at their natural width, never padded to this
PIPE_WIDTH = 10_000

#: symbols refit prints and their ASCII spelling, for terminals that cannot encode them
ASCII_SYMBOLS = {"°": "deg", "²": "^2", "³": "^3", "×": "x", "±": "+/-", "→": "->",
                 "←": "<-", "≥": ">=", "≤": "<=", "≈": "~", "–": "-", "—": "-", "…": "...",
                 "“": '"', "”": '"', "‘": "'", "’": "'", "σ": "sigma", "µ": "u", "μ": "u",
                 "∞": "inf", "•": "*", "✓": "ok", "✗": "x", "⁰": "^0", "¹": "^1", "⁴": "^4",
                 "⁵": "^5", "⁶": "^6", "⁷": "^7", "⁸": "^8", "⁹": "^9", "\u00a0": " "}
ASCII_ERRORS = "refit-ascii"


def _ascii_fallback(exc: UnicodeError):
    """Codec error handler: the ASCII spelling of a symbol, ``?`` for anything else."""
    if not isinstance(exc, UnicodeEncodeError):
        raise exc
    bad = exc.object[exc.start:exc.end]
    return "".join(ASCII_SYMBOLS.get(ch, "?") for ch in bad), exc.end


def encode_safely() -> None:
    """Let stdout and stderr write any text whatever their encoding.

    A stream whose encoding cannot write refit's symbols (``PYTHONIOENCODING=ascii``, a
    latin-1 terminal) gets them in ASCII (``°C`` -> ``deg C``, ``×`` -> ``x``) instead of
    a crash; rich draws ASCII table borders for such a stream by itself.
    """
    import codecs

    try:
        codecs.lookup_error(ASCII_ERRORS)
    except LookupError:
        codecs.register_error(ASCII_ERRORS, _ascii_fallback)
    for stream in (sys.stdout, sys.stderr):
        encoding = getattr(stream, "encoding", None) or "utf-8"
        try:
            "°×±→²…".encode(encoding)
            continue
        except (UnicodeEncodeError, LookupError):
            pass
        if hasattr(stream, "reconfigure"):
            try:
                stream.reconfigure(errors=ASCII_ERRORS)
            except (ValueError, OSError):  # a stream that cannot be reconfigured
                pass


def stderr_console(quiet: bool = False):
    """A rich console on stderr (progress, logs); quiet when asked (``-q``) or not a
    terminal."""
    from rich.console import Console

    encode_safely()
    quiet = quiet or is_quiet()
    probe = Console(stderr=True)
    return Console(stderr=True, quiet=quiet,
                   width=None if probe.is_terminal else PIPE_WIDTH)


def stdout_console():
    """A rich console on stdout (results): in a file or a pipe no table is cut and no
    line is padded; silent under ``-q`` (nothing but errors)."""
    from rich.console import Console

    encode_safely()
    probe = Console()
    return Console(highlight=False, soft_wrap=True, quiet=is_quiet(),
                   width=None if probe.is_terminal else PIPE_WIDTH)


def say(text: str, *, err: bool = False) -> None:
    """Print a line for people (results, notes), unless ``-q`` asked for nothing but
    errors. Errors go through :func:`guarded` or :func:`finish`, output asked for with
    ``--format json|csv`` through :func:`emit_json` and :func:`emit_csv`."""
    if not is_quiet():
        click.echo(text, err=err)


def finish(ok: bool, failure: str) -> None:
    """End a command that wrote what it could: exit 0 when ``ok``, else 1. Under ``-q``
    a failure is said in one ``Error:`` line on stderr (``failure``: what failed and that
    the command without -q lists it), since nothing else is printed."""
    if not ok and is_quiet():
        click.echo(f"Error: {failure}", err=True)
    click.get_current_context().exit(0 if ok else 1)


def problems_failure(result, verb: str) -> str:
    """The one line :func:`finish` says under ``-q`` when an apply-like command met
    problems (rows or files that could not be evaluated)."""
    n = len(getattr(result, "problems", []) or [])
    return (f"{plural(n, 'problem')}: some files or rows could not be evaluated (the rest "
            f"was written); `refit {verb}` without -q lists them")


# --- the options every command has: -q/--quiet, -v/--verbose -------------------------

def is_quiet() -> bool:
    """Whether the running command was given ``-q/--quiet``."""
    ctx = click.get_current_context(silent=True)
    return bool(ctx and ctx.find_root().meta.get("refit.quiet"))


def is_verbose() -> bool:
    """Whether the running command was given ``-v/--verbose`` (or ``REFIT_DEBUG`` is set)."""
    if os.environ.get("REFIT_DEBUG"):
        return True
    ctx = click.get_current_context(silent=True)
    return bool(ctx and ctx.find_root().meta.get("refit.verbose"))


def _remember(key):
    def callback(ctx, param, value):
        if value:
            ctx.find_root().meta[key] = True
        return value
    return callback


def add_common_options(command: click.Command) -> click.Command:
    """Give a command ``-q/--quiet`` and ``-v/--verbose`` (unless it has its own ``--quiet``,
    which then also answers to ``-q``)."""
    names = {opt for p in command.params for opt in getattr(p, "opts", [])}
    if "--quiet" not in names:
        command.params.append(click.Option(
            ["-q", "--quiet", "refit_quiet"], is_flag=True, expose_value=False,
            callback=_remember("refit.quiet"),
            help="Print nothing but errors (files are still written; output asked for "
                 "with --format json|csv still goes to stdout)."))
    else:
        for p in command.params:
            if "--quiet" in getattr(p, "opts", []):
                if "-q" not in p.opts:
                    p.opts.append("-q")
                user = p.callback
                p.callback = (lambda ctx, param, value, _u=user:
                              _remember("refit.quiet")(ctx, param, _u(ctx, param, value)
                                                       if _u else value))
    if "--verbose" not in names:
        command.params.append(click.Option(
            ["-v", "--verbose", "refit_verbose"], is_flag=True, expose_value=False,
            callback=_remember("refit.verbose"),
            help="More detail: an unexpected error prints its traceback (as REFIT_DEBUG=1)."))
    return command


# --- machine-readable output: --format json | csv ---------------------------------------

def format_option(*choices: str):
    """``--format`` with ``text`` first (for people) and the given machine formats."""
    return click.option("--format", "fmt", type=click.Choice(["text", *choices]),
                        default="text", show_default=True,
                        help="Output for people (text) or programs (" + ", ".join(choices)
                             + "); json and csv go to stdout, nothing else does.")


def jsonable(value):
    """Plain JSON values: numpy numbers and arrays, frames (records), NaN -> null."""
    import math

    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, set)):
        return [jsonable(v) for v in value]
    if hasattr(value, "to_dict") and hasattr(value, "columns"):
        return [jsonable(r) for r in value.to_dict(orient="records")]
    if hasattr(value, "tolist"):
        return jsonable(value.tolist())
    if isinstance(value, float) and (math.isnan(value) or math.isinf(value)):
        return None
    if value is None or isinstance(value, (str, int, float, bool)):
        return value
    return str(value)


def emit_json(obj) -> None:
    """One JSON document on stdout."""
    import json

    click.echo(json.dumps(jsonable(obj), indent=1, ensure_ascii=False, allow_nan=False))


def emit_csv(frame) -> None:
    """A table as CSV on stdout (no index)."""
    click.echo(frame.to_csv(index=False), nl=False)


def plural(n: int, word: str) -> str:
    """'1 row', '2 rows'."""
    return f"{n} {word}" if n == 1 else f"{n} {word}s"


def compact_notes(notes: list[str], width: int = 96) -> list[str]:
    """Reader and mapping notes for people: plain renames folded into a few lines.

    Unit conversions keep a line each (they change numbers, so they must stand out);
    columns that were only renamed are listed together.
    """
    import re
    import textwrap

    renamed, out = [], []
    for note in notes:
        m = re.match(r"column '(.*)' -> (\w+) \(renamed(?:; already in [^)]*)?\)$", note)
        if m:
            renamed.append(f"'{m.group(1)}'->{m.group(2)}")
        else:
            out.append(note)
    if renamed:
        text = f"renamed {plural(len(renamed), 'column')}: " + ", ".join(renamed)
        lines = textwrap.wrap(text.replace(" ", "\0").replace(",\0", ", "), width=width,
                              break_long_words=False, break_on_hyphens=False)
        out.append("\n    ".join(line.replace("\0", " ") for line in lines))
    return out


# --- numbers and options shared by apply and compare --------------------------------

def fmt_number(x) -> str:
    """A number in 4 significant digits for people; "-" for a missing one, "inf"/"-inf"."""
    import math

    if not isinstance(x, (int, float)) or math.isnan(x):
        return "-"
    return f"{x:.4g}" if abs(x) != float("inf") else ("-inf" if x < 0 else "inf")


def _level(ctx, param, value):
    if value is not None and not 0 < value < 1:
        raise click.BadParameter("must lie between 0 and 1, e.g. 0.95")
    return value


def fossil_options(fn):
    """Options shared by `apply` and `compare`."""
    for opt in reversed([
        click.option("--level", type=float, default=None, callback=_level,
                     help="Interval coverage [default: each file's own; a published +- "
                          "keeps its own]."),
        click.option("--decompact", is_flag=True,
                     help="Decompact depths and thicknesses for burial first "
                          "(Sheldon & Retallack 2001); recorded per row."),
        click.option("--compaction-constants", "constants_file", metavar="FILE",
                     type=click.Path(dir_okay=False, path_type=str),
                     help="Compaction constants per soil order or lithology (JSON or CSV: "
                          "key, initial_solidity, k_per_km, source)."),
        click.option("--seed", type=int, default=0, show_default=True,
                     help="Seed of the Monte Carlo propagation."),
    ]):
        fn = opt(fn)
    return fn


def posterior_options(fn):
    """``--posterior`` and its ``--prior SPEC``, shared by `apply` and `section`; the
    command reads them with :func:`posterior_prior`."""
    for opt in reversed([
        click.option("--posterior", is_flag=True,
                     help="Add the posterior for climate from forward files (one proxy, and "
                          "all proxies of a paleosol together)."),
        click.option("--prior", metavar="SPEC",
                     help="Prior of --posterior: uniform:LOW:HIGH or normal:MEAN:SD in "
                          "climate units (default uniform over the calibration range)."),
    ]):
        fn = opt(fn)
    return fn


def posterior_prior(posterior: bool, prior: str | None):
    """The prior of ``--posterior`` (None: the default), from ``--prior SPEC``.

    Raises
    ------
    UsageError
        ``--prior`` without ``--posterior``, or a SPEC not understood
        (:func:`refit.apply.posterior.parse_prior`).
    """
    from refit.apply.posterior import parse_prior
    from refit.errors import UsageError

    if prior and not posterior:
        raise UsageError("--prior is the prior of --posterior; add --posterior")
    return parse_prior(prior)


def print_problems_and_cautions(result, console) -> None:
    """Problems (file and row level) and the cautions."""
    from rich.text import Text

    if result.problems:
        console.print(Text(f"{plural(len(result.problems), 'problem')}:", style="bold red"))
        for p in result.problems:
            pid = (f"paleosol {p['paleosol_id']} " if p.get("paleosol_id")
                   else "a paleosol without an id ")
            where = f"{pid}(row {p['row']}): " if p.get("row") else ""
            console.print(Text(f"  - {where}{p['message']}"))
    console.print(Text("Cautions:", style="bold"))
    for c in result.cautions:
        console.print(Text(f"  - {c}"))


# --- progress (fit, demo) -----------------------------------------------------------

class Progress:
    """A rich progress bar on stderr driven by ``progress(total=...)`` / ``(advance=1)``."""

    def __init__(self, console):
        self.console = console
        self.bar = None
        self.task = None

    def __enter__(self):
        from rich.progress import BarColumn, MofNCompleteColumn, TextColumn
        from rich.progress import Progress as RichProgress

        self.bar = RichProgress(TextColumn("{task.description}"), BarColumn(),
                            MofNCompleteColumn(), console=self.console, transient=True)
        self.bar.__enter__()
        self.task = self.bar.add_task("reading the data", total=None)
        return self

    def __call__(self, *, total=None, advance=0, label=None):
        if total is not None:
            self.bar.update(self.task, total=total)
        if advance:
            self.bar.update(self.task, advance=advance, description=label or "")

    def __exit__(self, *exc):
        self.bar.__exit__(*exc)
        return False


# --- printers of results (fit, admit, compare; demo reuses them) --------------------

def _fmt_cell(v, fmt="{:.1f}") -> str:
    """A leaderboard cell: ``fmt`` applied, "-" for a missing value."""
    import math

    if v is None or (isinstance(v, float) and math.isnan(v)):
        return "-"
    return fmt.format(v)


def print_run(run, out, console=None, *, caution: bool = True) -> None:
    """Print the data, the subset, the leaderboard, the verdict and (``caution``, for a
    caller that does not print its own) the caution."""
    from rich.table import Table
    from rich.text import Text

    from refit.coefficients import CAUTION

    c = console or stdout_console()
    if not c.is_terminal:
        c.width = max(c.width, LEADERBOARD_WIDTH)  # files and pipes: no truncated columns
    d, m, r = run.data, run.matrix, run.recipe
    version = f", dataset version {d['version']}" if d.get("version") is not None else ""
    c.print(Text(f"Data: {d['kind']} {d['name']!r} ({d['path']}){version}, sha256 "
                 f"{d['sha256']}", style="bold"))
    c.print(f"Subset: {run.subset.n_start} records")
    for s in run.subset.steps:
        c.print(f"  {s['step']}: {s['kept']} kept ({s['removed']} removed)")
    for note in run.subset.notes:
        c.print(Text(f"  note: {note}", style="yellow"))
    main, kf = m.schemes["main"], m.schemes["kfold"]
    c.print(f"Validation: {_scheme_text(main)}{_split_text(m.split_details['main'])}"
            + (f"; beside it random {_scheme_text(kf)}" if kf is not None else ""))
    c.print(f"Candidates: {len(m.specs)} fitted, {len(m.skipped)} skipped; interval level "
            f"{r.level:g}")
    for note in getattr(run, "defaults", []):
        c.print(Text(f"Default: {note}.", style="cyan"))
    for warning in getattr(run, "warnings", []):
        c.print(Text(f"Warning: {warning}.", style="bold yellow"))
    from refit.validate.candidates import response_unit

    unit = response_unit(r.response)
    units = f"; RMSEP, bias, width and score in {unit}" if unit else ""
    table = Table(title=f"Leaderboard: {r.function_id} ({main.name}{units})",
                  title_justify="left")
    heads = ["#", "candidate", "RMSEP", "bias", "coverage", "width", "score", "k-fold RMSEP",
             "k-fold score", "R² in", "AIC"]
    for h in heads:
        table.add_column(h, justify="left" if h == "candidate" else "right")
    shown = m.leaderboard.head(LEADERBOARD_SHOWN)
    for row in shown.itertuples(index=False):
        table.add_row(str(row.rank), row.candidate + ("" if row.coverage_ok else " *"),
                      _fmt_cell(row.rmsep), _fmt_cell(row.bias),
                      _fmt_cell(row.coverage, "{:.3f}"), _fmt_cell(row.mean_width),
                      _fmt_cell(row.interval_score), _fmt_cell(row.kfold_rmsep),
                      _fmt_cell(row.kfold_interval_score),
                      _fmt_cell(row.r2_in_sample, "{:.3f}"), _fmt_cell(row.aic))
    c.print(table)
    if len(m.leaderboard) > LEADERBOARD_SHOWN:
        c.print(f"({len(m.leaderboard) - LEADERBOARD_SHOWN} more in leaderboard.csv)")
    if not shown["coverage_ok"].astype(bool).all():  # a footnote only to a starred row
        c.print(f"* coverage below {r.level - m.tolerance:.1%} falls short of {r.level:.0%} "
                "(one-sided 95% exact binomial bound): ranked after every candidate that covers")
    c.print("R² in, AIC: fitted on the whole subset, each on its equation's own response "
            "(forward fits model the feature): compare AIC only within one direction.")
    c.print(Text(f"Rule: {m.verdict['rule']}.", style="dim"))
    c.print(Text(f"Top: {m.verdict['why']}.", style="bold green"))
    _print_top_equation(c, out, m.verdict.get("winner"))
    if m.verdict["simpler_why"]:
        c.print(Text(f"Simpler: {m.verdict['simpler_why']}.", style="cyan"))
    for note in unbounded_lines(m.leaderboard):
        c.print(Text(note, style="yellow"))
    opt = m.verdict.get("optimism")
    if opt:
        ratio = opt["median_rmsep_ratio"]
        verdict = ("random k-fold flatters" if ratio > 1.005 else
                   "random k-fold does not flatter on this subset")
        name = "leave-one-out" if main.name == "loo" else main.name
        c.print(f"Optimism: {verdict}: {name}'s RMSEP is {ratio:.2f} times "
                f"and its interval score {opt['median_score_ratio']:.2f} times random "
                "k-fold's (median over candidates).")
    _print_skipped(c, m.skipped)
    if caution:
        c.print(Text(f"Caution: {CAUTION}", style="yellow"))
    c.print(f"Run written to {out}")


def unbounded_lines(board) -> list[str]:
    """One line per reason an out-of-fold interval was unbounded, naming every candidate it
    applies to (group-jackknife+ and group-cv+ share one reason: said once)."""
    if "unbounded_reason" not in board:
        return []
    by_reason: dict[str, list[str]] = {}
    for cand, reason in zip(board["candidate"], board["unbounded_reason"]):
        if isinstance(reason, str) and reason:
            by_reason.setdefault(reason, []).append(str(cand))
    return [f"Unbounded: {', '.join(c)} {'is' if len(c) == 1 else 'are'} unbounded (infinite "
            "width, counted as covering, ranked last among the covering candidates): "
            f"{reason}." for reason, c in by_reason.items()]


def _print_top_equation(c, out, winner) -> None:
    """The top candidate's equation as it produces estimates (its file's numbers)."""
    import json
    from pathlib import Path

    from rich.text import Text

    from refit.report.equations import used_equation
    from refit.validate.runfolder import fit_filename

    if not winner or out is None:
        return
    try:
        record = json.loads((Path(out) / "fits" / fit_filename(winner)).read_text("utf-8"))
    except (OSError, ValueError):
        return
    used = used_equation(record, ascii_only=not can_encode(c, "×±²"))
    c.print(Text(f"Equation: {used['text']}", style="bold"))
    if used["note"]:
        c.print(Text(f"  The {used['note']}.", style="cyan"))


def can_encode(console, text: str) -> bool:
    """Whether the console's stream can write ``text`` (an ASCII-only terminal cannot)."""
    encoding = getattr(console, "encoding", None) or "utf-8"
    try:
        text.encode(encoding)
    except (UnicodeEncodeError, LookupError):
        return False
    return True


def _print_skipped(c, skipped) -> None:
    """Skipped combinations grouped by reason (all of them are in leaderboard.json)."""
    from rich.text import Text

    if not skipped:
        return
    by_reason: dict[str, list[str]] = {}
    for s in skipped:
        by_reason.setdefault(s["reason"], []).append(s["candidate"])
    c.print(f"Skipped {len(skipped)} combination(s):")
    for reason, labels in by_reason.items():
        shown = ", ".join(labels[:3]) + (f" and {len(labels) - 3} more" if len(labels) > 3
                                         else "")
        c.print(Text(f"  {reason}: {shown}", style="dim"))


def _split_text(d: dict) -> str:
    """Groups or blocks of a split, e.g. `` (4 groups)``, `` (25 k-means blocks, ~38 km)``."""
    if d.get("block_km") is not None:
        return f" ({d['n_blocks']} {d['block_method']} blocks, ~{d['block_km']:.0f} km)"
    if d.get("n_groups") is not None:
        return f" ({d['n_groups']} groups)"
    return ""


def _scheme_text(s) -> str:
    if s.name == "loo":
        return "leave-one-out"
    if s.name == "leave-one-group-out":
        return f"leave-one-group-out by {s.groups}"
    by = f" by {s.groups}" if s.groups and s.name != "spatial-block" else ""
    return f"{s.name} {s.folds} folds x {s.repeats} repeat(s){by}, seed {s.seed}"


def problem_block_lines(groups, max_blocks: int | None = None, *,
                        what: str = "") -> list[str]:
    """Text lines of grouped problems (:func:`refit.curate.problems.group_problems`): a
    line locating each block (rule, column, value, count, rows, and the id of a single
    row's block, after ``what``: ``"paleosol "`` for a fossil table), then its message
    once."""
    import textwrap

    lines = []
    shown = groups if max_blocks is None else groups.head(max_blocks)
    for g in shown.itertuples(index=False):
        where = f"  [{g.rule}] {g.column}" if g.column else f"  [{g.rule}]"
        if g.value:
            where += f" = {g.value!r}"
        if g.rows:
            pid = f" ({what}{g.profile_id})" if g.profile_id else ""
            where += f": {plural(int(g.count), 'row')} {g.rows}{pid}"
        lines.append(where)
        lines += textwrap.wrap(str(g.message), width=96, initial_indent="      ",
                               subsequent_indent="      ", break_long_words=False,
                               break_on_hyphens=False)
    return lines


def render_admit(result, max_rows: int | None = None) -> list[str]:
    """The text report of an admit, one line per item; problems grouped per rule, column
    and value (``max_rows`` blocks at most)."""
    from pathlib import Path

    import pandas as pd

    store = Path(result.store)
    out = [f"Note: {m}." for m in result.recovered]
    if result.created:
        verb = "would create" if result.dry_run else "created"
        out.append(f"New store: {verb} the store '{store.name}' in {store}.")
    out.append(f"Read {result.table}: {result.rows_read} rows ({'; '.join(result.reader_notes[1:])}).")
    if result.mappings:
        out.append("Columns mapped:")
        out += [f"  {line}" for line in compact_notes(result.mappings)]
    if result.unmapped:
        out.append("Columns not mapped (kept as extra columns, unchecked):")
        out += [f"  {u['column']!r}: {_after_kept(u['how'])}" for u in result.unmapped]
    out += [f"Note: {line}." for line in result.consistency]
    out.append(f"Rows read {result.rows_read} = accepted {result.accepted} + rejected "
               f"{result.rejected} + suspect {result.suspect}.")
    would = "would go" if result.dry_run else "went"
    if result.new_version:
        out.append(f"  accepted {result.accepted} {would} to {store / result.records_file} "
                   f"(version {result.version_before + 1}, {result.row_count_after} rows)")
    else:
        out.append(f"  nothing accepted: no new dataset version (the store stays at version "
                   f"{result.version_before}); the attempt is recorded in the changelog")
    if result.suspect_accepted:
        out.append(f"  {result.suspect_accepted} suspect rows admitted with --accept-suspect")
    if result.quarantine_file:
        out.append(f"  rejected and suspect rows {would} to {store / result.quarantine_file} "
                   "(each row unchanged, with _reasons and _source_row)")
    if result.problems_file:
        out.append(f"  every problem {would} to {store / result.problems_file}")
    groups = pd.DataFrame(result.problem_groups)
    for severity, title in (("error", "Rejected"), ("suspect", "Suspect (quarantined)"),
                            ("warning", "Warnings (rows admitted anyway)")):
        part = groups[groups["severity"] == severity] if len(groups) else groups
        if len(part):
            out.append(f"{title}: {plural(int(part['count'].sum()), 'problem')} in "
                       f"{plural(len(part), 'block')}:")
            out += problem_block_lines(part, max_rows)
            if max_rows is not None and len(part) > max_rows:
                out.append(f"  ... {len(part) - max_rows} more blocks (raise --max-rows; "
                           "every row is in the problems file)")
    if result.dry_run:
        out.append("Dry run: nothing was written.")
    elif result.new_version:
        out.append(f"Store '{store.name}' is now at version {result.version_after} "
                   f"({result.row_count_after} rows, records sha256 "
                   f"{result.records_sha256[:12]}...).")
    else:
        out.append(f"Store '{store.name}' stays at version {result.version_after}.")
    return out


#: how each unmapped column's advice starts; the admit's heading says it once for all
KEPT_PREFIX = "refit keeps it as an extra column, unchecked; "


def _after_kept(how: str) -> str:
    """An unmapped column's advice without the words the heading already says."""
    return how.removeprefix(KEPT_PREFIX)


def print_comparison(table, console, indent: str = "") -> None:
    """Per paleosol, one line per fit: estimate, interval, and what is beside it (every
    line after ``indent``)."""
    from rich.text import Text

    from refit._util.numbers import reading_texts
    from refit.apply.compare import coverage_text
    from refit.curate.schema import unit_notation

    for pid, grp in table.groupby("paleosol_id", sort=False):
        console.print(Text(f"{indent}{pid}", style="bold"))
        for r in grp.itertuples(index=False):
            line = Text(f"{indent}  {r.fit}: ")
            if r.problem:
                line.append(f"not evaluated ({r.problem})", style="red")
            else:
                est, lo, hi = reading_texts(r.estimate, r.lower, r.upper)
                line.append(f"{est} [{lo}, {hi}] {unit_notation(r.unit)}; "
                            + coverage_text(r.cv_coverage, r.cv_scheme, r.level, r.interval))
                if r.flags:
                    line.append(f"; flags: {str(r.flags).replace(';', ', ')}",
                                style="yellow")
            console.print(line)
