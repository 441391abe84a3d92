"""`prep card OUTPUT_DIR`: render card.md, card.html and croissant.json again from card.json.

For a user who restyles the card or fixes a hand-written field (purpose, license, maintainer…)
in ``card.json`` without running the pipeline again. The folder must be a finished prep output
(a prep ``manifest.json``); ``card.json`` must parse and validate against the card schema of
this version of prep. The rendered files are replaced one by one (each written beside its
target, then renamed over it), and the manifest's entries for them and for ``card.json`` are
updated so that its hashes stay true.
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

from prep.errors import OutputError, PrepError

CARD_JSON = "card.json"


class CardFileError(PrepError):
    """``card.json`` in an output folder cannot be read or breaks the card schema, e.g. after a hand edit."""


def render_again(folder: Path, *, shown: str | None = None) -> list[str]:
    """Re-render the card files of the prep output ``folder``; returns the names written."""
    from prep.card import CARD_VERSION, CardSchemaError, render_card_files, validate_card
    from prep.write import MANIFEST, dumps_json, is_prep_output, sha256_file

    shown = shown or str(folder)
    if not folder.is_dir():
        raise OutputError(f"`{shown}` is not a folder; give the output folder of a `prep run`.")
    if not is_prep_output(folder):
        raise OutputError(
            f"`{shown}` is not a prep output folder (no prep {MANIFEST}, or an unfinished write); "
            "`prep card` only renders the card of a finished `prep run`."
        )
    card_path = folder / CARD_JSON
    try:
        text = card_path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise OutputError(f"`{shown}` has no {CARD_JSON}; run the pipeline again to write it.") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise CardFileError(f"`{shown}/{CARD_JSON}` cannot be read ({type(exc).__name__}).") from exc
    try:
        card = json.loads(text)
    except json.JSONDecodeError as exc:
        raise CardFileError(
            f"`{shown}/{CARD_JSON}` is not valid JSON: {exc.msg} at line {exc.lineno}, column {exc.colno}."
        ) from exc
    if not isinstance(card, dict):
        raise CardFileError(f"`{shown}/{CARD_JSON}` is not a JSON object.")
    if card.get("card_version") == "1.1" and "engine" not in card:
        # Version 1.2 only added `engine`; every 1.1 card was written by the local engine.
        card = {**card, "card_version": "1.2", "engine": "local"}
    if card.get("card_version") == "1.2":
        card = _from_version_1_2(card)
    if card.get("card_version") != CARD_VERSION:
        raise CardFileError(
            f"`{shown}/{CARD_JSON}` has card version {card.get('card_version')!r}; this prep renders version "
            f"{CARD_VERSION}. Run the pipeline again with this version of prep."
        )
    try:
        validate_card(card)
    except CardSchemaError as exc:
        raise CardFileError(f"`{shown}/{CARD_JSON}` breaks the card schema; fix the hand edit. {exc.message}") from exc

    manifest_path = folder / MANIFEST
    manifest: dict[str, Any] = json.loads(manifest_path.read_text(encoding="utf-8"))
    files = manifest.get("files") if isinstance(manifest.get("files"), dict) else {}
    started = str(manifest.get("started_at") or "")
    date = started[:10] if len(started) >= 10 else "1970-01-01"
    sizes = {name: info["bytes"] for name, info in files.items() if isinstance(info, dict) and "bytes" in info}
    written = []
    for name, content in render_card_files(card, date_published=date, sizes=sizes).items():
        _replace(folder / name, content)
        written.append(name)
    for name in [CARD_JSON, *written]:
        path = folder / name
        files[name] = dict(files.get(name) or {}, bytes=path.stat().st_size, sha256=sha256_file(path))
    manifest["files"] = dict(sorted(files.items()))
    _replace(manifest_path, dumps_json(manifest))
    return written


def _replace(path: Path, text: str) -> None:
    """Write ``text`` beside ``path`` and rename it over ``path`` (readers never see half a file)."""
    tmp = path.with_name(f".{path.name}.prep-tmp-{os.getpid()}")
    try:
        tmp.write_text(text, encoding="utf-8", newline="\n")
        os.replace(tmp, path)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise OutputError(f"Cannot write `{path.name}` ({exc.strerror}).") from exc


def _from_version_1_2(card: dict[str, Any]) -> dict[str, Any]:
    """Version 1.3 only added ``near_duplicates.signing``: every earlier LSH search signed with
    k-permutation MinHash, so a 1.2 card that ran it reads ``permutations`` (null otherwise)."""
    from prep.card import CARD_VERSION

    near = card.get("near_duplicates")
    if isinstance(near, dict) and near.get("status") != "not run" and "signing" not in near:
        signing = "permutations" if near.get("method") == "minhash_lsh" else None
        keys = list(near)
        at = keys.index("permutations") + 1 if "permutations" in keys else len(keys)
        near = dict([*near.items()][:at] + [("signing", signing)] + [*near.items()][at:])
        card = {**card, "near_duplicates": near}
    return {**card, "card_version": CARD_VERSION}
