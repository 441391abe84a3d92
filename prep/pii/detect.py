"""Candidate patterns and validators for e-mail addresses, IBANs, payment cards, IP addresses and phones.

A :class:`Detector` has a candidate ``pattern`` (Rust regex syntax, for polars) and a
``validate(candidate, placeholder, regions)`` function that returns the candidate with every
value it accepts replaced by ``placeholder``, and the number of values replaced. The validator
sees the candidate string only, never its surroundings, so the result for a distinct candidate
is the same wherever it occurs (the step runs each distinct candidate once).

Rules (best-effort; a value written in a way these rules do not describe is not found):

- **email**: a pragmatic dot-atom address ``local@domain``; the local part at most 64 octets and
  the whole address at most 254 (RFC 5321 section 4.5.3.1.1 for the local part; RFC 3696
  errata 1690 for 254 = the 256-octet path minus the angle brackets). No leading, trailing or
  doubled dot in the local part (RFC 5322 section 3.4.1 dot-atom); domain labels of 1-63
  characters (RFC 1035 section 2.3.4) not starting or ending with ``-``; the last label is made
  of letters only and has at least two. Letters outside ASCII are accepted (RFC 6531 / IDNA
  addresses). Dots before the local part are sentence punctuation and stay outside.
- **iban**: two letters, two check digits and 11-30 letters or digits, written in groups
  separated by single spaces or without spaces. A run of groups is an IBAN when python-stdnum's
  ``stdnum.iban.is_valid`` accepts it: the country's length and BBAN format from the IBAN
  registry (ISO 13616) and the ISO 7064 MOD 97-10 check. Groups that follow an IBAN (an
  upper-case word, a reference) stay text.
- **card**: 13-19 digits with optional single spaces or dashes between them (ISO/IEC 7812-1
  primary account number), kept only if the Luhn check passes (ISO/IEC 7812-1 Annex B),
  computed by python-stdnum's ``stdnum.luhn``. In a longer run of digit groups, the longest run
  of whole groups that passes is taken.
- **ip**: IPv4 in dotted-quad form and IPv6 in the forms RFC 4291 section 2.2 allows, as the
  standard library's ``ipaddress`` parses them (no leading zeros in IPv4, Python >= 3.9.5).
  ``1.2.3.4.5`` and ``v1.2.3.4`` are not addresses. Version strings with four numbers below
  256 are indistinguishable from IPv4: that is why ``ip`` is not a default kind.
- **phone**: the ``phonenumbers`` library (a port of Google's libphonenumber) finds numbers in the
  candidate for each configured region in turn (numbers written with ``+`` or an international
  prefix are found for any region; with no region only those). A number counts when
  libphonenumber calls it *valid*, or when it is *possible* for the region (its length fits the
  numbering plan) and has at least ``POSSIBLE_MIN_DIGITS`` digits: ranges reserved for fiction
  and tests, and newly opened ranges, are not *valid* in libphonenumber's metadata but are
  phone numbers to a reader. A bare run of digits (no ``+``, space, dash, dot, slash or
  parenthesis) counts only when it starts with ``0`` (a trunk or international prefix), so that
  order numbers, ticket ids and amounts survive.
"""

from __future__ import annotations

import ipaddress
import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import phonenumbers
from stdnum import iban as stdnum_iban
from stdnum import luhn as stdnum_luhn

# RFC 5321 section 4.5.3.1.1: local part at most 64 octets. RFC 3696 errata 1690: an address in
# a path is at most 254 octets (the 256-octet path limit minus "<" and ">").
EMAIL_MAX_LOCAL = 64
EMAIL_MAX_ADDRESS = 254
# RFC 1035 section 2.3.4: a label is at most 63 octets.
DOMAIN_MAX_LABEL = 63
# ISO/IEC 7812-1: a primary account number has 8-19 digits; payment cards in use have 13-19
# (Visa 13/16/19, Amex 15, Mastercard 16) -- from memory.
CARD_MIN_DIGITS = 13
CARD_MAX_DIGITS = 19
# ISO 13616: an IBAN has at most 34 characters; the shortest in the registry (Norway) has 15.
IBAN_MIN_CHARS = 15
IBAN_MAX_CHARS = 34
# A number that is only "possible" (right length for the region) must have at least this many
# digits; below it, amounts, years and dates are too often possible (common practice, no source).
POSSIBLE_MIN_DIGITS = 9
# Used when no region is configured: only numbers in international form are found.
NO_REGION = "ZZ"

