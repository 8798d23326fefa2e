"""`refit diff`: what changed between two coefficient files."""

from __future__ import annotations

import click

from refit.cli.common import guarded, is_quiet

WIDTH = 140  # columns of the tables when stdout is not a terminal


@click.command("diff", short_help="Compare two coefficient files: numbers, skill, provenance.")
@click.argument("items", nargs=-1, metavar="FILE_A FILE_B | FUNCTION_ID VERSION_A [VERSION_B]")
@click.option("--registry", "registry", default=None, metavar="REGISTRY",
              type=click.Path(path_type=str),
              help="Name the files by function id and versions in this registry.")
@click.option("--variant", "variants", multiple=True, metavar="NAME",
              help="With --registry: the variant the versions belong to [default: the "
                   "unnamed one]; given twice, A's then B's.")
@click.option("--at", "at", type=float, multiple=True, metavar="VALUE",
              help="Predictor value to compare the estimates at (repeatable; one-predictor "
                   "files) [default: minimum, quartiles and maximum of the valid ranges].")
@click.option("--level", type=click.FloatRange(0, 1, min_open=True, max_open=True),
              default=None, help="Interval level [default: each file's own].")
@click.option("--all", "show_all", is_flag=True, help="Show unchanged rows too.")
@click.option("--format", "fmt", type=click.Choice(["text", "json"]), default="text",
              show_default=True, help="Table for people (text) or programs (json).")
@guarded
def diff(items: tuple[str, ...], registry: str | None, variants: tuple[str, ...],
         at: tuple[float, ...], level: float | None, show_all: bool, fmt: str) -> None:
    """Say what changed from FILE_A to FILE_B (coefficient files).

    First, whether the two compare like with like: the same model of one function and
    variant (B a refit of A), or different functions, different variants (separate version
    chains) or different models, with what differs (function id, variant, response,
    predictors, form, estimator, direction, interval method, subset, data); the numbers are
    compared either way. Then coefficients and their standard errors, residual error, n
    and R², the valid domain, the cross-validation skill, the provenance (dataset, version,
    subset, recipe), the version bump the changes call for (within one chain only), and
    the estimate and interval of each file at reference values of the predictor. Both
    files are hash-checked first.

    With --registry, name a function id and two versions of one variant instead of files
    (VERSION_B left out: the variant's latest version).

    \b
    Exit codes: 0 compared, 1 a file fails its hash or schema, 2 unreadable file, a
    function, variant or version not in the registry, or usage error.

    \b
    Examples:
      refit diff run/fits/linear__ols__inverse__analytic.json registry/map_from_bk_depth/1.0.0.json
      refit diff run/fits/linear__ols__inverse__analytic.json run/fits/linear__huber__inverse__analytic.json --at 50 --at 100 --format json
      refit diff map_from_bk_depth 1.0.0 2.0.0 --registry registry
      refit diff map_from_bk_depth 1.0.0 1.0.0 --registry registry --variant default --variant ols
    """
    import json

    from refit.publish.diff import diff_files

    file_a, file_b = _files(items, registry, variants)
    result = diff_files(file_a, file_b, at=list(at) or None, level=level)
    if fmt == "json":
        from refit.coefficients import plain

        click.echo(json.dumps(plain(result), indent=2, ensure_ascii=False))
        return
    render(result, show_all)


def _files(items: tuple[str, ...], registry: str | None, variants: tuple[str, ...]):
    """The two files to compare: as named, or resolved in the registry."""
    ctx = click.get_current_context()
    if registry is None:
        if variants:
            raise click.UsageError("--variant names a variant in a registry: give "
                                   "--registry REGISTRY too", ctx=ctx)
        if len(items) < 2:
            missing = "FILE_A" if not items else "FILE_B"
            raise click.UsageError(f"Missing argument '{missing}'", ctx=ctx)
        if len(items) > 2:
            raise click.UsageError(f"two coefficient files are compared, got {len(items)} "
                                   "arguments (to name versions, give --registry REGISTRY "
                                   "FUNCTION_ID VERSION_A VERSION_B)", ctx=ctx)
        return items
    if len(items) not in (2, 3):
        raise click.UsageError("with --registry, name FUNCTION_ID VERSION_A [VERSION_B]; "
                               f"got {len(items)} argument(s)", ctx=ctx)
    if len(variants) > 2:
        raise click.UsageError("--variant is given once (both versions) or twice (A's, "
                               f"then B's); got {len(variants)}", ctx=ctx)
    from refit.publish.registry import resolve

    fid, version_a, *rest = items
    va = variants[0] if variants else None
    vb = variants[-1] if variants else None
    return (resolve(registry, fid, version_a, va),
            resolve(registry, fid, rest[0] if rest else None, vb))


