import pytest


@pytest.fixture(scope="session")
def demo_frame():
    from plumbrule.demo.town import demo_sales
    return demo_sales()
