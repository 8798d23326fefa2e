"""`refit verify`: check a coefficient file or a whole registry; refit from a store."""

from __future__ import annotations

import click

from refit.cli.common import finish, guarded, say
from refit.errors import UsageError


@click.command("verify", short_help="Check a coefficient file or registry; refit from a store.")
@click.argument("target", type=click.Path(path_type=str))
@click.option("--store", default=None, metavar="STORE", type=click.Path(path_type=str),
              help=("Calibration store, or the table file a table-based fit was made on: refit "
                    "from the recorded dataset version and compare."))
@click.option("--sheet", default=None, metavar="NAME",
              help=("With --store and a workbook: read this worksheet instead of the one the "
                    "file records (provenance.dataset.sheet), e.g. for a schema 1.3.0 file "
                    "fitted on a named sheet. Default: the recorded sheet, else the first "
                    "visible one."))
@click.option("--tolerance", type=click.FloatRange(min=0), default=1e-9, show_default=True,
              help="Largest difference allowed when refitting (relative above 1).")
@click.option("--trust", "trust", multiple=True, metavar="PUBKEYFILE",
              type=click.Path(dir_okay=False, path_type=str),
              help="Also require a signature by this Ed25519 public key (KEYFILE.pub from "
                   "`refit keygen`; repeatable: any of them).")
@click.option("--format", "fmt", type=click.Choice(["text", "json"]), default="text",
              show_default=True, help="Report for people (text) or programs (json).")
@guarded
def verify(target: str, store: str | None, sheet: str | None, tolerance: float,
           trust: tuple[str, ...], fmt: str) -> None:
    """Check TARGET: a coefficient file, or a registry folder (every file and its index).

    A file must carry the sha256 of its content, be byte for byte as refit writes it and
    match the coefficient-file schema. With --store, the recorded dataset version is rebuilt
    from the store, the recorded subset and recipe settings are applied, the same equation
    is refitted and cross-validated again (a fit made on a workbook rereads the worksheet
    the file records, or --sheet), and every fitted number, the valid domain and
    the cross-validated skill must agree within the tolerance. For a registry, index.json
    must agree with the files (versions, hashes) and each file with its own hash; what
    disagrees is named. With --trust, each file must also carry a signature
    (<file>.sig) by one of the trusted keys: only a signature tells who published a file.

    \b
    Exit codes: 0 every check passed, 1 a check failed (edited file, index disagrees,
    does not reproduce), 2 unreadable file, missing registry or store, usage error.

    \b
    Examples:
      refit verify registry/map_from_bk_depth/1.0.0.json --store store
      refit verify registry
      refit verify registry --trust lab.key.pub
    """
    import json
    from pathlib import Path

    from refit.publish.verify import trusted_keys, verify_file, verify_registry

    keys = trusted_keys(trust) if trust else None
    path = Path(target)
    if sheet is not None and (store is None or path.is_dir()):
        raise UsageError("--sheet names the worksheet to refit one file from: give it with "
                         "--store WORKBOOK.xlsx and a coefficient file, not "
                         + ("a registry folder" if store is not None else "without --store"))
    if path.is_dir():
        from refit.publish.registry import open_registry

        for message in open_registry(path).recovered:  # finish an interrupted publish
            say(f"Note: {message}.", err=True)
        report = verify_registry(path, store=store, tol=tolerance, trust=keys)
    else:
        report = verify_file(path, store=store, tol=tolerance, trust=keys, sheet=sheet)
    if fmt == "json":
        click.echo(json.dumps(report.to_dict(), indent=2, ensure_ascii=False))
    else:
        for check in report.checks:
            mark = "ok  " if check.ok else "FAIL"
            where = "" if check.file == report.target or not check.file else f" {check.file}:"
            say(f"{mark} {check.name:<9}{where} {check.message}")
    n_bad = len(report.failures())
    if fmt != "json":
        say(f"{target}: " + ("verified" if report.ok else f"{n_bad} check(s) failed"))
    finish(report.ok, f"{target}: {n_bad} check(s) failed; `refit verify` without -q "
                      "names them")