_LOCAL_CHARS = r"\p{L}\p{N}!#$%&'*+/=?^_`{|}~.\-"
_LABEL = r"[\p{L}\p{N}](?:[\p{L}\p{N}\-]*[\p{L}\p{N}])?"
EMAIL_PATTERN = rf"[{_LOCAL_CHARS}]+@(?:{_LABEL}\.)+\p{{L}}+"
IBAN_PATTERN = r"(?-u:\b)[A-Za-z]{2}[0-9]{2}(?: ?[A-Za-z0-9]){11,}(?-u:\b)"
CARD_PATTERN = r"(?-u:\b)[0-9](?:[ \-]?[0-9]){12,}(?-u:\b)"
# IPv6 first (a maximal run of hex digits, dots and at least two colons), then IPv4 (a maximal
# dotted run of numbers, at least four); validators decide.
IP_PATTERN = r"[0-9A-Fa-f.]*:[0-9A-Fa-f.]*:[0-9A-Fa-f:.]*|(?-u:\b)[0-9]+(?:\.[0-9]+){3,}(?-u:\b)"
# Digits with the punctuation phone numbers are written with; at least 7 characters.
PHONE_PATTERN = r"\+?\(?[0-9][0-9 ().\-/]{5,}[0-9]"

_PHONE_RE = re.compile(PHONE_PATTERN)  # the same pattern in Python's engine, for left-over pieces
_CARD_SEPARATORS = re.compile(r"([ \-])")
_DOMAIN_LABEL = re.compile(r"^[^\W_](?:[\w\-]*[^\W_])?$")


@dataclass(frozen=True)
class Detector:
    kind: str
    pattern: str
    validate: Callable[[str, str, Sequence[str]], tuple[str, int]]


# ---------------------------------------------------------------------------------------------
# e-mail


def is_email(address: str) -> bool:
    """True if ``address`` obeys the e-mail rules of the module docstring."""
    if len(address.encode("utf-8")) > EMAIL_MAX_ADDRESS or address.count("@") != 1:
        return False
    local, domain = address.split("@")
    if not local or len(local.encode("utf-8")) > EMAIL_MAX_LOCAL:
        return False
    if local.startswith(".") or local.endswith(".") or ".." in local:
        return False
    labels = domain.split(".")
    if len(labels) < 2:
        return False
    for label in labels:
        if len(label) > DOMAIN_MAX_LABEL or not _DOMAIN_LABEL.match(label):
            return False
    tld = labels[-1]
    return len(tld) >= 2 and tld.isalpha()


def _validate_email(candidate: str, placeholder: str, regions: Sequence[str]) -> tuple[str, int]:
    # Leading dots are sentence punctuation ("...write to a@example.com").
    stripped = candidate.lstrip(".")
    if is_email(stripped):
        return candidate[: len(candidate) - len(stripped)] + placeholder, 1
    return candidate, 0


# ---------------------------------------------------------------------------------------------
# IBAN and payment cards: the longest run of whole groups that passes, from left to right


def is_iban(text: str) -> bool:
    """True if ``text`` (spaces allowed) is an IBAN by python-stdnum (ISO 13616, ISO 7064 MOD 97-10)."""
    compact = text.replace(" ", "").upper()
    return IBAN_MIN_CHARS <= len(compact) <= IBAN_MAX_CHARS and stdnum_iban.is_valid(compact)


def is_card_number(text: str) -> bool:
    """True if ``text`` has 13-19 digits (spaces and dashes allowed) and passes the Luhn check (stdnum)."""
    digits = text.replace(" ", "").replace("-", "")
    return digits.isdigit() and CARD_MIN_DIGITS <= len(digits) <= CARD_MAX_DIGITS and stdnum_luhn.is_valid(digits)


def _replace_group_runs(groups: list[str], separators: list[str], accept: Callable[[str], bool], placeholder: str) -> tuple[str, int]:
    """Join ``groups`` with ``separators``, replacing the longest accepted runs of whole groups."""
    out: list[str] = []
    found = 0
    i = 0
    while i < len(groups):
        for j in range(len(groups), i, -1):
            run = "".join(g + s for g, s in zip(groups[i:j], separators[i : j - 1] + [""]))
            if accept(run):
                out.append(placeholder)
                found += 1
                i = j
                break
        else:
            out.append(groups[i])
            i += 1
        if i < len(groups):
            out.append(separators[i - 1])
    return "".join(out), found


def _validate_iban(candidate: str, placeholder: str, regions: Sequence[str]) -> tuple[str, int]:
    groups = candidate.split(" ")
    return _replace_group_runs(groups, [" "] * (len(groups) - 1), is_iban, placeholder)


def _validate_card(candidate: str, placeholder: str, regions: Sequence[str]) -> tuple[str, int]:
    pieces = _CARD_SEPARATORS.split(candidate)
    return _replace_group_runs(pieces[0::2], pieces[1::2], is_card_number, placeholder)


# ---------------------------------------------------------------------------------------------
# IP addresses


