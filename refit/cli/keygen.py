"""`refit keygen`: make an Ed25519 key pair for signing published coefficient files."""

from __future__ import annotations

import click

from refit.cli.common import guarded, say


@click.command("keygen", short_help="Make a key pair to sign published files.")
@click.argument("keyfile", type=click.Path(dir_okay=False, path_type=str))
@guarded
def keygen(keyfile: str) -> None:
    """Make an Ed25519 key pair: KEYFILE (private, readable by you only) and KEYFILE.pub.

    Sign with the private key (`refit publish ... --sign KEYFILE`) and give KEYFILE.pub
    to the readers of your registry (`refit verify REGISTRY --trust KEYFILE.pub`). Keep
    KEYFILE secret and out of the registry; an existing file is never overwritten.

    \b
    Exit codes: 0 written, 1 cannot write, 2 KEYFILE or KEYFILE.pub exists.

    \b
    Example:
      refit keygen lab.key
    """
    from refit.publish.signing import new_key_pair

    private, public, kid = new_key_pair(keyfile)
    say(f"Wrote the private key {private} (keep it secret) and the public key "
               f"{public} (key id {kid}).")
