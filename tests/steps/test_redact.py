"""Tests of the `redact` step and its detectors (prep/pii).

External references are named beside each check. Personal-data look-alikes come from reserved
or published test ranges only: example.com/.org/.net (RFC 2606), the Ofcom drama range
07700 900xxx and the North American 555-01xx fiction range (from memory), published test card
numbers, and the IBAN examples of the IBAN registry / ISO 13616.
"""

from __future__ import annotations

import polars as pl
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from polars.testing import assert_frame_equal
from stdnum import iban as stdnum_iban
from stdnum import luhn as stdnum_luhn

from prep.config import ConfigValueError
from prep.pii import KINDS
from prep.pii.detect import is_card_number, is_email, is_iban, is_ip_address
from prep.steps import redact
from prep.steps.redact import Config, redact_column, redact_series

ALL_KINDS = ["email", "phone", "card", "iban", "ip"]


def run(texts: list[str | None], **config) -> list[str | None]:
    series = pl.Series("body", texts, dtype=pl.String)
    series, _ = redact_column(series, Config(**config))  # the step's own order and rounds
    return series.to_list()


def one(text: str, **config) -> str:
    return run([text], **config)[0]


# --- Luhn (ISO/IEC 7812-1 Annex B) -----------------------------------------------------------


def test_luhn_published_examples() -> None:
    # The worked example of the Luhn algorithm (ISO/IEC 7812-1 Annex B; the widely printed
    # "79927398713" example): 79927398713 is valid, changing the check digit makes it invalid.
    assert stdnum_luhn.is_valid("79927398713")
    assert not stdnum_luhn.is_valid("79927398710")


@pytest.mark.parametrize(
    "card",
    ["4111 1111 1111 1111", "4111-1111-1111-1111", "4111111111111111", "5555 5555 5555 4444", "4012 8888 8888 1881", "3782 822463 10005"],
)
def test_test_card_numbers_are_redacted_in_running_text(card: str) -> None:
    # Test card numbers published by payment providers (from memory); 13-19 digits, Luhn-valid.
    assert one(f"The card on my account is {card}, thanks.") == "The card on my account is <CARD>, thanks."


@pytest.mark.parametrize("number", ["4111 1111 1111 1112", "4481421192448142", "1234-5678-9012-3456"])
def test_luhn_invalid_16_digit_numbers_survive(number: str) -> None:
    assert not stdnum_luhn.is_valid(number.replace(" ", "").replace("-", ""))  # reference: python-stdnum
    text = f"Order number {number} from the receipt."
    assert one(text) == text


def test_card_length_limits() -> None:
    # ISO/IEC 7812-1: payment card numbers are 13-19 digits; 79927398713 (11 digits) passes Luhn but is no card.
    assert not is_card_number("79927398713")
    assert is_card_number("4222222222222")  # the 13-digit Visa test number (from memory), Luhn-valid
    assert stdnum_luhn.is_valid("4222222222222")


# --- IBAN (ISO 13616, ISO 7064 MOD 97-10) ----------------------------------------------------

IBANS = ["GB82 WEST 1234 5698 7654 32", "DE89 3704 0044 0532 0130 00"]


def _change_check_digit(iban: str) -> str:
    digit = iban[2]
    return iban[:2] + str((int(digit) + 1) % 10) + iban[3:]


@pytest.mark.parametrize("iban", IBANS)
@pytest.mark.parametrize("spaced", [True, False])
def test_published_ibans_are_redacted(iban: str, spaced: bool) -> None:
    # GB82 WEST 1234 5698 7654 32 is the example of ISO 13616 / the IBAN registry;
    # DE89 3704 0044 0532 0130 00 the commonly printed German example (from memory).
    value = iban if spaced else iban.replace(" ", "")
    assert stdnum_iban.is_valid(value)  # reference: python-stdnum
    assert one(f"Please send the refund to {value} today.") == "Please send the refund to <IBAN> today."


@pytest.mark.parametrize("iban", IBANS)
@pytest.mark.parametrize("spaced", [True, False])
def test_ibans_with_a_changed_check_digit_survive(iban: str, spaced: bool) -> None:
    value = _change_check_digit(iban if spaced else iban.replace(" ", ""))
    assert not stdnum_iban.is_valid(value)  # reference: python-stdnum
    text = f"Please send the refund to {value} today."
    assert one(text) == text