def is_ip_address(text: str) -> bool:
    """True if the standard library's ``ipaddress`` parses ``text`` as an IPv4 or IPv6 address."""
    try:
        ipaddress.ip_address(text)
    except ValueError:
        return False
    return True


def _validate_ip(candidate: str, placeholder: str, regions: Sequence[str]) -> tuple[str, int]:
    # A trailing dot ends the sentence ("from 2001:db8::1."); try without it.
    core = candidate.rstrip(".")
    if ":" not in core and core.count(".") != 3:
        return candidate, 0
    if is_ip_address(core):
        return placeholder + candidate[len(core) :], 1
    return candidate, 0


# ---------------------------------------------------------------------------------------------
# Phone numbers


def _phone_counts(raw: str, number: phonenumbers.PhoneNumber) -> bool:
    digits = sum(ch.isdigit() for ch in raw)
    if raw.isdigit() and not raw.startswith("0"):
        return False  # a bare run of digits without a trunk prefix: an order number, an id
    if phonenumbers.is_valid_number(number):
        return True
    return digits >= POSSIBLE_MIN_DIGITS and phonenumbers.is_possible_number(number)


def find_phones(text: str, regions: Sequence[str]) -> list[tuple[int, int]]:
    """Non-overlapping (start, end) spans of phone numbers in ``text``, earlier regions first."""
    spans: list[tuple[int, int]] = []
    for region in list(regions) or [NO_REGION]:
        for match in phonenumbers.PhoneNumberMatcher(text, region, leniency=phonenumbers.Leniency.POSSIBLE):
            if not _phone_counts(match.raw_string, match.number):
                continue
            if any(match.start < e and s < match.end for s, e in spans):
                continue
            spans.append((match.start, match.end))
    return sorted(spans)


# A run of at most this many ASCII digits is one digit block of libphonenumber's matcher pattern
# (its _DIGIT_BLOCK_LIMIT: the longest national number, 17, plus the longest country code, 3).
BARE_DIGITS_MAX = 20


def _is_bare_digit_run(candidate: str) -> bool:
    """A candidate that :func:`find_phones` cannot accept, known without asking libphonenumber.

    Such a candidate is all ASCII digits, does not start with ``0`` and has at most
    :data:`BARE_DIGITS_MAX` of them. libphonenumber's matcher searches from the first digit and its
    pattern takes the whole run as one block, so any number it finds is the whole candidate, a bare
    run without a trunk prefix that :func:`_phone_counts` refuses; after a failed candidate the
    matcher goes on after its end, and its inner-match patterns all need a separator. Order numbers
    and ids are most of the phone candidates in ticket text (measured on the demo: 5,141 of 6,207
    distinct candidates in 200k tickets, half of the validation time), so skipping the library
    there saves time without changing a result (tests/steps/test_redact.py compares both ways).
    """
    return len(candidate) <= BARE_DIGITS_MAX and candidate.isascii() and candidate.isdigit() and candidate[0] != "0"


def _validate_phone(candidate: str, placeholder: str, regions: Sequence[str]) -> tuple[str, int]:
    """Replace the phones libphonenumber finds; then look again at the text left between them.

    libphonenumber's matcher reads its surroundings, so text left over next to a replaced number
    can hold a number it skipped the first time. Looking again at every left-over piece, as a
    second run of the step would see it (bounded by the placeholders), makes redaction
    idempotent: redacting twice equals redacting once.
    """
    if _is_bare_digit_run(candidate):
        return candidate, 0
    spans = find_phones(candidate, regions)
    if not spans:
        return candidate, 0
    out, last, found = [], 0, len(spans)
    for start, end in [*spans, (len(candidate), len(candidate))]:
        piece = candidate[last:start]
        # Each piece is shorter than the candidate, so this recursion ends.
        rebuilt, pos = [], 0
        for match in _PHONE_RE.finditer(piece):
            replaced, n = _validate_phone(match.group(), placeholder, regions)
            rebuilt += [piece[pos : match.start()], replaced]
            pos, found = match.end(), found + n
        out += [*rebuilt, piece[pos:]]
        if start < len(candidate):
            out.append(placeholder)
        last = end
    return "".join(out), found


# ---------------------------------------------------------------------------------------------

# Detection order: the most specific shapes first, so that a card number is not taken for a
# phone number and the digits of an IBAN are not taken for a card. Placeholders hold no digits,
# "@" or ":", so no later detector matches them.
DETECTORS: dict[str, Detector] = {
    "email": Detector("email", EMAIL_PATTERN, _validate_email),
    "iban": Detector("iban", IBAN_PATTERN, _validate_iban),
    "card": Detector("card", CARD_PATTERN, _validate_card),
    "ip": Detector("ip", IP_PATTERN, _validate_ip),
    "phone": Detector("phone", PHONE_PATTERN, _validate_phone),
}
KINDS: tuple[str, ...] = tuple(DETECTORS)
