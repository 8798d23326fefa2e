"""Which text encoding a table file uses, and refusing files that mix encodings.

Internal to :mod:`refit.curate.tables`. The rules, in order:

1. A byte-order mark names the encoding (UTF-8, UTF-16, UTF-32).
2. Without a mark, NUL bytes in a regular pattern mean UTF-16 or UTF-32: every other
   byte zero is UTF-16 (little-endian when the odd bytes are zero), three zero bytes in four
   is UTF-32. Any other NUL byte means the file is not text and is refused.
3. Bytes that decode as UTF-8 are UTF-8.
4. Otherwise the file is decoded as a single-byte Windows code page (cp1252 / latin-1, as
   ``charset_normalizer`` decides) -- unless it also holds valid UTF-8 multi-byte sequences
   (``è`` written as ``C3 A8``): such a file mixes UTF-8 and Latin-1 and decoding it either way
   would garble some of its text (``Vèsk`` stored as ``VÃ¨sk``), so it is refused, naming the
   line of the first byte that is not UTF-8. The whole file is checked, not only its start.
"""

from __future__ import annotations

import re
from pathlib import Path

from refit.errors import UnreadableInputError

BOMS = (
    (b"\xef\xbb\xbf", "utf-8-sig"),
    (b"\xff\xfe\x00\x00", "utf-32"),
    (b"\x00\x00\xfe\xff", "utf-32"),
    (b"\xff\xfe", "utf-16"),
    (b"\xfe\xff", "utf-16"),
)

#: A valid UTF-8 sequence of two to four bytes (RFC 3629, section 4).
_UTF8_MULTIBYTE = re.compile(
    rb"[\xc2-\xdf][\x80-\xbf]|\xe0[\xa0-\xbf][\x80-\xbf]|[\xe1-\xec\xee\xef][\x80-\xbf]{2}"
    rb"|\xed[\x80-\x9f][\x80-\xbf]|\xf0[\x90-\xbf][\x80-\xbf]{2}"
    rb"|[\xf1-\xf3][\x80-\xbf]{3}|\xf4[\x80-\x8f][\x80-\xbf]{2}")


def utf8_prefix(sample: bytes) -> str:
    """Decode ``sample`` as UTF-8, allowing a multi-byte character cut at its end."""
    import codecs

    return codecs.getincrementaldecoder("utf-8")().decode(sample, final=False)


def _nul_pattern(sample: bytes) -> str | None:
    """'utf-16-le', 'utf-16-be', 'utf-32-le', 'utf-32-be' from where the NULs are, or None."""
    n = len(sample) - len(sample) % 4
    if n < 4:
        return None
    body = sample[:n]
    lanes = [body[k::4].count(0) / (n // 4) for k in range(4)]
    if lanes[1] > 0.9 and lanes[2] > 0.9 and lanes[3] > 0.9 and lanes[0] < 0.5:
        return "utf-32-le"
    if lanes[0] > 0.9 and lanes[1] > 0.9 and lanes[2] > 0.9 and lanes[3] < 0.5:
        return "utf-32-be"
    even, odd = (lanes[0] + lanes[2]) / 2, (lanes[1] + lanes[3]) / 2
    if odd > 0.7 and even < 0.3:
        return "utf-16-le"
    if even > 0.7 and odd < 0.3:
        return "utf-16-be"
    return None


def _line_of(data: bytes, position: int) -> int:
    return data[:position].count(b"\n") + 1


def detect_encoding(sample: bytes, path: Path) -> tuple[str, str]:
    """Return (python codec, note) for the first bytes of a text file (see module rules).

    Raises
    ------
    UnreadableInputError
        NUL bytes outside a UTF-16/32 pattern, or bytes that are text in no encoding
        refit reads.
    """
    for bom, codec in BOMS:
        if sample.startswith(bom):
            return codec, f"encoding {codec.replace('-sig', '')} with a byte-order mark"
    if b"\x00" in sample:
        codec = _nul_pattern(sample)
        if codec is None:
            at = sample.index(b"\x00")
            raise UnreadableInputError(
                f"{path}: holds a NUL byte (0x00) on line {_line_of(sample, at)}: it is not "
                "text (nor UTF-16/32 text) but binary data; export the table again as CSV in "
                "UTF-8")
        return codec, f"encoding {codec} without a byte-order mark (detected from its NUL bytes)"
    try:
        utf8_prefix(sample)
        return "utf-8", "encoding utf-8"
    except UnicodeDecodeError:
        refuse_mixed(sample, path)
    from charset_normalizer import from_bytes

    best = from_bytes(sample, cp_isolation=["cp1252", "latin_1"]).best()
    if best is None:
        raise UnreadableInputError(
            f"{path}: the bytes are not text in any encoding refit recognises (utf-8, utf-16, "
            "utf-32, cp1252/latin-1); is it a table at all? Save it as CSV in UTF-8"
        )
    return best.encoding, f"encoding {best.encoding} (detected; not utf-8)"


def refuse_mixed(data: bytes, path: Path) -> None:
    """Refuse bytes that are not UTF-8 yet hold valid UTF-8 multi-byte sequences.

    Call on the whole file before decoding it with a single-byte code page.

    Raises
    ------
    UnreadableInputError
        Naming the line of the first byte that is not UTF-8 and the line of the first
        UTF-8 character.
    """
    try:
        data.decode("utf-8")
        return
    except UnicodeDecodeError as exc:
        bad = exc.start
    utf8 = _UTF8_MULTIBYTE.search(data)
    if utf8 is None:
        return
    raise UnreadableInputError(
        f"{path}: mixes encodings: byte {data[bad:bad + 1]!r} on line {_line_of(data, bad)} "
        f"is not UTF-8, but line {_line_of(data, utf8.start())} holds UTF-8 text "
        f"({utf8.group().decode('utf-8')!r}); decoding it either way would garble some "
        "names. Re-save the whole file as CSV in UTF-8"
    )


def decode(data: bytes, codec: str, path: Path) -> str:
    """Decode ``data``; a byte that does not decode is refused with its line."""
    if not codec.startswith(("utf-8", "utf-16", "utf-32")):
        refuse_mixed(data, path)
    try:
        return data.decode(codec)
    except UnicodeDecodeError as exc:
        line = _line_of(data, exc.start) if codec.startswith("utf-8") else \
            data[: exc.start].decode(codec, errors="replace").count("\n") + 1
        raise UnreadableInputError(
            f"{path}: cannot decode byte {data[exc.start:exc.start + 1]!r} on line {line} as "
            f"{codec}; the file mixes encodings. Re-save it as CSV in UTF-8"
        ) from None
