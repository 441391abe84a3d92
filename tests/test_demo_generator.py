"""The demo generator in sample_inputs/: deterministic, four files in four shapes, committed output
in step with the script, and only reserved or published-for-testing look-alikes of personal data."""

from __future__ import annotations

import csv
import importlib.util
import io
import json
import re
import sys
from collections import Counter
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

SAMPLE_INPUTS = Path(__file__).resolve().parent.parent / "sample_inputs"
COMMITTED = SAMPLE_INPUTS / "exports"
FILES = ("desk.csv", "webform.jsonl", "chat.parquet", "legacy.tsv")
TEXT_FILES = ("desk.csv", "webform.jsonl", "legacy.tsv")


def _load_generator():
    spec = importlib.util.spec_from_file_location("make_demo", SAMPLE_INPUTS / "make_demo.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules.setdefault("make_demo", module)  # dataclasses look their module up by name
    spec.loader.exec_module(module)
    return module


make_demo = _load_generator()


@pytest.fixture(scope="module")
def fresh_default(tmp_path_factory) -> Path:
    """The default demo, generated anew into a temporary folder."""
    out = tmp_path_factory.mktemp("demo")
    make_demo.generate(out=out)
    return out


def _texts(folder: Path) -> str:
    """Every character of the four exports, decoded, as one string (for pattern scans)."""
    parts = [(folder / "desk.csv").read_text("utf-8-sig"), (folder / "webform.jsonl").read_text("utf-8"),
             (folder / "legacy.tsv").read_bytes().decode("latin-1")]
    chat = pq.read_table(folder / "chat.parquet")
    parts += [v for column in chat.columns if pa.types.is_string(column.type) for v in column.to_pylist() if v]
    # JSON escapes (\u00e9, \n) would hide characters from the patterns below.
    parts += [json.dumps(json.loads(line), ensure_ascii=False) for line in parts[1].splitlines() if _is_json(line)]
    return "\n".join(parts)


def _is_json(line: str) -> bool:
    try:
        json.loads(line)
    except ValueError:
        return False
    return True


# --- determinism and drift ----------------------------------------------------------------------


def test_same_seed_gives_the_same_bytes(tmp_path):
    first, second = tmp_path / "a", tmp_path / "b"
    counts = make_demo.generate(rows=400, seed=11, out=first)
    assert make_demo.generate(rows=400, seed=11, out=second) == counts
    for name in FILES:
        assert (first / name).read_bytes() == (second / name).read_bytes(), name


def test_another_seed_gives_other_data(tmp_path):
    make_demo.generate(rows=400, seed=11, out=tmp_path / "a")
    make_demo.generate(rows=400, seed=12, out=tmp_path / "b")
    for name in FILES:
        assert (tmp_path / "a" / name).read_bytes() != (tmp_path / "b" / name).read_bytes(), name


def test_writes_four_files_in_the_source_shares(tmp_path):
    counts = make_demo.generate(rows=400, seed=3, out=tmp_path)
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(FILES)
    # 35/30/20/15 % of 400 records.
    assert counts == {"desk": 140, "webform": 120, "chat": 80, "legacy": 60}


def test_committed_exports_match_a_fresh_default_run(fresh_default):
    for name in TEXT_FILES:
        assert (COMMITTED / name).read_bytes() == (fresh_default / name).read_bytes(), (
            f"sample_inputs/exports/{name} differs from what make_demo.py writes; rerun the script and commit"
        )
    # Parquet bytes carry the writer's version string, so compare schema (types, time zone) and values.
    committed, fresh = pq.read_table(COMMITTED / "chat.parquet"), pq.read_table(fresh_default / "chat.parquet")
    assert committed.schema == fresh.schema
    assert committed.equals(fresh)


def test_committed_exports_stay_small():
    assert sum((COMMITTED / name).stat().st_size for name in FILES) < 2_000_000


# --- the shape of each file ----------------------------------------------------------------------


def test_desk_is_utf8_with_bom_crlf_and_rfc4180_quoting(fresh_default):
    raw = (fresh_default / "desk.csv").read_bytes()
    assert raw.startswith(b"\xef\xbb\xbf")
    assert raw.count(b"\n") == raw.count(b"\r\n")  # RFC 4180 section 2, rule 1: lines end in CRLF
    # Python's csv module reads RFC 4180 quoting (section 2, rules 5-7).
    records = list(csv.reader(io.StringIO(raw.decode("utf-8-sig"), newline="")))
    header, rows = records[0], records[1:]
    assert header[:3] == ["Case Number", "Subject Line", "Full Text"]
    assert len(rows) == 1050 and {len(r) for r in rows} == {len(header)}
    assert any("\r\n" in r[2] for r in rows)  # multi-line bodies
    assert any('"' in r[2] for r in rows)  # embedded quotes (doubled in the file)
    assert b'""' in raw


def test_webform_has_exactly_two_lines_that_are_not_json(fresh_default):
    lines = (fresh_default / "webform.jsonl").read_text("utf-8").splitlines()
    bad = [line for line in lines if not _is_json(line)]  # JSON as RFC 8259 defines it
    good = [json.loads(line) for line in lines if _is_json(line)]
    assert len(bad) == 2 and len(good) == 898
    assert all(isinstance(record, dict) for record in good)
    assert any("summary" not in r or "description" not in r for r in good)  # missing keys
    assert any(r.get("contact", "") is None for r in good)  # nulls
    descriptions = " ".join(r.get("description") or "" for r in good)
    for markup in ("<p>", "<br>", "&amp;", "&eacute;"):
        assert markup in descriptions, markup


def test_chat_has_no_title_and_a_utc_timestamp(fresh_default):
    table = pq.read_table(fresh_default / "chat.parquet")
    assert table.num_rows == 600
    assert table.column_names == ["conversation_id", "first_message", "topic", "started_at",
                                  "customer_email", "widget"]
    started = table.schema.field("started_at").type
    assert pa.types.is_timestamp(started) and started.tz == "UTC"
    assert table.column("topic").null_count > 0


def test_legacy_is_latin1_tab_separated_without_quoting(fresh_default):
    raw = (fresh_default / "legacy.tsv").read_bytes()
    with pytest.raises(UnicodeDecodeError):
        raw.decode("utf-8")
    text = raw.decode("latin-1")
    assert "\r" not in text
    # IANA text/tab-separated-values: one record per line, fields split on tab, no quoting.
    lines = text.split("\n")[:-1]
    widths = Counter(len(line.split("\t")) for line in lines)
    assert widths == {7: 449, 8: 2}  # header + 448 good rows, 2 rows with a stray tab
    assert any('"' in line for line in lines)
    assert any(ch in text for ch in "éüñß")


# --- the content ---------------------------------------------------------------------------------


def test_class_counts_are_imbalanced_with_two_tiny_classes():
    tickets = make_demo.make_tickets(make_demo.DEFAULT_ROWS, make_demo.DEFAULT_SEED)
    counts = Counter(t.label for t in tickets if t.label is not None)
    assert 0.27 < counts["billing"] / len(tickets) < 0.33
    assert sorted(k for k, n in counts.items() if n <= 5) == ["partner", "press"]
    assert all(2 <= counts[k] for k in ("partner", "press"))
    foreign = sum(t.lang != "en" for t in tickets) / len(tickets)
    assert 0.07 < foreign < 0.13
    assert {t.lang for t in tickets} == {"en", "es", "de", "fr"}


EMAIL = re.compile(r"[\w.+-]+@([A-Za-z0-9-]+(?:\.[A-Za-z0-9-]+)+)")
CARD_LIKE = re.compile(r"(?<![\d-])\d(?:[ -]?\d){12,18}(?![\d-])")
IBAN_LIKE = re.compile(r"\b[A-Z]{2}\d{2}(?: ?[A-Z0-9]{4}){2,7}(?: ?[A-Z0-9]{1,3})?\b")


def _luhn_ok(number: str) -> bool:
    """Luhn check (ISO/IEC 7812-1, annex B): double every second digit from the right."""
    digits = [int(d) for d in re.sub(r"\D", "", number)][::-1]
    total = sum(d if i % 2 == 0 else (d * 2 - 9 if d * 2 > 9 else d * 2) for i, d in enumerate(digits))
    return total % 10 == 0


def _iban_ok(iban: str) -> bool:
    """ISO 13616 check: move the first four characters to the end, letters to 10..35, mod 97 == 1
    (ISO 7064 MOD 97-10)."""
    compact = iban.replace(" ", "")
    moved = compact[4:] + compact[:4]
    return int("".join(str(int(ch, 36)) for ch in moved)) % 97 == 1


def test_check_digit_helpers_agree_with_published_examples():
    # Worked examples (from memory): 79927398713 is the usual Luhn example; a one-digit change fails.
    assert _luhn_ok("79927398713") and not _luhn_ok("79927398710")
    assert _iban_ok("GB82 WEST 1234 5698 7654 32") and not _iban_ok("GB82 WEST 1234 5698 7654 33")


def test_emails_use_only_reserved_example_domains(fresh_default):
    domains = {m.group(1).lower() for m in EMAIL.finditer(_texts(fresh_default))}
    assert domains  # there are addresses, in a customer column and in the texts
    assert domains <= {"example.com", "example.org", "example.net"}  # RFC 2606, section 3


def test_card_numbers_are_published_test_numbers(fresh_default):
    text = IBAN_LIKE.sub(" ", _texts(fresh_default))  # an IBAN's digit groups would look like a card
    found = {re.sub(r"\D", "", m.group()) for m in CARD_LIKE.finditer(text)}
    assert found  # the demo does contain card-like numbers
    assert found <= {re.sub(r"\D", "", c) for c in make_demo.TEST_CARDS}
    assert all(_luhn_ok(c) for c in make_demo.TEST_CARDS)
    assert "4111111111111111" in found


def test_ibans_are_documentation_examples_with_valid_check_digits(fresh_default):
    found = {m.group() for m in IBAN_LIKE.finditer(_texts(fresh_default))}
    assert found and found <= set(make_demo.EXAMPLE_IBANS)
    assert all(_iban_ok(iban) for iban in make_demo.EXAMPLE_IBANS)


def test_phone_numbers_are_in_ranges_reserved_for_fiction(fresh_default):
    text = _texts(fresh_default)
    uk = re.findall(r"\b07\d{3} ?\d{6}\b", text)
    us = re.findall(r"\b555-\d{4}\b", text)
    assert uk and us
    # Ofcom drama numbers 07700 900000-900999; NANP 555-0100..0199 for fiction (both from memory).
    assert all(n.replace(" ", "").startswith("07700900") for n in uk)
    assert all(n.startswith("555-01") for n in us)