def _fmt(v) -> str:
    if v is None:
        return "-"
    if isinstance(v, bool):
        return str(v).lower()
    if isinstance(v, float):
        return f"{v:.6g}"
    text = str(v)
    return text[:16] + "..." if len(text) == 64 and all(c in "0123456789abcdef" for c in text) \
        else text


def _label(h: dict) -> str:
    """``map_from_bk_depth/mixed 1.1.0`` (the default variant unnamed), or ``... candidate``."""
    name = h["function_id"] if h.get("variant") in (None, "default") else \
        f"{h['function_id']}/{h['variant']}"
    return f"{name} {h['version']}"


def _table(title: str, rows: list[dict], cols: list[tuple[str, str]], show_all: bool):
    from rich.table import Table

    if not show_all:
        rows = [r for r in rows if not r.get("same", False)]
    if not rows:
        return None
    table = Table(title=title, title_justify="left", show_edge=False)
    for _, head in cols:
        table.add_column(head, justify="left")
    for r in rows:
        table.add_row(*(_fmt(r.get(k)) for k, _ in cols))
    return table


def render(result: dict, show_all: bool = False) -> None:
    """Print a diff for people: a header, then one table per section that changed."""
    import sys

    from rich.console import Console

    out = Console(highlight=False, soft_wrap=True, markup=False, quiet=is_quiet(),
                  width=None if sys.stdout.isatty() else WIDTH)
    a, b, like = result["a"], result["b"], result["comparison"]
    out.print(like["statement"])
    if like["differences"]:
        out.print("They differ in: " + "; ".join(
            f"{d['item']} ({_fmt(d['a'])} / {_fmt(d['b'])})" for d in like["differences"]))
    out.print(f"A: {a['path']} ({_label(a)})")
    out.print(f"B: {b['path']} ({_label(b)})")
    for note in result["notes"]:
        out.print(f"Note: {note}")
    if not like["same_chain"]:
        out.print("The numbers below compare two models side by side, not two versions.")
    elif result["bump"] is None:
        out.print("No change in content (dates, versions and hashes aside).")
    else:
        out.print(f"The changes call for a {result['bump']} version bump.")
    unit = f" [{b['unit']}]" if b.get("unit") else ""
    ab = [("a", "A"), ("b", "B"), ("change", "B - A")]
    sections = [
        ("Coefficients", result["coefficients"],
         [("term", "term"), ("a", "A"), ("se_a", "SE A"), ("b", "B"), ("se_b", "SE B"),
          ("change", "B - A")]),
        ("Fit", result["fit"], [("quantity", "quantity"), *ab]),
        ("Domain", result["domain"], [("item", "item"), *ab]),
        ("Cross-validation", result["cv"], [("metric", "metric"), *ab]),
        ("Provenance", result["provenance"], [("item", "item"), ("a", "A"), ("b", "B")]),
    ]
    for title, rows, cols in sections:
        table = _table(title, rows, cols, show_all)
        if table is not None:
            out.print()
            out.print(table)
    ref = result["at_reference"]
    if ref:
        names = [k for k in ref[0] if not any(k.startswith(p) for p in (
            "estimate_", "lower_", "upper_", "flags_", "width_", "change_"))]
        cols = [(n, n) for n in names] + [
            ("estimate_a", "estimate A"), ("estimate_b", "estimate B"),
            ("change_estimate", "B - A"), ("width_a", "width A"), ("width_b", "width B"),
            ("change_width", "width B - A"), ("flags_a", "flags A"), ("flags_b", "flags B")]
        out.print()
        out.print(_table(f"Estimate and interval width at reference values{unit}", ref,
                         cols, True))