def test_iban_followed_by_capitals_keeps_them() -> None:
    assert one("IBAN GB82 WEST 1234 5698 7654 32 BIC WESTGB22") == "IBAN <IBAN> BIC WESTGB22"


# --- e-mail (RFC 5321 section 4.5.3.1.1, RFC 3696) --------------------------------------------


def test_email_local_part_limit() -> None:
    # RFC 5321 section 4.5.3.1.1: the local part is at most 64 octets.
    ok = "a" * 64 + "@example.com"
    too_long = "a" * 65 + "@example.com"
    assert is_email(ok) and not is_email(too_long)
    assert one(f"write to {ok} please") == "write to <EMAIL> please"
    assert one(f"write to {too_long} please") == f"write to {too_long} please"


def test_email_address_limit() -> None:
    # RFC 3696 (errata 1690) and RFC 5321: an address is at most 254 octets.
    domain = ".".join(["d" * 60] * 4) + ".example"  # 4 * 60 + 3 + 8 = 251 characters
    assert len("ab@" + domain) == 254 and is_email("ab@" + domain)
    assert len("abc@" + domain) == 255 and not is_email("abc@" + domain)


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("Mail me at rider.one+tag@example.com.", "Mail me at <EMAIL>."),
        ("(ana.lópez@example.org)", "(<EMAIL>)"),
        ("...ana@example.net", "...<EMAIL>"),
        ("a..b@example.com", "a..b@example.com"),  # RFC 5322 dot-atom: no doubled dot
        ("user@localhost", "user@localhost"),  # pragmatic rule: a domain needs a dot and a letter TLD
        ("user@10.0.0.1", "user@10.0.0.1"),
    ],
)
def test_email_cases(text: str, expected: str) -> None:
    assert one(text) == expected


# --- phones (phonenumbers) -------------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("Call 07700 900123 after six.", "Call <PHONE> after six."),
        ("Call +44 7700 900123 after six.", "Call <PHONE> after six."),
        ("Call (555) 555-0123 after six.", "Call <PHONE> after six."),
        ("Call 07700900123 after six.", "Call <PHONE> after six."),
        ("My order number is 4481421192.", "My order number is 4481421192."),  # bare digits, no trunk prefix
        ("I'm on app version 4.12.3 since 2024-05-01.", "I'm on app version 4.12.3 since 2024-05-01."),
        ("It cost £14.66 at 12:10 on 12/05/2024.", "It cost £14.66 at 12:10 on 12/05/2024."),
    ],
)
def test_phone_cases(text: str, expected: str) -> None:
    assert one(text, regions=["GB", "US"]) == expected


def test_bare_digit_runs_skip_libphonenumber_without_changing_results() -> None:
    # Reference: libphonenumber's own matcher (find_phones, the python port of Google's
    # libphonenumber). The shortcut may only skip candidates the library would not accept: bare
    # ASCII digit runs of at most 20 digits not starting with 0. Runs that look like numbers of
    # many regions (with and without a country code) are included, of every length up to the limit.
    import random

    from phonenumbers import phonenumbermatcher

    from prep.pii import detect

    assert detect.BARE_DIGITS_MAX == phonenumbermatcher._DIGIT_BLOCK_LIMIT
    rng = random.Random(7)
    prefixes = ["1202555", "4477009", "447700900", "1555010", "4930", "33142", "9198", "861", "611", "7495", "2",
                "07700900", "0207946", "0"]
    runs = {p + "".join(rng.choice("0123456789") for _ in range(n)) for p in prefixes for n in range(0, 16)}
    runs |= {"".join(rng.choice("0123456789") for _ in range(rng.randint(7, 22))) for _ in range(400)}
    # What the shortcut skips (so breaking its rule, e.g. allowing a leading 0, lets phones in here).
    runs = {r for r in runs if len(r) >= 7 and detect._is_bare_digit_run(r)}
    assert len(runs) > 300
    for regions in ([], ["GB", "US"], ["DE", "FR", "IN", "CN", "AU", "RU"]):
        assert [r for r in sorted(runs) if detect.find_phones(r, regions)] == []
    # Not skipped: a trunk prefix, a separator, a plus, non-ASCII digits, or more than 20 digits.
    for other in ["07700900123", "7700 900123", "+447700900123", "٤٤٧٧٠٠٩٠٠١٢٣", "1" * 21]:
        assert not detect._is_bare_digit_run(other)
    assert one("call 07700900123 now", regions=["GB"]) == "call <PHONE> now"


