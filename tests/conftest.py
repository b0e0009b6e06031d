import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
SHARED = ROOT.parent / "shared"
sys.path.insert(0, str(ROOT / "engine"))


@pytest.fixture(scope="session")
def demo_frame():
    from plumbrule.demo_data import demo_sales
    return demo_sales()
