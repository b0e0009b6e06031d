import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
SHARED = ROOT.parent / "shared"
sys.path.insert(0, str(ROOT / "engine"))


@pytest.fixture(scope="session")
def demo_frame():
    from plumbrule.demo.town import demo_sales
    return demo_sales()


def _foreign_labels():
    lines = (ROOT / "tests" / "reference" / "foreign_labels.txt").read_text(encoding="utf-8")
    return tuple(l.strip() for l in lines.splitlines() if l.strip() and not l.startswith("#"))


FOREIGN_LABELS = _foreign_labels()