def test_rows_with_only_rejected_candidates_stay_as_they_are() -> None:
    # Only rows holding an accepted value are rebuilt; rows whose candidates are all rejected
    # (order numbers, amounts) and rows beside them keep every character, markers included.
    texts = [
        "Call 07700 900123 after six.",
        "Order 4481421192 from 2024-05-01, total 1 234.50",
        "Order 4481421192, call 07700 900123 or 07700 900123.",
        None,
        "",
        "Ref 4481421192\x00ñ",
    ]
    assert run(texts, regions=["GB"]) == [
        "Call <PHONE> after six.",
        "Order 4481421192 from 2024-05-01, total 1 234.50",
        "Order 4481421192, call <PHONE> or <PHONE>.",
        None,
        "",
        "Ref 4481421192\x00ñ",
    ]


def test_without_regions_only_international_numbers() -> None:
    assert one("Call 07700 900123 or +44 7700 900124.") == "Call 07700 900123 or <PHONE>."


# --- IP addresses (ipaddress) ----------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("from 192.0.2.1 and 2001:db8::1.", "from <IP> and <IP>."),  # RFC 5737 / RFC 3849 documentation ranges
        ("version 1.2.3.4.5", "version 1.2.3.4.5"),
        ("at 12:30:45 sharp", "at 12:30:45 sharp"),
        ("app 256.1.1.1", "app 256.1.1.1"),
    ],
)
def test_ip_cases(text: str, expected: str) -> None:
    assert one(text, kinds=ALL_KINDS) == expected
    core = expected != text
    assert core == any(is_ip_address(t.rstrip(".")) for t in text.split())  # reference: the standard library


def test_ip_is_not_a_default_kind() -> None:
    assert one("from 192.0.2.1") == "from 192.0.2.1"


# --- the step --------------------------------------------------------------------------------


def test_step_on_a_table(make_table, make_ctx) -> None:
    table = make_table(
        [
            {"title": "Refund", "body": "Send it to GB82 WEST 1234 5698 7654 32, mail a@example.com", "label": "billing"},
            {"title": None, "body": None, "label": "app"},
            {"title": "", "body": "Ñandú on 07700 900123", "label": "app"},
            {"title": "Order 4481421192", "body": "Version 3.1.5", "label": "app"},
        ]
    )
    ctx = make_ctx("redact")
    before = table.clone()
    result = redact.apply(table, Config(regions=["GB"]), ctx)
    assert_frame_equal(table, before)  # the input table is not changed in place
    expected = table.with_columns(
        pl.Series("body", ["Send it to <IBAN>, mail <EMAIL>", None, "Ñandú on <PHONE>", "Version 3.1.5"], dtype=pl.String)
    )
    assert_frame_equal(result, expected)
    assert ctx.facts["counts"] == {"email": 1, "phone": 1, "card": 0, "iban": 1}
    assert ctx.facts["rows_changed"] == 2
    assert ctx.facts["columns"] == ["title", "body"]
    assert ctx.facts["placeholders"]["email"] == "<EMAIL>"
    assert ctx.ledger.frame().height == 0  # never sets rows aside


def test_facts_never_hold_values(make_table, make_ctx) -> None:
    table = make_table([{"title": "x", "body": "a@example.com 4111 1111 1111 1111 +44 7700 900123"}])
    ctx = make_ctx("redact")
    redact.apply(table, Config(), ctx)
    text = repr(ctx.facts)
    for fragment in ("example.com", "4111", "7700"):
        assert fragment not in text


def test_custom_placeholders_and_kinds() -> None:
    assert one("a@example.com 4111 1111 1111 1111", kinds=["email"], placeholders={"email": "[mail]"}) == "[mail] 4111 1111 1111 1111"


