"""Consistency of a coefficient registry: does ``index.json`` agree with the files?

Used by :func:`refit.publish.registry.publish` (a function's index and files must agree before a
new version lands) and by :func:`refit.publish.verify.verify_registry`; re-exported from
:mod:`refit.publish.registry`. Each problem is one plain sentence naming the file. Files are
read by the one coefficient-file reader (:func:`refit.coefficients.format.read_file`).
"""

from __future__ import annotations

from refit._util.atomic import sha256_bytes
from refit.coefficients.format import DEFAULT_VARIANT, VARIANT_NAME, read_file
from refit.errors import RefitError
from refit.publish.registry_commit import open_registry
from refit.publish.registry_layout import INDEX, chain_name


def function_problems(reg, function_id: str, variant: str | None = None) -> list[str]:
    """How the index and the files of one variant of a function disagree (empty when
    they agree); ``variant`` None is the default variant.

    ``reg`` is an open :class:`refit.publish.registry_layout.Registry`."""
    variant = None if variant == DEFAULT_VARIANT else variant
    entries = reg.versions(function_id, variant)
    listed = {e.get("version"): e for e in entries}
    chain = chain_name(function_id, variant)
    folder = reg.path / function_id / (variant or "")     # names checked on reading
    on_disk = {p.stem for p in folder.glob("*.json")} if folder.is_dir() else set()
    out = [f"{chain}/{v}.json is on disk but not in {INDEX}"
           for v in sorted(on_disk - set(listed))]
    out += [f"{INDEX} lists {chain} {v} but {chain}/{v}.json is missing"
            for v in sorted(set(listed) - on_disk, key=str)]
    for v in sorted(set(listed) & on_disk):
        out += _entry_problems(reg, function_id, variant, listed[v])
    return out


def _entry_problems(reg, fid: str, variant: str | None, entry: dict) -> list[str]:
    rel = f"{chain_name(fid, variant)}/{entry['version']}.json"
    try:
        content, raw = read_file(reg.file(fid, entry["version"], variant))
    except RefitError as exc:
        return [f"{rel}: {exc}"]
    out = []
    if entry.get("file_sha256") and sha256_bytes(raw) != entry["file_sha256"]:
        out.append(f"{rel}: its bytes no longer match the file_sha256 in {INDEX}")
    if content.get("sha256") != entry.get("sha256"):
        out.append(f"{rel}: its 'sha256' field ({str(content.get('sha256'))[:12]}...) differs "
                   f"from the sha256 in {INDEX} ({str(entry.get('sha256'))[:12]}...)")
    for key, want in (("function_id", fid), ("version", entry["version"]),
                      ("variant", variant)):
        if content.get(key) != want:
            out.append(f"{rel}: field '{key}' is {content.get(key)!r}, the index says {want!r}")
    return out


def _variant_folders(reg, fid: str) -> tuple[set, list[str]]:
    """Names of the variant folders inside ``REGISTRY/<fid>`` and the folders there that
    cannot be one."""
    folder = reg.path / fid
    names, out = set(), []
    if not folder.is_dir():
        return names, out
    for sub in sorted(p for p in folder.iterdir() if p.is_dir() and not p.name.startswith(".")):
        if VARIANT_NAME.match(sub.name) and sub.name != DEFAULT_VARIANT:
            names.add(sub.name)
        elif any(sub.glob("*.json")):
            out.append(f"{fid}/{sub.name}/ holds coefficient files but {sub.name!r} is not a "
                       "variant name; move them out of the registry")
    return names, out


def registry_problems(registry) -> list[str]:
    """Every disagreement between a registry's index and its files, every variant of
    every function."""
    reg = open_registry(registry)
    fids = set(reg.index.get("functions", {})) | set(reg.index.get("variants", {}))
    fids |= {p.name for p in reg.path.iterdir() if p.is_dir() and not p.name.startswith(".")}
    out = []
    for fid in sorted(fids):
        out += function_problems(reg, fid)
        on_disk, strays = _variant_folders(reg, fid)
        out += strays
        for variant in sorted(on_disk | set(reg.variants(fid))):
            out += function_problems(reg, fid, variant)
    return out
