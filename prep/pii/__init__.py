"""Detectors of personal data in free text, used by the ``redact`` step.

Each kind has a *candidate pattern* (Rust regex syntax, run by polars over whole columns) and a
*validator* that gets one distinct candidate string and returns it with the personal data in
it replaced by the placeholder, plus how many values it replaced. Candidates are generous on
purpose; validators decide. Detection is best-effort: it finds what these rules describe and
nothing else, and it does not replace a data-protection review.

Nothing in this package logs, prints or raises with a candidate's value.
"""

from prep.pii.detect import DETECTORS, KINDS, Detector

__all__ = ["DETECTORS", "KINDS", "Detector"]