@pytest.mark.parametrize(
    ("config", "key"),
    [
        ({"kinds": ["email", "fax"]}, "kinds"),
        ({"kinds": []}, "kinds"),
        ({"placeholders": {"email": "<E1>"}}, "placeholders.email"),
        ({"placeholders": {"email": ""}}, "placeholders.email"),
        ({"regions": ["gb"]}, "regions"),
    ],
)
def test_config_errors(config: dict, key: str) -> None:
    with pytest.raises(ConfigValueError) as err:
        Config(**config).check()
    assert err.value.key == key


def test_marker_character_in_text_is_kept() -> None:
    # A NUL in the text (no `normalise` before) must not break the cell apart.
    assert one("a\x00b a@example.com") == "a\x00b <EMAIL>"


# --- properties (hypothesis) -----------------------------------------------------------------

_PIECES = st.sampled_from(
    [
        "ana@example.com", "4111 1111 1111 1111", "GB82 WEST 1234 5698 7654 32", "07700 900123", "(555) 555-0142",
        "192.0.2.7", "2001:db8::5", "order 4481421192", "v3.1.5", "Ñandú", " ", ", ", ".", "-", "@", ":", "0", "12",
        "+44", "hello", "<EMAIL>", "ÿ", "\u00a0",
    ]
)
_TEXTS = st.lists(_PIECES, max_size=12).map("".join) | st.text(max_size=60)
_PLACEHOLDER_LEN = max(len(v) for v in redact.DEFAULT_PLACEHOLDERS.values())


@settings(max_examples=60, deadline=None)
@given(st.lists(_TEXTS, min_size=1, max_size=5))
def test_redacting_twice_equals_once(texts: list[str]) -> None:
    once = run(texts, kinds=ALL_KINDS, regions=["GB", "US"])
    assert run(once, kinds=ALL_KINDS, regions=["GB", "US"]) == once


@settings(max_examples=60, deadline=None)
@given(_TEXTS)
def test_redaction_never_grows_beyond_placeholders(text: str) -> None:
    series, counts = redact_column(pl.Series("body", [text]), Config(kinds=list(KINDS), regions=["GB", "US"]))
    total = sum(counts.values())
    assert len(series[0]) <= len(text) + total * _PLACEHOLDER_LEN


@settings(max_examples=60, deadline=None)
@given(st.text(alphabet=st.characters(blacklist_categories=("Nd", "Cs"), blacklist_characters="@:"), max_size=80))
def test_texts_without_personal_data_come_out_unchanged(text: str) -> None:
    # No digits, no "@" and no ":": nothing any detector could take.
    assert one(text, kinds=ALL_KINDS, regions=["GB", "US"]) == text


def test_null_and_empty_stay() -> None:
    assert run([None, "", "  "]) == [None, "", "  "]


def test_references_agree_on_checks() -> None:
    # prep's wrappers agree with python-stdnum on a handful of values, both ways.
    for value in ["GB82WEST12345698765432", "GB82WEST12345698765433", "FR1420041010050500013M02606", "NO9386011117947"]:
        assert is_iban(value) == stdnum_iban.is_valid(value)


def test_redacting_on_slices_equals_redacting_in_one_piece(monkeypatch):
    # The regex scans run on row slices on two threads from 50,000 rows on; every row's result
    # depends on that row alone, so one core and two must give the same column and counts.
    import prep.text
    from prep.steps.redact import Config, redact_column

    rows = 60_001
    values = [
        [f"mail ana.{i}@example.org now", None, "card 4111 1111 1111 1111 twice", "call +44 20 7946 0958",
         "iban GB82 WEST 1234 5698 7654 32", "nothing here", ""][i % 7]
        for i in range(rows)
    ]
    series = pl.Series("body", values, dtype=pl.String)
    config = Config(kinds=["email", "phone", "card", "iban"], regions=["GB", "US"])
    monkeypatch.setattr(prep.text, "usable_cores", lambda: 1)
    one, one_counts = redact_column(series, config)
    monkeypatch.setattr(prep.text, "usable_cores", lambda: 2)
    two, two_counts = redact_column(series, config)
    assert one_counts == two_counts and min(one_counts.values()) > 0
    assert one.equals(two) and not one.equals(series)
