"""`refit publish`: copy a candidate coefficient file into a registry as a new version."""

from __future__ import annotations

import click

from refit.cli.common import guarded, say


@click.command("publish", short_help="Publish a candidate fit as an immutable, versioned file.")
@click.argument("candidate", type=click.Path(path_type=str))
@click.option("--to", "registry", required=True, metavar="REGISTRY",
              type=click.Path(path_type=str), help="Registry folder.")
@click.option("--bump", type=click.Choice(["major", "minor", "patch"]), default=None,
              help="Version bump [default: the smallest one the changes call for].")
@click.option("--variant", default=None, metavar="NAME",
              help="Publish into this variant of the function (its own version chain, in "
                   "REGISTRY/<function_id>/NAME/), e.g. 'mixed' beside an OLS line "
                   "[default: the candidate's own variant, else the unnamed default one].")
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
def publish(candidate: str, registry: str, bump: str | None, variant: str | None,
            create: bool, dry_run: bool, sign: str | None, fmt: str) -> None:
    """Publish CANDIDATE (a run's fits/<candidate>.json) into REGISTRY.

    Writes REGISTRY/<function_id>/<version>.json (with --variant NAME:
    REGISTRY/<function_id>/NAME/<version>.json; read-only, never replaced) and adds it to
    REGISTRY/index.json. Alternative models of one function (an OLS line, a mixed fit)
    are published side by side as variants, each with its own version chain. Within a
    chain the version follows semver against the latest published one: major when the
    model changed (response, predictors, form, direction, estimator, interval method,
    groups); minor when the same model is refitted (the data, its version, the subset,
    the interval level or any fitted number changed); patch for metadata only. refit
    proposes that bump and refuses a smaller --bump; the first version is 1.0.0.

    \b
    Exit codes: 0 published, 1 bump too small, nothing changed, version exists, bad hash
    or schema, busy registry, 2 unreadable file, missing registry or usage error.

    \b
    Examples:
      refit publish run/fits/linear__ols__inverse__analytic.json --to registry --dry-run
      refit publish run/fits/quadratic__ols__inverse__analytic.json --to registry --sign lab.key
      refit publish run/fits/linear__ols__inverse__analytic.json --to new-registry --init
      refit publish run/fits/linear__ols__inverse__analytic.json --to registry --variant ols
    """
    import json

    from refit.publish.registry import publish as run_publish

    result = run_publish(candidate, registry, bump=bump, create=create, dry_run=dry_run,
                         sign=sign, variant=variant)
    if fmt == "json":
        click.echo(json.dumps(result.to_dict(), indent=2, ensure_ascii=False))
        return
    for message in result.recovered:
        say(f"Note: {message}.", err=True)
    verb = "Would publish" if dry_run else "Published"
    say(f"{verb} {result.chain} {result.version} -> {result.path}")
    if result.previous is None:
        say("  first version of " + ("this function" if result.variant is None
                                            else f"variant {result.variant} of "
                                                 f"{result.function_id}"))
    else:
        chosen = result.bump or result.required
        say(f"  {result.previous} -> {result.version}: {chosen} bump "
                   f"(the changes need at least {result.required})")
        for kind in ("major", "minor", "patch"):
            if result.changes.get(kind):
                say(f"  {kind} changes: {', '.join(result.changes[kind])}")
    if result.model_changes:
        say("  the model changed: " + "; ".join(
            f"{item} {_text(before)} -> {_text(after)}"
            for item, before, after in result.model_changes))
        say("  to keep both models side by side, publish it as a variant instead "
                   "(--variant NAME); each variant has its own version chain")
    if result.others:
        say(f"  other variants of {result.function_id}: {', '.join(result.others)}")
    say(f"  sha256 {result.sha256}")
    if sign and not dry_run:
        say(f"  signed: {result.path.name}.sig")


def _text(value) -> str:
    """A model item as printed: ``none`` for a missing one, ``true``/``false``."""
    if value is None:
        return "none"
    return str(value).lower() if isinstance(value, bool) else str(value)
