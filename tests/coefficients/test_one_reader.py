"""One coefficient-file reader: every command refuses the same bad file the same way.

`refit apply`, `compare`, `verify`, `diff` and `publish` all read coefficient files through
:func:`refit.coefficients.format.read_record` (or its parts). For each bad file below the
exit code and the message must be the same in every command. The exit codes are refit's
contract (README, "Exit codes"; :mod:`refit.errors`): a path that does not exist is
unreadable input (2); a file that exists but is not a coefficient file (empty, not UTF-8,
not JSON, not a JSON object, failing the schema or its hash) is invalid data (1).

`verify` reports each check on its own line (``ok <check> ...`` for those that passed,
``FAIL <check> <message>`` for the failing one) rather than ``Error: <message>``; the first
line that reports a failure is taken and the message after its prefix is compared.
"""

from __future__ import annotations

import json
import re

import pytest
from click.testing import CliRunner

from refit.cli import main
from refit.coefficients import dumps, with_hash
from refit.published import path as published_path

GOOD = str(published_path("map_from_bk_depth.retallack1994"))


def _schema_failing() -> str:
    # hashed correctly, so the hash passes and the schema is what fails
    return dumps(with_hash({"schema_version": "1.1.0", "function_id": "map_from_bk_depth"}))


def _hash_mismatch() -> str:
    content = json.loads(open(GOOD, encoding="utf-8").read())
    content["coefficients"][0] += 1.0            # edited after it was written
    return dumps(content)


#: case -> (bytes of the file or None for a missing path, exit code, words of the message)
CASES = {
    "missing": (None, 2, "no such coefficient file"),
    "empty": (b"", 1, "the file is empty, not a coefficient file"),
    "not-utf8": (b"\xff\xfe{}", 1, "not UTF-8 text (byte 0)"),
    "not-json": (b"{ coefficients: [1, 2] }", 1, "not valid JSON"),
    "array": (b"[1, 2, 3]\n", 1, "$: a coefficient file is a JSON object; found an array"),
    "schema": (_schema_failing().encode(), 1, "the file does not follow the coefficient-file"),
    "hash": (_hash_mismatch().encode(), 1, "$.sha256 does not match the content"),
}

PREFIX = re.compile(r"^(Error: |FAIL \w+\s+)")


def _commands(bad: str, tmp_path) -> dict:
    fossils = tmp_path / "fossils.csv"
    fossils.write_text("paleosol_id,bk_depth_cm\nP1,100\n")
    return {
        "apply": ["apply", bad, "--fossils", str(fossils), "--out", str(tmp_path / "a.csv")],
        "compare": ["compare", bad, "--at", "bk_depth_cm=100", "--out", str(tmp_path / "c")],
        "verify": ["verify", bad],
        "diff": ["diff", GOOD, bad],
        "publish": ["publish", bad, "--to", str(tmp_path / "registry"), "--init"],
    }


def _first_line(output: str) -> str:
    """The first line of the output that reports a failure."""
    return next((ln for ln in output.splitlines() if PREFIX.match(ln)), "")


@pytest.mark.parametrize("case", list(CASES))
def test_every_command_refuses_a_bad_file_alike(case, tmp_path):
    raw, code, words = CASES[case]
    bad = tmp_path / f"{case}.json"
    if raw is not None:
        bad.write_bytes(raw)
    runner = CliRunner()
    seen = {}
    for name, args in _commands(str(bad), tmp_path).items():
        res = runner.invoke(main, args)
        assert "Traceback" not in res.output, (name, res.output)
        assert res.exit_code == code, (name, res.exit_code, res.output)
        line = _first_line(res.output)
        assert line, (name, res.output)
        seen[name] = PREFIX.sub("", line)
    messages = set(seen.values())
    assert len(messages) == 1, seen
    message = messages.pop()
    assert message.startswith(f"{bad}: ") and words in message, message


def test_the_good_file_passes_the_same_commands(tmp_path):
    """The control: the published file itself is accepted by every command."""
    for name, args in _commands(GOOD, tmp_path).items():
        res = CliRunner().invoke(main, args)
        assert res.exit_code == 0, (name, res.output)
