"""`refit publish`: copy a candidate coefficient file into a registry as a new version."""

from __future__ import annotations

import click

from refit.cli.common import guarded


@click.command("publish", short_help="Publish a candidate fit as an immutable, versioned file.")
@click.argument("candidate", type=click.Path(path_type=str))
@click.option("--to", "registry", required=True, metavar="REGISTRY",
              type=click.Path(path_type=str), help="Registry folder.")
@click.option("--bump", type=click.Choice(["major", "minor", "patch"]), default=None,
              help="Version bump [default: the smallest one the changes call for].")
@click.option("--init", "create", is_flag=True,
              help="Start a new registry if REGISTRY is missing or empty.")
@click.option("--dry-run", is_flag=True, help="Say which version it would be; write nothing.")
@click.option("--sign", "sign", default=None, metavar="KEYFILE",
              type=click.Path(dir_okay=False, path_type=str),
              help="Sign the published file with this Ed25519 private key (made by `refit "
                   "keygen`); the signature lands beside it as <version>.json.sig.")
@click.option("--format", "fmt", type=click.Choice(["text", "json"]), default="text",
              show_default=True, help="Report for people (text) or programs (json).")
@guarded
def publish(candidate: str, registry: str, bump: str | None, create: bool, dry_run: bool,
            sign: str | None, fmt: str) -> None:
    """Publish CANDIDATE (a run's fits/<candidate>.json) into REGISTRY.

    Writes REGISTRY/<function_id>/<version>.json (read-only, never replaced) and adds it to
    REGISTRY/index.json. The version follows semver against the latest published one:
    major when the form, predictors, response or direction changed; minor when the data,
    its version, the subset, the estimator or any fitted number changed; patch for
    metadata only. refit proposes that bump and refuses a smaller --bump; the first
    version is 1.0.0.

    \b
    Exit codes: 0 published, 1 bump too small, nothing changed, version exists, bad hash
    or schema, busy registry, 2 unreadable file, missing registry or usage error.

    \b
    Examples:
      refit publish run/fits/linear__ols__inverse__analytic.json --to registry --dry-run
      refit publish run/fits/quadratic__ols__inverse__analytic.json --to registry --sign lab.key
      refit publish run/fits/linear__ols__inverse__analytic.json --to new-registry --init
    """
    import json

    from refit.publish.registry import publish as run_publish

    result = run_publish(candidate, registry, bump=bump, create=create, dry_run=dry_run,
                         sign=sign)
    if fmt == "json":
        click.echo(json.dumps(result.to_dict(), indent=2, ensure_ascii=False))
        return
    for message in result.recovered:
        click.echo(f"Note: {message}.", err=True)
    verb = "Would publish" if dry_run else "Published"
    click.echo(f"{verb} {result.function_id} {result.version} -> {result.path}")
    if result.previous is None:
        click.echo("  first version of this function")
    else:
        chosen = result.bump or result.required
        click.echo(f"  {result.previous} -> {result.version}: {chosen} bump "
                   f"(the changes need at least {result.required})")
        for kind in ("major", "minor", "patch"):
            if result.changes.get(kind):
                click.echo(f"  {kind} changes: {', '.join(result.changes[kind])}")
    click.echo(f"  sha256 {result.sha256}")
    if sign and not dry_run:
        click.echo(f"  signed: {result.path.name}.sig")
