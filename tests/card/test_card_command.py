"""`prep card OUTPUT_DIR`: re-render the card files from card.json; refuse other folders."""

from __future__ import annotations

import hashlib
import json
import shutil

from click.testing import CliRunner

from prep.cli import cli


def copy_output(demo_output, tmp_path):
    target = tmp_path / "out"
    shutil.copytree(demo_output, target)
    return target


def test_rerender_after_a_hand_edit(demo_output, tmp_path):
    out = copy_output(demo_output, tmp_path)
    before = (out / "card.html").read_text(encoding="utf-8")
    card = json.loads((out / "card.json").read_text(encoding="utf-8"))
    card["about"]["license"] = "CC-BY-4.0 (fixed by hand)"
    (out / "card.json").write_text(json.dumps(card, indent=2), encoding="utf-8")
    result = CliRunner().invoke(cli, ["card", str(out)])
    assert result.exit_code == 0, result.output
    assert "rendered card.md, card.html, croissant.json" in result.output
    assert "CC-BY-4.0 (fixed by hand)" in (out / "card.md").read_text(encoding="utf-8")
    html = (out / "card.html").read_text(encoding="utf-8")
    assert "CC-BY-4.0 (fixed by hand)" in html and html != before
    assert json.loads((out / "croissant.json").read_text())["license"] == "CC-BY-4.0 (fixed by hand)"
    # The manifest's hashes stay true for every file it lists.
    manifest = json.loads((out / "manifest.json").read_text())
    for name, info in manifest["files"].items():
        assert hashlib.sha256((out / name).read_bytes()).hexdigest() == info["sha256"], name


def test_rerender_unchanged_card_gives_the_same_bytes(demo_output, tmp_path):
    out = copy_output(demo_output, tmp_path)
    result = CliRunner().invoke(cli, ["card", str(out)])
    assert result.exit_code == 0, result.output
    for name in ("card.md", "card.html", "croissant.json"):
        assert (out / name).read_bytes() == (demo_output / name).read_bytes(), name


def test_refuses_a_folder_that_is_not_a_prep_output(tmp_path):
    (tmp_path / "card.json").write_text("{}", encoding="utf-8")
    result = CliRunner().invoke(cli, ["card", str(tmp_path)])
    assert result.exit_code == 1
    assert "is not a prep output folder" in result.output
    assert "Traceback" not in result.output
    assert not (tmp_path / "card.html").exists()


def test_broken_card_json_is_one_line_with_its_place(demo_output, tmp_path):
    out = copy_output(demo_output, tmp_path)
    (out / "card.json").write_text('{\n  "card_version": "1.1",\n  oops\n}\n', encoding="utf-8")
    result = CliRunner().invoke(cli, ["card", str(out)])
    assert result.exit_code == 1
    assert "is not valid JSON" in result.output and "line 3" in result.output
    assert len(result.output.strip().splitlines()) == 1


def test_card_breaking_the_schema_is_refused(demo_output, tmp_path):
    out = copy_output(demo_output, tmp_path)
    card = json.loads((out / "card.json").read_text(encoding="utf-8"))
    del card["classes"]
    (out / "card.json").write_text(json.dumps(card), encoding="utf-8")
    before = (out / "card.md").read_bytes()
    result = CliRunner().invoke(cli, ["card", str(out)])
    assert result.exit_code == 1 and "breaks the card schema" in result.output
    assert (out / "card.md").read_bytes() == before


def test_a_version_1_1_card_is_rendered_as_written_by_the_local_engine(demo_output, tmp_path):
    # card_version 1.1 is 1.2 without `engine` (every 1.1 card came from the local engine).
    import json

    out = copy_output(demo_output, tmp_path)
    card = json.loads((out / "card.json").read_text(encoding="utf-8"))
    assert card.pop("engine") == "local"
    card["card_version"] = "1.1"
    (out / "card.json").write_text(json.dumps(card, indent=2), encoding="utf-8")
    result = CliRunner().invoke(cli, ["card", str(out)])
    assert result.exit_code == 0, result.output
    assert (out / "card.html").read_bytes() == (demo_output / "card.html").read_bytes()


def _rendered_as_older(demo_output, tmp_path, version: str, drop_engine: bool) -> str:
    """card.md rendered by `prep card` from the demo's card.json made into an older version."""
    import json

    out = copy_output(demo_output, tmp_path)
    card = json.loads((out / "card.json").read_text(encoding="utf-8"))
    if drop_engine:
        assert card.pop("engine") == "local"
    assert card["near_duplicates"].pop("signing") == "one_permutation"
    card["card_version"] = version
    (out / "card.json").write_text(json.dumps(card, indent=2), encoding="utf-8")
    result = CliRunner().invoke(cli, ["card", str(out)])
    assert result.exit_code == 0, result.output
    return (out / "card.md").read_text(encoding="utf-8")


def test_a_version_1_2_card_reads_k_permutation_signing(demo_output, tmp_path):
    # card_version 1.2 is 1.3 without `near_duplicates.signing`; every LSH search before 1.3 signed
    # with one hash function per permutation.
    text = _rendered_as_older(demo_output, tmp_path, "1.2", drop_engine=False)
    assert "one hash function per permutation (Broder 1997)" in text
    assert "one permutation hashing, optimal densification" in (demo_output / "card.md").read_text(encoding="utf-8")


def test_a_version_1_1_card_reads_local_engine_and_k_permutation_signing(demo_output, tmp_path):
    # 1.1 -> 1.2 (engine: local) -> 1.3 (near_duplicates.signing: permutations), in one go.
    text = _rendered_as_older(demo_output, tmp_path, "1.1", drop_engine=True)
    assert "one hash function per permutation (Broder 1997)" in text
