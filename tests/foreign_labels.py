"""Labels recalled from other programs' output (tests/reference/foreign_labels.txt): our tables
and report must show none of them."""

from pathlib import Path


def _foreign_labels() -> tuple[str, ...]:
    text = (Path(__file__).resolve().parent / "reference" / "foreign_labels.txt").read_text(
        encoding="utf-8")
    return tuple(line.strip() for line in text.splitlines()
                 if line.strip() and not line.startswith("#"))


FOREIGN_LABELS = _foreign_labels()
