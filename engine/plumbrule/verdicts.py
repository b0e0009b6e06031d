"""The verdict vocabulary, defined once: every check, screening rule and ratio-study measure
grades itself with one of these words. Tables hold the plain strings (``Verdict.OK.value``),
so cells and JSON show the word itself."""

from __future__ import annotations

from enum import Enum


class Verdict(str, Enum):
    OK = "ok"
    WATCH = "watch"
    FAILS = "fails"
    NA = "n/a"                       # the check could not be computed
    TOO_FEW = "too few sales"        # a ratio-study figure on too small a sample to judge

    @classmethod
    def needing_attention(cls) -> tuple[str, ...]:
        """The words a reader must act on, worst first."""
        return (cls.FAILS.value, cls.WATCH.value)


OK, WATCH, FAILS, NA, TOO_FEW = (v.value for v in Verdict)
